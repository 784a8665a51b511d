"""The loading frequency comes from the load signal: its uncertainty, the configured value, aliases.

References: the Cramér-Rao bound of a sinusoid's frequency in white noise (Rife & Boorstyn,
IEEE Trans. Inf. Theory 20(5), 1974), Monte Carlo scatter of the estimate itself, the aliasing
of a sampled sinusoid (Nyquist-Shannon sampling; common practice) and an independent forward
model of the frames and the load (``_inputs.py``).
"""

import math

import numpy as np
import pytest
from scipy.signal import lfilter

from fusion.cli import main
from fusion.config import load_config
from fusion.errors import ConfigError, InputError
from fusion.run import compute_run
from fusion.run._thermal import thermal_side
from fusion.thermal import alias_candidates, alias_frequency, estimate_frequency, lockin

from _inputs import T0, stack, write_config, write_load, write_strain

BUDGET = 2e9


def crlb_frequency_sd(amplitude, sigma, n, fs):
    """var(f) = 12 / ((2 pi)^2 eta N (N^2 - 1)) cycles^2/sample^2, eta = A^2 / (2 sigma^2)
    (Rife & Boorstyn 1974; Kay 1993, Example 3.14 — from memory)."""
    eta = amplitude**2 / (2 * sigma**2)
    return fs * math.sqrt(12.0 / ((2 * math.pi) ** 2 * eta * n * (n**2 - 1)))


def _monte_carlo(rng, noise, *, fs=50.0, n=500, f=2.0, runs=200):
    t = np.arange(n) / fs
    est, reported = [], []
    for _ in range(runs):
        # a load with a mean, a drift and a small second harmonic, as a servo-hydraulic rig gives
        v = 11.0 + np.cos(2 * np.pi * f * t + rng.uniform(-np.pi, np.pi)) + 0.05 * np.cos(4 * np.pi * f * t) \
            + 0.1 * t + noise(n)
        fe, sd = estimate_frequency(t, v, return_std=True)
        est.append(fe)
        reported.append(sd)
    return np.array(est), np.array(reported)


def test_frequency_std_is_the_scatter_of_the_estimate_in_white_noise(rng):
    # Monte Carlo scatter of the estimate against the Cramér-Rao bound ([RifeBoorstyn1974])
    sigma = 0.05
    est, sd = _monte_carlo(rng, lambda n: sigma * rng.standard_normal(n))
    scatter = float(np.sqrt(np.mean((est - 2.0) ** 2)))
    # 200 runs: the scatter is known to ~5 % (1 sd); 0.85..1.15 is three of those
    assert 0.85 < scatter / sd.mean() < 1.15
    # and the reported std is the Cramér-Rao bound (least squares is efficient here)
    assert sd.mean() == pytest.approx(crlb_frequency_sd(1.0, sigma, 500, 50.0), rel=0.1)


def test_frequency_std_covers_noise_correlated_in_time(rng):
    # Monte Carlo scatter of the estimate in AR(1) noise ([Kay1993] for the coloured-noise bound)
    # AR(1) noise (rho 0.6): more noise near the loading frequency than white noise of the
    # same variance; the white-noise formula would claim about half the scatter
    rho, sigma = 0.6, 0.05

    def ar1(n):
        e = rng.standard_normal(n + 200) * sigma * math.sqrt(1 - rho**2)
        return lfilter([1.0], [1.0, -rho], e)[200:]

    est, sd = _monte_carlo(rng, ar1)
    scatter = float(np.sqrt(np.mean((est - 2.0) ** 2)))
    assert scatter > 1.5 * crlb_frequency_sd(1.0, sigma, 500, 50.0)   # the case is not white
    assert 0.8 < scatter / sd.mean() < 1.2


