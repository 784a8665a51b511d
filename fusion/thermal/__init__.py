"""Thermal side: lock-in of infrared frame stacks, load reference, motion compensation.

Public names
------------
lockin, LockinResult
    One streaming least-squares pass over a frame stack (NumPy, memory map, lazy
    stack or dask array): T0, signed dT in phase with the load, quadrature, phase,
    noise, second harmonic, drift, SNR and the bad-pixel mask.
estimate_frequency
    Loading frequency of a sampled signal (periodogram peak refined by a sine fit).
load_reference, LoadReference
    Mean, peak-to-peak range and phase of the load fundamental.
motion_compensate, motion_amplitude, CompensatedFrames
    Warp infrared frames back to the reference configuration.

The maps support engineering judgement; they do not certify a component. Test rigs
under cyclic load are hazardous: acquire data under the laboratory's procedures and
the applicable test standards, with qualified engineers responsible for the test.
"""

from ._lockin import LoadReference, LockinResult, estimate_frequency, load_reference, lockin
from ._motion import CompensatedFrames, motion_amplitude, motion_compensate  # noqa: F401

__all__ = [
    "lockin", "LockinResult", "estimate_frequency", "load_reference", "LoadReference",
    "motion_compensate", "motion_amplitude", "CompensatedFrames",
]
