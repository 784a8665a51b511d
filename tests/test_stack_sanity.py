"""Frame stacks that read without error but mean something else: clipped values, scrambled layouts.

References: an independent forward model of the frames (``_inputs.py``) with its clipping done by
numpy (``np.minimum`` / ``np.maximum``, so which pixels reach a clip level is counted by numpy on
the unclipped truth), and byte layouts written by numpy (``tofile``) in the wrong order on purpose.
"""

import numpy as np
import pytest

from fusion.cli import main
from fusion.config import load_config
from fusion.errors import InputError
from fusion.io import open_frames
from fusion.run import compute_run
from fusion.run._thermal import thermal_side
from fusion.thermal import clip_levels, layout_problem, lockin, sample_frames

from _inputs import COLS, ROWS, wave, write_config, write_load, write_strain

F, RATE, N = 150.0, 383.0, 1000      # a fast load filmed fast: one frame is 141 degrees of the cycle


def _scene():
    """A T0 map with structure: a gradient across the columns, a warm disc, a cool strip."""
    r, c = np.mgrid[0:ROWS, 0:COLS]
    T = 295.0 + 2.0 * c / COLS + 4.0 * (np.hypot(r - 20, c - 30) < 6)
    T[:, :4] -= 3.0
    return T


def _frames(rng, *, dT=-0.2, sigma=0.02, scene=None):
    t = np.arange(N) / RATE
    T0 = _scene() if scene is None else scene
    return (T0[None] + wave(t, F, dT)[:, None, None]
            + sigma * rng.standard_normal((N, ROWS, COLS))).astype(np.float32)


def _inputs(folder, frames_name="ir.npy", thermal='frame_rate = "383 Hz"'):
    t_load = np.arange(int(N / RATE * 4000) + 1) / 4000.0
    write_load(folder / "load.csv", t_load, F)
    write_strain(folder / "strain.csv")
    return write_config(folder, run=f'frequency = "{F:g} Hz"', thermal=thermal, frames=frames_name)


# ------------------------------------------------------------------------ clipping
def test_partly_clipped_pixels_are_masked_and_counted(tmp_path, rng):
    truth = _frames(rng)
    clip = np.float32(296.0)                 # the detector's top value, no saturation key
    np.save(tmp_path / "ir.npy", np.minimum(truth, clip))
    reach = (truth >= clip).any(axis=0)      # numpy on the unclipped truth
    partly = reach & ~(truth >= clip).all(axis=0)
    assert partly.sum() > 100
    cfg = load_config(_inputs(tmp_path))
    # what the lock-in gives on them without the check: ranges cut by up to the whole signal
    blind = lockin(np.load(tmp_path / "ir.npy"), frequency=F, frame_rate=RATE, clipping="ignore")
    assert blind.valid[partly].all()
    assert np.max(np.abs(blind.delta_T[partly] / -0.2 - 1)) > 0.5
    res = compute_run(cfg, cfg.runs[0])
    bad = res.meta["thermal"]["bad_pixels"]
    assert bad["clipped"] == int(reach.sum()) and bad["saturated"] == 0
    assert any("pile up at their highest raw value 296" in w for w in res.warnings)
    maps, valid, _, _ = thermal_side(cfg.runs[0], budget=2e9)
    assert not valid[reach].any() and valid[~reach].all()
    # every pixel left is right: 6 sigma of the per-pixel noise sigma sqrt(8/N) = 1.8 mK
    assert np.max(np.abs(maps["delta_T"][valid] + 0.2)) < 6 * 0.02 * np.sqrt(8 / N)


def test_counts_clipped_at_zero_are_found_at_the_bottom(rng):
    # independent reference: numpy counts the samples at the clip level on the unclipped truth
    t = np.arange(400) / 50.0
    counts = 40.0 + np.linspace(-60, 200, 24)[None, None, :] + wave(t, 5.0, 30.0)[:, None, None]
    counts = counts + 3.0 * rng.standard_normal((400, 8, 24))
    raw = np.clip(np.rint(counts), 0, None).astype(np.uint16)
    assert clip_levels(sample_frames(raw)[1]) == (None, 0.0)
    r = lockin(raw, frequency=5.0, frame_rate=50.0)
    reach = (counts <= 0).any(axis=0) | (np.rint(counts) <= 0).any(axis=0)
    assert r.bad_pixels["clipped"] == int(reach.sum()) > 0
    assert not r.valid[reach].any()


@pytest.mark.parametrize("case", ["float noise", "uint16 noise", "noise-free cosine", "uint8 narrow", "scene"])
def test_no_clip_level_where_nothing_is_clipped(case, rng):
    # independent reference: numpy-made stacks with no sample at a clip level
    t = np.arange(600) / 50.0
    if case == "float noise":
        s = (295 + 0.02 * rng.standard_normal((600, 16, 20))).astype(np.float32)
    elif case == "uint16 noise":
        s = np.rint(13000 + 10 * rng.standard_normal((600, 16, 20))).astype(np.uint16)
    elif case == "noise-free cosine":     # every pixel hits the same extreme values exactly
        s = (293.0 - 0.5 * np.cos(2 * np.pi * 5.0 * t))[:, None, None] * np.ones((1, 2, 3))
    elif case == "uint8 narrow":
        s = np.rint(128 + 0.7 * rng.standard_normal((600, 16, 20))).astype(np.uint8)
    else:
        s = _frames(rng)[:600]
    assert clip_levels(sample_frames(s)[1]) == (None, None)


# ------------------------------------------------------------------------ scrambled layouts
def _counts(truth):
    return np.rint((truth - 270.0) / 0.002).astype(np.int16)   # counts of 2 mK from 270 K


