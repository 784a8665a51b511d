"""Honest noise: displacement and strain standard deviations against Monte Carlo scatter.

Speckle pairs are rendered analytically (a translation applied exactly in Fourier space,
``fusion.dic.speckle_image``) and Gaussian grey-level noise of known standard deviation is
added to both images. The scatter of the results over points and noise realisations is the
truth the reported standard deviations must match, for every step from 3 px to the subset
(subsets overlap and their errors correlate). The noise-floor method follows the iDICs Good
Practices Guide (E. M. C. Jones, M. A. Iadicola (eds.), A Good Practices Guide for Digital
Image Correlation, International Digital Image Correlation Society, 2018,
doi:10.32720/idics/gpg.ed1): the spatial standard deviation of strain over images of a
specimen that does not deform. Displacement noise: B. Pan, H. Xie, Z. Wang, K. Qian,
Z. Wang, "Study on subset size selection in digital image correlation for speckle
patterns", Optics Express 16(10) (2008) 7037-7048.
"""

import numpy as np
import pytest

from fusion.dic import correlate, ranges_from_states, speckle_image

SUBSET = 21
SIGMA = 0.01          # grey-level noise, 1 % of full scale (pattern std 13.5 %)
SHIFT = (0.3, -0.2)   # px along columns and rows: sub-pixel, so interpolation takes part


def _pair(shape, k):
    """A noisy reference and its exact translation by SHIFT, noise realisation k."""
    ref = speckle_image(shape, seed=21, bits=None, noise=SIGMA, noise_seed=100 + k)
    moved = speckle_image(shape, seed=21, bits=None, displacement=SHIFT, noise=SIGMA,
                          noise_seed=200 + k)
    return ref, moved


def _scatter(step, size, realisations, window=5):
    """Errors against the analytic truth (a uniform translation: u = 0.3 px, no strain) and
    the reported stds, of u and of the strain range, over points with a complete window."""
    shape = (size, size)
    du, su, de, se = [], [], [], []
    h = window // 2
    for k in range(realisations):
        res = correlate(*_pair(shape, k), subset=SUBSET, step=step)
        zero = res.to_field()
        zero.u[:] = 0.0
        zero.v[:] = 0.0
        zero.u_std = zero.v_std = None
        r = ranges_from_states(zero, res.to_field(), window=window)
        inner = np.zeros(res.rows.shape, bool)
        inner[h:-h, h:-h] = True
        ok = inner.ravel() & r.valid
        du.append((res.u.ravel() - SHIFT[0])[ok])
        su.append(res.u_std.ravel()[ok])
        for name in ("exx", "eyy"):
            de.append(getattr(r, name)[ok])
            se.append(getattr(r, name + "_std")[ok])
    cat = np.concatenate
    # root-mean-square: the error about the truth, bias included
    return (np.sqrt(np.mean(cat(du) ** 2)), np.sqrt(np.mean(cat(su) ** 2)),
            np.sqrt(np.mean(cat(de) ** 2)), np.sqrt(np.mean(cat(se) ** 2)), r)


# (step, image size, realisations): enough independent strain values at each step for
# the empirical std to be known to about 6 % (one sigma): fewer realisations where the
# VSG is small and many windows fit in the image
CASES = [(3, 128, 4), (5, 160, 4), (7, 192, 4), (11, 256, 4), (15, 320, 4), (21, 384, 4)]


@pytest.mark.parametrize("step, size, realisations", CASES, ids=lambda c: str(c))
def test_reported_strain_std_matches_the_scatter(step, size, realisations):
    # Requirement: reported within 20 % of the empirical std at every step from 3 px to the
    # subset size. The neighbours' displacement errors correlate by the shared area of their
    # subsets (1 - step / subset along one axis: 0.86 at step 3, 0 at step 21).
    emp_u, rep_u, emp_e, rep_e, r = _scatter(step, size, realisations)
    # the displacement noise of each point: the Pan et al. (2008) model through the least-
    # squares covariance of the six shape parameters, from the correlation residual
    assert rep_u == pytest.approx(emp_u, rel=0.15)
    assert emp_e / rep_e == pytest.approx(1.0, abs=0.2)
    # the stated noise floor is the median of the same stds
    assert r.attrs["noise_floor"][0] == pytest.approx(np.nanmedian(r.exx_std), rel=1e-9)
