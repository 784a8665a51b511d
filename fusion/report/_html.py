"""The campaign report: one self-contained HTML file (no scripts, no network)."""

from __future__ import annotations

import base64
import datetime as _dt
import functools
import html
import io
import math
import re
from importlib import resources
from pathlib import Path

from .. import __version__
from ..io import atomic_write_text
from ._bands import band_sentence
from ._style import CATEGORY_COLOURS, category_label, engineering_exponent
from ._summary import REJECTED_SHARE, _normalise_warnings, format_percent

__all__ = ["write_report", "render_report", "CAUTIONS"]

#: The cautions printed in every report.
CAUTIONS = (
    "These results support engineering judgement. They do not certify a component, a material or a test.",
    "Test rigs under cyclic load store energy and can fail suddenly. Follow your laboratory's procedures and "
    "the applicable test standards, and keep clear of a loaded specimen.",
    "The source assignment rests on the stated material properties, the registration between the cameras and "
    "the uncertainties given; check them before acting on a result.",
    "Defer to qualified engineers for any decision about the safety or fitness for service of a structure.",
)

#: Beside every recommended band: it is the heat model's statement only.
BAND_CAUTION = ("A recommended band says where the fitted heat model stays near one source; the loading "
                "frequency must also respect the limits of the rig and of the specimen (self-heating under "
                "fast cycling) and the applicable test standard.")

_NONE_FIGURES = '<p class="none">No figures for this run.</p>'
_NONE_CAMPAIGN = '<p class="none">No campaign figures (a sweep needs runs at two or more frequencies).</p>'

_MIME = {".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".svg": "image/svg+xml",
         ".gif": "image/gif", ".webp": "image/webp"}

_FIGURES = {
    "measured_vs_predicted": ("Measured dT/T0 beside each prediction",
                              "Measured dT/T0 (first panel) and the dT/T0 predicted for each candidate source, "
                              "all on one colour scale. Dark grey: no valid data."),
    "residuals": ("Residual maps", "Measured minus predicted dT/T0 for each source, on a scale symmetric about "
                                   "zero: light grey means agreement, dark grey marks pixels without valid data."),
    "heat_spread": ("Heat flowing along the surface",
                    "Residuals of the through-thickness heat model and of the lateral heat model (heat flowing "
                    "along the surface too), and their root-mean-square against the distance from the nearest "
                    "hole, beside the measurement noise. Dashed outline: within an in-plane diffusion length of "
                    "no data, where the lateral model cannot know the boundary."),
    "source_map": ("Source-layer map", "The best-supported source of the signal at each pixel; "
                                       "'indistinguishable' where candidates agree within the uncertainty; "
                                       "dark grey: no valid data."),
    "overlay": ("Measured dT/T0 over the visible image",
                "Measured dT/T0 laid semi-transparently over the registered visible reference image, with the "
                "correlation region outlined; where dT/T0 has no valid data the visible image shows through."),
    "profile": ("Line profile", "Measured dT/T0 with its ±2 standard-deviation band and each prediction along "
                                "the line A→B drawn on the map."),
    "through_thickness": ("Through-thickness adiabatic profile",
                          "Adiabatic dT/T0 of each layer of the layup against depth below the viewed face, with "
                          "the measured median and interquartile range."),
}


@functools.lru_cache(maxsize=1)
def _css() -> str:
    return resources.files("fusion.report").joinpath("report.css").read_text(encoding="utf-8")


def _e(text) -> str:
    return html.escape("" if text is None else str(text), quote=True)


def _slug(text: str, used: set) -> str:
    base = re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-") or "run"
    slug, k = f"run-{base}", 2
    while slug in used:
        slug, k = f"run-{base}-{k}", k + 1
    used.add(slug)
    return slug


