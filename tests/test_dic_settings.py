"""Choosing subset, step and strain window: the noise model, the rule, one set of defaults."""

import dataclasses
import inspect

import numpy as np
import pytest

from fusion.cli import main
from fusion.config._sections import DicSpec
from fusion.dic import (DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, correlate, default_setting,
                        displacement_noise, recommend_setting, setting_table, speckle_image)



def test_displacement_noise_matches_monte_carlo():
    # Pan et al., "Study on subset size selection in digital image correlation for speckle
    # patterns", Optics Express 16(10) (2008): sigma_u ~ sqrt(2) sigma / sqrt(SSSIG), here with
    # the shape parameters' least-squares coupling. Truth: the scatter of correlated pairs with
    # known noise (two realisations, a sub-pixel shift rendered exactly). [Pan2008]
    sigma = 0.01
    ref0 = speckle_image((192, 192), seed=21, bits=None)
    mov0 = speckle_image((192, 192), seed=21, bits=None, displacement=(0.3, -0.2))
    base = correlate(ref0, mov0, subset=21, step=7)
    errs = []
    for k in range(2):
        r = speckle_image((192, 192), seed=21, bits=None, noise=sigma, noise_seed=10 + k)
        d = speckle_image((192, 192), seed=21, bits=None, displacement=(0.3, -0.2), noise=sigma,
                          noise_seed=20 + k)
        errs.append((correlate(r, d, subset=21, step=7).u - base.u).ravel())
    empirical = np.nanstd(np.concatenate(errs))
    assert displacement_noise(subset=21, noise=sigma, image=ref0) == pytest.approx(empirical, rel=0.15)


def test_one_set_of_defaults_by_the_stated_rule():
    # not a physics check: one set of defaults across the config, the API and the documented rule
    # the config, fusion.dic.correlate and the rule of fusion.dic.default_setting agree
    fields = {f.name: f for f in dataclasses.fields(DicSpec)}
    config = tuple(fields[k].default for k in ("subset", "step", "strain_window"))
    assert config == (DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW)
    sig = inspect.signature(correlate).parameters
    assert (sig["subset"].default, sig["step"].default) == (DEFAULT_SUBSET, DEFAULT_STEP)
    rule = default_setting()
    assert (rule["subset"], rule["step"], rule["window"]) == (DEFAULT_SUBSET, DEFAULT_STEP,
                                                              DEFAULT_WINDOW)
    # it resolves the hole it was chosen for within the noise target; and a first grid
    # point lies within 6 px of any edge (a subset reaches 0.1 subset from an edge at
    # min_fill 0.6, plus at most one step)
    assert rule["gain"] >= 0.9 and rule["noise_floor"] <= 0.1 * 2e-3
    assert 40 <= rule["radius"] <= 80
    assert 0.1 * DEFAULT_SUBSET + DEFAULT_STEP <= 6.0


def test_recommendation_rule():
    # not a physics check: the recommendation follows its documented rule
    rows = setting_table(150.0, 1.0)
    best, why = recommend_setting(rows)
    assert best["gain"] >= 0.9 and "resolves" in why
    ok = [r for r in rows if r["window"] >= 5 and r["gain"] >= 0.9 and r["noise_floor"] <= 2e-4]
    assert best["noise_floor"] == min(r["noise_floor"] for r in ok)
    noisy, why = recommend_setting(setting_table(40.0, 50.0))
    assert "no choice has a noise floor" in why
    # larger features are resolved by larger gauges: the gain at the feature grows with radius
    g = [recommend_setting(setting_table(a, 1.0))[0]["gain"] for a in (40.0, 80.0)]
    assert g[1] > g[0]


def test_gauge_command(capsys, tmp_path):
    # not a physics check: the command's output and its errors
    assert main(["gauge", "--radius", "60", "--noise", "1"]) == 0
    out = capsys.readouterr().out
    assert "Recommended: subset" in out and "noise floor" in out and "120 px" in out
    assert main(["gauge", "--radius", "60", "--noise", "-1"]) == 1
    assert "noise" in capsys.readouterr().err
    assert main(["gauge", "--radius", "60", "--noise", "1", "--image", str(tmp_path / "no.png")]) == 1
    assert "no.png" in capsys.readouterr().err
