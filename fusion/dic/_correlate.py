"""Subset correlation of a speckle image pair on a regular grid."""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from numbers import Integral, Real

import numpy as np
from numba import njit

from .._bounds import check_pixel_size
from .._conventions import as_mask, renamed_keyword, short_repr
from .._progress import Progress
from . import _icgn
from ._field import DicField
from ._seed import global_shift, integer_search
from ._subset_noise import translation_std

__all__ = ["CorrelationResult", "correlate", "REASON_CODES", "DEFAULT_SUBSET", "DEFAULT_STEP",
           "DEFAULT_WINDOW"]

REASON_CODES = _icgn.REASON_CODES

_PROPAGATIONS = ("reliability", "seeded")
_TODO, _GOOD, _FAILED, _EXCLUDED = 0, 1, 2, 3
_SEED_ZNCC = 0.9  # least ZNCC of an accepted seed (or min_zncc when higher)
#: Defaults of subset (px), step (px) and strain window (points), shared with the config and
#: chosen by :func:`fusion.dic.default_setting`.
DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW = 25, 3, 7


@dataclass
class CorrelationResult:
    """Displacements of a correlation grid, in image axes.

    Attributes
    ----------
    rows, cols : (ny, nx) int ndarray
        Subset centres in the reference image (px; rows run down).
    u, v : (ny, nx) ndarray
        Displacement along columns and along rows (down), px; NaN where
        ``reason != 0``.
    dudx, dudy, dvdx, dvdy : (ny, nx) ndarray
        Gradients of the first-order shape function (x = column, y = row
        direction; 1), NaN where ``reason != 0``.
    zncc : (ny, nx) ndarray
        Zero-normalised cross-correlation at the solution (1 is a perfect match).
    iterations : (ny, nx) int32 ndarray
        IC-GN iterations used.
    converged : (ny, nx) bool ndarray
        The update fell below the tolerance (whatever the ZNCC).
    reason : (ny, nx) int8 ndarray
        0 for a good point, otherwise the code of :data:`REASON_CODES`.
    sssig_x, sssig_y : (ny, nx) ndarray
        Sum of squared intensity gradients of the reference subset along
        columns and rows (grey levels^2 / px^2), for the noise estimate
        ``sqrt(2) sigma / sqrt(SSSIG)`` of Pan et al. (2008).
    attrs : dict
        ``subset``, ``step`` (px), ``method``, ``propagation``, ``tolerance``,
        ``max_iterations``, ``min_zncc``, ``image_shape``, ``global_shift``.
    u_std, v_std : (ny, nx) ndarray
        Standard deviations of u and v from image noise (px), estimated per
        point from the correlation residual (see Notes of :func:`correlate`);
        NaN where ``reason != 0``. Neighbouring points whose subsets overlap
        have correlated errors (:func:`fusion.dic.strain_from_field` accounts
        for it).
    """

    __repr__ = short_repr  # shapes, not values

    rows: np.ndarray
    cols: np.ndarray
    u: np.ndarray
    v: np.ndarray
    dudx: np.ndarray
    dudy: np.ndarray
    dvdx: np.ndarray
    dvdy: np.ndarray
    zncc: np.ndarray
    iterations: np.ndarray
    converged: np.ndarray
    reason: np.ndarray
    sssig_x: np.ndarray
    sssig_y: np.ndarray
    attrs: dict = field(default_factory=dict)
    u_std: np.ndarray | None = None
    v_std: np.ndarray | None = None

    @property
    def valid(self) -> np.ndarray:
        """Points with a good solution, ``reason == 0``."""
        return self.reason == _icgn.OK

    def to_field(self, *, pixel_size=None) -> DicField:
        """The displacement field in the specimen frame (x right, y up).

        Parameters
        ----------
        pixel_size : float, optional
            Scale in mm of specimen per image pixel; the field is then in mm, else in
            px. A value in metres (1e-4 for 0.1 mm) is refused
            (:class:`~fusion.errors.ArgumentError`).

        Returns
        -------
        DicField
            Grid points in row-major order (first row at the top): ``x = col *
            s``, ``y = -row * s``, ``u = u_img * s``, ``v = -v_img * s`` with
            ``s`` the pixel size (1 for px), and their noise ``u_std``,
            ``v_std`` (same units). Attributes carry ``subset``, ``step`` (px)
            and ``pixel_size`` (mm/px or None).
        """
        if pixel_size is None:
            scale, units = 1.0, "px"
        else:
            if isinstance(pixel_size, bool) or not isinstance(pixel_size, Real) \
                    or not (math.isfinite(pixel_size) and pixel_size > 0):
                raise ValueError(f"pixel_size: expected a positive scale in mm per pixel, "
                                 f"got {pixel_size!r}")
            check_pixel_size(pixel_size, "pixel_size")
            scale, units = float(pixel_size), "mm"
        attrs = dict(self.attrs)
        attrs.update(pixel_size=None if pixel_size is None else scale, source="fusion.dic.correlate",
                     y_axis="up (y = -row * pixel_size)")
        return DicField(
            x=self.cols.ravel() * scale, y=-self.rows.ravel() * scale,
            u=self.u.ravel() * scale, v=-self.v.ravel() * scale,
            valid=self.valid.ravel(), grid_shape=self.rows.shape, units=units,
            attrs=attrs, zncc=self.zncc.ravel(),
            u_std=None if self.u_std is None else self.u_std.ravel() * scale,
            v_std=None if self.v_std is None else self.v_std.ravel() * scale)


