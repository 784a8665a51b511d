"""Per-pixel diagnosis: z-scores, source map, source probabilities, surface fraction."""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np

from .._conventions import short_repr
from ..datamodel import EXTRA_FLAGS, SOURCES, source_flags

__all__ = ["Diagnosis", "diagnose"]

logger = logging.getLogger(__name__)

NO_DATA = EXTRA_FLAGS["no_data"]
INDISTINGUISHABLE = EXTRA_FLAGS["indistinguishable"]
NO_SOURCE_FITS = EXTRA_FLAGS["no_source_fits"]

# Pixels per block: bounds the (n_sources, rows, cols) float64 temporaries to a few tens of MB
# whatever the frame size.
_BLOCK_PIXELS = 1 << 17

# A measured lag whose standard deviation exceeds this many degrees carries no information
# (the lag lives in (-90, 90)); capping keeps the likelihood finite where the ratio is ~0.
_LAG_STD_CAP = 180.0


@dataclass(frozen=True, eq=False)
class Diagnosis:
    """Result of :func:`diagnose` on one run (all maps on the IR grid, shape ``(Y, X)``).

    Attributes
    ----------
    sources : tuple of str
        The sources evaluated, in :data:`fusion.datamodel.SOURCES` order; the order of
        the first axis of ``probability``.
    residual, zscore : dict of str to (Y, X) float32 ndarray
        Measured minus predicted ratio (dimensionless) and that residual over its
        combined standard deviation, per source. NaN where ``valid`` is False.
    lag_residual, lag_zscore : dict of str to (Y, X) float32 ndarray
        Measured minus predicted phase lag (degree, wrapped to [-90, 90)) and its
        z-score, per source; empty dicts when no measured lag was given.
    source_layer : (Y, X) int8 ndarray
        Source map with the CF flag values in ``flag_values`` / ``flag_meanings``.
    probability : (n_sources, Y, X) float32 ndarray
        Relative support of each source (see :func:`diagnose`, Notes); sums to 1 where
        a source fits, all 0 where none fits, NaN where ``valid`` is False.
    surface_fraction, surface_fraction_std : (Y, X) float32 ndarray
        beta of ``measured = beta * surface_ply + (1 - beta) * laminate`` and its standard
        deviation (dimensionless); NaN where the two predictions are closer than their
        combined uncertainty, where either source was not evaluated, or where invalid.
    valid : (Y, X) bool ndarray
        Pixels that were diagnosed (every other pixel is ``no_data``).
    tied : (Y, X) int8 ndarray
        At ``indistinguishable`` pixels, the sources that cannot be told apart there: bit
        ``SOURCES.index(source)`` is set for each (CF ``flag_masks``, see
        :func:`fusion.datamodel.tie_flags`); 0 at every other pixel.
    flag_values, flag_meanings : tuple
        CF attributes of ``source_layer`` (from :func:`fusion.datamodel.source_flags`).
    area_fraction : dict of str to float
        Share of the valid pixels in each category of the source map (every flag
        meaning except ``no_data``); all 0.0 when no pixel is valid (see ``n_valid``).
    n_valid : int
        Number of valid pixels.
    uses_lag : bool
        Whether the phase lag entered the z-scores and probabilities.
    settings : dict
        ``fit_threshold``, ``distinguish``, ``lag_std_floor`` used (for provenance).
    """

    __repr__ = short_repr  # shapes, not values

    sources: tuple
    residual: dict
    zscore: dict
    lag_residual: dict
    lag_zscore: dict
    source_layer: np.ndarray
    probability: np.ndarray
    surface_fraction: np.ndarray
    surface_fraction_std: np.ndarray
    valid: np.ndarray
    flag_values: tuple
    flag_meanings: tuple
    area_fraction: dict
    n_valid: int
    uses_lag: bool
    tied: np.ndarray = None
    settings: dict = field(default_factory=dict)

    def category(self, meaning: str) -> np.ndarray:
        """Boolean map of one source-map category, e.g. ``"laminate"`` or ``"no_source_fits"``."""
        try:
            value = self.flag_values[self.flag_meanings.index(meaning)]
        except ValueError:
            raise ValueError(f"{meaning!r} is not a category of this source map; "
                             f"known: {list(self.flag_meanings)}") from None
        return self.source_layer == value

    def to_maps(self) -> dict:
        """The diagnosis maps named as variables of ``result.nc``.

        Returns ``residual_<source>``, ``zscore_<source>``, ``source_layer``,
        ``source_probability``, ``source_tie`` and ``surface_fraction``, ready for
        :func:`fusion.datamodel.result_dataset` (pass ``sources=self.sources``).
        """
        maps = {}
        for s in self.sources:
            maps[f"residual_{s}"] = self.residual[s]
            maps[f"zscore_{s}"] = self.zscore[s]
        maps["source_layer"] = self.source_layer
        maps["source_probability"] = self.probability
        if self.tied is not None:
            maps["source_tie"] = self.tied
        maps["surface_fraction"] = self.surface_fraction
        return maps


