"""Frame and image sequences as cameras write them: a folder or pattern of per-frame files.

Readers are checked against the libraries that wrote the files (tifffile, OpenCV, NumPy's
savetxt/loadtxt); a run given as a folder of TIFFs, a folder of CSV grids and one .npy of
the same frames must give identical maps, and its lock-in amplitude must match the test's
own forward model (frames T0 + (dT/2) cos(2 pi f t) + noise, written here).
"""

import logging
import os

import cv2
import numpy as np
import pytest
import tifffile
import xarray as xr

from fusion.campaign import check_campaign, run_campaign
from fusion.config import load_config
from fusion.dic import speckle_image
from fusion.errors import ConfigError, InputError
from fusion.io import list_images, list_sequence, open_sequence, read_load_log, read_sequence_times
from fusion.io import _textgrids
from fusion.run._inputs import frame_times, input_state, open_thermal_frames, speckle_images
from fusion.run._strain import strain_side

from _campaigns import ROOT
from _inputs import ONE_PLY_RUN

ROWS, COLS, T0, SIGMA, FREQ, RATE, FRAMES = 12, 16, 295.0, 0.02, 5.0, 50.0, 120


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    """Each test converts text grids into its own cache folder."""
    monkeypatch.setenv("FUSION_CACHE", str(tmp_path / "cache"))


def _frames(rng, n=FRAMES, amp=-0.2):
    t = np.arange(n) / RATE
    wave = T0 + 0.5 * amp * np.cos(2 * np.pi * FREQ * t)
    return (wave[:, None, None] + SIGMA * rng.standard_normal((n, ROWS, COLS))).astype(np.float32)


def _write_tiffs(folder, frames, name="frame_{:04d}.tif", start=0):
    folder.mkdir(parents=True, exist_ok=True)
    for i, f in enumerate(frames):
        tifffile.imwrite(folder / name.format(i + start), f)


def _write_grids(folder, frames, *, delimiter=";", decimal=".", header=True, fmt="%.9g", name="g{}.csv"):
    folder.mkdir(parents=True, exist_ok=True)
    for i, f in enumerate(frames):
        lines = [delimiter.join(fmt % v for v in row) for row in f]
        text = "\n".join(lines) + "\n"
        if decimal == ",":
            text = text.replace(".", ",")
        if header:
            text = delimiter.join(f"c{j}" for j in range(f.shape[1])) + "\n" + text
        (folder / name.format(i)).write_text(text)