def _as_image(name, a):
    arr = np.asarray(a)
    if arr.ndim != 2:
        raise ValueError(f"{name}: expected a 2-D grey image, got shape {arr.shape!r}")
    if arr.dtype.kind not in "uif":
        raise TypeError(f"{name}: expected a numeric image, got dtype {arr.dtype!r}")
    arr = arr.astype(np.float64)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: the image holds NaN or infinite values")
    return arr


def _positive_int(name, value, low):
    if isinstance(value, bool) or not isinstance(value, Integral) or value < low:
        raise ValueError(f"{name}: expected an integer >= {low}, got {value!r}")
    return int(value)


def _region_mask(region, shape):
    """The mask of ``region``: None (everything), a mask, or (x0, y0, x1, y1) in (col, row) px."""
    h, w = shape
    if region is None:
        return np.ones(shape, dtype=bool)
    arr = np.asarray(region)
    if arr.ndim == 2:
        return as_mask(arr, "region", shape=shape)
    try:
        c0, r0, c1, r1 = (int(x) for x in region)
    except (TypeError, ValueError):
        raise ValueError(f"region: expected (x0, y0, x1, y1) in (column, row) px or a mask, got "
                         f"{region!r}") from None
    if not (0 <= r0 < r1 <= h and 0 <= c0 < c1 <= w):
        raise ValueError(f"region: {region!r} is not a non-empty rectangle inside the image of {h} rows "
                         f"and {w} columns (columns x0..x1-1, rows y0..y1-1)")
    mask = np.zeros(shape, dtype=bool)
    mask[r0:r1, c0:c1] = True
    return mask


def _old_spellings(roi, seed_points, region, seeds):
    """``roi`` (row0, col0, row1, col1) and ``seed_points`` (row, col) as the new keywords."""
    if roi is not None:
        if region is not None:
            raise TypeError("give region= only (roi= is its deprecated spelling)")
        renamed_keyword("roi", "region", "a rectangle is (x0, y0, x1, y1): columns first", stacklevel=4)
        arr = np.asarray(roi)
        if arr.ndim == 2:
            region = arr
        else:
            try:
                r0, c0, r1, c1 = (int(x) for x in roi)
            except (TypeError, ValueError):
                raise ValueError(f"roi: expected (row0, col0, row1, col1) or a mask, got {roi!r}") from None
            region = (c0, r0, c1, r1)
    if seed_points is not None:
        if seeds is not None:
            raise TypeError("give seeds= only (seed_points= is its deprecated spelling)")
        renamed_keyword("seed_points", "seeds", "points are (x, y) = (column, row)", stacklevel=4)
        seeds = np.asarray(seed_points, dtype=np.float64).reshape(-1, 2)[:, ::-1]
    return region, seeds


