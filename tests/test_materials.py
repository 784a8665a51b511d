"""Material and laminate records: validation, error text, and handbook thermoelastic constants.

Handbook values of Al 6061-T6, AISI 1018 steel and Ti-6Al-4V: typical room-temperature values
of the ASM Handbook (docs/references.md, [ASM1990]; from memory). The commonly quoted
thermoelastic constants of the trade literature (steel about 3.5e-12, aluminium about 8.8e-12,
titanium about 3.5e-12 per Pa) are from memory.
"""

import dataclasses
import math

import numpy as np
import pytest

from fusion.mechanics import (
    IsotropicMaterial, Laminate, MaterialError, OrthotropicMaterial, Ply, SurfaceLayer,
    isotropic_coefficients,
)

# Kaw, Mechanics of Composite Materials (2006), Table 2.1 graphite/epoxy ([Kaw2006]); thermal
# values typical (from memory). Epoxy: typical neat-resin values (from memory).
CFRP = dict(name="graphite/epoxy", E1=181e9, E2=10.3e9, G12=7.17e9, nu12=0.28, alpha1=0.02e-6,
            alpha2=22.5e-6, density=1600.0, specific_heat=900.0, k1=5.0, k2=0.6, k3=0.6)
RESIN = dict(name="epoxy", E=3.5e9, nu=0.35, alpha=60e-6, density=1200.0, specific_heat=1100.0, k=0.2)

# alpha (1/K), rho (kg/m3), Cp (J/(kg K)), k (W/(m K)) from the handbooks named in the module
# docstring; E and nu are from memory (they do not enter K, only the strain state below).
HANDBOOK = {
    "Al 6061-T6": (23.6e-6, 2700.0, 896.0, 167.0, 68.9e9, 0.33),
    "AISI 1018": (11.5e-6, 7870.0, 486.0, 51.9, 205e9, 0.29),
    "Ti-6Al-4V": (8.6e-6, 4430.0, 526.0, 6.7, 113.8e9, 0.342),
}


def test_kelvin_constants_reproduce_handbook_computation():
    # K = alpha / (rho Cp) of the [ASM1990] values, recomputed by hand to 3 figures
    # (docs/references.md): the record's constant must be that quotient of its own inputs.
    expect = {"Al 6061-T6": 9.76e-12, "AISI 1018": 3.01e-12, "Ti-6Al-4V": 3.69e-12}
    for name, (alpha, rho, cp, k, E, nu) in HANDBOOK.items():
        m = IsotropicMaterial(name, E, nu, alpha, rho, cp, k)
        assert m.thermoelastic_constant == pytest.approx(expect[name], rel=2e-3), name


@pytest.mark.parametrize("name, quoted", [("AISI 1018", 3.5e-12), ("Al 6061-T6", 8.8e-12),
                                          ("Ti-6Al-4V", 3.5e-12)])
def test_kelvin_constants_near_commonly_quoted_values(name, quoted):
    # Values quoted across the thermoelastic literature (from memory); their spread comes from
    # the alloy and the Cp used, so accept 15 %.
    alpha, rho, cp, k, E, nu = HANDBOOK[name]
    m = IsotropicMaterial(name, E, nu, alpha, rho, cp, k)
    assert m.thermoelastic_constant == pytest.approx(quoted, rel=0.15)
    # and the law uses it: dT/T0 = -K (sigma_xx + sigma_yy) for a biaxial stress state
    stress = np.array([60e6, 40e6])
    s = np.array([[1, -nu], [-nu, 1]]) / E
    eps = s @ stress
    ratio = isotropic_coefficients(m) @ np.array([eps[0], eps[1], 0.0])
    assert ratio == pytest.approx(-m.thermoelastic_constant * stress.sum(), rel=1e-12)


def test_valid_records_and_derived_properties():
    m = OrthotropicMaterial(**CFRP)
    # reciprocity nu21 = nu12 E2/E1: 0.01593 in Kaw (2006) Example 2.4 (4 figures)
    assert m.nu21 == pytest.approx(0.01593, rel=5e-4)
    assert m.volumetric_heat_capacity == 1600.0 * 900.0
    k1, k2 = m.thermoelastic_constants
    assert k1 == pytest.approx(0.02e-6 / 1.44e6) and k2 == pytest.approx(22.5e-6 / 1.44e6)
    r = IsotropicMaterial(**RESIN)
    assert r.G == pytest.approx(3.5e9 / 2.7)
    # numpy scalars are accepted (configs and arrays produce them)
    assert OrthotropicMaterial(**{**CFRP, "E1": np.float32(181e9)}).E1 == np.float32(181e9)


