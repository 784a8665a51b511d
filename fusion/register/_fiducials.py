"""Circular fiducial markers: detection with sub-pixel centres, matching by geometry."""

from __future__ import annotations

import itertools

import numpy as np
import scipy.ndimage as ndi
from scipy.spatial import cKDTree
from skimage.feature import peak_local_max

from ._transform import _as_points, fit_transform, min_points

__all__ = ["find_fiducials", "match_fiducials"]

_MAD = 1.4826  # MAD to standard deviation for Gaussian data
# centroid membership ramp, in fractions of a marker's contrast (tuned on synthetic IR maps
# and speckled visible images, see tests/test_fiducials.py)
_MARGIN, _LO_MIN, _LO_MAX, _HI_MAX = 0.15, 0.3, 0.7, 0.95


def _scales(min_radius, max_radius):
    # a disk of radius r gives the strongest normalised LoG response at sigma = r / sqrt(2)
    # (Lindeberg 1998); about six levels per octave resolve the radius to ~12 %
    s0, s1 = min_radius / np.sqrt(2), max_radius / np.sqrt(2)
    n = max(2, int(np.ceil(np.log2(s1 / s0) * 6)) + 1)
    return np.geomspace(s0, s1, n)


def _candidates(img, sign, scales, threshold):
    """Scale-space maxima of the normalised LoG, thresholded as z-scores of the clutter.

    The scale is selected on the normalised response itself (Lindeberg 1998), which peaks at
    sigma = r / sqrt(2) for a disk; the z-score (response over the robust spread of that
    scale's response over the image) only decides significance, since dividing first would
    favour large scales where texture averages out.
    """
    stack = np.empty((len(scales),) + img.shape, np.float32)
    spread = np.empty(len(scales))
    for k, s in enumerate(scales):
        r = -sign * s * s * ndi.gaussian_laplace(img, s)
        med = np.median(r)
        spread[k] = _MAD * np.median(np.abs(r - med))
        stack[k] = r - med
    if not np.all(spread > 0):
        return np.zeros((0, 4))
    peaks = peak_local_max(stack, threshold_abs=float(threshold * spread.min()),
                           exclude_border=False, footprint=np.ones((3, 3, 3), bool))
    if len(peaks) == 0:
        return np.zeros((0, 4))
    z = stack[peaks[:, 0], peaks[:, 1], peaks[:, 2]] / spread[peaks[:, 0]]
    keep = z >= threshold
    peaks, z = peaks[keep], z[keep]
    order = np.argsort(-z)
    p = peaks[order]
    return np.column_stack([p[:, 2], p[:, 1], scales[p[:, 0]] * np.sqrt(2), z[order]])


def _refine_centre(img, sign, col, row, radius, iterations=8):
    """Intensity-weighted centroid of the blob over a circular window, re-centred until stable.

    The background is a plane fitted on a surrounding annulus, so a temperature gradient
    across a marker does not pull the centroid; a symmetric window is unbiased for a
    symmetric blob once centred on it. Returns NaN when the window leaves the image or the
    centre wanders off the blob.
    """
    ny, nx = img.shape
    win = 1.5 * radius + 2.0
    outer = 2.2 * radius + 3.0
    c, r = float(col), float(row)
    h = int(np.ceil(outer)) + 1
    for _ in range(iterations):
        r0, c0 = int(round(r)), int(round(c))
        if r0 - h < 0 or c0 - h < 0 or r0 + h >= ny or c0 + h >= nx:
            return np.nan, np.nan
        patch = img[r0 - h:r0 + h + 1, c0 - h:c0 + h + 1]
        yy, xx = np.mgrid[r0 - h:r0 + h + 1, c0 - h:c0 + h + 1]
        d = np.hypot(xx - c, yy - r)
        ring = (d > win) & (d <= outer)
        a = np.column_stack([xx[ring], yy[ring], np.ones(ring.sum())])
        coef, *_ = np.linalg.lstsq(a, patch[ring], rcond=None)
        resid = sign * (patch - coef[0] * xx - coef[1] * yy - coef[2])
        level = float(np.median(resid[d <= 0.5 * radius]))
        if not level > 0:
            return np.nan, np.nan
        # membership ramp from lo x the marker's contrast up to hi: the surrounding texture
        # (its 99th percentile on the annulus, plus a margin) gets no weight, the marker's
        # plateau full weight despite noise and shading; a low ramp where the surround is
        # smooth keeps more edge pixels and so less noise. Any radial weight leaves a symmetric
        # blob's centroid unbiased; the soft window edge keeps it continuous in the centre.
        texture = float(np.percentile(resid[ring], 99)) / level
        lo = min(max(texture + _MARGIN, _LO_MIN), _LO_MAX)
        hi = _HI_MAX
        member = np.clip((resid - lo * level) / ((hi - lo) * level), 0.0, 1.0)
        w = np.clip(win + 0.5 - d, 0.0, 1.0) * member
        total = w.sum()
        if not total > 0:
            return np.nan, np.nan
        cn, rn = float((w * xx).sum() / total), float((w * yy).sum() / total)
        moved = np.hypot(cn - c, rn - r)
        c, r = cn, rn
        if np.hypot(c - col, r - row) > radius:
            return np.nan, np.nan
        if moved < 1e-4:
            break
    return c, r


