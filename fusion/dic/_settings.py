"""Choosing subset, step and strain window for a feature: resolution and noise floor per choice.

A feature of radius ``a`` (a hole, a notch root) is taken to need the wavelength ``2 a``:
around a hole in tension the strain falls from its peak at the edge to near the remote
value within about one radius, half a period of a sinusoid of wavelength ``2 a``. A choice
resolves the feature when the modelled gain (:func:`strain_transfer`) at that wavelength is
at least 0.9. Its noise floor is the strain standard deviation of a complete window for the
image noise given (:func:`displacement_noise` and :func:`strain_noise_factor`).
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from ._icgn import prefilter, reference_gradients
from ._resolution import gain_wavelength, strain_noise_factor, strain_transfer
from ._speckle import speckle_image

__all__ = ["displacement_noise", "setting_table", "recommend_setting", "default_setting",
           "feature_wavelength", "SUBSETS", "STEPS", "WINDOWS", "TYPICAL"]

#: Choices tried by :func:`setting_table`.
SUBSETS = (15, 17, 21, 25, 31)
STEPS = (3, 4, 5, 7, 10)
WINDOWS = (3, 5, 7, 9)

#: The typical case the defaults are chosen for: an 8-bit camera, a well-lit pattern of
#: 4 px speckles whose grey levels have a standard deviation of 50, noise of 1 grey level,
#: a strain range of 2000 microstrain to be measured to 10 %, holes of 40 to 80 px radius.
TYPICAL = {"contrast": 50.0, "noise": 1.0, "speckle_size": 4.0, "strain": 2e-3, "target": 0.1,
           "radii": (40.0, 80.0)}

_GAIN = 0.9


def feature_wavelength(radius):
    """The wavelength (px) a feature of ``radius`` px needs resolved: ``2 radius``."""
    if isinstance(radius, bool) or not isinstance(radius, Real) or not (math.isfinite(radius)
                                                                        and radius > 0):
        raise ValueError(f"radius: expected a positive feature radius in px, got {radius!r}")
    return 2.0 * float(radius)


def _pattern(image, contrast, speckle_size):
    if image is not None:
        img = np.asarray(image, dtype=np.float64)
        if img.ndim != 2 or min(img.shape) < 32:
            raise ValueError(f"image: expected a 2-D grey image of at least 32 x 32 px, got "
                             f"shape {img.shape!r}")
        return img
    if isinstance(contrast, bool) or not isinstance(contrast, Real) or not contrast > 0:
        raise ValueError(f"contrast: expected the pattern's grey-level std (> 0), got {contrast!r}")
    img = speckle_image((256, 256), speckle_size=speckle_size, seed=1, bits=None)
    return (img - img.mean()) / img.std() * float(contrast)


def displacement_noise(*, subset, noise, image=None, contrast=TYPICAL["contrast"],
                       speckle_size=TYPICAL["speckle_size"], samples=150):
    """Standard deviation of a subset's translation (px) for grey-level noise ``noise``.

    Parameters
    ----------
    subset : int
        Subset side, px.
    noise : float
        Grey-level noise standard deviation of each image, in the image's grey levels.
    image : (H, W) array_like, optional
        A reference speckle image; without it a rendered pattern of ``speckle_size``
        whose grey levels have the standard deviation ``contrast``.
    samples : int
        Subsets drawn (spread over the image) for the root-mean-square.

    Returns
    -------
    float
        ``sqrt(2 noise^2 (H^-1)_uu)``, root-mean-square over the subsets: the least-squares
        covariance of the six shape parameters (Pan et al. 2008 for translation alone:
        ``sqrt(2) sigma / sqrt(SSSIG)``), the model :func:`fusion.dic.correlate` reports.
    """
    if isinstance(noise, bool) or not isinstance(noise, Real) or not (math.isfinite(noise)
                                                                      and noise >= 0):
        raise ValueError(f"noise: expected a grey-level standard deviation >= 0, got {noise!r}")
    img = _pattern(image, contrast, speckle_size)
    gx, gy = reference_gradients(prefilter(img))
    half = int(subset) // 2
    h, w = img.shape
    if h < 2 * half + 8 or w < 2 * half + 8:
        raise ValueError(f"image: {img.shape!r} is too small for subset {subset}")
    rng = np.random.default_rng(0)
    rows = rng.integers(half + 2, h - half - 2, samples)
    cols = rng.integers(half + 2, w - half - 2, samples)
    k = np.arange(-half, half + 1, dtype=np.float64)
    eta, xi = (a.ravel() for a in np.meshgrid(k, k, indexing="ij"))
    acc = []
    for r, c in zip(rows, cols):
        fx = gx[r - half:r + half + 1, c - half:c + half + 1].ravel()
        fy = gy[r - half:r + half + 1, c - half:c + half + 1].ravel()
        jac = np.column_stack([fx, fx * xi, fx * eta, fy, fy * xi, fy * eta])
        hess = jac.T @ jac
        try:
            acc.append(np.linalg.inv(hess)[0, 0])
        except np.linalg.LinAlgError:
            continue
    if not acc:
        raise ValueError("image: no subset with usable contrast")
    return float(math.sqrt(2.0 * noise ** 2 * np.mean(acc)))


def setting_table(radius, noise, *, image=None, contrast=TYPICAL["contrast"],
                  speckle_size=TYPICAL["speckle_size"], subsets=SUBSETS, steps=STEPS,
                  windows=WINDOWS):
    """Spatial resolution and noise floor of every (subset, step, window) choice.

    Parameters
    ----------
    radius : float
        Feature radius, px (e.g. a hole's).
    noise : float
        Grey-level noise std of each image (grey levels).
    image, contrast, speckle_size
        As in :func:`displacement_noise`.

    Returns
    -------
    list of dict
        One row per choice with a step below its subset: ``subset``, ``step``,
        ``window`` (points), ``vsg_px``, ``wavelength_gain50_px``,
        ``wavelength_gain90_px``, ``gain`` (at the feature's wavelength) and
        ``noise_floor`` (strain std of a complete window, 1).
    """
    lam = feature_wavelength(radius)
    rows = []
    for subset in subsets:
        sigma_u = displacement_noise(subset=subset, noise=noise, image=image, contrast=contrast,
                                     speckle_size=speckle_size)
        for step in steps:
            if step > subset:
                continue
            for window in windows:
                rows.append({
                    "subset": int(subset), "step": int(step), "window": int(window),
                    "vsg_px": float((window - 1) * step + subset),
                    "wavelength_gain50_px": gain_wavelength(0.5, subset=subset, step=step,
                                                            window=window),
                    "wavelength_gain90_px": gain_wavelength(0.9, subset=subset, step=step,
                                                            window=window),
                    "gain": float(strain_transfer(lam, subset=subset, step=step, window=window)),
                    "noise_floor": sigma_u * strain_noise_factor(subset=subset, step=step,
                                                                 window=window) / step,
                })
    return rows


def recommend_setting(rows, *, strain=TYPICAL["strain"], target=TYPICAL["target"]):
    """The choice for a feature, from the rows of :func:`setting_table`.

    Only windows of 5 points or more are chosen (a window cut by an edge then still fits
    the quadratic terms, see :func:`fusion.dic.strain_from_field`). Among the choices whose
    noise floor is within ``target * strain`` and whose gain at the feature's wavelength is
    at least 0.9: the lowest noise floor. Where none reaches 0.9 within the noise target:
    the highest gain within it. Where no choice is within the noise target: the lowest
    noise floor.

    Returns
    -------
    (dict, str)
        The row and one sentence saying why it was chosen.
    """
    limit = float(target) * float(strain)
    rows = [r for r in rows if r["window"] >= 5] or rows
    quiet = [r for r in rows if r["noise_floor"] <= limit]
    sharp = [r for r in quiet if r["gain"] >= _GAIN]
    goal = f"{target:.0%} of {strain * 1e6:.0f} microstrain"
    if sharp:
        best = min(sharp, key=lambda r: r["noise_floor"])
        return best, (f"resolves the feature (gain {best['gain']:.2f} >= {_GAIN}) with the lowest "
                      f"noise floor, within {goal}")
    if quiet:
        best = max(quiet, key=lambda r: (round(r["gain"], 3), -r["noise_floor"]))
        return best, (f"no choice reaches gain {_GAIN} with a noise floor within {goal}: the "
                      f"highest gain ({best['gain']:.2f}) that does")
    best = min(rows, key=lambda r: r["noise_floor"])
    return best, (f"no choice has a noise floor within {goal}: the lowest noise floor; lower the "
                  "image noise or measure a larger strain range")


def default_setting():
    """The defaults of the config and of :func:`fusion.dic.correlate`, by their rule.

    For the :data:`TYPICAL` case: the smallest hole radius from 40 to 80 px (10 px apart)
    that some choice resolves (gain >= 0.9 at its wavelength) within the noise target,
    and the choice :func:`recommend_setting` makes for it.

    Returns
    -------
    dict
        ``subset``, ``step``, ``window``, ``radius`` and the row's figures.
    """
    lo, hi = TYPICAL["radii"]
    row = None
    for radius in np.arange(lo, hi + 1e-9, 10.0):
        rows = setting_table(float(radius), TYPICAL["noise"], contrast=TYPICAL["contrast"],
                             speckle_size=TYPICAL["speckle_size"])
        row, _ = recommend_setting(rows)
        if row["gain"] >= _GAIN and row["noise_floor"] <= TYPICAL["target"] * TYPICAL["strain"]:
            return dict(row, radius=float(radius))
    return dict(row, radius=float(hi))
