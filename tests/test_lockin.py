"""Lock-in against independent references.

Synthetic stacks come from a forward model written here with complex exponentials,
q(t) = q0 + r (t - t_mid) + Re(C/2 e^{i theta}) + Re(C2/2 e^{2 i theta}), not from the
module's basis code. Expected standard errors are the least-squares covariance
sigma^2 (X^T X)^-1 of that model ([DraperSmith1998] ch. 5; [Kay1993] ch. 4: Fourier
coefficients of a sinusoid in white noise have variance 2 sigma^2 / N — the 1/sqrt(N)
law; chapter numbers from memory; keys of docs/references.md).
"""

import math
import tracemalloc

import numpy as np
import pytest

from fusion.thermal import LockinResult, estimate_frequency, lockin


def forward(t, shape, rng, *, T0=295.0, dT=-0.8, dTq=0.12, drift=2e-4, C2=0.06 + 0.02j, f=5.3,
            phi=0.4, sigma=0.02, dtype=np.float64):
    """Frames (F, Y, X) of the model above plus white Gaussian noise of std sigma (K)."""
    t = np.asarray(t, float)
    theta = 2 * np.pi * f * t + phi
    tm = 0.5 * (t[0] + t[-1])
    y = (T0 + drift * (t - tm) + np.real((dT + 1j * dTq) / 2 * np.exp(1j * theta))
         + np.real(C2 / 2 * np.exp(2j * theta)))
    noise = sigma * rng.standard_normal((t.size,) + tuple(shape))
    return (y[:, None, None] + noise).astype(dtype)


def ls_covariance(t, f, phi):
    """(X^T X)^-1 of the regressors [1, t - t_mid, cos th, sin th, cos 2th, sin 2th] (t in s)."""
    theta = 2 * np.pi * f * t + phi
    X = np.column_stack([np.ones_like(t), t - 0.5 * (t[0] + t[-1]), np.cos(theta), np.sin(theta),
                         np.cos(2 * theta), np.sin(2 * theta)])
    return np.linalg.inv(X.T @ X), X


def zcheck(est, truth, sd, name):
    """Estimates over pixels: mean error within 3 standard errors of the mean, z spread ~1."""
    z = (np.asarray(est, float).ravel() - truth) / sd
    n = z.size
    assert abs(z.mean()) < 3.0 / math.sqrt(n), f"{name}: mean z {z.mean():.3f} over {n} pixels"
    # the spread of n standard normals is 1 within ~1/sqrt(2n) (2.2 % for 1024): 10 % is > 4 sigma
    assert 0.9 < z.std() < 1.1, f"{name}: z spread {z.std():.3f}"


def test_recovers_known_parameters_within_predicted_errors(rng):
    # Independent forward model (``forward``, complex exponentials) against the least-squares
    # covariance sigma^2 (X^T X)^-1 computed here with numpy (Draper & Smith 1998).
    fs, n, sigma, f, phi = 37.0, 600, 0.02, 5.3, 0.4
    t = np.arange(n) / fs
    frames = forward(t, (32, 32), rng, sigma=sigma, f=f, phi=phi)
    load = 5.0 + 2.0 * np.cos(2 * np.pi * f * t + phi)   # load in phase with theta
    r = lockin(frames, frame_rate=fs, frequency=f, load=load)
    assert isinstance(r, LockinResult) and r.valid.all()
    assert r.reference_phase == pytest.approx(phi, abs=1e-9)  # noise-free load: exact fit
    cov, _ = ls_covariance(t, f, phi)
    sd = sigma * np.sqrt(np.diag(cov))
    zcheck(r.T0, 295.0, sd[0], "T0")
    zcheck(r.drift_rate, 2e-4, sd[1], "drift")
    zcheck(r.delta_T, -0.8, 2 * sd[2], "delta_T")                 # Re C = 2a
    zcheck(r.delta_T_quadrature, 0.12, 2 * sd[3], "quadrature")   # Im C = -2b
    # |C2| = 0.0632 K is 28 sigma: the Rice bias sigma^2/(2|C2|) is < 1 % of sigma
    zcheck(r.second_harmonic, abs(0.06 + 0.02j), 2 * sd[4], "second harmonic")
    # residual-based noise: s has relative sd 1/sqrt(2 (N-6)) = 2.9 % per pixel, ~0.1 % over
    # 1024 pixels, so the mean is within 1 % of the truth
    assert np.mean(r.residual_std) == pytest.approx(sigma, rel=0.01)
    assert np.mean(r.delta_T_std) == pytest.approx(2 * sd[2], rel=0.01)
    assert np.allclose(r.snr, np.abs(r.delta_T) / r.delta_T_std, rtol=1e-6)
    assert np.allclose(r.second_harmonic_ratio, r.second_harmonic / r.magnitude, rtol=1e-6)
    for name in ("T0", "delta_T", "phase", "snr", "magnitude", "drift_rate"):
        assert getattr(r, name).dtype == np.float32 and getattr(r, name).shape == (32, 32)
    assert set(r.to_maps()) == {"T0", "delta_T", "delta_T_std", "delta_T_quadrature", "phase", "snr"}


