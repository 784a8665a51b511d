"""Figures of fusion.report, checked by content: file headers, colour limits, legends, pixels, geometry."""

from __future__ import annotations

import os
import re
import struct
import zlib

import numpy as np
import pytest

import fusion.report as report
from fusion.datamodel import SOURCES, result_dataset
from fusion.errors import InputError

NY, NX = 40, 80


def make_result(*, pixel_size_mm=0.25, frequency=20.0, categories=None, seed=3):
    """A small run result built from an analytic strain field (our own scenario)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:NY, 0:NX].astype(float)
    valid = np.hypot(xx - NX / 2, yy - NY / 2) > 6
    exx = 1e-3 * (1.0 + 0.5 * xx / NX)
    coef = {"coating": -0.2, "resin_layer": -0.25, "surface_ply": -2.5e-3, "laminate": -1.2e-3, "model": -2.2e-3,
            "lateral": -2.1e-3}
    maps = {f"ratio_{s}": coef[s] * exx for s in SOURCES}
    maps["ratio_measured"] = maps["ratio_surface_ply"] + rng.normal(0.0, 1e-7, (NY, NX))
    maps["ratio_measured_std"] = np.full((NY, NX), 1e-7)
    for s in SOURCES:
        maps[f"residual_{s}"] = maps["ratio_measured"] - maps[f"ratio_{s}"]
    sl = np.full((NY, NX), 2, np.int8) if categories is None else categories.astype(np.int8)
    sl[~valid] = -1
    maps["source_layer"] = sl
    maps["valid"] = valid.astype(np.int8)
    for k, v in list(maps.items()):
        if np.asarray(v).dtype.kind == "f":
            maps[k] = np.where(valid, v, np.nan)
    attrs = {"run_name": "T1-20Hz", "specimen": "T1", "frequency": frequency, "registration_rms": 0.2}
    if pixel_size_mm is not None:
        attrs["pixel_size_mm"] = pixel_size_mm
    return result_dataset(maps, attrs=attrs)


def png_header(path):
    """(width, height, pixels per metre x, y) read from the PNG chunks (W3C PNG specification, IHDR and pHYs)."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, width, height, ppm = 8, None, None, (None, None)
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
        assert zlib.crc32(kind + body) == crc, kind  # every chunk intact
        if kind == b"IHDR":
            width, height = struct.unpack(">II", body[:8])
        elif kind == b"pHYs":
            ppm = struct.unpack(">II", body[:8])
        pos += 12 + length
    return width, height, ppm


def by_gid(fig, gid):
    return [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == gid]


def colorbar_axes(fig):
    (cax,) = [a for a in fig.axes if a.get_gid() == "colorbar"]
    return cax


def map_images(fig):
    return [im for ax in fig.axes for im in ax.images if str(im.get_gid()).startswith("map:")]


def test_public_api_is_pinned():
    # the public names are listed once in __all__ (SciPy's public-API test habit)
    expected = {
        "CATEGORY_COLOURS", "CAUTIONS", "FIGURE_NAMES", "NO_DATA_COLOUR", "band_edges_text", "band_sentence", "campaign_figures",
        "format_percent", "frequency_figure", "heat_spread_figure",
        "measured_vs_predicted_figure", "overlay_figure", "present_categories", "profile_figure", "render_report",
        "residuals_figure", "run_figures", "sample_line", "source_map_figure", "source_map_grid",
        "source_map_grid_figure", "summarize_run", "summary_schema", "through_thickness_figure",
        "validate_summary", "verdict", "write_report", "write_summary",
    }
    assert set(report.__all__) == expected
    assert all(hasattr(report, n) for n in expected)


