"""Frame-stack readers: every format round-trips against the library that wrote it.

The files are written with the format's own general-purpose library (numpy.save /
ndarray.tofile, tifffile, h5py, netCDF4), so each reader is checked against an
independent writer; results are compared exactly (integer data, no tolerance).
"""

import pickle

import numpy as np
import pytest

from fusion.errors import InputError
from fusion.io import FrameStack, open_frames
from fusion.thermal import lockin


@pytest.fixture
def stack():
    # 6 columns, not 3 or 4: TIFF writers read a trailing 3/4 as colour samples
    return (np.arange(7 * 5 * 6).reshape(7, 5, 6) * 37 % 4093).astype(np.uint16)


def test_npy_is_memory_mapped_and_sliced(stack, tmp_path):
    np.save(tmp_path / "s.npy", stack)
    st = open_frames(tmp_path / "s.npy")
    assert isinstance(st, FrameStack) and st.kind == "npy"
    assert st.shape == (7, 5, 6) and len(st) == 7 and st.dtype == np.uint16 and st.ndim == 3
    assert isinstance(st.memmap, np.memmap)
    assert np.array_equal(st[2:5], stack[2:5])
    assert np.array_equal(st[3], stack[3])
    assert np.array_equal(st[1:6:2, 1:3, 2:], stack[1:6:2, 1:3, 2:])
    assert np.array_equal(np.asarray(st), stack)


def test_npy_fortran_order_reads_right(stack, tmp_path):
    np.save(tmp_path / "f.npy", np.asfortranarray(stack))
    assert np.array_equal(open_frames(tmp_path / "f.npy")[:], stack)


@pytest.mark.parametrize("order, code", [("little", "<"), ("big", ">")])
def test_raw_with_header_and_byte_order(stack, tmp_path, order, code):
    p = tmp_path / "s.raw"
    p.write_bytes(b"HEAD" * 4 + stack.astype(code + "u2").tobytes())
    st = open_frames(p, dtype="uint16", shape=(7, 5, 6), byte_order=order, header_bytes=16)
    assert st.kind == "raw"
    got = st[:]
    assert got.dtype.isnative and np.array_equal(got, stack)
    # frames from the file size
    assert open_frames(p, dtype="uint16", shape=(None, 5, 6), byte_order=order, header_bytes=16).shape[0] == 7


def test_raw_size_mismatch_names_file_and_hint(stack, tmp_path):
    p = tmp_path / "cam.raw"
    stack.tofile(p)
    with pytest.raises(InputError, match=r"cam\.raw: holds 420 data bytes .* needs 480; it holds 7 frames"):
        open_frames(p, dtype="uint16", shape=(8, 5, 6))
    with pytest.raises(InputError, match=r"cam\.raw: .*not a whole number of 5x8 uint16 frames"):
        open_frames(p, dtype="uint16", shape=(None, 5, 8))
    with pytest.raises(InputError, match="needs dtype and shape"):
        open_frames(p)
    with pytest.raises(ValueError, match="byte_order must be one of"):
        open_frames(p, dtype="uint16", shape=(7, 5, 6), byte_order="middle")


def test_npy_refusals(stack, tmp_path):
    np.save(tmp_path / "obj.npy", np.array([{}, 1], dtype=object), allow_pickle=True)
    with pytest.raises(InputError, match=r"obj\.npy: holds Python objects"):
        open_frames(tmp_path / "obj.npy")
    np.save(tmp_path / "flat.npy", stack[0])
    with pytest.raises(InputError, match=r"flat\.npy: expected a 3-D stack"):
        open_frames(tmp_path / "flat.npy")
    np.save(tmp_path / "c.npy", stack.astype(np.complex64))
    with pytest.raises(InputError, match="must be numeric"):
        open_frames(tmp_path / "c.npy")
    np.save(tmp_path / "t.npy", stack)
    data = (tmp_path / "t.npy").read_bytes()
    (tmp_path / "t.npy").write_bytes(data[:-10])
    with pytest.raises(InputError, match=r"t\.npy: is truncated"):
        open_frames(tmp_path / "t.npy")
    (tmp_path / "junk.npy").write_bytes(b"not an array at all")
    with pytest.raises(InputError, match=r"junk\.npy: not a valid \.npy"):
        open_frames(tmp_path / "junk.npy")


def test_config_mismatch_names_file(stack, tmp_path):
    np.save(tmp_path / "s.npy", stack)
    with pytest.raises(InputError, match=r"s\.npy: holds a stack of shape \(7, 5, 6\).*config says \(8, 5, 6\)"):
        open_frames(tmp_path / "s.npy", shape=(8, 5, 6))
    with pytest.raises(InputError, match=r"s\.npy: holds dtype uint16 but the config says float32"):
        open_frames(tmp_path / "s.npy", dtype="float32")
    assert open_frames(tmp_path / "s.npy", shape=(None, 5, 6), dtype=">u2").shape == (7, 5, 6)
    with pytest.raises(InputError, match="no such frame file"):
        open_frames(tmp_path / "missing.npy")
    (tmp_path / "x.weird").write_bytes(b"1234")
    with pytest.raises(InputError, match="unknown frame format"):
        open_frames(tmp_path / "x.weird")


