"""Frequency plan: content against published limits, files round-tripped, the command."""

import numpy as np
import pytest
import xarray as xr

from fusion.errors import ConfigError, InputError
from fusion.io import MARK_KEY, read_netcdf
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


def test_plan_files_round_trip_and_replace_only_their_own(tmp_path):
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
    # both files carry the mark that makes them replaceable (read back by Pillow, independently)
    assert back.attrs[MARK_KEY] == "plan"
    with Image.open(paths["plan.png"]) as img:
        assert img.format == "PNG"
        assert img.info["dpi"][0] == pytest.approx(160, abs=0.5)
        assert img.size[0] >= 1000
        assert img.text[MARK_KEY] == "plan"
    # a what-if tool: the second plan replaces the first without asking
    other = frequency_plan(lam, uniaxial_strain_state(lam, strain=2e-3), frequencies=np.geomspace(0.1, 200, 41))
    save_plan(other, tmp_path)
    assert read_netcdf(paths["plan.nc"])["ratio_in_phase"].values == pytest.approx(other["ratio_in_phase"].values)
    with pytest.raises(ValueError, match="dpi"):
        plan_figure(ds, tmp_path / "low.png", dpi=72)


@pytest.mark.parametrize("name", ["plan.nc", "plan.png"])
@pytest.mark.parametrize("content", [b"my own notes", b"\x89PNG\r\n\x1a\n", b""])
def test_plan_never_replaces_a_file_it_did_not_make(tmp_path, name, content):
    # not a physics check: ownership of the plan's files
    lam = coated()
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.1, 200, 21))
    (tmp_path / name).write_bytes(content)
    with pytest.raises(InputError, match=f"{name}: exists and was not written by fusion plan.*--out"):
        save_plan(ds, tmp_path)
    assert (tmp_path / name).read_bytes() == content
    # checked before anything is written: the other file does not appear either
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


def test_plan_never_replaces_other_netcdf_or_png_files(tmp_path):
    # not a physics check: ownership of the plan's files
    # a real NetCDF file and a real PNG image of the same names, not made by fusion plan
    from PIL import Image

    xr.Dataset({"a": ("x", np.arange(3.0))}, attrs={"title": "fusion frequency plan"}).to_netcdf(
        tmp_path / "plan.nc")
    Image.new("RGB", (4, 4)).save(tmp_path / "plan.png")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    lam = coated()
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.1, 200, 21))
    with pytest.raises(InputError, match="plan.nc: exists and was not written by fusion plan"):
        save_plan(ds, tmp_path)
    (tmp_path / "plan.nc").unlink()
    with pytest.raises(InputError, match="plan.png: exists and was not written by fusion plan"):
        save_plan(ds, tmp_path)
    assert (tmp_path / "plan.png").read_bytes() == before["plan.png"]
    assert not (tmp_path / "plan.nc").exists()


def test_plan_never_follows_a_link_named_like_its_files(tmp_path):
    # not a physics check: links are never followed
    lam = coated()
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.1, 200, 21))
    first = tmp_path / "first"
    save_plan(ds, first)
    second = tmp_path / "second"
    second.mkdir()
    (second / "plan.png").symlink_to(first / "plan.png")   # a link to a real plan is still not ours
    with pytest.raises(InputError, match="plan.png: exists and was not written by fusion plan"):
        save_plan(ds, second)
    assert (second / "plan.png").is_symlink()


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
    # plain words, no shorthand
    for shorthand in ("none in range", "in phase; and with", "modulus", "range end"):
        assert shorthand not in text


