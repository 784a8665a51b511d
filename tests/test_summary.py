"""Run summary, verdict sentence and summary.json against its JSON Schema."""

from __future__ import annotations

import json
import re
import statistics

import jsonschema
import numpy as np
import pytest

import fusion.report as report
from fusion.datamodel import result_dataset
from fusion.io import read_netcdf, write_netcdf

CODE = {"coating": 0, "resin_layer": 1, "surface_ply": 2, "laminate": 3, "model": 4,
        "indistinguishable": 100, "no_source_fits": 101, "no_data": -1}


def result_with_counts(counts: dict, *, invalid: int = 20, frequency=20.0, attrs=None, seed=5):
    """A 1-row result whose source map holds exactly ``counts`` valid pixels per category."""
    rng = np.random.default_rng(seed)
    codes = np.concatenate([np.full(n, CODE[c]) for c, n in counts.items()] + [np.full(invalid, -1)])
    n = codes.size
    valid = np.r_[np.ones(n - invalid, bool), np.zeros(invalid, bool)]
    measured = rng.normal(-5e-6, 4e-7, n)
    maps = {
        "ratio_measured": np.where(valid, measured, np.nan)[None, :],
        "ratio_surface_ply": np.where(valid, -5e-6, np.nan)[None, :],
        "ratio_laminate": np.where(valid, -2e-6, np.nan)[None, :],
        "residual_surface_ply": np.where(valid, measured + 5e-6, np.nan)[None, :],
        "zscore_surface_ply": np.where(valid, (measured + 5e-6) / 4e-7, np.nan)[None, :],
        "delta_T": np.where(valid, measured * 295.0, np.nan)[None, :],
        "delta_T_std": np.where(valid, 1.5e-4, np.nan)[None, :],  # K: |dT| ~ 1.5 mK, SNR ~ 10
        "source_layer": codes[None, :],
        "valid": valid.astype(np.int8)[None, :],
    }
    a = {"run_name": "S1-20Hz", "specimen": "S1", "frequency": frequency, "registration_rms": 0.2,
         "config_sha256": "0123456789abcdef" * 4, "version": "0.1.0", "pixel_size_mm": 0.2}
    if frequency is None:
        a.pop("frequency")
    a.update(attrs or {})
    return result_dataset(maps, attrs=a)


def test_verdict_of_the_issue_example():
    # 97 of 100 valid pixels from the surface ply: the sentence the issue asks for, word for word
    ds = result_with_counts({"surface_ply": 97, "indistinguishable": 3})
    assert report.verdict(ds) == "signal from the surface ply in 97 % of the valid area at 20 Hz"


@pytest.mark.parametrize("counts, expected", [
    ({"laminate": 60, "surface_ply": 40},
     "signal from the whole laminate (homogenised) in 60 % of the valid area at 20 Hz"),
    ({"indistinguishable": 80, "surface_ply": 15, "laminate": 5},
     "candidate sources indistinguishable in 80 % of the valid area at 20 Hz; "
     "elsewhere mostly the surface ply (15 %)"),
    ({"no_source_fits": 70, "coating": 30},
     "no candidate source fits the measurement in 70 % of the valid area at 20 Hz"),
    ({"surface_ply": 40, "laminate": 35, "indistinguishable": 25},
     "no single source dominates at 20 Hz: surface ply 40 %, whole laminate 35 %, indistinguishable 25 % "
     "of the valid area"),
    ({"model": 999, "resin_layer": 1},
     "signal explained by the through-thickness heat model in > 99 % of the valid area at 20 Hz"),
])
def test_verdict_states_each_case_honestly(counts, expected):
    assert report.verdict(result_with_counts(counts)) == expected


def test_verdict_without_data_or_frequency():
    assert report.verdict(result_with_counts({}, invalid=10)) == (
        "no valid data at 20 Hz: no pixel has both thermal and strain data of usable quality")
    assert report.verdict(result_with_counts({"surface_ply": 10}, frequency=None)) == (
        "signal from the surface ply in 100 % of the valid area")


@pytest.mark.parametrize("fraction, text", [
    (1.0, "100 %"), (0.996, "> 99 %"), (0.965, "97 %"), (0.5, "50 %"), (0.004, "< 1 %"), (0.0, "0 %"),
])
def test_percentages_never_round_to_all_or_nothing(fraction, text):
    assert report.format_percent(fraction) == text


