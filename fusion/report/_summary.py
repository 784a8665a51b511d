"""The run summary: verdict sentence, area fractions, statistics, warnings; summary.json."""

from __future__ import annotations

import datetime as _dt
import functools
import json
import math
from importlib import resources
from pathlib import Path

import numpy as np

from .. import __version__
from ..datamodel import SOURCES
from ..register import FOOTPRINT_WARN
from ..io import atomic_write_text
from ._figures import evaluated_sources
from ._resolution import strain_resolution
from ._style import attr_float, category_label, frequency_text, pixel_size_mm, source_categories

__all__ = [
    "summarize_run", "verdict", "write_summary", "validate_summary", "summary_schema", "format_percent",
    "WARNING_CODES", "REJECTED_SHARE",
]

WARNING_CODES = ("registration_error", "registration_exact_fit", "registration_outlier", "registration_footprint",
                 "registration_refinement", "low_snr", "dissipative_heating", "low_valid_area",
                 "sign_reversed", "deprecated_key", "other")

# the registration step judges its own error (with the reason); the summary's own check of the
# RMS is for results made without it
_REGISTRATION_JUDGED = {"registration_error", "registration_exact_fit", "registration_outlier"}

_PHRASES = {
    "coating": "signal from the coating",
    "resin_layer": "signal from the resin-rich surface layer",
    "surface_ply": "signal from the surface ply",
    "laminate": "signal from the whole laminate (homogenised)",
    "model": "signal explained by the through-thickness heat model",
    "lateral": "signal explained by the heat model with heat flowing along the surface too",
}


@functools.lru_cache(maxsize=1)
def _schema_text() -> str:
    return resources.files("fusion").joinpath("schema", "summary.schema.json").read_text(encoding="utf-8")


def summary_schema() -> dict:
    """The JSON Schema (draft 2020-12) of ``summary.json``, as a dict."""
    return json.loads(_schema_text())


def _jsonable(value):
    """numpy scalars and arrays to Python, non-finite floats to None, keys to str."""
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return f if math.isfinite(f) else None
    if isinstance(value, Path):
        return str(value)
    return value


