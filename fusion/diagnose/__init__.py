"""Which layer of the laminate does the thermoelastic signal come from?

Pure functions on IR-grid maps: the measured ratio dT/T0 and its uncertainty against
the ratio each candidate source predicts (coating, resin-rich layer, surface ply, whole
laminate, through-thickness heat model) and theirs.

Public names
------------
measured_ratio
    The measured ratio dT/T0, its noise, the signal-to-noise ratio and the phase lag from
    lock-in maps, in the convention :func:`diagnose` expects.
diagnose, Diagnosis
    Per-pixel residuals and z-scores, source map (CF flags), source probabilities,
    surface fraction and area fractions.
region_table, region_mask, WHOLE_FIELD
    Named regions (rectangles, circles, masks) and their statistics.
calibration_factor, apply_calibration, CALIBRATION_RANGE
    Calibration of the infrared measurement on a reference region of known source.

The diagnosis supports engineering judgement; it does not certify a component. A
source map is only as good as the stated uncertainties of the measurement and of the
material properties behind each prediction.
"""

from ._calibration import CALIBRATION_RANGE, apply_calibration, calibration_factor
from ._map import Diagnosis, diagnose
from ._measured import measured_ratio
from ._regions import WHOLE_FIELD, region_mask, region_table

__all__ = [
    "CALIBRATION_RANGE", "Diagnosis", "WHOLE_FIELD", "apply_calibration", "calibration_factor",
    "diagnose", "measured_ratio", "region_mask", "region_table",
]