# ------------------------------------------------------------------------------ the whole run
def test_tiff_folder_csv_folder_and_npy_give_identical_maps(tmp_path, rng):
    """The same frames as one .npy, a folder of per-frame TIFFs (names numbered 1..N in natural
    order, not zero-padded) and a folder of CSV grids (decimal commas, semicolons, a header
    line) give identical result maps; the measured dT matches the independent forward model of
    the frames written here within 5 noise standard deviations of the lock-in."""
    frames = _frames(rng)
    np.save(tmp_path / "ir.npy", frames)
    _write_tiffs(tmp_path / "tif", frames, name="shot{}.tif", start=1)
    _write_grids(tmp_path / "csv", frames, decimal=",")
    t = np.arange(FRAMES) / RATE
    np.savetxt(tmp_path / "load.csv", np.column_stack([t, 11.0 + 4.5 * np.cos(2 * np.pi * FREQ * t)]),
               delimiter=",", header="time,load", comments="")
    x, y = (a.ravel() for a in np.meshgrid(np.arange(0, 8, 0.5), np.arange(0, 6, 0.5)))
    np.savetxt(tmp_path / "strain.csv", np.column_stack([x, y, np.full(x.size, -0.6e-3),
                                                         np.full(x.size, 2.0e-3), np.zeros(x.size)]),
               delimiter=",", header="x,y,exx,eyy,gxy", comments="")
    text = f'''material_library = "{(ROOT / "configs" / "materials.toml").as_posix()}"
[laminate]
layup = "[0/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
[registration]
method = "affine"
dic_points = [[0.0, 0.0], [7.0, 0.0], [0.0, 5.0], [7.0, 5.0]]
ir_points = [[0.0, 11.0], [14.0, 11.0], [0.0, 1.0], [14.0, 1.0]]
[output]
figures = false
report = false
[compute]
scheduler = "synchronous"
'''
    for name, frames_key, extra in (("npy", "ir.npy", ""), ("tif", "tif", f"frame_count = {FRAMES}"),
                                    ("csv", "csv/*.csv", 'decimal = ","')):
        text += f'''
[[run]]
name = "{name}"
frequency = "{FREQ} Hz"
[run.thermal]
frames = "{frames_key}"
frame_rate = "{RATE} Hz"
load = "load.csv"
{extra}
[run.dic]
strain_ranges = "strain.csv"
'''
    cfg = tmp_path / "c.toml"
    cfg.write_text(text)
    outcome = run_campaign(cfg, out=tmp_path / "out")
    assert outcome.ok, outcome.describe()
    lines = check_campaign(cfg)
    assert f"{FRAMES} frames of {ROWS}x{COLS} float32 in {FRAMES} tiff files" in lines[2], lines
    assert f"{FRAMES} frames of {ROWS}x{COLS} float32 in {FRAMES} text files" in lines[3], lines
    results = {n: xr.open_dataset(tmp_path / "out" / n / "result.nc") for n in ("npy", "tif", "csv")}
    try:
        ref = results["npy"]
        for name in ("tif", "csv"):
            for var in ref.data_vars:
                np.testing.assert_array_equal(results[name][var].values, ref[var].values, err_msg=f"{name} {var}")
        v = ref["valid"].values.astype(bool)
        # lock-in noise of the in-phase range: 2 sigma sqrt(2/N) per pixel (least squares on N
        # samples of a cosine, common practice); the median over pixels is far tighter still
        tol = 5 * 2 * SIGMA * np.sqrt(2 / FRAMES)
        assert abs(np.median(ref["delta_T"].values[v]) - (-0.2)) < tol
    finally:
        for ds in results.values():
            ds.close()


# ------------------------------------------------------------------------------ listing and order
def test_natural_order_gaps_and_pattern(tmp_path):
    """Not a physics check: file plumbing. f_2 comes before f_10; a gap is reported with the
    files either side; a pattern takes only what it matches; hidden files are left out."""
    d = tmp_path / "seq"
    d.mkdir()
    for i in (1, 2, 3, 10, 11):
        np.save(d / f"f_{i}.npy", np.full((3, 4), i, np.uint16))
    np.save(d / ".f_5.npy", np.zeros((3, 4), np.uint16))       # a copy tool's temporary file
    seq = list_sequence(d)
    assert [f.name for f in seq.files] == ["f_1.npy", "f_2.npy", "f_3.npy", "f_10.npy", "f_11.npy"]
    assert seq.numbers == (1, 2, 3, 10, 11) and seq.missing == 6
    assert "numbers 4..9 between f_3.npy and f_10.npy" in seq.describe_gaps()
    st = open_sequence(d)
    assert np.array_equal(st[:, 0, 0], [1, 2, 3, 10, 11]) and st[[4, 0]].shape == (2, 3, 4)
    assert [f.name for f in list_sequence(d / "f_1*.npy").files] == ["f_1.npy", "f_10.npy", "f_11.npy"]


def test_a_gap_with_frame_rate_names_the_file_after_it(tmp_path, rng):
    frames = _frames(rng, n=20)
    _write_tiffs(tmp_path / "ir", frames)
    (tmp_path / "ir" / "frame_0007.tif").unlink()
    cfg = _thermal_config(tmp_path, 'frames = "ir"\nframe_rate = "50 Hz"')
    spec = load_config(cfg).runs[0].thermal
    st = open_thermal_frames(spec)
    with pytest.raises(InputError, match=r"frame_0008\.tif: comes after frame_0006\.tif .* number 7 .*mistimed"):
        frame_times(spec, st, None)


