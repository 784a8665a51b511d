"""A frame stack four times the configured memory budget goes through a whole run within it.

The run is made in a fresh subprocess that measures its own resident memory: first the baseline
(interpreter, NumPy, numba, xarray and the compiled kernels, after a warm-up run of a small stack),
then the peak during the large run. The peak high-water mark is reset between the two through
/proc/self/clear_refs (Linux >= 4.0) so that the warm-up cannot hide the large run; without it the
check falls back to resource.getrusage(RUSAGE_SELF).ru_maxrss. A run that loaded the stack whole
would add its 201 MB (or more as float64) and fail the check.
"""

import json
import re
import subprocess
import sys

import numpy as np
import pytest

from _inputs import IDENTITY_HEAD, ROOT, config_head, write_strain

ROWS = COLS = 128
BIG_FRAMES = 3072               # 3072 x 128 x 128 float32 = 201 MB
SMALL_FRAMES = 256
BUDGET = 50e6                   # "50 MB": the stack is 4.0 times the budget
T0, AMPLITUDE, SIGMA = 295.0, -0.12, 0.02   # K: mean, signed range dT, frame noise
FREQ, RATE = 5.0, 50.0
# The stated margin: memory of a run that scales with the pixels, not with the frames (float64
# lock-in sums, ~60 float32 maps of result.nc, the 16k-point strain table, registration and
# diagnosis temporaries, the motion field and spline coefficients). Measured in the same subprocess
# as the increase of a run of the 16-times-smaller stack (SMALL_FRAMES, itself 16 MB): 20 MB for
# the lock-in, 37 MB with motion compensation, for 128 x 128 pixels (1.2 and 2.3 kB per pixel).
# 45 MB covers both with allocator slack and stays far below the 201 MB a whole-stack read adds.
PIXEL_MARGIN = 45e6

_PROBE = r"""
import json, re, resource, sys
from pathlib import Path

def status():
    text = Path("/proc/self/status").read_text()
    return {k: int(re.search(k + r":\s+(\d+) kB", text).group(1)) * 1024 for k in ("VmRSS", "VmHWM")}

def reset_peak():
    try:
        Path("/proc/self/clear_refs").write_text("5")   # the peak restarts from the current RSS
        return True
    except OSError:
        return False

def measured(name, **kw):
    reset = reset_peak()
    before = status()["VmRSS"]
    outcome = process_run(cfg, name, out, **kw)
    peak = status()["VmHWM"] if reset else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    return outcome, before, peak, reset

import fusion.campaign, fusion.run  # noqa: E401  (the libraries of a run, imported up front)
from fusion.campaign import process_run

cfg, out = sys.argv[1], sys.argv[2]
warm = process_run(cfg, "small", out)           # compiles or loads every kernel a run calls
small, small_before, small_peak, _ = measured("small", overwrite=True)
big, before, peak, reset = measured("big")
print(json.dumps({"warm": warm.status, "small": small.status, "status": big.status, "error": big.error,
                  "reset": reset, "baseline": before, "peak": peak,
                  "small_increase": small_peak - small_before}))
"""


def _write_stack(path, frames, rng):
    """T0 + (dT/2) cos(2 pi f t) + white noise, written block by block (never whole in memory)."""
    t = np.arange(frames) / RATE
    mm = np.lib.format.open_memmap(path, mode="w+", dtype=np.float32, shape=(frames, ROWS, COLS))
    for f0 in range(0, frames, 256):
        f1 = min(frames, f0 + 256)
        wave = T0 + 0.5 * AMPLITUDE * np.cos(2 * np.pi * FREQ * t[f0:f1])
        mm[f0:f1] = (wave[:, None, None] + SIGMA * rng.standard_normal((f1 - f0, ROWS, COLS))).astype(np.float32)
    mm.flush()
    del mm
    return t


