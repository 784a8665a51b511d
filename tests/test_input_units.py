"""Units and conventions of the inputs: declared by keys, magnitudes checked against plausible bounds.

References: the definitions of the units (1 microstrain = 1e-6, 1 % = 1e-2, 1 mK = 1e-3 K,
0 degC = 273.15 K; SI Brochure, BIPM 2019), Euler's formula for the in-phase and quadrature
parts of a response of magnitude |C| and phase phi (|C| cos phi, |C| sin phi), Kelvin's law
with handbook properties for the dT/T0 bound, and an independent forward model of the frames
(``_inputs.py``). Where a bound is a fact of the trade it says "common practice".
"""

import math

import numpy as np
import pytest
import xarray as xr

from fusion.cli import main
from fusion.config import load_config
from fusion.errors import ConfigError, InputError
from fusion.io import PLAUSIBLE, check_ratio, check_strain_ranges, check_temperatures
from fusion.run import compute_run
from fusion.run._thermal import maps_side, thermal_side

from _inputs import COLS, ROOT, ROWS, T0, stack, write_config, write_load, write_strain

F, RATE, N = 5.0, 50.0, 600


# ------------------------------------------------------------------------ the table of bounds
# Each bound, and what stands behind it (a published value, or "common practice").
BOUNDS = {
    # cyclic strain ranges of laminates under test: ~1e-4 .. 1e-2; failure strains of carbon
    # and glass fibre composites ~1.5 % and ~3 %, of epoxy resins 3-6 % (common practice);
    # under 1 microstrain no correlation measurement resolves a strain (common practice)
    "strain_range": (1e-6, 0.05, "1"),
    # laboratory tests from liquid-nitrogen chambers (77 K boils, ~100 K chambers) to hot
    # cells below 1000 K (common practice)
    "temperature": (100.0, 1000.0, "K"),
    # Kelvin's law, checked below with handbook properties
    "ratio": (0.0, 0.01, "1"),
    # a factor of 1000 between a load file in N and loads in kN (common practice)
    "load_range_ratio": (0.01, 100.0, "1"),
}


def test_plausible_bounds_are_the_listed_ones_with_their_reasons():
    # not a physics check: every bound is documented with its reason (common practice or Kelvin's law)
    assert set(PLAUSIBLE) == set(BOUNDS)
    readme = (ROOT / "configs" / "README.md").read_text()
    for name, (low, high, unit) in BOUNDS.items():
        b = PLAUSIBLE[name]
        assert (b.low, b.high, b.unit) == (low, high, unit), name
        assert b.basis and b.statistic, name
        assert "common practice" in b.basis or "Kelvin's law" in b.basis, name
    # the guide lists every bound (configs/README.md, "Plausible magnitudes")
    for text in ("1e-6 .. 0.05", "100 .. 1000 K", "below 0.01", "0.01 .. 100"):
        assert text in readme


def test_the_ratio_bound_lies_above_any_elastic_signal():
    # Kelvin's law dT/T0 = K dsigma, K = alpha / (rho c), at the yield stress (handbook values:
    # AISI 1018 steel alpha 11.5e-6 /K, rho 7870, c 486, yield ~370 MPa; Al 6061-T6 alpha
    # 23.6e-6, rho 2700, c 896, yield ~276 MPa; from memory for the yield stresses)
    steel = 11.5e-6 / (7870 * 486) * 370e6
    aluminium = 23.6e-6 / (2700 * 896) * 276e6
    # an epoxy resin witness layer: dT/T0 = -alpha E / ((1 - nu) rho c) (eps_xx + eps_yy), with
    # E 3.5 GPa, nu 0.35, alpha 60e-6, rho 1200, c 1100 (computed), at 2 % + 0.7 % strain
    resin = 60e-6 * 3.5e9 / ((1 - 0.35) * 1200 * 1100) * (0.02 - 0.35 * 0.02)
    assert max(steel, aluminium, resin) < PLAUSIBLE["ratio"].high / 2
    # a range of 3 mK written in millikelvin and read as kelvin is caught at room temperature
    assert 3.0 / 293.15 > PLAUSIBLE["ratio"].high


