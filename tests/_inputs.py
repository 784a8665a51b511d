"""One small run written from an independent forward model, for the tests of input checks.

Frames ``T0 + (dT/2) cos(2 pi f t + phi) + noise`` on a 40 x 48 infrared grid, a load in phase
``L0 + (dL/2) cos(2 pi f t + phi)`` on its own clock, and a strain-range table on a 0.5 mm grid
registered onto the infrared pixels (col = 2 x, row = 39 - 2 y), as in ``_campaigns.py``.
"""

from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
ROWS, COLS = 40, 48
T0, SIGMA = 295.0, 0.02


def wave(t, f, amp, *, mean=0.0, phase=0.0):
    """``mean + (amp / 2) cos(2 pi f t + phase)``: a signed peak-to-peak range ``amp``."""
    return mean + 0.5 * amp * np.cos(2 * np.pi * f * np.asarray(t, float) + phase)


def stack(t, f, dT, rng, *, T0=T0, sigma=SIGMA, phase=0.0, shape=(ROWS, COLS)):
    """A float32 frame stack of uniform signed range ``dT`` (K) at ``f`` Hz, noise ``sigma`` K."""
    base = T0 + wave(t, f, dT, phase=phase)
    return (base[:, None, None] + sigma * rng.standard_normal((len(t),) + tuple(shape))).astype(np.float32)


def strain_grid():
    """Points of the strain table (mm), covering the registered part of the infrared grid."""
    x, y = np.meshgrid(np.arange(0, 24, 0.5), np.arange(0, 20, 0.5))
    return x.ravel(), y.ravel()


def write_strain(path, exx=-0.6e-3, eyy=2.0e-3, gxy=0.0, *, scale=1.0, points=None):
    """A strain-range table; ``scale`` multiplies the values (1e6 for microstrain, 100 for %)."""
    x, y = strain_grid() if points is None else points
    n = np.size(x)
    cols = [np.full(n, v * scale) if np.ndim(v) == 0 else np.asarray(v) * scale for v in (exx, eyy, gxy)]
    np.savetxt(path, np.column_stack([x, y, *cols]), delimiter=",", header="x,y,exx,eyy,gxy", comments="")
    return path


def write_load(path, t, f, *, mean=11.0, amp=9.0, phase=0.0):
    np.savetxt(path, np.column_stack([t, wave(t, f, amp, mean=mean, phase=phase)]), delimiter=",",
               header="time,load", comments="", fmt="%.10g")
    return path


def _toml_points(points):
    return "[" + ", ".join(f"[{float(a)!r}, {float(b)!r}]" for a, b in points) + "]"


def config_head(dic_points=((0.0, 0.0), (20.0, 0.0), (0.0, 15.0), (20.0, 15.0)),
                ir_points=((0.0, 39.0), (40.0, 39.0), (0.0, 9.0), (40.0, 9.0))):
    """A config's material library, [0/90]s carbon/epoxy laminate and affine registration.

    The default points map the strain table's mm (y up) onto the IR px: col = 2 x, row = 39 - 2 y.
    """
    lib = (ROOT / "configs" / "materials.toml").as_posix()
    return f'''material_library = "{lib}"
[laminate]
layup = "[0/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
zero_direction = "90 deg"
[registration]
method = "affine"
dic_points = {_toml_points(dic_points)}
ir_points = {_toml_points(ir_points)}
'''


#: One ply of a made-up material, identity registration and one run "r" at 5 Hz; the run's
#: thermal and correlation tables follow.
#: The library, a [0/90]s carbon/epoxy laminate and the identity registration: the head of a
#: config whose strain data are on the IR pixel grid already.
IDENTITY_HEAD = f'''material_library = "{(ROOT / "configs" / "materials.toml").as_posix()}"
[laminate]
layup = "[0/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
[registration]
method = "identity"
'''

ONE_PLY_RUN = '''[laminate]
layup = [0]
ply_material = "m"
ply_thickness = "1 mm"
[materials.m]
E1 = 1e11
E2 = 1e10
G12 = 5e9
nu12 = 0.3
alpha1 = 0
alpha2 = 3e-5
density = 1500
specific_heat = 900
k1 = 5
k2 = 0.5
k3 = 0.5
[registration]
method = "identity"
[[run]]
name = "r"
frequency = "5 Hz"
'''


def write_config(folder, *, run="", thermal="", dic="", frames="ir.npy", load="load.csv",
                 strain="strain.csv", extra=""):
    """The config of one run named R beside its inputs; ``run``, ``thermal``, ``dic`` add keys."""
    load_line = f'load = "{load}"\n' if load else ""
    inputs = f'frames = "{frames}"\n' if frames else ""
    text = config_head() + f'''[output]
figures = false
report = false
{extra}
[[run]]
name = "R"
{run}
[run.thermal]
{inputs}{load_line}{thermal}
[run.dic]
{f'strain_ranges = "{strain}"' if strain else ""}
{dic}
'''
    cfg = Path(folder) / "c.toml"
    cfg.write_text(text)
    return cfg
