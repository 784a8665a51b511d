"""Benchmark of the heat model: transfer coefficients of a 32-ply laminate at 200 frequencies."""

from __future__ import annotations

import time

import numpy as np

__all__ = ["bench_heat"]


def _stack(n_plies: int = 32):
    """Resin layer, n carbon/epoxy plies ([0/90] alternating sources) and a back layer."""
    from ..mechanics import ThermalLayer

    resin = [-0.245, -0.245, 0.0]  # Kelvin's law, epoxy witness (docs/references.md)
    zero, ninety = [-4.3e-2, -0.8e-2, 0.0], [-0.8e-2, -4.3e-2, 0.0]
    layers = [ThermalLayer("resin_layer", 20e-6, 1200.0, 1100.0, 0.2, resin)]
    layers += [ThermalLayer(f"ply {i + 1}", 0.156e-3, 1600.0, 900.0, 0.6, zero if i % 2 == 0 else ninety)
               for i in range(n_plies)]
    layers.append(ThermalLayer("back_layer", 20e-6, 1200.0, 1100.0, 0.2, resin))
    return layers


def bench_heat(*, quick: bool = False) -> dict:
    """Time :func:`fusion.mechanics.transfer_coefficients` for 200 frequencies, 32 plies.

    Parameters
    ----------
    quick : bool
        Fewer repeats (CI smoke test); the sizes stay the same, they are small.

    Returns
    -------
    dict
        ``{"heat_seconds": best wall time of one call in s}`` (target: well under 1 s).
    """
    from ..mechanics import transfer_coefficients

    layers = _stack()
    f = np.geomspace(0.1, 200.0, 200)
    transfer_coefficients(layers, f)  # first call pays the imports
    best = float("inf")
    for _ in range(3 if quick else 20):
        t0 = time.perf_counter()
        transfer_coefficients(layers, f)
        best = min(best, time.perf_counter() - t0)
    return {"heat_seconds": best}
