"""The rectangle of the speckle images to correlate: ``dic.region`` = [x0, y0, x1, y1] (columns
first, as every image position in fusion), and its deprecated (row, col) spelling ``dic.roi``,
which works for one release with a warning saying how to rewrite it.

Runs are built by the forward model of tests/_registration_cases.py (speckle images of a known
displacement field, a known map from specimen mm to infrared pixels).
"""

import json

import numpy as np
import pytest

from fusion.campaign import check_campaign
from fusion.campaign._watch import _Watcher
from fusion.cli import main
from fusion.config import load_config
from fusion.errors import ConfigError, InputError
from fusion.run import compute_run

import _registration_cases as rc

# columns 60..199, rows 40..169 of the 200 x 260 px visible images
REGION = [60, 40, 200, 170]
ROI = [40, 60, 170, 200]          # the same rectangle as [row0, col0, row1, col1]
REWRITE = ("run 'R'.dic.roi is deprecated and read as region = [60, 40, 200, 170] for this release only: "
           "replace roi = [40, 60, 170, 200] by region = [60, 40, 200, 170] ([x0, y0, x1, y1]: columns "
           "first, in visible-image px)")


def _config(tmp_path, **dic):
    images = rc.images(tmp_path)
    mat = load_config(rc.ROOT / "configs" / "demo.toml").materials["carbon_epoxy"]
    case = rc.Case(tmp_path, rc.IR_SHAPE, rc.ir_positions(), rc.control("images", "homography"),
                   {**images, **dic})
    return case.write(mat, 45.0)


def test_region_and_its_deprecated_spelling_read_the_same_rectangle(tmp_path):
    new = load_config(_config(tmp_path, region=REGION))
    old = load_config(_config(tmp_path, roi=ROI))
    assert new.runs[0].dic.correlation_region == old.runs[0].dic.correlation_region == tuple(REGION)
    assert new.deprecations == [] and new.runs[0].deprecations() == []
    assert old.deprecations == [REWRITE] and old.runs[0].deprecations() == [REWRITE]


@pytest.mark.parametrize("dic, match", [
    ({"region": REGION, "roi": ROI}, r"run 'R'\.dic\.roi: is the deprecated \(row, col\) spelling of "
                                     r"'region', and both are given: keep 'region' only"),
    ({"region": [60, 40, 60, 170]}, r"run 'R'\.dic\.region: expected x1 > x0 and y1 > y0, got \[60, 40, 60, 170\]"),
    ({"roi": [40, 60, 40, 200]}, r"run 'R'\.dic\.roi: expected row1 > row0 and col1 > col0, got \[40, 60, 40, 200\]"),
    ({"region": [60, 40, -1, 170]}, r"run 'R'\.dic\.region\[2\]: expected a whole number from 0"),
])
def test_region_mistakes_are_refused_naming_the_key(tmp_path, dic, match):
    with pytest.raises(ConfigError, match=match):
        load_config(_config(tmp_path, **dic))


def test_region_applies_to_speckle_images_only(tmp_path):
    path = _config(tmp_path)
    text = path.read_text().replace('images = ["ref.png", "def.png"]', 'strain_ranges = "strain.csv"')
    text = text.replace('loads = ["1 kN", "2 kN"]\n', "")
    for spelling in ("region = [60, 40, 200, 170]", "roi = [40, 60, 170, 200]"):
        path.write_text(text + spelling + "\n")
        key = spelling.split(" ")[0]
        with pytest.raises(ConfigError, match=rf"run 'R'\.dic\.{key}: applies to speckle images \(dic\.images\) "
                                              "only: the correlation data given are not cropped by it"):
            load_config(path)


@pytest.mark.parametrize("key, value", [("region", [60, 40, 261, 170]), ("roi", [40, 60, 201, 200])])
def test_a_region_past_the_image_is_named_by_check_and_run(tmp_path, key, value):
    cfg = _config(tmp_path, **{key: value})
    match = rf"ref\.png: dic\.{key} = \[{', '.join(map(str, value))}\] reaches past this 260 x 200 px image"
    with pytest.raises(InputError, match=match):
        check_campaign(cfg)
    with pytest.raises(InputError, match=match):
        compute_run(load_config(cfg), load_config(cfg).runs[0])


