"""Tasks: the short functions that compose engine, tracker, objective, optimizer and run record.

* :func:`compute_states` -- vertical states at one geometry;
* :func:`relax` -- minimum of one (ground or excited) state, followed by overlap;
* :func:`find_crossing` -- minimum-energy crossing point of two states, characterized;
* :func:`resume` -- continue an interrupted run from its checkpoint.
"""

from .common import RunOptions, TaskResult, prepare_method
from .crossing import find_crossing
from .relax import relax
from .resume import resume
from .states import compute_states

__all__ = ["RunOptions", "TaskResult", "prepare_method", "compute_states", "relax",
           "find_crossing", "resume"]
