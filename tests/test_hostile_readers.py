"""Fault injection for every reader: broken, mislabelled and hostile input files.

Each reader gets a small valid file written by the format's own general-purpose
library (numpy, tifffile, h5py, netCDF4, scipy.io, OpenCV, plain text), read back
and compared with the data written (so the faults below start from a file the
reader accepts), and then the faults of a laboratory PC: truncated copies, empty
files, folders and pipes where a file should be, unreadable files, random bytes
and random corruption (hypothesis), wrong dtypes, wrong byte order, NaN/Inf-only
data, headers that claim more than the file or than memory, HDF5 links to other
files, MATLAB objects and pickles; and in a folder of frames or speckle images, one
member cut short, of another size, missing from the numbering, or a text grid with rows
lost, added or damaged. Every fault must end in an ``InputError`` whose message names the
file (for a sequence, the member and the likely cause) — never another exception, a hang,
or code execution.

The table "Bad input: cases tried" in DEVELOPERS.md lists these cases and what each
gets; keep both in step when a reader is added.
"""

from __future__ import annotations

import io
import os
import pickle
import struct
from pathlib import Path

import h5py
import netCDF4
import numpy as np
import pytest
import scipy.io as sio
import tifffile
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from _inputs import ONE_PLY_RUN
from fusion.errors import InputError
from fusion.io import (list_images, open_frames, open_sequence, read_dic_field, read_frame_times, read_image,
                       read_load_signal, read_netcdf, read_thermal_maps)

# ------------------------------------------------------------------------ valid samples
F, R, C = 6, 8, 10


def _frames():
    # smooth in space and time with a little deterministic "noise", like camera counts:
    # the byte-order check must see data of realistic texture
    f, r, c = np.meshgrid(np.arange(F), np.arange(R), np.arange(C), indexing="ij")
    noise = (f * 7 + r * 13 + c * 29) % 5
    return (29000 + 40 * r + 25 * c + 3 * np.sin(f) + noise).astype(np.uint16)


def _maps():
    r, c = np.mgrid[0:R, 0:C]
    return {"T0": (295.0 + 0.01 * r + 0.02 * c).astype(np.float32),
            "delta_T": (-0.05 - 0.001 * c).astype(np.float32)}


def _grid():
    y, x = np.mgrid[0:4, 0:5]
    return x.astype(float).ravel(), y.astype(float).ravel()


def _w_npy(p):
    np.save(p, _frames())


def _w_raw(p):
    _frames().astype("<u2").tofile(p)


def _w_tiff(p):
    tifffile.imwrite(p, _frames())


def _w_tiff_zlib(p):
    tifffile.imwrite(p, _frames(), compression="zlib")


def _w_h5(p):
    with h5py.File(p, "w") as fh:
        fh["ir"] = _frames()


def _w_h5_chunked(p):
    with h5py.File(p, "w") as fh:
        fh.create_dataset("ir", data=_frames(), chunks=(1, R, C), compression="gzip")


def _w_nc_frames(p):
    with netCDF4.Dataset(p, "w") as ds:
        for n, s in zip(("frame", "y", "x"), (F, R, C)):
            ds.createDimension(n, s)
        ds.createVariable("ir", "u2", ("frame", "y", "x"), zlib=True)[:] = _frames()


def _w_load(p):
    t = np.arange(40) / 100.0
    p.write_text("time,load\n" + "".join(f"{a:.6f},{5 + np.sin(2 * np.pi * 5 * a):.6f}\n" for a in t))


def _w_times_npy(p):
    np.save(p, np.arange(F) / 50.0)


def _w_times_csv(p):
    p.write_text("time\n" + "".join(f"{t:.6f}\n" for t in np.arange(F) / 50.0))


def _w_maps_nc(p):
    with netCDF4.Dataset(p, "w") as ds:
        ds.createDimension("y", R)
        ds.createDimension("x", C)
        for k, a in _maps().items():
            v = ds.createVariable(k, "f4", ("y", "x"))
            v[:] = a
            v.units = "K"


def _w_maps_tiff(p):
    m = _maps()
    tifffile.imwrite(p, np.stack([m["T0"], m["delta_T"]]))


def _w_maps_csv(p):
    m = _maps()
    rows = [f"{r},{c},{m['T0'][r, c]:.5f},{m['delta_T'][r, c]:.5f}" for r in range(R) for c in range(C)]
    p.write_text("row,col,T0,delta_T\n" + "\n".join(rows) + "\n")


def _w_dic_csv(p):
    x, y = _grid()
    p.write_text("x,y,u,v\n" + "".join(f"{a:g},{b:g},{a * 1e-3:g},{b * 2e-3:g}\n" for a, b in zip(x, y)))


def _w_dic_nc(p):
    x, y = _grid()
    with netCDF4.Dataset(p, "w") as ds:
        ds.createDimension("point", x.size)
        for k, a in (("x", x), ("y", y), ("u", x * 1e-3), ("v", y * 2e-3)):
            ds.createVariable(k, "f8", ("point",))[:] = a


def _w_dic_h5(p):
    x, y = _grid()
    with h5py.File(p, "w") as fh:
        for k, a in (("x", x), ("y", y), ("u", x * 1e-3), ("v", y * 2e-3)):
            fh[k] = a


def _w_dic_mat(p):
    x, y = _grid()
    sio.savemat(p, {"x": x, "y": y, "u": x * 1e-3, "v": y * 2e-3})


def _w_dic_mat73(p):
    # version 7.3 MAT-files are HDF5 behind a 512-byte MATLAB header (common practice)
    x, y = _grid()
    with h5py.File(p, "w", userblock_size=512) as fh:
        for k, a in (("x", x), ("y", y), ("u", x * 1e-3), ("v", y * 2e-3)):
            fh[k] = a
    with open(p, "r+b") as fh:
        fh.write(b"MATLAB 7.3 MAT-file, written by the fault tests".ljust(116) + b"\x00" * 8 + b"\x00\x02IM")