def _real_map(a, shape, name):
    arr = np.asarray(a)
    if arr.dtype.kind not in "fiu":
        raise TypeError(f"{name}: expected a real numeric array, got dtype {arr.dtype!r}")
    try:
        return np.broadcast_to(arr, shape)
    except ValueError:
        raise ValueError(f"{name}: shape {arr.shape!r} does not match the measured map "
                         f"{shape!r}") from None


def _std_map(a, shape, name):
    arr = _real_map(a, shape, name)
    if np.any(arr < 0):
        raise ValueError(f"{name}: standard deviations must be >= 0; found minimum "
                         f"{float(np.nanmin(arr))!r}")
    return arr


def _bool_map(a, shape, name):
    arr = np.asarray(a)
    if arr.dtype != bool:
        if arr.dtype.kind in "iu" and np.all((arr == 0) | (arr == 1)):
            arr = arr.astype(bool)
        else:
            raise TypeError(f"{name}: expected a boolean mask, got dtype {arr.dtype!r}")
    if arr.shape != tuple(shape):
        raise ValueError(f"{name}: shape {arr.shape!r} does not match the measured map {shape!r}")
    return arr


def _positive(value, name, *, allow_zero=False):
    v = float(value)
    if not np.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        rule = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{name} must be a finite number {rule}, got {value!r}")
    return v


def _order_sources(predictions, prediction_std):
    if not isinstance(predictions, dict) or not predictions:
        raise TypeError(f"predictions: expected a non-empty dict of source -> map, got "
                        f"{type(predictions).__name__}")
    unknown = [s for s in predictions if s not in SOURCES]
    if unknown:
        raise ValueError(f"predictions: unknown source(s) {unknown!r}; known: {list(SOURCES)}")
    if not isinstance(prediction_std, dict) or set(prediction_std) != set(predictions):
        got = sorted(prediction_std) if isinstance(prediction_std, dict) else prediction_std
        raise ValueError(f"prediction_std: expected one entry per source {sorted(predictions)!r}, "
                         f"got {got!r}")
    return tuple(s for s in SOURCES if s in predictions)


def _wrap_lag(d):
    """Lag differences modulo 180 deg into [-90, 90): the signed lag is defined modulo 180."""
    return np.mod(d + 90.0, 180.0) - 90.0


