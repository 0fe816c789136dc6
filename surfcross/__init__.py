"""surfcross: excited-state minima and minimum-energy crossing points on PySCF surfaces.

Results from linear-response methods (CIS, TDA, TDDFT) near intersections with the ground
state have known qualitative errors; check important results with higher-level methods.
"""

from .errors import (BackTransformError, CheckpointError, ConvergenceError, EngineError,
                     InputError, StateTrackingError, SurfcrossError)
from .geometry import Geometry, kabsch_align, read_xyz, read_xyz_frames, rmsd, write_xyz
from .states import StateLabel, parse_state, parse_states
from .engine.base import Evaluation, MethodSpec

__version__ = "0.1.0"

__all__ = [
    "BackTransformError", "CheckpointError", "ConvergenceError", "EngineError", "InputError",
    "StateTrackingError", "SurfcrossError",
    "Geometry", "kabsch_align", "read_xyz", "read_xyz_frames", "rmsd", "write_xyz",
    "StateLabel", "parse_state", "parse_states",
    "Evaluation", "MethodSpec",
]