def test_matches_numpy_lstsq_per_pixel_with_jittered_times(rng):
    # uneven clock: the normal equations must be those of the actual times
    n = 500
    t = np.cumsum(rng.uniform(0.8, 1.2, n)) / 50.0
    f = 3.1
    frames = forward(t, (3, 4), rng, f=f, phi=0.0, sigma=0.05)
    r = lockin(frames, times=t, frequency=f)
    _, X = ls_covariance(t, f, 0.0)
    for (i, j) in [(0, 0), (1, 2), (2, 3)]:
        beta, res, *_ = np.linalg.lstsq(X, frames[:, i, j], rcond=None)   # NumPy reference
        s = math.sqrt(res[0] / (n - 6))
        cov = np.linalg.inv(X.T @ X)
        # float32 outputs: 1e-6 relative, and 1e-6 K absolute for near-zero terms
        assert r.T0[i, j] == pytest.approx(beta[0], rel=1e-6)
        assert r.delta_T[i, j] == pytest.approx(2 * beta[2], rel=1e-5, abs=1e-6)
        assert r.delta_T_quadrature[i, j] == pytest.approx(-2 * beta[3], rel=1e-5, abs=1e-6)
        assert r.drift_rate[i, j] == pytest.approx(beta[1], rel=1e-4, abs=1e-7)
        assert r.residual_std[i, j] == pytest.approx(s, rel=1e-5)
        assert r.delta_T_std[i, j] == pytest.approx(2 * s * math.sqrt(cov[2, 2]), rel=1e-5)


def test_pure_sinusoid_matches_numpy_fft_and_scipy_periodogram():
    from scipy.signal import periodogram

    fs, n, f = 64.0, 512, 5.0                      # 40 whole periods: FFT bin k = 40
    t = np.arange(n) / fs
    amp = np.array([[0.5, 0.2], [1.3, 0.05]])
    psi = np.deg2rad(np.array([[10.0, -75.0], [160.0, -170.0]]))
    frames = 300.0 + amp * np.cos(2 * np.pi * f * t[:, None, None] + psi)
    r = lockin(frames, frame_rate=fs, frequency=f)
    k = int(round(f * n / fs))
    X = np.fft.rfft(frames, axis=0)[k]            # = (N/2) A e^{i psi}
    C = 4 * X / n                                  # peak-to-peak complex amplitude
    np.testing.assert_allclose(r.delta_T, C.real, atol=2e-6)          # float32 of ~1 K values
    np.testing.assert_allclose(r.delta_T_quadrature, C.imag, atol=2e-6)
    np.testing.assert_allclose(r.phase, np.degrees(np.angle(C)), atol=1e-3)
    # one-sided "spectrum" scaling with a boxcar window gives A^2 / 2 at the bin (SciPy docs)
    _, pxx = periodogram(frames, fs=fs, window="boxcar", detrend=False, scaling="spectrum", axis=0)
    np.testing.assert_allclose(r.magnitude / 2, np.sqrt(2 * pxx[k]), rtol=1e-5)
    np.testing.assert_allclose(r.T0, 300.0, rtol=1e-7)


@pytest.mark.parametrize("n", [250, 1000, 4000])
def test_noise_falls_as_one_over_sqrt_n(n, rng):
    sigma, fs, f = 0.02, 50.0, 7.0                 # 20 mK NETD (typical, common practice)
    frames = forward(np.arange(n) / fs, (32, 64), rng, sigma=sigma, f=f, phi=0.0, dtype=np.float32)
    r = lockin(frames, frame_rate=fs, frequency=f)
    expected = sigma * math.sqrt(8.0 / n)          # std of Re C = 2 sigma sqrt(2/N) (Kay, ch. 4)
    empirical = float(np.std(r.delta_T))
    # spread of 2048 pixels estimates the std within 1.6 %: 10 % is six of those
    assert empirical == pytest.approx(expected, rel=0.10)
    assert float(np.mean(r.delta_T_std)) == pytest.approx(empirical, rel=0.10)


