"""Registration refinement from the signal: ECC alignment of measured and predicted maps."""

from __future__ import annotations

import logging

import cv2
import numpy as np
import scipy.ndimage as ndi

__all__ = ["refine_with_signal"]

logger = logging.getLogger(__name__)

_MOTIONS = {
    "translation": cv2.MOTION_TRANSLATION,
    "euclidean": cv2.MOTION_EUCLIDEAN,
    "affine": cv2.MOTION_AFFINE,
}


def _prepare(image, mask):
    """Zero-mean, unit-std float32 copy with the masked-out pixels at the mean.

    ECC is invariant to gain and offset, but dT/T0 maps of order 1e-6 would lose precision in
    OpenCV's float32 arithmetic without the rescaling; the fill keeps the Gaussian prefilter from
    dragging NaNs into valid pixels.
    """
    vals = image[mask].astype(np.float64)
    mean, std = vals.mean(), vals.std()
    if not std > 0:
        return None
    out = np.zeros(image.shape, np.float32)
    out[mask] = ((vals - mean) / std).astype(np.float32)
    return out


def refine_with_signal(measured, predicted, *, valid=None, max_correction=2.0,
                       motion="translation", iterations=200, gauss_size=5):
    """Refine the registration by maximising the ECC of the measured and predicted maps.

    Parameters
    ----------
    measured : (Y, X) ndarray
        Measured map on the IR grid (dT or dT/T0); NaN where unknown.
    predicted : (Y, X) ndarray
        Strain-based prediction resampled with the current registration; NaN outside.
    valid : (Y, X) bool ndarray, optional
        Pixels allowed to take part (e.g. away from edges and defects).
    max_correction : float
        Largest accepted displacement of any valid pixel by the correction, IR px.
    motion : {"translation", "euclidean", "affine"}
        Correction model.
    iterations : int
        Iteration limit of the ECC solver.
    gauss_size : int
        Odd size (>= 3) of OpenCV's Gaussian prefilter, px.

    Returns
    -------
    warp : (2, 3) ndarray
        Affine warp W with ``measured(p) ~ a * predicted(W p) + b`` for IR pixel p = (col, row);
        the identity when the correction is refused or the solver fails. The corrected
        registration is ``inv(W) @ T`` (see :meth:`Transform2D.corrected`).
    info : dict
        ``correction_px`` (largest displacement of a valid pixel by the warp found, px, also when
        refused), ``shift_px`` (col, row displacement at the centre of the valid region, px),
        ``ecc`` and ``ecc_initial`` (correlation coefficients after and before), ``converged``,
        ``accepted`` (bool), ``motion`` and ``message``.

    Notes
    -----
    The measured dT and the prediction differ by an unknown gain (which source, which T0) and
    offset, and the enhanced correlation coefficient is invariant to both (Evangelidis & Psarakis
    2008), so no calibration is needed. It assumes the two maps are positively correlated and
    share structure (gradients, a hole, an edge): on a uniform field the correction is
    undetermined, which the solver reports by failing or by a large, refused correction. The
    bound protects against locking onto a wrong feature; a correction near the bound deserves a
    look at the control points.

    References
    ----------
    Evangelidis & Psarakis, IEEE TPAMI 30(10), 1858-1865 (2008).
    """
    m = np.asarray(measured)
    p = np.asarray(predicted)
    if m.ndim != 2 or m.shape != p.shape:
        raise ValueError(f"measured and predicted must be 2-D maps of one shape; got "
                         f"{m.shape!r} and {p.shape!r}")
    if motion not in _MOTIONS:
        raise ValueError(f"motion must be one of {sorted(_MOTIONS)!r}; got {motion!r}")
    if not (np.isfinite(max_correction) and max_correction > 0):
        raise ValueError(f"max_correction must be a positive number of px; got {max_correction!r}")
    if gauss_size < 3 or gauss_size % 2 == 0:
        # without the prefilter OpenCV's solver stalled at the start in our tests
        raise ValueError(f"gauss_size must be an odd integer >= 3; got {gauss_size!r}")
    mask = np.isfinite(m) & np.isfinite(p)
    if valid is not None:
        v = np.asarray(valid, dtype=bool)
        if v.shape != m.shape:
            raise ValueError(f"valid must have shape {m.shape!r}; got {v.shape!r}")
        mask &= v
    identity = np.eye(2, 3)
    info = {"correction_px": 0.0, "shift_px": (0.0, 0.0), "ecc": float("nan"),
            "ecc_initial": float("nan"), "converged": False, "accepted": False, "motion": motion,
            "message": ""}
    # pixels whose prefiltered value would mix in the fill stay out of the criterion
    core = ndi.binary_erosion(mask, iterations=gauss_size // 2 + 1)
    if core.sum() < 100:
        info["message"] = f"too few valid pixels for a correction ({int(core.sum())}); identity kept"
        return identity, info
    mi, pi = _prepare(m, mask), _prepare(p, mask)
    if mi is None or pi is None:
        info["message"] = "a map is constant over the valid pixels; identity kept"
        return identity, info
    mask_u8 = core.astype(np.uint8)
    info["ecc_initial"] = float(cv2.computeECC(mi, pi, mask_u8))
    warp0 = np.eye(2, 3, dtype=np.float32)
    criteria = (cv2.TERM_CRITERIA_COUNT | cv2.TERM_CRITERIA_EPS, int(iterations), -1.0)
    try:
        if hasattr(cv2, "findTransformECCWithMask"):
            ecc, warp = cv2.findTransformECCWithMask(mi, pi, mask_u8, mask_u8, warp0, _MOTIONS[motion],
                                                     criteria, gauss_size)
        else:  # OpenCV < 4.12: the input mask alone, warped by the solver
            ecc, warp = cv2.findTransformECC(mi, pi, warp0, _MOTIONS[motion], criteria, mask_u8,
                                             gauss_size)
    except cv2.error as e:
        info["message"] = f"ECC solver did not converge ({str(e).strip().splitlines()[-1]}); identity kept"
        logger.warning("%s", info["message"])
        return identity, info
    warp = warp.astype(np.float64)
    rows, cols = np.nonzero(mask)
    corners = np.array([[cols.min(), rows.min()], [cols.max(), rows.min()],
                        [cols.min(), rows.max()], [cols.max(), rows.max()]], dtype=np.float64)
    # an affine displacement field peaks at a vertex of the region's bounding box
    disp = corners @ warp[:, :2].T + warp[:, 2] - corners
    centre = np.array([cols.mean(), rows.mean()])
    info.update(correction_px=float(np.linalg.norm(disp, axis=1).max()),
                shift_px=tuple(float(v) for v in centre @ warp[:, :2].T + warp[:, 2] - centre),
                ecc=float(ecc), converged=bool(np.isfinite(ecc) and ecc >= info["ecc_initial"]))
    if not info["converged"]:
        info["message"] = "ECC did not improve on the starting alignment; identity kept"
        return identity, info
    if info["correction_px"] > max_correction:
        info["message"] = (f"correction of {info['correction_px']:.3g} px exceeds max_correction="
                           f"{max_correction!r} px; refused, identity kept")
        logger.warning("%s", info["message"])
        return identity, info
    info["accepted"] = True
    info["message"] = f"correction of {info['correction_px']:.3g} px accepted (ECC {ecc:.4f})"
    return warp, info