def _detect(img, sign, scales, threshold, rel_threshold):
    cand = _candidates(img, sign, scales, threshold)
    if len(cand) == 0:
        return np.zeros((0, 4))
    cand = cand[cand[:, 3] >= rel_threshold * cand[0, 3]]
    found = []
    for col, row, radius, z in cand:
        c, r = _refine_centre(img, sign, col, row, radius)
        if not np.isfinite(c):
            continue
        # a weaker response inside an accepted marker is its ring or a second scale
        if any(np.hypot(c - f[0], r - f[1]) < max(radius, f[2]) for f in found):
            continue
        found.append((c, r, radius, z))
    return np.array(found).reshape(-1, 4)


def find_fiducials(image, *, count=None, polarity="auto", min_radius=2.0, max_radius=30.0,
                   threshold=5.0, rel_threshold=0.25, details=False):
    """Find circular fiducial markers and their sub-pixel centres.

    Parameters
    ----------
    image : (Y, X) array_like
        IR T0 map or visible reference image; NaN pixels are set to the median.
    count : int, optional
        Number of markers expected. Fewer found raise ``ValueError``; of more, the strongest
        ``count`` are returned.
    polarity : {"auto", "bright", "dark"}
        Markers brighter or darker than their surroundings; ``"auto"`` keeps the polarity with
        the stronger detections.
    min_radius, max_radius : float
        Radius range of the markers, px. Set ``min_radius`` above the speckle size in a
        correlation image so that speckles are not taken for markers.
    threshold : float
        Minimum blob response in units of the robust spread of the response over the image.
    rel_threshold : float
        Minimum response relative to the strongest marker (markers of one set look alike).
    details : bool
        Also return the radius (px) and the response of each marker.

    Returns
    -------
    centres : (K, 2) ndarray
        (col, row) px, pixel centres at integers, strongest first.
    radii, strength : (K,) ndarray
        Only with ``details=True``.

    Notes
    -----
    Candidates are maxima in position and scale of the scale-normalised Laplacian of Gaussian
    (Lindeberg 1998), each scale measured against its own clutter level, so noise and speckle
    texture set the threshold. Each centre is then refined by an iterated intensity centroid
    over a circular window above a plane background fitted on an annulus. Pixels count by a
    ramp that starts just above the texture of the surroundings (at 30 % to 70 % of the
    marker's contrast), so markers must stand out from the surface texture (speckle) by more
    than it varies; markers cut by the image border are dropped. A marker seen obliquely is an ellipse; its centroid is then the
    centre of the projected disk, offset from the projected centre by a fraction of a pixel
    for strong perspective (common practice: keep markers small).

    References
    ----------
    Lindeberg, Int. J. Comput. Vis. 30(2), 79-116 (1998).
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2:
        raise ValueError(f"image must be 2-D; got shape {img.shape!r}")
    if polarity not in ("auto", "bright", "dark"):
        raise ValueError(f"polarity must be 'auto', 'bright' or 'dark'; got {polarity!r}")
    if not (0 < min_radius <= max_radius):
        raise ValueError(f"need 0 < min_radius <= max_radius; got {min_radius!r}, {max_radius!r}")
    if count is not None and (int(count) != count or count < 1):
        raise ValueError(f"count must be a positive integer; got {count!r}")
    finite = np.isfinite(img)
    if not finite.any():
        raise ValueError("image holds no finite values")
    if not finite.all():
        img = np.where(finite, img, np.median(img[finite]))
    scales = _scales(float(min_radius), float(max_radius))
    signs = {"bright": (1,), "dark": (-1,), "auto": (1, -1)}[polarity]
    best = None
    for sign in signs:
        found = _detect(img, sign, scales, threshold, rel_threshold)
        # the markers' own polarity gives by far the strongest response; the other one only
        # sees their surroundings, so the count must not decide
        score = float(found[:, 3].max(initial=0.0))
        if best is None or score > best[0]:
            best = (score, found, sign)
    found = best[1]
    if count is not None:
        if len(found) < count:
            kind = {1: "bright", -1: "dark"}[best[2]]
            raise ValueError(f"found {len(found)} fiducial markers, expected {count} ({kind}, radius "
                             f"{min_radius!r}-{max_radius!r} px); check that every marker is in view "
                             "and the radius range and polarity")
        found = found[:count]
    if details:
        return found[:, :2].copy(), found[:, 2].copy(), found[:, 3].copy()
    return found[:, :2].copy()


def _spread_subset(points, k):
    """Farthest-point sample: k well-spread points keep the hypothesis count bounded."""
    if len(points) <= k:
        return np.arange(len(points))
    chosen = [int(np.argmax(np.linalg.norm(points - points.mean(axis=0), axis=1)))]
    d = np.linalg.norm(points - points[chosen[0]], axis=1)
    while len(chosen) < k:
        nxt = int(np.argmax(d))
        chosen.append(nxt)
        d = np.minimum(d, np.linalg.norm(points - points[nxt], axis=1))
    return np.array(chosen)


def _assign(mapped, tree, tol):
    """Mutual nearest neighbours within tol: (src indices, dst indices, distances)."""
    dist, j = tree.query(mapped)
    ok = dist < tol
    pairs = {}
    for i in np.flatnonzero(ok):
        if j[i] not in pairs or dist[i] < dist[pairs[j[i]]]:
            pairs[j[i]] = i
    si = np.array(sorted(pairs.values()), dtype=np.intp)
    di = j[si]
    return si, di, dist[si]


def match_fiducials(src, dst, *, method="similarity", tolerance=None, max_rotation=None,
                    reflection=None):
    """Match two sets of marker positions by their geometry.

    Parameters
    ----------
    src : (K, 2) array_like
        Marker positions in one frame (e.g. the correlation reference, mm or px, y up or down).
    dst : (M, 2) array_like
        Marker positions in the other (e.g. IR (col, row) px), in any order; markers missing
        from either set or extra detections are allowed.
    method : {"similarity", "affine", "homography"}
        Model of the final fit used to collect the matches; hypotheses are similarities.
    tolerance : float, optional
        Match distance in dst units; default 0.2 x the smallest spacing of the dst markers.
    max_rotation : float, optional
        Largest rotation between the sets, degrees; rules out the symmetric twins of a layout.
    reflection : bool, optional
        ``True``: the sets differ by an orientation flip (a y-up frame against image rows);
        ``False``: they do not; ``None`` (default): try both.

    Returns
    -------
    src_idx, dst_idx : (P,) int ndarray
        Matched pairs, sorted by ``src_idx``; at least 3.

    Raises
    ------
    ValueError
        Fewer than 3 markers in a set, fewer than 3 matched, or a layout whose symmetry makes
        two different matchings fit equally well.

    Notes
    -----
    Every pair of src markers is mapped onto every ordered pair of dst markers in both
    orientations (a similarity hypothesis); the hypothesis that brings most src markers within
    the tolerance of a dst marker wins, the squared distances breaking ties (the alignment
    search of Huttenlocher & Ullman 1990). The winning matching is refitted with ``method`` and
    re-collected. A square or regular layout has several equally good matchings: stick the
    markers asymmetrically (common practice) or state ``reflection`` and bound
    ``max_rotation``.

    References
    ----------
    Huttenlocher & Ullman, Int. J. Comput. Vis. 5(2), 195-212 (1990).
    """
    s = _as_points(src, "src")
    d = _as_points(dst, "dst")
    if len(s) < 3 or len(d) < 3:
        raise ValueError(f"matching needs at least 3 markers in each set; got {len(s)} and {len(d)}")
    if method not in ("similarity", "affine", "homography"):
        raise ValueError(f"method must be 'similarity', 'affine' or 'homography'; got {method!r}")
    tree = cKDTree(d)
    spacing = tree.query(d, k=2)[0][:, 1]
    if not spacing.min() > 0:
        raise ValueError("dst holds repeated marker positions")
    tol = float(tolerance) if tolerance is not None else 0.2 * float(spacing.min())
    zs = s[:, 0] + 1j * s[:, 1]
    zd = d[:, 0] + 1j * d[:, 1]
    base = _spread_subset(s, 12)
    dpairs = np.array([(a, b) for a in range(len(d)) for b in range(len(d)) if a != b])
    results = {}  # matching (frozen pairs) -> (count, rss)
    for o in {None: (1, -1), True: (-1,), False: (1,)}[reflection]:
        z = zs if o > 0 else np.conj(zs)
        for a, b in itertools.combinations(base, 2):
            scale = (zd[dpairs[:, 1]] - zd[dpairs[:, 0]]) / (z[b] - z[a])
            if max_rotation is not None:
                keep = np.abs(np.degrees(np.angle(scale))) <= max_rotation
                if not keep.any():
                    continue
                scale, dp = scale[keep], dpairs[keep]
            else:
                dp = dpairs
            shift = zd[dp[:, 0]] - scale * z[a]
            mapped = scale[:, None] * z[None, :] + shift[:, None]
            dist, _ = tree.query(np.column_stack([mapped.real.ravel(), mapped.imag.ravel()]))
            dist = dist.reshape(len(dp), len(s))
            hits = dist < tol
            cnt = hits.sum(axis=1)
            good = np.flatnonzero(cnt >= max(3, cnt.max() - 1))
            for h in good:
                m = mapped[h]
                si, di, dd = _assign(np.column_stack([m.real, m.imag]), tree, tol)
                key = frozenset(zip(si.tolist(), di.tolist()))
                rss = float(np.sum(dd ** 2))
                if key not in results or rss < results[key][1]:
                    results[key] = (len(si), rss)
    if not results:
        raise ValueError(f"no geometric match of 3 or more markers within {tol:.3g} (dst units); "
                         "check both sets show the same markers, or raise tolerance")
    top = max(c for c, _ in results.values())
    if top < 3:
        raise ValueError(f"only {top} markers could be matched within {tol:.3g}; need 3 or more")
    ranked = []
    for key, (c, _) in results.items():
        if c < top:
            continue
        si = np.array([p[0] for p in key])
        di = np.array([p[1] for p in key])
        t = fit_transform(s[si], d[di], method="similarity", warn_limit=None)
        ranked.append((t.rms, key))
    ranked.sort(key=lambda r: r[0])
    best_rms, best_key = ranked[0]
    if len(ranked) > 1 and ranked[1][0] < max(3.0 * best_rms, 0.05 * tol):
        raise ValueError(f"the marker layout is symmetric: {len(ranked)} different matchings of "
                         f"{top} markers fit alike (RMS {best_rms:.3g} and {ranked[1][0]:.3g}); "
                         "place the markers asymmetrically, or give reflection and max_rotation")
    si = np.array(sorted(p[0] for p in best_key))
    di = np.array([dict(best_key)[i] for i in si])
    for _ in range(3):
        fit_method = method if len(si) >= min_points(method) else "similarity"
        try:
            t = fit_transform(s[si], d[di], method=fit_method, warn_limit=None)
        except ValueError:  # matched markers on one line: the similarity fit still holds
            t = fit_transform(s[si], d[di], method="similarity", warn_limit=None)
        si_new, di_new, _ = _assign(t.apply(s), tree, tol)
        if len(si_new) < 3 or (np.array_equal(si_new, si) and np.array_equal(di_new, di)):
            break
        si, di = si_new, di_new
    return si.astype(np.intp), di.astype(np.intp)
