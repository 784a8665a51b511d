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
    # 97 of 100 valid pixels from the surface ply: the verdict sentence, word for word
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


def result_with_ties(rows, *, frequency=20.0):
    """A 1-row result from (category, tied sources, fitting sources, pixel count) rows, built by hand:
    ``source_tie`` holds one bit per tied source and ``source_probability`` is above 0 exactly
    where a source fits (the conventions of fusion.datamodel and fusion.diagnose)."""
    sources = ("coating", "resin_layer", "surface_ply", "laminate", "model")
    codes, tie, prob = [], [], []
    for category, tied, fitting, n in rows:
        codes += [CODE[category]] * n
        tie += [sum(1 << sources.index(t) for t in tied)] * n
        prob += [[1.0 / len(fitting) if src in fitting else 0.0 for src in sources]] * n
    n = len(codes)
    measured = np.full((1, n), -5e-6)
    maps = {"ratio_measured": measured, "ratio_measured_std": np.full((1, n), 1e-7),
            "source_layer": np.array(codes)[None, :], "source_tie": np.array(tie)[None, :],
            "source_probability": np.array(prob).T[:, None, :], "valid": np.ones((1, n), np.int8)}
    maps.update({f"ratio_{src}": measured for src in sources})
    return result_dataset(maps, sources=sources, attrs={"run_name": "T-20Hz", "frequency": frequency})


@pytest.mark.parametrize("rows, expected", [
    # the case the verdict was too vague for: which sources tie, which are ruled out
    ([("indistinguishable", ("surface_ply", "laminate"), ("surface_ply", "laminate", "model"), 95),
      ("surface_ply", (), ("surface_ply",), 5)],
     "surface ply and whole laminate fit equally (indistinguishable) in 95 % of the valid area at 20 Hz; "
     "elsewhere mostly the surface ply (5 %); coating and resin-rich layer rejected"),
    # two sets of tied sources: the largest is named, the rest counted
    ([("indistinguishable", ("surface_ply", "laminate"), ("surface_ply", "laminate"), 60),
      ("indistinguishable", ("coating", "surface_ply", "laminate"), ("coating", "surface_ply", "laminate"), 30),
      ("laminate", (), ("laminate",), 10)],
     "surface ply and whole laminate fit equally (indistinguishable) in 60 % of the valid area at 20 Hz, "
     "other sets of sources tie in 30 %; elsewhere mostly the whole laminate (10 %); resin-rich layer and "
     "heat model at 20 Hz rejected"),
    # one source wins; a source fitting in 5 % of the area (the limit) is rejected, in 6 % it is not
    ([("surface_ply", (), ("surface_ply", "laminate"), 94), ("surface_ply", (), ("surface_ply", "coating"), 5),
      ("surface_ply", (), ("surface_ply", "resin_layer", "model"), 1)],
     "signal from the surface ply in 100 % of the valid area at 20 Hz; coating, resin-rich layer and heat "
     "model at 20 Hz rejected"),
    ([("surface_ply", (), ("surface_ply", "coating"), 6), ("surface_ply", (), ("surface_ply",), 94)],
     "signal from the surface ply in 100 % of the valid area at 20 Hz; resin-rich layer, whole laminate and "
     "heat model at 20 Hz rejected"),
    # no source fits: the sentence says so, without a list that would repeat it
    ([("no_source_fits", (), (), 80), ("laminate", (), ("laminate",), 20)],
     "no candidate source fits the measurement in 80 % of the valid area at 20 Hz"),
])
def test_verdict_names_the_tied_and_the_rejected_sources(rows, expected, tmp_path):
    ds = result_with_ties(rows)
    assert report.verdict(ds) == expected
    s = report.summarize_run(ds)
    assert s["verdict"] == expected
    report.validate_summary(s)
    ties = [(set(t), n) for category, t, _f, n in rows if category == "indistinguishable"]
    assert [(set(t["sources"]), t["fraction"]) for t in s["ties"]] == [
        (t, pytest.approx(n / 100)) for t, n in sorted(ties, key=lambda tn: -tn[1])]
    for src, share in s["fit_fractions"].items():
        assert share == pytest.approx(sum(n for *_x, fitting, n in rows if src in fitting) / 100)
    # the maps and their CF attributes survive result.nc, and so does the sentence
    write_netcdf(ds, tmp_path / "result.nc")
    assert report.verdict(read_netcdf(tmp_path / "result.nc")) == expected


def test_verdict_of_a_diagnosis_where_two_sources_coincide():
    # diagnose() end to end: surface ply and laminate predict the same ratio, coating and resin
    # layer lie 30 sigma away, the measurement sits on the first two
    from fusion.diagnose import diagnose

    rng = np.random.default_rng(11)
    m = -5e-6 + rng.normal(0, 1e-7, (4, 25))
    preds = {"coating": np.full(m.shape, -2e-5), "resin_layer": np.full(m.shape, 1e-5),
             "surface_ply": np.full(m.shape, -5e-6), "laminate": np.full(m.shape, -5e-6)}
    d = diagnose(m, 1e-7, preds, {k: 5e-8 for k in preds})
    maps = {**d.to_maps(), "ratio_measured": m, "valid": d.valid.astype(np.int8)}
    ds = result_dataset(maps, sources=d.sources, attrs={"run_name": "C-20Hz", "frequency": 20.0})
    assert report.verdict(ds) == ("surface ply and whole laminate fit equally (indistinguishable) in 100 % of "
                                  "the valid area at 20 Hz; coating and resin-rich layer rejected")


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
    s = report.summarize_run(ds, warnings=["drift of 0.3 K over the record", {"code": "other", "message": "drift of 0.3 K over the record"}])
    codes = [w["code"] for w in s["warnings"]]
    assert codes == ["registration_error", "low_snr", "dissipative_heating", "low_valid_area", "other"]
    assert "0.90 IR px" in s["warnings"][0]["message"]
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