def test_plan_bands_in_plain_sentences():
    # not a physics check: the sentences state the band values the plan computed
    # a bare carbon cross-ply: the surface ply's band runs to the end of the frequencies planned
    # (see test_plan_bands_of_a_carbon_cross_ply), the laminate's starts at their beginning
    lam = Laminate.from_layup(CFRP, "[0/90]2s", 0.25e-3)
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.01, 200, 131))
    lines = {ln.strip().split(":")[0]: ln.strip() for ln in plan_table(ds).splitlines()}
    assert float(ds["band_high"].sel(source="surface_ply")) == pytest.approx(200)
    lo = float(ds["band_low"].sel(source="surface_ply"))
    slo = float(ds["strict_band_low"].sel(source="surface_ply"))
    sp = lines["surface_ply"]
    assert f"from {lo:.3g} Hz to above 200 Hz (the highest frequency tried)" in sp
    assert f"with a small phase lag as well from {slo:.3g} Hz to above 200 Hz" in sp or (
        slo == pytest.approx(lo) and "with a small phase lag." in sp)
    assert sp.endswith(".") and "within 2 % of it" in sp
    hi = float(ds["band_high"].sel(source="laminate"))
    assert f"from below 0.01 Hz (the lowest frequency tried) to {hi:.3g} Hz" in lines["laminate"]
    # a source the response never reaches says so, with the range planned
    coated_ds = frequency_plan(coated(), uniaxial_strain_state(coated()))
    assert np.isnan(float(coated_ds["band_low"].sel(source="resin_layer")))
    assert ("resin_layer: the response never comes within 2 % of it between 0.1 Hz and 200 Hz."
            in [ln.strip() for ln in plan_table(coated_ds).splitlines()])


def test_plan_figure_says_what_its_curves_are(tmp_path):
    # not a physics check: legend labels
    from PIL import Image

    from fusion.plan._figure import _plan_figure

    lam = coated()
    ds = frequency_plan(lam, uniaxial_strain_state(lam), frequencies=np.geomspace(0.1, 200, 41))
    labels = [t.get_text() for ax in _plan_figure(ds).axes if ax.get_legend() for t in ax.get_legend().get_texts()]
    assert "heat model, whole amplitude (lagging part included)" in labels
    assert "resin-rich layer, adiabatic" in labels and "resin-rich layer" in labels
    assert not [t for t in labels if "modulus" in t or "_" in t]
    with Image.open(plan_figure(ds, tmp_path / "p.png")) as img:
        assert img.text[MARK_KEY] == "plan"


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


def test_plan_command_writes_into_the_output_folder(tmp_path):
    # not a physics check: the command reads its config and writes its files
    cfg = tmp_path / "campaign.toml"
    cfg.write_text(CONFIG, encoding="utf-8")
    text = plan_command(cfg)
    results = tmp_path / "results"          # the default output folder, as for fusion run
    assert f"wrote {results / 'plan.nc'}" in text and f"wrote {results / 'plan.png'}" in text
    assert not (tmp_path / "plan.nc").exists() and not (tmp_path / "plan.png").exists()
    ds = read_netcdf(results / "plan.nc")
    assert ds.sizes["frequency"] == 41
    assert ds["frequency"].values[-1] == pytest.approx(100.0)
    assert ds.attrs["strain_range"][0] == pytest.approx(1e-3)
    # a second plan replaces the first without asking, and says so
    again = plan_command(cfg)
    assert "(replacing the earlier plan)" in again
    # the config's [output] folder, and --out above it
    cfg.write_text(CONFIG.replace("[output]", '[output]\nfolder = "out"'), encoding="utf-8")
    plan_command(cfg)
    assert (tmp_path / "out" / "plan.nc").is_file() and (tmp_path / "out" / "plan.png").is_file()
    elsewhere = tmp_path / "elsewhere"
    plan_command(cfg, out=elsewhere)
    assert sorted(p.name for p in elsewhere.iterdir()) == ["plan.nc", "plan.png"]
    with pytest.raises(ConfigError, match="no laminate 'other'"):
        plan_command(cfg, laminate="other")


