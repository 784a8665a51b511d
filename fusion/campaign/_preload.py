"""What the fork server of the local workers loads before it forks any (see :mod:`fusion.campaign._schedule`).

Imported by that server only: the libraries and fusion modules a run imports,
the unit registry, and one tiny figure drawn off screen so that the font cache
and the text layout machinery are loaded. Every worker forked afterwards starts
with all of it in memory. Nothing here starts a thread, and nothing may raise: a
step that fails is simply left to the worker to do again. Between steps the
server checks that the campaign process that started it is still there, so a
campaign that ends early (a bad config, say) does not leave it importing.
"""

from __future__ import annotations

import importlib
import os

_MODULES = (
    "numpy", "scipy.ndimage", "numba", "pandas", "xarray", "netCDF4", "h5py", "tifffile",
    "skimage.transform", "cv2", "dask", "dask.local", "dask.array", "distributed",
    "matplotlib", "matplotlib.figure", "matplotlib.backends.backend_agg", "jsonschema",
    "fusion.config", "fusion.io", "fusion.thermal", "fusion.dic", "fusion.register",
    "fusion.mechanics", "fusion.diagnose", "fusion.report", "fusion.run", "fusion.campaign",
)

_parent = os.getppid()


def _campaign_alive() -> bool:
    return os.getppid() == _parent


def _warm_figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(1, 1), dpi=20)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.imshow([[0.0, 1.0]])
    ax.set_title("dT/T$_0$")
    fig.canvas.draw()


def _preload():
    for name in _MODULES:
        if not _campaign_alive():
            os._exit(0)
        try:
            importlib.import_module(name)
        except Exception:  # only a head start: the worker imports (and reports) it again
            pass
    for step in (lambda: importlib.import_module("fusion.units").unit_registry(), _warm_figure):
        if not _campaign_alive():
            os._exit(0)
        try:
            step()
        except Exception:
            pass


_preload()
