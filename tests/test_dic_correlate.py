"""Built-in subset correlation: kernels, accuracy on exact synthetic pairs, cross-checks.

Test images are band-limited speckle patterns moved exactly in Fourier space ([Reu2011]), the
method of the DIC Challenge ([Reu2018]); reference libraries are SciPy, scikit-image and
OpenCV (keys of docs/references.md).
"""

import cv2
import numpy as np
import pytest
from scipy import ndimage
from skimage.feature import match_template
from skimage.registration import phase_cross_correlation

from fusion.dic import REASON_CODES, correlate, speckle_image, strain_from_field
from fusion.dic import _icgn as K
from fusion.dic._seed import global_shift, zncc_map

N = 256
SUBSET, STEP = 21, 10  # a coarse grid keeps these accuracy tests quick; they hold at any step


@pytest.fixture(scope="module")
def reference8():
    return speckle_image((N, N), seed=11, bits=8)


def test_bspline_interpolation_matches_scipy(rng):
    # Reference library: scipy.ndimage.map_coordinates(order=3, mode="mirror") evaluates the
    # same cubic B-spline interpolant ([Unser1999]); agreement to float64 rounding of 16-tap sums.
    img = speckle_image((64, 72), seed=1, bits=None) * 255
    ys = rng.uniform(1.0, 61.99, 500)
    xs = rng.uniform(1.0, 69.99, 500)
    ours = K.interpolate(K.prefilter(img), ys, xs)
    ref = ndimage.map_coordinates(img, [ys, xs], order=3, mode="mirror")
    np.testing.assert_allclose(ours, ref, atol=1e-9)


def test_reference_gradients_are_the_spline_derivative():
    # Central differences of scipy's spline interpolant (h = 1e-4 px: truncation
    # ~h^2 f''' ~ 1e-7, rounding ~1e-16 * 255 / h ~ 1e-10 grey levels per px).
    img = speckle_image((64, 64), seed=2, bits=None) * 255
    gx, gy = K.reference_gradients(K.prefilter(img))
    r, c, h = np.arange(5, 59, 7.0), np.arange(6, 58, 5.0), 1e-4
    rr, cc = (a.ravel() for a in np.meshgrid(r, c, indexing="ij"))

    def f(y, x):
        return ndimage.map_coordinates(img, [y, x], order=3, mode="mirror")

    fd_x = (f(rr, cc + h) - f(rr, cc - h)) / (2 * h)
    fd_y = (f(rr + h, cc) - f(rr - h, cc)) / (2 * h)
    ii, jj = rr.astype(int), cc.astype(int)
    np.testing.assert_allclose(gx[ii, jj], fd_x, atol=1e-5)
    np.testing.assert_allclose(gy[ii, jj], fd_y, atol=1e-5)


def test_zncc_map_matches_skimage_match_template(rng):
    # Reference library: skimage.feature.match_template computes the same
    # zero-normalised cross-correlation (Lewis 1995) by another route.
    window = rng.normal(size=(60, 50))
    template = window[20:41, 10:31] + 0.3 * rng.normal(size=(21, 21))
    np.testing.assert_allclose(zncc_map(template, window), match_template(window, template),
                               atol=1e-9)


def test_global_shift_recovers_an_integer_roll(reference8):
    # numpy.roll makes an exact integer shift; the FFT seed must find it.
    moved = np.roll(reference8, (5, -9), axis=(0, 1))
    assert global_shift(reference8.astype(float), moved.astype(float)) == (5, -9)