def test_typical_camera_figure_20mK_2000_frames(rng):
    # common practice: a 20 mK NETD camera over 2,000 frames gives ~0.6 mK amplitude noise
    n, sigma = 2000, 0.02
    frames = forward(np.arange(n) / 100.0, (32, 32), rng, sigma=sigma, f=9.0, phi=0.0, dtype=np.float32)
    r = lockin(frames, frame_rate=100.0, frequency=9.0)
    amplitude_noise = float(np.std(r.delta_T / 2))         # half the peak-to-peak, one component
    assert amplitude_noise == pytest.approx(sigma * math.sqrt(2 / n), rel=0.1)   # 0.632 mK
    assert 0.5e-3 < amplitude_noise < 0.7e-3


def test_undersampled_with_known_frequency(rng):
    # Least squares needs no Nyquist condition when the frequency is known (Kay 1993 ch. 4,
    # [Kay1993]): the same covariance as above, computed here with numpy.
    fs, f, n = 7.0, 10.3, 2000                     # below 2f; f aliases to 3.3 Hz, 2f to 0.4 Hz
    t = np.arange(n) / fs
    frames = forward(t, (16, 16), rng, f=f, phi=0.0, sigma=0.02)
    r = lockin(frames, frame_rate=fs, frequency=f)
    assert any("undersampled" in w for w in r.warnings)
    cov, _ = ls_covariance(t, f, 0.0)
    zcheck(r.delta_T, -0.8, 2 * 0.02 * math.sqrt(cov[2, 2]), "delta_T undersampled")
    zcheck(r.delta_T_quadrature, 0.12, 2 * 0.02 * math.sqrt(cov[3, 3]), "quadrature undersampled")


@pytest.mark.parametrize("f, fs, n", [
    (10.0, 20.0, 400),    # f at half the frame rate: sin vanishes
    (20.0, 20.0, 400),    # f at the frame rate: cos is the constant
    (10.0, 30.0, 400),    # 2f aliases onto -f: second harmonic = fundamental
    (5.0, 20.0, 400),     # 2f at half the frame rate
    (10.001, 20.0, 200),  # nearly at half the frame rate over a short record
    (1.0, 100.0, 50),     # half a cycle recorded
])
def test_refuses_sampling_that_cannot_resolve_the_frequency(f, fs, n, rng):
    frames = rng.standard_normal((n, 2, 2))
    with pytest.raises(ValueError, match=rf"frequency {f!r} Hz with frame rate {fs!r} Hz"):
        lockin(frames, frame_rate=fs, frequency=f)


def test_bad_pixels_masked_without_touching_neighbours(rng):
    # not a physics check: masking of bad pixels, compared with the same pass on clean frames
    n = 300
    clean = forward(np.arange(n) / 40.0, (8, 8), rng, f=6.0, phi=0.0, dtype=np.float32)
    bad = clean.copy()
    bad[17, 1, 1] = np.nan
    bad[40, 6, 2] = np.inf
    bad[99, 3, 3] = 400.0             # above the saturation threshold
    bad[:, 5, 5] = 296.0              # dead: constant
    kw = dict(frame_rate=40.0, frequency=6.0, saturation=350.0)
    r = lockin(bad, **kw)
    ref = lockin(clean, **kw)
    assert r.bad_pixels == {"nonfinite": 2, "saturated": 1, "clipped": 0, "dead": 1}
    masked = np.zeros((8, 8), bool)
    masked[[1, 6, 3, 5], [1, 2, 3, 5]] = True
    assert np.array_equal(~r.valid, masked)
    for name in ("T0", "delta_T", "delta_T_std", "phase", "snr", "drift_rate"):
        a = getattr(r, name)
        assert np.all(np.isnan(a[masked]))
        # per-pixel sums: the neighbours are bit-for-bit those of the clean stack
        assert np.array_equal(a[~masked], getattr(ref, name)[~masked]), name
    assert any("masked" in w for w in r.warnings)


