"""Motion compensation of infrared frames: warp each frame back to the reference configuration."""

from __future__ import annotations

import numbers

import cv2
import numba
import numpy as np
import scipy.ndimage as ndi

__all__ = ["CompensatedFrames", "motion_compensate", "motion_amplitude"]

_INTERPOLATION = {"spline": None, "cubic": cv2.INTER_CUBIC, "linear": cv2.INTER_LINEAR,
                  "lanczos": cv2.INTER_LANCZOS4}
_PAD = 4  # px of edge padding around a frame before the B-spline prefilter


@numba.njit(parallel=True, cache=True)
def _bspline_warp(coef, dx, dy, delta, pad, out):  # pragma: no cover - compiled
    """Evaluate the cubic B-spline with coefficients ``coef`` at p + delta * (dx, dy)."""
    ny, nx = out.shape
    hy, hx = coef.shape
    for r in numba.prange(ny):
        for c in range(nx):
            x = min(max(c + delta * dx[r, c] + pad, 1.0), hx - 3.0)
            y = min(max(r + delta * dy[r, c] + pad, 1.0), hy - 3.0)
            i0 = int(np.floor(y))
            j0 = int(np.floor(x))
            ty = y - i0
            tx = x - j0
            wy0 = (1 - ty) ** 3 / 6
            wy1 = (3 * ty ** 3 - 6 * ty ** 2 + 4) / 6
            wy2 = (-3 * ty ** 3 + 3 * ty ** 2 + 3 * ty + 1) / 6
            wy3 = ty ** 3 / 6
            wx0 = (1 - tx) ** 3 / 6
            wx1 = (3 * tx ** 3 - 6 * tx ** 2 + 4) / 6
            wx2 = (-3 * tx ** 3 + 3 * tx ** 2 + 3 * tx + 1) / 6
            wx3 = tx ** 3 / 6
            acc = 0.0
            for a in range(4):
                wy = wy0 if a == 0 else (wy1 if a == 1 else (wy2 if a == 2 else wy3))
                row = i0 - 1 + a
                acc += wy * (wx0 * coef[row, j0 - 1] + wx1 * coef[row, j0]
                             + wx2 * coef[row, j0 + 1] + wx3 * coef[row, j0 + 2])
            out[r, c] = acc


def _fill_nearest(displacement):
    """Extend the displacement past the correlation region with the nearest known value.

    The blurred image of an edge reaches beyond the region where correlation has data; it must
    move with the part, and a uniform background is unchanged by the shift anyway.
    """
    known = np.all(np.isfinite(displacement), axis=0)
    if known.all():
        return displacement
    if not known.any():
        return np.zeros_like(displacement)
    _, (ri, ci) = ndi.distance_transform_edt(~known, return_indices=True)
    return displacement[:, ri, ci]


