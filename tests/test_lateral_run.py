"""The lateral heat model inside a run: config switch, geometry from the registration, its
uncertainty, its place in the source map and in the sweep fit, its figure.

Sources named beside the checks: an independent Monte Carlo simulation for the reported
standard deviation; scikit-image's similarity transform for the pixel geometry; the
through-thickness model of the package (checked in tests/test_heat.py against Carslaw &
Jaeger, Conduction of Heat in Solids, 1959) for the sweep correction.
"""

import numpy as np
import pytest
import xarray as xr

from fusion.campaign._products import without_in_plane_flow
from fusion.config import loads_config
from fusion.datamodel import SOURCES, result_dataset
from fusion.diagnose import diagnose
from fusion.errors import ConfigError
from fusion.mechanics import (
    Laminate, OrthotropicMaterial, lateral_response, model_response, thermal_layers, transfer_coefficients,
)
from fusion.register import fit_transform
from fusion.report import heat_spread_figure
from fusion.run._lateral import ir_pixel_axes
from fusion.run._predictions import predictions

# Kaw, Mechanics of Composite Materials (2006), Table 2.1 graphite/epoxy; thermal values from
# memory (typical UD carbon/epoxy k1 7, k2 = k3 0.6 W/(m K)).
CFRP = OrthotropicMaterial("graphite/epoxy", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
                           1600.0, 900.0, 7.0, 0.6, 0.6)
CROSS = Laminate.from_layup(CFRP, "[0/90]s", 0.25e-3, zero_direction=90.0)

CONFIG = """
[materials.cfrp]
E1 = "181 GPa"
E2 = "10.3 GPa"
G12 = "7.17 GPa"
nu12 = 0.28
alpha1 = "0.02e-6 / K"
alpha2 = "22.5e-6 / K"
density = "1600 kg/m^3"
specific_heat = "900 J/kg/K"
k1 = "7 W/m/K"
k2 = "0.6 W/m/K"
k3 = "0.6 W/m/K"

[laminate]
layup = "[0/90]s"
ply_material = "cfrp"
ply_thickness = "0.25 mm"

[registration]
method = "{method}"
dic_points = [[0, 0], [10, 0], [10, 10], [0, 10]]
ir_points = [[5, 40], [25, 40], [25, 20], [5, 20]]

[diagnosis]
lateral_heat = "{mode}"

[[run]]
name = "A"
frequency = "2 Hz"
[run.thermal]
maps = "a.nc"
delta_T_convention = "peak-to-peak"
[run.dic]
strain_ranges = "a.csv"
coordinates = "{units}"
y_axis = "up"

[[run]]
name = "B"
frequency = "2 Hz"
lateral_heat = "off"
[run.thermal]
maps = "b.nc"
delta_T_convention = "peak-to-peak"
[run.dic]
strain_ranges = "b.csv"
"""


def _config(mode="beside", units="mm", method="similarity"):
    return loads_config(CONFIG.format(mode=mode, units=units, method=method))


def test_config_switch_and_its_mistakes():
    # not a physics check: the config key, its per-run override and the error text
    cfg = _config()
    assert [cfg.lateral_heat_for(r) for r in cfg.runs] == ["beside", "off"]
    assert _config(mode="off").lateral_heat_for(cfg.runs[0]) == "off"
    with pytest.raises(ConfigError, match=r"diagnosis\.lateral_heat.*'beside'"):
        _config(mode="sideways")
    with pytest.raises(ConfigError, match=r"run 'A'\.dic\.coordinates.*size of an infrared pixel"):
        _config(units="px")
    with pytest.raises(ConfigError, match=r"run 'A'\.registration\.method.*not 'camera'"):
        loads_config(CONFIG.format(mode="beside", units="mm", method="camera")
                     .replace("[[0, 0], [10, 0], [10, 10], [0, 10]]",
                              "[[0, 0, 0], [10, 0, 0], [10, 10, 0], [0, 10, 0]]"))