def _lag_inputs(sources, shape, measured_lag, measured_lag_std, predicted_lag, predicted_lag_std):
    if measured_lag is None:
        # Predicted lags come with every set of predictions; without a measured lag they
        # have nothing to be compared with (Diagnosis.uses_lag records it). A measured
        # lag std alone is a caller's slip.
        if measured_lag_std is not None:
            raise ValueError("measured_lag_std given without measured_lag; pass the measured "
                             "phase lag map too, or neither")
        return None
    lag = _real_map(measured_lag, shape, "measured_lag")
    lag_std = None if measured_lag_std is None else _std_map(measured_lag_std, shape, "measured_lag_std")
    predicted_lag = dict(predicted_lag or {})
    predicted_lag_std = dict(predicted_lag_std or {})
    for name, d in (("predicted_lag", predicted_lag), ("predicted_lag_std", predicted_lag_std)):
        extra = sorted(set(d) - set(sources))
        if extra:
            raise ValueError(f"{name}: source(s) {extra!r} are not among the predictions "
                             f"{list(sources)!r}")
    for heat in ("model", "lateral"):
        if heat in sources and heat not in predicted_lag:
            raise ValueError(f"predicted_lag: the {heat!r} source needs the heat model's phase lag "
                             "(degrees); adiabatic sources default to a lag of 0")
    pl = [_real_map(predicted_lag.get(s, 0.0), shape, f"predicted_lag[{s!r}]") for s in sources]
    pls = [_std_map(predicted_lag_std.get(s, 0.0), shape, f"predicted_lag_std[{s!r}]") for s in sources]
    return lag, lag_std, pl, pls