class CompensatedFrames:
    """A lazy view of an IR stack with every frame warped back to the reference configuration.

    Indexing reads only the requested frames from the underlying stack and warps them, so a
    chunked reader (the lock-in) streams through without a copy of the whole stack. The result
    of indexing is float32. ``np.asarray`` on the whole view does build the full copy.

    Attributes
    ----------
    shape : tuple
        (F, Y, X), as the source stack.
    dtype : numpy.dtype
        float32.
    displacement : (2, Y, X) float32 ndarray
        IR px per unit load (d col, d row), NaNs filled with the nearest known value.
    load_delta : (F,) ndarray
        Load of each frame minus the reference load.
    amplitude : (Y, X) ndarray
        Peak-to-peak motion of each pixel over the load signal, IR px.
    """

    def __init__(self, frames, displacement, load, reference_load, interpolation):
        self._frames = frames
        self.displacement = displacement
        self.load_delta = np.asarray(load, dtype=np.float64) - reference_load
        self.reference_load = float(reference_load)
        self.interpolation = interpolation
        self._flag = _INTERPOLATION[interpolation]
        ny, nx = displacement.shape[1:]
        self._gx, self._gy = np.meshgrid(np.arange(nx, dtype=np.float32),
                                         np.arange(ny, dtype=np.float32))
        self.shape = (len(self.load_delta), ny, nx)
        self.dtype = np.dtype(np.float32)
        self.ndim = 3

    def __len__(self):
        return self.shape[0]

    @property
    def amplitude(self):
        return motion_amplitude(self.displacement, float(np.ptp(self.load_delta)))

    def _warp(self, frame, delta):
        # frame i shows the material point of reference pixel p at p + u(p) * (L_i - L_ref)
        if self._flag is None:
            # interpolating cubic B-spline at the exact positions (Unser 1999): prefilter the
            # edge-padded frame, then evaluate the 4 x 4 basis in a compiled loop
            padded = np.pad(np.asarray(frame, dtype=np.float64), _PAD, mode="edge")
            coef = ndi.spline_filter(padded, order=3, mode="mirror")
            out = np.empty(self.shape[1:], np.float32)
            _bspline_warp(coef, self.displacement[0], self.displacement[1], float(delta), _PAD, out)
            return out
        mx = self._gx + np.float32(delta) * self.displacement[0]
        my = self._gy + np.float32(delta) * self.displacement[1]
        return cv2.remap(np.asarray(frame, dtype=np.float32), mx, my, self._flag,
                         borderMode=cv2.BORDER_REPLICATE)

    def __getitem__(self, key):
        rest = ()
        if isinstance(key, tuple):
            key, rest = key[0], key[1:]
        if isinstance(key, numbers.Integral):
            i = int(key) + (len(self) if key < 0 else 0)
            if not 0 <= i < len(self):
                raise IndexError(f"frame index {key!r} out of range for {len(self)} frames")
            out = self._warp(self._frames[i], self.load_delta[i])
        else:
            if isinstance(key, slice):
                idx = np.arange(len(self))[key]
                src = self._frames[key]
            else:
                idx = np.arange(len(self))[np.asarray(key)]
                src = self._frames[idx] if len(idx) else np.zeros((0,) + self.shape[1:])
            src = np.asarray(src)
            out = np.empty((len(idx),) + self.shape[1:], np.float32)
            for k, i in enumerate(idx):
                out[k] = self._warp(src[k], self.load_delta[i])
            # a block of a memory-mapped stack: drop its pages from the resident set now that it
            # is warped, so streaming a stack larger than memory stays within its chunk budget
            from ._kernels import _release

            _release(src)
        return out[(Ellipsis,) + rest] if rest else out

    def __iter__(self):
        for i in range(len(self)):
            yield self[i]

    def __array__(self, dtype=None, copy=None):
        out = self[:]
        return out if dtype is None else out.astype(dtype)

    def __repr__(self):
        return (f"CompensatedFrames(shape={self.shape!r}, interpolation={self.interpolation!r}, "
                f"max motion {float(np.nanmax(self.amplitude, initial=0.0)):.3g} px p-p)")