def _speckle():
    r, c = np.mgrid[0:24, 0:32]
    return ((np.sin(r * 0.9) * np.cos(c * 0.7) + 1) * 120).astype(np.uint8)


def _w_png(p):
    import cv2

    assert cv2.imwrite(str(p), _speckle())


def _w_image_tiff(p):
    tifffile.imwrite(p, _speckle())


def _w_result(p):
    import xarray as xr

    xr.Dataset({"T0": (("y", "x"), _maps()["T0"])}).to_netcdf(p, engine="netcdf4")


def _r_frames(p):
    return np.asarray(open_frames(p)[:])


def _r_raw(p):
    return np.asarray(open_frames(p, dtype="uint16", shape=(F, R, C))[:])


def _r_dic(p):
    f = read_dic_field(p)
    return np.stack([f.x, f.y, f.u, f.v])


# name: (suffix, writer, reader, the values the writer stored, in the reader's terms)
READERS = {
    "frames-npy": (".npy", _w_npy, _r_frames, _frames),
    "frames-raw": (".raw", _w_raw, _r_raw, _frames),
    "frames-tiff": (".tif", _w_tiff, _r_frames, _frames),
    "frames-tiff-zlib": (".tif", _w_tiff_zlib, _r_frames, _frames),
    "frames-hdf5": (".h5", _w_h5, _r_frames, _frames),
    "frames-hdf5-chunked": (".h5", _w_h5_chunked, _r_frames, _frames),
    "frames-netcdf": (".nc", _w_nc_frames, _r_frames, _frames),
    "load-csv": (".csv", _w_load, lambda p: read_load_signal(p).times, lambda: np.arange(40) / 100.0),
    # as the pipeline reads them: with the frame count of the stack they belong to
    "times-npy": (".npy", _w_times_npy, lambda p: read_frame_times(p, n_frames=F), lambda: np.arange(F) / 50.0),
    "times-csv": (".csv", _w_times_csv, lambda p: read_frame_times(p, n_frames=F), lambda: np.arange(F) / 50.0),
    "maps-netcdf": (".nc", _w_maps_nc, lambda p: read_thermal_maps(p)["delta_T"], lambda: _maps()["delta_T"]),
    "maps-tiff": (".tif", _w_maps_tiff, lambda p: read_thermal_maps(p)["delta_T"], lambda: _maps()["delta_T"]),
    "maps-csv": (".csv", _w_maps_csv, lambda p: read_thermal_maps(p)["delta_T"], lambda: _maps()["delta_T"]),
    "dic-csv": (".csv", _w_dic_csv, _r_dic, None),
    "dic-netcdf": (".nc", _w_dic_nc, _r_dic, None),
    "dic-hdf5": (".h5", _w_dic_h5, _r_dic, None),
    "dic-mat": (".mat", _w_dic_mat, _r_dic, None),
    "dic-mat73": (".mat", _w_dic_mat73, _r_dic, None),
    "image-png": (".png", _w_png, read_image, lambda: _speckle().astype(np.float32)),
    "image-tiff": (".tif", _w_image_tiff, read_image, lambda: _speckle().astype(np.float32)),
    "result-netcdf": (".nc", _w_result, lambda p: read_netcdf(p)["T0"].values, lambda: _maps()["T0"]),
}
NAMES = sorted(READERS)
TEXT = {"load-csv", "times-csv", "maps-csv", "dic-csv"}


def _sample(folder: Path, name: str, tag: str = "") -> Path:
    suffix, write, _, _ = READERS[name]
    p = folder / f"{name}{tag}{suffix}"
    write(p)
    return p


def _refused(name, path, match=None):
    """Read ``path`` with reader ``name``; it must raise an InputError naming the file."""
    with pytest.raises(InputError) as err:
        READERS[name][2](path)
    msg = str(err.value)
    assert str(path) in msg, msg
    if match is not None:
        import re

        assert re.search(match, msg), msg
    return msg


@pytest.mark.parametrize("name", NAMES)
def test_valid_sample_reads_back(tmp_path, name):
    # the starting point of every fault below: the writer's data come back unchanged
    _, _, read, expected = READERS[name]
    got = read(_sample(tmp_path, name))
    if expected is None:  # correlation fields: points come back in grid order
        x, y = _grid()
        order = np.lexsort((got[0], -got[1]))
        ref = np.stack([x, y, x * 1e-3, y * 2e-3])[:, np.lexsort((x, -y))]
        np.testing.assert_allclose(got[:, order], ref, rtol=1e-12)
    else:
        # CSV carries 5-6 decimals (the tables above are written with %.5f/%.6f)
        np.testing.assert_allclose(np.asarray(got, float), np.asarray(expected(), float), rtol=0, atol=1e-5)


# ------------------------------------------------------------------------ truncation
def _cut(data: bytes, frac: float, text: bool) -> bytes:
    """The first ``frac`` of a file; for text, cut just after a field separator so the
    last row is short (a cut inside the last field of a row, or at a row end, leaves a
    well-formed shorter table: undetectable, see DEVELOPERS.md)."""
    n = int(len(data) * frac)
    if text and b"," in data[n:]:
        n = data.index(b",", n) + 1
    return data[:n]


# a one-column list cut at 90 % loses only digits of its last number: the known limit below
@pytest.mark.parametrize("name, frac", [(n, f) for n in NAMES for f in (0.5, 0.9)
                                        if (n, f) != ("times-csv", 0.9)])
def test_truncated_copy_is_refused(tmp_path, name, frac):
    full = _sample(tmp_path, name, "-full").read_bytes()
    p = tmp_path / f"cut{READERS[name][0]}"
    p.write_bytes(_cut(full, frac, name in TEXT))
    _refused(name, p)