def test_times_per_file_make_a_gap_harmless(tmp_path, rng):
    """Not a physics check: file plumbing. With a times table by file name (in ms, our column
    names mapped) the frames either side of a gap keep their own times."""
    frames = _frames(rng, n=10)
    _write_tiffs(tmp_path / "ir", frames)
    (tmp_path / "ir" / "frame_0004.tif").unlink()
    names = [f"frame_{i:04d}.tif" for i in range(10) if i != 4]
    rows = "\n".join(f"{n};{20.0 * int(n[6:10]):.1f}" for n in reversed(names))   # any row order
    (tmp_path / "t.csv").write_text("Filename;t [ms]\n" + rows + "\n")
    cfg = _thermal_config(tmp_path, 'frames = "ir"\ntimes = "t.csv"\ntime_unit = "1 ms"\n'
                                    'times_columns = { file = "Filename", time = "t [ms]" }')
    spec = load_config(cfg).runs[0].thermal
    t = frame_times(spec, open_thermal_frames(spec), None)
    expect = np.array([int(n[6:10]) * 0.02 for n in names])
    np.testing.assert_allclose(t, expect, rtol=0, atol=1e-12)


def test_times_from_the_names(tmp_path):
    """Not a physics check: file plumbing. The frame number is the last number outside the time."""
    d = tmp_path / "ir"
    d.mkdir()
    for i in range(6):
        np.save(d / f"cam2_{i:03d}_t{1000 + 2.5 * i:.1f}ms.npy", np.zeros((2, 2), np.float32))
    seq = list_sequence(d, name_time=r"_t([0-9.]+)ms", time_unit=1e-3)
    assert seq.numbers == tuple(range(6))
    np.testing.assert_allclose(seq.name_times, 1.0 + 0.0025 * np.arange(6), rtol=0, atol=1e-12)
    with pytest.raises(InputError, match=r"cam2_000_t1000\.0ms\.npy: its name does not match name_time"):
        list_sequence(d, name_time=r"_time([0-9]+)")


def test_times_table_by_index_and_in_order(tmp_path):
    d = tmp_path / "ir"
    d.mkdir()
    for i in (3, 4, 5):
        np.save(d / f"f{i}.npy", np.zeros((2, 2), np.float32))
    seq = list_sequence(d)
    (tmp_path / "idx.csv").write_text("index,time\n5,0.3\n3,0.1\n4,0.2\n")
    np.testing.assert_allclose(read_sequence_times(tmp_path / "idx.csv", seq), [0.1, 0.2, 0.3])
    (tmp_path / "plain.txt").write_text("0.1\n0.2\n0.3\n")
    np.testing.assert_allclose(read_sequence_times(tmp_path / "plain.txt", seq), [0.1, 0.2, 0.3])
    (tmp_path / "short.txt").write_text("0.1\n0.2\n")
    with pytest.raises(InputError, match=r"short\.txt: has 2 rows and no file or index column, .* holds 3 files"):
        read_sequence_times(tmp_path / "short.txt", seq)
    (tmp_path / "more.csv").write_text("index,time\n3,0.1\n4,0.2\n5,0.3\n6,0.4\n")
    with pytest.raises(InputError, match=r"more\.csv: lists index 6 .* a frame or image is missing"):
        read_sequence_times(tmp_path / "more.csv", seq)


# ------------------------------------------------------------------------------ formats
@pytest.mark.parametrize("dtype", ["uint8", "uint16", "int32", "uint32", "float32", "float64"])
@pytest.mark.parametrize("compression", [None, "zlib"])
def test_tiff_frames_of_every_depth(tmp_path, rng, dtype, compression):
    """Not a physics check: file plumbing. tifffile writes, the sequence reads the same values."""
    data = (rng.random((5, 7, 9)) * 200).astype(dtype)
    d = tmp_path / "t"
    d.mkdir()
    for i, f in enumerate(data):
        tifffile.imwrite(d / f"im{i}.tif", f, compression=compression)
    st = open_sequence(d)
    assert st.dtype == np.dtype(dtype) and st.shape == data.shape
    np.testing.assert_array_equal(st[:], data)
    np.testing.assert_array_equal(st[1:4, 2:5, 3], data[1:4, 2:5, 3])


def test_png_frames_16_and_8_bit(tmp_path, rng):
    """Not a physics check: file plumbing. OpenCV writes 16-bit grey PNGs, the sequence reads them."""
    data = (rng.random((4, 6, 5)) * 65535).astype(np.uint16)
    d = tmp_path / "p"
    d.mkdir()
    for i, f in enumerate(data):
        cv2.imwrite(str(d / f"p{i}.png"), f)
    st = open_sequence(d)
    assert st.dtype == np.uint16
    np.testing.assert_array_equal(st[:], data)
    cv2.imwrite(str(d / "p9.png"), np.zeros((6, 5, 3), np.uint8))
    with pytest.raises(InputError, match=r"p9\.png: is a RGB PNG; expected one grey frame"):
        open_sequence(d)


