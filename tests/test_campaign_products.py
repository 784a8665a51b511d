"""Campaign products read as their reader reads them: frequency.nc opened with plain xarray, and the
recommended loading-frequency band said in numbers with their meaning (file, terminal, report)."""

from __future__ import annotations

import re

import numpy as np
import pytest
import xarray as xr

from _campaigns import T0
from _inputs import config_head, write_strain
from fusion.campaign import run_campaign
from fusion.config import load_config
from fusion.plan import frequency_plan
from fusion.report import band_edges_text, band_sentence

ROWS, COLS, RATE, FRAMES = 16, 24, 200.0, 400


def _sweep_campaign(folder, frequencies, rng):
    """One specimen at several loading frequencies: frames T0 + Re(C/2 exp(i 2 pi f t)) + noise, C the
    heat model's surface response of a [0/90]s carbon/epoxy coupon under the strain table's uniform
    ranges (our scenario, made with the project's own model: these tests check files and words)."""
    folder.mkdir(parents=True, exist_ok=True)
    x, y = (a.ravel() for a in np.meshgrid(np.arange(0, 12, 1.0), np.arange(0, 8, 1.0)))
    write_strain(folder / "strain.csv", points=(x, y))
    text = config_head(dic_points=[[0.0, 0.0], [11.0, 0.0], [0.0, 7.0], [11.0, 7.0]],
                       ir_points=[[0.0, 15.0], [22.0, 15.0], [0.0, 1.0], [22.0, 1.0]]) + '''[campaign]
name = "sweep check"
operator = "A. Tester"
[output]
figures = false
'''
    cfg = folder / "c.toml"
    cfg.write_text(text)
    lam = load_config(cfg).laminates["default"]
    plan = frequency_plan(lam, [-0.6e-3, 2.0e-3, 0.0], frequencies=frequencies)
    response, quadrature = plan["ratio_in_phase"], plan["ratio_quadrature"]
    t = np.arange(FRAMES) / RATE
    for k, f in enumerate(frequencies):
        c = T0 * complex(float(response[k]), float(quadrature[k]))
        wave = T0 + 0.5 * (c.real * np.cos(2 * np.pi * f * t) - c.imag * np.sin(2 * np.pi * f * t))
        frames = wave[:, None, None] + 0.02 * rng.standard_normal((FRAMES, ROWS, COLS))
        np.save(folder / f"ir{k}.npy", frames.astype(np.float32))
        text += f'''
[[run]]
name = "S-{k}"
specimen = "S 1"
frequency = "{f} Hz"
[run.thermal]
frames = "ir{k}.npy"
frame_rate = "{RATE} Hz"
[run.dic]
strain_ranges = "strain.csv"
'''
    cfg = folder / "c.toml"
    cfg.write_text(text)
    return cfg


