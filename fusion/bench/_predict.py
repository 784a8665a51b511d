"""Benchmark of the adiabatic predictions on a large strain map.

The figure is a ratio of two times measured in the same run on the same
machine, so it does not depend on the machine's speed: the time of
:func:`fusion.mechanics.predict_ratios` for every source of a laminate with a
coating and a resin layer (four sources), over the time of one numpy pass that
reads each strain value once (two in-place ``np.add`` of the three strain
components). The design target is a ratio below 20.
"""

from __future__ import annotations

import time

import numpy as np

__all__ = ["bench_predict", "demo_laminate"]


def demo_laminate():
    """A [45/0/-45/90]s carbon/epoxy laminate with a coating and a resin layer (our own scenario).

    Ply elastic and expansion values are those of graphite/epoxy in Kaw, *Mechanics of
    Composite Materials* (2006), Table 2.1; thermal values and the layers are typical
    round numbers chosen for the benchmark.
    """
    from ..mechanics import IsotropicMaterial, Laminate, OrthotropicMaterial, SurfaceLayer

    ply = OrthotropicMaterial("graphite/epoxy", 181e9, 10.3e9, 7.17e9, 0.28, 0.02e-6, 22.5e-6,
                              1600.0, 900.0, 5.0, 0.6, 0.6)
    resin = IsotropicMaterial("epoxy", 3.5e9, 0.35, 60e-6, 1200.0, 1100.0, 0.2)
    paint = IsotropicMaterial("matt paint", 2.0e9, 0.35, 50e-6, 1400.0, 1000.0, 0.25)
    return Laminate.from_layup(ply, "[45/0/-45/90]s", 0.25e-3, coating=SurfaceLayer(paint, 25e-6),
                               resin_layer=SurfaceLayer(resin, 20e-6), name="bench")


def _best(func, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return min(times)


def bench_predict(*, quick: bool = False) -> dict[str, float]:
    """Time the vectorised predictions of a 1,000,000-pixel map.

    Parameters
    ----------
    quick : bool
        Use a 100,000-pixel map and fewer repeats (CI smoke test).

    Returns
    -------
    dict
        ``{"predict_ratio": t_predict / t_numpy_pass}`` (dimensionless, best of
        several repeats each).
    """
    from ..mechanics import predict_ratios

    n = 100_000 if quick else 1_000_000
    repeats = 3 if quick else 7
    lam = demo_laminate()
    rng = np.random.default_rng(12345)
    strain = (rng.normal(0.0, 1e-3, size=(n, 3))).astype(np.float32)
    tmp = np.empty(n, dtype=np.float32)

    def numpy_pass():
        np.add(strain[:, 0], strain[:, 1], out=tmp)
        np.add(tmp, strain[:, 2], out=tmp)

    def predict():
        predict_ratios(lam, strain)

    predict()  # warm caches and any lazy imports outside the timing
    numpy_pass()
    t_pass = _best(numpy_pass, repeats)
    t_pred = _best(predict, repeats)
    return {"predict_ratio": t_pred / t_pass}
