"""Reading exported correlation fields and speckle images."""

import cv2
import h5py
import numpy as np
import pytest
import tifffile
import xarray as xr
from scipy import io as sio
from skimage.color import rgb2gray

from fusion.errors import InputError
from fusion.io import read_dic_field, read_image


def _grid_table(ny=6, nx=8, step=0.5):
    """Points of a lattice in the file's own axes, with two holes, shuffled."""
    rng = np.random.default_rng(3)
    yy, xx = np.meshgrid(np.arange(ny) * step, np.arange(nx) * step, indexing="ij")
    x, y = xx.ravel(), yy.ravel()
    keep = np.ones(x.size, bool)
    keep[[9, 30]] = False
    order = rng.permutation(np.flatnonzero(keep))
    return x[order], y[order]


def _write_csv(path, header, rows, sep=","):
    lines = ["# exported by our own test", sep.join(header)]
    lines += [sep.join(str(v) for v in r) for r in rows]
    path.write_text("\n".join(lines) + "\n")


def test_csv_grid_in_pixels_rows_down(tmp_path):
    # Pixel coordinates default to y down (image rows): y = -row, v = -v_img and
    # gxy = -gxy_img on conversion; exx, eyy keep their sign (DEVELOPERS.md, Conventions).
    x, y = _grid_table(step=10.0)
    u, v = 0.01 * x, 0.02 * y
    exx, eyy, gxy = np.full(x.size, 1e-3), np.full(x.size, 2e-3), np.full(x.size, 3e-4)
    p = tmp_path / "field.csv"
    _write_csv(p, ["x", "y", "u", "v", "exx", "eyy", "gxy"], zip(x, y, u, v, exx, eyy, gxy))
    f = read_dic_field(p, coordinates="px")
    assert f.units == "px" and f.grid_shape == (6, 8)
    # grid order: first row on top (largest specimen y = smallest image row)
    yg, xg = f.grid("y"), f.grid("x")
    np.testing.assert_allclose(yg[:, 0], -np.arange(6) * 10.0)
    np.testing.assert_allclose(xg[0], np.arange(8) * 10.0)
    ok = f.valid
    assert ok.sum() == 46 and (~ok).sum() == 2  # the two holes come back as invalid points
    np.testing.assert_allclose(f.v[ok], -0.02 * (-f.y[ok]))  # v_spec = -v_img, y_img = -y
    np.testing.assert_allclose(f.u[ok], 0.01 * f.x[ok])
    np.testing.assert_allclose(f.gxy[ok], -3e-4)
    np.testing.assert_allclose(f.eyy[ok], 2e-3)
    assert np.all(np.isnan(f.u[~ok]))


def test_csv_mapped_names_semicolons_tensor_shear(tmp_path):
    x, y = _grid_table()
    p = tmp_path / "f.csv"
    rows = zip(x, y, 0 * x + 0.1, 0 * y - 0.2, 0 * x + 5e-4, np.where(x > 2, 1, 0), 0.9 + 0 * x)
    _write_csv(p, ["X pos", "Y pos", "disp u", "disp v", "shear", "ok", "quality"], rows, sep=";")
    cols = {"x": "x pos", "y": "Y POS", "u": "disp u", "v": "disp v", "exy": "shear",
            "valid": "ok", "zncc": "quality"}
    f = read_dic_field(p, columns=cols, shear="tensor")
    assert f.units == "mm" and f.grid_shape == (6, 8)
    present = np.isfinite(f.gxy)
    np.testing.assert_allclose(f.gxy[present], 1e-3)  # gamma = 2 eps_xy
    np.testing.assert_allclose(f.v[f.valid], -0.2)  # y up in mm by default: unchanged
    assert not np.any(f.valid & (f.x <= 2))
    assert not read_dic_field(p, columns=cols, min_zncc=0.95).valid.any()


def test_csv_scattered_points(tmp_path, rng):
    x, y = rng.uniform(0, 10, 50), rng.uniform(0, 5, 50)
    p = tmp_path / "s.csv"
    _write_csv(p, ["x", "y", "u", "v"], zip(x, y, x * 0.01, y * 0.0), sep="\t")
    f = read_dic_field(p)
    assert f.grid_shape is None and f.size == 50
    np.testing.assert_allclose(np.sort(f.x), np.sort(x))


def test_strain_range_table(tmp_path):
    x, y = _grid_table()
    p = tmp_path / "ranges.csv"
    _write_csv(p, ["x", "y", "exx", "eyy", "gxy"], zip(x, y, 0 * x + 1e-3, 0 * x, 0 * x + 2e-4))
    f = read_dic_field(p, y_axis="down")
    assert f.valid.sum() == 46 and np.all(np.isnan(f.u))
    np.testing.assert_allclose(f.gxy[f.valid], -2e-4)