@pytest.fixture(scope="module")
def swept(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sweep")
    cfg = _sweep_campaign(folder / "in", (2.0, 10.0, 40.0), np.random.default_rng(20261201))
    outcome = run_campaign(cfg, out=folder / "out", scheduler="synchronous", workers=1)
    assert outcome.ok, outcome.describe()
    return outcome


@pytest.mark.slow
def test_frequency_file_opens_flat_with_plain_xarray(swept):
    path = swept.frequency
    with xr.open_dataset(path) as flat:
        assert list(flat["specimen"].values) == ["S 1"]
        assert flat["group"].values[0] == "S_1"
        assert flat["runs"].values[0] == "S-0 S-1 S-2"
        np.testing.assert_allclose(flat["measured_frequency"].values[0], [2.0, 10.0, 40.0])
        for name in ("band_low", "band_high", "measured_ratio", "model_frequency", "model_ratio_in_phase"):
            assert flat[name].attrs["units"] in ("Hz", "1") and flat[name].attrs["long_name"]
        assert "open_datatree" in flat.attrs["groups"]
        flat = flat.load()
    # the groups stay, opened the two ways the README gives
    with xr.open_dataset(path, group="S_1") as g:
        assert g.attrs["specimen"] == "S 1"
        np.testing.assert_allclose(g["measured_ratio"].values, flat["measured_ratio"].values[0])
        assert float(flat["band_low"][0]) == pytest.approx(g.attrs["band_low"], nan_ok=True)
        assert float(flat["band_high"][0]) == pytest.approx(g.attrs["band_high"], nan_ok=True)
        assert flat["band_source"].values[0] == g.attrs["band_source"]
    tree = xr.open_datatree(path)
    try:
        assert set(tree.children) == {"S_1"}
        assert tree["S_1"].attrs["specimen"] == "S 1"
    finally:
        tree.close()
    # the band's meaning: an edge at the end of the range tried is flagged, not a band edge
    lo, hi = float(flat["band_low"][0]), float(flat["band_high"][0])
    tried = (float(flat["frequency_tried_low"][0]), float(flat["frequency_tried_high"][0]))
    assert tried == pytest.approx((float(np.nanmin(flat["model_frequency"][0])),
                                   float(np.nanmax(flat["model_frequency"][0]))))
    if np.isfinite(hi):
        assert int(flat["band_high_open"][0]) == int(hi >= tried[1] * (1 - 1e-6))
        assert int(flat["band_low_open"][0]) == int(lo <= tried[0] * (1 + 1e-6))


@pytest.mark.slow
def test_band_is_said_in_numbers_in_the_file_the_terminal_and_the_report(swept):
    with xr.open_dataset(swept.frequency) as flat:
        flat = flat.load()
    text = str(flat["band_text"].values[0])
    lo, hi = float(flat["band_low"][0]), float(flat["band_high"][0])
    tried = (float(flat["frequency_tried_low"][0]), float(flat["frequency_tried_high"][0]))
    if np.isfinite(lo):
        lo_text, hi_text = band_edges_text(lo, hi, tried)
        assert f"from {lo_text} to {hi_text}" in text
    else:
        assert text.startswith("no recommended loading-frequency band")
    # every run is placed against the band
    assert all(f"{f:g} Hz" in text for f in (2.0, 10.0, 40.0))
    lines = swept.describe().splitlines()
    assert f"    specimen S 1: {text}" in lines
    html = swept.report.read_text()
    assert "Specimen S 1:</strong> " + text[0].upper() + text[1:] + "." in html.replace("&#x27;", "'")
    assert "<dt>Operator</dt><dd>A. Tester</dd>" in html


BAND = {"low": 8.2, "high": 400.0, "source": "surface_ply", "tolerance": 0.02, "strict": True,
        "tried": (0.025, 400.0)}


@pytest.mark.parametrize("band, frequencies, expected", [
    (BAND, (0.05, 2.0, 100.0),
     "specimen CX: recommended loading frequencies from 8.2 Hz to above 400 Hz (the highest frequency tried); "
     "there the heat model stays within 2 % of the adiabatic dT/T0 of the surface ply, with a small phase lag; "
     "the runs at 0.05 Hz and 2 Hz lie below the band; the run at 100 Hz lies inside the band"),
    ({**BAND, "low": 0.025, "high": 3.1, "source": "laminate", "strict": False}, (0.05, 5.0),
     "specimen CX: recommended loading frequencies from below 0.025 Hz (the lowest frequency tried) to 3.1 Hz; "
     "there the in-phase part of the heat model stays within 2 % of the adiabatic dT/T0 of the whole laminate "
     "(the phase lag is not small there); the run at 0.05 Hz lies inside the band; the run at 5 Hz lies above "
     "the band"),
    ({**BAND, "low": 1.5, "high": 12.0}, (), "specimen CX: recommended loading frequencies from 1.5 Hz to 12 Hz; "
     "there the heat model stays within 2 % of the adiabatic dT/T0 of the surface ply, with a small phase lag"),
    ({**BAND, "low": float("nan"), "high": float("nan"), "source": None}, (2.0,),
     "specimen CX: no recommended loading-frequency band: between 0.025 Hz and 400 Hz the heat model does not "
     "stay within 2 % of any single source's adiabatic dT/T0"),
])
def test_band_sentence(band, frequencies, expected):
    assert band_sentence(band, frequencies=frequencies, specimen="CX") == expected
    assert not re.search(r"\d%", expected)   # "2 %", as everywhere in the report
