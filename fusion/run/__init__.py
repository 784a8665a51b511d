"""One run: its steps and their composition, in memory, and the writing of its result.

The steps read a run's inputs through :mod:`fusion.io` and compute with the physics
subpackages; nothing here knows about output folders, locks or scheduling (that is
:mod:`fusion.campaign`).

Public names
------------
compute_run, RunResult
    Every product of one ``[[run]]`` of a config, in memory.
write_run
    result.nc, summary.json and the figures of a computed run, written into a folder.
check_run_inputs
    Every input of a run opened far enough to know it can be read (``fusion check``).
input_files, input_digests, sequence_files, INPUT_DIGEST
    The files a run reads, their content digests (as result.nc records them; a frame or image
    folder by one digest over its members), the hash that makes them, and the members of its
    frame and image folders or patterns.
frames_within_budget
    A run's frame stack refused from its header when its frames are too large for the
    memory budget (before anything is read or hashed).
input_state, InputState
    Whether every input of a run is there (sequences complete) and the identity of its
    files now (``fusion watch``).
"""

from ._check import check_run_inputs
from ._compose import RunResult, compute_run
from ._files import INPUT_DIGEST, input_digests, input_files, sequence_files
from ._inputs import InputState, frames_within_budget, input_state
from ._write import write_run

__all__ = ["INPUT_DIGEST", "InputState", "RunResult", "check_run_inputs", "compute_run", "frames_within_budget", "input_digests", "input_files",
           "input_state", "sequence_files", "write_run"]