COUNTS = 'values = "counts"\ngain = "2 mK"\noffset = "270 K"\nframe_rate = "383 Hz"\ndtype = "int16"\n'


def test_a_header_read_as_a_frame_is_refused(tmp_path, rng, capsys):
    # independent reference: a byte layout written by numpy (tofile) one frame off on purpose
    raw = _counts(_frames(rng))
    header = np.zeros(ROWS * COLS, np.int16)
    header[:16] = np.frombuffer(b"CAMERA HEADER v2 2048 frames ...", np.int16)
    with open(tmp_path / "ir.raw", "wb") as fh:    # a header exactly one frame long
        header.tofile(fh)
        raw.tofile(fh)
    # header_bytes one frame short, and the frame count taken from the file size
    cfg = _inputs(tmp_path, "ir.raw", COUNTS + f"shape = [{N + 1}, {ROWS}, {COLS}]\nheader_bytes = 0")
    misread = open_frames(tmp_path / "ir.raw", dtype="int16", shape=(N + 1, ROWS, COLS))
    blind = lockin(np.asarray(misread[:N]), frequency=F, frame_rate=RATE, gain=0.002, clipping="ignore")
    assert np.median(blind.delta_T) > 0 > -0.2      # the case: the sign of dT flips
    with pytest.raises(InputError, match=r"ir\.raw: the frames look scrambled: its first frame departs from the "
                                         rf"others .*check header_bytes \(one frame is {ROWS * COLS * 2} bytes\)"):
        thermal_side(load_config(cfg).runs[0], budget=2e9)
    assert main(["check", str(cfg)]) == 1
    assert "its first frame departs from the others" in capsys.readouterr().err
    # the right header: the right sign
    cfg = _inputs(tmp_path, "ir.raw", COUNTS + f"shape = [{N}, {ROWS}, {COLS}]\nheader_bytes = {ROWS * COLS * 2}")
    maps, valid, _, _ = thermal_side(load_config(cfg).runs[0], budget=2e9)
    assert np.median(maps["delta_T"][valid]) == pytest.approx(-0.2, rel=0.01)


def test_rows_and_columns_swapped_are_refused(tmp_path, rng, capsys):
    # independent reference: a byte layout written by numpy (tofile) read with rows and columns swapped
    _counts(_frames(rng)).tofile(tmp_path / "ir.raw")
    cfg = _inputs(tmp_path, "ir.raw", COUNTS + f"shape = [{N}, {COLS}, {ROWS}]")   # same byte count
    with pytest.raises(InputError, match=rf"ir\.raw: the frames look scrambled: its mean frame read as {COLS} rows "
                                         rf"of {ROWS} is .* times rougher than read as {ROWS} rows of {COLS}; rows "
                                         r"and columns look swapped: check shape"):
        thermal_side(load_config(cfg).runs[0], budget=2e9)
    assert main(["check", str(cfg)]) == 1
    assert "rows and columns look swapped" in capsys.readouterr().err


def test_rows_and_columns_swapped_on_a_flat_specimen_are_refused(rng):
    # independent reference: a numpy-made scene without texture (a uniform specimen on a cooler
    # background, as an infrared camera sees a coupon) read with rows and columns swapped. Its
    # noise makes the median difference of neighbours alike both ways; the mean difference shows
    # the specimen's edges sheared across every read row (the case: a 640 x 512 camera typed
    # shape = [n, 640, 512] went through to a verdict)
    r, c = np.mgrid[0:ROWS, 0:COLS]
    T = 293.0 + 4.0 * ((np.abs(r - ROWS / 2) < ROWS / 3) & (np.abs(c - COLS / 2) < COLS / 4))
    frames = _frames(rng, scene=T, sigma=0.05)
    idx, sample = sample_frames(frames)
    assert layout_problem(sample, indices=idx) is None
    swapped = frames.reshape(N, COLS, ROWS)
    kind, detail = layout_problem(sample_frames(swapped)[1], indices=idx)
    assert kind == "swapped" and f"read as {COLS} rows of {ROWS}" in detail


def test_a_wrong_row_length_is_refused(tmp_path, rng):
    # 40 x 48 frames read as 30 x 64 (same bytes): every read row wraps over a scene row and a third
    _counts(_frames(rng, scene=_scene() + 8.0 * (np.mgrid[0:ROWS, 0:COLS][0] > 20))).tofile(tmp_path / "ir.raw")
    cfg = _inputs(tmp_path, "ir.raw", COUNTS + f"shape = [{N}, 30, 64]")
    with pytest.raises(InputError, match=r"ir\.raw: the frames look scrambled: neighbouring rows of its mean frame "
                                         r"differ .*the row length is wrong: check shape"):
        thermal_side(load_config(cfg).runs[0], budget=2e9)


@pytest.mark.parametrize("scene", ["specimen", "horizontal bands", "vertical bands", "flat coupon", "noise only"])
def test_layouts_that_are_right_pass(scene, rng):
    # independent reference: numpy-made scenes that are right (no false alarm)
    r, c = np.mgrid[0:ROWS, 0:COLS]
    T = {"specimen": _scene(), "horizontal bands": 295.0 + 3.0 * ((r // 8) % 2),
         "vertical bands": 295.0 + 3.0 * ((c // 8) % 2),
         "flat coupon": 293.0 + 4.0 * ((np.abs(r - 20) < 12) & (np.abs(c - 24) < 5)),
         "noise only": np.full((ROWS, COLS), 295.0)}[scene]
    idx, sample = sample_frames(_frames(rng, scene=T))
    assert layout_problem(sample, indices=idx) is None