@pytest.mark.parametrize("in_file, unit, says", [
    (3000.0, "1", 'they look like microstrain; set dic.strain_unit = "microstrain"'),
    (0.3, "1", 'they look like percent; set dic.strain_unit = "%"'),
    (0.002, "microstrain", 'they look like plain strain or percent; set dic.strain_unit = "1"'),
    (20.0, "%", 'they look like microstrain; set dic.strain_unit = "microstrain"'),
])
def test_strain_in_another_unit_is_named(in_file, unit, says):
    factor = {"1": 1.0, "%": 1e-2, "microstrain": 1e-6}[unit]     # the definitions of the units
    comps = [np.full(50, in_file * factor), np.full(50, -0.3 * in_file * factor), np.zeros(50)]
    with pytest.raises(InputError, match=rf"t\.csv: strain values like {in_file:.4g} .*{says}"):
        check_strain_ranges(comps, where="t.csv", unit=unit)
    # 2000 microstrain, written in the declared unit, passes
    check_strain_ranges([np.full(50, 2e-3)], where="t.csv", unit=unit)


def test_temperatures_in_celsius_or_counts_are_named():
    with pytest.raises(InputError, match="m.nc: T0 must be .* it looks like degrees Celsius: convert to kelvin"):
        check_temperatures(np.full((4, 4), 22.5), where="m.nc")
    with pytest.raises(InputError, match='it looks like detector counts: set values = "counts"'):
        check_temperatures(np.full((4, 4), 13000.0), where="f.npy", statistic="median",
                           hint_counts='set values = "counts" with gain and offset')
    check_temperatures(np.full((4, 4), 295.0), where="m.nc")


def test_a_range_in_millikelvin_is_named():
    with pytest.raises(InputError, match=r"m\.nc: \|delta_T / T0\| reaches .* values like 50 look like millikelvin"):
        check_ratio(np.full((4, 4), -50.0), np.full((4, 4), 295.0), where="m.nc")
    check_ratio(np.full((4, 4), -0.05), np.full((4, 4), 295.0), where="m.nc")


# ------------------------------------------------------------------------ strain_unit in a run
def _strain_run(folder, rng, *, scale=1.0, dic=""):
    folder.mkdir(exist_ok=True)
    t = np.arange(N) / RATE
    np.save(folder / "ir.npy", stack(t, F, -0.05, rng))
    write_load(folder / "load.csv", t, F)
    write_strain(folder / "strain.csv", scale=scale)
    return write_config(folder, run=f'frequency = "{F:g} Hz"', thermal=f'frame_rate = "{RATE:g} Hz"', dic=dic)


@pytest.mark.parametrize("unit, scale", [("microstrain", 1e6), ("%", 1e2)])
def test_a_declared_strain_unit_gives_the_plain_strain_result(tmp_path, unit, scale, capsys):
    # the definitions of the units ([BIPM2019]): the same field in another unit gives the same result
    plain = load_config(_strain_run(tmp_path / "plain", np.random.default_rng(5)))
    scaled_cfg = _strain_run(tmp_path / "scaled", np.random.default_rng(5), scale=scale,
                             dic=f'strain_unit = "{unit}"')
    a = compute_run(plain, plain.runs[0]).dataset
    b = compute_run(load_config(scaled_cfg), load_config(scaled_cfg).runs[0]).dataset
    assert sorted(a.data_vars) == sorted(b.data_vars)
    for name in a.data_vars:
        x, y = a[name].values, b[name].values
        if x.dtype.kind in "iu":
            np.testing.assert_array_equal(x, y, err_msg=name)
        else:   # the same numbers but for the rounding of x * 1e-6 (relative 1e-16)
            np.testing.assert_allclose(x, y, rtol=1e-5, atol=0, equal_nan=True, err_msg=name)
    # without the key: the run and fusion check stop, naming the unit
    bare = _strain_run(tmp_path / "bare", np.random.default_rng(5), scale=scale)
    look = {"microstrain": "microstrain", "%": "percent"}[unit]
    with pytest.raises(InputError, match=rf"strain\.csv: strain values like .* they look like {look}"):
        compute_run(load_config(bare), load_config(bare).runs[0])
    assert main(["check", str(bare)]) == 1
    err = capsys.readouterr().err
    assert "strain.csv" in err and f"look like {look}" in err and f'strain_unit = "{unit}"' in err


