"""One rule for the public API: masks, (x, y) order, renamed keywords, names, short printouts.

Most cases compare two code paths of the package (old and new spellings, a laminate and its
layers) and say so; the heat model's standard deviation is checked against a Monte Carlo
of the strain noise ([JCGM101-2008]).
"""

import dataclasses
import json
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest

import fusion
from fusion.dic import (DicField, correlate, ranges_from_displacement, ranges_from_states, speckle_image)
from fusion.config import load_config
from fusion.diagnose import region_mask
from fusion.io import LoadSignal, read_image
from fusion.mechanics import (IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer, model_response,
                              prediction_std, thermal_layers, transfer_coefficients)

PLY = OrthotropicMaterial("cfrp", 135e9, 10e9, 5e9, 0.3, -0.5e-6, 30e-6, 1600.0, 900.0, 5.0, 0.6, 0.6)
RESIN = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)
N = 96


@pytest.fixture(scope="module")
def pair():
    ref = speckle_image((N, N), seed=4)
    moved = speckle_image((N, N), seed=4, displacement=(0.3, -0.2))
    return ref, moved


def test_painted_masks_read_as_masks(pair, tmp_path):
    # not a physics check: a 0/255 mask read from a PNG and a bool mask give the same correlation
    import cv2

    ref, moved = pair
    rows, cols = np.mgrid[0:N, 0:N]
    mask = (rows - 48) ** 2 + (cols - 48) ** 2 > 12 ** 2
    cv2.imwrite(str(tmp_path / "mask.png"), (mask * 255).astype(np.uint8))
    painted = read_image(tmp_path / "mask.png")
    assert painted.dtype.kind == "f" and painted.max() == 255.0
    a = correlate(ref, moved, subset=15, step=8, region=mask)
    b = correlate(ref, moved, subset=15, step=8, region=painted)
    c = correlate(ref, moved, subset=15, step=8, region=mask.astype(np.uint8))
    for other in (b, c):
        np.testing.assert_array_equal(other.reason, a.reason)
        np.testing.assert_array_equal(other.u, a.u)
    np.testing.assert_array_equal(region_mask((N, N), mask=painted), mask)
    with pytest.raises(ValueError, match=r"region: a mask holds True/False, 0/1 or 0/255; got the values 0, 0.5"):
        correlate(ref, moved, region=np.where(mask, 0.5, 0.0))


def test_old_keywords_warn_and_mean_the_same(pair):
    # not a physics check: the deprecated (row, col) spellings against the (x, y) keywords
    ref, moved = pair
    new = correlate(ref, moved, subset=15, step=6, region=(20, 10, 80, 70), seeds=[(50, 40)])
    with pytest.warns(DeprecationWarning, match=r"roi= is deprecated .* use region= instead \(a rectangle is "
                                                r"\(x0, y0, x1, y1\): columns first\)"):
        old = correlate(ref, moved, subset=15, step=6, roi=(10, 20, 70, 80), seeds=[(50, 40)])
    np.testing.assert_array_equal(old.cols, new.cols)
    np.testing.assert_array_equal(old.rows, new.rows)
    np.testing.assert_array_equal(old.u, new.u)
    with pytest.warns(DeprecationWarning, match=r"seed_points= is deprecated .* use seeds= instead"):
        old = correlate(ref, moved, subset=15, step=6, region=(20, 10, 80, 70), seed_points=[(40, 50)])
    np.testing.assert_array_equal(old.u, new.u)
    # a seed in (x, y) order lies where a (row, col) reading would find no grid point
    with pytest.raises(ValueError, match=r"seeds: none of \[\[85.0, 15.0\]\] \(x, y\)"):
        correlate(ref, moved, subset=15, step=6, region=(20, 10, 80, 70), seeds=[(85, 15)])
    with pytest.raises(TypeError, match="give region= only"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            correlate(ref, moved, roi=(0, 0, 5, 5), region=(0, 0, 5, 5))


def test_one_image_pair_needs_no_fake_reference(pair):
    # not a physics check: one pair through ranges_from_displacement and strain_ranges(images=)
    # against the old way (a zero "minimum-load" field given to ranges_from_states)
    ref, moved = pair
    field = correlate(ref, moved, subset=15, step=4).to_field(pixel_size=0.05)
    zero = dataclasses.replace(field, u=np.zeros_like(field.u), v=np.zeros_like(field.v), u_std=None, v_std=None)
    old = ranges_from_states(zero, field, window=5)
    new = ranges_from_displacement(field, window=5)
    for name in ("exx", "eyy", "gxy", "exx_std", "eyy_std", "gxy_std", "valid"):
        np.testing.assert_array_equal(getattr(new, name), getattr(old, name))
    np.testing.assert_array_equal(new.delta_eps_xx, new.exx)
    ds = fusion.strain_ranges(images=[ref, moved], subset=15, step=4, window=5, pixel_size=0.05)
    np.testing.assert_array_equal(ds["delta_eps_xx"].values.ravel(), old.exx)
    assert ds["x"].attrs["units"] == "mm" and ds.attrs["coordinate_units"] == "mm"
    np.testing.assert_allclose(ds["delta_u"].values.ravel(), field.u)
    # loads of the pair and the cycle's range scale the ranges (2 kN .. 20 kN imaged, 9 kN cycled)
    half = fusion.strain_ranges(images=[ref, moved], subset=15, step=4, window=5, pixel_size=0.05,
                                loads=[2e3, 20e3], load_range=9e3)
    np.testing.assert_allclose(half["delta_eps_xx"].values, 0.5 * ds["delta_eps_xx"].values, rtol=1e-12)
    np.testing.assert_allclose(half["delta_u"].values, 0.5 * ds["delta_u"].values, rtol=1e-12)


def test_strain_names_and_coordinates_are_those_of_result_nc():
    # not a physics check: names, units and dims of the labelled strain
    x, y = np.meshgrid(np.arange(6) * 0.5, -np.arange(4) * 0.5)
    f = DicField(x=x.ravel(), y=y.ravel(), u=0 * x.ravel(), v=0 * x.ravel(), exx=np.full(24, 1e-3),
                 eyy=np.full(24, -3e-4), gxy=np.zeros(24), grid_shape=(4, 6))
    ds = fusion.strain_ranges(table=f, noise=1e-5)
    assert set(ds.data_vars) >= {"delta_eps_xx", "delta_eps_yy", "delta_gamma_xy", "delta_eps_xx_std",
                                 "delta_eps_yy_std", "delta_gamma_xy_std", "valid"}
    assert ds["delta_gamma_xy"].dims == ("row", "col")
    np.testing.assert_array_equal(ds["x"].values, x)
    np.testing.assert_array_equal(ds["y"].values, y)
    assert ds["delta_gamma_xy"].attrs["long_name"].startswith("engineering shear strain range")
    assert ds["delta_eps_xx_std"].shape == (4, 6)          # a full map, never a scalar


def test_printouts_are_short():
    # not a physics check: records print their shapes, not their arrays
    sig = LoadSignal(np.arange(3000.0), np.sin(np.arange(3000.0)), "load.csv")
    assert len(repr(sig)) < 300 and "(3000,)" in repr(sig)
    x = np.arange(5000.0)
    f = DicField(x=x, y=x, u=x, v=x)
    assert len(repr(f)) < 1000
    ds = fusion.strain_ranges(table=DicField(x=x, y=x % 7, u=0 * x, v=0 * x, exx=np.full(5000, 1e-3),
                                             eyy=np.zeros(5000), gxy=np.zeros(5000)), noise=1e-5)
    assert len(repr(ds)) < 4000
    cfg = load_config(Path(fusion.__file__).parent / "data" / "demo.toml")
    assert len(repr(cfg)) < 600 and "CX-2Hz" in repr(cfg)


def test_transfer_coefficients_of_a_laminate_keep_its_faces():
    # not a physics check: a laminate against its own layers with the same face coefficients
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3, resin_layer=SurfaceLayer(RESIN, 50e-6),
                              convection_front=10.0)
    f = [0.01, 0.1]
    layers = thermal_layers(lam)
    with_faces = transfer_coefficients(lam, f)
    np.testing.assert_array_equal(with_faces, transfer_coefficients(layers, f, convection_front=10.0))
    assert not np.allclose(with_faces, transfer_coefficients(layers, f))          # the layers form: adiabatic
    np.testing.assert_array_equal(transfer_coefficients(lam, f, convection_front=0.0),
                                  transfer_coefficients(layers, f))               # explicit wins