@pytest.mark.parametrize("delimiter,decimal,header,trailing", [
    (",", ".", False, False), (";", ",", True, False), ("\t", ".", True, True), (" ", ".", False, False),
    (";", ".", False, True)])
def test_text_grids_delimiters_headers_decimal_commas(tmp_path, rng, delimiter, decimal, header, trailing):
    """Not a physics check: file plumbing. Values written by NumPy with 3 decimals are read back
    exactly as NumPy's loadtxt parses the same numbers (then kept in float32, which holds them)."""
    data = np.round(295 + rng.random((3, 4, 5)), 3)
    d = tmp_path / "g"
    d.mkdir()
    for i, f in enumerate(data):
        body = "\n".join(delimiter.join(f"{v:.3f}" for v in row) + (delimiter if trailing else "") for row in f)
        if decimal == ",":
            body = body.replace(".", ",")
        (d / f"g{i}.txt").write_text(("time 12:00 frame\n" if header else "") + body + "\n")
    st = open_sequence(d, decimal=decimal)
    assert st.dtype == np.float32
    np.testing.assert_array_equal(st[:], data.astype(np.float32))


def test_text_grid_element_type_keeps_every_digit(tmp_path, rng):
    """Not a physics check: file plumbing. Counts stay 16-bit integers; values with more digits
    than float32 holds are kept in float64 (compared with NumPy's loadtxt of the same files)."""
    counts = rng.integers(0, 60000, (3, 4, 5))
    _write_grids(tmp_path / "counts", counts, delimiter=",", header=False, fmt="%d")
    assert open_sequence(tmp_path / "counts").dtype == np.uint16
    signed = rng.integers(-100, 30000, (3, 4, 5))
    signed[0] = -5                    # the first grid fits int16; a later one needs more
    signed[2, 0, 0] = 40000
    _write_grids(tmp_path / "signed", signed, delimiter=",", header=False, fmt="%d")
    st = open_sequence(tmp_path / "signed")
    assert st.dtype == np.float32
    np.testing.assert_array_equal(st[:], signed)
    fine = 295 + rng.random((3, 4, 5))
    _write_grids(tmp_path / "fine", fine, delimiter=",", header=False, fmt="%.12f")
    st = open_sequence(tmp_path / "fine")
    assert st.dtype == np.float64
    ref = np.stack([np.loadtxt(tmp_path / "fine" / f"g{i}.csv", delimiter=",") for i in range(3)])
    np.testing.assert_array_equal(st[:], ref)
    # one later file needs float64: the conversion starts again with it
    mixed = np.round(295 + rng.random((3, 4, 5)), 2)
    _write_grids(tmp_path / "mixed", mixed, delimiter=",", header=False, fmt="%.2f")
    (tmp_path / "mixed" / "g2.csv").write_text((tmp_path / "fine" / "g2.csv").read_text())
    st = open_sequence(tmp_path / "mixed")
    assert st.dtype == np.float64 and st[2][0, 0] == ref[2][0, 0]


def test_text_grids_converted_once_and_reused(tmp_path, rng, caplog, monkeypatch):
    """Not a physics check: the cache. The second open parses nothing and says it reuses the cache;
    a changed file is converted again; a copy of the folder (new times, same content) reuses it."""
    frames = _frames(rng, n=30)
    _write_grids(tmp_path / "g", frames)
    # the command line's handler (set up by other tests' main()) keeps fusion's records to itself
    monkeypatch.setattr(logging.getLogger("fusion"), "propagate", True)
    with caplog.at_level(logging.INFO, logger="fusion"):
        st = open_sequence(tmp_path / "g", progress=True)
    assert "converting 30 text grids" in caplog.text and "30/30 text grids converted (100 %)" in caplog.text
    assert str(st.memmap.filename).startswith(str(tmp_path / "cache"))
    np.testing.assert_array_equal(st[:], frames)
    calls = []
    real = _textgrids.parse_grid
    monkeypatch.setattr(_textgrids, "parse_grid", lambda *a, **k: calls.append(a) or real(*a, **k))
    caplog.clear()
    with caplog.at_level(logging.INFO, logger="fusion"):
        open_sequence(tmp_path / "g")
    assert not calls and "reusing the binary stack of 30 text grids" in caplog.text
    os.rename(tmp_path / "g", tmp_path / "copy")
    open_sequence(tmp_path / "copy")
    assert not calls
    frames[3, 0, 0] += 1
    _write_grids(tmp_path / "copy", frames[3:4], name="g3.csv")
    st = open_sequence(tmp_path / "copy")
    assert len(calls) == 30 and st[3][0, 0] == frames[3, 0, 0]