def _write_campaign(folder, rng, *, motion):
    t_big = _write_stack(folder / "big.npy", BIG_FRAMES, rng)
    t_small = _write_stack(folder / "small.npy", SMALL_FRAMES, rng)
    for name, t in (("big", t_big), ("small", t_small)):
        np.savetxt(folder / f"{name}_load.csv", np.column_stack([t, 11.0 + 4.5 * np.cos(2 * np.pi * FREQ * t)]),
                   delimiter=",", header="time,load", comments="")
    # correlation grid in mm (y up) covering the IR frame: IR col = 2 x, row = 127 - 2 y
    x, y = (a.ravel() for a in np.meshgrid(np.arange(0, 64, 0.5), np.arange(0, 64, 0.5)))
    exx, eyy = -0.6e-3, 2.0e-3
    write_strain(folder / "strain.csv", exx, eyy, points=(x, y))
    for tag, frac in (("min", 0.0), ("max", 1.0)):
        # displacement of a uniform strain field, mm: u = exx x, v = eyy y
        np.savetxt(folder / f"state_{tag}.csv", np.column_stack([x, y, frac * exx * x, frac * eyy * y]),
                   delimiter=",", header="x,y,u,v", comments="")
    dic = ('states = ["state_min.csv", "state_max.csv"]' if motion else 'strain_ranges = "strain.csv"')
    text = config_head(dic_points=[[0.0, 0.0], [60.0, 0.0], [0.0, 60.0], [60.0, 60.0]],
                       ir_points=[[0.0, 127.0], [120.0, 127.0], [0.0, 7.0], [120.0, 7.0]]) + '''[compute]
memory_budget = "50 MB"
[output]
figures = false
report = false
'''
    for name in ("big", "small"):
        text += f'''
[[run]]
name = "{name}"
frequency = "{FREQ} Hz"
[run.thermal]
frames = "{name}.npy"
frame_rate = "{RATE} Hz"
load = "{name}_load.csv"
motion_compensation = {"true" if motion else "false"}
[run.dic]
{dic}
coordinates = "mm"
'''
    cfg = folder / "c.toml"
    cfg.write_text(text)
    return cfg


@pytest.mark.parametrize("motion", [False, pytest.param(True, marks=pytest.mark.slow)],
                         ids=["lockin", "motion-compensated"])   # the warp of 3072 frames takes ~15-25 s
def test_stack_four_times_the_budget_stays_within_it(tmp_path, rng, motion):
    cfg = _write_campaign(tmp_path, rng, motion=motion)
    stack_bytes = BIG_FRAMES * ROWS * COLS * 4
    assert stack_bytes >= 4 * BUDGET
    out = tmp_path / "out"
    out.mkdir()
    r = subprocess.run([sys.executable, "-c", _PROBE, str(cfg), str(out)], capture_output=True, text=True,
                       cwd=ROOT, timeout=300)
    assert r.returncode == 0, r.stderr[-3000:]
    m = json.loads(r.stdout.strip().splitlines()[-1])
    assert m["warm"] == m["small"] == m["status"] == "done", m
    increase = m["peak"] - m["baseline"]
    where = (f"peak {m['peak'] / 1e6:.0f} MB, {increase / 1e6:.0f} MB over the baseline "
             f"{m['baseline'] / 1e6:.0f} MB (small stack: {m['small_increase'] / 1e6:.0f} MB)")
    # the promised bound: the baseline (interpreter + libraries + kernels, measured before the
    # run) plus the budget plus the stated per-pixel margin
    assert increase <= BUDGET + PIXEL_MARGIN, where
    # and the same without the stated margin: what the 4x larger-than-budget stack needs on top
    # of what a stack 16 times smaller needs is within the budget
    assert increase - m["small_increase"] <= BUDGET, where

    import xarray as xr

    with xr.open_dataset(out / "big" / "result.nc") as ds:
        dT = ds["delta_T"].values
        valid = ds["valid"].values.astype(bool)
    # independent forward model: the stack is T0 + (dT/2) cos(2 pi f t) + N(0, SIGMA), so the
    # lock-in's signed range must return dT. Per pixel its std is SIGMA sqrt(8/N) (Kay 1993, ch. 4:
    # each quadrature amplitude has variance 2 sigma^2/N, doubled for the peak-to-peak range):
    # 1.0 mK; the mean over > 10^4 pixels is then within 0.1 mK. 1 mK allows for the B-spline
    # warp of the motion-compensated case, which smooths the noise but not the uniform signal.
    assert valid.mean() > 0.9
    assert abs(float(np.mean(dT[valid])) - AMPLITUDE) < 1e-3
    per_pixel = SIGMA * np.sqrt(8 / BIG_FRAMES)
    assert float(np.std(dT[valid])) < 1.5 * per_pixel  # Kay (1993): white-noise bound, 50 % slack


