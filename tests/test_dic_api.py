"""The public names of fusion.dic, their signatures, and the correlation benchmark."""

import inspect

import numpy as np

import fusion.dic
import fusion.io
from fusion.bench._dic import bench_dic

PUBLIC = {
    "CorrelationResult", "DicField", "REASON_CODES", "StrainRanges", "correlate",
    "fourier_shift", "ranges_from_displacement", "ranges_from_series", "ranges_from_states",
    "ranges_from_strain_table",
    "ranges_from_time_series", "speckle_image", "strain_from_field", "vsg_size",
    "DEFAULT_STEP", "DEFAULT_SUBSET", "DEFAULT_WINDOW", "default_setting", "displacement_noise",
    "gain_wavelength", "recommend_setting", "setting_table", "strain_noise_factor",
    "strain_transfer",
}
CONSTANTS = {"REASON_CODES", "DEFAULT_STEP", "DEFAULT_SUBSET", "DEFAULT_WINDOW"}


def test_public_names_are_pinned():
    # not a physics check: SciPy-style public-API guard, nothing leaks, nothing disappears.
    assert set(fusion.dic.__all__) == PUBLIC
    for name in PUBLIC - CONSTANTS:
        assert getattr(fusion.dic, name).__module__.startswith("fusion.dic._"), name
    assert {"read_dic_field", "read_image"} <= set(fusion.io.__all__)


def test_options_are_keyword_only():
    # not a physics check: signatures
    checks = {
        fusion.dic.correlate: 2, fusion.dic.strain_from_field: 1, fusion.dic.speckle_image: 1,
        fusion.dic.ranges_from_states: 2, fusion.dic.ranges_from_series: 2,
        fusion.dic.ranges_from_time_series: 3, fusion.io.read_dic_field: 1,
        fusion.io.read_image: 1,
    }
    for fn, n_positional in checks.items():
        params = list(inspect.signature(fn).parameters.values())
        kinds = [p.kind for p in params]
        assert kinds[:n_positional] == [inspect.Parameter.POSITIONAL_OR_KEYWORD] * n_positional, fn
        assert all(k == inspect.Parameter.KEYWORD_ONLY for k in kinds[n_positional:]), fn
    assert inspect.signature(fusion.dic.correlate).parameters["propagation"].default == "reliability"


def test_reason_codes_are_documented_int8():
    # not a physics check: reason codes are documented and fit int8
    codes = fusion.dic.REASON_CODES
    assert codes[0].startswith("converged") and all(isinstance(v, str) and v for v in codes.values())
    assert all(-128 <= k <= 127 for k in codes)


def test_quick_benchmark_reports_the_contract_keys():
    # The flat JSON keys dic_subsets_per_s, dic_points_per_s, dic_flow_seconds (DEVELOPERS.md,
    # Benchmarks). Speed is not asserted (benchmarks only); accuracy is: the noise-free
    # exact-shift pair (Reu et al. 2018, [Reu2018]) must meet |bias| <= 0.001 px, std <= 0.003 px.
    out = bench_dic(quick=True, repeats=1)
    for key in ("dic_subsets_per_s", "dic_points_per_s", "dic_flow_seconds", "dic_bias_px",
                "dic_std_px"):
        assert np.isfinite(out[key]) and out[key] >= 0
    assert out["dic_bias_px"] <= 0.001 and out["dic_std_px"] <= 0.003
    # Pan et al. (2008) noise prediction, our target within 1.3x
    assert 1 / 1.3 <= out["dic_noise_std_ratio"] <= 1.3
    assert out["dic_image_size"] == 256