def test_int16_counts_fitted_directly_without_float_copy(rng):
    # not a physics check: counts calibrated inside the pass equal the pass on kelvin, and
    # no float copy of the stack is made
    gain, offset = 0.004, 250.0                     # K per count, K
    temps = forward(np.arange(400) / 50.0, (64, 64), rng, f=4.0, phi=0.0)
    counts = np.round((temps - offset) / gain).astype(np.int16)
    as_kelvin = counts.astype(np.float64) * gain + offset
    expect = lockin(as_kelvin, frame_rate=50.0, frequency=4.0)
    lockin(counts[:, :2, :2], frame_rate=50.0, frequency=4.0)   # compile outside the trace
    tracemalloc.start()
    got = lockin(counts, frame_rate=50.0, frequency=4.0, gain=gain, offset=offset)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    # a float32 copy of the stack would be 6.6 MB; sums and maps need ~0.5 MB
    assert peak < 0.25 * counts.size * 4
    for name in ("T0", "delta_T", "delta_T_quadrature", "delta_T_std", "drift_rate"):
        np.testing.assert_allclose(getattr(got, name), getattr(expect, name), rtol=2e-5, atol=1e-6)


def _lstsq_maps(frames, t, f):
    """delta_T and residual std per pixel from numpy.linalg.lstsq in float64 (the reference)."""
    _, X = ls_covariance(t, f, 0.0)
    Y = frames.reshape(frames.shape[0], -1).astype(np.float64)
    beta, res, *_ = np.linalg.lstsq(X, Y, rcond=None)
    return (2 * beta[2]).reshape(frames.shape[1:]), np.sqrt(res / (t.size - 6)).reshape(frames.shape[1:])


def test_float32_work_matches_float64_lstsq_with_large_drift_and_signal(rng):
    # Reference library: numpy.linalg.lstsq in float64 on the same frames.
    # 2 K range and a 5 K drift in 20 mK noise: the offsets reach ~3.5 K while the residual
    # is 2e-4 K^2 per frame. The sub-block reference keeps the drift out of the products.
    n, fs, f = 1500, 100.0, 7.0
    t = np.arange(n) / fs
    frames = forward(t, (16, 16), rng, dT=-2.0, drift=5.0 / t[-1], f=f, phi=0.0, sigma=0.02,
                     dtype=np.float32)
    r = lockin(frames, frame_rate=fs, frequency=f)
    assert not any("float64" in w for w in r.warnings)
    dT, s = _lstsq_maps(frames, t, f)
    # coefficients: 1e-3 of their standard error, plus the float32 rounding of a 2 K output
    assert np.max(np.abs(r.delta_T - dT) / r.delta_T_std) < 1e-3 + 2.4e-7 / r.delta_T_std.min()
    # noise: 6e-8 / rho with rho = 4e-4 / ~2 K^2 -> ~3e-4 (lockin Notes)
    np.testing.assert_allclose(r.residual_std, s, rtol=1e-3)


def test_refits_in_float64_when_float32_cannot_resolve_the_noise(rng):
    # Reference library: numpy.linalg.lstsq in float64 on the same frames.
    # 5 K range in 2 mK noise (rho ~ 1e-6): float32 sums would miss the residual by ~5 %
    n, fs, f = 1000, 100.0, 7.0
    t = np.arange(n) / fs
    frames = forward(t, (8, 8), rng, dT=-5.0, f=f, phi=0.0, sigma=0.002, dtype=np.float32)
    r = lockin(frames, frame_rate=fs, frequency=f)
    assert any("refitted in float64" in w for w in r.warnings)
    dT, s = _lstsq_maps(frames, t, f)
    np.testing.assert_allclose(r.residual_std, s, rtol=1e-5)
    np.testing.assert_allclose(r.delta_T, dT, rtol=1e-6)
    forced = lockin(frames, frame_rate=fs, frequency=f, precision="float64")
    assert not any("refitted" in w for w in forced.warnings)
    np.testing.assert_array_equal(forced.residual_std, r.residual_std)
    with pytest.raises(ValueError, match="precision must be 'auto' or 'float64'"):
        lockin(frames, frame_rate=fs, frequency=f, precision="half")