@njit(cache=True)
def _frontier(status, zncc):
    """Unprocessed points with a good 4-neighbour, and the best such neighbour of each."""
    ny, nx = status.shape
    cand = np.empty(ny * nx, dtype=np.int64)
    guide = np.empty(ny * nx, dtype=np.int64)
    n = 0
    for i in range(ny):
        for j in range(nx):
            if status[i, j] != _TODO:
                continue
            best = -1
            bz = -2.0
            for di, dj in ((-1, 0), (1, 0), (0, -1), (0, 1)):
                a = i + di
                b = j + dj
                if 0 <= a < ny and 0 <= b < nx and status[a, b] == _GOOD and zncc[a, b] > bz:
                    bz = zncc[a, b]
                    best = a * nx + b
            if best >= 0:
                cand[n] = i * nx + j
                guide[n] = best
                n += 1
    return cand[:n], guide[:n]


@njit(cache=True)
def _box_variance(img, rows, cols, half):
    """Grey-level variance of the subsets centred at (rows, cols)."""
    out = np.empty(rows.shape)
    n = (2 * half + 1) ** 2
    for k in range(rows.size):
        r = rows.flat[k]
        c = cols.flat[k]
        base = img[r, c]  # shifting by one sample keeps the sums of squares exact
        s1 = 0.0
        s2 = 0.0
        for a in range(r - half, r + half + 1):
            for b in range(c - half, c + half + 1):
                d = img[a, b] - base
                s1 += d
                s2 += d * d
        out.flat[k] = s2 / n - (s1 / n) ** 2
    return out


