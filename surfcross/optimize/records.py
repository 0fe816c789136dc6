"""Records the optimizer loop produces: one :class:`StepRecord` per step and a final
:class:`OptimizationResult`. Both are frozen; observers receive StepRecords.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..geometry import Geometry
from ..objectives.base import Criterion, ObjectiveValue

__all__ = ["Status", "StepRecord", "OptimizationResult"]


class Status(enum.Enum):
    CONVERGED = "converged"
    STEP_LIMIT = "step limit reached"
    FAILED = "failed"
    STOPPED = "stopped"  # an observer asked to stop (StopIteration)


@dataclass(frozen=True)
class StepRecord:
    """What happened at one optimizer iteration (iteration 0 is the start geometry).

    Attributes
    ----------
    iteration
        0 for the starting point, then 1, 2, ... for each accepted geometry.
    geometry
        The geometry of this record.
    value
        The objective value and gradient there (with energies, gap, tracking).
    criteria
        Every convergence test with value, threshold, pass/fail.
    step_bohr
        Cartesian displacement that led here (zeros at iteration 0), (natom, 3).
    trust_radius
        Trust radius after this step (bohr-like units of the coordinate system).
    accepted
        False for rejected trial geometries (reported, then retried with a shorter step).
    evaluations
        Engine evaluations so far (including rejected trials).
    elapsed_s
        Wall time since the loop started.
    """

    iteration: int
    geometry: Geometry
    value: ObjectiveValue
    criteria: tuple[Criterion, ...]
    step_bohr: np.ndarray
    trust_radius: float
    accepted: bool = True
    evaluations: int = 0
    elapsed_s: float = 0.0
    message: str = ""
    #: optimizer + objective state needed to resume from this step (Hessian, trust radius,
    #: objective.state_dict(), ...); written to the checkpoint by the run directory observer
    resume_state: Mapping[str, Any] = field(default_factory=dict)

    @property
    def converged(self) -> bool:
        return bool(self.criteria) and all(c.passed for c in self.criteria)

    @property
    def max_force(self) -> float:
        return float(np.abs(self.value.test_gradient).max())

    @property
    def step_length(self) -> float:
        return float(np.linalg.norm(self.step_bohr))


@dataclass(frozen=True)
class OptimizationResult:
    """Final outcome of an optimization. Plain non-convergence is a status, not an exception."""

    status: Status
    message: str
    geometry: Geometry
    value: ObjectiveValue
    iterations: int
    evaluations: int
    history: tuple[StepRecord, ...] = ()
    warnings: tuple[str, ...] = ()
    info: Mapping[str, Any] = field(default_factory=dict)

    @property
    def converged(self) -> bool:
        return self.status is Status.CONVERGED

    @property
    def energies_eh(self) -> Mapping[str, float]:
        return self.value.energies_eh

    @property
    def gap_eh(self) -> float | None:
        return self.value.gap_eh