@pytest.mark.parametrize("dtype", [np.uint8, np.int8, np.uint16, np.int32, np.uint32, np.float16])
def test_every_stored_dtype_matches_its_float64_copy(dtype, rng):
    # not a physics check: float32 work (8/16-bit counts, float16) and float64 work (32-bit
    # counts) against the package's float64 pass on the same values, which the tests above
    # check against numpy.linalg.lstsq
    temps = forward(np.arange(333) / 40.0, (6, 5), rng, f=6.0, phi=0.0, sigma=0.05)
    if np.dtype(dtype).kind in "iu":   # counts of 0.02 K (8 bit) or 0.004 K, inside the type's range
        info = np.iinfo(dtype)
        mid = min((int(info.min) + int(info.max)) // 2, 2**20)
        values = np.round((temps - 295.0) / (0.02 if info.bits == 8 else 0.004) + mid).astype(dtype)
    else:
        values = temps.astype(dtype)
    got = lockin(values, frame_rate=40.0, frequency=6.0)
    ref = lockin(values.astype(np.float64), frame_rate=40.0, frequency=6.0)
    sd = ref.delta_T_std
    for name in ("T0", "delta_T", "delta_T_quadrature", "second_harmonic"):
        # 1e-4 of a standard error, and the float32 rounding of the output (T0 ~ 295)
        err = np.abs(getattr(got, name) - getattr(ref, name))
        assert np.all(err <= 1e-4 * sd + 4e-7 * np.abs(getattr(ref, name))), name
    np.testing.assert_allclose(got.delta_T_std, sd, rtol=1e-4)


def test_load_on_own_clock_gives_reference_phase_and_lag(rng):
    # Independent forward model: a load on its own 1 kHz clock and a temperature that follows
    # it with a known delay; the expected in-phase and quadrature parts are written out below
    # from the lock-in convention (DEVELOPERS.md) with numpy's cos and sin.
    f, delay, K = 10.0, 0.002, 0.1                  # 2 ms thermal delay = 7.2 degrees at 10 Hz
    tl = np.arange(-0.5, 21.0, 1e-3)                # load at 1 kHz, starting before the frames
    phiL = -1.1
    load = 5.0 + 2.0 * np.cos(2 * np.pi * f * tl + phiL)
    t = 0.123 + np.arange(1000) / 50.0             # frames at 50 Hz
    # tension cools: T follows -K times the load, delayed
    T = 293.0 - K * 2.0 * np.cos(2 * np.pi * f * (t - delay) + phiL) / 2
    frames = T[:, None, None] + 0.001 * rng.standard_normal((t.size, 4, 4))
    r = lockin(frames, times=t, load=load, load_times=tl)      # frequency from the load
    assert r.frequency == pytest.approx(f, rel=1e-6)
    assert r.reference_phase == pytest.approx(phiL, abs=1e-4)
    d = np.deg2rad(360 * f * delay)
    # C = -K dL e^{-i delta}: Re C = -K dL cos(delta) (cooling), Im C = +K dL sin(delta)
    np.testing.assert_allclose(r.delta_T, -K * 2.0 * math.cos(d), atol=3e-4)
    np.testing.assert_allclose(r.delta_T_quadrature, K * 2.0 * math.sin(d), atol=3e-4)
    lag = -np.degrees(np.arctan(r.delta_T_quadrature / r.delta_T))   # the project's lag definition
    np.testing.assert_allclose(lag, 7.2, atol=0.2)
    assert r.load is not None and r.load.range == pytest.approx(4.0, rel=1e-6)


def test_dask_array_matches_numpy(rng):
    # not a physics check: a dask array gives the maps of the same numpy stack
    da = pytest.importorskip("dask.array")
    frames = forward(np.arange(333) / 40.0, (12, 10), rng, f=6.0, phi=0.3, dtype=np.float32)
    ref = lockin(frames, frame_rate=40.0, frequency=6.0, saturation=1e9)
    for chunks in [(50, -1, -1), (64, 4, 5)]:       # the second is rechunked to whole frames
        got = lockin(da.from_array(frames, chunks=chunks), frame_rate=40.0, frequency=6.0,
                     saturation=1e9)
        for name in ("T0", "delta_T", "delta_T_quadrature", "second_harmonic"):
            # float32 sub-block sums over other blocks: ~1e-7 of the values
            np.testing.assert_allclose(getattr(got, name), getattr(ref, name), rtol=1e-6, atol=1e-7)
        # the residual carries the sums' rounding divided by residual / sum of squares
        # (rho ~ 2e-3 here: 0.8 K range in 20 mK noise), so ~3e-5 each way (lockin Notes)
        np.testing.assert_allclose(got.delta_T_std, ref.delta_T_std, rtol=2e-4)


def test_rows_joined_into_bands_give_the_pixels_of_a_row_by_row_pass(rng):
    """The pass views narrow frames as bands of joined rows; each pixel's sums are its own,
    so the maps must equal those of one-row stacks (never joined) bit for bit.

    Not a physics check: two memory layouts of the package's own pass compared."""
    from fusion.thermal._kernels import band_rows

    assert band_rows(256, 320, np.int16) == 2                    # 640 float32 work values
    assert band_rows(256, 320, np.float32) == 2
    assert band_rows(256, 320, np.float32, np.float64) == 1      # 320 float64 work values
    assert band_rows(256, 640, np.float32) == 1                  # rows already that long
    assert band_rows(7, 20, np.uint16) == 7 and band_rows(11, 200, np.uint16) == 1
    t = np.arange(150) / 40.0
    counts = np.round(forward(t, (6, 40), rng, f=6.0, sigma=0.05) / 0.01).astype(np.uint16)
    kelvin = forward(t, (4, 3), rng, f=6.0, dtype=np.float32)
    for frames, kw in ((counts, dict(gain=0.01, saturation=60000)), (kelvin, {})):
        assert band_rows(*frames.shape[1:], frames.dtype) == frames.shape[1]
        frames[7, 1, 2] = 60000 if frames.dtype == np.uint16 else np.nan   # one bad pixel
        whole = lockin(frames, frame_rate=40.0, frequency=6.0, **kw)
        for y in range(frames.shape[1]):
            row = lockin(frames[:, y:y + 1].copy(), frame_rate=40.0, frequency=6.0, **kw)
            for name in ("T0", "delta_T", "delta_T_quadrature", "delta_T_std", "phase", "valid"):
                np.testing.assert_array_equal(getattr(whole, name)[y], getattr(row, name)[0], err_msg=name)
        assert sum(whole.bad_pixels.values()) == 1 and not whole.valid[1, 2]


def test_compiled_phase_matches_numpy_arctan2(rng):
    """The solve's branch-free arctan2 (a fitted polynomial) against numpy.arctan2 (reference
    library), on random values, the axes, signed zeros and values far apart in size."""
    from numba import njit

    from fusion.thermal._kernels import atan2_deg

    @njit
    def many(yv, xv, out):
        for i in range(yv.size):
            out[i] = atan2_deg(yv[i], xv[i])

    v = rng.standard_normal(20000) * 10.0 ** rng.uniform(-6, 3, 20000)
    special = np.array([0.0, -0.0, 1.0, -1.0, 1e-30, -1e-30, 1e30, np.inf, -np.inf])
    yv = np.concatenate([v[:10000], np.repeat(special, special.size)])
    xv = np.concatenate([v[10000:], np.tile(special, special.size)])
    ok = ~(np.isinf(yv) | np.isinf(xv))          # infinities never reach it (pixels masked)
    out = np.empty(yv.size)
    many(yv, xv, out)
    want = np.degrees(np.arctan2(yv, xv))
    np.testing.assert_allclose(out[ok], want[ok], rtol=0, atol=2e-7)
    nan = np.full(2, np.nan)
    many(np.array([np.nan, 1.0]), np.array([1.0, np.nan]), nan)
    assert np.isnan(nan).all()


def test_memmap_and_odd_chunks_match_in_memory(rng, tmp_path):
    # not a physics check: a memory-mapped file in odd chunks gives the in-memory maps
    frames = forward(np.arange(301) / 40.0, (9, 7), rng, f=6.0, phi=0.0, dtype=np.float32)
    np.save(tmp_path / "s.npy", frames)
    mm = np.load(tmp_path / "s.npy", mmap_mode="r")
    ref = lockin(frames, frame_rate=40.0, frequency=6.0)
    got = lockin(mm, frame_rate=40.0, frequency=6.0, chunk_frames=7)   # blocks not multiples of 4
    np.testing.assert_allclose(got.delta_T, ref.delta_T, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(got.T0, ref.T0, rtol=1e-7)


def test_memory_mapped_stack_twice_the_budget_stays_under_it(tmp_path):
    # not a physics check: memory use of the streaming pass
    from fusion.bench._lockin import _mmap_peak

    budget = 16 * 2**20
    frac, size = _mmap_peak((410, 128, 160), budget, str(tmp_path))
    assert size >= 2 * budget
    # keeping the mapped pages resident would show >= 2.0 here
    assert frac < 1.0


def test_reference_pass_is_the_numpy_sum(rng):
    # The benchmark's reference pass against numpy's sum (reference library).
    from fusion.bench._lockin import reference_pass

    a = rng.standard_normal((37, 5, 6)).astype(np.float32)
    b = rng.integers(-3000, 3000, size=(9, 3, 4)).astype(np.int16)
    for bands in (False, True):
        np.testing.assert_allclose(reference_pass(a, bands=bands), a.astype(np.float64).sum(axis=0),
                                   rtol=1e-12, atol=1e-9)
        assert np.array_equal(reference_pass(b, bands=bands), b.sum(axis=0, dtype=np.int64))
    # frame chunks sum in float32: ~1e-7 of the values
    np.testing.assert_allclose(reference_pass(a, frame_chunks=True), a.astype(np.float64).sum(axis=0),
                               rtol=1e-5, atol=1e-4)
    assert np.array_equal(reference_pass(b, frame_chunks=True), b.sum(axis=0, dtype=np.int64))


def test_progress_off_a_terminal_is_plain_lines_and_off_is_silent(rng, capsys):
    # not a physics check: progress output
    frames = forward(np.arange(64) / 40.0, (4, 4), rng, f=6.0, phi=0.0)
    lockin(frames, frame_rate=40.0, frequency=6.0, progress=True)
    lines = capsys.readouterr().err.splitlines()
    assert lines and lines[-1] == "lock-in: 100 % (64/64 frames)" and "\r" not in "".join(lines)
    lockin(frames, frame_rate=40.0, frequency=6.0)
    assert capsys.readouterr().err == ""


def test_argument_errors(rng):
    frames = rng.standard_normal((64, 3, 3))
    with pytest.raises(ValueError, match="exactly one of times and frame_rate"):
        lockin(frames, frequency=5.0)
    with pytest.raises(ValueError, match="exactly one of times and frame_rate"):
        lockin(frames, frequency=5.0, frame_rate=40.0, times=np.arange(64) / 40.0)
    with pytest.raises(ValueError, match=r"times must have shape \(64,\)"):
        lockin(frames, frequency=5.0, times=np.arange(10) / 40.0)
    with pytest.raises(ValueError, match="frequency is required"):
        lockin(frames, frame_rate=40.0)
    with pytest.raises(ValueError, match=r"\(frames, rows, cols\)"):
        lockin(frames[0], frame_rate=40.0, frequency=5.0)
    with pytest.raises(TypeError, match="numeric"):
        lockin(frames > 0, frame_rate=40.0, frequency=5.0)
    with pytest.raises(ValueError, match="gain"):
        lockin(frames, frame_rate=40.0, frequency=5.0, gain=0.0)
    with pytest.raises(ValueError, match="frame_rate must be a positive"):
        lockin(frames, frame_rate=-4.0, frequency=5.0)
    with pytest.raises(ValueError, match="at least 12 frames"):
        lockin(frames[:5], frame_rate=40.0, frequency=5.0)


def test_frequency_estimated_from_per_frame_load(rng):
    # The frequency comes from the load as in test_signals.py, whose estimate is checked against
    # the Cramer-Rao bound (Rife & Boorstyn 1974); here within 1e-4 of the frequency built in.
    t = np.arange(800) / 60.0
    load = 2.0 + np.cos(2 * np.pi * 4.7 * t + 0.3) + 0.01 * rng.standard_normal(t.size)
    frames = forward(t, (2, 2), rng, f=4.7, phi=0.3)
    r = lockin(frames, frame_rate=60.0, load=load)
    assert r.frequency == pytest.approx(estimate_frequency(t, load), rel=1e-12)
    assert r.frequency == pytest.approx(4.7, rel=1e-4)
    assert any("estimated" in w for w in r.warnings)


def test_public_api():
    # not a physics check: public names of fusion.thermal
    import fusion.thermal as th

    for name in ("lockin", "LockinResult", "estimate_frequency", "load_reference", "LoadReference"):
        assert name in th.__all__ and hasattr(th, name)