def test_a_file_unit_and_a_different_key_are_refused(tmp_path):
    # not a physics check: two declared units that disagree are refused
    from fusion.io import read_dic_field

    x, y = np.meshgrid(np.arange(5.0), np.arange(4.0))
    ds = xr.Dataset({"x": (("p",), x.ravel()), "y": (("p",), y.ravel())})
    for k in ("exx", "eyy", "gxy"):
        ds[k] = (("p",), np.full(x.size, 2000.0), {"units": "microstrain"})
    ds.to_netcdf(tmp_path / "s.nc")
    f = read_dic_field(tmp_path / "s.nc")
    assert np.allclose(f.exx, 2e-3)                                    # the file's own unit
    assert np.allclose(read_dic_field(tmp_path / "s.nc", strain_unit="microstrain").exx, 2e-3)
    with pytest.raises(InputError, match="has units 'microstrain' but strain_unit is '%'"):
        read_dic_field(tmp_path / "s.nc", strain_unit="%")


# ------------------------------------------------------------------------ frames
def test_frames_in_celsius_are_refused(tmp_path, rng, capsys):
    # the definition of the kelvin ([BIPM2019]): 22 degC frames are not 22 K
    cfg = _strain_run(tmp_path, rng)
    t = np.arange(N) / RATE
    np.save(tmp_path / "ir.npy", stack(t, F, -0.05, rng, T0=22.0))
    with pytest.raises(InputError, match=r"ir\.npy: the frames' temperature .* median of 22 — it looks like "
                                         r"degrees Celsius"):
        thermal_side(load_config(cfg).runs[0], budget=2e9)
    assert main(["check", str(cfg)]) == 1
    assert "looks like degrees Celsius" in capsys.readouterr().err


# ------------------------------------------------------------------------ maps
def _maps_file(path, *, names=None, dT=-0.05, phase=None, magnitude=None, quadrature=None, T=T0, units=None):
    names = names or {}
    ds = xr.Dataset()
    shape = (("y", "x"),)

    def put(q, v):
        if v is not None:
            ds[names.get(q, q)] = (shape[0], np.broadcast_to(np.asarray(v, np.float64), (ROWS, COLS)).copy(),
                                   {"units": units} if units and q == "delta_T" else {})

    put("T0", T)
    put("delta_T", dT)
    put("phase", phase)
    put("magnitude", magnitude)
    put("delta_T_quadrature", quadrature)
    ds.to_netcdf(path)
    return path


def _maps_run(folder, thermal):
    write_strain(folder / "strain.csv")
    return write_config(folder, run='frequency = "100 Hz"', thermal=thermal, frames=None, load=None)


def test_maps_need_their_convention(tmp_path):
    _maps_file(tmp_path / "m.nc")
    cfg = _maps_run(tmp_path, 'maps = "m.nc"')
    with pytest.raises(ConfigError, match=r"run 'R'\.thermal\.delta_T_convention: is required with 'maps'"):
        load_config(cfg)


def test_amplitude_maps_give_the_peak_to_peak_result(tmp_path, rng):
    # definition (common practice): a peak-to-peak range is twice the amplitude
    noise = 0.002 * rng.standard_normal((ROWS, COLS))
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    _maps_file(tmp_path / "a" / "m.nc", dT=-0.05 + noise)
    _maps_file(tmp_path / "b" / "m.nc", dT=(-0.05 + noise) / 2)            # the amplitude: half the range
    pp = load_config(_maps_run(tmp_path / "a", 'maps = "m.nc"\ndelta_T_convention = "peak-to-peak"'))
    amp = load_config(_maps_run(tmp_path / "b", 'maps = "m.nc"\ndelta_T_convention = "amplitude"'))
    a = compute_run(pp, pp.runs[0]).dataset
    b = compute_run(amp, amp.runs[0]).dataset
    np.testing.assert_allclose(b["ratio_measured"].values, a["ratio_measured"].values, rtol=1e-6, equal_nan=True)
    np.testing.assert_array_equal(b["source_layer"].values, a["source_layer"].values)