def _num(value) -> str:
    """A number as HTML text: scientific with a real superscript for small ratios."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return '<span class="none">n/a</span>'
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:d}"
    v = float(value)
    if v == 0.0:
        return "0"
    if abs(v) < 1e-3 or abs(v) >= 1e5:
        exp = math.floor(math.log10(abs(v)))
        mant = v / 10.0 ** exp
        if round(abs(mant), 3) >= 10.0:
            mant, exp = mant / 10.0, exp + 1
        return f"{mant:.3f}×10<sup>{exp}</sup>".replace("-", "−")
    return f"{v:.4g}".replace("-", "−")


def _cell(value) -> str:
    if isinstance(value, (int, float)) or value is None:
        return f'<td class="num">{_num(value)}</td>'
    return f"<td>{_e(value)}</td>"


def _table(caption, header, rows, *, label, raw_header=False) -> str:
    """rows: list of (row header text, [cell html...]); header cells are HTML when ``raw_header``."""
    head = "".join(f'<th scope="col">{h if raw_header else _e(h)}</th>' for h in header)
    body = "".join(f'<tr><th scope="row">{r}</th>{"".join(cells)}</tr>' for r, cells in rows)
    return (f'<div class="table-wrap" role="region" aria-label="{_e(label)}" tabindex="0"><table>'
            f"<caption>{_e(caption)}</caption><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>")


def _data_uri(path, max_width: int) -> tuple[str, int, int] | None:
    """Image file as a data URI, PNG/JPEG downscaled to ``max_width`` pixels; None for other formats."""
    path = Path(path)
    mime = _MIME.get(path.suffix.lower())
    if mime is None:
        return None
    data = path.read_bytes()
    width = height = 0
    if mime != "image/svg+xml":
        from PIL import Image

        with Image.open(io.BytesIO(data)) as im:
            width, height = im.size
            if width > max_width:
                height = round(height * max_width / width)
                width = max_width
                small = im.convert("RGBA" if im.mode in ("RGBA", "LA", "P") else "RGB").resize(
                    (width, height), Image.Resampling.LANCZOS)
                buf = io.BytesIO()
                small.save(buf, format="PNG", optimize=True)
                data, mime = buf.getvalue(), "image/png"
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}", width, height


def _figure(name, path, alt, caption, max_width) -> str:
    uri = _data_uri(path, max_width)
    if uri is None:
        return (f'<p class="none">{_e(caption)} ({_e(Path(path).name)}: this format cannot be embedded; '
                "see the figures folder).</p>")
    src, w, h = uri
    size = f' width="{w}" height="{h}"' if w and h else ""
    return (f'<figure id="{_e(name)}"><img src="{src}" alt="{_e(alt)}"{size}>'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _alt(name, summary) -> str:
    run = summary.get("run", "run")
    title = _FIGURES.get(name, (name.replace("_", " ").capitalize(), ""))[0]
    if name == "source_map":
        parts = [f"{category_label(c, summary.get('frequency_hz'))} {format_percent(f)}"
                 for c, f in sorted((summary.get("source_fractions") or {}).items(), key=lambda kv: -kv[1]) if f > 0]
        if parts:
            return f"{title} of run {run}: " + ", ".join(parts) + " of the valid area."
    return f"{title} of run {run}."


def _warnings_html(warnings) -> str:
    if not warnings:
        return '<p class="none">No warnings.</p>'
    items = "".join(f'<li><span class="code">Warning ({_e(w["code"].replace("_", " "))}):</span> {_e(w["message"])}</li>'
                    for w in warnings)
    return f'<ul class="warnings">{items}</ul>'


def _swatch(category) -> str:
    colour = CATEGORY_COLOURS.get(category, "#000")
    return f'<span class="swatch" style="background:{colour}" aria-hidden="true"></span>'


def _fractions_table(summary) -> str:
    fractions = summary.get("source_fractions") or {}
    if not fractions:
        return '<p class="none">No source map for this run.</p>'
    f_hz = summary.get("frequency_hz")
    fits = summary.get("fit_fractions")
    rejected = set(summary.get("rejected") or ())
    ties = summary.get("ties") or []
    shown = [(c, f) for c, f in fractions.items() if f > 0 or (fits and c in fits)]
    shown.sort(key=lambda cf: -cf[1])
    rows = []
    for c, f in shown:
        cells = [f'<td class="num">{_e(format_percent(f))}</td>']
        if fits:
            cells.append(f'<td class="num">{_e(format_percent(fits[c]))}</td>' if c in fits else _cell(None))
        note = ""
        if c in rejected:
            note = "rejected: the measurement rules it out"
        elif c == "indistinguishable" and ties:
            note = "; ".join(f"{' and '.join(category_label(x, f_hz) for x in t['sources'])} tie in "
                             f"{format_percent(t['fraction'])}" for t in ties[:3])
            if len(ties) > 3:
                note += f"; other sets in {format_percent(sum(t['fraction'] for t in ties[3:]))}"
        cells.append(f"<td>{_e(note)}</td>")
        rows.append((_swatch(c) + _e(category_label(c, f_hz)), cells))
    if not rows:
        return '<p class="none">No valid pixel was assigned a category.</p>'
    head = ["Category", "Share of the valid area"] + (["Fits in"] if fits else []) + ["Note"]
    caption = ("Share of the valid area assigned to each category of the source map"
               + (", and the share where each source fits the measurement (|z| within the fit threshold); "
                  f"a source that fits in at most {format_percent(REJECTED_SHARE)} of the valid area is "
                  "rejected." if fits else
                  " (categories not listed hold no pixel)."))
    return _table(caption, head, rows, label=f"source fractions of {summary.get('run')}")


def _ratios_table(summary) -> str:
    meas = summary.get("measured") or {}
    rows = [("measured", [_cell(meas.get("median")), _cell(meas.get("p05")), _cell(meas.get("p95")),
                          _cell(None), _cell(None), _cell(None)])]
    for s, p in (summary.get("predicted") or {}).items():
        r, res = p.get("ratio") or {}, p.get("residual") or {}
        within = p.get("within_2_sigma")
        rows.append((_e(f"predicted: {category_label(s, summary.get('frequency_hz'))}"),
                     [_cell(r.get("median")), _cell(r.get("p05")), _cell(r.get("p95")), _cell(res.get("median")),
                      _cell(res.get("rms")),
                      f'<td class="num">{_e(format_percent(within)) if within is not None else _num(None)}</td>']))
    return _table("dT/T0 over the valid area (dimensionless); residual = measured − predicted.",
                  ["Map", "Median", "5th percentile", "95th percentile", "Residual median", "Residual RMS",
                   "Within ±2σ"], rows, label=f"dT/T0 statistics of {summary.get('run')}")


_REGION_KNOWN = ("name", "pixels", "measured_mean", "measured_std", "winner", "winner_share")


def _scaled(values) -> tuple[int, callable]:
    """A power of ten (multiple of 3) for a column of ratios, and the cell text at that scale."""
    finite = [abs(float(v)) for v in values if isinstance(v, (int, float)) and not isinstance(v, bool)
              and math.isfinite(float(v))]
    exp = engineering_exponent(max(finite)) if finite else 0

    def cell(v):
        if v is None or isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
            return _num(None)
        return f"{float(v) / 10.0 ** exp:.3g}".replace("-", "−")
    return exp, cell


def _scale_text(exp) -> str:
    return "" if exp == 0 else f" (×10<sup>{exp}</sup>)".replace("-", "−")


def _regions_table(regions, run, frequency=None) -> str:
    """The region table in two parts that fit the page: what was measured and which category won,
    then each source's predicted dT/T0 with the mean |z| beneath it."""
    if not regions:
        return '<p class="none">No region table for this run.</p>'
    extra = []
    for row in regions:
        extra += [k for k in row if k not in _REGION_KNOWN and not k.startswith(("predicted_", "mean_abs_z_"))
                  and k not in extra]
    sources = []
    for row in regions:
        sources += [k[len("predicted_"):] for k in row if k.startswith("predicted_") and k[len("predicted_"):]
                    not in sources]
    m_exp, m_cell = _scaled([row.get(k) for row in regions for k in ("measured_mean", "measured_std")])
    rows = []
    for row in regions:
        winner = row.get("winner")
        share = row.get("winner_share")
        cells = [_cell(row.get("pixels")),
                 f'<td class="num">{m_cell(row.get("measured_mean"))}</td>',
                 f'<td class="num">{m_cell(row.get("measured_std"))}</td>',
                 f"<td>{_swatch(winner)}{_e(category_label(winner, frequency))}</td>" if winner else _cell(None),
                 f'<td class="num">{_e(format_percent(share))}</td>'
                 if isinstance(share, (int, float)) and math.isfinite(share) else _cell(None)]
        cells += [_cell(row.get(k)) for k in extra]
        rows.append((_e(row.get("name", "")), cells))
    scale = _scale_text(m_exp)
    head = ["Region", "Valid pixels", f"Measured dT/T0, mean{scale}", f"Spread over the region (std){scale}",
            "Best-supported category", "Its share of the region"] + [k.replace("_", " ") for k in extra]
    out = _table("Regions of the field: the measured dT/T0 (dimensionless) and the source-map category "
                 "that holds most of each region's valid pixels.", head, rows, label=f"region table of {run}",
                 raw_header=True)
    if sources:
        p_exp, p_cell = _scaled([row.get(f"predicted_{s}") for row in regions for s in sources])
        prow = []
        for row in regions:
            cells = []
            for src in sources:
                z = row.get(f"mean_abs_z_{src}")
                z_text = (f'<br><span class="sub">|z| {float(z):.2g}</span>'
                          if isinstance(z, (int, float)) and math.isfinite(float(z)) else "")
                cells.append(f'<td class="num">{p_cell(row.get(f"predicted_{src}"))}{z_text}</td>')
            prow.append((_e(row.get("name", "")), cells))
        out += _table("Predicted dT/T0 of each source, mean over each region (dimensionless), with the mean "
                      "|z| of the measurement against it beneath: about 0.8 where the source and the stated "
                      "uncertainties match, clearly more where they do not.",
                      ["Region"] + [f"{_e(category_label(src, frequency))}{_scale_text(p_exp)}" for src in sources],
                      prow, label=f"predictions per region of {run}", raw_header=True)
    return out


