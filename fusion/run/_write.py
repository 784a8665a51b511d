"""Writing one run's result into a folder: result.nc, summary.json and the figures."""

from __future__ import annotations

from pathlib import Path

from ..io import write_netcdf
from ..report import run_figures, summarize_run, write_summary
from ._compose import RunResult
from ._files import input_digests

__all__ = ["write_run"]


def write_run(result: RunResult, folder: Path, *, cfg, run, stamp: str) -> dict:
    """Write result.nc, summary.json and figures of a run into ``folder``; returns the summary."""
    inputs = input_digests(run)
    ds = result.dataset
    ds.attrs["input_sha256"] = inputs
    write_netcdf(ds, folder / "result.nc")
    # the valid area is judged against the usable thermal area (meta["footprint"]), by the
    # registration's footprint rule: no limit of its own here
    summary = summarize_run(ds, regions=result.regions, warnings=result.warnings, meta=result.meta,
                            registration_limit_px=cfg.registration_for(run).max_error,
                            snr_limit=cfg.diagnosis.min_snr)
    summary["provenance"].update(stamp=stamp, inputs=inputs)
    if cfg.output.figures:
        figs = run_figures(ds, folder / "figures", formats=cfg.output.formats, dpi=cfg.output.dpi,
                           reference_image=result.figure_inputs.get("reference_image"),
                           region_mask=result.figure_inputs.get("region_mask"),
                           profile_line=cfg.output.profile_line,
                           ply_profile=result.figure_inputs.get("ply_profile"))
        summary["figures"] = {k: str(Path(v).relative_to(folder)) for k, v in figs.items()}
    write_summary(summary, folder / "summary.json")
    return summary