def test_summary_numbers_against_independent_statistics():
    ds = result_with_counts({"surface_ply": 90, "laminate": 6, "no_source_fits": 4}, invalid=30)
    s = report.summarize_run(ds, regions=[{"name": "far field", "ratio_measured": np.float32(-5e-6), "n": np.int64(12)}],
                             meta={"operator": "lab A"})
    report.validate_summary(s)
    valid = ds["valid"].values.ravel() == 1
    m = [float(v) for v in ds["ratio_measured"].values.ravel()[valid]]
    # Python's statistics module as the reference (a code path independent of numpy)
    assert s["measured"]["n"] == 100
    assert s["measured"]["median"] == pytest.approx(statistics.median(m), rel=1e-12)
    assert s["measured"]["mean"] == pytest.approx(statistics.fmean(m), rel=1e-12)
    assert s["measured"]["std"] == pytest.approx(statistics.pstdev(m), rel=1e-9)
    q = statistics.quantiles(m, n=20, method="inclusive")  # same definition as numpy's default 'linear'
    assert s["measured"]["p05"] == pytest.approx(q[0], rel=1e-12)
    assert s["measured"]["p95"] == pytest.approx(q[-1], rel=1e-12)
    assert s["valid_pixels"] == 100 and s["valid_fraction"] == pytest.approx(100 / 130)
    assert s["source_fractions"]["surface_ply"] == pytest.approx(0.90)
    assert s["source_fractions"]["no_source_fits"] == pytest.approx(0.04)
    assert sum(s["source_fractions"].values()) == pytest.approx(1.0)
    assert s["dominant"] == {"category": "surface_ply", "fraction": pytest.approx(0.9)}
    res = [v + 5e-6 for v in m]
    assert s["predicted"]["surface_ply"]["residual"]["rms"] == pytest.approx(
        statistics.fmean([r * r for r in res]) ** 0.5, rel=1e-9)
    z = [r / 4e-7 for r in res]
    assert s["predicted"]["surface_ply"]["within_2_sigma"] == pytest.approx(sum(abs(v) <= 2 for v in z) / 100)
    assert s["predicted"]["laminate"]["within_2_sigma"] is None  # no z-score map for it
    assert s["predicted"]["laminate"]["ratio"]["median"] == pytest.approx(-2e-6)
    assert s["regions"] == [{"name": "far field", "ratio_measured": pytest.approx(-5e-6), "n": 12}]
    assert s["frequency_hz"] == 20.0 and s["registration_rms_px"] == 0.2
    assert s["grid"] == {"ny": 1, "nx": 130, "pixel_size_mm": 0.2}
    assert s["provenance"]["config_sha256"] == "0123456789abcdef" * 4
    assert s["meta"] == {"operator": "lab A"}


def test_automatic_and_passed_warnings():
    ds = result_with_counts({"surface_ply": 10}, invalid=90,
                            attrs={"registration_rms": 0.9, "second_harmonic_ratio": 0.25})
    ds["delta_T_std"].values[:] = 1.5e-3  # K: SNR ~ 1, below the limit of 3
    s = report.summarize_run(ds, warnings=["drift of 0.3 K over the record", {"code": "other", "message": "drift of 0.3 K over the record"}],
                             meta={"recommended_band_hz": [30.0, None]})
    codes = [w["code"] for w in s["warnings"]]
    assert codes == ["registration_error", "low_snr", "dissipative_heating", "below_band", "low_valid_area", "other"]
    assert "0.90 IR px" in s["warnings"][0]["message"]
    assert "20 Hz is below the recommended band starting at 30 Hz" in s["warnings"][3]["message"]
    quiet = report.summarize_run(result_with_counts({"surface_ply": 100}))
    assert quiet["warnings"] == []
    with pytest.raises(ValueError, match="warning code 'loud'"):
        report.summarize_run(ds, warnings=[{"code": "loud", "message": "x"}])


def test_schema_is_valid_draft_2020_12_and_accepts_a_summary():
    schema = report.summary_schema()
    jsonschema.Draft202012Validator.check_schema(schema)  # the published meta-schema is the reference
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    s = report.summarize_run(result_with_counts({"surface_ply": 50, "laminate": 50}))
    jsonschema.validate(s, schema, cls=jsonschema.Draft202012Validator)


@pytest.mark.parametrize("mutate, where", [
    (lambda s: s.pop("verdict"), "(top level)"),
    (lambda s: s.update(frequency_hz=-5.0), "frequency_hz"),
    (lambda s: s["source_fractions"].update(surface_ply=1.5), "source_fractions/surface_ply"),
    (lambda s: s.update(extra=1), "(top level)"),
    (lambda s: s["warnings"].append({"code": "other"}), "warnings/0"),
    (lambda s: s["provenance"].update(config_sha256="abc"), "provenance/config_sha256"),
    (lambda s: s["measured"].update(n=-1), "measured/n"),
])
def test_write_summary_refuses_what_the_schema_refuses(tmp_path, mutate, where):
    s = report.summarize_run(result_with_counts({"surface_ply": 30}))   # above the valid-area limit
    mutate(s)
    path = tmp_path / "summary.json"
    with pytest.raises(ValueError, match=re.escape(f"at '{where}'")):
        report.write_summary(s, path)
    assert not path.exists() and not list(tmp_path.iterdir())  # nothing half-written


def test_written_json_is_strict_and_round_trips(tmp_path):
    ds = result_with_counts({"surface_ply": 10})
    ds["ratio_laminate"].values[:] = np.nan  # statistics of an all-NaN map must become null, not NaN
    s = report.summarize_run(ds)
    path = report.write_summary(s, tmp_path / "summary.json")

    def refuse(token):
        raise AssertionError(f"non-standard JSON token {token}")

    # RFC 8259 has no NaN/Infinity: parse with them forbidden
    back = json.loads(path.read_text(encoding="utf-8"), parse_constant=refuse)
    assert back == report.validate_summary(s)
    assert back["predicted"]["laminate"]["ratio"]["median"] is None
    assert back["predicted"]["laminate"]["ratio"]["n"] == 0
    with pytest.raises(Exception, match="exists already"):
        report.write_summary(s, path)


def test_summary_survives_a_netcdf_round_trip(tmp_path):
    ds = result_with_counts({"surface_ply": 97, "indistinguishable": 3}, attrs={"pixel_size_mm": None})
    p = write_netcdf(ds, tmp_path / "result.nc")
    back = read_netcdf(p)
    # attributes of None come back as "" from NetCDF: still "not known", not an error
    s = report.summarize_run(back)
    assert s["verdict"] == report.verdict(ds)
    assert s["grid"]["pixel_size_mm"] is None
    report.validate_summary(s)
