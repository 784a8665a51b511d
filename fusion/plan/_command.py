"""``fusion plan CONFIG``: the plan of a configured laminate, written beside the results."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..config import load_config
from ..errors import ConfigError, InputError
from ..io import MARK_KEY, product_mark, write_netcdf
from ..mechanics import source_table
from ..mechanics._clt import uniaxial_strain_state
from ._figure import PLAN_MARK, plan_figure
from ._response import frequency_plan
from ._table import plan_table

__all__ = ["save_plan", "plan_command"]


def save_plan(ds, folder, *, dpi=150) -> dict:
    """Write ``plan.nc`` and ``plan.png`` into ``folder``; returns their paths by name.

    A plan is a what-if: an earlier ``plan.nc`` or ``plan.png`` that fusion plan wrote (its
    mark :data:`fusion.io.MARK_KEY` says ``"plan"``) is replaced without asking. Any other file
    of those names is never replaced: both targets are checked before anything is written, so
    a refusal leaves the folder as it was.

    Raises
    ------
    InputError
        Naming a target that exists and was not written by fusion plan.
    """
    folder = Path(folder)
    paths = {"plan.nc": folder / "plan.nc", "plan.png": folder / "plan.png"}
    for p in paths.values():
        if (p.exists() or p.is_symlink()) and product_mark(p) != PLAN_MARK:
            raise InputError(p, "exists and was not written by fusion plan, which replaces only its own "
                             "plan.nc and plan.png: move the file away or write the plan elsewhere with --out")
    ds = ds.copy()
    ds.attrs[MARK_KEY] = PLAN_MARK
    write_netcdf(ds, paths["plan.nc"], overwrite=True)
    plan_figure(ds, paths["plan.png"], dpi=dpi, overwrite=True)
    return paths


def plan_command(config, *, out=None, laminate=None) -> str:
    """``fusion plan CONFIG``: plan the configured laminate, write plan.nc and plan.png.

    Parameters
    ----------
    config : str or os.PathLike
        Config file; its ``[plan]`` table gives the strain, load direction, frequency range,
        count and tolerance.
    out : path, optional
        Output folder (default: the config's output folder, ``[output] folder`` or
        ``results`` beside the config, as for ``fusion run``). An earlier plan there is
        replaced; any other file named plan.nc or plan.png is left alone (see
        :func:`save_plan`).
    laminate : str, optional
        Name of the laminate (default: ``[plan] laminate``, else the ``[laminate]`` table).

    Returns
    -------
    str
        The table of :func:`plan_table` and the files written.

    Raises
    ------
    ConfigError
        Unknown laminate, or none configured.
    """
    cfg = load_config(config)
    spec = cfg.plan
    name = laminate or spec.laminate or "default"
    if name not in cfg.laminates:
        if laminate is None and spec.laminate is None and len(cfg.laminates) == 1:
            name = next(iter(cfg.laminates))
        else:
            where = "--laminate" if laminate else "plan.laminate" if spec.laminate else "laminate"
            raise ConfigError(where, f"no laminate {name!r} in the config; laminates: "
                              f"{sorted(cfg.laminates)} ('default' is the [laminate] table); name one "
                              "with --laminate or [plan] laminate", source=str(config))
    lam = cfg.laminates[name]
    strain = uniaxial_strain_state(lam, strain=spec.strain, direction=spec.direction)
    ds = frequency_plan(lam, strain, frequencies=np.geomspace(spec.f_min, spec.f_max, spec.count),
                        tolerance=spec.tolerance)
    folder = cfg.output_folder(out)
    earlier = {name for name, p in (("plan.nc", folder / "plan.nc"), ("plan.png", folder / "plan.png"))
               if p.exists()}
    paths = save_plan(ds, folder, dpi=max(150, int(cfg.output.dpi)))
    return (source_table(lam, strain) + "\n\n" + plan_table(ds) + "\n"
            + "\n".join(f"wrote {p}" + (" (replacing the earlier plan)" if name in earlier else "")
                         for name, p in paths.items()))