def test_netcdf_grid_with_units_in_metres(tmp_path):
    xs = np.arange(5) * 1e-3  # metres
    ys = np.arange(4) * 1e-3
    u = np.arange(20.0).reshape(4, 5) * 1e-6
    ds = xr.Dataset({"u": (("y", "x"), u, {"units": "m"}), "v": (("y", "x"), -u, {"units": "m"})},
                    coords={"x": ("x", xs, {"units": "m"}), "y": ("y", ys, {"units": "m"})})
    p = tmp_path / "f.nc"
    ds.to_netcdf(p)
    f = read_dic_field(p)
    assert f.grid_shape == (4, 5) and f.units == "mm"
    np.testing.assert_allclose(np.unique(f.x), np.arange(5.0))
    # the point at x = 2 mm, y = 3 mm holds u[3, 2]
    k = np.flatnonzero((np.abs(f.x - 2) < 1e-9) & (np.abs(f.y - 3) < 1e-9))[0]
    assert f.u[k] == pytest.approx(u[3, 2] * 1e3)
    with pytest.raises(InputError, match="'x' has units 'm'"):
        read_dic_field(p, coordinates="px")


def test_hdf5_and_matlab(tmp_path):
    x, y = _grid_table()
    p = tmp_path / "f.h5"
    with h5py.File(p, "w") as fh:
        g = fh.create_group("dic")
        for name, val in (("x", x), ("y", y), ("u", x * 0.1), ("v", y * 0.2)):
            g.create_dataset(name, data=val)
    names = {k: f"dic/{k}" for k in "xyuv"}
    f = read_dic_field(p, variables=names)
    assert f.grid_shape == (6, 8)
    np.testing.assert_allclose(f.u[f.valid], 0.1 * f.x[f.valid])
    pm = tmp_path / "f.mat"
    sio.savemat(pm, {"X": x, "Y": y, "U": x * 0.1, "V": y * 0.2})
    fm = read_dic_field(pm, variables={"x": "X", "y": "Y", "u": "U", "v": "V"})
    np.testing.assert_allclose(fm.u, f.u, equal_nan=True)


def test_matlab_v73_is_read_through_hdf5(tmp_path):
    # Version 7.3 MAT-files are HDF5 with a 512-byte user block holding the MATLAB
    # header (common practice); scipy.io.loadmat refuses them, h5py reads them.
    p = tmp_path / "v73.mat"
    x, y = _grid_table()
    with h5py.File(p, "w", userblock_size=512) as fh:
        for name, val in (("x", x), ("y", y), ("u", x * 0.3), ("v", y * 0.0)):
            fh.create_dataset(name, data=val)
    header = b"MATLAB 7.3 MAT-file, created by our own test".ljust(116) + b"\x00" * 8
    with open(p, "r+b") as fh:
        fh.write(header + b"\x00\x02" + b"IM")
    with pytest.raises(NotImplementedError):
        sio.loadmat(p)
    f = read_dic_field(p)
    np.testing.assert_allclose(f.u[f.valid], 0.3 * f.x[f.valid])


@pytest.mark.parametrize("content, kwargs, match", [
    ("x,y,u\n0,0,1\n", {}, "needs displacement columns u and v"),
    ("x,y,u,v\n0,0,1,abc\n1,0,1,2\n", {}, r"column 'v' \(v\): data row 1 holds 'abc'"),
    ("x,y,u,v\n0,0,1,inf\n1,0,1,2\n", {}, "infinite value"),
    ("0,0,1,2\n1,1,1,2\n", {}, "no header row"),
    ("x,y,u,v\n0,0,1,2\n0,0,3,4\n1,1,0,0\n", {}, "share"),
    ("x,y,u,v\n0,0,1,2\n", {"columns": {"u": "ux"}}, "has no column 'ux'"),
    ("", {}, "is empty"),
])
def test_csv_errors_name_file_and_column(tmp_path, content, kwargs, match):
    p = tmp_path / "bad.csv"
    p.write_text(content)
    with pytest.raises(InputError, match=match) as err:
        read_dic_field(p, **kwargs)
    assert str(p) in str(err.value)


def test_option_and_file_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_dic_field(tmp_path / "none.csv")
    (tmp_path / "f.xlsx").write_text("x")
    with pytest.raises(InputError, match="suffix"):
        read_dic_field(tmp_path / "f.xlsx")
    with pytest.raises(ValueError, match="coordinates"):
        read_dic_field(tmp_path / "none.csv", coordinates="inch")
    with pytest.raises(ValueError, match="not a field name"):
        read_dic_field(tmp_path / "none.csv", columns={"w": "w"})
    with pytest.raises(ValueError, match="either 'exy' or 'gxy'"):
        read_dic_field(tmp_path / "none.csv", columns={"exy": "a", "gxy": "b"})