def test_png_files_have_the_figure_size_at_300_dpi(tmp_path):
    # not a physics check: pixel size of the figures at the resolution for print
    ds = make_result()
    ref = np.random.default_rng(0).random((NY, NX))
    rows = [{"name": "ply 1", "z_top": 0.0, "z_bottom": 0.25e-3, "ratio": -3e-6},
            {"name": "ply 2", "z_top": 0.25e-3, "z_bottom": 0.5e-3, "ratio": -1e-6}]
    out = report.run_figures(ds, tmp_path, reference_image=ref, region_mask=np.ones((NY, NX), bool),
                             ply_profile=rows, formats=("png", "pdf"), dpi=300)
    assert list(out) == list(report.FIGURE_NAMES)
    builders = {
        "measured_vs_predicted": lambda: report.measured_vs_predicted_figure(ds),
        "residuals": lambda: report.residuals_figure(ds),
        "heat_spread": lambda: report.heat_spread_figure(ds),
        "source_map": lambda: report.source_map_figure(ds),
        "overlay": lambda: report.overlay_figure(ds, ref),
        "profile": lambda: report.profile_figure(ds),
        "through_thickness": lambda: report.through_thickness_figure(rows),
    }
    for name, path in out.items():
        w_in, h_in = builders[name]().get_size_inches()
        width, height, ppm = png_header(path)
        # pixels = inches x dots per inch; matplotlib rounds to whole pixels (allow 1 px)
        assert abs(width - w_in * 300) <= 1 and abs(height - h_in * 300) <= 1, name
        # pHYs stores pixels per metre: 300 / 0.0254 m = 11811 (PNG specification)
        assert ppm == (11811, 11811), name
        pdf = path.with_suffix(".pdf").read_bytes()
        assert pdf.startswith(b"%PDF-")
        # PDF user space is 72 points per inch (ISO 32000-1, 8.3.2.3)
        box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", pdf)
        assert box and abs(float(box[1]) - w_in * 72) < 0.5 and abs(float(box[2]) - h_in * 72) < 0.5
    # multi-panel maps use the report's two-column text width of 7 in (our layout choice)
    assert png_header(out["measured_vs_predicted"])[0] == 2100
    assert not list(tmp_path.glob(".*.tmp"))  # atomic writes leave no temporary file


def test_run_figures_skips_figures_without_inputs_and_refuses_overwrite(tmp_path):
    ds = make_result().drop_vars([f"residual_{s}" for s in SOURCES])
    out = report.run_figures(ds, tmp_path, dpi=40)
    assert set(out) == {"measured_vs_predicted", "source_map", "profile"}
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(f"{n}.png" for n in out)
    before = out["source_map"].read_bytes()
    with pytest.raises(InputError, match="exists already"):
        report.run_figures(ds, tmp_path, dpi=40)
    assert out["source_map"].read_bytes() == before
    with pytest.raises(ValueError, match=r"formats=\('tiff',\)"):
        report.run_figures(ds, tmp_path, formats=("tiff",))


def test_shared_scale_of_measured_and_predictions():
    ds = make_result()
    fig = report.measured_vs_predicted_figure(ds)
    images = map_images(fig)
    assert len(images) == 1 + len(SOURCES)
    pooled = np.concatenate([ds[v].values.ravel().astype(np.float64)
                             for v in ["ratio_measured"] + [f"ratio_{s}" for s in SOURCES]])
    lo, hi = np.nanpercentile(pooled, [1, 99])  # numpy reference, NaN-aware path
    for im in images:
        # every panel on one scale; rtol covers float64 round-off only
        assert im.norm.vmin == pytest.approx(lo, rel=1e-12) and im.norm.vmax == pytest.approx(hi, rel=1e-12)
    cax = colorbar_axes(fig)
    assert cax.get_xlim() == pytest.approx((lo, hi), rel=1e-12)
    label = cax.get_xlabel()
    assert "dT/T0" in label and "dimensionless" in label and "10^{-6}" in label
    # the tick text is the tick position in units of 1e-6
    fig.canvas.draw()
    for tick in cax.get_xticklabels():
        if tick.get_text():
            assert float(tick.get_text().replace("\u2212", "-")) == pytest.approx(tick.get_position()[0] * 1e6, rel=1e-3)


