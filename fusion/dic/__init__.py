"""Strain ranges from digital image correlation.

Public names
------------
DicField
    A displacement field in the specimen frame (imported or correlated).
CorrelationResult, correlate, REASON_CODES
    Built-in subset correlation (IC-GN) of a speckle image pair.
strain_from_field, vsg_size
    Strain by local polynomial fits (virtual strain gauge).
StrainRanges, ranges_from_states, ranges_from_series, ranges_from_time_series,
ranges_from_strain_table
    Cyclic (peak-to-peak) strain ranges with their noise.
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

from ._correlate import REASON_CODES, CorrelationResult, correlate
from ._field import DicField, StrainRanges
from ._ranges import (ranges_from_series, ranges_from_states, ranges_from_strain_table,
                      ranges_from_time_series)
from ._speckle import fourier_shift, speckle_image
from ._strain import strain_from_field, vsg_size

__all__ = [
    "CorrelationResult", "DicField", "REASON_CODES", "StrainRanges", "correlate",
    "fourier_shift", "ranges_from_series", "ranges_from_states", "ranges_from_strain_table",
    "ranges_from_time_series", "speckle_image", "strain_from_field", "vsg_size",
]
