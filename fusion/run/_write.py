"""Writing one run's result into a folder: result.nc, summary.json and the figures."""

from __future__ import annotations

from pathlib import Path

from .._timing import current, step
from ..io import write_netcdf
from ..report import FIGURE_NAMES, run_figures, summarize_run, write_summary
from ..report._aside import draw_figures_aside
from ._compose import RunResult
from ._files import INPUT_DIGEST, input_digests

__all__ = ["write_run"]


def write_run(result: RunResult, folder: Path, *, cfg, run, stamp: str, inputs: dict | None = None) -> dict:
    """Write result.nc, summary.json and figures of a run into ``folder``; returns the summary.

    ``inputs``: the digests of the run's inputs (:func:`input_digests`), as the run's stamp
    was made from them; without it the files are read again here.
    """
    if inputs is None:
        with step("input digests"):
            inputs = input_digests(run)
    ds = result.dataset
    ds.attrs["input_digests"] = inputs
    ds.attrs["input_digest_algorithm"] = INPUT_DIGEST
    figs, aside = {}, None
    if cfg.output.figures:
        fig_kw = dict(formats=cfg.output.formats, dpi=cfg.output.dpi,
                      reference_image=result.figure_inputs.get("reference_image"),
                      region_mask=result.figure_inputs.get("region_mask"),
                      profile_line=cfg.output.profile_line, ply_profile=result.figure_inputs.get("ply_profile"))
        with step("figures"):
            aside, here = draw_figures_aside(ds, folder / "figures", parallel=_cores_of_its_own(), **fig_kw)
    try:
        with step("result.nc"):
            write_netcdf(ds, folder / "result.nc")
        if cfg.output.figures:
            with step("figures"):
                drawn = run_figures(ds, folder / "figures", names=here, **fig_kw)
                drawn.update(aside.collect())
            figs = {k: drawn[k] for k in FIGURE_NAMES if k in drawn}
    except BaseException:
        if aside is not None:
            aside.abandon()
        raise
    with step("summary"):
        # the valid area is judged against the usable thermal area (meta["footprint"]), by the
        # registration's footprint rule: no limit of its own here
        summary = summarize_run(ds, regions=result.regions, warnings=result.warnings, meta=result.meta,
                                registration_limit_px=cfg.registration_for(run).max_error,
                                snr_limit=cfg.diagnosis.min_snr)
        summary["provenance"].update(stamp=stamp, inputs=inputs, input_digest=INPUT_DIGEST)
        if cfg.output.figures:
            summary["figures"] = {k: str(Path(v).relative_to(folder)) for k, v in figs.items()}
        timings = current()
        if timings is not None:
            summary["timings"] = timings.to_dict()
        write_summary(summary, folder / "summary.json")
    return summary


def _cores_of_its_own() -> bool:
    """Whether this run has more than one core to itself (a worker of a parallel campaign has
    its numba threads cut to its share), so that figures may be drawn by a second process."""
    import numba

    return numba.get_num_threads() >= 2