# ------------------------------------------------------------------------------ errors: one line naming the file
def test_a_frame_of_another_size_is_named(tmp_path, rng):
    _write_tiffs(tmp_path / "ir", _frames(rng, n=5))
    tifffile.imwrite(tmp_path / "ir" / "frame_0003.tif", np.zeros((ROWS, COLS + 1), np.float32))
    with pytest.raises(InputError, match=r"frame_0003\.tif: holds a 12x17 float32 frame, the first file "
                                         r"frame_0000\.tif a 12x16 float32 frame"):
        open_sequence(tmp_path / "ir")


def test_a_frame_of_another_type_is_named(tmp_path, rng):
    _write_tiffs(tmp_path / "ir", _frames(rng, n=5))
    tifffile.imwrite(tmp_path / "ir" / "frame_0002.tif", np.zeros((ROWS, COLS), np.uint16))
    with pytest.raises(InputError, match=r"frame_0002\.tif: holds a 12x16 uint16 frame"):
        open_sequence(tmp_path / "ir")


def test_a_grid_of_another_size_is_named(tmp_path, rng):
    frames = _frames(rng, n=4)
    _write_grids(tmp_path / "g", frames)
    _write_grids(tmp_path / "g", frames[:1, :, :-1], name="g2.csv")
    with pytest.raises(InputError, match=r"g2\.csv: holds a 12x15 grid, the first file g0\.csv a 12x16 grid"):
        open_sequence(tmp_path / "g")
    assert not list((tmp_path / "cache" / "text-grids").glob("*.npy"))


def test_a_name_without_a_number_is_named(tmp_path):
    d = tmp_path / "ir"
    d.mkdir()
    for n in ("a1.npy", "a2.npy", "last.npy"):
        np.save(d / n, np.zeros((2, 2), np.float32))
    with pytest.raises(InputError, match=r"last\.npy: has no number in its name"):
        open_sequence(d)


def test_two_files_with_one_number_are_named(tmp_path):
    d = tmp_path / "ir"
    d.mkdir()
    for n in ("a_1.npy", "b_1.npy"):
        np.save(d / n, np.zeros((2, 2), np.float32))
    with pytest.raises(InputError, match=r"b_1\.npy: has frame number 1, as a_1\.npy has"):
        open_sequence(d)