def _registration_error(s) -> str:
    """The registration error as far as it is known: none for an exact fit, else the RMS and the
    largest leave-one-out error of a control point."""
    reg = (s.get("meta") or {}).get("registration") or {}
    if reg.get("error_estimate"):
        return _e(reg["error_estimate"])
    if s.get("registration_rms_px") is None:
        return _num(None)
    text = f"{_num(s.get('registration_rms_px'))} IR px"
    loo = [v for v in ((reg.get("assessment") or {}).get("leave_one_out_px") or []) if v is not None]
    if loo:
        text += f" (leave-one-out up to {_num(max(loo))} px over {len(loo)} points)"
    return text


def _facts(pairs) -> str:
    return '<dl class="facts">' + "".join(f"<div><dt>{_e(k)}</dt><dd>{v}</dd></div>" for k, v in pairs) + "</dl>"


def _resolution_html(s) -> str:
    """Spatial resolution and noise floor of the strain maps (iDICs reporting indicators)."""
    r = s.get("strain_resolution")
    if not r:
        return "<p>No spatial resolution is known for these strain maps (no correlation settings given).</p>"

    def length(px, mm):
        if px is None:
            return _num(None)
        return f"{_num(px)} px" + (f" ({_num(mm)} mm)" if mm is not None else "")

    floor = r.get("noise_floor") or {}
    noise = " / ".join(_num(None if floor.get(k) is None else floor[k] * 1e6)
                       for k in ("eps_xx", "eps_yy", "gamma_xy")) + " (eps_xx / eps_yy / gamma_xy)"
    if r.get("vsg_px") is None and r.get("vsg_mm") is None:
        return (_facts([("Noise floor (microstrain)", noise)])
                + "<p>The virtual strain gauge and the spatial resolution of these strain maps are not "
                  "known: the correlation settings that made them were not given.</p>")
    facts = _facts([
        ("Virtual strain gauge", length(r.get("vsg_px"), r.get("vsg_mm"))),
        ("Subset, step, window", f"{_num(r.get('subset_px'))} px, {_num(r.get('step_px'))} px, "
                                 f"{_num(r.get('strain_window'))} points"),
        ("Gain 0.5 at wavelength", length(r.get("wavelength_gain50_px"), r.get("wavelength_gain50_mm"))),
        ("Gain 0.9 above wavelength", length(r.get("wavelength_gain90_px"), r.get("wavelength_gain90_mm"))),
        ("Noise floor (microstrain)", noise),
        ("Nearest data to an edge", f"{_num(r.get('nearest_edge_px'))} IR px"
         if r.get("nearest_edge_px") is not None else _num(None)),
    ])
    rows = [(_num(t.get("wavelength_px")), [_cell(t.get("wavelength_mm")), _cell(t.get("gain"))])
            for t in r.get("transfer") or []]
    table = _table("Modelled gain of the strain maps on sinusoidal fields (box average over the subset, then "
                   "the slope fit over the window)", ["Wavelength (px)", "Wavelength (mm)", "Gain"], rows,
                   label="modelled strain transfer function")
    notes = " ".join(_e(t) for t in (r.get("noise_model"), r.get("edge_fit")) if t)
    return f"{facts}{table}" + (f"<p>{notes}.</p>" if notes else "")


