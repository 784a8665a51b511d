"""fusion: thermoelastic stress analysis fused with digital image correlation.

Calls for one run, step by step (labelled :mod:`xarray` objects; see :mod:`fusion.api`)
---------------------------------------------------------------------------------------
compute(config, run)
    The whole result of one run of a campaign config, in memory: result.nc's dataset.
lockin_maps, strain_ranges, motion_field, registered_strain, predictions, diagnosis
    One call per step of a run.

Subpackages
-----------
fusion.api
    The calls above.
fusion.campaign
    A config's runs processed into an output folder (``fusion run``, ``fusion check``).
fusion.run
    One run in memory, and the writing of its folder.
fusion.config
    The campaign config: TOML read and validated.
fusion.mechanics
    Materials, classical lamination theory, thermoelastic laws, heat model.
fusion.thermal
    Lock-in of infrared frame stacks, motion compensation.
fusion.dic
    Subset correlation, strain, cyclic strain ranges.
fusion.register
    Correlation grid onto the infrared grid.
fusion.diagnose
    Which layer the signal comes from: residuals, z-scores, source map, regions.
fusion.report
    Figures, HTML report, summary JSON.
fusion.plan
    Frequency plan of a laminate and correlation settings (``fusion plan``, ``fusion gauge``).
fusion.io
    Readers and writers (the only part that touches files).
fusion.datamodel
    Names, units and long names of every result variable.
fusion.demo
    The built-in demo campaign (synthetic data of our own).
fusion.errors, fusion.units
    The errors a user can cause; quantities with units.
fusion.pipeline
    Old names of fusion.campaign, kept for one release.
fusion.bench
    Speed of the hot kernels (``fusion bench``).

Subpackages and calls are imported on first use, so ``import fusion`` stays cheap.
"""

import importlib

__version__ = "0.1.0"

#: The calls of :mod:`fusion.api`, also available here.
_CALLS = ("compute", "diagnosis", "lockin_maps", "motion_field", "predictions", "registered_strain",
          "strain_ranges")
_SUBPACKAGES = ("api", "bench", "campaign", "config", "datamodel", "demo", "diagnose", "dic", "errors", "io",
                "mechanics", "pipeline", "plan", "register", "report", "run", "thermal", "units")

__all__ = ["__version__", *_CALLS, *_SUBPACKAGES]


def __getattr__(name):
    # lazy: the heavy imports (numba, xarray, OpenCV) happen when a call or subpackage is first used
    if name in _CALLS:
        return getattr(importlib.import_module("fusion.api"), name)
    if name in _SUBPACKAGES:
        return importlib.import_module(f"fusion.{name}")
    raise AttributeError(f"module 'fusion' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_CALLS) | set(_SUBPACKAGES))
