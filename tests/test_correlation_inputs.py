"""Correlation inputs: fields with no area, and the loads of displacement states.

References: the geometry of the points (numpy's SVD says whether points are collinear), the
exact strain of a linear displacement field (u = a x, v = b y gives eps_xx = a, eps_yy = b,
gamma_xy = 0; any textbook of continuum mechanics), linear elasticity (the range scales with
the load range) and an independent forward model of the frames (``_inputs.py``).
"""

import numpy as np
import pytest

from fusion.cli import main
from fusion.config import load_config
from fusion.errors import ConfigError, InputError
from fusion.run import compute_run

from _inputs import stack, strain_grid, write_config, write_load, write_strain

F, RATE, N = 5.0, 50.0, 600


def _run(folder, rng, *, load=True, dic="", strain="strain.csv", load_amp=9.0, load_mean=11.0):
    t = np.arange(N) / RATE
    np.save(folder / "ir.npy", stack(t, F, -0.05, rng))
    if load:
        write_load(folder / "load.csv", t, F, mean=load_mean, amp=load_amp)
    return write_config(folder, run=f'frequency = "{F:g} Hz"', thermal=f'frame_rate = "{RATE:g} Hz"',
                        dic=dic, strain=strain, load="load.csv" if load else None)


x, y = strain_grid()
LINE = np.linspace(0, 20, 30)
CASES = {
    # (x, y) of the points, and what the message says
    "one point": (([5.0], [5.0]), "holds 1 valid point; a correlation field needs at least 4"),
    "two points": (([5.0, 6.0], [5.0, 5.0]), "holds 2 valid points"),
    "three points": (([1.0, 10.0, 3.0], [2.0, 3.0, 12.0]), "holds 3 valid points"),
    "30 points on a row": ((LINE, np.full(30, 5.0)), "holds a single row of 30 points"),
    "30 points on a diagonal": ((LINE, 0.75 * LINE), "its 30 valid points lie on one line, from (0, 0) to (20, 15)"),
    "one column of a grid": ((np.full(40, 7.0), np.arange(0, 20, 0.5)), "holds a single column of 40 points (all at x = 7)"),
    "one row of a grid": ((np.arange(0, 24, 0.5), np.full(48, 5.0)), "holds a single row of 48 points (all at y = 5)"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_fields_without_an_area_are_refused_naming_the_file(case, tmp_path, rng, capsys):
    (px, py), says = CASES[case]
    write_strain(tmp_path / "strain.csv", points=(np.asarray(px, float), np.asarray(py, float)))
    # numpy's view of the same points: fewer than 4, or a rank-one spread
    pts = np.column_stack([px, py]).astype(float)
    assert len(pts) < 4 or np.linalg.matrix_rank(pts - pts.mean(axis=0), tol=1e-9) < 2
    cfg = _run(tmp_path, rng)
    c = load_config(cfg)
    with pytest.raises(InputError, match=r"strain\.csv: " + says.replace("(", r"\(").replace(")", r"\)")):
        compute_run(c, c.runs[0])
    assert main(["check", str(cfg)]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"fusion: error: {tmp_path / 'strain.csv'}") and says in err


def _states(folder, a, b, *, loads_of_states):
    """Displacement fields u = a x, v = b y (mm) at the two loads, from one reference."""
    for name, k in (("min.csv", 0.0), ("max.csv", 1.0)):
        np.savetxt(folder / name, np.column_stack([x, y, k * a * x, k * b * y]), delimiter=",",
                   header="x,y,u,v", comments="")
    loads = f"loads = {loads_of_states}\n" if loads_of_states else ""
    return f'states = ["min.csv", "max.csv"]\n{loads}'


def test_loads_of_states_rescale_to_the_cycle(tmp_path, rng):
    # linear elasticity (common practice): the range scales with the load range; truth from the independent forward model of _inputs.py
    a, b = -0.3e-3, 1.0e-3
    # states at 2 and 11 kN; the thermal run cycles 2..20 kN (load file in N): twice the span
    dic = _states(tmp_path, a, b, loads_of_states='["2 kN", "11 kN"]')
    cfg = load_config(_run(tmp_path, rng, dic=dic, strain=None, load_mean=11000.0, load_amp=18000.0))
    ds = compute_run(cfg, cfg.runs[0]).dataset
    v = ds["valid"].values.astype(bool)
    # linear field: the strain fit is exact, and linear elasticity scales it by 18 / 9
    assert np.median(ds["delta_eps_xx"].values[v]) == pytest.approx(2 * a, rel=1e-6)
    assert np.median(ds["delta_eps_yy"].values[v]) == pytest.approx(2 * b, rel=1e-6)
    assert ds.attrs["strain_attrs"]["load_scaling"].startswith("ranges scaled by 2")
    # without loads the states are the cycle's extremes
    dic = _states(tmp_path, a, b, loads_of_states=None)
    cfg = load_config(_run(tmp_path, rng, dic=dic, strain=None, load_mean=11000.0, load_amp=18000.0))
    ds = compute_run(cfg, cfg.runs[0]).dataset
    v = ds["valid"].values.astype(bool)
    assert np.median(ds["delta_eps_yy"].values[v]) == pytest.approx(b, rel=1e-6)


def test_loads_given_in_falling_order_turn_the_ranges_over_and_keep_their_std(tmp_path, rng):
    # linear elasticity (common practice): states said to be at 11 and 2 kN (falling) give the
    # range of the rising half-cycle turned over; before, the negative factor made the strain
    # std negative and the run ended in an internal error
    a, b = -0.3e-3, 1.0e-3
    dic = _states(tmp_path, a, b, loads_of_states='["11 kN", "2 kN"]')
    cfg = load_config(_run(tmp_path, rng, dic=dic, strain=None, load_mean=11000.0, load_amp=18000.0))
    ds = compute_run(cfg, cfg.runs[0]).dataset
    v = ds["valid"].values.astype(bool)
    assert np.median(ds["delta_eps_yy"].values[v]) == pytest.approx(-2 * b, rel=1e-6)
    assert np.all(ds["delta_eps_yy_std"].values[v] >= 0)
    # (a uniform field: some source of the other sign fits it as well turned over, so the
    # sign_reversed check, which needs a turned-over fit clearly better than any, stays quiet)


def test_loads_of_states_need_a_load_signal(tmp_path, rng):
    dic = _states(tmp_path, -0.3e-3, 1e-3, loads_of_states='["2 kN", "11 kN"]')
    with pytest.raises(ConfigError, match=r"run 'R'\.dic\.loads: rescales the ranges of 'states' to the load "
                                          r"signal's range, but the run has no thermal\.load"):
        load_config(_run(tmp_path, rng, dic=dic, strain=None, load=False))


def test_loads_in_another_unit_than_the_load_signal(tmp_path, rng, capsys):
    # not a physics check: a unit mistake between two inputs is named
    # loads written as bare numbers (N) meant as kN, beside a load file in N
    dic = _states(tmp_path, -0.3e-3, 1e-3, loads_of_states="[2, 11]")
    cfg = _run(tmp_path, rng, dic=dic, strain=None, load_mean=11000.0, load_amp=18000.0)
    c = load_config(cfg)
    with pytest.raises(InputError, match=r"load\.csv: the load signal's range 1\.8e\+04 .* is 2e\+03 times the "
                                         r"span 9 N of dic\.loads \(a factor of 1000: kN against N\?\)"):
        compute_run(c, c.runs[0])
    assert main(["check", str(cfg)]) == 1
    assert "kN against N?" in capsys.readouterr().err
