"""Writing one run's result into a folder: result.nc, summary.json and the figures."""

from __future__ import annotations

from pathlib import Path

from .._timing import current, step
from ..io import write_netcdf
from ..report import run_figures, summarize_run, write_summary
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
    with step("result.nc"):
        write_netcdf(ds, folder / "result.nc")
    if cfg.output.figures:
        with step("figures"):
            figs = run_figures(ds, folder / "figures", formats=cfg.output.formats, dpi=cfg.output.dpi,
                               reference_image=result.figure_inputs.get("reference_image"),
                               region_mask=result.figure_inputs.get("region_mask"),
                               profile_line=cfg.output.profile_line,
                               ply_profile=result.figure_inputs.get("ply_profile"))
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
