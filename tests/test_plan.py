"""Frequency plan: content against published limits, files round-tripped, the command."""

import numpy as np
import pytest
import xarray as xr

from fusion.errors import ConfigError, InputError
from fusion.io import read_netcdf
from fusion.mechanics import (
    IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer, source_coefficients,
    uniaxial_strain_state,
)
from fusion.plan import frequency_plan, plan_command, plan_figure, plan_table, save_plan

# Kaw, Mechanics of Composite Materials, 2nd ed., Table 2.1 graphite/epoxy ([Kaw2006]); thermal
# data typical (from memory). Resin: the typical epoxy of docs/references.md (from memory);
# paint: diffusivity inside the 1-3e-7 m2/s of Coelho et al. (2005), [Coelho2005].
CFRP = OrthotropicMaterial("graphite/epoxy", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
                           1600.0, 900.0, 5.0, 0.6, 0.6)
RESIN = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)
PAINT = IsotropicMaterial("paint", 2.0e9, 0.35, 60e-6, 1400.0, 1200.0, 0.2)


def coated():
    return Laminate.from_layup(CFRP, "[0/90]2s", 0.25e-3, name="CP-1", resin_layer=SurfaceLayer(RESIN, 5e-6),
                               coating=SurfaceLayer(PAINT, 15e-6))


def test_plan_variables_units_and_diffusion_lengths():
    lam = coated()
    e = uniaxial_strain_state(lam)
    ds = frequency_plan(lam, e)
    assert ds.sizes == {"frequency": 121, "layer": 10, "source": 4}
    assert ds["frequency"].values[0] == pytest.approx(0.1) and ds["frequency"].values[-1] == pytest.approx(200)
    for name, v in ds.variables.items():
        assert "long_name" in v.attrs, name
        if name not in ("layer", "source"):
            assert "units" in v.attrs, name
    # Carslaw & Jaeger (1959) sec. 2.6: mu = sqrt(2 k / (rho c omega)); first ply k3 0.6, rho c 1.44e6
    f = ds["frequency"].values
    np.testing.assert_allclose(ds["diffusion_length"].sel(layer="ply 1 (0°)").values,
                               np.sqrt(2 * 0.6 / (1600 * 900 * 2 * np.pi * f)), rtol=1e-12)
    np.testing.assert_allclose(ds["diffusion_length"].sel(layer="coating").values,
                               np.sqrt(2 * 0.2 / (1400 * 1200 * 2 * np.pi * f)), rtol=1e-12)
    # the layers' contributions add up to the response (the plan's "which layer" answer)
    np.testing.assert_allclose(ds["layer_contribution"].sum("layer").values, ds["ratio_in_phase"].values,
                               rtol=1e-12)
    # the sources beside the response are the adiabatic laws' values
    for k, c in source_coefficients(lam).items():
        assert float(ds["adiabatic_ratio"].sel(source=k)) == pytest.approx(float(c @ e), rel=1e-12)
    assert ds["layer_depth"].values[2] == pytest.approx(20e-6)


def test_plan_limits_are_the_homogenised_and_top_layer_values():
    # Limits of harmonic conduction ([CarslawJaeger1959]; derived in docs/references.md):
    # f -> 0 gives the rho-c weighted mean, which for a laminate without surface
    # layers is the homogenised value -alpha_lam . dN / (h <rho c>) of lamination theory
    # (Kaw 2006 sec. 4.5; computed by the adiabatic laws from the A matrix and laminate CTE,
    # an independent route); f -> infinity gives the top layer's value.
    lam = Laminate.from_layup(CFRP, "[45/0/-45/90]s", 0.125e-3)
    e = uniaxial_strain_state(lam, strain=2e-3, direction=30.0)
    ds = frequency_plan(lam, e, frequencies=[1e-6, 1e-5, 1e6, 1e7])
    laminate_value = float(source_coefficients(lam)["laminate"] @ e)
    assert float(ds["limit_low_frequency"]) == pytest.approx(laminate_value, rel=1e-10)
    # O(omega h^2 / kappa) = 1e-5 at 1e-5 Hz for 1 mm of carbon/epoxy
    assert ds["ratio_in_phase"].values[1] == pytest.approx(laminate_value, rel=1e-4)
    surface = float(source_coefficients(lam)["surface_ply"] @ e)
    assert float(ds["limit_high_frequency"]) == pytest.approx(surface, rel=1e-12)
    assert ds["ratio_in_phase"].values[-1] == pytest.approx(surface, rel=1e-9)
    assert abs(ds["phase_lag"].values[-1]) < 1e-3