def test_residual_scale_is_the_symmetric_limit_of_the_data():
    ds = make_result()
    fig = report.residuals_figure(ds)
    pooled = np.concatenate([ds[f"residual_{s}"].values.ravel().astype(np.float64) for s in SOURCES])
    v = np.nanpercentile(np.abs(pooled), 99)
    images = map_images(fig)
    assert len(images) == len(SOURCES)
    for im in images:
        assert (im.norm.vmin, im.norm.vmax) == pytest.approx((-v, v), rel=1e-12)
    from skimage.color import deltaE_cie76, rgb2lab

    cmap = images[0].get_cmap()
    t = np.linspace(0.0, 0.5, 26)
    lab_lo = rgb2lab(np.array([cmap(x)[:3] for x in t]).reshape(1, -1, 3))[0]
    lab_hi = rgb2lab(np.array([cmap(1.0 - x)[:3] for x in t]).reshape(1, -1, 3))[0]
    # equal |residual| of either sign has equal CIELAB lightness (within 1 L*, Moreland 2009 design goal)
    assert np.abs(lab_lo[:, 0] - lab_hi[:, 0]).max() < 1.0
    # the two arms differ in hue: the sign is readable
    assert deltaE_cie76(lab_lo[0], lab_hi[0]) > 50
    # neutral (achromatic) centre: chroma below 3
    centre = rgb2lab(np.array(cmap(0.5)[:3]).reshape(1, 1, 3))[0, 0]
    assert np.hypot(centre[1], centre[2]) < 3
    # invalid pixels cannot be mistaken for any residual value: Delta E above 10 to every map colour
    bad = rgb2lab(np.array(cmap.get_bad()[:3]).reshape(1, 1, 3))[0, 0]
    allc = rgb2lab(np.array([cmap(x)[:3] for x in np.linspace(0, 1, 101)]).reshape(1, -1, 3))[0]
    assert deltaE_cie76(allc, bad).min() > 10
    assert colorbar_axes(fig).get_xlim() == pytest.approx((-v, v), rel=1e-12)
    assert "residual" in colorbar_axes(fig).get_xlabel()


def test_source_map_legend_lists_exactly_the_categories_present(tmp_path):
    cats = np.full((NY, NX), 2)
    cats[:, :20] = 3      # laminate
    cats[:8, 60:] = 101   # no source fits
    ds = make_result(categories=cats)
    fig = report.source_map_figure(ds)
    (legend,) = by_gid(fig, "source_legend")
    labels = [t.get_text() for t in legend.get_texts()]
    assert labels == ["surface ply", "whole laminate", "no source fits", "no data"]
    assert report.present_categories(ds) == ["surface_ply", "laminate", "no_source_fits", "no_data"]
    # the rendered pixels hold the present colours and none of the absent ones (decoded with OpenCV)
    import cv2

    path = tmp_path / "map.png"
    fig.savefig(path, dpi=100)
    rgb = cv2.cvtColor(cv2.imread(str(path), cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB).reshape(-1, 3)

    def count(hex_colour):
        c = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)])
        return int(np.count_nonzero(np.all(rgb == c, axis=1)))

    for name in ("surface_ply", "laminate", "no_source_fits"):
        assert count(report.CATEGORY_COLOURS[name]) > 1000, name
    for name in ("coating", "resin_layer", "model", "indistinguishable"):
        assert count(report.CATEGORY_COLOURS[name]) == 0, name


def test_source_map_refuses_codes_outside_its_flags():
    ds = make_result()
    ds["source_layer"].values[0, 0] = 7
    with pytest.raises(ValueError, match=r"codes \[7\]"):
        report.source_map_figure(ds)


def test_palette_is_distinct_for_common_colour_vision_deficiencies():
    # Machado, Oliveira & Fernandes (2009) simulation matrices at severity 1.0 (from memory, published
    # values for deuteranopia and protanopia) applied in linear RGB; pairs must stay apart.
    sims = {
        "deuteranopia": np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                                  [-0.011820, 0.042940, 0.968881]]),
        "protanopia": np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                                [-0.003882, -0.048116, 1.051998]]),
    }

    def linear(hex_colour):
        c = np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
        return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)  # sRGB (IEC 61966-2-1)

    def encode(lin):  # back to sRGB (IEC 61966-2-1)
        lin = np.clip(lin, 0, 1)
        return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)

    from skimage.color import deltaE_cie76, rgb2lab

    colours = [report.CATEGORY_COLOURS[k] for k in report.CATEGORY_COLOURS]
    for name, m in sims.items():
        lab = [rgb2lab(encode(m @ linear(c)).reshape(1, 1, 3))[0, 0] for c in colours]
        for i in range(len(lab)):
            for j in range(i + 1, len(lab)):
                # CIE76 colour difference above 10 in the simulated view: swatches clearly apart
                # (a just-noticeable difference is about 2.3, Sharma 2003 - from memory); our threshold
                assert deltaE_cie76(lab[i], lab[j]) > 10, (name, colours[i], colours[j])


_MAP_FIGURES = {
    "source_map": lambda ds: report.source_map_figure(ds),
    "measured_vs_predicted": lambda ds: report.measured_vs_predicted_figure(ds),
    "residuals": lambda ds: report.residuals_figure(ds),
    "profile": lambda ds: report.profile_figure(ds),
    "source_map_grid": lambda ds: report.source_map_grid_figure({"a": ds}),
}


