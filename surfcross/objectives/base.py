"""The objective contract: what the optimizer minimizes, as a value and a gradient.

An objective turns a :class:`Geometry` into an :class:`ObjectiveValue`. It knows the engine,
the tracker and the chemistry; it knows nothing of coordinate systems or steps.

* A *true* objective (one state's energy, the penalty function) sets ``exact_gradient=True``:
  the gradient is the derivative of ``value``, so energy-ratio trust control applies.
* A *composed* objective (gradient projection, branching-plane updating, spin crossing) sets
  ``exact_gradient=False`` and describes its step model with a :class:`SubspaceModel`: the
  optimizer then uses the Hessian ``P H P + sum_k c_k v_k v_k^T`` with ``P = 1 - sum_k v_k v_k^T``
  and updates ``H`` from projected gradients. ``merit`` is the scalar used to judge steps.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Protocol, runtime_checkable

import numpy as np

from ..geometry import Geometry

__all__ = ["Criterion", "SubspaceModel", "ObjectiveValue", "Objective"]


@dataclass(frozen=True)
class Criterion:
    """One convergence test, as reported every step: value, threshold, pass/fail."""

    name: str
    value: float
    threshold: float
    unit: str = ""

    @property
    def passed(self) -> bool:
        return abs(self.value) <= self.threshold


@dataclass(frozen=True)
class SubspaceModel:
    """Cartesian step model of a composed-gradient objective.

    Attributes
    ----------
    directions
        (k, 3N) orthonormal Cartesian directions handled by a fixed curvature (e.g. the
        gap direction x-hat, and the second branching-plane vector).
    curvatures
        (k,) curvatures along those directions, Eh/bohr^2 (e.g. 2|x1| along x-hat).
    """

    directions: np.ndarray
    curvatures: np.ndarray

    def projector(self) -> np.ndarray:
        """P = 1 - V^T V, (3N, 3N)."""
        V = np.atleast_2d(self.directions)
        return np.eye(V.shape[1]) - V.T @ V


@dataclass(frozen=True)
class ObjectiveValue:
    """Result of evaluating an objective at one geometry.

    Attributes
    ----------
    value
        The quantity reported as 'energy' of the objective (Eh): the state energy, the penalty
        function F, or the mean energy of a crossing pair.
    gradient
        Working gradient, (natom, 3), Eh/bohr.
    exact_gradient
        True when ``gradient`` is the derivative of ``value``.
    merit
        Scalar used to accept or reject steps (defaults to ``value``).
    energies_eh
        Energies of the followed states, keyed by their task labels ('S1', 'T1', ...).
    gap_eh
        |E_upper - E_lower| for crossing objectives, else None.
    convergence_gradient
        Gradient that the force criteria test (e.g. the projected mean gradient at a crossing);
        defaults to ``gradient``.
    subspace
        Step model of composed objectives (see module docstring); None for true objectives.
    extra_criteria
        Objective-specific convergence tests (e.g. the gap), all of which must pass.
    evaluation
        The engine evaluation behind this value (None for analytic test surfaces).
    tracking
        The tracking record of this geometry (None without tracking).
    info
        Small JSON-able extras for logs and checkpoints (sigma, roots followed, ...).
    reject_step
        True when the objective asks the optimizer to treat this trial geometry as rejected
        (e.g. the followed state changed character abruptly): shrink the step and retry.
    model_gradient
        Gradient whose differences between points update the quasi-Newton Hessian (composed
        searches: the mean gradient of the pair projected with this point's projector, whose
        changes model the curvature within the intersection space, seam curvature included);
        defaults to ``gradient``.
    """

    value: float
    gradient: np.ndarray
    exact_gradient: bool = True
    merit: float | None = None
    energies_eh: Mapping[str, float] = field(default_factory=dict)
    gap_eh: float | None = None
    convergence_gradient: np.ndarray | None = None
    subspace: SubspaceModel | None = None
    extra_criteria: tuple[Criterion, ...] = ()
    evaluation: Any = None
    tracking: Any = None
    info: Mapping[str, Any] = field(default_factory=dict)
    reject_step: bool = False
    model_gradient: np.ndarray | None = None

    @property
    def merit_value(self) -> float:
        return self.value if self.merit is None else self.merit

    @property
    def test_gradient(self) -> np.ndarray:
        return self.gradient if self.convergence_gradient is None else self.convergence_gradient

    @property
    def hessian_gradient(self) -> np.ndarray:
        return self.gradient if self.model_gradient is None else self.model_gradient


@runtime_checkable
class Objective(Protocol):
    """What the optimizer loop needs from an objective."""

    name: str

    def evaluate(self, geometry: Geometry) -> ObjectiveValue:
        """Value and working gradient at ``geometry``."""

    def accept(self, value: ObjectiveValue) -> None:
        """Called when the optimizer accepts the step that produced ``value`` (the tracker
        moves its reference there; branching-plane vectors are committed)."""

    def after_convergence(self, value: ObjectiveValue) -> bool:
        """Called when every criterion passed. Return True if the objective changed its
        definition (e.g. a larger penalty weight) and the loop must continue: the optimizer
        then re-evaluates at the same geometry; see ``optimize.loop`` for what happens to the
        Hessian (optional hooks ``adjust_hessian``, ``merit``, ``consume_evaluations`` and
        ``use_convergence`` are documented there)."""

    def state_dict(self) -> dict[str, Any]:
        """JSON/HDF5-able state needed to resume (sigma, branching-plane vector, roots)."""

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Restore what :meth:`state_dict` returned."""
