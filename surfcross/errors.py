"""Exception hierarchy of surfcross.

Every error a user can trigger derives from :class:`SurfcrossError`; the command line turns
these into one line on stderr and exit code 2 (bad input) or 1 (ran but failed).
Messages are written for chemists: what went wrong and what to try.
"""

from __future__ import annotations

__all__ = [
    "SurfcrossError",
    "InputError",
    "EngineError",
    "SCFNotConvergedError",
    "ResponseNotConvergedError",
    "StateTrackingError",
    "BackTransformError",
    "ConvergenceError",
    "CheckpointError",
]


class SurfcrossError(Exception):
    """Base class of all surfcross errors."""


class InputError(SurfcrossError, ValueError):
    """Invalid user input: geometry, state label, option value, job file."""


class EngineError(SurfcrossError):
    """The electronic-structure calculation failed at some geometry."""


class SCFNotConvergedError(EngineError):
    """The SCF did not converge even after the fallback strategies."""


class ResponseNotConvergedError(EngineError):
    """The linear-response (CIS/TDA/TDDFT) roots did not converge."""


class StateTrackingError(SurfcrossError):
    """The followed state could not be matched to any computed root."""


class BackTransformError(SurfcrossError):
    """An internal-coordinate step could not be turned into Cartesian coordinates."""


class ConvergenceError(SurfcrossError):
    """A result that must be converged is not (e.g. a workflow stage)."""


class CheckpointError(SurfcrossError):
    """A checkpoint file is missing, truncated or from an incompatible run."""
