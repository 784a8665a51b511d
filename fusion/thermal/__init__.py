"""Thermal side: lock-in of infrared frame stacks, load reference, motion compensation.

Public names
------------
lockin, LockinResult
    One streaming least-squares pass over a frame stack (NumPy, memory map, lazy
    stack or dask array): T0, signed dT in phase with the load, quadrature, phase,
    noise, second harmonic, drift, SNR and the bad-pixel mask.
estimate_frequency, alias_frequency, alias_candidates
    Loading frequency of a sampled signal (periodogram peak refined by a sine fit) with
    its uncertainty; where a frequency appears when sampled too slowly, and back.
sample_frames, SAMPLE_FRAMES, clip_levels, layout_problem
    Frame-stack sanity from a sample of frames (how many are read by default): clip levels (pile-ups at the extreme raw
    values) and layouts that look scrambled (rows, first frame).
load_reference, LoadReference
    Mean, peak-to-peak range and phase of the load fundamental.
motion_compensate, motion_amplitude, CompensatedFrames
    Warp infrared frames back to the reference configuration.

The maps support engineering judgement; they do not certify a component. Test rigs
under cyclic load are hazardous: acquire data under the laboratory's procedures and
the applicable test standards, with qualified engineers responsible for the test.
"""

from ._frequency import alias_candidates, alias_frequency, estimate_frequency
from ._lockin import LoadReference, LockinResult, load_reference, lockin
from ._motion import CompensatedFrames, motion_amplitude, motion_compensate  # noqa: F401
from ._sanity import SAMPLE_FRAMES, clip_levels, layout_problem, sample_frames

__all__ = [
    "lockin", "LockinResult", "estimate_frequency", "load_reference", "LoadReference",
    "motion_compensate", "motion_amplitude", "CompensatedFrames", "alias_frequency", "alias_candidates",
    "sample_frames", "SAMPLE_FRAMES", "clip_levels", "layout_problem",
]