def test_aliases_of_a_sampled_frequency():
    # a sinusoid of f sampled at fs appears at |f - round(f / fs) fs| (Nyquist-Shannon; common practice)
    assert alias_frequency(150.0, 127.7) == pytest.approx(22.3)
    assert alias_frequency(2.0, 50.0) == pytest.approx(2.0)
    assert alias_frequency(100.0, 383.0) == pytest.approx(100.0)
    cands = alias_candidates(22.3, 127.7, count=4)
    assert cands[0] == pytest.approx(22.3) and any(c == pytest.approx(150.0) for c in cands)
    t = np.arange(2000) / 127.7   # and the estimator finds the alias, not the load
    assert estimate_frequency(t, np.cos(2 * np.pi * 150.0 * t)) == pytest.approx(22.3, abs=1e-6)


# ------------------------------------------------------------------------ runs
def _run(tmp_path, rng, *, f=2.0, rate=50.0, frames=1000, dT=-0.2, load_rate=None, load_span=None,
         run="", thermal=None):
    """Frames at ``rate`` of a load at ``f``; the load per frame, or on its own clock."""
    t = np.arange(frames) / rate
    np.save(tmp_path / "ir.npy", stack(t, f, dT, rng))
    tl = t if load_rate is None else np.arange(int(t[-1] * load_rate) + 1) / load_rate
    if load_span is not None:
        tl = tl[tl <= load_span * t[-1]]
    write_load(tmp_path / "load.csv", tl, f)
    write_strain(tmp_path / "strain.csv")
    thermal = f'frame_rate = "{rate} Hz"' if thermal is None else thermal
    return write_config(tmp_path, run=run, thermal=thermal)


def _median_dT(cfg_path):
    cfg = load_config(cfg_path)
    maps, valid, info, _ = thermal_side(cfg.runs[0], budget=BUDGET)
    return float(np.median(maps["delta_T"][valid])), info


def test_a_mistyped_frequency_is_replaced_by_the_load_signals(tmp_path, rng):
    # independent forward model of frames and load (_inputs.py): the true dT at the true frequency
    # the case: frequency = "2.02 Hz" on a load cycling at 2 Hz
    cfg = _run(tmp_path, rng, run='frequency = "2.02 Hz"')
    # what the lock-in gives at the typed frequency: the phase walks 0.4 cycle over the record
    frames = np.load(tmp_path / "ir.npy")
    load = np.loadtxt(tmp_path / "load.csv", delimiter=",", skiprows=1)
    typed = lockin(frames, frequency=2.02, frame_rate=50.0, load=load[:, 1], load_times=load[:, 0])
    assert np.median(typed.delta_T) / -0.2 < 0.8
    # the run: the load signal's frequency, the right range, and a warning that says so
    c = load_config(cfg)
    res = compute_run(c, c.runs[0])
    ds = res.dataset
    assert ds.attrs["frequency"] == pytest.approx(2.0, abs=1e-6)
    v = ds["valid"].values.astype(bool)
    ratio = float(np.median(ds["ratio_measured"].values[v]))
    # truth dT / T0 of the forward model; 0.5 %: ~30 times the noise of a median of 1600 pixels
    assert ratio == pytest.approx(-0.2 / T0, rel=5e-3)
    assert any("2.02 Hz (config) differs" in w and "load signal's frequency is used" in w for w in res.warnings)
    assert res.meta["thermal"]["frequency_source"] == "load signal"


def test_a_frequency_that_agrees_is_kept(tmp_path, rng):
    # independent forward model of frames and load (_inputs.py)
    cfg = _run(tmp_path, rng, run='frequency = "2 Hz"')
    dT, info = _median_dT(cfg)
    assert info["frequency"] == 2.0 and not any("differs" in w for w in info["warnings"])
    assert info["frequency_source"] == "config" and 0 < info["frequency_std"] < 1e-3
    assert dT == pytest.approx(-0.2, rel=5e-3)


def test_a_frequency_far_from_the_load_is_refused(tmp_path, rng):
    cfg = _run(tmp_path, rng, run='frequency = "2.5 Hz"')
    with pytest.raises(InputError, match=r"load\.csv: the load cycles at 2 Hz, 20% away from frequency = 2.5 Hz"):
        _median_dT(cfg)


