"""Synthetic speckle images and exact Fourier-space shifts ([Reu2011], docs/references.md)."""

import numpy as np
import pytest
from scipy import ndimage

from fusion.dic import fourier_shift, speckle_image


def test_fourier_shift_matches_scipy_ndimage(rng):
    # Reference library: scipy.ndimage.fourier_shift multiplies the spectrum by
    # exp(-2 pi i k.shift); ours must give the same real image.
    a = rng.normal(size=(48, 64))
    shift = (0.37, -1.81)
    expected = np.fft.ifft2(ndimage.fourier_shift(np.fft.fft2(a), shift)).real
    # both are the same float64 FFT pipeline: agreement to rounding (1e-12)
    np.testing.assert_allclose(fourier_shift(a, shift), expected, atol=1e-12)


def test_integer_fourier_shift_is_a_roll(rng):
    # An integer shift of a periodic image is an exact circular roll (DFT shift theorem, common
    # practice); numpy.roll is the reference.
    a = rng.normal(size=(40, 30))
    np.testing.assert_allclose(fourier_shift(a, (3, -7)), np.roll(a, (3, -7), axis=(0, 1)),
                               atol=1e-12)


def test_translation_two_independent_routes_agree():
    # The Fourier route shifts the band-limited interpolant of the sampled pattern
    # (Reu 2011); the analytic route evaluates the Gaussian dots at x - u. They
    # differ only by the pattern's content beyond the Nyquist frequency,
    # exp(-pi^2 R^2 / 4) ~ 7e-7 of the dot amplitude for R = 2.4 px (speckle 4 px),
    # plus the 1e-7 dot truncation: 2e-6 of full scale bounds both.
    moved = speckle_image((128, 160), seed=4, bits=None, displacement=(0.3, -0.7))
    analytic = speckle_image((128, 160), seed=4, bits=None,
                             displacement=lambda x, y: (0.3 + 0 * x, -0.7 + 0 * y))
    assert np.max(np.abs(moved - analytic)) < 2e-6


def test_integer_callable_shift_is_a_roll():
    # Shifting the continuous periodic pattern by whole pixels permutes the samples (common
    # practice); numpy.roll is the reference.
    ref = speckle_image((64, 80), seed=2, bits=None)
    moved = speckle_image((64, 80), seed=2, bits=None, displacement=lambda x, y: (2.0, -3.0))
    np.testing.assert_allclose(moved, np.roll(ref, (-3, 2), axis=(0, 1)), atol=1e-12)


@pytest.mark.parametrize("size", [3.0, 4.0, 6.0])
def test_speckle_size_is_the_dot_half_maximum_diameter(size):
    # Wiener-Khinchin (common practice; numpy.fft computes it): the autocovariance of randomly
    # placed dots exp(-r^2/R^2) is
    # the dot's self-correlation, proportional to exp(-d^2 / (2 R^2)); with the dot
    # FWHM equal to speckle_size it falls to half at d = speckle_size / sqrt(2).
    img = speckle_image((512, 512), seed=9, speckle_size=size, bits=None)
    f = np.fft.fft2(img - img.mean())
    acf = np.fft.ifft2(np.abs(f) ** 2).real
    acf /= acf[0, 0]
    prof = 0.5 * (acf[0, :40] + acf[:40, 0])
    k = int(np.argmax(prof < 0.5))
    d_half = k - 1 + (prof[k - 1] - 0.5) / (prof[k - 1] - prof[k])
    # a 512^2 image holds ~15,000+ dots: the sampling scatter of the ACF is ~1 %;
    # linear interpolation between samples adds ~1 %: 4 % tolerance
    assert d_half == pytest.approx(size / np.sqrt(2.0), rel=0.04)


def test_reproducible_and_seed_dependent():
    # not a physics check: seeds
    a = speckle_image((64, 64), seed=1)
    assert np.array_equal(a, speckle_image((64, 64), seed=1))
    assert not np.array_equal(a, speckle_image((64, 64), seed=2))


def test_output_types_and_range():
    # not a physics check: dtypes, value range and the package's documented grey mapping
    assert speckle_image((32, 32), bits=8).dtype == np.uint8
    b12 = speckle_image((32, 32), bits=12)
    assert b12.dtype == np.uint16 and b12.max() <= 4095
    f = speckle_image((32, 32), bits=None)
    assert f.dtype == np.float64 and 0.0 <= f.min() and f.max() <= 1.0
    # the documented grey mapping: standard deviation about 0.135 of full scale
    big = speckle_image((256, 256), bits=None)
    assert big.std() == pytest.approx(0.135, rel=0.1)


def test_noise_has_the_requested_standard_deviation():
    clean = speckle_image((256, 256), seed=3, bits=None)
    noisy = speckle_image((256, 256), seed=3, bits=None, noise=0.01, noise_seed=5)
    # sampling theory of a std (common practice): 65,536 samples scatter by 0.3 %; clipping
    # touches < 0.1 %
    assert np.std(noisy - clean) == pytest.approx(0.01, rel=0.02)
    again = speckle_image((256, 256), seed=3, bits=None, noise=0.01, noise_seed=6)
    assert not np.array_equal(noisy, again)


@pytest.mark.parametrize("kwargs, match", [
    (dict(shape=(8, 8)), "too small"),
    (dict(shape=(64, 64), bits=17), "bits"),
    (dict(shape=(64, 64), noise=-1.0), "noise"),
    (dict(shape=(64, 64), speckle_size=0.0), "speckle_size"),
    (dict(shape=(64, 64), displacement="east"), "displacement"),
])
def test_bad_arguments(kwargs, match):
    with pytest.raises(ValueError, match=match):
        speckle_image(**kwargs)


def test_bad_displacement_callables():
    with pytest.raises(TypeError, match="callable returning"):
        speckle_image((64, 64), displacement=lambda x, y: 1.0)
    with pytest.raises(ValueError, match="non-finite"):
        speckle_image((64, 64), displacement=lambda x, y: (x * np.nan, y))
    with pytest.raises(ValueError, match="did not converge"):
        speckle_image((64, 64), displacement=lambda x, y: (-2.0 * x, 0 * y))
    with pytest.raises(ValueError, match=r"\(dy, dx\)"):
        fourier_shift(np.zeros((4, 4)), 1.0)
