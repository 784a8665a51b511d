"""Small runs whose geometry is known exactly, for the registration tests (an independent forward
model written here: a known map from specimen mm to infrared pixels, an analytic displacement and
strain field, thermal maps from an independent lamination-theory computation).

Every input kind writes the same field in its own coordinates, as a user would: strain tables in
mm (y up) or in visible-camera pixels (rows down), displacement states and series in pixels,
speckle images; the control points are written by the coordinate rule of configs/README.md.
"""

from pathlib import Path

import numpy as np
import xarray as xr

from fusion.dic import speckle_image
from fusion.io import write_netcdf

ROOT = Path(__file__).resolve().parents[1]
IR_SHAPE = (48, 60)                   # rows, cols
SCALE, ANGLE = 2.0, np.radians(3.0)   # IR px per mm; rotation between the cameras
T_TRUE = np.array([[SCALE * np.cos(ANGLE), -SCALE * np.sin(ANGLE), 30.0],
                   [-SCALE * np.sin(ANGLE), -SCALE * np.cos(ANGLE), 24.0],   # y up -> rows down
                   [0.0, 0.0, 1.0]])
PS = 0.1                              # mm per visible px
C0, R0 = 130.0, 100.0                 # visible px of the specimen origin
VIS_SHAPE = (200, 260)
T0 = 295.0
# control points in specimen mm: six, well spread
CONTROL_MM = np.array([[-10.0, 7.5], [10.0, 7.5], [10.0, -7.5], [-10.0, -7.5], [0.0, 8.5], [1.0, -8.0]])


def project(m, pts):
    """Homogeneous mapping, written here independently of the package."""
    q = np.column_stack([pts, np.ones(len(pts))]) @ np.asarray(m).T
    return q[:, :2] / q[:, 2:]


def displacement(x, y):
    """Displacement range (mm) of the specimen at (x, y) mm, specimen frame (x right, y up)."""
    u = 1e-3 * x + 1e-5 * x ** 2 + 1e-3 * y
    v = -4e-4 * y + 5e-6 * y ** 2 + 5e-4 * x
    return u, v


