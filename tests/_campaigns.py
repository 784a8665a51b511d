"""Small synthetic campaigns for the scheduling, resume and memory tests (an independent forward
model: frames T0 + (dT/2) cos(2 pi f t) + Gaussian noise, a load in phase, uniform strain ranges)."""

from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
ROWS, COLS = 40, 48
T0, SIGMA, FREQ, RATE, FRAMES = 295.0, 0.02, 5.0, 50.0, 600


def write_campaign(folder, amplitudes, *, rng, extra=""):
    """Frames T0 + (dT/2) cos(2 pi f t) + noise, a load in phase, a uniform strain-range table."""
    folder.mkdir(parents=True, exist_ok=True)
    t = np.arange(FRAMES) / RATE
    theta = 2 * np.pi * FREQ * t
    np.savetxt(folder / "load.csv", np.column_stack([t, 11.0 + 4.5 * np.cos(theta)]), delimiter=",",
               header="time,load", comments="")
    x, y = (a.ravel() for a in np.meshgrid(np.arange(0, 24, 0.5), np.arange(0, 20, 0.5)))
    np.savetxt(folder / "strain.csv", np.column_stack([x, y, np.full(x.size, -0.6e-3), np.full(x.size, 2.0e-3),
                                                       np.zeros(x.size)]),
               delimiter=",", header="x,y,exx,eyy,gxy", comments="")
    lib = (ROOT / "configs" / "materials.toml").as_posix()
    # correlation mm (y up) onto IR px: col = 2 x, row = 39 - 2 y
    text = f'''material_library = "{lib}"
[laminate]
layup = "[0/90]s"
ply_material = "carbon_epoxy"
ply_thickness = "0.25 mm"
zero_direction = "90 deg"
[registration]
method = "affine"
dic_points = [[0.0, 0.0], [20.0, 0.0], [0.0, 15.0], [20.0, 15.0]]
ir_points = [[0.0, 39.0], [40.0, 39.0], [0.0, 9.0], [40.0, 9.0]]
[output]
figures = false
{extra}
'''
    for k, amp in enumerate(amplitudes):
        write_stack(folder / f"ir{k}.npy", amp, rng)
        text += f'''
[[run]]
name = "R{k}"
frequency = "{FREQ} Hz"
[run.thermal]
frames = "ir{k}.npy"
frame_rate = "{RATE} Hz"
load = "load.csv"
[run.dic]
strain_ranges = "strain.csv"
coordinates = "mm"
'''
    cfg = folder / "c.toml"
    cfg.write_text(text)
    return cfg


def write_stack(path, amp, rng):
    """A frame stack of signed range ``amp`` (K) at FREQ, sampled at RATE, with noise SIGMA."""
    t = np.arange(FRAMES) / RATE
    wave = T0 + 0.5 * amp * np.cos(2 * np.pi * FREQ * t)
    np.save(path, (wave[:, None, None] + SIGMA * rng.standard_normal((FRAMES, ROWS, COLS))).astype(np.float32))