def test_plan_names_sources_as_the_config_and_result_nc_do(tmp_path):
    # not a physics check: one name per source in the plan's text, the config and the files
    from fusion.config import load_config
    from fusion.datamodel import SOURCES

    cfg = tmp_path / "campaign.toml"
    cfg.write_text(CONFIG, encoding="utf-8")
    text = plan_command(cfg).splitlines()
    start = next(i for i, ln in enumerate(text) if ln.startswith("Adiabatic value of each source"))
    end = next(i for i, ln in enumerate(text) if ln.startswith("Where the heat model"))
    labels = [ln.split()[0] for ln in text[start + 1:end]]
    plan = read_netcdf(tmp_path / "results" / "plan.nc")
    assert labels == [str(s) for s in plan["source"].values] == ["resin_layer", "surface_ply", "laminate"]
    assert set(labels) <= set(SOURCES)          # the categories of result.nc's source map
    # the config takes them as they are printed
    cfg.write_text(CONFIG + f"\n[diagnosis]\nsources = {labels!r}\n".replace("'", '"'), encoding="utf-8")
    assert load_config(cfg).diagnosis.sources == tuple(labels)
    # the source table above the plan and the plan's sentences use the same names
    table = text[:text.index("")]
    for name in labels:
        assert any(ln.split()[:1] == [name] for ln in table), name
        assert sum(ln.strip().startswith(f"{name}: ") for ln in text[end:]) == 1, name


def test_plan_command_line_output_folder(tmp_path, capsys):
    # not a physics check: where the command writes
    from fusion.cli import main

    cfg = tmp_path / "campaign.toml"
    cfg.write_text(CONFIG, encoding="utf-8")
    (tmp_path / "results").mkdir()
    (tmp_path / "results" / "plan.png").write_bytes(b"a picture of my own")
    assert main(["plan", str(cfg)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "plan.png: exists and was not written by fusion plan" in err
    assert (tmp_path / "results" / "plan.png").read_bytes() == b"a picture of my own"
    assert main(["plan", str(cfg), "--out", str(tmp_path / "o")]) == 0
    assert main(["plan", str(cfg), "--out", str(tmp_path / "o"), "--overwrite"]) == 0   # old scripts
    assert "replacing the earlier plan" in capsys.readouterr().out


def test_plan_bad_arguments():
    lam = coated()
    with pytest.raises(ValueError, match="strain_range"):
        frequency_plan(lam, [1e-3, 0.0])
    with pytest.raises(ValueError, match="increasing"):
        frequency_plan(lam, [1e-3, 0, 0], frequencies=[10.0, 1.0])


def test_plan_in_plane_blur_along_and_across_the_surface_fibres():
    # Carslaw & Jaeger, Conduction of Heat in Solids (1959), sec. 2.6: mu = sqrt(2 k / (rho c
    # omega)), here with the surface ply's in-plane k1 (along its fibres) and k2 (across).
    # The resolved wavelength: for a surface ply much thicker than its through-thickness
    # diffusion length the surface is that ply alone, whose response to cos(q x) is
    # i w / (i w + kappa q^2) (Carslaw & Jaeger ch. 2); it falls to one half at
    # kappa q^2 / w = sqrt(3), a wavelength 2 pi mu / (sqrt(2) 3**0.25).
    lam = Laminate.from_layup(CFRP, "[30/-60]s", 2e-3, zero_direction=10.0)
    f = np.array([20.0, 50.0, 100.0])
    ds = frequency_plan(lam, uniaxial_strain_state(lam, strain=2e-3, direction=40.0), frequencies=f)
    omega = 2 * np.pi * f
    mu_along = np.sqrt(2 * 5.0 / (1.44e6 * omega))
    mu_across = np.sqrt(2 * 0.6 / (1.44e6 * omega))
    np.testing.assert_allclose(ds["blur_length_along"].values, mu_along, rtol=1e-12)
    np.testing.assert_allclose(ds["blur_length_across"].values, mu_across, rtol=1e-12)
    factor = 2 * np.pi / (np.sqrt(2) * 3 ** 0.25)
    np.testing.assert_allclose(ds["resolved_wavelength_along"].values, factor * mu_along, rtol=5e-3)
    np.testing.assert_allclose(ds["resolved_wavelength_across"].values, factor * mu_across, rtol=5e-3)
    assert ds.attrs["surface_fibre_angle_deg"] == pytest.approx(40.0)
    text = plan_table(ds)
    assert "In-plane blur (surface ply fibres at 40° from specimen x)" in text
    assert f"{mu_along[-1] * 1e3:.3f}" in text          # the table prints the round 100 Hz