class _Solver:
    """The state of one correlation: images, grid and per-point solutions."""

    def __init__(self, ref, deformed, mask, rows, cols, half, opts):
        self.ref, self.deformed, self.mask = ref, deformed, mask
        # scipy.ndimage's filters release the GIL: the two images are filtered side by side
        with ThreadPoolExecutor(1) as pool:
            coef = pool.submit(_icgn.prefilter, deformed)
            self.gx, self.gy = _icgn.reference_gradients(_icgn.prefilter(ref))
            self.coef = coef.result()
        self.rows, self.cols, self.half, self.opts = rows, cols, half, opts
        shape = rows.shape
        self.p = np.full(shape + (6,), np.nan)
        self.zncc = np.full(shape, np.nan)
        self.iters = np.zeros(shape, dtype=np.int32)
        self.reason = np.full(shape, _icgn.UNREACHED, dtype=np.int8)
        self.sssig = np.full(shape + (2,), np.nan)
        self.noise = np.full(shape + (4,), np.nan)
        self.status = np.full(shape, _TODO, dtype=np.int8)
        outside = ~mask[rows, cols]
        self.status[outside] = _EXCLUDED
        self.reason[outside] = _icgn.OUTSIDE_ROI
        # flat subsets (saturated or painted-over areas) can neither seed nor guide:
        # flag them before propagation instead of letting them fail one by one
        var = _box_variance(ref, rows, cols, half)
        flat = ~outside & (var <= 1e-10 * max(float(ref.var()), 1e-300))
        self.status[flat] = _EXCLUDED
        self.reason[flat] = _icgn.LOW_CONTRAST
        self.bar = None       # a Progress of the points solved, when one is shown

    def refine(self, flat, p0):
        """IC-GN on the flat grid indices ``flat`` from guesses ``p0``; returns good flags."""
        o = self.opts
        r = self.rows.ravel()[flat].astype(np.int64)
        c = self.cols.ravel()[flat].astype(np.int64)
        p, z, it, reason, ss, noise = _icgn.icgn_batch(
            self.ref, self.gx, self.gy, self.coef, self.mask, r, c,
            np.ascontiguousarray(p0, dtype=np.float64), self.half, o["max_iterations"],
            o["tolerance"], o["min_zncc"], o["min_fill"])
        ny, nx = self.rows.shape
        ii, jj = np.divmod(flat, nx)
        self.p[ii, jj] = p
        self.zncc[ii, jj] = z
        self.iters[ii, jj] = it
        self.reason[ii, jj] = reason
        self.sssig[ii, jj] = ss
        self.noise[ii, jj] = noise
        good = reason == _icgn.OK
        self.status[ii, jj] = np.where(good, _GOOD, _FAILED)
        if self.bar is not None:
            self.bar.advance_to(int(np.count_nonzero((self.status == _GOOD) | (self.status == _FAILED))))
        return good

    def seed(self, flat, centre):
        """Integer FFT search then IC-GN at the flat indices; returns the good ones."""
        o = self.opts
        p0 = np.zeros((flat.size, 6))
        keep = np.ones(flat.size, dtype=bool)
        for k, f in enumerate(flat):
            i, j = divmod(int(f), self.rows.shape[1])
            dv, du, z = integer_search(self.ref, self.deformed, int(self.rows[i, j]),
                                       int(self.cols[i, j]), self.half, o["search"], centre)
            p0[k, 0], p0[k, 3] = du, dv
            if not z >= o["min_zncc"] * 0.5:  # a loose gate: IC-GN decides
                keep[k] = False
                self.status[i, j] = _FAILED
                self.reason[i, j] = _icgn.SEED_FAILED
                self.zncc[i, j] = z
        if keep.any():
            good = self.refine(flat[keep], p0[keep])
            # a seed guides many points: it must be clearly right, not just acceptable
            z = self.zncc.ravel()[flat[keep]]
            weak = good & ~(z >= max(o["min_zncc"], _SEED_ZNCC))
            wi, wj = np.divmod(flat[keep][weak], self.rows.shape[1])
            self.status[wi, wj] = _FAILED
            self.reason[wi, wj] = _icgn.SEED_FAILED
            good &= ~weak
            bad = flat[keep][~good]
            bi, bj = np.divmod(bad, self.rows.shape[1])
            self.reason[bi, bj] = np.where(self.reason[bi, bj] == _icgn.OK, _icgn.SEED_FAILED,
                                           self.reason[bi, bj])
            return flat[keep][good]
        return flat[:0]

    def guesses(self, flat, source):
        """First-order extrapolation of the solutions at ``source`` to the points ``flat``."""
        ps = self.p.reshape(-1, 6)[source]
        d_col = (self.cols.ravel()[flat] - self.cols.ravel()[source]).astype(np.float64)
        d_row = (self.rows.ravel()[flat] - self.rows.ravel()[source]).astype(np.float64)
        p0 = ps.copy()
        p0[:, 0] += ps[:, 1] * d_col + ps[:, 2] * d_row
        p0[:, 3] += ps[:, 4] * d_col + ps[:, 5] * d_row
        return p0

    def propagate(self):
        """Reliability-guided waves: best-supported frontier points first."""
        while True:
            cand, guide = _frontier(self.status, self.zncc)
            if cand.size == 0:
                return
            gz = self.zncc.ravel()[guide]
            if cand.size > 64:
                # points guided by clearly less reliable neighbours (below the median
                # and 0.01 under the best guide) wait a wave and may meet a better
                # neighbour (after Pan 2009); equal guides all go at once
                sel = (gz >= np.median(gz)) | (gz >= gz.max() - 0.01)
                cand, guide = cand[sel], guide[sel]
            self.refine(cand, self.guesses(cand, guide))


def _seed_candidates(status, count):
    """Up to count x count to-do grid points spread evenly over the grid."""
    ny, nx = status.shape
    fi = (np.arange(count) + 0.5) / count
    picks = []
    for a in np.unique((fi * ny).astype(int)):
        for b in np.unique((fi * nx).astype(int)):
            picks.append(a * nx + b)
    picks = np.array(picks, dtype=np.int64)
    todo = status.ravel()[picks] == _TODO
    return picks[todo]