def test_plan_bands_of_a_carbon_cross_ply():
    # Common practice: a carbon/epoxy cross-ply's response is the laminate's at low frequency
    # and the surface ply's at high frequency.
    lam = Laminate.from_layup(CFRP, "[0/90]2s", 0.25e-3)
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.01, 200, 131), tolerance=0.02)
    lo, hi = float(ds["band_low"].sel(source="surface_ply")), float(ds["band_high"].sel(source="surface_ply"))
    assert 10 < lo < 100 and hi == pytest.approx(200)
    assert float(ds["band_low"].sel(source="laminate")) == pytest.approx(0.01)
    assert float(ds["strict_band_high"].sel(source="surface_ply")) == pytest.approx(200)
    # the definition: inside the band every grid point is within tolerance
    f = ds["frequency"].values
    r = ds["ratio_in_phase"].values
    target = float(ds["adiabatic_ratio"].sel(source="surface_ply"))
    inside = (f >= lo) & (f <= hi)
    assert np.all(np.abs(r[inside] - target) <= 0.02 * abs(target))
    assert np.abs(r[np.searchsorted(f, lo) - 1] - target) > 0.02 * abs(target)
    assert list(ds.attrs["band_surface_ply"]) == pytest.approx([lo, hi])


def test_plan_files_round_trip_and_overwrite(tmp_path):
    # not a physics check: files, round trip and overwrite
    from PIL import Image

    lam = coated()
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.1, 200, 41))
    paths = save_plan(ds, tmp_path, dpi=160)
    back = read_netcdf(paths["plan.nc"])
    xr.testing.assert_allclose(back.drop_vars(["layer", "source"]), ds.drop_vars(["layer", "source"]))
    assert list(back["layer"].values) == list(ds["layer"].values)
    for name in ds.variables:
        assert back[name].attrs == ds[name].attrs, name
    assert back.attrs["caution"] == ds.attrs["caution"]
    np.testing.assert_allclose(back.attrs["strain_range"], ds.attrs["strain_range"])
    with Image.open(paths["plan.png"]) as img:
        assert img.format == "PNG"
        assert img.info["dpi"][0] == pytest.approx(160, abs=0.5)
        assert img.size[0] >= 1000
    before = paths["plan.nc"].read_bytes()
    with pytest.raises(InputError, match="exists already"):
        save_plan(ds, tmp_path)
    assert paths["plan.nc"].read_bytes() == before
    save_plan(ds, tmp_path, overwrite=True)
    with pytest.raises(ValueError, match="dpi"):
        plan_figure(ds, tmp_path / "low.png", dpi=72)


def test_plan_table_text():
    # not a physics check: the text table and its cautions
    lam = coated()
    e = uniaxial_strain_state(lam)
    ds = frequency_plan(lam, e)
    text = plan_table(ds)
    assert "'CP-1'" in text and "[0/90]2s" in text and "plies (x8)" in text
    surface = float(source_coefficients(lam)["surface_ply"] @ e)
    assert f"{surface * 1e6:.2f}" in text
    assert "hazardous" in text and "test standards" in text
    assert len(text.splitlines()) < 40  # a short table


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
k1 = "5 W/m/K"
k2 = "0.6 W/m/K"
k3 = "0.6 W/m/K"

[materials.epoxy]
E = "3.5 GPa"
nu = 0.35
alpha = "60e-6 / K"
density = "1200 kg/m^3"
specific_heat = "1100 J/kg/K"
k = "0.2 W/m/K"

[laminate]
layup = "[0/90]2s"
ply_material = "cfrp"
ply_thickness = "0.25 mm"
resin_layer = { material = "epoxy", thickness = "10 um" }

[plan]
strain = "1000 microstrain"
f_min = "0.5 Hz"
f_max = "100 Hz"
count = 41

[output]
dpi = 150
"""


def test_plan_command(tmp_path):
    # not a physics check: the command reads its config and writes its files
    cfg = tmp_path / "campaign.toml"
    cfg.write_text(CONFIG, encoding="utf-8")
    text = plan_command(cfg)
    assert "wrote" in text and (tmp_path / "plan.nc").is_file() and (tmp_path / "plan.png").is_file()
    ds = read_netcdf(tmp_path / "plan.nc")
    assert ds.sizes["frequency"] == 41
    assert ds["frequency"].values[-1] == pytest.approx(100.0)
    assert ds.attrs["strain_range"][0] == pytest.approx(1e-3)
    out = tmp_path / "elsewhere"
    plan_command(cfg, out=out)
    assert (out / "plan.nc").is_file()
    with pytest.raises(InputError, match="overwrite"):
        plan_command(cfg)
    with pytest.raises(ConfigError, match="no laminate 'other'"):
        plan_command(cfg, laminate="other", overwrite=True)


def test_plan_bad_arguments():
    lam = coated()
    with pytest.raises(ValueError, match="strain_range"):
        frequency_plan(lam, [1e-3, 0.0])
    with pytest.raises(ValueError, match="increasing"):
        frequency_plan(lam, [1e-3, 0, 0], frequencies=[10.0, 1.0])