def test_deprecated_roi_gives_the_result_of_region_and_says_how_to_rewrite_it(tmp_path):
    """Not a physics check: two spellings of one key compared. The correlated area keeps to the
    rectangle (every valid infrared pixel's true position, from the test's forward model, falls
    inside it, while pixels outside it see the images too); the deprecated spelling gives the
    identical result, and its sentence reaches the run's warnings and ``fusion check``."""
    results, lines = {}, {}
    for key, value in (("region", REGION), ("roi", ROI)):
        folder = tmp_path / key
        folder.mkdir()
        cfg = load_config(_config(folder, **{key: value}))
        results[key] = compute_run(cfg, cfg.runs[0])
        lines[key] = check_campaign(cfg.path)
    new, old = results["region"], results["roi"]
    for name in ("delta_eps_xx", "delta_gamma_xy", "ratio_surface_ply", "valid"):
        np.testing.assert_array_equal(new.dataset[name].values, old.dataset[name].values)
    deprecated = [w for w in old.warnings if isinstance(w, dict) and w["code"] == "deprecated_key"]
    assert [w["message"] for w in deprecated] == [REWRITE]
    assert not [w for w in new.warnings if isinstance(w, dict) and w["code"] == "deprecated_key"]
    assert f"  warning: {REWRITE}" in lines["roi"] and not any("warning" in s for s in lines["region"])

    valid = new.dataset["valid"].values.astype(bool).ravel()
    col, row = rc.vis_px(*rc.ir_positions())
    inside = (col >= REGION[0]) & (col < REGION[2]) & (row >= REGION[1]) & (row < REGION[3])
    seen = (col >= 0) & (col < rc.VIS_SHAPE[1]) & (row >= 0) & (row < rc.VIS_SHAPE[0])
    assert valid.sum() > 300 and not (valid & ~inside).any()
    assert (seen & ~inside).sum() > 300           # the rectangle leaves out much the images show


def test_the_rewrite_reaches_the_terminal_the_summary_and_watch(tmp_path, capsys):
    """Not a physics check: where the deprecation sentence is shown. ``fusion run`` says it
    once before the runs, summary.json keeps it with the run's warnings, ``fusion watch`` says
    it when it reads the config."""
    cfg = _config(tmp_path, roi=ROI)
    assert main(["-q", "run", str(cfg)]) == 0
    assert capsys.readouterr().err.count(REWRITE) == 1
    summary = json.loads((tmp_path / "results" / "R" / "summary.json").read_text())
    assert {"code": "deprecated_key", "message": REWRITE} in summary["warnings"]
    lines = []
    _Watcher(cfg, tmp_path / "results", settle=1.0, overwrite=False, emit=lines.append).reload()
    assert [s[9:] for s in lines] == [f"warning: {REWRITE}"]       # after the HH:MM:SS stamp


def test_an_even_subset_and_a_pixel_size_in_metres_are_refused_by_check(tmp_path):
    # not a physics check: both were refused only once the run had read the images (subset) or
    # not by `fusion check` at all (pixel size): now the config names the key
    with pytest.raises(ConfigError, match=r"run 'R'\.dic\.subset: expected an odd size in pixels .* got 30: "
                                          r"29 or 31"):
        load_config(_config(tmp_path, subset=30))
    with pytest.raises(ConfigError, match=r"run 'R'\.dic\.pixel_size: 100 mm per pixel is outside the plausible "
                                          r".* mm of a visible-camera pixel on the specimen: 0\.1 mm meant\?"):
        load_config(_config(tmp_path, pixel_size="0.1 m"))


def test_a_mask_that_leaves_out_most_of_the_specimen_is_named_beside_the_registration(tmp_path):
    # not a physics check: a mask nearly all zero (inverted, say) leaves few correlation points,
    # all where they should be: the message names the mask beside a registration that would
    # shrink the field (before, only the registration)
    import cv2

    mask = np.zeros(rc.VIS_SHAPE, np.uint8)
    mask[60:100, 100:140] = 255
    cv2.imwrite(str(tmp_path / "mask.png"), mask)
    cfg = load_config(_config(tmp_path, mask="mask.png"))
    with pytest.raises(ConfigError, match=r"registration\.dic_points / ir_points: the correlation data land on "
                                          r"\d+ % .* below 5 %: registration .* is the likely cause if it shrinks "
                                          r"the field .* check dic\.mask, dic\.region and the correlation's failures"):
        compute_run(cfg, cfg.runs[0])