def validate_summary(summary: dict) -> dict:
    """Check a summary against :func:`summary_schema`; returns the JSON-ready copy.

    Raises
    ------
    ValueError
        Naming the first offending key path and the rule it breaks.
    """
    import jsonschema

    clean = _jsonable(summary)
    validator = jsonschema.Draft202012Validator(summary_schema())
    errors = sorted(validator.iter_errors(clean), key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        where = "/".join(str(p) for p in e.absolute_path) or "(top level)"
        raise ValueError(f"summary does not match summary.schema.json at {where!r}: {e.message}"
                         + (f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""))
    return clean


def write_summary(summary: dict, path, *, overwrite: bool = False) -> Path:
    """Validate ``summary`` and write it as UTF-8 JSON to ``path`` (atomically).

    Non-finite numbers become ``null``; nothing is written when validation fails.

    Parameters
    ----------
    summary : dict
        From :func:`summarize_run`.
    path : str or Path
        Usually ``<run name>/summary.json``.
    overwrite : bool
        Replace an existing file (otherwise :class:`fusion.errors.InputError`).

    Returns
    -------
    Path

    References
    ----------
    JSON Schema draft 2020-12 (json-schema.org); T. Bray (ed.), RFC 8259, *The
    JavaScript Object Notation (JSON) Data Interchange Format*, 2017 (no NaN).
    """
    clean = validate_summary(summary)
    text = json.dumps(clean, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    return atomic_write_text(path, text, overwrite=overwrite)


def format_percent(fraction: float) -> str:
    """``"97 %"``; never rounds a partial area up to 100 % or a present one down to 0 %."""
    p = 100.0 * float(fraction)
    if p >= 100.0:
        return "100 %"
    if p >= 99.5:
        return "> 99 %"
    if p <= 0.0:
        return "0 %"
    if p < 0.5:
        return "< 1 %"
    return f"{math.floor(p + 0.5):d} %"


def _valid_mask(ds) -> np.ndarray:
    m = np.isfinite(np.asarray(ds["ratio_measured"].values)) if "ratio_measured" in ds.data_vars else None
    if "valid" in ds.data_vars:
        v = np.asarray(ds["valid"].values) == 1
        return v if m is None else v & m
    if m is None:
        raise ValueError("the result has neither 'valid' nor 'ratio_measured'")
    return m


def _fractions(ds, valid) -> dict[str, float]:
    if "source_layer" not in ds.data_vars:
        return {}
    codes = source_categories(ds)
    raw = np.asarray(ds["source_layer"].values)[valid]
    unknown = set(np.unique(raw).tolist()) - set(codes)
    if unknown:
        raise ValueError(f"source_layer holds codes {sorted(unknown)!r} not listed in its flag_values {sorted(codes)!r}")
    n = raw.size
    return {name: (float(np.count_nonzero(raw == code)) / n if n else 0.0) for code, name in codes.items()}


#: A source that fits (|z| within the fit threshold) in at most this share of the valid
#: area is called rejected: the measurement rules it out almost everywhere (our choice).
REJECTED_SHARE = 0.05


def _names(labels) -> str:
    """``"a"``, ``"a and b"``, ``"a, b and c"``."""
    labels = list(labels)
    return labels[0] if len(labels) == 1 else ", ".join(labels[:-1]) + " and " + labels[-1]


def _ties(ds, valid) -> list[dict] | None:
    """Which sources tie at the indistinguishable pixels: sets and their share of the valid area."""
    if "source_tie" not in ds.data_vars or "source_layer" not in ds.data_vars:
        return None
    masks = ds["source_tie"].attrs.get("flag_masks")
    meanings = ds["source_tie"].attrs.get("flag_meanings")
    if masks is None or meanings is None:
        return None
    meanings = meanings.split() if isinstance(meanings, str) else list(meanings)
    bits = dict(zip((int(m) for m in np.atleast_1d(masks)), meanings))
    codes = {name: code for code, name in source_categories(ds).items()}
    n = int(valid.sum())
    raw = np.asarray(ds["source_tie"].values).astype(np.int64)[valid & (np.asarray(ds["source_layer"].values)
                                                                      == codes.get("indistinguishable"))]
    values, counts = np.unique(raw[raw > 0], return_counts=True)
    out = [{"sources": [name for bit, name in bits.items() if v & bit], "fraction": float(c) / n}
           for v, c in zip(values.tolist(), counts.tolist())]
    out.sort(key=lambda t: (-t["fraction"], [SOURCES.index(x) for x in t["sources"] if x in SOURCES]))
    return out


def _fit_fractions(ds, valid) -> dict[str, float] | None:
    """Share of the valid area where each evaluated source fits (its probability is above 0)."""
    if "source_probability" not in ds.data_vars or "source" not in ds.coords:
        return None
    p = np.asarray(ds["source_probability"].values)
    n = int(valid.sum())
    if not n:
        return None
    # the probability is 0 exactly where a source does not fit (fusion.diagnose.diagnose)
    return {str(src): float(np.count_nonzero(p[i][valid] > 0)) / n for i, src in enumerate(ds["source"].values)}


def _rejected(fits, ties) -> list[str] | None:
    if fits is None:
        return None
    tied = {x for t in ties or () for x in t["sources"]}
    return [src for src in SOURCES if src in fits and fits[src] <= REJECTED_SHARE and src not in tied]


def _verdict_text(fractions, n_valid, frequency, has_map=True, *, ties=None,
                  rejected=None) -> tuple[str, dict | None]:
    at = f" at {frequency_text(frequency)}" if frequency is not None else ""
    if n_valid == 0:
        return (f"no valid data{at}: no pixel has both thermal and strain data of usable quality", None)
    if not has_map:
        return (f"no source map was computed{at}; see the measured and predicted maps", None)
    ranked = sorted(((f, c) for c, f in fractions.items() if f > 0), reverse=True)
    if not ranked:
        return (f"no pixel of the valid area was assigned a source{at}", None)
    top_f, top = ranked[0]
    dominant = {"category": top, "fraction": top_f}
    out = (f"; {_names(category_label(c, frequency) for c in rejected)} rejected" if rejected else "")
    if top_f < 0.5:
        parts = ", ".join(f"{category_label(c, frequency)} {format_percent(f)}" for f, c in ranked[:3])
        return (f"no single source dominates{at}: {parts} of the valid area{out}", dominant)
    pct = format_percent(top_f)
    if top in _PHRASES:
        return (f"{_PHRASES[top]} in {pct} of the valid area{at}{out}", dominant)
    if top == "indistinguishable":
        if ties:
            main = ties[0]
            text = (f"{_names(category_label(c, frequency) for c in main['sources'])} fit equally "
                    f"(indistinguishable) in {format_percent(main['fraction'])} of the valid area{at}")
            other = sum(t["fraction"] for t in ties[1:])
            if other > 0:
                text += f", other sets of sources tie in {format_percent(other)}"
        else:
            text = f"candidate sources indistinguishable in {pct} of the valid area{at}"
        rest = [(f, c) for f, c in ranked[1:] if c in _PHRASES]
        if rest:
            text += f"; elsewhere mostly the {category_label(rest[0][1], frequency)} ({format_percent(rest[0][0])})"
        return (text + out, dominant)
    if top == "no_source_fits":
        return (f"no candidate source fits the measurement in {pct} of the valid area{at}", dominant)
    return (f"{category_label(top, frequency)} in {pct} of the valid area{at}{out}", dominant)


def verdict(ds) -> str:
    """One sentence naming the source of the signal over the valid area.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of a run with ``source_layer`` (CF flags) and ``valid``.

    Returns
    -------
    str
        e.g. ``"signal from the surface ply in 97 % of the valid area at 20 Hz;
        coating and resin-rich layer rejected"``; names the sources that tie where
        the candidates are indistinguishable (``"surface ply and whole laminate fit
        equally (indistinguishable) in 95 % of the valid area at 20 Hz"``), and
        states plainly when no source fits, when no category holds half the area,
        and when there is no valid data.

    Notes
    -----
    The fraction is the share of valid pixels assigned to the category by the
    source map; it says nothing about pixels outside the valid mask. The tied
    sources come from ``source_tie``; a source is rejected when it fits (its
    ``source_probability`` is above 0) in at most :data:`REJECTED_SHARE` of the
    valid area. Without those maps (older results) the sentence names neither.
    """
    valid = _valid_mask(ds)
    ties = _ties(ds, valid)
    text, _ = _verdict_text(_fractions(ds, valid), int(valid.sum()), attr_float(ds, "frequency"),
                            has_map="source_layer" in ds.data_vars, ties=ties,
                            rejected=_rejected(_fit_fractions(ds, valid), ties))
    return text


def _stats(values) -> dict:
    a = np.asarray(values, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size == 0:
        return {"n": 0, "mean": None, "std": None, "median": None, "p05": None, "p95": None, "min": None, "max": None}
    p05, med, p95 = np.percentile(a, [5, 50, 95])
    return {"n": int(a.size), "mean": float(a.mean()), "std": float(a.std()), "median": float(med),
            "p05": float(p05), "p95": float(p95), "min": float(a.min()), "max": float(a.max())}


def _prediction(ds, source, valid, measured):
    pred = np.asarray(ds[f"ratio_{source}"].values, dtype=np.float64)[valid]
    if f"residual_{source}" in ds.data_vars:
        res = np.asarray(ds[f"residual_{source}"].values, dtype=np.float64)[valid]
    else:
        res = measured - pred
    res = res[np.isfinite(res)]
    residual = ({"mean": float(res.mean()), "median": float(np.median(res)), "rms": float(np.sqrt(np.mean(res * res)))}
                if res.size else {"mean": None, "median": None, "rms": None})
    within = None
    if f"zscore_{source}" in ds.data_vars:
        z = np.asarray(ds[f"zscore_{source}"].values, dtype=np.float64)[valid]
        z = z[np.isfinite(z)]
        within = float(np.count_nonzero(np.abs(z) <= 2.0)) / z.size if z.size else None
    return {"ratio": _stats(pred), "residual": residual, "within_2_sigma": within}


def _snr(ds, valid):
    if "snr" in ds.data_vars:
        s = np.asarray(ds["snr"].values, dtype=np.float64)
    elif "delta_T" in ds.data_vars and "delta_T_std" in ds.data_vars:
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.abs(ds["delta_T"].values.astype(np.float64)) / ds["delta_T_std"].values
    elif "ratio_measured_std" in ds.data_vars:
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.abs(ds["ratio_measured"].values.astype(np.float64)) / ds["ratio_measured_std"].values
    else:
        return None
    s = s[valid]
    s = s[np.isfinite(s)]
    return float(np.median(s)) if s.size else None


def _normalise_warnings(items):
    out = []
    for w in items or ():
        if isinstance(w, str):
            w = {"code": "other", "message": w}
        elif isinstance(w, dict):
            w = {"code": str(w.get("code", "other")), "message": str(w.get("message", "")).strip()}
        else:
            raise TypeError(f"warning {w!r} must be a str or a dict with 'code' and 'message'")
        if w["code"] not in WARNING_CODES:
            raise ValueError(f"warning code {w['code']!r} is not one of {WARNING_CODES!r}")
        if not w["message"]:
            raise ValueError(f"warning {w!r} has an empty message")
        if w not in out:
            out.append(w)
    return out


def _auto_warnings(ds, *, n_valid, snr_median, rms, meta, registration_limit_px,
                   snr_limit, second_harmonic_limit, valid_area_limit, given):
    out = []
    if rms is not None and rms > registration_limit_px and not given & _REGISTRATION_JUDGED:
        out.append({"code": "registration_error", "message": (
            f"registration RMS error {rms:.2f} IR px exceeds {registration_limit_px:g} px: strain and "
            "temperature may be compared at different points, worst where gradients are steep")})
    if snr_median is not None and snr_median < snr_limit:
        out.append({"code": "low_snr", "message": (
            f"median signal-to-noise ratio {snr_median:.1f} is below {snr_limit:g}: source assignments are "
            "weak; average more cycles or raise the load range within the specimen's limits")})
    harm = meta.get("second_harmonic_ratio", ds.attrs.get("second_harmonic_ratio"))
    if harm not in (None, "") and float(harm) > second_harmonic_limit:
        out.append({"code": "dissipative_heating", "message": (
            f"second harmonic at {float(harm):.0%} of the fundamental (limit {second_harmonic_limit:.0%}) "
            "suggests dissipative heating or non-linear response; the adiabatic laws may not apply")})
    usable = (meta.get("footprint") or {}).get("valid_reference_pixels")
    if usable:
        share = n_valid / usable
        where = f"of the {usable} IR px with usable thermal data"
    else:
        share = n_valid / ds["ratio_measured"].size if ds["ratio_measured"].size else 0.0
        where = "of the field"
    if share < valid_area_limit and "registration_footprint" not in given:
        out.append({"code": "low_valid_area", "message": (
            f"only {format_percent(share)} {where} is valid ({n_valid} px; limit {format_percent(valid_area_limit)}): "
            "strain data missing or masked there, or the signal too weak")})
    return out


def summarize_run(ds, *, regions=None, warnings=None, meta=None, registration_limit_px: float = 0.5,
                  snr_limit: float = 3.0, second_harmonic_limit: float = 0.1,
                  valid_area_limit: float = FOOTPRINT_WARN) -> dict:
    """The numbers of one run for the report and for scripts (``summary.json``).

    Parameters
    ----------
    ds : xarray.Dataset
        Result of the run (variables of :mod:`fusion.datamodel`; global attrs
        ``run_name``, ``specimen``, ``frequency`` (Hz), ``registration_rms``
        (IR px), ``pixel_size_mm``, ``config_sha256``, ``version``).
    regions : list of dict, optional
        Region-table rows, each with a ``name`` and numbers or strings.
    warnings : list of str or dict, optional
        Warnings from earlier steps (``{"code", "message"}``; bare strings get
        the code ``"other"``), merged with those found here.
    meta : dict, optional
        Free metadata kept under ``meta``. Read keys: ``second_harmonic_ratio``
        (median ``|2f| / |1f|`` amplitude, also read from the attrs), ``created``,
        ``footprint`` (``valid_reference_pixels``: IR pixels with usable thermal
        data outside markers and exclusions, the area the valid area is judged
        against).
    registration_limit_px, snr_limit, second_harmonic_limit, valid_area_limit : float
        Thresholds of the automatic warnings (IR px; median ``|dT|/std``;
        fraction of the fundamental; share of the usable thermal area, or of
        the whole field when ``meta`` does not give it). They are this
        project's defaults, not values from a standard; laboratories should set
        their own. The valid-area rule is the registration's footprint rule
        (:data:`fusion.register.FOOTPRINT_WARN`); its warning is left out when
        the registration already reported a small footprint, and the RMS check
        when the registration judged its own error.

    Returns
    -------
    dict
        Matches :func:`summary_schema`: ``verdict``, ``dominant``,
        ``valid_fraction``, ``source_fractions`` (of the valid area), ``ties``
        (the sets of sources that tie and their share of the valid area),
        ``fit_fractions`` (share where each source fits), ``rejected``,
        ``measured`` and ``predicted`` statistics (dimensionless dT/T0),
        ``frequency_hz``, ``registration_rms_px``, ``warnings``, and
        ``strain_resolution`` (VSG, modelled gains, noise floor of the strain maps; see
        :func:`fusion.report._resolution.strain_resolution`)...
    """
    if "ratio_measured" not in ds.data_vars:
        raise ValueError(f"the result has no 'ratio_measured' map; present: {sorted(ds.data_vars)}")
    meta = dict(meta or {})
    valid = _valid_mask(ds)
    n_valid = int(valid.sum())
    total = int(valid.size)
    frequency = attr_float(ds, "frequency")
    fractions = _fractions(ds, valid)
    ties = _ties(ds, valid)
    fits = _fit_fractions(ds, valid)
    rejected = _rejected(fits, ties)
    text, dominant = _verdict_text(fractions, n_valid, frequency, has_map="source_layer" in ds.data_vars,
                                   ties=ties, rejected=rejected)
    measured = np.asarray(ds["ratio_measured"].values, dtype=np.float64)[valid]
    predicted = {s: _prediction(ds, s, valid, measured) for s in evaluated_sources(ds)}
    beta = (_stats(np.asarray(ds["surface_fraction"].values)[valid]) if "surface_fraction" in ds.data_vars else None)
    rms = attr_float(ds, "registration_rms")
    snr_median = _snr(ds, valid)
    valid_fraction = n_valid / total if total else 0.0
    passed = _normalise_warnings(warnings)
    found = _auto_warnings(ds, n_valid=n_valid, snr_median=snr_median, rms=rms,
                           meta=meta, registration_limit_px=registration_limit_px, snr_limit=snr_limit,
                           second_harmonic_limit=second_harmonic_limit, valid_area_limit=valid_area_limit,
                           given={w["code"] for w in passed})
    created = meta.get("created") or ds.attrs.get("created") or _dt.datetime.now(_dt.timezone.utc).isoformat(
        timespec="seconds")
    sha = ds.attrs.get("config_sha256") or None
    summary = {
        "schema_version": 1,
        "run": str(ds.attrs.get("run_name") or "run"),
        "specimen": (str(ds.attrs["specimen"]) if ds.attrs.get("specimen") not in (None, "") else None),
        "frequency_hz": frequency,
        "verdict": text,
        "dominant": dominant,
        "grid": {"ny": int(ds.sizes["y"]), "nx": int(ds.sizes["x"]), "pixel_size_mm": pixel_size_mm(ds)},
        "valid_pixels": n_valid,
        "valid_fraction": valid_fraction,
        "source_fractions": fractions,
        "ties": ties,
        "fit_fractions": fits,
        "rejected": rejected,
        "measured": _stats(measured),
        "predicted": predicted,
        "surface_fraction": beta,
        "snr_median": snr_median,
        "registration_rms_px": rms,
        "regions": _jsonable(list(regions or [])),
        "strain_resolution": strain_resolution(ds),
        "warnings": _normalise_warnings(found + passed),
        "provenance": {"config_sha256": str(sha) if sha else None,
                       "version": str(ds.attrs.get("version") or __version__),
                       "created": str(created)},
        "meta": _jsonable(meta),
    }
    return _jsonable(summary)