@pytest.mark.parametrize("name", NAMES)
def test_header_only_is_refused(tmp_path, name):
    # a copy stopped after the first bytes: magic number / header row only
    full = _sample(tmp_path, name, "-full").read_bytes()
    p = tmp_path / f"head{READERS[name][0]}"
    p.write_bytes(full[: (full.index(b"\n") + 1) if name in TEXT else 16])
    _refused(name, p)


# ------------------------------------------------------------------------ not a file
@pytest.mark.parametrize("name", NAMES)
def test_empty_file_is_refused(tmp_path, name):
    p = tmp_path / f"empty{READERS[name][0]}"
    p.write_bytes(b"")
    _refused(name, p)


@pytest.mark.parametrize("name", NAMES)
def test_folder_instead_of_file(tmp_path, name):
    p = tmp_path / f"folder{READERS[name][0]}"
    p.mkdir()
    _refused(name, p, match="is a folder")


@pytest.mark.parametrize("name", NAMES)
def test_named_pipe_does_not_block(tmp_path, name):
    # reading a FIFO would wait forever for a writer: refused from its type
    p = tmp_path / f"pipe{READERS[name][0]}"
    os.mkfifo(p)
    _refused(name, p, match="not a regular file")


@pytest.mark.parametrize("name", NAMES)
def test_missing_file(tmp_path, name):
    p = tmp_path / f"absent{READERS[name][0]}"
    _refused(name, p)


@pytest.mark.skipif(os.geteuid() == 0, reason="running as root: chmod 000 does not stop root from reading")
@pytest.mark.parametrize("name", NAMES)
def test_unreadable_file(tmp_path, name):
    p = _sample(tmp_path, name)
    p.chmod(0)
    try:
        _refused(name, p, match="permission denied")
    finally:
        p.chmod(0o644)


# ------------------------------------------------------------------------ random bytes
@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def _accepts_or_refuses(name, path):
    """Random input may happen to be valid (raw frames have no header); otherwise it must be
    refused with an InputError naming the file. Any other exception is a defect."""
    try:
        READERS[name][2](path)
    except InputError as e:
        assert str(path) in str(e), str(e)


# 25 examples per reader keep the suite quick; FUSION_FUZZ_EXAMPLES=2000 for a deeper search
_FUZZ = settings(max_examples=int(os.environ.get("FUSION_FUZZ_EXAMPLES", "25")), deadline=None,
                 derandomize=True, database=None,
                 # no explain phase: it writes patch files into the working tree
                 phases=[Phase.explicit, Phase.generate, Phase.shrink],
                 suppress_health_check=[HealthCheck.too_slow])


@pytest.mark.parametrize("name", NAMES)
@_FUZZ
@given(data=st.binary(min_size=0, max_size=2048))
def test_random_bytes(fuzz_dir, name, data):
    p = fuzz_dir / f"random-{name}{READERS[name][0]}"
    p.write_bytes(data)
    _accepts_or_refuses(name, p)


@pytest.mark.parametrize("name", NAMES)
@_FUZZ
@given(where=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(0, 255)), min_size=1, max_size=8),
       keep=st.floats(0.05, 1.0))
def test_random_corruption_of_a_valid_file(fuzz_dir, name, where, keep):
    # a valid file with a few bytes overwritten and its tail possibly lost: closer to a bad
    # copy than random bytes, and it reaches the decoders past their magic numbers
    base = fuzz_dir / f"base-{name}{READERS[name][0]}"
    if not base.exists():
        READERS[name][1](base)
    data = bytearray(base.read_bytes())
    for frac, byte in where:
        data[int(frac * len(data))] = byte
    p = fuzz_dir / f"bad-{name}{READERS[name][0]}"
    p.write_bytes(bytes(data[: max(1, int(keep * len(data)))]))
    _accepts_or_refuses(name, p)


# ------------------------------------------------------------------------ wrong dtype
def _nc_string_var(p, name, dims, shape, others=()):
    with netCDF4.Dataset(p, "w") as ds:
        for d, s in zip(dims, shape):
            ds.createDimension(d, s)
        ds.createVariable(name, str, dims)[:] = np.full(shape, "a", dtype=object)
        for k in others:
            ds.createVariable(k, "f4", dims)[:] = np.zeros(shape, np.float32)


@pytest.mark.parametrize("kind", ["complex", "bool", "string", "structured"])
def test_frames_of_a_non_numeric_dtype(tmp_path, kind):
    data = {"complex": _frames().astype(np.complex64), "bool": _frames() > 29100,
            "string": _frames().astype("U5"),
            "structured": np.zeros((F, R, C), dtype=[("a", "<f4"), ("b", "<i2")])}[kind]
    p = tmp_path / "f.npy"
    np.save(p, data)
    _refused("frames-npy", p, match="must be numeric")


def test_frames_hdf5_and_netcdf_of_strings(tmp_path):
    p = tmp_path / "s.h5"
    with h5py.File(p, "w") as fh:
        fh.create_dataset("ir", data=np.full((F, R, C), b"ab"))
    with pytest.raises(InputError, match=r"s\.h5: dataset 'ir' must be numeric"):
        open_frames(p, dataset="ir")
    q = tmp_path / "s.nc"
    _nc_string_var(q, "ir", ("f", "y", "x"), (F, R, C))
    with pytest.raises(InputError, match=r"s\.nc: variable 'ir' must be numeric"):
        open_frames(q, dataset="ir")


def test_maps_of_strings_or_complex(tmp_path):
    p = tmp_path / "m.nc"
    _nc_string_var(p, "T0", ("y", "x"), (R, C), others=("delta_T",))
    _refused("maps-netcdf", p, match=r"variable 'T0' \(T0\) holds .*expected numbers")
    q = tmp_path / "m.tif"
    tifffile.imwrite(q, np.stack([_maps()["T0"], _maps()["delta_T"]]).astype(np.complex64))
    _refused("maps-tiff", q, match="expected numeric maps")


