"""Benchmark of the lateral heat model: one frequency on a 512 x 640 grid, 16 plies.

The reference is one complex 2-D FFT of a single field on the same padded grid, with the
same number of threads: the cost of the model is reported in those units, so the figure
does not depend much on the machine.
"""

from __future__ import annotations

import time

import numpy as np

__all__ = ["bench_lateral"]

SHAPE = (512, 640)          # IR rows, columns
PIXEL = 0.2e-3              # m on the specimen
FREQUENCY = 2.0             # Hz
LAYUP = "[45/0/-45/90]2s"   # 16 plies, 0.125 mm


def _case():
    """16 carbon/epoxy plies and an open-hole-like strain field with a no-data hole."""
    from ..mechanics import Laminate, OrthotropicMaterial, thermal_layers

    # Kaw (2006) Table 2.1 graphite/epoxy; k1 7, k2 = k3 0.6 W/(m K) typical values
    cfrp = OrthotropicMaterial("cfrp", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6, 1600.0, 900.0,
                               7.0, 0.6, 0.6)
    layers = thermal_layers(Laminate.from_layup(cfrp, LAYUP, 0.125e-3))
    ny, nx = SHAPE
    yy, xx = np.mgrid[0:ny, 0:nx].astype(float)
    r2 = ((xx - nx / 2) ** 2 + (yy - ny / 2) ** 2) / 40.0 ** 2
    valid = r2 > 1.0
    e = np.empty((ny, nx, 3))
    e[..., 0] = -0.6e-3 * (1 + 0.3 / np.maximum(r2, 1.0))
    e[..., 1] = 2e-3 * (1 + 1.0 / np.maximum(r2, 1.0))
    e[..., 2] = 0.2e-3 * np.sin(xx / 50.0)
    e[~valid] = np.nan
    return layers, e, valid


def bench_lateral(*, quick: bool = False) -> dict:
    """Time :func:`fusion.mechanics.lateral_response` against one complex 2-D FFT.

    Parameters
    ----------
    quick : bool
        Fewer repeats (the sizes stay those of the target).

    Returns
    -------
    dict
        ``lateral_fft_ratio``: best time of one call (extension, padding, three forward
        transforms, the layered solution at every wavevector, one inverse transform) over
        the best time of ``scipy.fft.fft2`` of one complex field on the padded grid (target
        10); ``lateral_seconds`` and ``lateral_fft_seconds`` (s), ``lateral_grid`` (the
        padded grid, rows x columns).
    """
    import numba
    from scipy import fft

    from ..mechanics import lateral_response
    from ..mechanics._lateral import _grid_tensors, _layer_data, _padded_shape, _pixel_axes

    layers, e, valid = _case()
    _, _, rc, _, _, k_in = _layer_data(layers)
    grid = _padded_shape(SHAPE, _grid_tensors(k_in, _pixel_axes(PIXEL)), rc, 2 * np.pi * FREQUENCY, 3.0)
    rng = np.random.default_rng(0)
    field = rng.normal(size=grid) + 1j * rng.normal(size=grid)
    workers = max(1, numba.get_num_threads())

    def model():
        lateral_response(layers, e, FREQUENCY, pixel_size=PIXEL, valid=valid)

    def reference():
        fft.fft2(field, workers=workers)

    model()                                  # compilation and first-touch costs
    reference()
    best_m = best_f = float("inf")
    # interleaved, so both see the same load of a shared machine
    for _ in range(4 if quick else 15):
        t0 = time.perf_counter()
        model()
        best_m = min(best_m, time.perf_counter() - t0)
        for _ in range(3):
            t0 = time.perf_counter()
            reference()
            best_f = min(best_f, time.perf_counter() - t0)
    return {"lateral_fft_ratio": best_m / best_f, "lateral_seconds": best_m, "lateral_fft_seconds": best_f,
            "lateral_grid": f"{grid[0]}x{grid[1]}"}
