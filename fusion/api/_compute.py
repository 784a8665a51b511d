"""One whole run in memory: the dataset of result.nc, without writing a file."""

from __future__ import annotations

from ..config import Config, RunSpec, load_config
from ..errors import ArgumentError
from ..io import netcdf_form
from ..run import INPUT_DIGEST, compute_run, input_digests

__all__ = ["compute", "run_of"]


def run_of(config, run) -> tuple[Config, RunSpec]:
    """The validated config and the ``[[run]]`` named ``run`` (or given as a RunSpec)."""
    cfg = config if isinstance(config, Config) else load_config(config)
    if isinstance(run, RunSpec):
        return cfg, run
    for spec in cfg.runs:
        if spec.name == run:
            return cfg, spec
    raise ArgumentError("run", f"no run named {run!r} in the config; its runs: {[r.name for r in cfg.runs]}")


def compute(config, run, *, progress=False):
    """The whole result of one run, in memory: the dataset ``fusion run`` writes as result.nc.

    Parameters
    ----------
    config : str, os.PathLike or Config
        A campaign config file (read and validated as ``fusion run`` does) or a loaded
        :class:`~fusion.config.Config`.
    run : str or RunSpec
        The name of one ``[[run]]`` of the config, or the run itself.
    progress : bool
        Progress bars on stderr when it is a terminal.

    Returns
    -------
    xarray.Dataset
        Identical to ``<out>/<run>/result.nc`` of ``fusion run`` on the same config and inputs
        (every map with its units and long name on the IR grid ``(y, x)``, the global
        attributes with the config text, the content digests of the inputs and the strain settings as
        JSON text, exactly as the file holds them). Nothing is written.

    Raises
    ------
    FusionError
        What ``fusion run`` reports for the run: a config key, an input file, no run of
        that name.

    Notes
    -----
    The composition of ``fusion run`` itself (:func:`fusion.run.compute_run`), with the
    attributes put in the form :func:`fusion.io.write_netcdf` writes
    (:func:`fusion.io.netcdf_form`). The steps one by one are :func:`fusion.lockin_maps`,
    :func:`fusion.strain_ranges`, :func:`fusion.registered_strain`,
    :func:`fusion.motion_field`, :func:`fusion.predictions` and :func:`fusion.diagnosis`.
    """
    cfg, spec = run_of(config, run)
    result = compute_run(cfg, spec, progress=progress)
    ds = result.dataset
    ds.attrs["input_digests"] = input_digests(spec)
    ds.attrs["input_digest_algorithm"] = INPUT_DIGEST
    return netcdf_form(ds)
