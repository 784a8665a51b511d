"""Generation of the demo campaign's inputs and its run (the scenario is described in :mod:`fusion.demo`)."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import logging
import os
import shutil
from pathlib import Path

import numpy as np

from .. import __version__
from ..campaign import build_marked, foreign_message, is_marked_folder, run_campaign
from ..config import load_config
from ..dic import speckle_image
from ..errors import InputError
from ..io import write_netcdf
from ..mechanics import engineering_constants, lateral_response, thermal_layers, transfer_coefficients
from ._physics import (apply_homography, coupon_mask, demo_homography, fiducial_centres,
                            kirsch_displacement, kirsch_strain)

log = logging.getLogger(__name__)

__all__ = ["generate", "run_demo", "DEMO_RUNS", "cache_folder"]

DATA = Path(__file__).parent.parent / "data"
#: The name in the marker of a demo folder made by :func:`generate`.
_DEMO_MARK = "demo"

# geometry (m) and loading
HALF_WIDTH, HALF_HEIGHT, RADIUS = 15e-3, 21e-3, 4e-3
REMOTE_STRAIN = 2.0e-3            # peak-to-peak strain range along the load axis, far from the hole
LOAD_MEAN, LOAD_RANGE = 11e3, 18e3  # N (cyclic tension 2 kN .. 20 kN)
IR_SHAPE = (96, 80)               # rows, cols
IR_SCALE = 2.0                    # IR px per mm
T_AMBIENT, T_SPECIMEN, T_FIDUCIAL = 293.15, 296.0, 304.0
FIDUCIAL_RADIUS = 2.0e-3          # m; high-emissivity dots look warmer than the bare surface
NETD = 0.020                      # K, per frame
VIS_PIXEL = 0.1                   # mm per visible px
VIS_ORIGIN = (-16.0, 21.5)        # specimen mm of visible pixel (col 0, row 0)
VIS_SHAPE = (430, 320)


@dataclasses.dataclass(frozen=True)
class DemoRun:
    name: str
    specimen: str
    laminate: str
    frequency: float
    frame_rate: float
    frames: int
    dic: str                       # "ranges", "states", "images"
    thermal: str                   # "frames", "counts", "maps"
    expected: str                  # the source built into the run (see sample_data/README.md)
    motion: bool = False
    seed: int = 0
    lateral: bool = False          # heat flows along the surface too (lateral heat model) in the data


DEMO_RUNS = (
    DemoRun("CQ-0p05Hz", "CQ", "carbon_qi_resin", 0.05, 12.5, 1000, "ranges", "frames", "laminate", seed=1),
    DemoRun("CQ-150Hz", "CQ", "carbon_qi_resin", 150.0, 383.0, 1000, "ranges", "counts", "resin_layer", seed=2),
    DemoRun("CX-0p05Hz", "CX", "carbon_cross", 0.05, 12.5, 1000, "states", "frames", "laminate", motion=True, seed=3),
    DemoRun("CX-2Hz", "CX", "carbon_cross", 2.0, 50.0, 1000, "ranges", "frames", "model", seed=4),
    DemoRun("CX-100Hz", "CX", "carbon_cross", 100.0, 383.0, 1000, "images", "frames", "surface_ply", motion=True, seed=5),
    DemoRun("GP-0p05Hz", "GP", "glass_painted", 0.05, 12.5, 1000, "ranges", "frames", "laminate", seed=6),
    DemoRun("GP-100Hz", "GP", "glass_painted", 100.0, 383.0, 1000, "ranges", "maps", "coating", seed=7),
    # maps from a longer record (4000 frames): the in-plane flow near the hole stands out of the noise
    DemoRun("CL-2Hz", "CL", "carbon_cross", 2.0, 50.0, 4000, "ranges", "maps", "lateral", seed=8, lateral=True),
)


def cache_folder() -> Path:
    """Where generated demo inputs live: ``$FUSION_CACHE`` or ``~/.cache/fusion``, per version."""
    root = Path(os.environ.get("FUSION_CACHE") or Path.home() / ".cache" / "fusion")
    return root / f"demo-{__version__}-{_scenario_hash()[:10]}"


def _scenario_hash() -> str:
    h = hashlib.sha256()
    for p in (DATA / "demo.toml", DATA / "materials.toml", Path(__file__), Path(__file__).with_name("_physics.py")):
        h.update(p.read_bytes())
    return h.hexdigest()


# --------------------------------------------------------------------------- helpers
def _laminates():
    cfg = load_config(DATA / "demo.toml")
    return cfg


def _effective_moduli(lam):
    """Ey and nu_yx of the laminate in the specimen frame (load along y), from CLT."""
    c = engineering_constants(lam)
    # the laminate 0° direction lies along specimen y (zero_direction = 90°)
    return c["Ex"], c["nu_xy"]


def _ir_geometry():
    H = demo_homography(scale_px_per_mm=IR_SCALE, centre_px=(IR_SHAPE[1] / 2 - 0.3, IR_SHAPE[0] / 2 + 0.4),
                        angle_deg=0.8)
    rows, cols = np.mgrid[0:IR_SHAPE[0], 0:IR_SHAPE[1]]
    pix = np.column_stack([cols.ravel(), rows.ravel()]).astype(float)
    xy_mm = apply_homography(np.linalg.inv(H), pix)
    return H, xy_mm


def _strain_at(xy_m, lam):
    E, nu = _effective_moduli(lam)
    S = REMOTE_STRAIN * E
    return np.stack(kirsch_strain(xy_m[:, 0], xy_m[:, 1], stress=S, modulus=E, poisson=nu, radius=RADIUS), -1), \
        dict(stress=S, modulus=E, poisson=nu, radius=RADIUS)


EDGE_BLUR = 0.35                   # mm: optics and detector blur of every sharp edge (0.7 IR px)


def _soft_step(d):
    """0 -> 1 across an edge at d = 0 (mm, positive inside), blurred by EDGE_BLUR (Gaussian PSF)."""
    from scipy.special import erfc

    return 0.5 * erfc(-d / (np.sqrt(2.0) * EDGE_BLUR))


def _scene(xy_mm):
    """Apparent T0 (K) and the material fraction at specimen positions (mm), with blurred edges."""
    x, y = xy_mm[:, 0], xy_mm[:, 1]
    material = _soft_step(HALF_WIDTH * 1e3 - np.abs(x)) * _soft_step(np.hypot(x, y) - RADIUS * 1e3)
    T0 = T_AMBIENT + (T_SPECIMEN + 0.02 * y - T_AMBIENT) * material
    for c in fiducial_centres(HALF_WIDTH, HALF_HEIGHT) * 1e3:
        T0 = T0 + (T_FIDUCIAL - T_SPECIMEN) * _soft_step(FIDUCIAL_RADIUS * 1e3 - np.hypot(x - c[0], y - c[1]))
    return T0, material


def _ir_truth(run, lam):
    """Positions (mm) of the IR pixels, their complex ratio, material fraction and displacement
    range (mm) of the surface point seen there, and the homography."""
    H, xy_mm = _ir_geometry()
    xy = xy_mm * 1e-3
    strain, kw = _strain_at(xy, lam)
    on = coupon_mask(xy[:, 0], xy[:, 1], half_width=HALF_WIDTH, radius=RADIUS)
    if run.lateral:
        ratio = np.where(on, _lateral_truth(run, lam, xy_mm), 0.0)
    else:
        coef = transfer_coefficients(thermal_layers(lam), np.array([run.frequency]))[0]
        ratio = np.where(on, strain @ coef, 0.0)
    # displacement range (rigid grip motion + Kirsch field): the lower grip is fixed
    u, v = kirsch_displacement(xy[:, 0], xy[:, 1], **kw)
    v = v + 0.5 * REMOTE_STRAIN * 2 * HALF_HEIGHT
    return xy_mm, ratio, np.column_stack([u, v]) * 1e3, H


LATERAL_STEP = 0.25                # mm: grid of the in-plane heat flow in the data (half an IR pixel)


def _lateral_truth(run, lam, xy_mm):
    """Complex ratio at specimen positions (mm) with heat flowing along the surface as well.

    The lateral heat model on a grid twice as fine as the IR pixels in the specimen frame,
    driven by the Kirsch strain, which :func:`kirsch_displacement` continues smoothly into the
    hole (and the infinite-plate field beyond the coupon's edges); then interpolated
    bilinearly at the pixels. The analysis sees other data: the correlation strain, noisy,
    ending 0.5 mm inside the edges, and filled from the nearest pixel, so near the hole the
    two continuations differ as a real boundary would.
    """
    from scipy.interpolate import RegularGridInterpolator

    lo, hi = xy_mm.min(axis=0) - 2.0, xy_mm.max(axis=0) + 2.0
    xs = np.arange(lo[0], hi[0] + LATERAL_STEP, LATERAL_STEP)
    ys = np.arange(hi[1], lo[1] - LATERAL_STEP, -LATERAL_STEP)      # rows run down: y falls
    X, Y = np.meshgrid(xs, ys)
    strain, _ = _strain_at(np.column_stack([X.ravel(), Y.ravel()]) * 1e-3, lam)
    response = lateral_response(thermal_layers(lam), strain.reshape(X.shape + (3,)), run.frequency,
                                pixel_size=LATERAL_STEP * 1e-3, convection_front=lam.convection_front,
                                convection_back=lam.convection_back)
    pts = np.column_stack([xy_mm[:, 1], xy_mm[:, 0]])
    grid = (ys[::-1], xs)
    re = RegularGridInterpolator(grid, response.real[::-1])(pts)
    im = RegularGridInterpolator(grid, response.imag[::-1])(pts)
    return re + 1j * im


def _frames(run, xy_mm, ratio, disp_mm, rng):
    """The infrared stack (F, Y, X) float32 in K, its times and the load at each frame.

    Each frame is rendered exactly (no resampling): the pixel at p sees the surface point that
    sits there at the frame's load, x_ref = x(p) - U(x(p)) (L - L_mean) / dL to first order in
    the displacement range U, with the blurred scene of :func:`_scene`.
    """
    t = np.arange(run.frames) / run.frame_rate
    phi = rng.uniform(-np.pi, np.pi)
    theta = 2 * np.pi * run.frequency * t + phi
    load = LOAD_MEAN + 0.5 * LOAD_RANGE * np.cos(theta)
    drift = 2e-4 * t                      # K/s: slow warm-up of the rig
    out = np.empty((run.frames, *IR_SHAPE), np.float32)
    T0, material = _scene(xy_mm)
    for k in range(run.frames):
        if run.motion:
            T0, material = _scene(xy_mm - disp_mm * (load[k] - LOAD_MEAN) / LOAD_RANGE)
        signal = 0.5 * T0 * material * (ratio.real * np.cos(theta[k]) - ratio.imag * np.sin(theta[k]))
        frame = T0 + signal + drift[k] + rng.normal(0.0, NETD, T0.shape)
        out[k] = frame.reshape(IR_SHAPE)
    return out, t, load, phi


def _dic_grid(step_mm=0.5):
    xs = np.arange(-HALF_WIDTH * 1e3 + 1.0, HALF_WIDTH * 1e3 - 1.0 + 1e-9, step_mm)
    ys = np.arange(HALF_HEIGHT * 1e3 - 1.0, -HALF_HEIGHT * 1e3 + 1.0 - 1e-9, -step_mm)
    X, Y = np.meshgrid(xs, ys)
    return X.ravel(), Y.ravel(), (ys.size, xs.size)


def _write_csv(path, header, columns):
    arr = np.column_stack(columns)
    np.savetxt(path, arr, delimiter=",", header=",".join(header), comments="", fmt="%.9g")


def _write_ranges(path, lam, rng):
    x, y, _ = _dic_grid()
    on = coupon_mask(x * 1e-3, y * 1e-3, half_width=HALF_WIDTH - 0.5e-3, radius=RADIUS + 0.5e-3)
    strain, _ = _strain_at(np.column_stack([x, y]) * 1e-3, lam)
    noise = rng.normal(0, 20e-6, strain.shape)          # correlation strain noise, 20 microstrain
    s = strain + noise
    valid = on.astype(int)
    s[~on] = np.nan
    _write_csv(path, ["x", "y", "exx", "eyy", "gxy", "valid"], [x, y, s[:, 0], s[:, 1], s[:, 2], valid])


def _vis_px(x_mm, y_mm):
    return (x_mm - VIS_ORIGIN[0]) / VIS_PIXEL, (VIS_ORIGIN[1] - y_mm) / VIS_PIXEL


def _write_states(folder, run, lam, rng):
    """Displacement fields at minimum and maximum load, in visible-camera px with y down."""
    x, y, _ = _dic_grid()
    on = coupon_mask(x * 1e-3, y * 1e-3, half_width=HALF_WIDTH - 0.5e-3, radius=RADIUS + 0.5e-3)
    _, kw = _strain_at(np.zeros((1, 2)), lam)
    u, v = kirsch_displacement(x * 1e-3, y * 1e-3, **kw)
    v = v + 0.5 * REMOTE_STRAIN * 2 * HALF_HEIGHT
    col, row = _vis_px(x, y)
    names = []
    for tag, frac in (("min", -0.5), ("max", 0.5)):
        du = frac * u * 1e3 / VIS_PIXEL + rng.normal(0, 0.002, x.shape)     # px, 0.002 px noise
        dv = -frac * v * 1e3 / VIS_PIXEL + rng.normal(0, 0.002, x.shape)    # rows down
        du[~on] = np.nan
        dv[~on] = np.nan
        p = folder / f"{run.name}_dic_{tag}.csv"
        _write_csv(p, ["col", "row", "u", "v"], [col, row, du, dv])
        names.append(p.name)
    return names


def _write_images(folder, run, lam):
    """Speckle images at minimum and maximum load (8-bit PNG), with the fiducial dots and the hole."""
    import cv2


    _, kw = _strain_at(np.zeros((1, 2)), lam)

    def disp_px(frac):
        def f(cx, cy):
            xm = VIS_ORIGIN[0] + cx * VIS_PIXEL
            ym = VIS_ORIGIN[1] - cy * VIS_PIXEL
            u, v = kirsch_displacement(xm * 1e-3, ym * 1e-3, **kw)
            v = v + 0.5 * REMOTE_STRAIN * 2 * HALF_HEIGHT
            return frac * u * 1e3 / VIS_PIXEL, -frac * v * 1e3 / VIS_PIXEL
        return f

    names = []
    rows, cols = np.mgrid[0:VIS_SHAPE[0], 0:VIS_SHAPE[1]].astype(float)
    for i, (tag, frac) in enumerate((("min", 0.0), ("max", 1.0))):
        img = speckle_image(VIS_SHAPE, speckle_size=4.0, seed=run.seed, displacement=disp_px(frac) if frac else None,
                            bits=None, noise=0.0)
        u, v = disp_px(frac)(cols, rows) if frac else (0.0, 0.0)
        xr = VIS_ORIGIN[0] + (cols - u) * VIS_PIXEL
        yr = VIS_ORIGIN[1] - (rows - v) * VIS_PIXEL
        on = coupon_mask(xr * 1e-3, yr * 1e-3, half_width=HALF_WIDTH, radius=RADIUS)
        # a well-lit, high-contrast pattern: grey-level std about a fifth of full scale
        img = np.clip(0.5 + 1.8 * (img - 0.5), 0.0, 1.0)
        img = np.where(on, img, 0.08)
        for c in fiducial_centres(HALF_WIDTH, HALF_HEIGHT) * 1e3:
            img = np.where(np.hypot(xr - c[0], yr - c[1]) < FIDUCIAL_RADIUS * 1e3, 1.0, img)   # white dots
        rng = np.random.default_rng(run.seed * 10 + i)
        img = np.clip(img * 255 + rng.normal(0, 1.0, img.shape), 0, 255).astype(np.uint8)
        p = folder / f"{run.name}_speckle_{tag}.png"
        cv2.imwrite(str(p), img)
        names.append(p.name)
        if frac == 0.0:
            # the mask a user would paint: the coupon without the hole and the markers
            keep = coupon_mask(xr * 1e-3, yr * 1e-3, half_width=HALF_WIDTH - 0.3e-3, radius=RADIUS + 0.3e-3)
            for c in fiducial_centres(HALF_WIDTH, HALF_HEIGHT) * 1e3:
                keep &= np.hypot(xr - c[0], yr - c[1]) > FIDUCIAL_RADIUS * 1e3 + 0.3
            cv2.imwrite(str(folder / f"{run.name}_mask.png"), (keep * 255).astype(np.uint8))
    return names


def _write_maps(path, run, T0, ratio, rng):
    """Precomputed lock-in maps (as another processing chain would deliver them)."""
    import xarray as xr

    n = run.frames
    std = 2 * NETD * np.sqrt(2.0 / n)                      # peak-to-peak in-phase std
    dT = ratio.real * T0 + rng.normal(0, std, T0.shape)
    dq = ratio.imag * T0 + rng.normal(0, std, T0.shape)
    ds = xr.Dataset({
        "T0": (("y", "x"), T0.astype(np.float32), {"units": "K", "long_name": "mean temperature"}),
        "delta_T": (("y", "x"), dT.astype(np.float32), {"units": "K", "long_name": "in-phase range"}),
        "delta_T_quadrature": (("y", "x"), dq.astype(np.float32), {"units": "K", "long_name": "quadrature range"}),
        "delta_T_std": (("y", "x"), np.full(T0.shape, std, np.float32), {"units": "K", "long_name": "std of delta_T"}),
    })
    write_netcdf(ds, path, overwrite=True)


# --------------------------------------------------------------------------- generate
def generate(folder=None, *, force=False) -> Path:
    """Write the demo inputs and config into ``folder`` (default :func:`cache_folder`).

    Deterministic: fixed seeds, so the same version always makes the same data.
    Returns the path of the demo config inside the folder. ``folder`` must be new,
    empty, or a demo folder made here before (it holds fusion's marker): a folder
    with anything else in it is refused, never replaced.
    """
    folder = Path(folder) if folder is not None else cache_folder()
    cfg_path = folder / "demo.toml"
    ours = is_marked_folder(folder, _DEMO_MARK)
    if ours and cfg_path.is_file() and (folder / "truth.json").is_file() and not force:
        return cfg_path
    if not ours and os.path.lexists(folder):
        if folder.is_dir() and not folder.is_symlink() and not any(folder.iterdir()):
            folder.rmdir()       # an empty folder holds nothing to lose
        else:
            raise InputError(folder, foreign_message("is not empty and is not a demo folder fusion made "
                                                     "(no marker inside)"))
    build_marked(folder, _DEMO_MARK, _generate_into)
    return cfg_path


def _generate_into(folder: Path):
    cfg = _laminates()
    shutil.copy(DATA / "demo.toml", folder / "demo.toml")
    shutil.copy(DATA / "materials.toml", folder / "materials.toml")
    truth = {}
    for run in DEMO_RUNS:
        lam = cfg.laminates[run.laminate]
        rng = np.random.default_rng(1000 + run.seed)
        xy_mm, ratio, disp_mm, _ = _ir_truth(run, lam)
        if run.thermal == "maps":
            T0, material = _scene(xy_mm)
            _write_maps(folder / f"{run.name}_maps.nc", run, T0.reshape(IR_SHAPE),
                        (ratio * material).reshape(IR_SHAPE), rng)
        else:
            frames, t, load, _ = _frames(run, xy_mm, ratio, disp_mm, rng)
            if run.thermal == "counts":
                counts = np.round((frames - 270.0) / 0.002).astype("<i2")   # 2 mK per count from 270 K
                counts.tofile(folder / f"{run.name}_ir.raw")
            else:
                np.save(folder / f"{run.name}_ir.npy", frames)
            _write_csv(folder / f"{run.name}_load.csv", ["time", "load"], [t, load])
        if run.dic == "ranges":
            _write_ranges(folder / f"{run.name}_strain.csv", lam, rng)
        elif run.dic == "states":
            _write_states(folder, run, lam, rng)
        else:
            _write_images(folder, run, lam)
        truth[run.name] = {"expected_source": run.expected, "frequency": run.frequency,
                           "specimen": run.specimen}
    # the control points a user would click: fiducial centres, IR side with 0.1 px scatter
    H, _ = _ir_geometry()
    c_mm = fiducial_centres(HALF_WIDTH, HALF_HEIGHT) * 1e3
    ir = apply_homography(H, c_mm)
    truth["_registration"] = {"dic_points_mm": c_mm.tolist(), "ir_points": ir.tolist(),
                              "visible_px": np.column_stack(_vis_px(c_mm[:, 0], c_mm[:, 1])).tolist()}
    (folder / "truth.json").write_text(json.dumps(truth, indent=2))


# --------------------------------------------------------------------------- run
def run_demo(out="fusion-demo", *, overwrite=False, progress=False, data=None):
    """Generate the demo inputs (once, cached) and process the campaign into ``out``."""
    cfg_path = generate(data)
    log.info("demo inputs in %s", cfg_path.parent)
    return run_campaign(cfg_path, out=out, overwrite=overwrite, progress=progress)