@pytest.mark.parametrize("field, value, match", [
    ("E1", -181e9, "E1: expected a positive finite value, got -181000000000.0"),
    ("E2", 0.0, "E2: expected a positive finite value"),
    ("G12", float("nan"), "G12: expected a finite value, got nan"),
    ("E1", 181.0, r"E1: 181.0 Pa is outside the plausible range .* \(write the unit, e.g. '135 GPa'\)"),
    ("density", 1.6, r"density: .*1.6 g/cm3 is 1600 kg/m3"),
    ("specific_heat", 0.9, r"specific_heat: .*0.9 J/g/K is 900 J/kg/K"),
    ("alpha2", 22.5, r"alpha2: 22.5 1/K is not a plausible expansion coefficient \(write e.g. '22.5e-6 / K'\)"),
    ("nu12", 4.3, r"nu12: \|nu12\| must be below sqrt\(E1/E2\) = 4.19"),
    ("k3", -0.6, "k3: expected a positive finite value"),
    ("E1", "181 GPa", r"E1: expected a number in SI units, got '181 GPa'"),
    ("nu12", True, "nu12: expected a number in SI units, got True"),
])
def test_orthotropic_errors_name_field_and_value(field, value, match):
    with pytest.raises(MaterialError, match=match) as info:
        OrthotropicMaterial(**{**CFRP, field: value})
    assert info.value.field == field  # the config turns this into the dotted key


def test_poisson_bound_is_the_positive_definite_limit():
    # Jones (1999) sec. 2.4: 1 - nu12 nu21 > 0  <=>  |nu12| < sqrt(E1/E2); just inside is valid.
    bound = math.sqrt(CFRP["E1"] / CFRP["E2"])
    OrthotropicMaterial(**{**CFRP, "nu12": 0.999 * bound})
    OrthotropicMaterial(**{**CFRP, "nu12": -0.3})  # auxetic plies are allowed
    with pytest.raises(MaterialError, match="nu12"):
        OrthotropicMaterial(**{**CFRP, "nu12": -bound})


@pytest.mark.parametrize("field, value, match", [
    ("nu", 0.5, r"nu: expected -1 < nu < 0.5, got 0.5"),
    ("nu", -1.0, "nu: expected -1 < nu < 0.5"),
    ("E", 3.5, "E: 3.5 Pa is outside the plausible range"),
    ("alpha", 60.0, "alpha: 60.0 1/K is not a plausible expansion coefficient"),
    ("k", 0.0, "k: expected a positive finite value"),
    ("density", 1e6, "density: 1000000.0 kg/m3 is outside the plausible range"),
])
def test_isotropic_errors(field, value, match):
    with pytest.raises(MaterialError, match=match) as info:
        IsotropicMaterial(**{**RESIN, field: value})
    assert info.value.field == field


def test_records_are_frozen():
    m = OrthotropicMaterial(**CFRP)
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.E1 = 1.0


def test_laminate_records_validate():
    ply_mat, resin = OrthotropicMaterial(**CFRP), IsotropicMaterial(**RESIN)
    with pytest.raises(MaterialError, match="ply_thickness: expected a positive thickness, got -0.00025 m"):
        Ply(ply_mat, 0.0, -0.25e-3)
    with pytest.raises(MaterialError, match="a ply needs an OrthotropicMaterial, got IsotropicMaterial 'epoxy'"):
        Ply(resin, 0.0, 0.25e-3)
    with pytest.raises(MaterialError, match="ply_angle: expected a finite angle"):
        Ply(ply_mat, float("inf"), 0.25e-3)
    with pytest.raises(MaterialError, match="a surface layer needs an IsotropicMaterial"):
        SurfaceLayer(ply_mat, 20e-6)
    with pytest.raises(MaterialError, match="layup: the laminate has no plies"):
        Laminate(())
    with pytest.raises(MaterialError, match="entry 1 of plies is float"):
        Laminate((Ply(ply_mat, 0.0, 1e-4), 90.0))
    with pytest.raises(MaterialError, match="zero_direction: expected a finite angle"):
        Laminate((Ply(ply_mat, 0.0, 1e-4),), zero_direction=float("nan"))
    with pytest.raises(MaterialError, match="convection_back: expected a heat-transfer coefficient >= 0"):
        Laminate((Ply(ply_mat, 0.0, 1e-4),), convection_back=-5.0)
    with pytest.raises(MaterialError, match="coating: expected a SurfaceLayer or None, got IsotropicMaterial"):
        Laminate((Ply(ply_mat, 0.0, 1e-4),), coating=resin)


def test_laminate_from_layup():
    ply_mat, resin = OrthotropicMaterial(**CFRP), IsotropicMaterial(**RESIN)
    lam = Laminate.from_layup(ply_mat, "[0/90]2s", 0.2e-3, resin_layer=SurfaceLayer(resin, 20e-6),
                              name="XP")
    # parse_layup convention (common practice): [0/90]2s = 0/90/0/90/90/0/90/0
    assert lam.angles == (0.0, 90.0, 0.0, 90.0, 90.0, 0.0, 90.0, 0.0)
    assert lam.layup_code == "[0/90]2s" and lam.name == "XP"
    assert lam.thickness == pytest.approx(1.6e-3, rel=1e-12)
    assert [k for k, _ in lam.surface_layers] == ["resin_layer"]
    assert hash(lam) == hash(Laminate.from_layup(ply_mat, "[0/90]2s", 0.2e-3,
                                                 resin_layer=SurfaceLayer(resin, 20e-6), name="XP"))