def diagnose(measured, measured_std, predictions, prediction_std, *, valid=None,
             measured_lag=None, measured_lag_std=None, predicted_lag=None,
             predicted_lag_std=None, lag_std_floor=1.0, fit_threshold=3.0, distinguish=1.0,
             secondary=("model",)):
    """Which source explains each pixel's thermoelastic ratio.

    Parameters
    ----------
    measured : (Y, X) ndarray
        Measured ratio dT/T0 (signed in-phase range over mean temperature, dimensionless).
    measured_std : (Y, X) ndarray or float
        Standard deviation of ``measured`` (lock-in noise), dimensionless.
    predictions : dict of str to (Y, X) ndarray
        Predicted ratio per source (keys from :data:`fusion.datamodel.SOURCES`); for
        ``"model"`` the in-phase part of the heat model's surface response.
    prediction_std : dict of str to (Y, X) ndarray or float
        Standard deviation of each prediction: strain noise propagated through the law
        combined with the stated property uncertainty. Same keys as ``predictions``.
    valid : (Y, X) bool ndarray, optional
        Pixels to diagnose; others become ``no_data``.
    measured_lag : (Y, X) ndarray, optional
        Measured phase lag in degrees, ``-degrees(arctan(Im C / Re C))``. When given the
        lag enters the z-scores, the fit test, the distinction test and the probabilities.
    measured_lag_std : (Y, X) ndarray or float, optional
        Its standard deviation in degrees. Default: propagated from ``measured_std``
        assuming equal noise in both lock-in quadratures,
        ``degrees(measured_std * cos(lag) / |measured|)``, capped at 180.
    predicted_lag : dict of str to (Y, X) ndarray or float, optional
        Predicted lag per source in degrees; adiabatic sources default to 0, ``"model"``
        must be given (the heat model's lag). Ignored without ``measured_lag`` (then
        ``Diagnosis.uses_lag`` is False).
    predicted_lag_std : dict of str to (Y, X) ndarray or float, optional
        Standard deviation of each predicted lag in degrees (default 0).
    secondary : tuple of str, default ("model",)
        Sources that win a pixel only where no layer source fits, in order of preference:
        each is named only where none before it fits (see Notes).
    lag_std_floor : float, default 1.0
        Systematic lag uncertainty in degrees (reference phase, camera timing) added in
        quadrature to every lag comparison, so that the lag never counts as more
        certain than this.
    fit_threshold : float, default 3.0
        A source fits a pixel when ``|z| <= fit_threshold`` in the ratio and (when used)
        in the lag.
    distinguish : float, default 1.0
        Two fitting sources whose predictions differ by less than ``distinguish``
        combined standard deviations (in the ratio and, when used, in the lag) cannot be
        told apart at that pixel.

    Returns
    -------
    Diagnosis
        Residual and z-score maps (float32, dimensionless), source map (int8 CF flags),
        probabilities (float32, dimensionless), surface fraction (float32), area
        fractions per category.

    Notes
    -----
    Per source j, the ratio z-score is ``z_j = (m - p_j) / s_j`` with
    ``s_j = sqrt(sigma_m**2 + sigma_j**2)``; the lag z-score is
    ``zl_j = wrap(lag_m - lag_j) / sl_j`` with
    ``sl_j = sqrt(sigma_lag_m**2 + lag_std_floor**2 + sigma_lag_j**2)``, the difference
    wrapped modulo 180 degrees. Ratio and lag errors are treated as independent (the
    lag noise comes mostly from the quadrature component, the ratio noise from the
    in-phase component).

    The likelihood of source j is the Gaussian density
    ``N(m; p_j, s_j**2) * N(lag_m; lag_j, sl_j**2)`` (the lag factor only when the lag
    is used). ``probability`` is that likelihood normalised over the sources that fit
    the pixel, with equal prior weight on every source; sources that do not fit get 0.

    Decision rule for ``source_layer`` at each valid pixel:

    1. if no source fits -> ``no_source_fits``;
    2. best = the fitting source of largest likelihood (the argmax of ``probability``),
       taken among the layer sources when any of them fits: a ``secondary`` source (by
       default ``"model"``, the heat model, which mixes layers) is named only where no
       layer source fits on its own, and it takes part in step 3 only then; with several
       secondary sources (the run passes ``("lateral", "model")``: the lateral heat model
       contains the through-thickness one as its uniform-field limit) the first that fits
       is taken;
    3. if another fitting source's prediction lies within ``distinguish`` combined
       standard deviations of the best's -- in the ratio,
       ``|p_k - p_best| < distinguish * sqrt(sigma_m**2 + sigma_k**2 + sigma_best**2)``,
       and, when used, likewise in the lag -> ``indistinguishable``, and the best source
       with every such close one is recorded in ``tied``;
    4. otherwise the best source.

    The best source is taken among the fitting ones so that the map and the
    probabilities never disagree. The pair uncertainty adds the prediction
    uncertainties in quadrature; predictions that share strain noise are correlated,
    so this is conservative (more pixels called indistinguishable, never fewer).

    The surface fraction solves ``m = beta * p_surface_ply + (1 - beta) * p_laminate``
    from the in-phase ratios, where ``|p_surface_ply - p_laminate|`` is at least the
    pair's combined standard deviation; beta is not clipped to [0, 1] (values outside
    say that the pixel is not such a mixture). Its standard deviation is
    ``sqrt(sigma_m**2 + beta**2 sigma_sp**2 + (1 - beta)**2 sigma_lam**2) / |p_sp - p_lam|``.

    A pixel is ``no_data`` when ``valid`` is False there or any of its inputs is NaN or
    infinite or a combined standard deviation is 0; the decision at one pixel never
    depends on another pixel.

    References
    ----------
    .. [1] Taylor, J. R., *An Introduction to Error Analysis*, 2nd ed., University
       Science Books, 1997 (propagation of uncertainties, the normal distribution).
    .. [2] Bishop, C. M., *Pattern Recognition and Machine Learning*, Springer, 2006,
       section 4.2 (posterior class probabilities from likelihoods and equal priors).

    Examples
    --------
    A pixel measured at the laminate's prediction, 30 sigma from the surface ply's:

    >>> import numpy as np
    >>> m = np.full((1, 1), -1.0e-4)
    >>> d = diagnose(m, 2e-6, {"surface_ply": np.full((1, 1), -1.6e-4),
    ...                        "laminate": np.full((1, 1), -1.0e-4)},
    ...              {"surface_ply": 1e-6, "laminate": 1e-6})
    >>> bool(d.category("laminate")[0, 0]), float(d.zscore["laminate"][0, 0])
    (True, 0.0)
    """
    m = np.asarray(measured)
    if m.ndim != 2 or m.dtype.kind not in "fiu":
        raise ValueError(f"measured: expected a (Y, X) real array, got shape {m.shape!r} "
                         f"dtype {m.dtype!r}")
    shape = m.shape
    sm = _std_map(measured_std, shape, "measured_std")
    sources = _order_sources(predictions, prediction_std)
    pred = [_real_map(predictions[s], shape, f"predictions[{s!r}]") for s in sources]
    pstd = [_std_map(prediction_std[s], shape, f"prediction_std[{s!r}]") for s in sources]
    ok_in = np.ones(shape, bool) if valid is None else _bool_map(valid, shape, "valid")
    lag = _lag_inputs(sources, shape, measured_lag, measured_lag_std, predicted_lag,
                      predicted_lag_std)
    floor = _positive(lag_std_floor, "lag_std_floor", allow_zero=True)
    thr = _positive(fit_threshold, "fit_threshold")
    dist = _positive(distinguish, "distinguish", allow_zero=True)

    n = len(sources)
    codes = np.array([SOURCES.index(s) for s in sources], dtype=np.int8)
    res = np.full((n,) + shape, np.nan, np.float32)
    zsc = np.full((n,) + shape, np.nan, np.float32)
    lres = np.full((n,) + shape, np.nan, np.float32) if lag else None
    lzsc = np.full((n,) + shape, np.nan, np.float32) if lag else None
    prob = np.full((n,) + shape, np.nan, np.float32)
    layer = np.full(shape, NO_DATA, np.int8)
    tied = np.zeros(shape, np.int8)
    beta = np.full(shape, np.nan, np.float32)
    beta_std = np.full(shape, np.nan, np.float32)
    ok_all = np.zeros(shape, bool)
    i_sp = sources.index("surface_ply") if "surface_ply" in sources else None
    i_lam = sources.index("laminate") if "laminate" in sources else None

    rows = max(1, _BLOCK_PIXELS // max(1, shape[1]))
    for r0 in range(0, shape[0], rows):
        sl = slice(r0, r0 + rows)
        mb = m[sl].astype(np.float64)
        smb = sm[sl].astype(np.float64)
        P = np.stack([p[sl] for p in pred]).astype(np.float64)
        SP = np.stack([p[sl] for p in pstd]).astype(np.float64)
        # Invalid pixels are computed along with the rest and masked afterwards; their NaN
        # and zero-sigma arithmetic is expected and stays inside this block.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            s = np.sqrt(smb ** 2 + SP ** 2)
            r = mb - P
            z = r / s
            ll = -0.5 * z ** 2 - np.log(s)
            fits = np.abs(z) <= thr
            ok = (ok_in[sl] & np.isfinite(mb) & np.isfinite(smb)
                  & np.all(np.isfinite(P) & np.isfinite(SP) & (s > 0), axis=0))
            if lag:
                lm = lag[0][sl].astype(np.float64)
                if lag[1] is None:
                    slm = np.degrees(smb * np.cos(np.radians(lm)) / np.abs(mb))
                    slm = np.minimum(np.abs(slm), _LAG_STD_CAP)
                else:
                    slm = lag[1][sl].astype(np.float64)
                L = np.stack([p[sl] for p in lag[2]]).astype(np.float64)
                SL = np.stack([p[sl] for p in lag[3]]).astype(np.float64)
                sll = np.sqrt(slm ** 2 + floor ** 2 + SL ** 2)
                lr = _wrap_lag(lm - L)
                lz = lr / sll
                ll = ll - 0.5 * lz ** 2 - np.log(sll)
                fits &= np.abs(lz) <= thr
                ok &= (np.isfinite(lm) & np.isfinite(slm)
                       & np.all(np.isfinite(L) & np.isfinite(SL) & (sll > 0), axis=0))

            fits &= ok
            anyfit = fits.any(axis=0)
            ll_fit = np.where(fits, ll, -np.inf)
            top = np.where(anyfit, ll_fit.max(axis=0), 0.0)
            e = np.exp(ll_fit - top)
            tot = e.sum(axis=0)
            pr = e / np.where(tot > 0, tot, 1.0)
            # The source map answers "which layer": a secondary source (a heat model, a
            # mixture of layers) is named only where no layer source fits on its own, and
            # only where no secondary source before it fits.
            tier = np.array([0 if src not in secondary else 1 + secondary.index(src)
                             for src in sources])[:, None, None]
            top_tier = np.where(fits, tier, len(secondary) + 1).min(axis=0)
            cand = fits & (tier == top_tier[None])
            best = np.argmax(np.where(cand, ll, -np.inf), axis=0)

            bi = best[None]
            pb = np.take_along_axis(P, bi, 0)
            spb = np.take_along_axis(SP, bi, 0)
            close = np.abs(P - pb) < dist * np.sqrt(smb ** 2 + SP ** 2 + spb ** 2)
            if lag:
                lb = np.take_along_axis(L, bi, 0)
                slb = np.take_along_axis(SL, bi, 0)
                close &= (np.abs(_wrap_lag(L - lb))
                          < dist * np.sqrt(slm ** 2 + floor ** 2 + SL ** 2 + slb ** 2))
            others = cand & close & (np.arange(n)[:, None, None] != bi)
            indist = others.any(axis=0)
            # which sources tie: the best one and those within reach of it (bit per source)
            members = others | (np.arange(n)[:, None, None] == bi)
            bits = np.tensordot((1 << codes.astype(np.int64)), members, axes=(0, 0))

            if i_sp is not None and i_lam is not None:
                gap = P[i_sp] - P[i_lam]
                pair = np.sqrt(smb ** 2 + SP[i_sp] ** 2 + SP[i_lam] ** 2)
                defined = ok & (np.abs(gap) >= pair) & (gap != 0)
                b = (mb - P[i_lam]) / gap
                bs = np.sqrt(smb ** 2 + b ** 2 * SP[i_sp] ** 2
                             + (1 - b) ** 2 * SP[i_lam] ** 2) / np.abs(gap)
                beta[sl] = np.where(defined, b, np.nan)
                beta_std[sl] = np.where(defined, bs, np.nan)

        okb = ok[None]
        res[:, sl] = np.where(okb, r, np.nan)
        zsc[:, sl] = np.where(okb, z, np.nan)
        if lag:
            lres[:, sl] = np.where(okb, lr, np.nan)
            lzsc[:, sl] = np.where(okb, lz, np.nan)
        prob[:, sl] = np.where(okb, pr, np.nan)
        lay = np.where(~anyfit, NO_SOURCE_FITS, np.where(indist, INDISTINGUISHABLE, codes[best]))
        layer[sl] = np.where(ok, lay, NO_DATA).astype(np.int8)
        tied[sl] = np.where(ok & anyfit & indist, bits, 0).astype(np.int8)
        ok_all[sl] = ok

    values, meanings = source_flags(sources)
    n_valid = int(ok_all.sum())
    area = {}
    for v, name in zip(values, meanings):
        if v == NO_DATA:
            continue
        area[name] = float(np.count_nonzero(layer == v) / n_valid) if n_valid else 0.0
    if n_valid == 0:
        logger.warning("diagnose: no valid pixel among %d; every pixel is no_data", layer.size)
    else:
        logger.debug("diagnose: %d valid pixels, area fractions %s", n_valid, area)
    return Diagnosis(
        sources=sources,
        residual={s: res[i] for i, s in enumerate(sources)},
        zscore={s: zsc[i] for i, s in enumerate(sources)},
        lag_residual={s: lres[i] for i, s in enumerate(sources)} if lag else {},
        lag_zscore={s: lzsc[i] for i, s in enumerate(sources)} if lag else {},
        source_layer=layer, probability=prob, surface_fraction=beta,
        surface_fraction_std=beta_std, valid=ok_all, flag_values=tuple(values),
        flag_meanings=tuple(meanings), area_fraction=area, n_valid=n_valid,
        uses_lag=bool(lag), tied=tied,
        settings={"fit_threshold": thr, "distinguish": dist, "lag_std_floor": floor},
    )