@pytest.mark.parametrize("compression", [None, "zlib"])
def test_multipage_tiff(stack, tmp_path, compression):
    tifffile = pytest.importorskip("tifffile")
    p = tmp_path / "s.tif"
    tifffile.imwrite(p, stack, compression=compression, photometric="minisblack")
    st = open_frames(p)
    assert st.shape == (7, 5, 6) and st.kind == "tiff"
    assert (st.memmap is not None) == (compression is None)   # uncompressed: memory-mapped
    assert np.array_equal(st[1:4], stack[1:4])
    assert np.array_equal(st[5], stack[5])
    assert np.array_equal(st[::3, 2:, :4], stack[::3, 2:, :4])


def test_tiff_colour_pages_refused(stack, tmp_path):
    tifffile = pytest.importorskip("tifffile")
    tifffile.imwrite(tmp_path / "rgb.tif", stack[:, :, :3], photometric="rgb")
    with pytest.raises(InputError, match=r"rgb\.tif: holds multi-sample"):
        open_frames(tmp_path / "rgb.tif")


def test_hdf5_contiguous_and_chunked(stack, tmp_path):
    h5py = pytest.importorskip("h5py")
    p = tmp_path / "s.h5"
    with h5py.File(p, "w") as fh:
        fh["camera/frames"] = stack
        fh.create_dataset("packed", data=stack, chunks=(2, 5, 6), compression="gzip")
        fh["meta"] = np.arange(3)
    a = open_frames(p, dataset="camera/frames")
    assert a.memmap is not None and np.array_equal(a[:], stack)     # contiguous: mapped
    b = open_frames(p, dataset="packed")
    assert b.memmap is None and np.array_equal(b[2:6], stack[2:6])
    with pytest.raises(InputError, match=r"name the frame dataset.*\['camera/frames', 'packed'\]"):
        open_frames(p)
    with pytest.raises(InputError, match="has no dataset 'nope'"):
        open_frames(p, dataset="nope")


def test_netcdf_variable_with_fill_values(stack, tmp_path):
    netCDF4 = pytest.importorskip("netCDF4")
    p = tmp_path / "s.nc"
    with netCDF4.Dataset(p, "w") as ds:
        for name, size in zip(("frame", "y", "x"), stack.shape):
            ds.createDimension(name, size)
        v = ds.createVariable("temperature", "f4", ("frame", "y", "x"), fill_value=-999.0)
        v[:] = stack.astype(np.float32)
        v[2, 1, 1] = np.ma.masked
    st = open_frames(p)
    assert st.dataset == "temperature" and st.shape == (7, 5, 6)
    got = st[:]
    assert np.isnan(got[2, 1, 1])
    mask = np.ones(stack.shape, bool)
    mask[2, 1, 1] = False
    assert np.array_equal(got[mask], stack[mask].astype(np.float32))


def test_max_bytes_guards_reads(stack, tmp_path):
    np.save(tmp_path / "s.npy", stack)
    st = open_frames(tmp_path / "s.npy", max_bytes=2 * 5 * 6 * 2)
    assert st[0:2].shape == (2, 5, 6)
    with pytest.raises(ValueError, match="max_bytes=120"):
        st[0:3]


def test_pickle_and_dask_view(stack, tmp_path):
    np.save(tmp_path / "s.npy", stack)
    st = open_frames(tmp_path / "s.npy")
    st.memmap  # open the map, which must not travel in the pickle
    blob = pickle.dumps(st)
    assert len(blob) < stack.nbytes
    assert np.array_equal(pickle.loads(blob)[:], stack)
    d = st.to_dask(3)
    assert d.chunks[0] == (3, 3, 1) and d.chunks[1:] == ((5,), (6,))
    assert np.array_equal(d.compute(), stack)


def test_lockin_reads_each_format_alike(rng, tmp_path):
    h5py = pytest.importorskip("h5py")
    tifffile = pytest.importorskip("tifffile")
    t = np.arange(120) / 30.0
    frames = (7000 + 50 * np.cos(2 * np.pi * 4.0 * t)[:, None, None]
              + rng.integers(-5, 6, size=(120, 6, 8))).astype(np.uint16)
    np.save(tmp_path / "s.npy", frames)
    frames.astype(">u2").tofile(tmp_path / "s.raw")
    tifffile.imwrite(tmp_path / "s.tif", frames, compression="zlib", photometric="minisblack")
    with h5py.File(tmp_path / "s.h5", "w") as fh:
        fh.create_dataset("f", data=frames, chunks=(16, 6, 8), compression="gzip")
    ref = lockin(frames, frame_rate=30.0, frequency=4.0, gain=0.01, offset=230.0)
    stacks = [open_frames(tmp_path / "s.npy"),
              open_frames(tmp_path / "s.raw", dtype="uint16", shape=(None, 6, 8), byte_order="big"),
              open_frames(tmp_path / "s.tif"), open_frames(tmp_path / "s.h5")]
    for st in stacks:
        got = lockin(st, frame_rate=30.0, frequency=4.0, gain=0.01, offset=230.0, chunk_frames=50)
        # same data, other block boundaries: float64 sums agree far below float32 resolution
        np.testing.assert_allclose(got.delta_T, ref.delta_T, rtol=1e-6, err_msg=st.kind)
        np.testing.assert_allclose(got.T0, ref.T0, rtol=1e-7, err_msg=st.kind)