@pytest.mark.parametrize("s", np.round(np.arange(0.0, 1.01, 0.1), 1))
def test_subpixel_translation_accuracy(reference8, s):
    # DIC Challenge method (Reu et al. 2018): exact Fourier-space translation of a
    # band-limited pattern, 8-bit, noise-free. Our accuracy targets, in the range such
    # studies report for subset correlation (docs/references.md, [Reu2018]; from memory):
    # |bias| <= 0.001 px and std <= 0.003 px. 8-bit quantisation alone gives about
    # 0.0016 px std here.
    u_true, v_true = s, -s
    moved = speckle_image((N, N), seed=11, bits=8, displacement=(u_true, v_true))
    res = correlate(reference8, moved, subset=SUBSET, step=STEP)
    ok = res.valid
    assert ok.mean() > 0.95
    assert abs(np.mean(res.u[ok]) - u_true) <= 0.001
    assert abs(np.mean(res.v[ok]) - v_true) <= 0.001
    assert np.std(res.u[ok]) <= 0.003
    assert np.std(res.v[ok]) <= 0.003


@pytest.mark.parametrize("shift", [(0.37, -0.64), (2.25, 1.5)])
def test_agrees_with_skimage_phase_cross_correlation(reference8, shift):
    # Reference library: skimage.registration.phase_cross_correlation registers
    # "to within 1 / upsample_factor of a pixel" (its documentation), and returns
    # the shift that registers the moving image onto the reference: minus ours.
    # normalization=None: phase normalisation whitens the empty high-frequency
    # band of a band-limited pattern and biases the peak.
    u, v = shift
    moved = speckle_image((N, N), seed=11, bits=8, displacement=(u, v))
    theirs, _, _ = phase_cross_correlation(reference8.astype(float), moved.astype(float),
                                           upsample_factor=100, normalization=None)
    res = correlate(reference8, moved, subset=SUBSET, step=STEP)
    ok = res.valid
    assert np.mean(res.v[ok]) == pytest.approx(-theirs[0], abs=0.01 + 0.001)
    assert np.mean(res.u[ok]) == pytest.approx(-theirs[1], abs=0.01 + 0.001)


@pytest.mark.parametrize("s", [0.0, 0.4])
def test_noise_follows_pan_2008(s):
    # Pan et al., Opt. Express 16 (2008), [Pan2008]: sigma_u ~ sqrt(2) sigma / sqrt(SSSIG)
    # with the same noise sigma in both images. SSSIG is taken from the noise-free pair.
    # Our target: measured std within 1.3x of the prediction (the formula is an
    # approximation; its exact form is from memory). Overlapping
    # subsets (step 10 < 21) leave ~200 independent points over two realisations:
    # ~5 % scatter on the measured std.
    sigma = 2.0 / 255.0
    ref = speckle_image((N, N), seed=21, bits=None)
    moved = speckle_image((N, N), seed=21, bits=None, displacement=(s, 0.0))
    clean = correlate(ref, moved, subset=SUBSET, step=STEP)
    errs = []
    for k in range(2):
        r = speckle_image((N, N), seed=21, bits=None, noise=sigma, noise_seed=100 + k)
        d = speckle_image((N, N), seed=21, bits=None, displacement=(s, 0.0), noise=sigma,
                          noise_seed=200 + k)
        res = correlate(r, d, subset=SUBSET, step=STEP)
        errs.append(np.stack([res.u - clean.u, res.v - clean.v]))
    errs = np.array(errs)
    for axis, sssig in ((0, clean.sssig_x), (1, clean.sssig_y)):
        predicted = np.sqrt(np.nanmean(2.0 * sigma ** 2 / sssig))
        ratio = np.nanstd(errs[:, axis]) / predicted
        assert 1 / 1.3 <= ratio <= 1.3


def _affine(a, b, d, e, c0, r0):
    return lambda x, y: (a * (x - c0) + b * (y - r0), d * (x - c0) + e * (y - r0))