def test_correlation_variables_of_strings(tmp_path):
    x, y = _grid()
    p = tmp_path / "s.h5"
    with h5py.File(p, "w") as fh:
        fh["x"], fh["y"], fh["v"] = x, y, y
        fh["u"] = np.full(x.size, b"ab")
    _refused("dic-hdf5", p, match=r"variable 'u' holds .*expected numbers")
    q = tmp_path / "s.csv"
    q.write_text("x,y,u,v\n" + "".join(f"{a},{b},one,2\n" for a, b in zip(x, y)))
    _refused("dic-csv", q, match=r"column 'u'.*expected a number")


@pytest.mark.parametrize("value, cls", [(np.array([[1, "a"]], dtype=object), "cell"),
                                        ({"a": 1.0}, "struct"), ("text", "char")])
def test_matlab_objects_structs_cells_are_not_read(tmp_path, value, cls):
    x, y = _grid()
    p = tmp_path / "o.mat"
    sio.savemat(p, {"x": x, "y": y, "u": value, "v": y})
    _refused("dic-mat", p, match=f"variable 'u' is a MATLAB {cls}")


def test_images_of_non_grey_dtypes(tmp_path):
    for kind, data in (("bool", _speckle() > 100), ("complex", _speckle().astype(np.complex64))):
        p = tmp_path / f"{kind}.tif"
        tifffile.imwrite(p, data)
        _refused("image-tiff", p, match=f"holds {kind}")


def test_frame_times_complex_and_text(tmp_path):
    p = tmp_path / "t.npy"
    np.save(p, np.arange(F) + 0j)
    _refused("times-npy", p, match="expected a 1-D list of frame times")
    q = tmp_path / "t.csv"
    q.write_text("time\n0\nzero\n")
    _refused("times-csv", q, match="expected numeric frame times")


def test_load_signal_text_in_a_number_column(tmp_path):
    p = tmp_path / "l.csv"
    p.write_text("time,load\n" + "".join(f"{i / 100},{'high' if i == 3 else 1}\n" for i in range(20)))
    _refused("load-csv", p, match=r"expected numbers in columns \['time', 'load'\]")


# ------------------------------------------------------------------------ byte order
def test_big_endian_files_read_the_same_values(tmp_path):
    # self-describing formats carry their byte order: values must not change
    # (reference: numpy's own byteswap of the same array)
    ref = _frames()
    np.save(tmp_path / "b.npy", ref.astype(">u2"))
    tifffile.imwrite(tmp_path / "b.tif", ref, byteorder=">")
    with h5py.File(tmp_path / "b.h5", "w") as fh:
        fh["ir"] = ref.astype(">u2")
    with netCDF4.Dataset(tmp_path / "b.nc", "w") as ds:
        for n, s in zip(("f", "y", "x"), ref.shape):
            ds.createDimension(n, s)
        ds.createVariable("ir", np.dtype(">u2"), ("f", "y", "x"), endian="big")[:] = ref
    for name in ("b.npy", "b.tif", "b.h5", "b.nc"):
        got = open_frames(tmp_path / name)[:]
        assert got.dtype.isnative, name
        np.testing.assert_array_equal(got, ref, err_msg=name)
    np.save(tmp_path / "t.npy", (np.arange(F) / 50.0).astype(">f8"))
    np.testing.assert_array_equal(read_frame_times(tmp_path / "t.npy"), np.arange(F) / 50.0)


@pytest.mark.parametrize("dtype", ["uint16", "int16", "float32"])
def test_raw_stack_in_the_wrong_byte_order(tmp_path, dtype):
    # a camera export in big-endian read as little-endian (the default): refused with the fix
    data = _frames().astype(dtype)
    if dtype == "float32":
        data = (295.0 + (data - 29000.0) * 0.002).astype(np.float32)   # kelvin frames
    p = tmp_path / "cam.raw"
    data.astype(np.dtype(dtype).newbyteorder(">")).tofile(p)
    with pytest.raises(InputError, match=r"cam\.raw: looks byte-swapped.*set byte_order = 'big'"):
        open_frames(p, dtype=dtype, shape=(F, R, C))
    got = open_frames(p, dtype=dtype, shape=(F, R, C), byte_order="big")[:]
    np.testing.assert_array_equal(got, data)


def test_byte_order_check_leaves_noise_alone(tmp_path, rng):
    # full-range noise has no preferred byte order: it must not be flagged either way
    p = tmp_path / "noise.raw"
    rng.integers(0, 65536, (F, R, C), dtype=np.uint16).tofile(p)
    for order in ("little", "big"):
        assert open_frames(p, dtype="uint16", shape=(F, R, C), byte_order=order).shape == (F, R, C)