# ------------------------------------------------------------------ headers checked against the budget
def _header_campaign(folder, frames_name, budget=None):
    """A one-run campaign on ``frames_name`` (a strain table on an identity registration)."""
    (folder / "strain.csv").write_text("x,y,exx,eyy,gxy\n0,0,1e-3,0,0\n1,0,1e-3,0,0\n0,1,1e-3,0,0\n"
                                       "1,1,1e-3,0,0\n")
    compute = f'[compute]\nmemory_budget = "{budget}"\nscheduler = "synchronous"\n' if budget else \
        '[compute]\nscheduler = "synchronous"\n'
    cfg = folder / "c.toml"
    cfg.write_text(IDENTITY_HEAD + f'''{compute}[output]
figures = false
report = false
[[run]]
name = "r"
frequency = "{FREQ} Hz"
[run.thermal]
frames = "{frames_name}"
frame_rate = "{RATE} Hz"
[run.dic]
strain_ranges = "strain.csv"
coordinates = "px"
''')
    return cfg


def _check_and_run_refuse(cfg, tmp_path, match):
    from fusion.campaign import check_campaign, run_campaign
    from fusion.errors import InputError

    with pytest.raises(InputError, match=match):
        check_campaign(cfg)
    outcome = run_campaign(cfg, out=tmp_path / "out")
    assert not outcome.ok
    assert re.search(match, outcome.runs[0].error), outcome.runs[0].error


def test_a_sparse_npy_promising_a_huge_frame_is_refused_from_its_header(tmp_path):
    """Not a physics check: memory safety. An .npy header promising 10^12 values (frames of
    500000 x 500000 px) on a sparse file of that size is refused by `check` and `run` alike,
    naming the memory budget, before anything the header promises is allocated or read."""
    shape = (4, 500_000, 500_000)
    path = tmp_path / "ir.npy"
    with open(path, "wb") as fh:
        np.lib.format.write_array_header_1_0(fh, {"descr": "|i1", "fortran_order": False, "shape": shape})
        fh.truncate(fh.tell() + int(np.prod(shape, dtype=np.float64)))   # sparse: no block written
    cfg = _header_campaign(tmp_path, "ir.npy")
    _check_and_run_refuse(cfg, tmp_path, r"ir\.npy.*500000x500000 px.*memory_budget")


def test_a_compressed_tiff_of_large_pages_is_refused_before_a_page_is_decoded(tmp_path, monkeypatch):
    """Not a physics check: memory safety. A small zlib-compressed TIFF whose two pages decode to
    far more than the memory budget is refused by `check` and `run` alike from its header: no
    page is decoded (decoding would fail this test)."""
    import tifffile

    path = tmp_path / "ir.tif"
    tifffile.imwrite(path, np.zeros((2, 3000, 3000), np.float32), compression="zlib")
    assert path.stat().st_size < 1e6

    def no_decode(*args, **kwargs):
        raise AssertionError("a page was decoded")

    monkeypatch.setattr(tifffile.TiffPage, "asarray", no_decode)
    monkeypatch.setattr(tifffile.TiffFile, "asarray", no_decode)
    cfg = _header_campaign(tmp_path, "ir.tif", budget="100 MB")
    _check_and_run_refuse(cfg, tmp_path, r"ir\.tif.*3000x3000 px.*memory_budget = 100 MB")


