"""report.html parsed with the standard library's HTML parser: self-contained, accessible, complete."""

from __future__ import annotations

import base64
import io
import re
import struct
from html.parser import HTMLParser

import numpy as np
import pytest

import fusion.report as report
from fusion.datamodel import result_dataset
from fusion.errors import InputError

SHA = "9f" * 32


class Page(HTMLParser):
    """Collects tags with attributes, text per tag and the heading outline."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.stack, self.headings, self.texts = [], [], [], []
        self.verdicts, self._in_verdict = [], False
        self.style = ""

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag in ("h1", "h2", "h3", "h4", "h5", "h6"):
            self.headings.append(int(tag[1]))
        if tag == "p" and "verdict" in (a.get("class") or "").split():
            self._in_verdict = True
            self.verdicts.append("")
        self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag == "p":
            self._in_verdict = False
        while self.stack and self.stack.pop() != tag:
            pass

    def handle_data(self, data):
        self.texts.append(data)
        if self._in_verdict:
            self.verdicts[-1] += data
        if self.stack and self.stack[-1] == "style":
            self.style += data

    @property
    def text(self):
        return " ".join(" ".join(self.texts).split())


def parse(text):
    p = Page()
    p.feed(text)
    p.close()
    return p


def small_result(name, frequency, code=2):
    ny, nx = 12, 20
    valid = np.ones((ny, nx), bool)
    valid[:, :2] = False
    sl = np.full((ny, nx), code, np.int8)
    sl[~valid] = -1
    base = np.where(valid, -5e-6, np.nan)
    maps = {"ratio_measured": base + 1e-7, "ratio_surface_ply": base, "residual_surface_ply": np.where(valid, 1e-7, np.nan),
            "source_layer": sl, "valid": valid.astype(np.int8)}
    return result_dataset(maps, attrs={"run_name": name, "specimen": "S1", "frequency": frequency,
                                       "registration_rms": 0.1, "config_sha256": SHA})


def png_bytes(width, height):
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.full((height, width, 3), 200, np.uint8)).save(buf, format="PNG")
    return buf.getvalue()


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    tmp_path = tmp_path_factory.mktemp("report")
    ds1 = small_result("S1-5Hz", 5.0)
    ds2 = small_result("<script>alert(1)</script>", 20.0, code=100)
    figs1 = report.run_figures(ds1, tmp_path / "S1-5Hz", dpi=40)
    (tmp_path / "wide.png").write_bytes(png_bytes(2400, 300))
    (tmp_path / "small.png").write_bytes(png_bytes(400, 300))
    (tmp_path / "x.pdf").write_bytes(b"%PDF-1.4\n%%EOF\n")
    s1 = report.summarize_run(ds1, regions=[{"name": "hole edge", "ratio_measured": -1.2e-5, "pixels": 40}],
                              warnings=["drift of 0.2 K over the record"])
    s2 = report.summarize_run(ds2)
    runs = [
        {"summary": s1, "figures": figs1, "warnings": [{"code": "other", "message": "drift of 0.2 K over the record"},
                                                       {"code": "low_snr", "message": "SNR 2.1 in the right grip"}]},
        {"summary": s2, "figures": {"wide": tmp_path / "wide.png", "small": tmp_path / "small.png",
                                    "vector": tmp_path / "x.pdf"}},
    ]
    path = report.write_report(
        tmp_path / "report.html",
        campaign={"name": "Coupon sweep A & B", "config_sha256": SHA, "version": "0.1.0", "date": "2026-12-01",
                  "config_text": "[[run]]\nname = \"S1-5Hz\"  # <b>not markup</b>"},
        runs=runs, campaign_figures={"frequency_S1": tmp_path / "small.png"},
        failures=[{"run": "S1-40Hz", "error": "ir/s1_40.npy: expected (frame, row, col), got 2 dims"}])
    return path, parse(path.read_text(encoding="utf-8")), (s1, s2), tmp_path


def test_self_contained_no_external_reference(built):
    path, page, _, _ = built
    text = path.read_text(encoding="utf-8")
    tags = [t for t, _ in page.tags]
    assert "script" not in tags and "link" not in tags and "iframe" not in tags and "object" not in tags
    for tag, a in page.tags:
        for attr in ("src", "href", "srcset", "data", "action", "poster"):
            if attr in a:
                v = a[attr]
                assert v.startswith("data:image/") or v.startswith("#"), (tag, attr, v[:60])
    # CSS with no url(...) or @import: nothing to fetch (system fonts only)
    assert "url(" not in page.style and "@import" not in page.style and "@font-face" not in page.style
    csp = [a for t, a in page.tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]["content"] and "img-src data:" in csp[0]["content"]
    assert not re.search(r"https?://", text)


def test_images_are_embedded_pngs_with_alt_text(built):
    path, page, (s1, _), tmp = built
    imgs = [a for t, a in page.tags if t == "img"]
    # run 1: maps, residuals, source map, profile (no overlay or ply inputs); run 2: two PNGs (the PDF is
    # not embeddable); one campaign figure
    assert len(imgs) == 4 + 2 + 1
    for a in imgs:
        assert a.get("alt", "").strip(), a.get("src", "")[:40]
        head, b64 = a["src"].split(",", 1)
        assert head == "data:image/png;base64"
        data = base64.b64decode(b64, validate=True)
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        w, h = struct.unpack(">II", data[16:24])  # IHDR (PNG specification)
        assert (int(a["width"]), int(a["height"])) == (w, h)
    by_alt = {a["alt"]: a for a in imgs}
    wide = [a for a in imgs if a["alt"].startswith("Wide")][0]
    assert (int(wide["width"]), int(wide["height"])) == (1600, 200)  # downscaled, aspect kept
    small = [a for a in imgs if a["alt"].startswith("Small")]
    assert base64.b64decode(small[0]["src"].split(",", 1)[1]) == (tmp / "small.png").read_bytes()
    src_alt = [k for k in by_alt if k.startswith("Source-layer map of run S1-5Hz")]
    assert src_alt == ["Source-layer map of run S1-5Hz: surface ply 100 % of the valid area."]
    assert "x.pdf: this format cannot be embedded" in page.text


def test_header_verdicts_tables_and_cautions(built):
    _, page, (s1, s2), _ = built
    assert page.headings.count(1) == 1
    # heading levels never skip (WCAG 2 technique G141, common practice)
    for a, b in zip(page.headings, page.headings[1:]):
        assert b <= a + 1
    t = page.text
    assert "Coupon sweep A & B" in t and SHA in t and "0.1.0" in t and "2026-12-01" in t
    assert page.verdicts == [s1["verdict"], s2["verdict"]]
    assert s1["verdict"] == "signal from the surface ply in 100 % of the valid area at 5 Hz"
    assert s2["verdict"] == "candidate sources indistinguishable in 100 % of the valid area at 20 Hz"
    for th in [a for tag, a in page.tags if tag == "th"]:
        assert th.get("scope") in ("col", "row")
    captions = [a for tag, a in page.tags if tag == "caption"]
    assert len(captions) == len([1 for tag, _ in page.tags if tag == "table"])
    assert "hole edge" in t and "S1-40Hz" in t and "expected (frame, row, col), got 2 dims" in t
    for phrase in ("support engineering judgement", "do not certify a component", "laboratory's procedures",
                   "applicable test standards", "qualified engineers"):
        assert phrase in t
    assert '[[run]] name = "S1-5Hz" # <b>not markup</b>' in t  # config shown as text, not parsed


def test_warnings_are_merged_once(built):
    path, page, _, _ = built
    text = path.read_text(encoding="utf-8")
    assert text.count("drift of 0.2 K over the record") == 1
    assert "SNR 2.1 in the right grip" in page.text
    assert "Warning (low snr):" in page.text


def test_untrusted_text_is_escaped(built):
    path, page, _, _ = built
    text = path.read_text(encoding="utf-8")
    assert "<script>" not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "<b>not markup</b>" not in text


def test_anchors_resolve_and_ids_are_unique(built):
    _, page, _, _ = built
    ids = [a["id"] for _, a in page.tags if "id" in a]
    assert len(ids) == len(set(ids))
    hrefs = [a["href"] for t, a in page.tags if t == "a"]
    assert hrefs and all(h[1:] in ids for h in hrefs)
    toc = [h for h in hrefs if h.startswith("#run-")]
    assert len(set(toc)) == 2
    # keyboard: the first link is the skip link to the main landmark, which can take focus
    first = next(a for t, a in page.tags if t == "a")
    assert first["href"] == "#main" and "skip-link" in first["class"]
    main = next(a for t, a in page.tags if t == "main")
    assert main["tabindex"] == "-1"
    # scrolling regions are reachable with the keyboard
    for t, a in page.tags:
        if "table-wrap" in (a.get("class") or "") or (t == "pre"):
            assert a.get("tabindex") == "0"
    assert "@media print" in page.style


def test_report_refuses_bad_input_and_overwrite(built):
    path, _, (s1, _), _ = built
    with pytest.raises(InputError, match="exists already"):
        report.write_report(path, campaign={"name": "x"}, runs=[{"summary": s1}])
    with pytest.raises(ValueError, match=r"runs\[0\] must be a dict with a 'summary'"):
        report.write_report(path.with_name("r2.html"), campaign={}, runs=[{"figures": {}}])
    empty = report.write_report(path.with_name("empty.html"), campaign={}, runs=[])
    assert "No run completed." in parse(empty.read_text(encoding="utf-8")).text


def test_header_names_the_operator_and_the_bands_are_sentences():
    band = {"low": 8.2, "high": 400.0, "source": "surface_ply", "tolerance": 0.02, "strict": True,
            "tried": (0.025, 400.0)}
    s = report.summarize_run(small_result("S1-5Hz", 5.0))
    html = report.render_report(
        campaign={"name": "C", "operator": "J. <Doe>", "description": "Open-hole coupons, batch 7",
                  "sweeps": {"S1": {"band_info": band, "frequencies": [5.0, 50.0]}}},
        runs=[{"summary": s, "figures": {}}])
    page = parse(html)
    assert "Operator J. <Doe>" in page.text and "J. &lt;Doe&gt;" in html
    assert "Open-hole coupons, batch 7" in page.text
    assert ("Specimen S1: Recommended loading frequencies from 8.2 Hz to above 400 Hz (the highest frequency "
            "tried); there the heat model stays within 2 % of the adiabatic dT/T0 of the surface ply, with a "
            "small phase lag; the run at 5 Hz lies below the band; the run at 50 Hz lies inside the band.") in page.text
    assert "limits of the rig" in page.text and "test standard" in page.text     # the band is the model's word
    # without sweeps the section says why it is empty, and the operator line is left out
    html = report.render_report(campaign={"name": "C"}, runs=[{"summary": s, "figures": {}}])
    assert "No specimen was tested at two or more frequencies." in parse(html).text
    assert "Operator" not in html


def test_region_table_in_labels_percent_and_scaled_numbers():
    rows = [{"name": "whole field", "pixels": 400, "measured_mean": -5.123e-6, "measured_std": 3.2e-7,
             "winner": "resin_layer", "winner_share": 0.9964, "predicted_resin_layer": -5.0e-6,
             "predicted_laminate": -2.04e-6, "mean_abs_z_resin_layer": 0.79, "mean_abs_z_laminate": 12.3}]
    s = report.summarize_run(small_result("S1-5Hz", 5.0), regions=rows)
    page = parse(report.render_report(campaign={"name": "C"}, runs=[{"summary": s, "figures": {}}]))
    text = page.text
    # one common power of ten per table in its header, three digits in the cells
    assert "Measured dT/T0, mean (×10 −6 )" in text and "−5.12" in text and "0.32" in text
    assert "resin-rich layer" in text and "whole laminate" in text and "> 99 %" in text
    assert "|z| 0.79" in text and "|z| 12" in text
    assert "resin_layer" not in text and "0.9964" not in text and "mean abs z" not in text
