"""Registration of correlation fields onto the infrared pixel grid.

Transforms
----------
fit_transform
    Similarity, affine or homography from control-point pairs (RANSAC optional), with the RMS
    and maximum reprojection error in IR px.
Transform2D
    The fitted plane transform (apply, inverse_apply, jacobian, to_dict/from_dict).
map_displacement
    Source-frame displacements expressed as IR pixel displacements.
fit_camera, CameraModel
    Pinhole model of the IR camera with lens distortion from 3D-to-2D control points.

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

Only positions move in registration: strain components stay in the specimen frame.

A registration error moves every prediction onto the wrong pixels and can make the wrong
layer look like the source of the signal near gradients; check the reported RMS and maximum
errors (and the ECC correction) before drawing conclusions. Results support engineering
judgement and do not certify a component; loaded test rigs are hazardous, so follow the
laboratory's procedures, the applicable test standards and qualified engineers.
"""

from ._camera import CameraModel, fit_camera
from ._fiducials import find_fiducials, match_fiducials
from ._refine import refine_with_signal
from ._resample import edge_distance_map, resample_to_grid
from ._transform import RegistrationWarning, Transform2D, fit_transform, map_displacement

__all__ = [
    "CameraModel", "RegistrationWarning", "Transform2D", "edge_distance_map", "find_fiducials",
    "fit_camera",
    "fit_transform", "map_displacement", "match_fiducials", "refine_with_signal",
    "resample_to_grid",
]
