"""Each strain map states its spatial resolution and noise floor: result.nc, summary.json, report."""

import numpy as np
import pytest

import fusion.report as report
from fusion.datamodel import result_dataset
from fusion.dic import DicField, gain_wavelength, ranges_from_states, strain_transfer
from fusion.io import read_netcdf, write_netcdf
from fusion.register import edge_distance_map


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    rng = np.random.default_rng(3)
    g = np.arange(30.0)
    yy, xx = np.meshgrid(-g, g, indexing="ij")
    x, y = xx.ravel() * 5, yy.ravel() * 5                 # px, step 5
    attrs = {"subset": 21, "step": 5, "pixel_size": 0.05}
    zero = DicField(x, y, 0 * x, 0 * y, grid_shape=xx.shape, units="px", attrs=attrs)
    u = 1e-3 * x + rng.normal(0, 0.01, x.size)
    v = -3e-4 * y + rng.normal(0, 0.01, x.size)
    r = ranges_from_states(zero, DicField(x, y, u, v, grid_shape=xx.shape, units="px", attrs=attrs,
                                          u_std=np.full(x.size, 0.01), v_std=np.full(x.size, 0.01)),
                           window=5)
    ny, nx = 16, 20
    valid = np.ones((ny, nx), bool)
    valid[5:9, 6:10] = False
    base = np.where(valid, -5e-6, np.nan)
    maps = {"ratio_measured": base, "ratio_surface_ply": base, "source_layer": np.where(valid, 2, -1),
            "valid": valid.astype(np.int8), "strain_edge_distance": edge_distance_map(valid),
            "delta_eps_xx": base, "delta_eps_yy": base, "delta_gamma_xy": base,
            "delta_eps_xx_std": base, "delta_eps_yy_std": base, "delta_gamma_xy_std": base}
    ds = result_dataset(maps, attrs={"run_name": "R1", "frequency": 10.0, "registration_rms": 0.1})
    for k, name in enumerate(("delta_eps_xx", "delta_eps_yy", "delta_gamma_xy")):
        ds[name].attrs.update(r.map_attrs(k))
    path = tmp_path_factory.mktemp("res") / "result.nc"
    write_netcdf(ds, path)
    return r, read_netcdf(path)


def test_result_file_carries_the_metrology_of_each_map(result):
    r, ds = result
    a = ds["delta_eps_xx"].attrs
    # VSG of the iDICs Good Practices Guide: (window - 1) x step + subset = 4 x 5 + 21
    assert a["vsg_px"] == 41 and a["vsg_mm"] == pytest.approx(41 * 0.05)
    assert a["wavelength_gain50_px"] == pytest.approx(gain_wavelength(0.5, subset=21, step=5, window=5))
    assert a["wavelength_gain90_px"] == pytest.approx(gain_wavelength(0.9, subset=21, step=5, window=5))
    np.testing.assert_allclose(a["transfer_gain"],
                               strain_transfer(np.asarray(a["transfer_wavelength_px"]), subset=21, step=5,
                                               window=5))
    assert a["noise_floor"] == pytest.approx(np.nanmedian(r.exx_std))
    assert ds["delta_gamma_xy"].attrs["noise_floor"] == pytest.approx(np.nanmedian(r.gxy_std))
    assert "overlap" in a["noise_model"] and "quadratic" in a["edge_fit"]


def test_summary_and_report_state_it(result, tmp_path):
    r, ds = result
    s = report.summarize_run(ds)
    report.validate_summary(s)
    res = s["strain_resolution"]
    assert res["vsg_px"] == 41 and res["step_px"] == 5 and len(res["transfer"]) == 5
    assert res["noise_floor"]["eps_xx"] == pytest.approx(np.nanmedian(r.exx_std))
    # nearest valid pixel to the masked block: half a pixel from its edge (distance transform)
    assert res["nearest_edge_px"] == pytest.approx(0.5)
    html = report.render_report(campaign={"name": "c"}, runs=[{"summary": s}])
    assert "Virtual strain gauge" in html and "41 px (2.05 mm)" in html
    assert "Noise floor (microstrain)" in html
    # an imported table of unknown settings: lengths of zero are reported as unknown
    table = ds.copy(deep=True)
    table["delta_eps_xx"].attrs.update(vsg_px=0.0, vsg_mm=0.0, strain_window=1.0)
    for key in ("transfer_wavelength_px", "transfer_wavelength_mm", "transfer_gain"):
        table["delta_eps_xx"].attrs.pop(key, None)
    s_table = report.summarize_run(table)
    report.validate_summary(s_table)
    assert s_table["strain_resolution"]["vsg_mm"] is None
    assert "not known" in report.render_report(campaign={"name": "c"}, runs=[{"summary": s_table}])
    # a result without correlation settings says so instead of inventing a resolution
    bare = report.summarize_run(ds.drop_vars(["delta_eps_xx"]))
    assert bare["strain_resolution"] is None
    assert "No spatial resolution is known" in report.render_report(campaign={"name": "c"},
                                                                    runs=[{"summary": bare}])