# ------------------------------------------------------------------------ NaN / Inf only
def test_nan_and_inf_only_data(tmp_path):
    nan_maps = tmp_path / "nan.nc"
    with netCDF4.Dataset(nan_maps, "w") as ds:
        ds.createDimension("y", R)
        ds.createDimension("x", C)
        ds.createVariable("T0", "f4", ("y", "x"))[:] = _maps()["T0"]
        ds.createVariable("delta_T", "f4", ("y", "x"))[:] = np.full((R, C), np.nan, np.float32)
    _refused("maps-netcdf", nan_maps, match="delta_T has no finite value")
    inf_maps = tmp_path / "inf.tif"
    tifffile.imwrite(inf_maps, np.stack([_maps()["T0"], np.full((R, C), np.inf, np.float32)]))
    _refused("maps-tiff", inf_maps, match="delta_T holds infinite values")
    t0_nan = tmp_path / "t0.csv"
    t0_nan.write_text("row,col,T0,delta_T\n" + "".join(f"{r},0,nan,-0.1\n" for r in range(R)))
    _refused("maps-csv", t0_nan, match="T0 has no finite value")

    x, y = _grid()
    dic = tmp_path / "nan.csv"
    dic.write_text("x,y,u,v\n" + "".join(f"{a},{b},nan,nan\n" for a, b in zip(x, y)))
    _refused("dic-csv", dic, match="holds no measured point")
    dic_inf = tmp_path / "inf.h5"
    with h5py.File(dic_inf, "w") as fh:
        fh["x"], fh["y"], fh["u"], fh["v"] = x, y, np.full(x.size, np.inf), y
    _refused("dic-hdf5", dic_inf, match="infinite value")
    xy_nan = tmp_path / "xy.csv"
    xy_nan.write_text("x,y,u,v\n" + "nan,nan,0,0\n" * 5)
    _refused("dic-csv", xy_nan, match="no point with finite x and y")

    for bad in ("nan", "inf"):
        load = tmp_path / f"{bad}.csv"
        load.write_text("time,load\n" + "".join(f"{i / 100},{bad}\n" for i in range(20)))
        _refused("load-csv", load, match="non-finite value")
        times = tmp_path / f"{bad}.npy"
        np.save(times, np.full(F, float(bad)))
        _refused("times-npy", times, match="finite and increase strictly")
        img = tmp_path / f"{bad}.tif"
        tifffile.imwrite(img, np.full((24, 32), float(bad), np.float32))
        _refused("image-tiff", img, match="NaN or infinite grey levels")


# ------------------------------------------------------------------------ claims larger than the file
def _npy_with_header(p, shape, descr="<f8", tail=b"\0" * 64):
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": descr, "fortran_order": False, "shape": shape})
    p.write_bytes(buf.getvalue() + tail)


def test_npy_headers_claiming_more_than_the_file(tmp_path):
    huge = tmp_path / "huge.npy"
    _npy_with_header(huge, (10**6, 10**6, 10**6))
    _refused("frames-npy", huge, match=r"is truncated: the header promises 8000000000000000\d+ bytes")
    times = tmp_path / "times.npy"
    _npy_with_header(times, (10**12,))
    _refused("times-npy", times, match="is truncated")
    neg = tmp_path / "neg.npy"
    _npy_with_header(neg, (-1, 4, 4))
    _refused("frames-npy", neg, match="negative size")


def test_npy_header_is_not_evaluated(tmp_path):
    # the header is a Python literal: an expression that would run code must be refused unrun
    marker = tmp_path / "ran"

    def npy(descr):
        expr = f"{{'descr': {descr}, 'fortran_order': False, 'shape': (1, 1, 1), }}"
        size = (len(expr) + 1 + 10 + 63) // 64 * 64 - 10     # header padded to 64 bytes (NEP 1)
        header = expr.encode().ljust(size - 1) + b"\n"
        return b"\x93NUMPY\x01\x00" + struct.pack("<H", size) + header + b"\0" * 8

    plain = tmp_path / "plain.npy"
    plain.write_bytes(npy("'<f8'"))
    assert open_frames(plain)[:].shape == (1, 1, 1)        # the hand-made header itself is sound
    p = tmp_path / "code.npy"
    p.write_bytes(npy(f"__import__('pathlib').Path({str(marker)!r}).touch()"))
    _refused("frames-npy", p, match="not a valid .npy file")
    assert not marker.exists()


class _Touch:
    """Unpickling this object creates a marker file: proof that a pickle ran."""

    def __init__(self, path):
        self.path = str(path)

    def __reduce__(self):
        return (Path.touch, (Path(self.path),))


def test_pickles_are_never_loaded(tmp_path):
    marker = tmp_path / "ran"
    evil = np.empty((1, 1, 1), dtype=object)
    evil[0, 0, 0] = _Touch(marker)
    np.save(tmp_path / "frames.npy", evil, allow_pickle=True)
    np.save(tmp_path / "times.npy", np.array([_Touch(marker)] * 3, dtype=object), allow_pickle=True)
    (tmp_path / "raw.npy").write_bytes(pickle.dumps(_Touch(marker)))   # a bare pickle named .npy
    assert pickle.loads(pickle.dumps(_Touch(marker))) is None and marker.exists()   # the bait works
    marker.unlink()
    _refused("frames-npy", tmp_path / "frames.npy", match="pickles are refused")
    _refused("times-npy", tmp_path / "times.npy", match="pickles are refused")
    _refused("frames-npy", tmp_path / "raw.npy", match="not a valid .npy file")
    _refused("times-npy", tmp_path / "raw.npy", match="not a valid .npy file")
    assert not marker.exists()


def test_raw_config_shape_larger_than_the_file(tmp_path):
    p = tmp_path / "cam.raw"
    _frames().tofile(p)
    with pytest.raises(InputError, match=rf"cam\.raw: holds {F * R * C * 2} data bytes .* needs"):
        open_frames(p, dtype="uint16", shape=(10**9, R, C))