def test_maps_with_other_variable_names(tmp_path):
    # not a physics check: renamed variables are mapped or named
    _maps_file(tmp_path / "m.nc", names={"delta_T": "dT", "T0": "T_mean"})
    bare = _maps_run(tmp_path, 'maps = "m.nc"\ndelta_T_convention = "peak-to-peak"')
    with pytest.raises(InputError, match=r"m\.nc: has no variable 'T0' for T0; .*map the names with "
                                         r"thermal\.variables"):
        maps_side(load_config(bare).runs[0])
    cfg = _maps_run(tmp_path, 'maps = "m.nc"\ndelta_T_convention = "peak-to-peak"\n'
                              'variables = { delta_T = "dT", T0 = "T_mean" }')
    out, valid, _, _ = maps_side(load_config(cfg).runs[0])
    assert valid.all() and np.allclose(out["delta_T"], -0.05) and np.allclose(out["T0"], T0)


def test_maps_in_millikelvin_are_refused(tmp_path, capsys):
    # the definition of the millikelvin ([BIPM2019])
    _maps_file(tmp_path / "m.nc", dT=-50.0)                   # -0.05 K written as -50 (mK), no units
    cfg = _maps_run(tmp_path, 'maps = "m.nc"\ndelta_T_convention = "peak-to-peak"')
    with pytest.raises(InputError, match="values like 50 look like millikelvin"):
        maps_side(load_config(cfg).runs[0])
    assert main(["check", str(cfg)]) == 1
    assert "look like millikelvin" in capsys.readouterr().err
    _maps_file(tmp_path / "m.nc", dT=-50.0, units="mK")       # declared: read right
    out, _, _, _ = maps_side(load_config(cfg).runs[0])
    assert np.allclose(out["delta_T"], -0.05)


def test_quadrature_from_magnitude_and_phase_near_ninety_degrees(tmp_path, rng):
    # Euler's formula: in-phase |C| cos(phi), quadrature |C| sin(phi) (common practice)
    # a response a quarter cycle behind the load: |C| = 0.05 K at 89.5 degrees, the in-phase
    # part carrying 1 mK of noise (2 % of |C|)
    phi = np.full((ROWS, COLS), 89.5)
    mag = np.full((ROWS, COLS), 0.05)
    dT_noisy = mag * np.cos(np.radians(phi)) + 0.001 * rng.standard_normal((ROWS, COLS))
    # the old way, delta_T * tan(phase): off by more than |C| itself on most pixels
    assert np.median(np.abs(dT_noisy * np.tan(np.radians(phi)) - mag * np.sin(np.radians(phi)))) > 0.05
    _maps_file(tmp_path / "m.nc", dT=None, magnitude=mag, phase=phi)
    cfg = _maps_run(tmp_path, 'maps = "m.nc"\ndelta_T_convention = "peak-to-peak"')
    out, _, info, _ = maps_side(load_config(cfg).runs[0])
    # Euler: C = |C| exp(i phi) -> in phase |C| cos phi, quadrature |C| sin phi
    np.testing.assert_allclose(out["delta_T_quadrature"], 0.05 * math.sin(math.radians(89.5)), rtol=1e-6)
    np.testing.assert_allclose(out["delta_T"], 0.05 * math.cos(math.radians(89.5)), rtol=1e-5)
    # delta_T and phase only: no quadrature where the phase is near +-90, and a warning
    phi2 = np.where(np.arange(COLS)[None, :] < 24, 179.0, 89.5) * np.ones((ROWS, 1))
    _maps_file(tmp_path / "m.nc", dT=-0.05, phase=phi2)
    out, _, info, _ = maps_side(load_config(cfg).runs[0])
    q = out["delta_T_quadrature"]
    assert np.isnan(q[:, 24:]).all()
    np.testing.assert_allclose(q[:, :24], -0.05 * math.tan(math.radians(179.0)), rtol=1e-5)
    assert any(f"{ROWS * 24} pixels whose phase lies within 30 degrees of +-90" in w for w in info["warnings"])