def test_homogeneous_strain_1000_microstrain():
    # Imposed in image axes (x = column, y = row down): u = a x + b y, v = d x + e y.
    # In the specimen frame (X = x, Y = -y, U = u, V = -v): eps_xx = a, eps_yy = e,
    # gamma_xy = dU/dY + dV/dX = -(b + d). Images: exact Fourier-space warps of the
    # pattern (Reu 2011, [Reu2011]). Our target: recovered within 30 microstrain; 16-bit
    # images so quantisation noise (~5 microstrain here) does not mask the method's own
    # error.
    a, b, d, e = 1000e-6, 200e-6, 200e-6, -300e-6
    disp = _affine(a, b, d, e, N / 2, N / 2)
    ref = speckle_image((N, N), seed=3, bits=16)
    moved = speckle_image((N, N), seed=3, bits=16, displacement=disp)
    res = correlate(ref, moved, subset=SUBSET, step=STEP)
    assert res.valid.mean() > 0.95
    exx, eyy, gxy, sxx, syy, sxy = strain_from_field(res.to_field(), window=5, return_std=True)
    # points two or more grid steps inside the border have a complete window; nearer the
    # border the fit is one-sided and noisier, and its reported std says so
    inner = np.zeros(res.rows.shape, bool)
    inner[2:-2, 2:-2] = True
    ok = np.isfinite(exx) & inner.ravel()
    assert ok.sum() >= 400
    edge = np.isfinite(exx) & ~inner.ravel()
    assert np.all(np.abs(exx[edge] - a) <= 30e-6 + 4 * sxx[edge])
    assert np.max(np.abs(exx[ok] - a)) <= 30e-6
    assert np.max(np.abs(eyy[ok] - e)) <= 30e-6
    assert np.max(np.abs(gxy[ok] + (b + d))) <= 30e-6
    # the subset shape function sees the same gradients (image axes)
    for got, want in ((res.dudx, a), (res.dudy, b), (res.dvdx, d), (res.dvdy, e)):
        assert abs(np.nanmean(got) - want) <= 30e-6


def test_homogeneous_strain_8bit_mean():
    # Same field on 8-bit images (exact warps, [Reu2011]): quantisation noise (~0.0016 px)
    # gives ~40 microstrain scatter at a 61 px VSG, but the mean stays within 30 microstrain.
    a, b, d, e = 1000e-6, 0.0, 0.0, -300e-6
    disp = _affine(a, b, d, e, N / 2, N / 2)
    ref = speckle_image((N, N), seed=3)
    moved = speckle_image((N, N), seed=3, displacement=disp)
    exx, eyy, gxy = strain_from_field(correlate(ref, moved, subset=SUBSET, step=STEP).to_field(), window=5)
    assert abs(np.nanmean(exx) - a) <= 30e-6
    assert abs(np.nanmean(eyy) - e) <= 30e-6
    assert abs(np.nanmean(gxy)) <= 30e-6


def test_smooth_field_against_opencv_dense_flow():
    # Cross-check with OpenCV's dense optical flow (DIS and Farneback) on a smooth
    # analytic field. OpenCV states no accuracy figure; on this pattern both flows
    # err by ~0.05 px RMS (their interpolation is not sub-pixel exact; measured),
    # so they must agree with us within 0.1 px RMS, while we stay within 0.01 px of
    # the analytic field (first-order shape function bias ~ u'' <eta^2> / 2 = 0.003 px).
    def disp(x, y):
        return (1.0 * np.sin(2 * np.pi * y / 512) + 0.3, 0.6 * np.cos(2 * np.pi * x / 512) - 0.2)

    ref = speckle_image((N, N), seed=5)
    moved = speckle_image((N, N), seed=5, displacement=disp)
    res = correlate(ref, moved, subset=SUBSET, step=STEP)
    ok = res.valid
    tu, tv = disp(res.cols.astype(float), res.rows.astype(float))
    assert np.sqrt(np.mean((res.u[ok] - tu[ok]) ** 2)) <= 0.01
    assert np.sqrt(np.mean((res.v[ok] - tv[ok]) ** 2)) <= 0.01
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM).calc(ref, moved, None)
    fb = cv2.calcOpticalFlowFarneback(ref, moved, None, 0.5, 3, 15, 3, 5, 1.2, 0)
    for flow in (dis, fb):
        fu, fv = flow[res.rows, res.cols, 0], flow[res.rows, res.cols, 1]
        assert np.sqrt(np.mean((fu[ok] - res.u[ok]) ** 2)) <= 0.1
        assert np.sqrt(np.mean((fv[ok] - res.v[ok]) ** 2)) <= 0.1