def test_unwritten_hdf5_and_netcdf_data(tmp_path):
    # headers of huge datasets whose data were never written (an aborted acquisition or a
    # forged header): refused from the headers, before a single chunk is read
    p = tmp_path / "sparse.h5"
    with h5py.File(p, "w") as fh:
        fh.create_dataset("ir", shape=(10**6, 10**4, 10**4), dtype="f4", chunks=(1, 100, 100))
    _refused("frames-hdf5", p, match=r"holds 0 of its 10000000000 chunks")
    half = tmp_path / "half.h5"
    with h5py.File(half, "w") as fh:
        d = fh.create_dataset("ir", shape=(F, R, C), dtype="u2", chunks=(1, R, C))
        d[: F // 2] = _frames()[: F // 2]
    _refused("frames-hdf5", half, match=rf"holds {F // 2} of its {F} chunks")
    x, y = _grid()
    dic = tmp_path / "sparse-dic.h5"
    with h5py.File(dic, "w") as fh:
        fh["x"], fh["y"], fh["v"] = x, y, y
        fh.create_dataset("u", shape=(10**5, 10**5), dtype="f8", chunks=(100, 100))
    _refused("dic-hdf5", dic, match="was not written to the end")
    maps = tmp_path / "sparse.nc"
    with netCDF4.Dataset(maps, "w") as ds:
        ds.createDimension("y", 200_000)
        ds.createDimension("x", 200_000)
        for k in ("T0", "delta_T"):
            ds.createVariable(k, "f4", ("y", "x"), chunksizes=(100, 100))
    _refused("maps-netcdf", maps, match=r"would take \d+ MiB in memory, more than the read limit")


def test_read_limit_is_enforced_from_headers(tmp_path):
    # max_bytes refuses a set larger than the limit before reading it (float64 while checked)
    maps = _sample(tmp_path, "maps-netcdf")
    with pytest.raises(InputError, match=r"more than the read limit of 0 MiB"):
        read_thermal_maps(maps, max_bytes=R * C * 8 - 1)
    assert read_thermal_maps(maps, max_bytes=R * C * 8)["T0"].shape == (R, C)
    table = tmp_path / "sparse.csv"
    table.write_text("row,col,T0,delta_T\n0,0,295,-0.1\n100000,100000,295,-0.1\n")
    _refused("maps-csv", table, match=r"the map grid spanned by row and col of shape \(2, 100001, 100001\)")
    for name in ("dic-netcdf", "dic-hdf5", "dic-mat"):
        p = _sample(tmp_path, name)
        with pytest.raises(InputError, match="more than the read limit") as err:
            read_dic_field(p, max_bytes=100)
        assert str(p) in str(err.value)


def _patch_tiff_size(p, width, height):
    """Rewrite ImageWidth/ImageLength of the first page of a little-endian classic TIFF."""
    data = bytearray(p.read_bytes())
    assert data[:4] == b"II*\0"
    ifd = struct.unpack_from("<I", data, 4)[0]
    for i in range(struct.unpack_from("<H", data, ifd)[0]):
        entry = ifd + 2 + 12 * i
        tag, typ = struct.unpack_from("<HH", data, entry)
        if tag in (256, 257):
            fmt = "<H" if typ == 3 else "<I"
            struct.pack_into(fmt, data, entry + 8, width if tag == 256 else height)
    p.write_bytes(bytes(data))


def test_image_headers_claiming_huge_sizes(tmp_path):
    # a decompression bomb: the header says 60000 x 60000; refused before decoding
    import zlib

    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    png = tmp_path / "bomb.png"
    png.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 60000, 60000, 8, 0, 0, 0, 0))
                    + chunk(b"IDAT", zlib.compress(b"")) + chunk(b"IEND", b""))
    _refused("image-png", png, match=r"has 3600000000 pixels, more than max_pixels")
    tif = _sample(tmp_path, "image-tiff")
    _patch_tiff_size(tif, 60000, 60000)
    _refused("image-tiff", tif, match=r"has 3600000000 pixels, more than max_pixels")


# ------------------------------------------------------------------------ HDF5 links out of the file
def _outside(tmp_path):
    target = tmp_path / "elsewhere.h5"
    with h5py.File(target, "w") as fh:
        fh["ir"] = _frames()
        for k, a in zip("xyuv", (*_grid(), *_grid())):
            fh[k] = a
    secret = tmp_path / "secret.bin"
    secret.write_bytes(_frames().tobytes())
    return target, secret


@pytest.mark.parametrize("how", ["external link", "external storage", "virtual dataset"])
def test_hdf5_frames_never_read_other_files(tmp_path, how):
    target, secret = _outside(tmp_path)
    p = tmp_path / "f.h5"
    with h5py.File(p, "w") as fh:
        if how == "external link":
            fh["ir"] = h5py.ExternalLink(str(target), "ir")
        elif how == "external storage":
            fh.create_dataset("ir", shape=(F, R, C), dtype="u2",
                              external=[(str(secret), 0, secret.stat().st_size)])
        else:
            lay = h5py.VirtualLayout(shape=(F, R, C), dtype="u2")
            lay[:] = h5py.VirtualSource(str(target), "ir", shape=(F, R, C))
            fh.create_virtual_dataset("ir", lay)
    with pytest.raises(InputError, match={"external link": "external link to", "external storage":
                                          "external files", "virtual dataset": "virtual dataset"}[how]) as err:
        open_frames(p, dataset="ir")
    assert str(p) in str(err.value)


def test_hdf5_correlation_fields_never_follow_links_out(tmp_path):
    target, _ = _outside(tmp_path)
    x, y = _grid()
    for suffix in (".h5", ".mat"):
        p = tmp_path / f"f{suffix}"
        with h5py.File(p, "w", userblock_size=512) as fh:
            fh["x"] = h5py.ExternalLink(str(target), "x")
            fh["y"], fh["u"], fh["v"] = y, x, y
        if suffix == ".mat":
            with open(p, "r+b") as fh:
                fh.write(b"MATLAB 7.3 MAT-file".ljust(116) + b"\x00" * 8 + b"\x00\x02IM")
        with pytest.raises(InputError, match="'x' is an external link to") as err:
            read_dic_field(p)
        assert str(p) in str(err.value)


@pytest.mark.parametrize("name", ["frames-netcdf", "maps-netcdf", "dic-netcdf", "result-netcdf"])
def test_netcdf4_files_never_follow_links_out(tmp_path, name):
    # NetCDF-4 is HDF5 underneath and the netCDF library follows HDF5 external links as if
    # they were its own variables: any link out of the file is refused
    target, _ = _outside(tmp_path)
    p = _sample(tmp_path, name)
    with h5py.File(p, "a") as fh:
        fh["elsewhere"] = h5py.ExternalLink(str(target), "ir")
    _refused(name, p, match=r"'/elsewhere' is an external link to")