def test_undersampled_frames_need_the_true_frequency(tmp_path, rng, capsys):
    # aliasing of a sampled sinusoid (Nyquist-Shannon; common practice); independent forward model (_inputs.py)
    # 150 Hz filmed at 127.7 frames/s, the load recorded with each frame: it shows 22.3 Hz
    cfg = _run(tmp_path, rng, f=150.0, rate=127.7)
    with pytest.raises(ConfigError, match=r"frequency: is required: .*sampled no faster than the frames .*"
                                          r"the 22\.3 Hz it shows may be the alias of a faster load \(105\.4, 150"):
        _median_dT(cfg)
    assert main(["check", str(cfg)]) == 1
    assert "22.3 Hz it shows may be the alias" in capsys.readouterr().err
    # given, the undersampled lock-in is right, and the warnings name the alias
    cfg = _run(tmp_path, rng, f=150.0, rate=127.7, run='frequency = "150 Hz"')
    dT, info = _median_dT(cfg)
    assert dT == pytest.approx(-0.2, rel=5e-3)
    assert any("appears at 22.3 Hz" in w for w in info["warnings"])


def test_a_load_on_its_own_fast_clock_gives_the_true_frequency(tmp_path, rng):
    # independent forward model of frames and a fast load clock (_inputs.py); undersampled lock-in is valid when the frequency is known (common practice)
    cfg = _run(tmp_path, rng, f=150.0, rate=127.7, load_rate=2000.0)
    dT, info = _median_dT(cfg)
    assert info["frequency"] == pytest.approx(150.0, abs=1e-4)
    assert dT == pytest.approx(-0.2, rel=5e-3)
    assert any("estimated from the load signal" in w for w in info["warnings"])
    assert any("appears at 22.3 Hz" in w for w in info["warnings"])


def test_a_load_covering_part_of_the_record(tmp_path, rng, capsys):
    # not a physics check: a partial load record is named
    cfg = _run(tmp_path, rng, run='frequency = "2 Hz"', load_span=0.2)
    with pytest.raises(InputError, match=r"load\.csv: covers 20% of the frames' record .* at least 50% is needed"):
        _median_dT(cfg)
    assert main(["check", str(cfg)]) == 1
    assert "covers 20% of the frames' record" in capsys.readouterr().err
    cfg = _run(tmp_path, rng, run='frequency = "2 Hz"', load_span=0.8)
    dT, info = _median_dT(cfg)
    assert any("covers only 80% of the frames' record" in w for w in info["warnings"])
    assert dT == pytest.approx(-0.2, rel=5e-3)


def test_a_frame_rate_typed_ten_times_too_high_is_named(tmp_path, rng):
    # not a physics check: frames at 50 Hz with their load logged per frame, the config typing
    # 500 Hz: the load covers the frames' record, so nothing is refused, but the run's warnings
    # say which frame rate the per-frame load implies
    cfg = _run(tmp_path, rng, run='frequency = "2 Hz"')
    cfg.write_text(cfg.read_text().replace('frame_rate = "50.0 Hz"', 'frame_rate = "500 Hz"'))
    _, info = _median_dT(cfg)
    assert any("one sample per frame (1000)" in w and "the frame rate is 50 Hz" in w for w in info["warnings"])
    # typed right, no such note
    cfg.write_text(cfg.read_text().replace('frame_rate = "500 Hz"', 'frame_rate = "50.0 Hz"'))
    assert not any("one sample per frame" in w for w in _median_dT(cfg)[1]["warnings"])


def test_a_frame_rate_typed_ten_times_too_low_is_named(tmp_path, rng):
    # not a physics check: frames at 50 Hz with their load logged per frame, the config typing
    # 5 Hz: the frames seem ten times longer than the load, and the message names the rate and
    # the rate the load's span fits
    cfg = _run(tmp_path, rng, run='frequency = "2 Hz"')
    cfg.write_text(cfg.read_text().replace('frame_rate = "50.0 Hz"', 'frame_rate = "5 Hz"'))
    with pytest.raises(InputError, match=r"covers 10% of the frames' record .* thermal\.frame_rate "
                                         r"\(5 Hz; the load's span would fit 50 Hz\)"):
        _median_dT(cfg)

