"""Inputs of a run of realistic size for the benchmark, generated once into the cache.

Scenario (synthetic, our own): an open-hole coupon of carbon/epoxy cross-ply, 36 mm wide
with a 6 mm hole, in cyclic tension along its length at 10 Hz, seen by

* an infrared camera of 640 x 512 px at 0.1 mm per px (raw int16 counts, 2 mK per count,
  383 frames per second, a load sample per frame), and
* a visible camera of 2448 x 2048 px at 0.02 mm per px (two 8-bit speckle images at the
  minimum and maximum load, a mask of the coupon without the hole and the markers),

with six warm, white fiducial markers clicked in both cameras (homography). The fields
come from the demo's forward models (:mod:`fusion.demo`): the Kirsch plate and the
through-thickness heat model. Only the number of frames changes between sizes; the
folder name carries it, the package version and a hash of this file, so stale inputs
are never reused.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import shutil
from pathlib import Path

import numpy as np

from .. import __version__
from ..campaign import build_marked, is_marked_folder
from ..config import load_config
from ..demo import cache_folder as demo_cache_folder
from ..demo._physics import apply_homography, coupon_mask, demo_homography, kirsch_displacement, kirsch_strain
from ..dic import speckle_image
from ..mechanics import engineering_constants, thermal_layers, transfer_coefficients

log = logging.getLogger(__name__)

__all__ = ["realistic_inputs", "realistic_config", "IR_SHAPE", "VIS_SHAPE", "FRAMES"]

IR_SHAPE = (512, 640)             # rows, cols
VIS_SHAPE = (2048, 2448)
FRAMES = 2000                     # the size of a realistic record
IR_SCALE = 10.0                   # IR px per mm
VIS_PIXEL = 0.02                  # mm per visible px
HALF_WIDTH, RADIUS = 18e-3, 3e-3  # m
REMOTE_STRAIN = 3.0e-3            # peak-to-peak along the load (specimen y)
LOAD_MEAN, LOAD_RANGE = 15e3, 24e3
FREQUENCY, FRAME_RATE = 10.0, 383.0
T_AMBIENT, T_SPECIMEN, T_MARKER = 293.15, 296.0, 303.0
NETD = 0.015                      # K per frame
GAIN, OFFSET = 0.002, 270.0       # K per count, K at count 0
MARKER_RADIUS = 1.0               # mm
BLUR = 0.07                       # mm: optics blur of the infrared edges (0.7 IR px)
MARKERS_MM = np.array([[-12.6, 15.0], [12.6, 15.0], [12.6, 0.0], [12.6, -15.0], [-12.6, -15.0],
                       [-12.6, 0.0]])
_MARK = "bench-realistic"
_LAMINATE = "carbon_cross"

_CONFIG = """\
# A run of realistic size for `fusion bench` (synthetic; made by fusion.bench).
material_library = "{data}/materials.toml"

[campaign]
name = "realistic benchmark run"

[laminate]
layup = "[0/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
zero_direction = "90 deg"

[registration]
method = "homography"
dic_points = {dic_points}
ir_points = {ir_points}
marker_radius = {marker_radius_ir}