@pytest.mark.parametrize("name", sorted(_MAP_FIGURES))
def test_no_data_pixels_have_one_colour_in_every_map(name):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import to_rgb

    fig = _MAP_FIGURES[name](make_result())
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    want = np.round(255 * np.array(to_rgb(report.NO_DATA_COLOUR)))
    maps = [ax for ax in fig.axes if ax.images]
    assert maps
    for ax in maps:
        # a point inside the hole of radius 6 px (no valid data), off the profile line through its row
        x, y = ax.transData.transform((NX / 2 + 2, NY / 2 - 3))
        pixel = rgba[int(round(rgba.shape[0] - y)), int(round(x)), :3].astype(float)
        np.testing.assert_allclose(pixel, want, atol=2, err_msg=f"{name}: {ax.get_title()}")


def test_no_data_colour_stands_apart_from_every_map_colour():
    # the dark grey must not read as a value of viridis, coolwarm or a category, in normal vision
    # and under the Machado, Oliveira & Fernandes (2009) deuteranopia/protanopia simulation at
    # severity 1.0 (matrices from memory, as in the palette test above)
    import matplotlib
    from skimage.color import deltaE_cie76, rgb2lab

    sims = [np.eye(3),
            np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                      [-0.011820, 0.042940, 0.968881]]),
            np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                      [-0.003882, -0.048116, 1.051998]])]

    def view(rgb, m):  # sRGB (IEC 61966-2-1) -> linear -> simulated -> sRGB -> CIELAB
        lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
        out = np.clip(lin @ m.T, 0, 1)
        return rgb2lab(np.where(out <= 0.0031308, 12.92 * out, 1.055 * out ** (1 / 2.4) - 0.055)[None])[0]

    from matplotlib.colors import to_rgb

    others = np.concatenate([matplotlib.colormaps["viridis"](np.linspace(0, 1, 256))[:, :3],
                             matplotlib.colormaps["coolwarm"](np.linspace(0, 1, 256))[:, :3],
                             np.array([to_rgb(c) for k, c in report.CATEGORY_COLOURS.items() if k != "no_data"])])
    grey = np.array([to_rgb(report.NO_DATA_COLOUR)])
    assert report.CATEGORY_COLOURS["no_data"] == report.NO_DATA_COLOUR
    for m in sims:
        # CIE76 difference above 15: clearly another colour (our threshold; a just-noticeable
        # difference is about 2.3, Sharma 2003 - from memory)
        assert deltaE_cie76(view(grey, m), view(others, m)).min() > 15


@pytest.mark.parametrize("build", [
    lambda ds: report.source_map_figure(ds),
    lambda ds: report.measured_vs_predicted_figure(ds),
    lambda ds: report.residuals_figure(ds),
    lambda ds: report.profile_figure(ds),
    lambda ds: report.source_map_grid_figure({"a": ds}),
], ids=["source_map", "measured_vs_predicted", "residuals", "profile", "source_map_grid"])
def test_every_map_has_a_scale_bar_in_mm_or_in_ir_pixels(build):
    fig = build(make_result(pixel_size_mm=0.25))
    bars, labels = by_gid(fig, "scalebar"), by_gid(fig, "scalebar_label")
    assert bars and len(bars) == len(labels)
    for bar, label in zip(bars, labels):
        value, unit = label.get_text().split()
        # bar length in IR px times mm per px equals its label; a 1-2-5 value within a quarter of 80 px * 0.25 mm
        assert unit == "mm" and float(value) == 5.0
        assert bar.get_width() * 0.25 == pytest.approx(float(value))
    # a run without a known pixel size gets the same bar in IR pixels: 20 px is the 1-2-5 value
    # within a quarter of the 80 px field
    fig = build(make_result(pixel_size_mm=None))
    bars, labels = by_gid(fig, "scalebar"), by_gid(fig, "scalebar_label")
    assert bars and len(bars) == len(labels)
    for bar, label in zip(bars, labels):
        assert label.get_text() == "20 IR px"
        assert bar.get_width() == pytest.approx(20.0)
        assert not bar.axes.get_xticks().size and not bar.axes.get_yticks().size