def test_infrared_pixel_from_the_registration():
    # scikit-image's SimilarityTransform (behind fit_transform) maps 10 mm to 20 IR px with rows
    # running down: one IR pixel is 0.5 mm along +x and 0.5 mm along -y.
    t = fit_transform(np.array([[0, 0], [10, 0], [10, 10], [0, 10]], float),
                      np.array([[5, 40], [25, 40], [25, 20], [5, 20]], float), method="similarity")
    inside = np.zeros((50, 40), bool)
    inside[20:41, 5:26] = True
    axes = ir_pixel_axes(t, "mm", inside)
    np.testing.assert_allclose(axes, [[0.5e-3, 0.0], [0.0, -0.5e-3]], atol=1e-12)
    with pytest.raises(ConfigError, match="dic.coordinates"):
        ir_pixel_axes(t, "px", inside)
    with pytest.raises(ConfigError, match="registration.method"):
        ir_pixel_axes(None, "mm", inside)


def _hole_strain(shape=(40, 48), radius=6.0):
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]].astype(float)
    r2 = ((xx - shape[1] / 2) ** 2 + (yy - shape[0] / 2) ** 2) / radius ** 2
    e = np.zeros(shape + (3,))
    e[..., 1] = 2e-3 * (1 + 1.0 / np.maximum(r2, 1.0))
    e[..., 0] = -0.6e-3 * (1 + 0.3 / np.maximum(r2, 1.0))
    e[r2 < 1] = np.nan
    return e


def test_reported_std_covers_the_monte_carlo_scatter():
    # Independent simulation (Monte Carlo): strain noise drawn afresh 300 times, pushed through
    # the lateral prediction, its scatter compared with the std the run reports (property
    # uncertainty 0, so the std is the strain noise alone). White noise is averaged by the
    # in-plane blur: the reported std must not be smaller than the scatter; noise that is the
    # same over the whole field is not averaged: there the two agree (within the 8 % that 300
    # draws allow, 2 sigma of the sample std).
    f, axes = 2.0, np.array([[0.2e-3, 0.0], [0.0, -0.2e-3]])
    e = _hole_strain()
    ok = np.all(np.isfinite(e), axis=-1)
    sd = np.array([40e-6, 60e-6, 30e-6])
    _, std, _, info = predictions(CROSS, e, np.broadcast_to(sd, e.shape), f, sources=["lateral"],
                                  property_uncertainty=0.0, pixel_axes=axes)
    edge = info["lateral_edge_map"]
    inner = ok & ~edge
    rng = np.random.default_rng(11)
    layers = thermal_layers(CROSS)
    white, common = [], []
    for _ in range(300):
        white.append(lateral_response(layers, e + rng.normal(size=e.shape) * sd, f, pixel_size=axes,
                                      valid=ok).real)
        common.append(lateral_response(layers, e + rng.normal(size=3) * sd, f, pixel_size=axes, valid=ok).real)
    s_white = np.std(white, axis=0)
    s_common = np.std(common, axis=0)
    reported = std["lateral"]
    assert np.all(s_white[ok] <= 1.08 * reported[ok])
    np.testing.assert_allclose(s_common[inner], reported[inner], rtol=0.08)


def test_source_map_prefers_the_lateral_model_to_the_through_thickness_one():
    # not a physics check: the decision rule of the source map (heat models named only where no
    # layer fits, the lateral one before the through-thickness one)
    m = np.array([[-1.0e-4, -1.5e-4, -2.0e-4]])
    pred = {"laminate": np.array([[-1.0e-4, -3e-4, -3e-4]]), "model": np.array([[-1.0e-4, -1.5e-4, -1.2e-4]]),
            "lateral": np.array([[-1.0e-4, -1.5e-4, -2.0e-4]])}
    std = {k: 1e-6 for k in pred}
    d = diagnose(m, 1e-6, pred, std, secondary=("lateral", "model"))
    names = [d.flag_meanings[d.flag_values.index(c)] for c in d.source_layer[0]]
    assert names == ["laminate", "lateral", "lateral"]     # a layer that fits is named first
    # the order of the secondary sources decides between the two heat models
    d0 = diagnose(m[:, 1:], 1e-6, {k: v[:, 1:] for k, v in pred.items()}, std,
                  secondary=("model", "lateral"))
    assert [d0.flag_meanings[d0.flag_values.index(c)] for c in d0.source_layer[0]] == ["model", "lateral"]
    assert SOURCES.index("lateral") == len(SOURCES) - 1        # earlier codes keep their values