def test_hdf5_links_inside_the_file_are_fine(tmp_path):
    p = tmp_path / "soft.h5"
    with h5py.File(p, "w") as fh:
        fh["data/frames"] = _frames()
        fh["ir"] = h5py.SoftLink("/data/frames")
    np.testing.assert_array_equal(open_frames(p, dataset="ir")[:], _frames())


# ------------------------------------------------------------------------ text-specific
def test_text_tables_with_other_encodings_or_binary(tmp_path):
    p = tmp_path / "utf16.csv"
    p.write_bytes("time,load\n0,1\n".encode("utf-16"))
    _refused("load-csv", p, match="not a text file")
    q = tmp_path / "nul.csv"
    q.write_bytes(b"x,y,u,v\n0,0,0,0\n\0\0\0\0\n")
    _refused("dic-csv", q)


def test_truncated_correlation_table_at_a_row_end_is_the_known_limit(tmp_path):
    # a cut exactly at a row end leaves a shorter, well-formed table: read as such (the
    # documented limitation); a cut inside a row is refused (see test_truncated_copy_is_refused)
    full = _sample(tmp_path, "dic-csv").read_bytes()
    lines = full.splitlines(keepends=True)
    p = tmp_path / "rows.csv"
    p.write_bytes(b"".join(lines[:-3]))
    assert read_dic_field(p).valid.sum() == len(lines) - 4
    # a one-column list cut inside its last number keeps a shorter number, same count
    times = _sample(tmp_path, "times-csv").read_bytes()
    q = tmp_path / "times.csv"
    q.write_bytes(times[:-5])            # "0.100000\n" -> "0.10"
    np.testing.assert_allclose(read_frame_times(q, n_frames=F), np.arange(F) / 50.0)


# ------------------------------------------------------------------------ sequences: one bad member
# A folder of per-frame files as an acquisition PC writes it, each member written by its
# format's own library (tifffile, OpenCV, numpy), with one fault in one member: the message
# must name that member and say the likely cause (DEVELOPERS.md, "Bad input: cases tried").
SEQ_KINDS = ("tif", "png", "npy", "csv")


@pytest.fixture
def text_cache(tmp_path, monkeypatch):
    """Text grids are converted into fusion's cache: one per test, never the user's."""
    monkeypatch.setenv("FUSION_CACHE", str(tmp_path / "cache"))


def _w_member(p, frame):
    kind = p.suffix[1:]
    if kind == "tif":
        tifffile.imwrite(p, frame)
    elif kind == "png":
        import cv2

        assert cv2.imwrite(str(p), frame)
    elif kind == "npy":
        np.save(p, frame)
    else:
        np.savetxt(p, frame, delimiter=",", fmt="%d")


def _frame_folder(folder, kind, numbers=range(F)):
    folder.mkdir()
    frames = _frames()
    for i in numbers:
        _w_member(folder / f"frame_{i:04d}.{kind}", frames[i])
    return folder


def _read_sequence(folder):
    return np.asarray(open_sequence(folder)[:])


@pytest.mark.parametrize("kind", SEQ_KINDS)
def test_valid_frame_folder_reads_back(tmp_path, text_cache, kind):
    # the starting point of the faults below: the members' frames come back in order
    np.testing.assert_array_equal(_read_sequence(_frame_folder(tmp_path / "ir", kind)), _frames())


_CUT_CAUSE = {
    "tif": r"cannot be read as a TIFF frame \(.*\): probably cut short or damaged \(an interrupted copy",
    "png": r"could not be decoded as a PNG image: probably cut short or damaged \(an interrupted copy",
    "npy": r"is truncated: the header promises \d+ bytes, the file has \d+ \(an interrupted copy",
    "csv": r"line \d+ holds \d+ values?, the first line of numbers 10: the file ends in the middle of a row: "
           r"cut short by an interrupted copy",
}


@pytest.mark.parametrize("kind", SEQ_KINDS)
@pytest.mark.parametrize("frac", [0.5, 0.9])
def test_frame_folder_with_one_member_cut_short(tmp_path, text_cache, kind, frac):
    d = _frame_folder(tmp_path / "ir", kind)
    p = d / f"frame_0003.{kind}"
    p.write_bytes(_cut(p.read_bytes(), frac, kind == "csv"))
    with pytest.raises(InputError, match=_CUT_CAUSE[kind]) as err:
        _read_sequence(d)
    assert err.value.path == str(p)


@pytest.mark.parametrize("kind", SEQ_KINDS)
def test_frame_folder_with_one_member_of_another_size(tmp_path, text_cache, kind):
    d = _frame_folder(tmp_path / "ir", kind)
    p = d / f"frame_0002.{kind}"
    _w_member(p, np.zeros((R, C + 1), np.uint16))          # another camera window
    cause = ("every frame of a sequence must have one size; a grid of another acquisition" if kind == "csv"
             else "every frame of a sequence must have one size and type; a file of another acquisition")
    with pytest.raises(InputError, match=rf"frame_0000\.{kind} a {R}x{C} .*{cause}.*move it out") as err:
        _read_sequence(d)
    assert err.value.path == str(p)


def test_frame_folder_with_a_gap_in_its_numbering(tmp_path):
    # frames timed from the frame rate: every frame after the gap would get the time of the one
    # before it, so the run stops naming the file after the gap
    from types import SimpleNamespace

    from fusion.run._inputs import frame_times

    d = _frame_folder(tmp_path / "ir", "tif", numbers=[0, 1, 2, 4, 5])
    stack = open_sequence(d)
    with pytest.raises(InputError, match=r"comes after frame_0002\.tif in .*number 3 .*would be mistimed: copy "
                                         r"the missing frames, or give times per file") as err:
        frame_times(SimpleNamespace(times=None, frame_rate=50.0), stack, None)
    assert err.value.path == str(d / "frame_0004.tif")


