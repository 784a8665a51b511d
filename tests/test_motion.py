"""Motion compensation of IR frames: the moving-edge artefact and its removal.

The stack comes from an independent analytic forward model written here: a plate edge with a
temperature step, blurred by a Gaussian point spread (so its profile is an erfc), translated
in each frame by a sub-pixel motion proportional to the load, with the plate's own
thermoelastic dT in phase with the load. Frames are evaluated from the formula, never
interpolated, so the truth in the reference configuration is exact.
"""

import numpy as np
import pytest
import scipy.ndimage as ndi
from scipy.special import erfc

from fusion.thermal import CompensatedFrames, motion_amplitude, motion_compensate

F, NY, NX = 400, 16, 96
FRAME_RATE, FREQ = 200.0, 10.0  # Hz: 20 whole cycles
T = np.arange(F) / FRAME_RATE
THETA = 2 * np.pi * FREQ * T
LOAD = 5.0 + 4.0 * np.cos(THETA)  # kN, range 8 kN
MOTION_PP = 0.3  # px peak-to-peak along columns: "a few tenths of a pixel"
U_PER_LOAD = MOTION_PP / 8.0  # px per kN
X0 = 48.3  # edge column at the mean load
T_PLATE, T_BACK, DT = 300.0, 293.0, -0.020  # K; tension cools the plate: dT < 0
COLS = np.arange(NX)


def edge_stack(rng, *, sigma_blur, noise):
    """Analytic frames: T_back + (T_plate(t) - T_back) * erfc-step at the moving edge."""
    edge = X0 + U_PER_LOAD * (LOAD - LOAD.mean())
    plate = T_PLATE + DT / 2 * np.cos(THETA)
    prof = 0.5 * erfc((COLS[None, :] - edge[:, None]) / (np.sqrt(2) * sigma_blur))
    frames = T_BACK + (plate[:, None] - T_BACK) * prof
    stack = np.repeat(frames[:, None, :], NY, axis=1)
    return (stack + rng.normal(0, noise, stack.shape)).astype(np.float32)


def truth(sigma_blur):
    """dT in the reference configuration: the plate's dT times its share of each pixel."""
    return DT * 0.5 * erfc((COLS - X0) / (np.sqrt(2) * sigma_blur))


def ls_lockin(frames):
    """Least squares on [1, cos, sin] (the lock-in as a textbook regression); dT = 2 a_cos."""
    x = np.column_stack([np.ones(F), np.cos(THETA), np.sin(THETA)])
    y = np.asarray(frames, dtype=np.float64).reshape(F, -1)
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    return (2 * coef[1]).reshape(NY, NX)


def scipy_warp(frames, order):
    """Reference resampling: scipy.ndimage.map_coordinates at p + u (L_i - mean L), per frame."""
    rr, cc = np.mgrid[0:NY, 0:NX].astype(np.float64)
    out = np.empty(frames.shape)
    for i, frame in enumerate(frames):
        shifted = cc + (LOAD[i] - LOAD.mean()) * U_PER_LOAD
        out[i] = ndi.map_coordinates(frame.astype(np.float64), [rr, shifted], order=order, mode="nearest")
    return out


def displacement():
    d = np.zeros((2, NY, NX), np.float32)
    d[0] = U_PER_LOAD
    d[0, :, 60:] = np.nan  # no correlation data on the background: nearest value fills it
    return d


def test_edge_artefact_removed(rng):
    sigma_blur = 1.5  # px: IR optics and detector footprint (common practice: 1-2 px)
    noise = 0.02  # K per frame: NETD of a cooled camera (common practice)
    stack = edge_stack(rng, sigma_blur=sigma_blur, noise=noise)
    ref = truth(sigma_blur)
    raw = ls_lockin(stack).mean(axis=0)
    comp_frames = motion_compensate(stack, displacement(), LOAD)
    comp = ls_lockin(comp_frames[:]).mean(axis=0)
    # the textbook artefact (common practice): gradient x motion = 7 K * phi(0)/1.5 px * 0.3 px
    # ~ 0.56 K at the edge (in phase with the load), 28 times the true plate signal
    grad = (T_PLATE - T_BACK) / (np.sqrt(2 * np.pi) * sigma_blur)
    assert np.abs(raw - ref).max() == pytest.approx(grad * MOTION_PP, rel=0.05)
    # with compensation the true value, up to the interpolation's own error, computed here by
    # resampling the noise-free frames with scipy.ndimage.map_coordinates (cubic B-spline,
    # [Unser1999]), plus noise: a 16-pixel column mean has 2 * 0.02 K * sqrt(2/400) / 4 = 0.7 mK;
    # 4.4 of those covers the largest of ~10 edge columns
    clean = edge_stack(rng, sigma_blur=sigma_blur, noise=0.0)
    interpolation = np.abs(ls_lockin(scipy_warp(clean, 3)).mean(axis=0) - ref).max()
    assert np.abs(comp - ref).max() < interpolation + 4.4 * 0.0007
    # far from the edge the plate's own dT is untouched either way
    assert comp[:30].mean() == pytest.approx(DT, abs=0.001)
    assert raw[:30].mean() == pytest.approx(DT, abs=0.001)
    # the project's lock-in, streaming chunk by chunk through the lazy view, agrees
    from fusion.thermal import lockin

    res = lockin(comp_frames, frequency=FREQ, frame_rate=FRAME_RATE, load=LOAD, chunk_frames=64)
    # six-term fit vs three-term fit on whole cycles: same in-phase estimate within the noise
    np.testing.assert_allclose(np.asarray(res.delta_T).mean(axis=0), comp, atol=0.002)