def test_sweep_correction_takes_the_in_plane_part_out():
    # The through-thickness model of the package (checked against Carslaw & Jaeger 1959 in
    # tests/test_heat.py): a measurement made of the lateral response alone, less the in-plane
    # part, is the through-thickness model's value at every pixel (ratio, quadrature and lag).
    f, axes = 1.0, np.array([[0.2e-3, 0.0], [0.0, -0.2e-3]])
    e = _hole_strain()
    ok = np.all(np.isfinite(e), axis=-1)
    layers = thermal_layers(CROSS)
    lat = lateral_response(layers, e, f, pixel_size=axes, valid=ok)
    one_d, one_lag = model_response(transfer_coefficients(layers, [f])[0], e)
    lag = -np.degrees(np.arctan(lat.imag / lat.real))
    T0 = 296.0
    maps = {"ratio_measured": np.where(ok, lat.real, np.nan), "ratio_lateral": np.where(ok, lat.real, np.nan),
            "T0": np.full(ok.shape, T0), "delta_T_quadrature": np.where(ok, lat.imag * T0, np.nan),
            "phase_lag_measured": np.where(ok, lag, np.nan), "phase_lateral": np.where(ok, lag, np.nan),
            "delta_eps_xx": e[..., 0], "delta_eps_yy": e[..., 1], "delta_gamma_xy": e[..., 2],
            "valid": ok.astype(np.int8)}
    ds = result_dataset(maps, attrs={"frequency": f}).astype(np.float64)
    out = without_in_plane_flow(ds, CROSS)
    np.testing.assert_allclose(out["ratio_measured"].values[ok], one_d[ok], rtol=1e-5)
    np.testing.assert_allclose(out["phase_lag_measured"].values[ok], one_lag[ok], atol=1e-3)
    one_im = (e @ transfer_coefficients(layers, [f])[0]).imag
    np.testing.assert_allclose(out["delta_T_quadrature"].values[ok] / T0, one_im[ok], rtol=1e-5,
                               atol=1e-5 * np.abs(one_im[ok]).max())
    assert np.max(np.abs(lat.real[ok] / one_d[ok] - 1)) > 0.01      # the correction did something
    assert out["ratio_measured"].attrs["units"] == "1" and out.attrs["in_plane_flow_removed"] == 1
    plain = ds.drop_vars(["ratio_lateral", "phase_lateral"])
    assert without_in_plane_flow(plain, CROSS) is plain


def test_heat_spread_figure_parts():
    # not a physics check: the figure's artists
    e = _hole_strain()
    ok = np.all(np.isfinite(e), axis=-1)
    rng = np.random.default_rng(2)
    maps = {"ratio_measured": np.full(ok.shape, -2e-4), "ratio_measured_std": np.full(ok.shape, 2e-6),
            "residual_model": rng.normal(0, 4e-6, ok.shape), "residual_lateral": rng.normal(0, 3e-6, ok.shape),
            "zscore_model": rng.normal(size=ok.shape), "zscore_lateral": rng.normal(size=ok.shape),
            "lateral_edge": (~ok).astype(np.int8), "valid": ok.astype(np.int8)}
    maps = {k: (np.where(ok, v, np.nan) if v.dtype.kind == "f" else v) for k, v in maps.items()}
    ds = result_dataset(maps, attrs={"frequency": 2.0, "run_name": "L1", "pixel_size_mm": 0.2})
    fig = heat_spread_figure(ds)
    gids = {a.get_gid() for ax in fig.axes for a in ax.get_children()}
    assert {"map:model", "map:lateral", "profile:model", "profile:lateral", "lateral_edge"} <= gids
    with pytest.raises(ValueError, match="lateral heat model was not evaluated"):
        heat_spread_figure(xr.Dataset({"residual_model": ds["residual_model"]}))