def test_heat_model_std_covers_the_scatter_of_strain_noise(rng):
    # Monte Carlo ([JCGM101-2008]): strain ranges drawn with their stated noise through the heat
    # model (model_response at the same frequency); the reported std (no property share) must
    # match the scatter of the in-phase ratio within the sampling error of 4000 draws (~2 %)
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3, resin_layer=SurfaceLayer(RESIN, 50e-6))
    strain = np.array([[[2e-3, -6e-4, 1e-4]]], np.float32)
    std = np.array([[[4e-5, 3e-5, 6e-5]]], np.float32)
    pred = fusion.predictions(lam, strain, strain_std=std, frequency=2.0, property_uncertainty=0.0)
    coef = transfer_coefficients(lam, [2.0])[0]
    draws = strain[0, 0] + std[0, 0] * rng.standard_normal((4000, 3))
    ratio, _ = model_response(coef, draws)
    assert float(pred["ratio_model_std"][0, 0]) == pytest.approx(np.std(ratio, ddof=1), rel=0.06)
    assert float(pred["ratio_model"][0, 0]) == pytest.approx(np.mean(ratio), abs=3 * np.std(ratio) / 60)
    lag = pred["phase_lag_predicted"].sel(source=["model", "laminate"]).values[:, 0, 0]
    assert lag[0] == pytest.approx(float(pred["phase_model"][0, 0])) and lag[1] == 0.0


def test_prediction_std_names_where_the_heat_model_is():
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3)
    with pytest.raises(ValueError, match="fusion.predictions gives the through-thickness model"):
        prediction_std(lam, np.zeros(3), np.zeros(3), sources=["model"])


def test_import_fusion_is_cheap_and_lists_its_api():
    # not a physics check: the top-level package imports its subpackages on first use only
    code = ("import sys, json, fusion; heavy = [m for m in ('numpy', 'xarray', 'numba', 'cv2', 'fusion.api') "
            "if m in sys.modules]; print(json.dumps([heavy, fusion.__all__]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    heavy, names = json.loads(out)
    assert heavy == []
    for name in ("compute", "lockin_maps", "strain_ranges", "motion_field", "registered_strain", "predictions",
                 "diagnosis", "api", "diagnose", "demo", "datamodel", "pipeline", "mechanics"):
        assert name in names
    assert fusion.compute is fusion.api.compute
    with pytest.raises(AttributeError, match="no attribute 'nothing'"):
        fusion.nothing