def test_overlay_outlines_the_region_where_find_contours_does():
    from skimage.measure import find_contours

    ds = make_result()
    mask = np.zeros((NY, NX), bool)
    mask[10:31, 20:61] = True
    fig = report.overlay_figure(ds, np.random.default_rng(1).random((NY, NX)), region_mask=mask, alpha=0.5)
    (outline,) = by_gid(fig, "region_outline")
    verts = np.concatenate([p.vertices for p in outline.get_paths()])
    # scikit-image's marching squares on the same mask gives (row, col) contours at level 0.5
    ref = np.concatenate(find_contours(mask.astype(float), 0.5))
    assert verts[:, 0].min() == pytest.approx(ref[:, 1].min()) == pytest.approx(19.5)
    assert verts[:, 0].max() == pytest.approx(ref[:, 1].max()) == pytest.approx(60.5)
    assert verts[:, 1].min() == pytest.approx(ref[:, 0].min()) == pytest.approx(9.5)
    assert verts[:, 1].max() == pytest.approx(ref[:, 0].max()) == pytest.approx(30.5)
    (layer,) = [im for im in map_images(fig)]
    assert layer.get_alpha() == 0.5
    assert layer.get_cmap().get_bad()[3] == 0.0  # invalid pixels let the visible image show
    with pytest.raises(ValueError, match=r"reference_image has shape \(3, 3\)"):
        report.overlay_figure(ds, np.zeros((3, 3)))


def test_sample_line_matches_scipy_regular_grid_interpolator(rng):
    from scipy.interpolate import RegularGridInterpolator

    img = rng.random((NY, NX))
    line = ((3.2, 5.5), (70.9, 33.1))
    dist, vals = report.sample_line(img, line)
    ref = RegularGridInterpolator((np.arange(NY), np.arange(NX)), img, method="linear")
    t = dist / dist[-1]
    pts = np.column_stack([5.5 + t * (33.1 - 5.5), 3.2 + t * (70.9 - 3.2)])
    np.testing.assert_allclose(vals, ref(pts), rtol=0, atol=1e-12)  # both bilinear: round-off only
    assert dist[-1] == pytest.approx(np.hypot(70.9 - 3.2, 33.1 - 5.5))
    with pytest.raises(ValueError, match="leaves the IR grid"):
        report.sample_line(img, ((0, 0), (NX, 0)))


def test_profile_of_a_linear_field_and_its_band():
    ds = make_result(pixel_size_mm=0.25)
    yy, xx = np.mgrid[0:NY, 0:NX]
    plane = (-4e-6 + 2e-8 * xx - 1e-8 * yy).astype(np.float32)  # bilinear sampling is exact on a plane
    ds["ratio_measured"].values[:] = plane
    ds["ratio_measured_std"].values[:] = np.float32(3e-7)
    line = ((2.0, 3.0), (77.0, 36.0))
    fig = report.profile_figure(ds, line)
    (measured,) = by_gid(fig, "profile:measured")
    d_mm, m = measured.get_xdata(), measured.get_ydata()
    t = d_mm / d_mm[-1]
    x, y = 2.0 + 75.0 * t, 3.0 + 33.0 * t
    # float32 storage of the plane: relative error ~6e-8
    np.testing.assert_allclose(m, -4e-6 + 2e-8 * x - 1e-8 * y, rtol=2e-6)
    assert d_mm[-1] == pytest.approx(np.hypot(75.0, 33.0) * 0.25)  # distance in mm
    (band,) = by_gid(fig, "band")
    ys = np.concatenate([p.vertices[:, 1] for p in band.get_paths()])
    assert ys.min() == pytest.approx(np.min(m) - 2 * 3e-7, rel=1e-5)
    assert ys.max() == pytest.approx(np.max(m) + 2 * 3e-7, rel=1e-5)
    assert {f"profile:{s}" for s in SOURCES} <= {a.get_gid() for a in fig.findobj()}


