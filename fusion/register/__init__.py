"""Registration of correlation fields onto the infrared pixel grid.

Transforms
----------
fit_transform
    Similarity, affine or homography from control-point pairs (RANSAC optional), with the RMS
    and maximum reprojection error in IR px.
Transform2D
    The fitted plane transform (apply, inverse_apply, jacobian, to_dict/from_dict).
min_points
    Fewest control points per model (identity 0, similarity 2, affine 3, homography 4, camera).
map_displacement
    Source-frame displacements expressed as IR pixel displacements.
fit_camera, CameraModel
    Pinhole model of the IR camera with lens distortion from 3D-to-2D control points.

Trust in a registration
-----------------------
assess_fit, FitAssessment
    Its error where control points can tell it: "exact fit" (not estimable) at the minimum
    number of points, else the RMS, a leave-one-out error per point and the outlier among them.
handedness, check_handedness
    Whether a mapping keeps or reverses orientation (the sign of its Jacobian determinant), and
    the refusal of a registration that keeps it (control points typed as (row, col)).

Control points and refinement
-----------------------------
find_fiducials
    Sub-pixel centres of circular markers in an image.
match_fiducials
    Correspondence of two marker sets by their geometry.
refine_with_signal
    Bounded correction of the registration from the measured and predicted maps (ECC).

Resampling
----------
resample_to_grid
    Values at correlation points onto every IR pixel centre, with a validity mask.
edge_distance_map
    Distance of every pixel of that mask to the nearest edge of the data.

Areas of the infrared grid
--------------------------
footprint_share, FOOTPRINT_WARN, FOOTPRINT_FAIL
    How much of the usable thermal area the correlation data cover, and the shares below which
    a run warns or fails.
disk_mask, shape_mask, shape_contains
    Markers and excluded rectangles, circles and polygons.
warp_support_ok
    Pixels whose motion-compensated samples are interpolated from pixels with data only.

Only positions move in registration: strain components stay in the specimen frame.

A registration error moves every prediction onto the wrong pixels and can make the wrong
layer look like the source of the signal near gradients; check the reported RMS and maximum
errors (and the ECC correction) before drawing conclusions. Results support engineering
judgement and do not certify a component; loaded test rigs are hazardous, so follow the
laboratory's procedures, the applicable test standards and qualified engineers.
"""

from ._camera import CameraModel, fit_camera
from ._fiducials import find_fiducials, match_fiducials
from ._masks import (FOOTPRINT_FAIL, FOOTPRINT_WARN, disk_mask, footprint_share, shape_contains, shape_mask,
                     warp_support_ok)
from ._quality import FitAssessment, assess_fit, check_handedness, handedness
from ._refine import refine_with_signal
from ._resample import edge_distance_map, resample_to_grid
from ._transform import RegistrationWarning, Transform2D, fit_transform, map_displacement, min_points

__all__ = [
    "CameraModel", "FOOTPRINT_FAIL", "FOOTPRINT_WARN", "FitAssessment", "RegistrationWarning", "Transform2D",
    "assess_fit", "check_handedness", "disk_mask", "edge_distance_map", "find_fiducials", "fit_camera",
    "fit_transform", "footprint_share", "handedness", "map_displacement", "match_fiducials", "min_points",
    "refine_with_signal", "resample_to_grid", "shape_contains", "shape_mask", "warp_support_ok",
]