def test_propagation_modes_and_seed_points_agree():
    # not a physics check: three propagation orders of the package reach the same optimum
    def disp(x, y):
        return (0.8 * np.sin(2 * np.pi * y / 400), 0.5 * np.cos(2 * np.pi * x / 300))

    ref = speckle_image((N, N), seed=8)
    moved = speckle_image((N, N), seed=8, displacement=disp)
    a = correlate(ref, moved, propagation="reliability", subset=SUBSET, step=STEP)
    b = correlate(ref, moved, propagation="seeded", subset=SUBSET, step=STEP)
    c = correlate(ref, moved, seeds=[(128, 128)], subset=SUBSET, step=STEP)
    for other in (b, c):
        assert np.array_equal(a.valid, other.valid)
        # both stop within the tolerance (1e-4 px) of the same optimum
        np.testing.assert_allclose(other.u[a.valid], a.u[a.valid], atol=3e-4)
        np.testing.assert_allclose(other.v[a.valid], a.v[a.valid], atol=3e-4)
    assert a.valid.mean() > 0.95 and a.attrs["propagation"] == "reliability"


def test_large_translation_found_by_fft_seeding(reference8):
    # Integer start from FFT cross-correlation: a 12.3 / -7.6 px shift (an exact Fourier-space
    # translation, [Reu2011]) is far outside the IC-GN capture range, and must still be found.
    moved = speckle_image((N, N), seed=11, bits=8, displacement=(12.3, -7.6))
    res = correlate(reference8, moved, subset=SUBSET, step=STEP)
    ok = res.valid
    assert ok.mean() > 0.8
    assert np.mean(res.u[ok]) == pytest.approx(12.3, abs=0.002)
    assert np.mean(res.v[ok]) == pytest.approx(-7.6, abs=0.002)
    # every point whose displaced subset stays inside the image is solved; the
    # others (last column, first row) are flagged with a reason, not guessed
    inside = (res.cols + 12.3 + 10 < N - 2) & (res.rows - 7.6 - 10 >= 1)
    assert np.all(ok[inside])
    assert np.all(res.reason[~ok] != K.OK) and np.all(np.isnan(res.u[~ok]))
    assert np.all(res.reason[~inside] == K.OUT_OF_IMAGE) or not np.any(ok[~inside])


def test_region_of_interest_rectangle_and_mask(reference8):
    # Exact Fourier-space translation ([Reu2011]): the shift built in is the reference, also for
    # subsets cut by the mask.
    moved = speckle_image((N, N), seed=11, bits=8, displacement=(0.25, 0.4))
    res = correlate(reference8, moved, region=(60, 40, 180, 200), subset=SUBSET, step=STEP)
    assert res.rows.min() >= 40 + 10 and res.rows.max() <= 200 - 1 - 10
    assert res.cols.min() >= 60 + 10 and res.cols.max() <= 180 - 1 - 10
    assert res.valid.all()
    rr, cc = np.mgrid[0:N, 0:N]
    mask = (rr - 128) ** 2 + (cc - 128) ** 2 > 40 ** 2
    res = correlate(reference8, moved, region=mask, subset=SUBSET, step=STEP)
    inside = (res.rows - 128) ** 2 + (res.cols - 128) ** 2 <= 40 ** 2
    assert np.all(res.reason[inside] == K.OUTSIDE_ROI)
    assert np.all(np.isnan(res.u[inside]))
    # partial subsets at the hole edge keep only material pixels and stay accurate
    edge = ~inside & ((res.rows - 128) ** 2 + (res.cols - 128) ** 2 < 52 ** 2) & res.valid
    assert edge.sum() >= 8
    np.testing.assert_allclose(res.u[edge], 0.25, atol=0.01)
    np.testing.assert_allclose(res.v[edge], 0.4, atol=0.01)


