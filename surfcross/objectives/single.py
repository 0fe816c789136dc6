"""Energy of one followed electronic state (ground or excited) as an objective.

The state is named by its adiabatic label at the start ('S1'); at every later geometry the
tracker maps it to the root with the largest wavefunction overlap with the previous accepted
geometry, and only that root's analytic gradient is computed. When the followed state changes
character abruptly (assigned |overlap| below ``TrackingOptions.min_overlap``) the objective
asks the optimizer to reject the trial step and retry a shorter one.

Limits: CIS/TDA/TDDFT excited-state minima inherit the errors of linear response (missing
double excitations, poor charge-transfer states with many functionals, wrong S0/S1 crossing
topology). A located minimum needs checking with a higher-level method before it is relied
on.
"""

from __future__ import annotations

import logging
from typing import Any, Mapping

import numpy as np

from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state
from ..tracking.tracker import StateTracker, TrackingOptions
from .base import ObjectiveValue

__all__ = ["SingleStateObjective"]

log = logging.getLogger(__name__)


class SingleStateObjective:
    """Minimize the energy of one state, followed by overlap.

    Parameters
    ----------
    engine
        An :class:`~surfcross.engine.base.Engine`.
    target
        The state, as labelled at the start geometry ('S0', 'S1', 'T1', '2', ...).
    tracking
        :class:`TrackingOptions`; ``TrackingOptions(enabled=False)`` follows the adiabatic
        index instead (root flipping allowed; for comparison).
    """

    def __init__(self, engine: Any, target: StateLabel | str, *,
                 tracking: TrackingOptions = TrackingOptions()) -> None:
        self.engine = engine
        self.target = parse_state(target)
        self.name = f"energy of {self.target}"
        self.tracking_options = tracking
        self.tracker = StateTracker(engine, [self.target], options=tracking)
        self.evaluations = 0
        self.rejected = 0

    # ------------------------------------------------------------------ protocol
    def evaluate(self, geometry: Geometry) -> ObjectiveValue:
        """Energy and analytic gradient of the root that carries the followed state."""
        evaluation = self.engine.states(geometry)
        if self.tracker.started:
            record = self.tracker.assign(evaluation)
        else:
            record = self.tracker.start(evaluation)
        root = parse_state(record.roots[0])
        evaluation = self.engine.gradients(evaluation, [root])
        self.evaluations += 1
        energy = evaluation.energy(root)
        gradient = np.array(evaluation.gradient(root), dtype=float)
        confidence = float(record.confidence[0]) if record.confidence else 1.0
        lost = (self.tracking_options.enabled and bool(record.previous_roots)
                and confidence < self.tracking_options.min_overlap)
        if lost:
            self.rejected += 1
            log.info("%s changed character at the trial geometry (overlap %.2f): asking for a "
                     "shorter step", self.target, confidence)
        info = {"target": str(self.target), "root": str(root), "confidence": confidence,
                "reordered": bool(record.reordered),
                "tracking": "overlap" if self.tracking_options.enabled else "adiabatic index"}
        if record.flags:
            info["flags"] = list(record.flags)
        return ObjectiveValue(value=float(energy), gradient=gradient, exact_gradient=True,
                              energies_eh={str(self.target): float(energy)},
                              evaluation=evaluation, tracking=record, info=info,
                              reject_step=lost)

    def accept(self, value: ObjectiveValue) -> None:
        """Move the tracker's reference to the accepted geometry."""
        if value.tracking is None or value.evaluation is None:
            raise InputError("accept() needs a value produced by this objective's evaluate()")
        self.tracker.accept(value.evaluation, value.tracking)

    def after_convergence(self, value: ObjectiveValue) -> bool:
        """A single-state minimum needs no outer loop."""
        return False

    def state_dict(self) -> dict[str, Any]:
        return {"objective": "single-state", "target": str(self.target),
                "tracker": self.tracker.state_dict()}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Restore a saved run; the next :meth:`evaluate` restarts tracking from there."""
        if str(state.get("target")) != str(self.target):
            raise InputError(f"the saved run followed {state.get('target')}, not {self.target}")
        self.tracker.load_state_dict(state["tracker"])

    # ------------------------------------------------------------------ reports
    @property
    def reorderings(self) -> list[str]:
        """Changes of adiabatic index of the followed state at accepted steps."""
        return self.tracker.reorderings

    @property
    def current_root(self) -> str:
        """Root carrying the followed state at the last accepted geometry."""
        return self.tracker.roots.get(str(self.target), str(self.target))