@pytest.mark.parametrize("upward", [False, True])
def test_through_thickness_steps_at_the_ply_interfaces(upward):
    t = 0.125e-3
    ratios = [-3.1e-6, -5.0e-6, -3.1e-6, -0.9e-6]
    if upward:  # z measured from the mid-plane, positive toward the viewed face (CLT-like)
        rows = [{"name": f"ply {k + 1}", "z_top": 2 * t - k * t, "z_bottom": 2 * t - (k + 1) * t, "ratio": r}
                for k, r in enumerate(ratios)]
    else:       # depth below the viewed face
        rows = [{"name": f"ply {k + 1}", "z_top": k * t, "z_bottom": (k + 1) * t, "ratio": r}
                for k, r in enumerate(ratios)]
    fig = report.through_thickness_figure(rows, measured=(-4e-6, -4.5e-6, -3.5e-6))
    (step,) = by_gid(fig, "step_profile")
    np.testing.assert_allclose(step.get_ydata(), [0, 0.125, 0.125, 0.25, 0.25, 0.375, 0.375, 0.5], atol=1e-12)
    np.testing.assert_allclose(step.get_xdata(), np.repeat(ratios, 2))
    ax = fig.axes[0]
    assert ax.get_ylim() == pytest.approx((0.5, 0.0))  # viewed face at the top
    (med,) = by_gid(fig, "measured_median")
    assert med.get_xdata()[0] == -4e-6
    with pytest.raises(ValueError, match=r"ply_profile\[0\]"):
        report.through_thickness_figure([{"name": "x", "z_top": 0.0}])


def test_frequency_figure_content_and_campaign_files(tmp_path):
    f = np.array([2.0, 5.0, 10.0, 20.0])
    mf = np.logspace(-1, 2, 50)
    curve = -5e-6 + 3e-6 / (1 + mf / 2)
    spec = {"frequency": f, "ratio": -5e-6 + 3e-6 / (1 + f / 2), "ratio_std": [1e-7] * 4,
            "model": {"frequency": mf, "ratio": curve},
            "adiabatic": {"surface_ply": -5e-6, "laminate": -2e-6}, "band": (8.0, 60.0)}
    fig = report.frequency_figure("T1", spec)
    ax = fig.axes[0]
    assert ax.get_xscale() == "log"
    (model,) = by_gid(fig, "model")
    np.testing.assert_array_equal(model.get_xdata(), mf)
    np.testing.assert_array_equal(model.get_ydata(), curve)
    (meas,) = by_gid(fig, "measured")
    np.testing.assert_array_equal(meas.get_ydata(), spec["ratio"])
    for src, v in spec["adiabatic"].items():
        (line,) = by_gid(fig, f"limit:{src}")
        assert line.get_ydata()[0] == v
    (band,) = by_gid(fig, "band")
    assert band.get_x() == pytest.approx(8.0) and band.get_x() + band.get_width() == pytest.approx(60.0)
    # an open band reaches the right edge of the axes
    open_fig = report.frequency_figure("T1", {**spec, "band": (8.0, None)})
    (ob,) = by_gid(open_fig, "band")
    assert ob.get_x() + ob.get_width() == pytest.approx(open_fig.axes[0].get_xlim()[1])

    datasets = {"T1-2Hz": make_result(frequency=2.0), "T1-20Hz": make_result(frequency=20.0)}
    out = report.campaign_figures({"T1": spec, "T 2/x": spec}, tmp_path, dpi=100, datasets=datasets)
    assert set(out) == {"frequency_T1", "frequency_T_2_x", "source_maps"}
    for p in out.values():
        w, h, ppm = png_header(p)
        assert w > 0 and h > 0 and ppm == (3937, 3937)  # 100 dpi = 3937 px/m
    with pytest.raises(ValueError, match="band"):
        report.frequency_figure("T1", {**spec, "band": (60.0, 8.0)})


def test_source_map_grid_has_one_panel_per_run_and_a_union_legend(tmp_path):
    cats_a = np.full((NY, NX), 2)
    cats_b = np.full((NY, NX), 100)
    cats_b[:, :10] = 4
    datasets = {"a": make_result(categories=cats_a), "b": make_result(categories=cats_b),
                "c": make_result(categories=cats_a)}
    fig = report.source_map_grid_figure(datasets)
    assert len([im for im in fig.findobj() if getattr(im, "get_gid", lambda: None)() == "source_map"]) == 3
    (legend,) = by_gid(fig, "source_legend")
    assert [t.get_text() for t in legend.get_texts()] == ["surface ply", "heat model", "indistinguishable", "no data"]
    path = report.source_map_grid(datasets, tmp_path / "grid.png", dpi=80)
    w, h, _ = png_header(path)
    w_in, h_in = fig.get_size_inches()
    assert abs(w - w_in * 80) <= 1 and abs(h - h_in * 80) <= 1