def test_failures_are_masked_with_a_reason(reference8):
    # not a physics check: failed points carry a reason code and NaN, never a guess
    unrelated = speckle_image((N, N), seed=99, bits=8)
    res = correlate(reference8, unrelated, subset=SUBSET, step=STEP)
    assert res.valid.mean() < 0.05
    assert set(np.unique(res.reason)) <= set(REASON_CODES)
    assert np.all(np.isnan(res.u[~res.valid])) and np.all(np.isnan(res.dvdy[~res.valid]))
    # "converged" means the update fell below tolerance, whatever the ZNCC
    assert np.array_equal(res.converged, np.isin(res.reason, [K.OK, K.LOW_ZNCC]))
    good = correlate(reference8, reference8, subset=SUBSET, step=STEP)
    assert good.converged.all() and np.all(good.zncc > 0.999)
    flat = reference8.copy()
    flat[:, :100] = 128
    res = correlate(flat, flat, subset=SUBSET, step=STEP)
    left = res.cols < 100 - 10  # whole subset in the flat band
    assert np.all(res.reason[left] == K.LOW_CONTRAST)
    assert np.all(res.reason[res.cols > 100 + 10] == K.OK)


def test_to_field_converts_to_the_specimen_frame(reference8):
    # not a physics check: the image-to-specimen conversion of DEVELOPERS.md (y and v change sign)
    moved = speckle_image((N, N), seed=11, bits=8, displacement=(0.5, 0.25))
    res = correlate(reference8, moved, subset=SUBSET, step=15)
    f = res.to_field(pixel_size=0.02)
    assert f.units == "mm" and f.grid_shape == res.rows.shape
    np.testing.assert_allclose(f.x, res.cols.ravel() * 0.02)
    np.testing.assert_allclose(f.y, -res.rows.ravel() * 0.02)
    np.testing.assert_allclose(f.u, res.u.ravel() * 0.02)
    np.testing.assert_allclose(f.v, -res.v.ravel() * 0.02)  # rows down, y up
    assert np.all(np.diff(f.grid("y")[:, 0]) < 0)  # first row on top: y descending
    assert f.attrs["subset"] == 21 and f.attrs["step"] == 15 and f.attrs["pixel_size"] == 0.02
    assert res.to_field().units == "px"
    with pytest.raises(ValueError, match="pixel_size"):
        res.to_field(pixel_size=-1.0)


@pytest.mark.parametrize("kwargs, match", [
    (dict(subset=20), "odd"),
    (dict(subset=5), "subset"),
    (dict(step=0), "step"),
    (dict(propagation="fast"), "propagation"),
    (dict(region=(10, 10, 5, 5)), "region"),
    (dict(region=np.zeros((N, N), dtype=bool)), "no pixel"),
    (dict(region=np.full((N, N), 0.5)), "0/255"),
    (dict(tolerance=0.0), "tolerance"),
    (dict(seeds=[(-500, -500)]), "seeds"),
])
def test_bad_arguments(reference8, kwargs, match):
    if "seeds" in kwargs:
        kwargs["region"] = (100, 100, 200, 200)
    with pytest.raises((ValueError, TypeError), match=match):
        correlate(reference8, reference8, **kwargs)


def test_bad_images(reference8):
    with pytest.raises(ValueError, match="shape"):
        correlate(reference8, reference8[:-1])
    bad = reference8.astype(float)
    bad[3, 3] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        correlate(reference8, bad)
    with pytest.raises(ValueError, match="2-D"):
        correlate(reference8[None], reference8[None])