def strain(x, y):
    """Its strain ranges (exx, eyy, engineering gxy), by hand: linear in position, shear 1.5e-3."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    return 1e-3 + 2e-5 * x, -4e-4 + 1e-5 * y, np.full(np.broadcast(x, y).shape, 1.5e-3)


def surface_ply_ratio(mat, theta_deg, exx, eyy, gxy):
    """dT/T0 of an orthotropic ply at theta from x for the strain ranges (adiabatic, plane stress).

    Strain rotated into the ply axes and the reduced stiffness Q as in Kaw, *Mechanics of
    Composite Materials*, 2nd ed., CRC 2006, sections 2.4 and 2.6 (eqs. 2.103 and 2.93 with
    engineering shear); the thermoelastic law dT/T0 = -(alpha1 dsigma1 + alpha2 dsigma2) / (rho c)
    of Potter & Greaves, Proc. SPIE 817 (1987).
    """
    c, s = np.cos(np.radians(theta_deg)), np.sin(np.radians(theta_deg))
    e1 = c * c * exx + s * s * eyy + s * c * gxy
    e2 = s * s * exx + c * c * eyy - s * c * gxy
    nu21 = mat.nu12 * mat.E2 / mat.E1
    d = 1.0 - mat.nu12 * nu21
    s1 = (mat.E1 * e1 + mat.nu12 * mat.E2 * e2) / d
    s2 = (mat.nu12 * mat.E2 * e1 + mat.E2 * e2) / d
    return -(mat.alpha1 * s1 + mat.alpha2 * s2) / (mat.density * mat.specific_heat)


def vis_px(x, y):
    """Visible-camera (col, row) px of specimen mm."""
    return C0 + np.asarray(x) / PS, R0 - np.asarray(y) / PS


def _csv(path, header, cols):
    np.savetxt(path, np.column_stack(cols), delimiter=",", header=",".join(header), comments="", fmt="%.10g")


def _mm_grid(step=0.5, half=(12.0, 9.0)):
    xs = np.arange(-half[0], half[0] + 1e-9, step)
    ys = np.arange(half[1], -half[1] - 1e-9, -step)
    X, Y = np.meshgrid(xs, ys)
    return X.ravel(), Y.ravel()


LAMINATE = '''
material_library = "{lib}"
[laminate]
layup = "[45/-45]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
[diagnosis]
sources = ["surface_ply", "laminate"]
min_snr = 3.0
[output]
figures = false
'''


def _toml(v):
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (list, tuple, np.ndarray)):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml(x)}" for k, x in v.items()) + " }"
    return repr(float(v)) if isinstance(v, (float, np.floating)) else repr(v)


def write_maps(path, ratio, *, hot=None):
    """Thermal maps of a run: T0 (with hot markers), dT = T0 x ratio, a small noise level."""
    t0 = np.full(ratio.shape, T0)
    if hot is not None:
        t0 = t0 + hot
    ds = xr.Dataset({
        "T0": (("y", "x"), t0.astype(np.float32), {"units": "K"}),
        "delta_T": (("y", "x"), (t0 * ratio).astype(np.float32), {"units": "K"}),
        "delta_T_std": (("y", "x"), np.full(ratio.shape, 1e-6, np.float32), {"units": "K"}),
    })
    write_netcdf(ds, path, overwrite=True)


class Case:
    """One run: its folder, config, and the true specimen position of every IR pixel."""

    def __init__(self, folder, ir_shape, positions, registration, dic, *, hot=None, extra=""):
        self.folder, self.ir_shape, self.positions = Path(folder), ir_shape, positions
        self.registration, self.dic, self.hot, self.extra = registration, dic, hot, extra

    def write(self, lam_material, surface_angle):
        x, y = self.positions
        ratio = surface_ply_ratio(lam_material, surface_angle, *strain(x, y)).reshape(self.ir_shape)
        write_maps(self.folder / "maps.nc", ratio, hot=self.hot)
        text = LAMINATE.format(lib=(ROOT / "configs" / "materials.toml").as_posix()) + self.extra
        text += "[registration]\n" + "".join(f"{k} = {_toml(v)}\n" for k, v in self.registration.items())
        text += ('[[run]]\nname = "R"\nfrequency = "10 Hz"\n[run.thermal]\nmaps = "maps.nc"\ndelta_T_convention = "peak-to-peak"\n[run.dic]\n'
                 + "".join(f"{k} = {_toml(v)}\n" for k, v in self.dic.items()))
        (self.folder / "c.toml").write_text(text)
        return self.folder / "c.toml"


def ir_positions(shape=IR_SHAPE, m=T_TRUE):
    """True specimen position (mm) of every IR pixel centre."""
    rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
    xy = project(np.linalg.inv(m), np.column_stack([cols.ravel(), rows.ravel()]).astype(float))
    return xy[:, 0], xy[:, 1]


def control(kind, method, n=6):
    """dic_points in the coordinates of the data of ``kind``, and ir_points, for ``method``."""
    mm = CONTROL_MM[:n]
    ir = project(T_TRUE, mm)
    if kind == "table_mm":
        dic = mm
    else:                                    # files in visible px (rows down) and images
        dic = np.column_stack(vis_px(mm[:, 0], mm[:, 1]))
    return {"method": method, "dic_points": np.round(dic, 6).tolist(), "ir_points": np.round(ir, 6).tolist()}


# --------------------------------------------------------------------------- correlation inputs
def table_mm(folder):
    x, y = _mm_grid()
    _csv(folder / "strain.csv", ["x", "y", "exx", "eyy", "gxy"], [x, y, *strain(x, y)])
    return {"strain_ranges": "strain.csv", "coordinates": "mm"}


def table_px(folder):
    x, y = _mm_grid()
    col, row = vis_px(x, y)
    exx, eyy, gxy = strain(x, y)
    # the file's frame has y down: its shear is the specimen's with the opposite sign
    _csv(folder / "strain.csv", ["x", "y", "exx", "eyy", "gxy"], [col, row, exx, eyy, -gxy])
    return {"strain_ranges": "strain.csv", "coordinates": "px"}


def _uv_px(x, y, f=1.0):
    u, v = displacement(x, y)
    return f * u / PS, -f * v / PS           # px, rows down


def states(folder):
    x, y = _mm_grid()
    col, row = vis_px(x, y)
    for tag, f in (("min", -0.5), ("max", 0.5)):
        _csv(folder / f"d_{tag}.csv", ["x", "y", "u", "v"], [col, row, *_uv_px(x, y, f)])
    return {"states": ["d_min.csv", "d_max.csv"], "coordinates": "px"}


def series(folder):
    x, y = _mm_grid()
    col, row = vis_px(x, y)
    loads = [2.0, 6.0, 10.0]
    for k, load in enumerate(loads):
        _csv(folder / f"s{k}.csv", ["x", "y", "u", "v"], [col, row, *_uv_px(x, y, (load - 6.0) / 8.0)])
    return {"series": [f"s{k}.csv" for k in range(3)], "coordinates": "px", "loads": [f"{v} kN" for v in loads]}


def images(folder, *, shape=VIS_SHAPE, to_mm=None, markers=None):
    """Speckle images of the field; ``to_mm(col, row)`` gives the specimen mm of a pixel."""
    import cv2

    to_mm = to_mm or (lambda c, r: ((c - C0) * PS, (R0 - r) * PS))

    def disp(c, r):
        x, y = to_mm(c, r)
        u, v = displacement(x, y)
        sx, sy = to_mm(c + 1.0, r + 1.0)
        kx, ky = sx - x, sy - y                  # mm per px along columns and rows
        return u / kx, v / ky

    names = []
    for tag, d in (("ref", None), ("def", disp)):
        img = speckle_image(shape, speckle_size=4.0, seed=11, displacement=d, bits=None)
        img = np.clip(0.5 + 1.8 * (img - 0.5), 0.0, 1.0)
        if markers is not None:
            rows, cols = np.mgrid[0:shape[0], 0:shape[1]]
            for c, r, rad in markers:
                img = np.where(np.hypot(cols - c, rows - r) < rad, 1.0, img)
        cv2.imwrite(str(folder / f"{tag}.png"), np.round(img * 255).astype(np.uint8))
        names.append(f"{tag}.png")
    return {"images": names, "loads": ["1 kN", "2 kN"], "subset": 21, "step": 8, "strain_window": 5}


INPUTS = {"table_mm": table_mm, "table_px": table_px, "states": states, "series": series, "images": images}