def test_a_truncated_tiff_of_large_pages_is_named_without_decoding(tmp_path, monkeypatch):
    """Not a physics check: file plumbing. Pages too large to decode at opening are checked for a
    truncated copy from the header (the last page's byte ranges past the end of the file)."""
    import tifffile

    from fusion.errors import InputError
    from fusion.io import open_frames

    path = tmp_path / "ir.tif"
    tifffile.imwrite(path, np.ones((2, 3000, 3000), np.float32), compression="zlib")
    monkeypatch.setattr(tifffile.TiffPage, "asarray", lambda *a, **k: pytest.fail("a page was decoded"))
    monkeypatch.setattr(tifffile.TiffFile, "asarray", lambda *a, **k: pytest.fail("a page was decoded"))
    assert open_frames(path).shape == (2, 3000, 3000)
    with open(path, "r+b") as fh:
        fh.truncate(path.stat().st_size - 100)
    with pytest.raises(InputError, match=r"ir\.tif.*truncated"):
        open_frames(path)


def test_a_folder_of_large_frames_is_refused_before_a_member_is_read(tmp_path, monkeypatch):
    """Not a physics check: memory safety. A folder of small zlib-compressed TIFF frames that each
    decode to more than the memory budget allows is refused by `check` and `run` from the first
    member's header: no page is decoded and no member is read whole for the run's digest."""
    import tifffile

    import fusion.campaign._provenance as provenance

    folder = tmp_path / "ir"
    folder.mkdir()
    for i in range(3):
        tifffile.imwrite(folder / f"frame_{i:03d}.tif", np.zeros((3000, 3000), np.float32), compression="zlib")

    def no_decode(*args, **kwargs):
        raise AssertionError("a page was decoded")

    def no_digest(*args, **kwargs):
        raise AssertionError("a member was read for its digest")

    monkeypatch.setattr(tifffile.TiffPage, "asarray", no_decode)
    monkeypatch.setattr(tifffile.TiffFile, "asarray", no_decode)
    monkeypatch.setattr(provenance, "content_digest", no_digest)
    cfg = _header_campaign(tmp_path, "ir", budget="100 MB")
    _check_and_run_refuse(cfg, tmp_path, r"3000x3000 px.*memory_budget = 100 MB")


def _png_header_only(path, rows, cols):
    """A PNG whose header promises rows x cols grey pixels and holds no image data."""
    import struct
    import zlib

    ihdr = struct.pack(">IIBBBBB", cols, rows, 8, 0, 0, 0, 0)
    chunk = struct.pack(">I", len(ihdr)) + b"IHDR" + ihdr + struct.pack(">I", zlib.crc32(b"IHDR" + ihdr))
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk)


def test_speckle_images_too_large_to_correlate_are_refused_from_their_header(tmp_path):
    """Not a physics check: memory safety. Speckle images whose header promises 8000 x 8000 px
    (about 5 GB to correlate) under a 1 GB budget are refused by `check` and `run` alike naming
    the budget, before an image is decoded (these files hold no image data: decoding would say
    so instead)."""
    from _inputs import ONE_PLY_RUN

    np.save(tmp_path / "ir.npy", np.full((20, 4, 4), 295.0, np.float32))
    for name in ("a.png", "b.png"):
        _png_header_only(tmp_path / name, 8000, 8000)
    cfg = tmp_path / "c.toml"
    cfg.write_text(ONE_PLY_RUN + '''[run.thermal]
frames = "ir.npy"
frame_rate = "50 Hz"
[run.dic]
images = ["a.png", "b.png"]
loads = ["1 kN", "10 kN"]
pixel_size = "0.05 mm"
[compute]
memory_budget = "1 GB"
scheduler = "synchronous"
[output]
figures = false
report = false
''')
    _check_and_run_refuse(cfg, tmp_path, r"a\.png: speckle images of 8000x8000 px need about 5,120 MB to correlate, "
                                         r"more than \[compute\] memory_budget = 1,000 MB")