# ---------------------------------------------------------------- images

def test_png_8_and_16_bit(tmp_path, rng):
    a8 = rng.integers(0, 256, (30, 40), dtype=np.uint8)
    a16 = rng.integers(0, 65536, (30, 40), dtype=np.uint16)
    cv2.imwrite(str(tmp_path / "a.png"), a8)
    cv2.imwrite(str(tmp_path / "b.png"), a16)
    g8, g16 = read_image(tmp_path / "a.png"), read_image(tmp_path / "b.png")
    assert g8.dtype == np.float32 and g8.shape == (30, 40)
    np.testing.assert_array_equal(g8, a8)
    np.testing.assert_array_equal(g16, a16)  # float32 holds 16-bit integers exactly


def test_colour_converts_like_skimage(tmp_path, rng):
    # Reference library: skimage.color.rgb2gray (BT.709 luma) on the same RGB data.
    rgb = rng.integers(0, 256, (20, 25, 3), dtype=np.uint8)
    cv2.imwrite(str(tmp_path / "c.png"), rgb[..., ::-1])  # OpenCV writes BGR
    tifffile.imwrite(tmp_path / "c.tif", rgb, photometric="rgb")
    expected = rgb2gray(rgb) * 255.0
    for name in ("c.png", "c.tif"):
        np.testing.assert_allclose(read_image(tmp_path / name), expected, rtol=1e-6, atol=1e-4)
    rgba = np.dstack([rgb, np.full((20, 25), 7, np.uint8)])
    cv2.imwrite(str(tmp_path / "d.png"), rgba[..., [2, 1, 0, 3]])
    np.testing.assert_allclose(read_image(tmp_path / "d.png"), expected, rtol=1e-6, atol=1e-4)


def test_tiff_float_and_errors(tmp_path):
    f = np.linspace(0, 1, 200).reshape(10, 20)
    tifffile.imwrite(tmp_path / "f.tif", f)
    out = read_image(tmp_path / "f.tif")
    assert out.dtype == np.float64
    np.testing.assert_array_equal(out, f)
    tifffile.imwrite(tmp_path / "stack.tif", np.zeros((5, 10, 20), np.uint16))
    with pytest.raises(InputError, match="not a stack"):
        read_image(tmp_path / "stack.tif")
    bad = f.copy()
    bad[2, 2] = np.nan
    tifffile.imwrite(tmp_path / "nan.tif", bad)
    with pytest.raises(InputError, match="NaN"):
        read_image(tmp_path / "nan.tif")
    with pytest.raises(InputError, match="max_pixels"):
        read_image(tmp_path / "f.tif", max_pixels=100)


def test_compressed_16_bit_tiff_written_by_opencv(tmp_path, rng):
    # Reference library: OpenCV writes 16-bit TIFF with LZW compression by default (cv2.imwrite;
    # its TIFF writer's default, from memory) and reads it back; tifffile writes the Deflate
    # and LZW variants. Our reader must return the same grey levels for each.
    import cv2

    img = rng.integers(0, 65536, (37, 53), dtype=np.uint16)
    p = tmp_path / "cv.tif"
    assert cv2.imwrite(str(p), img)
    with tifffile.TiffFile(p) as tf:
        assert tf.pages[0].compression != 1          # not uncompressed: the case of the issue
    np.testing.assert_array_equal(read_image(p), cv2.imread(str(p), cv2.IMREAD_UNCHANGED))
    np.testing.assert_array_equal(read_image(p), img)
    for compression in ("deflate", "lzw"):
        q = tmp_path / f"{compression}.tif"
        tifffile.imwrite(q, img, compression=compression)
        np.testing.assert_array_equal(read_image(q), img)


def test_pixel_limit_is_checked_before_decoding(tmp_path):
    # A PNG header announcing 100,000 x 100,000 pixels with no data: refused from the
    # header alone (decoding would fail differently).
    import struct
    import zlib
    ihdr = struct.pack(">IIBBBBB", 100_000, 100_000, 8, 0, 0, 0, 0)
    chunk = struct.pack(">I", len(ihdr)) + b"IHDR" + ihdr + struct.pack(">I", zlib.crc32(b"IHDR" + ihdr))
    p = tmp_path / "huge.png"
    p.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk)
    with pytest.raises(InputError, match="10000000000 pixels"):
        read_image(p)
    (tmp_path / "junk.png").write_bytes(b"not a png at all, just text")
    with pytest.raises(InputError, match="not a PNG"):
        read_image(tmp_path / "junk.png")
    (tmp_path / "x.bmp").write_text("x")
    with pytest.raises(InputError, match="suffix"):
        read_image(tmp_path / "x.bmp")
    with pytest.raises(InputError, match="does not exist"):
        read_image(tmp_path / "missing.png")
