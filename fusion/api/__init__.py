"""The steps of a run as Python calls, each returning a labelled xarray object.

For notebooks and scripts: re-run one step with another setting, plot an intermediate map,
feed the strain into a model of your own. Every call is also available as ``fusion.<name>``.

Public names
------------
compute
    The whole result of one ``[[run]]`` of a config in memory: the dataset ``fusion run``
    writes as result.nc.
lockin_maps
    Lock-in maps of an infrared frame stack (T0, dT, phase, noise, the measured ratio dT/T0
    and its phase lag) on the IR grid.
strain_ranges
    Cyclic strain ranges from a strain table, two states, a load series or speckle images
    (one pair is enough), on the correlation grid in the specimen frame.
motion_field
    The in-plane motion per unit load on the IR grid that motion compensation undoes.
registered_strain
    The strain ranges resampled onto every IR pixel.
predictions
    Predicted dT/T0 of every candidate source with standard deviations and phase lags,
    the through-thickness heat model included.
diagnosis
    Residuals, z-scores and the source map of the measured ratio against the predictions.

Conventions
-----------
Names, units and long names are those of result.nc (:mod:`fusion.datamodel`): strain ranges
``delta_eps_xx``, ``delta_eps_yy``, ``delta_gamma_xy`` (dimensionless, specimen frame,
engineering shear), temperatures in K, lags in degrees. IR maps have dims ``(y, x)`` = (IR
row, IR column) in pixels; correlation data have the specimen-frame coordinates ``x``
(right) and ``y`` (up) in mm (or visible px). Image positions are (x, y) = (column, row)
everywhere. Values that read without error but cannot be what the argument means (lengths
in mm for m, microstrain, a pixel size in m, a swapped grid or frame stack, kelvin for a
ratio) raise :class:`~fusion.errors.ArgumentError` naming the likely slip.

The steps are the computations of ``fusion run``: a run rebuilt from them matches its
result.nc (a test checks it on the demo campaign). Results support engineering judgement and
do not certify a component.
"""

from ._compute import compute
from ._diagnose import diagnosis
from ._predict import predictions
from ._register import registered_strain
from ._strain import strain_ranges
from ._thermal import lockin_maps, motion_field

__all__ = ["compute", "diagnosis", "lockin_maps", "motion_field", "predictions", "registered_strain",
           "strain_ranges"]