def _run_section(run, slug, max_width) -> str:
    s = run["summary"]
    warnings = _normalise_warnings(list(s.get("warnings") or []) + list(run.get("warnings") or []))
    regions = run.get("regions") if run.get("regions") is not None else s.get("regions")
    grid = s.get("grid") or {}
    facts = _facts([
        ("Specimen", _e(s.get("specimen") or "n/a")),
        ("Loading frequency", f"{_num(s.get('frequency_hz'))} Hz" if s.get("frequency_hz") else _num(None)),
        ("Valid area", _e(format_percent(s.get("valid_fraction", 0.0)))),
        ("Registration RMS error", _registration_error(s)),
        ("Pixel size", f"{_num(grid.get('pixel_size_mm'))} mm" if grid.get("pixel_size_mm") else "not known (IR px)"),
        ("Median SNR", _num(s.get("snr_median"))),
    ])
    figures = "".join(
        _figure(f"{slug}-{name}", path, _alt(name, s), _FIGURES.get(name, (name, name.replace("_", " ")))[1], max_width)
        for name, path in (run.get("figures") or {}).items())
    return (
        f'<section class="run" id="{slug}" aria-labelledby="{slug}-h">'
        f'<h2 id="{slug}-h">Run {_e(s.get("run"))}</h2>'
        f'<p class="verdict">{_e(s.get("verdict"))}</p>{facts}'
        f"<h3>Source of the signal</h3>{_fractions_table(s)}"
        f"<h3>Measured and predicted dT/T0</h3>{_ratios_table(s)}"
        f"<h3>Regions</h3>{_regions_table(regions, s.get('run'), s.get('frequency_hz'))}"
        f"<h3>Strain maps: spatial resolution and noise floor</h3>{_resolution_html(s)}"
        f"<h3>Warnings</h3>{_warnings_html(warnings)}"
        f"<h3>Figures</h3>{figures or _NONE_FIGURES}"
        "</section>")