def correlate(reference, deformed, *, subset=DEFAULT_SUBSET, step=DEFAULT_STEP, region=None,
              seeds=None, max_iterations=50, tolerance=1e-4, min_zncc=0.8, propagation="reliability",
              search=None, min_fill=0.6, progress=False, roi=None, seed_points=None):
    """Displacements between two speckle images by subset correlation.

    Parameters
    ----------
    reference, deformed : (H, W) array_like
        Grey images (any integer or float dtype), same shape.
    subset : int
        Subset side in pixels (odd, at least 7). Default 25, as the config's.
    step : int
        Grid spacing in pixels. Default 3, as the config's: with the config's
        strain window of 7 points this resolves a hole of 60 px radius with a
        gain of 0.9 at typical image noise, and puts points within 6 px of
        every edge (:func:`fusion.dic.default_setting`).
    region : (x0, y0, x1, y1) or (H, W) mask, optional
        Region of interest: a rectangle of columns x0..x1-1 and rows y0..y1-1
        (px, (x, y) = (column, row) order as everywhere in the package), or a
        mask (bool, or numbers holding only 0/1 or 0/255, as
        :func:`fusion.io.read_image` returns a painted mask). Subset centres lie
        on a grid over its bounding box shrunk by half a subset; reference
        pixels outside the mask are left out of a subset, and a subset needs
        ``min_fill`` of its pixels inside.
    seeds : (K, 2) array_like of (x, y) = (column, row) px, optional
        Where to start (the nearest grid points); default: points spread over
        the grid.
    max_iterations : int
        IC-GN iterations per subset.
    tolerance : float
        Convergence when ``sqrt(du^2 + dv^2 + M^2 |d grad|^2) < tolerance``
        (px), M the subset half-width.
    min_zncc : float
        Points below this ZNCC are rejected (reason 5).
    propagation : {"reliability", "seeded"}
        ``"reliability"``: from the seeds, neighbours of the most reliable
        solved points are solved next, each starting from the extrapolated
        solution of its best neighbour (after Pan 2009); robust to large
        gradients. ``"seeded"``: a coarse grid of seeds (or ``seed_points``)
        gives every point a first guess, all points are refined in one
        parallel pass, and failures are retried by reliability propagation;
        fastest for smooth fields.
    search : int, optional
        Half-width (px) of the integer search of a seed around the global
        shift found by phase correlation; default ``max(subset, 16)``.
    min_fill : float
        Fraction of a subset's pixels that must lie inside the mask.
    progress : bool
        Points solved so far: a bar on stderr when it is a terminal, else a line at
        every quarter.
    roi, seed_points
        Deprecated spellings of ``region`` (as ``(row0, col0, row1, col1)``) and
        ``seeds`` (as ``(row, col)``); they warn and are removed in the next
        release.

    Returns
    -------
    CorrelationResult
        Grid of u, v (image axes, px), gradients, ZNCC, iterations,
        convergence flags and reason codes (:data:`REASON_CODES`).

    Notes
    -----
    Method: zero-normalised criterion (ZNSSD, reported as ZNCC), integer start
    from FFT cross-correlation, inverse compositional Gauss-Newton with a
    first-order shape function and bicubic B-spline interpolation, all in
    float64 (Baker & Matthews 2004; Pan, Li & Tong 2013). Subsets containing
    a discontinuity (crack, edge) violate the shape function and are rejected
    or biased; keep them out with the mask. Interpolation bias of the cubic
    B-spline grows as speckles shrink toward 2 px.

    Reason codes (``result.reason``, :data:`REASON_CODES`):

    ==  ==============================================================
    0   converged with ZNCC at or above ``min_zncc``
    1   centre outside the region of interest, or subset under ``min_fill``
    2   reference subset without usable contrast
    3   the warped subset left the deformed image
    4   ``max_iterations`` reached
    5   converged, but ZNCC below ``min_zncc``
    6   no converged neighbour or seed reached the point
    7   the update became non-finite or larger than the subset
    8   a seed found no match (integer search or refined ZNCC too low)
    ==  ==============================================================

    Noise: each point's ``u_std`` and ``v_std`` come from the residual of the
    criterion at the solution (an estimate of the grey-level noise, taken as
    equal in both images, corrected for the smoothing of the deformed image's
    noise by interpolation) through the least-squares covariance of the six
    shape parameters (:func:`fusion.dic._subset_noise.translation_std`); for
    translation alone this is ``sqrt(2) sigma / sqrt(SSSIG)`` (Pan et al.
    2008). Misfit of the shape function (strain varying within a subset) adds
    to the residual and so to the estimate.

    Seeds: the integer search accepts a peak ZNCC of at least ``min_zncc / 2``
    (a loose gate); a seed is kept when IC-GN converges with a ZNCC of at least
    ``max(min_zncc, 0.9)``, since every point it guides inherits its errors.
    Points that fail are not retried from other neighbours.

    References
    ----------
    S. Baker, I. Matthews, "Lucas-Kanade 20 years on: a unifying framework",
    Int. J. Computer Vision 56 (2004) 221-255.
    B. Pan, K. Li, W. Tong, "Fast, robust and accurate digital image
    correlation calculation without redundant computations", Experimental
    Mechanics 53 (2013) 1277-1289.
    B. Pan, "Reliability-guided digital image correlation for image
    deformation measurement", Applied Optics 48 (2009) 1535-1542.
    B. Pan, H. Xie, Z. Wang, K. Qian, Z. Wang, "Study on subset size
    selection in digital image correlation for speckle patterns", Optics
    Express 16(10) (2008) 7037-7048.
    """
    region, seeds = _old_spellings(roi, seed_points, region, seeds)
    ref = _as_image("reference", reference)
    dfm = _as_image("deformed", deformed)
    if ref.shape != dfm.shape:
        raise ValueError(f"deformed: shape {dfm.shape!r} differs from the reference {ref.shape!r}")
    subset = _positive_int("subset", subset, 7)
    if subset % 2 == 0:
        raise ValueError(f"subset: expected an odd size in pixels, got {subset!r}")
    step = _positive_int("step", step, 1)
    max_iterations = _positive_int("max_iterations", max_iterations, 1)
    for name, value, lo, hi in (("tolerance", tolerance, 0.0, 1.0),
                                ("min_zncc", min_zncc, -1.0, 1.0), ("min_fill", min_fill, 0.0, 1.0)):
        if isinstance(value, bool) or not isinstance(value, Real) or not lo < value <= hi:
            raise ValueError(f"{name}: expected a number in ({lo}, {hi}], got {value!r}")
    if propagation not in _PROPAGATIONS:
        raise ValueError(f"propagation: expected one of {_PROPAGATIONS!r}, got {propagation!r}")
    half = subset // 2
    search = max(subset, 16) if search is None else _positive_int("search", search, 1)
    h, w = ref.shape
    mask = _region_mask(region, ref.shape)
    if not mask.any():
        raise ValueError("region: the mask selects no pixel")
    rr = np.flatnonzero(mask.any(axis=1))
    cc = np.flatnonzero(mask.any(axis=0))
    lo_r, hi_r = max(rr[0] + half, half + 2), min(rr[-1] - half, h - half - 4)
    lo_c, hi_c = max(cc[0] + half, half + 2), min(cc[-1] - half, w - half - 4)
    if lo_r > hi_r or lo_c > hi_c:
        raise ValueError(f"region: the region (or image {ref.shape!r}) is too small for subset {subset}")
    rows, cols = np.meshgrid(np.arange(lo_r, hi_r + 1, step), np.arange(lo_c, hi_c + 1, step),
                             indexing="ij")
    opts = dict(max_iterations=max_iterations, tolerance=float(tolerance),
                min_zncc=float(min_zncc), min_fill=float(min_fill), search=search)
    solver = _Solver(ref, dfm, mask, rows, cols, half, opts)
    centre = global_shift(ref, dfm, (rr[0], cc[0], rr[-1] + 1, cc[-1] + 1))
    ny, nx = rows.shape

    if seeds is not None:
        sp = np.asarray(seeds, dtype=np.float64).reshape(-1, 2)      # (x, y) = (col, row)
        si = np.clip(np.rint((sp[:, 1] - lo_r) / step), 0, ny - 1).astype(np.int64)
        sj = np.clip(np.rint((sp[:, 0] - lo_c) / step), 0, nx - 1).astype(np.int64)
        near = (np.abs(rows[si, sj] - sp[:, 1]) <= step) & (np.abs(cols[si, sj] - sp[:, 0]) <= step)
        picked = np.unique(si[near] * nx + sj[near])
        picked = picked[solver.status.ravel()[picked] == _TODO]
        if picked.size == 0:
            raise ValueError(f"seeds: none of {sp.tolist()!r} (x, y) lies on a grid point "
                             "inside the region of interest")
    else:
        count = 4 if propagation == "reliability" else max(3, min(8, min(ny, nx) // 4))
        picked = _seed_candidates(solver.status, count)
    solver.bar = Progress(int(np.count_nonzero(solver.status == _TODO)), desc="correlation", unit="points",
                          enabled=progress)
    good = solver.seed(picked, centre)
    if good.size == 0 and seeds is None:
        good = solver.seed(_seed_candidates(solver.status, 6), centre)

    if propagation == "seeded" and good.size:
        todo = np.flatnonzero(solver.status.ravel() == _TODO)
        if todo.size:
            from scipy.spatial import cKDTree

            # each point starts from its nearest good seed
            _, nearest = cKDTree(np.column_stack(np.divmod(good, nx))).query(
                np.column_stack(np.divmod(todo, nx)))
            source = good[nearest]
            ok = solver.refine(todo, solver.guesses(todo, source))
            retry = todo[~ok]
            ri, rj = np.divmod(retry, nx)
            solver.status[ri, rj] = _TODO
    for _ in range(20):
        solver.propagate()
        rest = np.flatnonzero(solver.status.ravel() == _TODO)
        if rest.size == 0:
            break
        # unreached islands (a mask in several parts): seed a few of their points
        picks = rest[np.linspace(0, rest.size - 1, min(4, rest.size)).astype(np.int64)]
        solver.seed(np.unique(picks), centre)
    left = solver.status == _TODO
    solver.reason[left] = _icgn.UNREACHED
    solver.bar.close()

    good_mask = solver.reason == _icgn.OK
    p = np.where(good_mask[..., None], solver.p, np.nan)
    attrs = dict(subset=subset, step=step, propagation=propagation, tolerance=float(tolerance),
                 max_iterations=max_iterations, min_zncc=float(min_zncc),
                 image_shape=(h, w), global_shift=centre,
                 method="IC-GN, first-order shape function, bicubic B-spline interpolation, "
                        "zero-normalised criterion")
    converged = np.isin(solver.reason, (_icgn.OK, _icgn.LOW_ZNCC))
    nz = solver.noise
    u_std, v_std = translation_std(np.where(good_mask, solver.zncc, np.nan), nz[..., 2], nz[..., 3],
                                   nz[..., 0], nz[..., 1], p[..., 0], p[..., 3])
    return CorrelationResult(
        rows=rows, cols=cols, u=p[..., 0], v=p[..., 3], dudx=p[..., 1], dudy=p[..., 2],
        dvdx=p[..., 4], dvdy=p[..., 5], zncc=solver.zncc, iterations=solver.iters,
        converged=converged, reason=solver.reason, sssig_x=solver.sssig[..., 0],
        sssig_y=solver.sssig[..., 1], attrs=attrs, u_std=u_std, v_std=v_std)