@pytest.mark.parametrize("fault, cause", [
    ("last row lost", r"holds a 7x10 grid, the first file frame_0000\.csv a 8x10 grid: every frame of a "
                      r"sequence must have one size; it ends early: cut short"),
    ("a row too many", r"holds a 9x10 grid, the first file frame_0000\.csv a 8x10 grid: .*a grid of another "
                       r"acquisition"),
    ("a short row inside", r"line 4 holds 9 values, the first line of numbers 10: a damaged row\?"),
    ("a value too many inside", r"line 4 holds 11 values, the first line of numbers 10: a damaged row\?"),
    ("a value too many, lines closed by a comma", r"line 4 holds 11 values, the first line of numbers 10: a "
                                                 r"damaged row\?"),
])
def test_text_grid_with_a_wrong_row_count(tmp_path, text_cache, fault, cause):
    d = _frame_folder(tmp_path / "ir", "csv")
    p = d / "frame_0004.csv"
    lines = p.read_text().splitlines(keepends=True)
    if fault == "last row lost":           # cut exactly at a row end: well-formed, one row short
        lines = lines[:-1]
    elif fault == "a row too many":
        lines = lines + lines[-1:]
    elif fault.startswith("a value too many"):     # not to be cut to the first row's width
        lines[3] = lines[3].rstrip("\n") + ",7\n"
        if "closed" in fault:
            lines = [x.rstrip("\n") + ",\n" if x.strip() and x.strip()[0].isdigit() else x for x in lines]
    else:                                  # one value lost inside the grid
        lines[3] = lines[3].rsplit(",", 1)[0] + "\n"
    p.write_text("".join(lines))
    with pytest.raises(InputError, match=cause) as err:
        _read_sequence(d)
    assert err.value.path == str(p)
    assert not list((tmp_path / "cache").rglob("*.npy"))     # nothing half-converted left in the cache


@pytest.mark.parametrize("kind", ["png", "tif"])
def test_image_folder_with_one_image_cut_short(tmp_path, kind):
    # speckle images are listed by list_images and read one by one, as the correlation reads them
    d = tmp_path / "vis"
    d.mkdir()
    for i in range(3):
        _w_member(d / f"img_{i:03d}.{kind}", _speckle())
    p = d / f"img_001.{kind}"
    p.write_bytes(_cut(p.read_bytes(), 0.5, False))
    with pytest.raises(InputError, match="probably cut short or damaged \\(an interrupted copy") as err:
        [read_image(f) for f in list_images(d).files]
    assert err.value.path == str(p)


def test_image_folder_with_one_image_of_another_size(tmp_path):
    # as the run reads them: the reference first, every other image checked against it
    from fusion.config import load_config
    from fusion.run._strain import strain_side

    d = tmp_path / "vis"
    d.mkdir()
    for i in range(3):
        _w_member(d / f"img_{i:03d}.png", _speckle() if i != 2 else _speckle()[:, :-4])
    np.save(tmp_path / "ir.npy", np.full((20, 4, 4), 295.0, np.float32))
    (tmp_path / "c.toml").write_text(ONE_PLY_RUN + """[run.thermal]
frames = "ir.npy"
frame_rate = "50 Hz"
[run.dic]
images = "vis"
loads = [0, 1, 2]
coordinates = "px"
""")
    run = load_config(tmp_path / "c.toml").runs[0]
    with pytest.raises(InputError, match=r"is a 24x28 image, the reference img_000\.png 24x32: every speckle image "
                                         r"must have one size; an image of another camera setting") as err:
        strain_side(run)
    assert err.value.path == str(d / "img_002.png")


# ------------------------------------------------------------------------ crashes found by fuzzing
_READ_IN_CHILD = """
import sys
from fusion.errors import InputError
from fusion.io import read_dic_field
try:
    read_dic_field(sys.argv[1])
except InputError as e:
    print("refused:", e)
"""


@pytest.mark.parametrize("compressed", [False, True])
def test_damaged_matlab_type_code_does_not_crash(tmp_path, compressed):
    # scipy's compiled reader indexes a table with the element's type code: code 160 read
    # out of bounds and killed the process (a segmentation fault, found by the fuzz test
    # above). The read runs in a child process so that a regression fails this test
    # instead of crashing the suite.
    import subprocess
    import sys
    import zlib

    x, y = _grid()
    p = tmp_path / "d.mat"
    sio.savemat(p, {"x": x, "y": y, "u": x * 1e-3, "v": y * 2e-3}, do_compression=compressed)
    data = bytearray(p.read_bytes())
    # the 2nd top-level element is "y": tag, flags (16), dims (16), name (8), then the
    # real-part tag whose first 4 bytes are the type code (MAT-file level 5 layout)
    pos, n = 128, 0
    while True:
        mdtype, nbytes = struct.unpack_from("<II", data, pos)
        if n == 1:
            break
        pos += 8 + (nbytes if compressed else (nbytes + 7) // 8 * 8)
        n += 1
    if compressed:
        inner = bytearray(zlib.decompress(bytes(data[pos + 8:pos + 8 + nbytes])))
        struct.pack_into("<I", inner, 8 + 16 + 16 + 8, 160)
        packed = zlib.compress(bytes(inner))
        data[pos:pos + 8 + nbytes] = struct.pack("<II", 15, len(packed)) + packed
    else:
        struct.pack_into("<I", data, pos + 8 + 16 + 16 + 8, 160)
    p.write_bytes(bytes(data))
    r = subprocess.run([sys.executable, "-c", _READ_IN_CHILD, str(p)], capture_output=True, text=True,
                       timeout=120, cwd=Path(__file__).resolve().parents[1])
    assert r.returncode == 0, r.stderr[-2000:]
    assert f"refused: {p}: variable 'y' is damaged: its real part has data type code 160" in r.stdout
