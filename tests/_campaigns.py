"""Small synthetic campaigns for the scheduling, resume and memory tests (an independent forward
model: frames T0 + (dT/2) cos(2 pi f t) + Gaussian noise, a load in phase, uniform strain ranges)."""

from pathlib import Path

import numpy as np

from _inputs import config_head, write_strain

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
    write_strain(folder / "strain.csv")
    # correlation mm (y up) onto IR px: col = 2 x, row = 39 - 2 y
    text = config_head() + f'''[output]
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
