"""Silent mistakes at the door of the Python API end in one sentence naming the likely slip.

Each value below reads without error and, unchecked, gives a confident wrong answer: a ply
thickness in millimetres read as metres, strains in microstrain or percent, a pixel size in
metres, an infrared grid given as (X, Y), a (Y, X, F) frame stack, a temperature range in
kelvin where dT/T0 is meant, temperatures in degrees Celsius. Error tests only; the bounds
and their reasons are in fusion/_bounds.py.
"""

from pathlib import Path

import numpy as np
import pytest

import fusion
from fusion.dic import DicField, correlate, speckle_image
from fusion.errors import ArgumentError, FusionError
from fusion.mechanics import IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer
from fusion.register import fit_transform

PLY = OrthotropicMaterial("cfrp", 135e9, 10e9, 5e9, 0.3, -0.5e-6, 30e-6, 1600.0, 900.0, 5.0, 0.6, 0.6)
RESIN = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)


def _table(scale=1.0, ny=12, nx=10):
    x, y = np.meshgrid(np.arange(nx) * 0.5, -np.arange(ny) * 0.5)
    n = x.size
    rng = np.random.default_rng(3)
    return DicField(x=x.ravel(), y=y.ravel(), u=np.zeros(n), v=np.zeros(n), grid_shape=(ny, nx),
                    exx=scale * (2e-3 + 2e-5 * rng.standard_normal(n)), eyy=scale * np.full(n, -6e-4),
                    gxy=scale * np.zeros(n))


def test_the_errors_are_fusion_errors():
    assert issubclass(ArgumentError, FusionError) and issubclass(ArgumentError, ValueError)


def test_ply_thickness_in_millimetres():
    with pytest.raises(FusionError, match=r"ply_thickness: 0.25 m .* looks like millimetres; give metres \(0.00025\)"):
        Laminate.from_layup(PLY, "[0/90]s", 0.25)
    with pytest.raises(FusionError, match=r"ply_thickness: 250 m .* looks like micrometres"):
        Laminate.from_layup(PLY, "[0/90]s", 250)


def test_surface_layer_thickness_in_micrometres():
    with pytest.raises(FusionError, match=r"thickness: 80 m .* looks like micrometres; give metres \(8e-05\)"):
        SurfaceLayer(RESIN, 80)


def test_strains_in_microstrain_and_percent():
    with pytest.raises(ArgumentError, match=r"table: .* look like microstrain; multiply by 1e-06"):
        fusion.strain_ranges(table=_table(1e6))
    with pytest.raises(ArgumentError, match=r"table: .* look like percent; multiply by 0.01"):
        fusion.strain_ranges(table=_table(100.0))
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3)
    strain = np.zeros((4, 5, 3))
    strain[..., 0] = 2000.0
    with pytest.raises(ArgumentError, match=r"strain: .* look like microstrain"):
        fusion.predictions(lam, strain, strain_std=np.full(3, 20.0))


def test_pixel_size_in_metres():
    img = speckle_image((64, 64), seed=2)
    with pytest.raises(ArgumentError, match=r"pixel_size: 0.0001 mm per pixel .* looks like metres; give "
                                            r"millimetres per pixel \(0.1\)"):
        fusion.strain_ranges(images=[img, img], pixel_size=1e-4)
    res = correlate(img, img, subset=15, step=8)
    with pytest.raises(ArgumentError, match="pixel_size: .* looks like metres"):
        res.to_field(pixel_size=1e-4)


def test_grid_shape_given_as_x_y():
    strain = fusion.strain_ranges(table=_table(ny=40, nx=20))
    # 2 IR px per mm, the table's (0..9.5 mm, 0..-19.5 mm) onto columns 5..24, rows 5..44
    src = np.array([[0.0, 0.0], [9.5, 0.0], [9.5, -19.5], [0.0, -19.5]])
    transform = fit_transform(src, src * [2, -2] + 5, method="similarity")
    with pytest.raises(ArgumentError, match=r"grid: .* looks like \(X, Y\); give \(rows, columns\) = \(50, 30\)"):
        fusion.registered_strain(strain, transform, (30, 50))
    assert fusion.registered_strain(strain, transform, (50, 30))["footprint"].sum() > 500


def test_frame_stack_as_rows_columns_frames():
    frames = np.full((20, 24, 400), 296.0, np.float32)
    with pytest.raises(ArgumentError, match=r"frames: shape \(20, 24, 400\) read as 20 frames .* looks like "
                                            r"\(rows, columns, frames\); pass numpy.moveaxis\(frames, -1, 0\)"):
        fusion.lockin_maps(frames, frequency=2.0, frame_rate=50.0)
    with pytest.raises(ArgumentError, match="as many as the frame times"):
        fusion.lockin_maps(np.full((40, 30, 400), 296.0, np.float32), frequency=2.0, times=np.arange(400) / 50.0)


def test_temperatures_in_celsius():
    rng = np.random.default_rng(1)
    t = np.arange(400) / 50.0
    frames = (23.0 + 0.01 * np.cos(2 * np.pi * 2.0 * t)[:, None, None]
              + 0.02 * rng.standard_normal((400, 12, 16))).astype(np.float32)
    with pytest.raises(ArgumentError, match=r"frames: .* median of 23.* looks like degrees Celsius: give "
                                            r"kelvin \(offset=273.15"):
        fusion.lockin_maps(frames, frequency=2.0, frame_rate=50.0)


def test_kelvin_where_the_ratio_is_meant():
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3)
    strain = np.zeros((8, 10, 3), np.float32)
    strain[..., 0] = 2e-3
    predicted = fusion.predictions(lam, strain, strain_std=np.full(3, 2e-5, np.float32))
    delta_T = np.full((8, 10), -0.35)           # K, not divided by T0
    with pytest.raises(ArgumentError, match=r"measured: .* looks like a temperature range in kelvin: divide "
                                            r"delta_T by T0"):
        fusion.diagnosis(delta_T, predicted, measured_std=0.002)


def test_heat_model_needs_a_frequency_and_sources_must_exist():
    lam = Laminate.from_layup(PLY, "[0/90]s", 0.25e-3)
    strain = np.full((2, 3, 3), 1e-3)
    with pytest.raises(ArgumentError, match="frequency: the heat model"):
        fusion.predictions(lam, strain, strain_std=1e-5, sources=["laminate", "model"])
    with pytest.raises(ArgumentError, match=r"sources: \['coating'\] not available"):
        fusion.predictions(lam, strain, strain_std=1e-5, sources=["coating"])


def test_one_kind_of_correlation_data():
    with pytest.raises(ArgumentError, match="give exactly one of table, states, series or images"):
        fusion.strain_ranges(table=_table(), states=(_table(), _table()))
    with pytest.raises(ArgumentError, match="table: expected a fusion.dic.DicField"):
        fusion.strain_ranges(table=np.zeros((4, 3)))


def test_unknown_run_named():
    demo_config = Path(fusion.__file__).parent / "data" / "demo.toml"
    with pytest.raises(ArgumentError, match=r"run: no run named 'nope' in the config; its runs: \['CQ-0p05Hz'"):
        fusion.compute(demo_config, "nope")