def test_maps_are_drawn_at_their_native_resolution_in_pdf(tmp_path):
    # not a physics check: a vector file embeds each map's own pixels, not a copy resampled at
    # the figure's dpi (image XObjects of the PDF, ISO 32000-1, 8.9.5)
    ds = make_result()
    out = report.run_figures(ds, tmp_path, formats=("pdf",), dpi=300)
    for name in ("measured_vs_predicted", "residuals", "source_map"):
        pdf = out[name].read_bytes()
        sizes = [(int(w), int(h)) for w, h in re.findall(rb"/Width (\d+)\s*/Height (\d+)", pdf)]
        sizes += [(int(w), int(h)) for h, w in re.findall(rb"/Height (\d+)\s*/Width (\d+)", pdf)]
        # every image is a map at its own size, or the colour bar's strip
        assert (NX, NY) in sizes and all(s == (NX, NY) or max(s) >= 10 * min(s) for s in sizes), (name, sizes)


def test_figures_drawn_aside_are_the_same_files_as_drawn_here(tmp_path):
    # not a physics check: two code paths of the package compared (a forked process draws a
    # share of the figures while this one writes), pixel for pixel
    from fusion.report._aside import draw_figures_aside, split_figures

    ds = make_result()
    ref = np.random.default_rng(0).random((NY, NX))
    kw = dict(reference_image=ref, region_mask=np.ones((NY, NX), bool), dpi=40)
    here = report.run_figures(ds, tmp_path / "here", **kw)
    aside, own = draw_figures_aside(ds, tmp_path / "aside", parallel=True, **kw)
    drawn = report.run_figures(ds, tmp_path / "aside", names=own, **kw)
    drawn.update(aside.collect())
    assert sorted(drawn) == sorted(here) and own and len(own) < len(here)
    for name, path in here.items():
        assert drawn[name].read_bytes() == path.read_bytes(), name
    # the share: every figure once, on one side only
    away, stay = split_figures(list(report.FIGURE_NAMES))
    assert sorted(away + stay) == sorted(report.FIGURE_NAMES) and not set(away) & set(stay)


def test_a_failure_in_the_figure_process_reaches_the_run(tmp_path):
    # not a physics check: the forked process's exception is raised here, the process waited for
    from fusion.report._aside import draw_figures_aside

    ds = make_result()
    (tmp_path / "measured_vs_predicted.png").write_bytes(b"a user's file")
    aside, own = draw_figures_aside(ds, tmp_path, parallel=True, dpi=40)
    assert "measured_vs_predicted" not in own
    with pytest.raises(InputError, match="exists already"):
        aside.collect()
    assert (tmp_path / "measured_vs_predicted.png").read_bytes() == b"a user's file"
    # abandoned (this side failed first): the child is stopped and reaped
    aside, _ = draw_figures_aside(ds, tmp_path / "x", parallel=True, dpi=40)
    pid = aside._pid
    aside.abandon()
    with pytest.raises(ChildProcessError):
        os.waitpid(pid, os.WNOHANG)


def test_the_fork_warning_of_newer_pythons_is_not_raised(tmp_path, monkeypatch):
    # not a physics check: Python 3.12+ warns (an error under this suite's settings) when a
    # process with threads forks; the figure process is forked knowingly and the warning kept out
    import warnings

    from fusion.report import _aside

    real_fork = os.fork

    def fork_like_newer_pythons():
        warnings.warn(f"This process (pid={os.getpid()}) is multi-threaded, use of fork() may lead to "
                      "deadlocks in the child.", DeprecationWarning, stacklevel=2)
        return real_fork()

    monkeypatch.setattr(_aside.os, "fork", fork_like_newer_pythons)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        aside, _ = _aside.draw_figures_aside(make_result(), tmp_path, parallel=True, dpi=40)
        assert aside.collect()


def test_figures_are_drawn_here_when_no_process_can_be_forked(tmp_path, monkeypatch):
    # not a physics check: a refused fork (a process limit, strict memory overcommit) costs time,
    # never the figures
    import errno

    from fusion.report import _aside

    def refused():
        raise OSError(errno.EAGAIN, "Resource temporarily unavailable")

    monkeypatch.setattr(_aside.os, "fork", refused)
    ds = make_result()
    aside, own = _aside.draw_figures_aside(ds, tmp_path, parallel=True, dpi=40)
    assert aside._pid is None and aside._names
    drawn = report.run_figures(ds, tmp_path, names=own, dpi=40)
    drawn.update(aside.collect())
    assert sorted(drawn) == sorted(report.run_figures(ds, tmp_path / "one", dpi=40))


