"""Readers and writers: the only part of the package that touches files.

Public names
------------
write_netcdf, read_netcdf
    Results through xarray, written atomically.
atomic_path, atomic_write_text, atomic_write_bytes, sha256_file, safe_child
    Safe output helpers.
"""

from ._atomic import atomic_path, atomic_write_bytes, atomic_write_text, safe_child, sha256_file
from ._netcdf import read_netcdf, write_netcdf

__all__ = [
    "atomic_path", "atomic_write_bytes", "atomic_write_text", "safe_child", "sha256_file",
    "read_netcdf", "write_netcdf",
]