def _campaign_alt(name) -> tuple[str, str]:
    if name.startswith("frequency_"):
        spec = name[len("frequency_"):]
        return (f"Measured dT/T0 of specimen {spec} against loading frequency, with the heat model's curve, the "
                "adiabatic limits and the recommended band shaded.",
                f"Specimen {spec}: measured dT/T0 (±1 standard deviation) against loading frequency; lines: heat "
                "model and adiabatic limits; shaded: recommended loading-frequency band.")
    if name == "source_maps":
        return ("Source-layer maps of all runs side by side with one legend.",
                "Source-layer maps of all runs, one panel per run, one legend.")
    text = name.replace("_", " ")
    return (f"Campaign figure: {text}.", text)


def _band_text(sweep) -> str:
    """The band sentence of a sweep (capitalised), built from its numbers when it has none."""
    text = sweep.get("band_text")
    if not text and sweep.get("band_info"):
        text = band_sentence(sweep["band_info"], frequencies=sweep.get("frequencies") or ())
    if not text:
        return "no band information."
    return text[0].upper() + text[1:] + "."


def render_report(*, campaign: dict, runs: list, campaign_figures=None, failures=None,
                  max_image_width: int = 1600) -> str:
    """The HTML text of :func:`write_report` (same parameters, nothing written)."""
    name = str(campaign.get("name") or "fusion campaign")
    version = str(campaign.get("version") or __version__)
    date = str(campaign.get("date") or _dt.date.today().isoformat())
    sha = campaign.get("config_sha256")
    used: set = set()
    slugs = [_slug(r["summary"].get("run", "run"), used) for r in runs]

    overview_rows = []
    for r, slug in zip(runs, slugs):
        s = r["summary"]
        n_warn = len(_normalise_warnings(list(s.get("warnings") or []) + list(r.get("warnings") or [])))
        overview_rows.append((f'<a href="#{slug}">{_e(s.get("run"))}</a>', [
            _cell(s.get("specimen") or "n/a"), _cell(s.get("frequency_hz")), _cell(s.get("verdict")),
            f'<td class="num">{_e(format_percent(s.get("valid_fraction", 0.0)))}</td>', _cell(n_warn)]))
    overview = (_table("One line per run; details in the run sections.",
                       ["Run", "Specimen", "Frequency (Hz)", "Verdict", "Valid area", "Warnings"],
                       overview_rows, label="overview of the runs")
                if runs else '<p class="none">No run completed.</p>')

    toc_runs = "".join(f'<li><a href="#{slug}">{_e(r["summary"].get("run"))}</a></li>' for r, slug in zip(runs, slugs))
    toc = ('<nav class="toc" aria-labelledby="toc-h"><h2 id="toc-h">Contents</h2><ol>'
           '<li><a href="#overview">Overview</a></li><li><a href="#cautions">Cautions</a></li>'
           f'<li><a href="#runs">Runs</a><ol>{toc_runs}</ol></li>'
           '<li><a href="#sweeps">Loading-frequency bands</a></li>'
           '<li><a href="#campaign">Campaign figures</a></li><li><a href="#failures">Failed runs</a></li>'
           '<li><a href="#configuration">Configuration</a></li></ol></nav>')

    cautions = "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS)
    camp_figs = "".join(_figure(f"campaign-{k}", p, *_campaign_alt(k), max_image_width)
                        for k, p in (campaign_figures or {}).items())
    fail_rows = [(_e(f.get("run", "?")), [_cell(f.get("error", ""))]) for f in (failures or [])]
    fail_html = (_table("Runs that did not complete; the other runs are unaffected.", ["Run", "Error"], fail_rows,
                        label="failed runs") if fail_rows else '<p class="none">All runs completed.</p>')
    config_text = campaign.get("config_text")
    config_html = (f'<pre class="config" tabindex="0" aria-label="configuration text">{_e(config_text)}</pre>'
                   if config_text else '<p class="none">No configuration text was recorded.</p>')
    operator = campaign.get("operator")
    header_facts = _facts(([("Operator", _e(operator))] if operator else [])
                          + [("Configuration SHA-256", f"<code>{_e(sha)}</code>" if sha else _num(None)),
                             ("fusion version", _e(version)), ("Date", _e(date))])
    description = campaign.get("description")
    header_text = f'<p class="description">{_e(description)}</p>' if description else ""
    sweeps = campaign.get("sweeps") or {}
    sweep_html = ("".join(f'<p class="band"><strong>Specimen {_e(sp)}:</strong> {_e(_band_text(sw))}</p>'
                          for sp, sw in sweeps.items()) + f"<p>{_e(BAND_CAUTION)}</p>"
                  if sweeps else '<p class="none">No specimen was tested at two or more frequencies.</p>')
    body_runs = "".join(_run_section(r, slug, max_image_width) for r, slug in zip(runs, slugs))
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
        "style-src 'unsafe-inline'\">\n"
        f'<meta name="generator" content="fusion {_e(version)}">\n'
        f"<title>{_e(name)} · fusion report</title>\n<style>\n{_css()}</style>\n</head>\n<body>\n"
        '<a class="skip-link" href="#main">Skip to the content</a>\n'
        f'<header class="masthead"><p class="kicker">Thermoelastic and strain-field campaign report</p>'
        f"<h1>{_e(name)}</h1>{header_text}{header_facts}</header>\n"
        f'<div class="layout">{toc}\n<main id="main" tabindex="-1">\n'
        f'<section id="overview" aria-labelledby="overview-h"><h2 id="overview-h">Overview</h2>{overview}</section>\n'
        f'<section id="cautions" class="cautions" aria-labelledby="cautions-h"><h2 id="cautions-h">Cautions</h2>'
        f"<ul>{cautions}</ul></section>\n"
        f'<div id="runs">{body_runs}</div>\n'
        f'<section id="sweeps" aria-labelledby="sweeps-h"><h2 id="sweeps-h">Loading-frequency bands</h2>'
        f"{sweep_html}</section>\n"
        f'<section id="campaign" aria-labelledby="campaign-h"><h2 id="campaign-h">Campaign figures</h2>'
        f"{camp_figs or _NONE_CAMPAIGN}"
        "</section>\n"
        f'<section id="failures" aria-labelledby="failures-h"><h2 id="failures-h">Failed runs</h2>{fail_html}</section>\n'
        f'<section id="configuration" aria-labelledby="configuration-h"><h2 id="configuration-h">Configuration</h2>'
        f"{config_html}</section>\n</main></div>\n"
        f"<footer><p>Made by fusion {_e(version)} on {_e(date)}. {_e(CAUTIONS[0])}</p></footer>\n"
        "</body>\n</html>\n")


