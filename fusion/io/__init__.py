"""Readers and writers: the only part of the package that touches files.

Public names
------------
write_netcdf, read_netcdf, netcdf_form
    Results through xarray, written atomically; the in-memory form of a written file.
atomic_path, atomic_write_text, atomic_write_bytes, sha256_file, safe_child
    Safe output helpers.
temp_name, parse_temp_name, make_temp_folder, this_host
    Names of fusion's own temporary entries (host and process id inside).
content_digest
    A fast hash of a file's content (change detection).
input_file
    An input path checked to be a readable regular file (named in the message).
product_mark, MARK_KEY
    Which fusion product a NetCDF or PNG file says it is (so only fusion's own files are replaced).
open_frames, FrameStack
    Infrared frame stacks (.npy, raw, TIFF, HDF5, NetCDF), lazy and memory-mapped.
open_sequence, SequenceStack, list_sequence, list_images, SequenceFiles, is_sequence
    Sequences of per-frame files (a folder or glob pattern of TIFF, PNG, .npy or CSV/TXT
    grids; text grids converted once into fusion's cache, see text_grid_cache), ordered by
    the numbers in their names.
read_sequence_times, read_load_log
    Frame times of a sequence, and the load at each speckle image, from their tables.
text_grid_cache
    The folder of converted text-grid stacks.
file_identity
    (path, size, modification time) of a file: what changes while it is written.
read_load_signal, LoadSignal, read_frame_times
    Load signals (CSV) and frame timestamps.
read_thermal_maps, MAP_QUANTITIES
    Precomputed T0 / delta_T / phase maps (NetCDF, TIFF, CSV) and the quantities they may hold.
read_dic_field, read_image, image_shape
    Exported correlation fields (CSV, NetCDF, HDF5, MATLAB), speckle images (PNG, TIFF) and their
    size from the header alone.
PLAUSIBLE, STRAIN_UNITS, check_strain_ranges, check_temperatures, check_ratio, check_load_ranges
    The plausible magnitude of every physical input, and the checks that stop a run on a
    likely unit slip with one sentence naming the file, the key and the unit.
"""

from ._atomic import (atomic_path, atomic_write_bytes, atomic_write_text, content_digest, make_temp_folder,
                      parse_temp_name, safe_child, sha256_file, temp_name, this_host)
from ._dic import read_dic_field
from ._images import image_shape, read_image
from ._logs import read_load_log, read_sequence_times
from ._frames import FrameStack, open_frames
from ._guard import input_file
from ._maps import MAP_QUANTITIES, read_thermal_maps
from ._marks import MARK_KEY, product_mark
from ._netcdf import netcdf_form, read_netcdf, write_netcdf
from ._plausible import (PLAUSIBLE, STRAIN_UNITS, check_load_ranges, check_ratio, check_strain_ranges,
                         check_temperatures)
from ._sequences import SequenceFiles, SequenceStack, file_identity, is_sequence, list_images, list_sequence, open_sequence
from ._signals import LoadSignal, read_frame_times, read_load_signal
from ._textgrids import cache_folder as text_grid_cache

__all__ = [
    "atomic_path", "atomic_write_bytes", "atomic_write_text", "safe_child", "sha256_file", "input_file",
    "temp_name", "parse_temp_name", "make_temp_folder", "this_host", "content_digest",
    "netcdf_form", "read_netcdf", "write_netcdf",
    "open_frames", "FrameStack", "read_load_signal", "LoadSignal", "read_frame_times", "read_thermal_maps",
    "MAP_QUANTITIES",
    "read_dic_field", "read_image", "image_shape", "product_mark", "MARK_KEY",
    "PLAUSIBLE", "STRAIN_UNITS", "check_strain_ranges", "check_temperatures", "check_ratio", "check_load_ranges",
    "open_sequence", "SequenceStack", "SequenceFiles", "list_sequence", "list_images", "is_sequence",
    "read_sequence_times", "read_load_log", "text_grid_cache", "file_identity",
]
