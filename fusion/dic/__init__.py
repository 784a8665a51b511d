"""Strain ranges from digital image correlation.

Public names
------------
DicField
    A displacement field in the specimen frame (imported or correlated).
CorrelationResult, correlate, REASON_CODES, DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW
    Built-in subset correlation (IC-GN) of a speckle image pair, and the default settings
    (shared with the config).
strain_from_field, vsg_size
    Strain by local polynomial fits (virtual strain gauge), with the noise of overlapping
    subsets propagated and one-sided fits up to holes and edges.
strain_transfer, gain_wavelength, strain_noise_factor
    Spatial resolution (modelled gain on sinusoidal fields) and noise floor of a setting.
displacement_noise, setting_table, recommend_setting, default_setting
    Choosing subset, step and strain window for a feature size and an image noise.
StrainRanges, ranges_from_states, ranges_from_displacement, ranges_from_series,
ranges_from_time_series, ranges_from_strain_table
    Cyclic (peak-to-peak) strain ranges with their noise (from two states, one image pair,
    a load series, a time series or an imported table).
speckle_image, fourier_shift
    Synthetic speckle images with exact translations or deformations.

Reading exported fields and images from files lives in :mod:`fusion.io`
(``read_dic_field``, ``read_image``).

Frames: correlation works in image axes (u along columns, v along rows, down);
:meth:`CorrelationResult.to_field` and the readers convert to the specimen
frame (x right, y up: ``y = -row``, ``v = -v_img``, ``gamma_xy = -gamma_img``).
Ranges are peak-to-peak and signed, max load minus min load.

Caution: strain maps and their noise estimates support engineering judgement;
they do not certify a component. Specimens under cyclic load are hazardous:
follow the laboratory's procedures and the applicable test standards, and have
results reviewed by qualified engineers.
"""

from ._correlate import (DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, REASON_CODES,
                         CorrelationResult, correlate)
from ._field import DicField, StrainRanges
from ._ranges import (ranges_from_displacement, ranges_from_series, ranges_from_states,
                      ranges_from_strain_table, ranges_from_time_series)
from ._resolution import gain_wavelength, strain_noise_factor, strain_transfer
from ._settings import default_setting, displacement_noise, recommend_setting, setting_table
from ._speckle import fourier_shift, speckle_image
from ._strain import strain_from_field, vsg_size

__all__ = [
    "CorrelationResult", "DEFAULT_STEP", "DEFAULT_SUBSET", "DEFAULT_WINDOW", "DicField",
    "REASON_CODES", "StrainRanges", "correlate", "default_setting", "displacement_noise",
    "fourier_shift", "gain_wavelength", "ranges_from_displacement", "ranges_from_series", "ranges_from_states",
    "ranges_from_strain_table", "ranges_from_time_series", "recommend_setting", "setting_table",
    "speckle_image", "strain_from_field", "strain_noise_factor", "strain_transfer", "vsg_size",
]