def write_report(path, *, campaign: dict, runs: list, campaign_figures=None, failures=None,
                 max_image_width: int = 1600, overwrite: bool = False) -> Path:
    """Write the campaign report as one self-contained HTML file.

    Parameters
    ----------
    path : str or Path
        The ``report.html`` to write (atomically).
    campaign : dict
        ``name``, ``description``, ``operator``, ``config_sha256``, ``version``,
        ``date`` (ISO 8601), ``config_text`` and ``sweeps`` (specimen ->
        ``band_text`` and/or ``band_info`` for :func:`band_sentence` and
        ``frequencies``); missing entries are shown as not available.
    runs : list of dict
        Per run: ``summary`` (from :func:`summarize_run` or a read
        ``summary.json``), ``figures`` (name -> image file; PNG, JPEG and SVG
        are embedded), optional ``regions`` (rows; default the summary's) and
        ``warnings`` (merged with the summary's).
    campaign_figures : dict of str to path, optional
        From :func:`campaign_figures`.
    failures : list of dict, optional
        ``{"run", "error"}`` of the runs that failed.
    max_image_width : int
        Wider raster figures are downscaled to this many pixels for embedding
        (the figure files themselves are untouched).
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    Path

    Notes
    -----
    Images are base64 data URIs, the style sheet is inline, there is no script
    and no web font; a Content-Security-Policy forbids every other load, so
    the page opens offline and makes no request. Headings are nested in order,
    tables carry ``<th scope>``, every image has alt text, wide tables and the
    configuration scroll with the keyboard, and a print style sheet puts each
    run on its own page.

    References
    ----------
    W3C, *Web Content Accessibility Guidelines (WCAG) 2.1*, 2018 (text
    alternatives, info and relationships, keyboard access, focus visible).
    """
    if not isinstance(runs, (list, tuple)):
        raise TypeError(f"runs must be a list of dicts, got {type(runs).__name__}")
    for k, r in enumerate(runs):
        if not isinstance(r, dict) or not isinstance(r.get("summary"), dict):
            raise ValueError(f"runs[{k}] must be a dict with a 'summary' dict; got {r!r:.80}")
    if not (isinstance(max_image_width, int) and max_image_width >= 200):
        raise ValueError(f"max_image_width={max_image_width!r} must be an integer of at least 200 px")
    text = render_report(campaign=campaign, runs=list(runs), campaign_figures=campaign_figures, failures=failures,
                         max_image_width=max_image_width)
    return atomic_write_text(path, text, overwrite=overwrite)
