"""Spatial resolution of strain maps: the two-stage model against correlated sinusoidal fields.

A sinusoidal displacement ``u = A sin(2 pi x / lambda)`` is rendered exactly
(``fusion.dic.speckle_image`` evaluates the analytic pattern at the reference positions),
correlated by the package and turned into strain; the amplitude of the strain, fitted by
least squares, over the true amplitude is the measured gain. The model (box average over
the subset, then the least-squares slope over the strain window) must predict it. Method:
the response to sinusoidal fields, as in the iDICs Good Practices Guide (E. M. C. Jones,
M. A. Iadicola (eds.), A Good Practices Guide for Digital Image Correlation, International
Digital Image Correlation Society, 2018, doi:10.32720/idics/gpg.ed1) and the DIC Challenge
(P. L. Reu et al., "DIC Challenge: developing images and guidelines for evaluating accuracy
and resolution of 2D analyses", Experimental Mechanics 58 (2018)).
"""

import numpy as np
import pytest

from fusion.dic import (correlate, gain_wavelength, ranges_from_states, speckle_image,
                        strain_noise_factor, strain_transfer)

AMPLITUDE = 2e-3  # strain amplitude


@pytest.mark.parametrize("subset, step, window, multiple", [
    (25, 3, 7, 1.5), (25, 3, 7, 3.0), (21, 7, 5, 1.2), (21, 7, 5, 2.0), (17, 5, 3, 2.5),
])
def test_measured_gain_follows_the_model(subset, step, window, multiple):
    # truth: an analytic sinusoidal displacement; model: a box average over the subset followed by
    # a least-squares slope ([DraperSmith1998]), the spatial-resolution indicator of [iDICs2018]
    vsg = (window - 1) * step + subset
    lam = round(multiple * vsg)
    width = 3 * lam + 2 * vsg

    def disp(x, y):
        return AMPLITUDE * lam / (2 * np.pi) * np.sin(2 * np.pi * x / lam), 0.0 * y

    ref = speckle_image((96, width), seed=9, bits=None)
    moved = speckle_image((96, width), seed=9, bits=None, displacement=disp)
    res = correlate(ref, moved, subset=subset, step=step)
    zero = res.to_field()
    zero.u[:] = 0.0
    zero.v[:] = 0.0
    zero.u_std = zero.v_std = None
    r = ranges_from_states(zero, res.to_field(), window=window)
    h = window // 2
    inner = np.zeros(r.grid_shape, bool)
    inner[h:-h, h:-h] = True                  # complete windows only: the model's case
    ok = r.valid & inner.ravel()
    x = r.x[ok]
    design = np.column_stack([np.cos(2 * np.pi * x / lam), np.sin(2 * np.pi * x / lam),
                              np.ones_like(x)])
    coef = np.linalg.lstsq(design, r.exx[ok], rcond=None)[0]
    measured = coef[0] / AMPLITUDE
    model = strain_transfer(lam, subset=subset, step=step, window=window)
    # the measurement: the model holds within 0.02; allowed 0.03 here for the
    # interpolation bias of the 4-px speckle on a short image
    assert measured == pytest.approx(model, abs=0.03)
    # and the result files state the same model
    assert r.attrs["vsg_px"] == vsg
    assert r.attrs["transfer_gain"][0] == pytest.approx(
        strain_transfer(vsg, subset=subset, step=step, window=window))


def test_model_limits_and_inverse():
    # a plane fit recovers a uniform strain exactly (gain 1 at infinite wavelength); the box
    # average of a sinusoid over one full period is zero (numpy.sinc(1) = 0)
    assert strain_transfer(1e9, subset=25, step=3, window=7) == pytest.approx(1.0, abs=1e-9)
    assert strain_transfer(25.0, subset=25, step=3, window=7) == pytest.approx(0.0, abs=1e-12)
    for g in (0.5, 0.9):
        lam = gain_wavelength(g, subset=25, step=3, window=7)
        assert strain_transfer(lam, subset=25, step=3, window=7) == pytest.approx(g, abs=1e-9)
        assert strain_transfer(1.05 * lam, subset=25, step=3, window=7) > g
    # the figures for subset 21, step 7, window 5: 50 % at ~53 px, 90 % at ~132 px
    assert gain_wavelength(0.5, subset=21, step=7, window=5) == pytest.approx(53, abs=1)
    assert gain_wavelength(0.9, subset=21, step=7, window=5) == pytest.approx(132, abs=1)
    with pytest.raises(ValueError, match="window"):
        strain_transfer(100.0, subset=21, step=7, window=4)
    with pytest.raises(ValueError, match="gain"):
        gain_wavelength(1.5, subset=21, step=7, window=5)


def test_noise_factor_without_overlap_is_least_squares_theory():
    # step >= subset: independent points; the slope of a plane fit over a full w x w window
    # of unit spacing has std sigma / sqrt(sum k^2) with sum k^2 = w * sum_k k^2 (textbook
    # least squares, [DraperSmith1998]): 1 / sqrt(50) for w = 5
    assert strain_noise_factor(subset=21, step=21, window=5) == pytest.approx(1 / np.sqrt(50))
    # overlap makes the window's rows err alike, so averaging them gains less and the
    # slope's std per unit noise rises: the cause of too small stds when it is ignored
    assert strain_noise_factor(subset=21, step=7, window=5) > 1.5 / np.sqrt(50)