def test_interpolation_residuals_match_scipy_resampling(rng):
    # Reference library: scipy.ndimage.map_coordinates resamples the same noise-free frames at the
    # same positions (order 3: the interpolating cubic B-spline, [Unser1999]; order 1: bilinear),
    # and the same least-squares lock-in leaves the same residual at the edge. OpenCV's cubic
    # kernel (a = -0.75, Keys 1981, [Keys1981]; lower order than a = -0.5, from memory) is
    # checked by order only: it leaves more than bilinear here, and every kernel less than the
    # uncompensated artefact.
    stack = edge_stack(rng, sigma_blur=1.2, noise=0.0)
    ref = truth(1.2)
    raw_err = np.abs(ls_lockin(stack).mean(axis=0) - ref).max()
    errs = {k: np.abs(ls_lockin(motion_compensate(stack, displacement(), LOAD, interpolation=k)[:])
                      .mean(axis=0) - ref).max() for k in ("spline", "linear", "cubic")}
    for kind, order in (("spline", 3), ("linear", 1)):
        expected = np.abs(ls_lockin(scipy_warp(stack, order)).mean(axis=0) - ref).max()
        # float32 frames and warp against float64 resampling: 1e-4 K on ~0.01 K residuals
        assert errs[kind] == pytest.approx(expected, abs=1e-4), kind
    assert errs["spline"] < errs["linear"] < errs["cubic"] < 0.5 * raw_err


def test_spline_warp_matches_scipy(rng):
    # cross-check of the compiled B-spline against scipy.ndimage.map_coordinates (order 3)
    frames = rng.normal(300, 1, (3, 40, 50)).astype(np.float32)
    frames = ndi.gaussian_filter(frames, (0, 1.5, 1.5))
    d = rng.normal(0, 0.05, (2, 40, 50)).astype(np.float32)
    load = np.array([1.0, 3.0, 8.0])
    comp = motion_compensate(frames, d, load, reference_load=0.0)
    rr, cc = np.mgrid[0:40, 0:50].astype(np.float64)
    for i in range(3):
        want = ndi.map_coordinates(frames[i].astype(np.float64),
                                   [rr + load[i] * d[1], cc + load[i] * d[0]], order=3, mode="mirror")
        # inside, away from the border where padding differs; float32 of ~300 K: 1e-4 K
        np.testing.assert_allclose(comp[i][5:-5, 5:-5], want[5:-5, 5:-5], atol=2e-4)
    # zero displacement returns the frames (interpolating spline at the nodes)
    same = motion_compensate(frames, np.zeros_like(d), load)
    np.testing.assert_allclose(same[:], frames, atol=2e-4)


class CountingStack:
    """Frame source that records what is read and refuses a whole-array conversion."""

    def __init__(self, data):
        self._data = data
        self.shape, self.dtype = data.shape, data.dtype
        self.reads = []

    def __getitem__(self, key):
        self.reads.append(key)
        return self._data[key]

    def __array__(self, *args, **kwargs):
        raise AssertionError("the whole stack was converted")


def test_lazy_streaming_and_indexing(rng):
    # not a physics check: the lazy view reads each frame once and indexes like an array
    data = rng.integers(1000, 2000, (30, 8, 10)).astype(np.int16)  # raw counts
    src = CountingStack(data)
    comp = motion_compensate(src, np.full((2, 8, 10), 0.01, np.float32), np.linspace(0, 1, 30))
    assert isinstance(comp, CompensatedFrames) and src.reads == []  # nothing read yet
    assert comp.shape == (30, 8, 10) and comp.dtype == np.float32 and len(comp) == 30
    chunks = [comp[i:i + 7] for i in range(0, 30, 7)]
    assert all(c.dtype == np.float32 for c in chunks)
    assert src.reads == [slice(i, i + 7) for i in range(0, 30, 7)]  # each frame read once
    assert np.concatenate(chunks).shape == (30, 8, 10)
    assert comp[-1].shape == (8, 10) and comp[3:9:2].shape == (3, 8, 10)
    np.testing.assert_array_equal(comp[[2, 5]][1], comp[5])
    with pytest.raises(IndexError):
        comp[30]


def test_motion_amplitude_and_errors():
    d = np.zeros((2, 4, 5))
    d[0], d[1] = 0.03, -0.04  # px per kN
    amp = motion_amplitude(d, 8.0)
    # by hand (common practice: a 3-4-5 triangle): |(0.03, -0.04)| * 8 kN = 0.05 * 8
    np.testing.assert_allclose(amp, 0.4)
    comp = motion_compensate(np.zeros((3, 4, 5)), d, [0.0, 4.0, 8.0])
    np.testing.assert_allclose(comp.amplitude, 0.4)
    with pytest.raises(ValueError, match="one value per frame"):
        motion_compensate(np.zeros((3, 4, 5)), d, [1.0, 2.0])
    with pytest.raises(ValueError, match=r"shape \(2, Y, X\)"):
        motion_compensate(np.zeros((3, 4, 5)), d[0], [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match="differs from the frame size"):
        motion_compensate(np.zeros((3, 4, 6)), d, [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match="interpolation must be one of"):
        motion_compensate(np.zeros((3, 4, 5)), d, [1.0, 2.0, 3.0], interpolation="nearest")