[compute]
memory_budget = "{budget}"
{output}
[[run]]
name = "realistic"
frequency = "{frequency} Hz"
[run.thermal]
frames = "{data}/ir.raw"
dtype = "int16"
shape = [{frames}, {rows}, {cols}]
values = "counts"
gain = "{gain_mk} mK"
offset = "{offset} K"
frame_rate = "{frame_rate} Hz"
load = "{data}/load.csv"
[run.dic]
images = ["{data}/speckle_min.png", "{data}/speckle_max.png"]
loads = ["{load_min} N", "{load_max} N"]
pixel_size = "{pixel} mm"
mask = "{data}/mask.png"
{dic}"""


def _source_hash() -> str:
    return hashlib.sha256(Path(__file__).read_bytes()).hexdigest()[:10]


def _folder(frames: int) -> Path:
    root = demo_cache_folder().parent
    return root / f"bench-realistic-{__version__}-{_source_hash()}-{frames}"


def _homography():
    return demo_homography(scale_px_per_mm=IR_SCALE, centre_px=(IR_SHAPE[1] / 2 - 0.3, IR_SHAPE[0] / 2 + 0.4),
                           angle_deg=0.6, perspective=2e-4)


def _moduli():
    cfg = load_config(Path(__file__).resolve().parents[1] / "data" / "demo.toml")
    lam = cfg.laminates[_LAMINATE]
    c = engineering_constants(lam)
    return lam, c["Ex"], c["nu_xy"]      # the 0° axis lies along the load (specimen y)


def _soft(d):
    from scipy.special import erfc

    return 0.5 * erfc(-d / (np.sqrt(2.0) * BLUR))


def _ir_scene(xy_mm, kw, coef):
    """T0 (K), the material share and the complex ratio dT/T0 at IR pixels (specimen mm)."""
    x, y = xy_mm[:, 0], xy_mm[:, 1]
    material = _soft(HALF_WIDTH * 1e3 - np.abs(x)) * _soft(np.hypot(x, y) - RADIUS * 1e3)
    T0 = T_AMBIENT + (T_SPECIMEN - T_AMBIENT) * material
    for c in MARKERS_MM:
        T0 = T0 + (T_MARKER - T_SPECIMEN) * _soft(MARKER_RADIUS - np.hypot(x - c[0], y - c[1]))
    strain = np.stack(kirsch_strain(x * 1e-3, y * 1e-3, **kw), -1)
    on = coupon_mask(x * 1e-3, y * 1e-3, half_width=HALF_WIDTH, radius=RADIUS)
    ratio = np.where(on, strain @ coef, 0.0) * material
    return T0, ratio


def _write_frames(path, frames, T0, ratio, rng, block=64):
    """Raw int16 counts, written block by block (never the whole stack in memory)."""
    t = np.arange(frames) / FRAME_RATE
    theta = 2 * np.pi * FREQUENCY * t + 0.3
    load = LOAD_MEAN + 0.5 * LOAD_RANGE * np.cos(theta)
    re = (0.5 * T0 * ratio.real).astype(np.float32).reshape(IR_SHAPE)
    im = (0.5 * T0 * ratio.imag).astype(np.float32).reshape(IR_SHAPE)
    base = ((T0 - OFFSET) / GAIN).astype(np.float32).reshape(IR_SHAPE)
    with open(path, "wb") as fh:
        for k0 in range(0, frames, block):
            k = np.arange(k0, min(k0 + block, frames))
            c, s = np.cos(theta[k]).astype(np.float32), np.sin(theta[k]).astype(np.float32)
            drift = (2e-4 * t[k]).astype(np.float32)
            out = rng.standard_normal((k.size, *IR_SHAPE), dtype=np.float32)
            out *= NETD
            out += drift[:, None, None]
            out += re[None] * c[:, None, None]
            out -= im[None] * s[:, None, None]
            out *= 1.0 / GAIN
            out += base[None]
            np.rint(out, out=out)
            out.astype("<i2").tofile(fh)
    return t, load


def _vis_to_mm(cols, rows):
    return (cols - VIS_SHAPE[1] / 2) * VIS_PIXEL, (VIS_SHAPE[0] / 2 - rows) * VIS_PIXEL


def _write_images(folder, kw):
    """Speckle images at the minimum and maximum load (8 bits), and the mask a user would paint."""
    import cv2

    def disp_px(cx, cy):
        xm, ym = _vis_to_mm(cx, cy)
        u, v = kirsch_displacement(xm * 1e-3, ym * 1e-3, **kw)
        # no material in the hole: the field fades to its centre, whose direction is undefined
        fade = np.minimum(np.hypot(xm, ym) / (RADIUS * 1e3), 1.0) ** 2
        u, v = u * fade, v * fade
        v = v + 0.5 * REMOTE_STRAIN * 40e-3          # the lower grip holds, the upper one moves
        return u * 1e3 / VIS_PIXEL, -v * 1e3 / VIS_PIXEL

    rows, cols = np.mgrid[0:VIS_SHAPE[0], 0:VIS_SHAPE[1]].astype(np.float64)
    for i, tag in enumerate(("min", "max")):
        img = speckle_image(VIS_SHAPE, speckle_size=4.0, seed=11, displacement=disp_px if i else None,
                            bits=None)
        u, v = disp_px(cols, rows) if i else (0.0, 0.0)
        xr, yr = _vis_to_mm(cols - u, rows - v)
        on = coupon_mask(xr * 1e-3, yr * 1e-3, half_width=HALF_WIDTH, radius=RADIUS)
        img = np.where(on, np.clip(0.5 + 1.8 * (img - 0.5), 0.0, 1.0), 0.08)
        for c in MARKERS_MM:
            img = np.where(np.hypot(xr - c[0], yr - c[1]) < MARKER_RADIUS, 1.0, img)
        noise = np.random.default_rng(20 + i).normal(0, 1.0, img.shape)
        cv2.imwrite(str(folder / f"speckle_{tag}.png"), np.clip(img * 255 + noise, 0, 255).astype(np.uint8))
        if i == 0:
            keep = coupon_mask(xr * 1e-3, yr * 1e-3, half_width=HALF_WIDTH - 0.3e-3, radius=RADIUS + 0.3e-3)
            for c in MARKERS_MM:
                keep &= np.hypot(xr - c[0], yr - c[1]) > MARKER_RADIUS + 0.3
            cv2.imwrite(str(folder / "mask.png"), (keep * 255).astype(np.uint8))


def _generate_into(folder: Path, frames: int):
    lam, E, nu = _moduli()
    kw = dict(stress=REMOTE_STRAIN * E, modulus=E, poisson=nu, radius=RADIUS)
    coef = transfer_coefficients(thermal_layers(lam), np.array([FREQUENCY]))[0]
    H = _homography()
    rows, cols = np.mgrid[0:IR_SHAPE[0], 0:IR_SHAPE[1]]
    pix = np.column_stack([cols.ravel(), rows.ravel()]).astype(float)
    xy_mm = apply_homography(np.linalg.inv(H), pix)
    T0, ratio = _ir_scene(xy_mm, kw, coef)
    rng = np.random.default_rng(5)
    t, load = _write_frames(folder / "ir.raw", frames, T0, ratio, rng)
    np.savetxt(folder / "load.csv", np.column_stack([t, load]), delimiter=",", header="time,load",
               comments="", fmt="%.9g")
    _write_images(folder, kw)
    # the markers as clicked: visible (col, row) px of the reference image, IR (col, row) px with
    # a scatter of 0.1 px
    vis = np.column_stack([MARKERS_MM[:, 0] / VIS_PIXEL + VIS_SHAPE[1] / 2,
                           VIS_SHAPE[0] / 2 - MARKERS_MM[:, 1] / VIS_PIXEL])
    ir = apply_homography(H, MARKERS_MM) + np.random.default_rng(6).normal(0, 0.1, MARKERS_MM.shape)
    shutil.copy(Path(__file__).resolve().parents[1] / "data" / "materials.toml", folder / "materials.toml")
    (folder / "points.json").write_text(json.dumps({"frames": frames, "dic_points": np.round(vis, 2).tolist(),
                                                    "ir_points": np.round(ir, 2).tolist()}))


def realistic_config(data: Path, *, budget: str = "2 GB", dpi: int | None = None, subset: int | None = None,
                     step: int | None = None) -> str:
    """The TOML text of the realistic run on the inputs in ``data`` (absolute paths: the config may
    be written anywhere). Unset options keep fusion's defaults."""
    data = Path(data).resolve()
    points = json.loads((data / "points.json").read_text())
    dic = "".join(f"{k} = {v}\n" for k, v in (("subset", subset), ("step", step)) if v is not None)
    return _CONFIG.format(
        data=data.as_posix(), dic_points=points["dic_points"], ir_points=points["ir_points"],
        marker_radius_ir=MARKER_RADIUS * IR_SCALE + 1.0, budget=budget,
        output="" if dpi is None else f"\n[output]\ndpi = {int(dpi)}\n", frequency=FREQUENCY,
        frames=points["frames"], rows=IR_SHAPE[0], cols=IR_SHAPE[1], gain_mk=GAIN * 1e3, offset=OFFSET,
        frame_rate=FRAME_RATE, load_min=LOAD_MEAN - LOAD_RANGE / 2, load_max=LOAD_MEAN + LOAD_RANGE / 2,
        pixel=VIS_PIXEL, dic=dic)


def realistic_inputs(frames: int = FRAMES) -> Path:
    """The input folder of the realistic run with ``frames`` frames, generated once into the cache.

    Returns a folder of fusion's cache (``$FUSION_CACHE`` or
    ``~/.cache/fusion``). A folder that exists is reused when it is fusion's (its marker);
    anything else under that name is never touched (an error names it).
    """
    frames = int(frames)
    if frames < 64:
        raise ValueError(f"frames: expected at least 64, got {frames!r}")
    folder = _folder(frames)
    if is_marked_folder(folder, _MARK) and (folder / "points.json").is_file():
        return folder
    if os.path.lexists(folder):
        raise FileExistsError(f"{folder}: exists and is not a benchmark folder fusion made; move it away")
    return build_marked(folder, _MARK, lambda tmp: _generate_into(tmp, frames))