def _text_and_map_boxes(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    fig.set_dpi(72)
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    maps = [ax for ax in fig.axes if ax.images and ax.get_label() != "<colorbar>"]
    boxes = [("suptitle", fig._suptitle.get_window_extent(r))] if fig._suptitle else []
    boxes += [(f"title of {ax.get_title()!r}", ax.title.get_window_extent(r)) for ax in maps]
    boxes += [(f"map of {ax.get_title()!r}", ax.get_window_extent(r)) for ax in maps]
    return boxes, fig.canvas.get_width_height()


# the layout depends on the maps' aspect only: 640 x 512 stands for 320 x 256 and 1280 x 1024 too
@pytest.mark.parametrize("ny, nx", [(512, 640), (480, 640), (500, 500), (640, 512), (300, 600), (400, 1600),
                                    (900, 400)])
def test_map_grid_titles_clear_the_maps_for_common_camera_formats(ny, nx):
    # not a physics check: layout. A figure too short for its fixed-aspect maps made the layout
    # squeeze the gaps, and panel titles ran into the maps above and into the figure's title
    # (640 x 512 and 1280 x 1024 cameras with three or more panels)
    import itertools

    import xarray as xr

    base = -1e-4 * (1 + 0.1 * np.random.default_rng(0).standard_normal((ny, nx)))
    base[: ny // 5, : nx // 5] = np.nan
    names = ["coating", "resin_layer", "surface_ply", "laminate", "model", "lateral"]
    for k in (1, 3, 6):
        data = {"ratio_measured": (("y", "x"), base)}
        for s in names[:k]:
            data[f"ratio_{s}"] = (("y", "x"), base * 1.1)
            data[f"residual_{s}"] = (("y", "x"), base * 0.1)
        ds = xr.Dataset(data, attrs={"run_name": "S-1", "frequency": 10.0})
        for build in (report.measured_vs_predicted_figure, report.residuals_figure):
            boxes, (width, height) = _text_and_map_boxes(build(ds))
            for (na, a), (nb, b) in itertools.combinations(boxes, 2):
                if na.startswith("map") and nb.startswith("map") or na.replace("title", "map") == nb:
                    continue
                assert not a.overlaps(b), f"{build.__name__}, {k} sources, {ny} x {nx}: {na} overlaps {nb}"
            for n, b in boxes:
                assert b.x0 >= -1 and b.x1 <= width + 1 and b.y0 >= -1 and b.y1 <= height + 1, \
                    f"{build.__name__}, {k} sources, {ny} x {nx}: {n} leaves the figure"


def test_titles_of_a_long_run_name_stay_on_the_figure():
    # not a physics check: layout. Run names may have 100 characters; titles are shortened and
    # wrapped so that none leaves the figure or runs into another title
    import itertools

    from matplotlib.backends.backend_agg import FigureCanvasAgg

    ds = make_result()
    ds.attrs["run_name"] = "P" + "-specimen_7_after_2e6_cycles" * 3 + "-x" * 8
    assert len(ds.attrs["run_name"]) > 80
    figures = {
        "measured_vs_predicted": report.measured_vs_predicted_figure(ds),
        "residuals": report.residuals_figure(ds),
        "source_map": report.source_map_figure(ds),
        "overlay": report.overlay_figure(ds, np.random.default_rng(0).random((NY, NX))),
        "profile": report.profile_figure(ds),
    }
    for name, fig in figures.items():
        FigureCanvasAgg(fig)
        fig.set_dpi(72)
        fig.canvas.draw()
        r = fig.canvas.get_renderer()
        width, height = fig.canvas.get_width_height()
        texts = [fig._suptitle] if fig._suptitle else []
        texts += [ax.title for ax in fig.axes if ax.get_title()]
        boxes = [t.get_window_extent(r) for t in texts]
        assert boxes, name
        for t, b in zip(texts, boxes):
            assert b.x0 >= -1 and b.x1 <= width + 1 and b.y1 <= height + 1, f"{name}: {t.get_text()!r} leaves the figure"
        for (ta, a), (tb, b) in itertools.combinations(zip(texts, boxes), 2):
            assert not a.overlaps(b), f"{name}: {ta.get_text()!r} overlaps {tb.get_text()!r}"
        assert any("\u2026" in t.get_text() for t in texts), name       # the name shortened