@pytest.mark.parametrize("kind", ["tif", "npy", "png", "csv"])
def test_a_truncated_or_unreadable_file_is_named(tmp_path, rng, kind):
    d = tmp_path / "ir"
    d.mkdir()
    data = (rng.random((4, 20, 30)) * 1000).astype(np.uint16)
    for i, f in enumerate(data):
        p = d / f"f{i}.{kind}"
        if kind == "tif":
            tifffile.imwrite(p, f)
        elif kind == "npy":
            np.save(p, f)
        elif kind == "png":
            cv2.imwrite(str(p), f)
        else:
            np.savetxt(p, f, delimiter=",", fmt="%d")
    p = d / f"f2.{kind}"
    raw = p.read_bytes()
    p.write_bytes(raw[: len(raw) // 2] + (b"x,y\n" if kind == "csv" else b""))
    with pytest.raises(InputError, match=rf"f2\.{kind}: "):
        open_sequence(d)[:]


def test_count_and_mixed_kinds(tmp_path, rng):
    _write_tiffs(tmp_path / "ir", _frames(rng, n=5))
    with pytest.raises(InputError, match=r"ir: holds 5 tiff frame files, frame_count says 6: the sequence is incomplete"):
        open_sequence(tmp_path / "ir", frame_count=6)
    (tmp_path / "ir" / "settings.txt").write_text("camera settings\n")
    assert len(open_sequence(tmp_path / "ir")) == 5      # a text beside binary frames is left out
    np.save(tmp_path / "ir" / "frame_0009.npy", np.zeros((2, 2)))
    with pytest.raises(InputError, match=r"ir: holds frame files of several kinds \(1 npy, 1 text, 5 tiff\)"):
        open_sequence(tmp_path / "ir")
    with pytest.raises(InputError, match=r"nothing-\*\.tif: matches no frame files"):
        open_sequence(tmp_path / "ir" / "nothing-*.tif")


def test_name_time_with_one_file_is_a_config_error(tmp_path, rng):
    np.save(tmp_path / "ir.npy", _frames(rng, n=20))
    cfg = _thermal_config(tmp_path, 'frames = "ir.npy"\nname_time = "_t([0-9]+)"')
    with pytest.raises(ConfigError, match=r"thermal\.name_time: reads times from the names of a folder"):
        open_thermal_frames(load_config(cfg).runs[0].thermal)


# ------------------------------------------------------------------------------ speckle images and their load log


def _images_config(tmp_path, dic):
    np.save(tmp_path / "ir.npy", np.zeros((20, 4, 4), np.float32))
    (tmp_path / "c.toml").write_text(ONE_PLY_RUN + f'''[run.thermal]
frames = "ir.npy"
frame_rate = "50 Hz"
[run.dic]
{dic}
{"" if "coordinates" in dic else 'coordinates = "px"'}
''')
    return load_config(tmp_path / "c.toml").runs[0].dic


def _thermal_config(tmp_path, thermal):
    (tmp_path / "strain.csv").write_text("x,y,exx,eyy,gxy\n0,0,0,0,0\n")
    (tmp_path / "c.toml").write_text(ONE_PLY_RUN + f'''[run.thermal]
{thermal}
[run.dic]
strain_ranges = "strain.csv"
coordinates = "px"
''')
    return tmp_path / "c.toml"


def _write_images(folder, n, names="img_{:03d}.png"):
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n):
        cv2.imwrite(str(folder / names.format(i)), np.full((8, 8), 10 * i, np.uint8))


def test_image_folder_with_load_log_reference_at_minimum_load(tmp_path):
    """Not a physics check: file plumbing. The reference is the image at minimum load, whatever
    its place in the folder; the log's columns are mapped onto ours."""
    _write_images(tmp_path / "vis", 4)
    (tmp_path / "vis" / "log.csv").write_text("File;Force [kN];t\nimg_000.png;5.0;0\nimg_001.png;1.0;1\n"
                                              "img_002.png;9.0;2\nimg_003.png;13.0;3\n")
    dic = _images_config(tmp_path, 'images = "vis"\nload_log = "vis/log.csv"\n'
                                   'load_log_columns = { image = "File", load = "Force [kN]", time = "t" }')
    im = speckle_images(dic)
    assert [p.name for p in im.paths] == ["img_001.png", "img_000.png", "img_002.png", "img_003.png"]
    np.testing.assert_array_equal(im.loads, [1.0, 5.0, 9.0, 13.0])
    np.testing.assert_array_equal(im.times, [1, 0, 2, 3])
    dic = _images_config(tmp_path, 'images = "vis/img_*.png"\nload_log = "vis/log.csv"\nreference = "img_002"\n'
                                   'load_log_columns = { image = "File", load = "Force [kN]" }')
    assert speckle_images(dic).paths[0].name == "img_002.png"
    dic = _images_config(tmp_path, 'images = "vis"\nloads = ["3 kN", "2 kN", "1 kN", "4 kN"]')
    assert speckle_images(dic).paths[0].name == "img_002.png"


def test_load_log_that_does_not_match_the_images(tmp_path):
    _write_images(tmp_path / "vis", 3)
    (tmp_path / "log.csv").write_text("image,load\nimg_000.png,1\nimg_001.png,2\n")
    dic = _images_config(tmp_path, 'images = "vis"\nload_log = "log.csv"')
    with pytest.raises(InputError, match=r"img_002\.png: has no row in the load log .*log\.csv"):
        speckle_images(dic)
    (tmp_path / "log.csv").write_text("image,load\nimg_000.png,1\nimg_001.png,2\nimg_002.png,3\nimg_003.png,4\n")
    with pytest.raises(InputError, match=r"img_003\.png: is listed in the load log .* but missing from"):
        speckle_images(dic)
    (tmp_path / "log.csv").write_text("index,load\n0,1\n1,2\n2,x\n")
    with pytest.raises(InputError, match=r"log\.csv: data row 4, column 'load': expected a number, got 'x'"):
        speckle_images(dic)
    (tmp_path / "log.csv").write_text("image,force\nimg_000.png,1\n")
    with pytest.raises(InputError, match=r"log\.csv: has no column 'load'; its columns are \['image', 'force'\]"):
        speckle_images(dic)


def test_image_folder_config_needs_loads(tmp_path):
    with pytest.raises(ConfigError, match=r"run 'r'\.dic\.load_log: an image folder or pattern needs its loads"):
        _images_config(tmp_path, 'images = "vis"')
    with pytest.raises(ConfigError, match=r"run 'r'\.dic\.load_log: applies to images given as a folder"):
        _images_config(tmp_path, 'images = ["a.png", "b.png"]\nloads = [1, 2]\nload_log = "l.csv"')


def test_image_folder_gives_the_ranges_of_the_same_images_listed(tmp_path):
    """Not a physics check: two code paths compared. Speckle images in a folder with a load log
    (reference not first) give the strain ranges of the same images listed with their loads;
    three states go through the slope fit, whose scatter is reported."""
    folder = tmp_path / "vis"
    folder.mkdir()
    loads = {"s_02.png": 0.0, "s_01.png": 1.0, "s_03.png": 2.0}     # s_02 is the reference
    for name, load in loads.items():
        img = speckle_image((96, 96), seed=4, bits=16, noise=20.0, noise_seed=int(load * 10) + 1,
                            displacement=lambda x, y, a=load: (2e-3 * a * (x - 48), -1e-3 * a * (y - 48)))
        cv2.imwrite(str(folder / name), img)
    (tmp_path / "log.csv").write_text("image,load\n" + "".join(f"{k},{v}\n" for k, v in loads.items()))
    listed = [f"vis/{k}" for k in ("s_02.png", "s_01.png", "s_03.png")]
    runs = {}
    for key, dic in (("folder", 'images = "vis"\nload_log = "log.csv"'),
                     ("list", f"images = {listed!r}\nloads = [0.0, 1.0, 2.0]".replace("'", '"'))):
        _images_config(tmp_path, dic + "\ncoordinates = \"px\"\nsubset = 21\nstep = 6\nstrain_window = 5")
        run = load_config(tmp_path / "c.toml").runs[0]
        runs[key] = strain_side(run)[0]
    a, b = runs["folder"], runs["list"]
    for name in ("exx", "eyy", "gxy", "exx_std"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert a.attrs["states"] == 3 and a.attrs["fit_scatter_exx"] > 0


# ------------------------------------------------------------------------------ what watch asks
def test_input_state_waits_for_count_and_marker(tmp_path, rng):
    """Not a physics check: file plumbing. A sequence is complete at its count or its marker."""
    _write_tiffs(tmp_path / "ir", _frames(rng, n=3))
    (tmp_path / "load.csv").write_text("time,load\n")
    cfg = _thermal_config(tmp_path, 'frames = "ir"\nframe_rate = "50 Hz"\nframe_count = 4')
    state = input_state(load_config(cfg).runs[0])
    assert not state.ready and "3 of 4 frames" in state.waiting_for
    _write_tiffs(tmp_path / "ir", _frames(rng, n=1), start=3)
    state2 = input_state(load_config(cfg).runs[0])
    assert state2.ready and state2.signature != state.signature
    cfg = _thermal_config(tmp_path, 'frames = "ir"\nframe_rate = "50 Hz"\ndone_marker = "ir/DONE"')
    assert "DONE (4 frames so far)" in input_state(load_config(cfg).runs[0]).waiting_for
    (tmp_path / "ir" / "DONE").write_text("")
    assert input_state(load_config(cfg).runs[0]).ready
    assert len(open_sequence(tmp_path / "ir", exclude=[tmp_path / "ir" / "DONE"])) == 4


def test_a_frame_folder_has_one_input_digest_and_each_member_is_read_once(tmp_path, rng, monkeypatch):
    """Not a physics check: provenance plumbing. A folder of frames is one entry of the input
    digests (over its members' names and contents, so a changed member changes it), and a run
    of a campaign reads each member once for its stamp and its provenance together."""
    import json

    from fusion.campaign import _provenance
    from fusion.run import input_digests

    _write_tiffs(tmp_path / "ir", _frames(rng))
    t = np.arange(FRAMES) / RATE
    np.savetxt(tmp_path / "load.csv", np.column_stack([t, 11.0 + 4.5 * np.cos(2 * np.pi * FREQ * t)]),
               delimiter=",", header="time,load", comments="")
    cfg = _thermal_config(tmp_path, f'frames = "ir"\nframe_rate = "{RATE} Hz"\nload = "load.csv"')
    x, y = (a.ravel() for a in np.meshgrid(np.arange(COLS, dtype=float), np.arange(ROWS, dtype=float)))
    np.savetxt(tmp_path / "strain.csv", np.column_stack([x, y, np.full(x.size, 1e-3), np.zeros(x.size),
                                                         np.zeros(x.size)]),
               delimiter=",", header="x,y,exx,eyy,gxy", comments="")
    run = load_config(cfg).runs[0]
    got = input_digests(run)
    assert [k for k in got if "ir" in os.path.basename(k)] == [str(tmp_path / "ir")]
    _write_tiffs(tmp_path / "ir", _frames(rng, n=1), start=2)
    assert input_digests(run)[str(tmp_path / "ir")] != got[str(tmp_path / "ir")]

    calls = []
    real = _provenance.content_digest
    monkeypatch.setattr(_provenance, "content_digest", lambda p: calls.append(os.path.basename(p)) or real(p))
    outcome = run_campaign(cfg, out=tmp_path / "out")
    assert outcome.ok, outcome.describe()
    members = [c for c in calls if c.startswith("frame_")]
    assert sorted(members) == [f"frame_{i:04d}.tif" for i in range(FRAMES)]
    summary = json.loads((tmp_path / "out" / "r" / "summary.json").read_text())
    assert summary["provenance"]["inputs"][str(tmp_path / "ir")] == input_digests(run)[str(tmp_path / "ir")]


def test_list_images_takes_only_images(tmp_path):
    _write_images(tmp_path / "vis", 3)
    (tmp_path / "vis" / "log.csv").write_text("image,load\n")
    assert len(list_images(tmp_path / "vis")) == 3


def test_read_load_log_in_order(tmp_path):
    _write_images(tmp_path / "vis", 3)
    seq = list_images(tmp_path / "vis")
    (tmp_path / "log.txt").write_text("# capture log\nload time\n2 0.0\n4 1.0\n6 2.0\n")
    loads, times = read_load_log(tmp_path / "log.txt", seq)
    np.testing.assert_array_equal(loads, [2, 4, 6])
    np.testing.assert_array_equal(times, [0, 1, 2])


@pytest.mark.parametrize("kind", ["tif", "npy", "png", "csv"])
def test_random_bytes_pipes_and_folders_in_a_sequence(tmp_path, rng, kind):
    """Hostile files among the frames: random bytes are refused naming the file; a named pipe
    and a sub-folder with a frame's name are not frames (never opened, so nothing blocks)."""
    d = tmp_path / "ir"
    d.mkdir()
    data = (rng.random((3, 6, 5)) * 1000).astype(np.uint16)
    for i, f in enumerate(data):
        p = d / f"f{i}.{kind}"
        {"tif": lambda: tifffile.imwrite(p, f), "npy": lambda: np.save(p, f),
         "png": lambda: cv2.imwrite(str(p), f), "csv": lambda: np.savetxt(p, f, delimiter=",", fmt="%d")}[kind]()
    os.mkfifo(d / f"f7.{kind}")
    (d / f"f8.{kind}").mkdir()
    np.testing.assert_array_equal(open_sequence(d)[:], data)
    (d / f"f3.{kind}").write_bytes(rng.integers(0, 256, 4000, dtype=np.uint8).tobytes())
    with pytest.raises(InputError, match=rf"f3\.{kind}: "):
        open_sequence(d)[:]