def motion_compensate(frames, displacement, load, *, reference_load=None, interpolation="spline"):
    """Warp every IR frame back to the reference configuration, lazily.

    Parameters
    ----------
    frames : (F, Y, X) array_like
        IR stack (ndarray, memory map, or anything indexable by frame slices); any real dtype.
    displacement : (2, Y, X) array_like
        In-plane displacement per unit load on the IR grid, IR px per load unit: (d col, d row),
        i.e. (dx along columns, dy along rows), e.g. correlation displacements mapped with
        :func:`fusion.register.map_displacement` and :func:`fusion.register.resample_to_grid`.
        NaNs (outside the correlation region) take the nearest known value.
    load : (F,) array_like
        Load at each frame, in the unit the displacement is normalised by.
    reference_load : float, optional
        Load of the reference configuration; default the mean load.
    interpolation : {"spline", "cubic", "linear", "lanczos"}
        ``"spline"`` (default): interpolating cubic B-spline at the exact positions (SciPy
        prefilter, compiled evaluation). ``"cubic"``, ``"linear"``, ``"lanczos"``: OpenCV
        ``cv2.remap`` with INTER_CUBIC, INTER_LINEAR or INTER_LANCZOS4, about twice as fast but
        see Notes.

    Returns
    -------
    CompensatedFrames
        Array-like (``shape``, ``dtype`` float32, ``len``, slicing) that warps on access.

    Notes
    -----
    Under load the part moves, so a pixel near a temperature edge (part edge, hole, marker)
    samples alternately both sides of it: the temperature gradient times the motion appears as
    a large dT in phase with the load that has nothing to do with stress (common practice in
    thermoelastic work). Frame i is resampled at ``p + u(p) (L_i - L_ref)``, which undoes
    motion linear in the load. The interpolation error follows the shift, hence the load, and
    so leaks into dT at sharp edges. On a 7 K edge blurred to sigma = 1.2 px moving 0.3 px
    peak-to-peak (spurious dT 0.68 K uncompensated) the residual was 0.006 K with
    ``"spline"``, 0.044 K with OpenCV linear, 0.054 K with Lanczos and 0.16 K with OpenCV
    cubic: OpenCV's cubic kernel (a = -0.75) is only first-order accurate and its maps resolve
    1/32 px. Judge the remaining edge signal against :func:`motion_amplitude` before trusting
    dT near edges. Out-of-frame positions take the nearest edge pixel.

    References
    ----------
    Unser, IEEE Signal Process. Mag. 16(6), 22-38 (1999) (B-spline interpolation).
    Keys, IEEE Trans. ASSP 29(6), 1153-1160 (1981) (cubic convolution).
    """
    d = np.asarray(displacement, dtype=np.float32)
    if d.ndim != 3 or d.shape[0] != 2:
        raise ValueError(f"displacement must have shape (2, Y, X); got shape {d.shape!r}")
    shape = tuple(getattr(frames, "shape", ()))
    if len(shape) != 3:
        raise ValueError(f"frames must be a (F, Y, X) stack; got shape {shape!r}")
    if shape[1:] != d.shape[1:]:
        raise ValueError(f"displacement grid {d.shape[1:]!r} differs from the frame size {shape[1:]!r}")
    ld = np.asarray(load, dtype=np.float64).ravel()
    if ld.shape != (shape[0],):
        raise ValueError(f"load must have one value per frame ({shape[0]}); got {ld.shape[0]} values")
    if not np.all(np.isfinite(ld)):
        raise ValueError("load holds non-finite values")
    if interpolation not in _INTERPOLATION:
        raise ValueError(f"interpolation must be one of {sorted(_INTERPOLATION)!r}; got {interpolation!r}")
    ref = float(np.mean(ld)) if reference_load is None else float(reference_load)
    if not np.isfinite(ref):
        raise ValueError(f"reference_load must be finite; got {reference_load!r}")
    return CompensatedFrames(frames, _fill_nearest(d), ld, ref, interpolation)


def motion_amplitude(displacement, load_range):
    """Peak-to-peak in-plane motion of each IR pixel.

    Parameters
    ----------
    displacement : (2, Y, X) array_like
        Displacement per unit load, IR px per load unit (d col, d row).
    load_range : float
        Load range (max - min) of the cycle, load units.

    Returns
    -------
    (Y, X) ndarray
        Magnitude of the displacement between minimum and maximum load, IR px (NaN where the
        displacement is unknown). Half of it is the amplitude of a sinusoidal motion.
    """
    d = np.asarray(displacement, dtype=np.float64)
    if d.ndim != 3 or d.shape[0] != 2:
        raise ValueError(f"displacement must have shape (2, Y, X); got shape {d.shape!r}")
    if not np.isfinite(load_range):
        raise ValueError(f"load_range must be finite; got {load_range!r}")
    return np.hypot(d[0], d[1]) * abs(float(load_range))
