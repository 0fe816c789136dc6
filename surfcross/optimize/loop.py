"""The optimizer loop: evaluate -> record -> notify -> converged? -> step, in one coordinate system.

Step acceptance
---------------
*True objectives* (``value.exact_gradient``): the trust radius follows the ratio of actual to
predicted change (quadratic model of the step actually taken, see :mod:`.trust`). A trial whose
value rises by more than ``energy_rise_tolerance`` is rejected: a record with
``accepted=False`` is emitted, the radius shrinks to min(tau, |s|)/4 and a new step is taken
from the old point. Every trial, rejected or not, feeds the Hessian update (a rejected trial
still measures the curvature around the current point).

*Composed objectives* (``exact_gradient=False``; the working gradient is not the derivative of
any scalar): there is no ratio. The step uses the working Hessian
H_w = P H P + sum_k c_k v_k v_k^T from ``value.subspace`` (P = 1 - V^T V, rebuilt at every
step, never reused), and the quasi-Newton H is updated with y = P_new (m_new - m_old), m the
objective's model gradient (``value.hessian_gradient``: for a crossing pair the mean gradient
projected with its own point's projector, P_k gbar_k, so the gap term stays out while the turn
of the projector, which carries the curvature of the seam, stays in), and the projected step
actually taken, P_new s. A trial is rejected when its merit rises by
more than ``merit_rise_tolerance`` above the current point's merit, recomputed at the
objective's current weights (``objective.merit(value)`` when it has that method); the radius doubles only after ``grow_after`` consecutive accepted
steps at the boundary and shrinks on rejection. This is the documented rule for objectives that
are not true energies; subspace models are Cartesian, so these runs need Cartesian coordinates.

A composed trial rejected on its merit gets one second-order correction first when the
objective offers ``restoration(value)`` (a displacement back to the seam from the trial): the
corrected point is evaluated and accepted if its merit is lower (see ``_corrected_trial``).
In both cases ``value.reject_step`` makes the trial count as rejected. After a rejection the
objective may restate the current point without a new evaluation (``objective.refresh``: the
projected crossing search learns its branching plane from a trial that turned x-hat). A rise (of value or
merit) that a shorter step cannot cure, because the radius is already at ``trust_min`` or the
step was shorter, is accepted with a warning in ``OptimizationResult.warnings`` (noise-level
rises near convergence). A ``reject_step`` request that cannot be cured that way, or
``max_rejections`` consecutive rejections, end the run with status 'failed'.

Other rules: when every criterion passes, ``objective.after_convergence(value)`` may redefine
the objective (returns True); the loop then re-evaluates at the same geometry (one more
evaluation and one more iteration), lets the objective adapt the Hessian
(``objective.adjust_hessian``; without it the Hessian is reset to the initial model) and goes
on. Evaluations an objective makes itself while checking convergence
(``objective.consume_evaluations()``) are added to the count. When
the coordinate system asks for a rebuild it is replaced by ``coords.rebuilt(x)`` and the Hessian
is re-initialized from the model (simple and safe; curvature learned so far is lost).

Resuming: every record carries ``resume_state``; :meth:`Optimizer.load_state_dict` followed by
:meth:`Optimizer.run` on the geometry of that record continues with the same Hessian, trust
radius, counters and iteration numbers (the geometry is evaluated once more on resuming, which
counts as one evaluation).

The quasi-Newton machinery finds a stationary point of whatever the objective defines; with
linear-response excited states near intersections with the ground state the surface itself can
be qualitatively wrong, so results need checking with higher-level methods.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, replace
from typing import Any, Callable, Iterable, Iterator, Mapping

import numpy as np

from ..errors import BackTransformError, CheckpointError, EngineError, InputError
from ..geometry import Geometry
from ..objectives.base import Objective, ObjectiveValue
from .convergence import all_passed, cartesian_test_gradient, evaluate_criteria
from .records import OptimizationResult, Status, StepRecord
from .settings import ConvergenceSettings, OptimizerSettings
from .steps import cap_atom_displacement, quadratic_change, rfo_step, working_hessian
from .trust import judge_composed_step, judge_true_step
from .updates import clamp_eigenvalues, make_update

__all__ = ["Optimizer", "Observer"]

logger = logging.getLogger(__name__)

Observer = Callable[[StepRecord], Any]
STATE_FORMAT = 1


@dataclass
class _State:
    """Mutable loop state at the current accepted point (private)."""

    geometry: Geometry
    value: ObjectiveValue
    gq: np.ndarray
    H: np.ndarray
    trust: float
    gm: np.ndarray | None = None  # q-space gradient whose differences update H
    merit: float = 0.0  # merit of the current point at the objective's current weights
    iteration: int = 0
    streak: int = 0
    rejections: int = 0
    prev_value: float | None = None
    last_step: np.ndarray | None = None

    @property
    def x(self) -> np.ndarray:
        return np.asarray(self.geometry.coords_bohr)


class Optimizer:
    """Quasi-Newton minimizer (RFO steps, trust radius, Hessian updates) of an objective.

    Parameters
    ----------
    objective
        Anything following :class:`surfcross.objectives.base.Objective`.
    coords
        A coordinate system (:class:`surfcross.coords.base.CoordinateSystem`).
    settings, convergence
        Step and convergence settings (defaults: ``OptimizerSettings()`` and the 'normal'
        thresholds).
    observers
        Callables receiving every :class:`StepRecord` (accepted and rejected). An observer
        that raises ``StopIteration`` ends the run cleanly with status 'stopped'; any other
        exception propagates.
    """

    def __init__(self, objective: Objective, coords: Any, *,
                 settings: OptimizerSettings | None = None,
                 convergence: ConvergenceSettings | None = None,
                 observers: Iterable[Observer] = ()) -> None:
        for attr in ("evaluate", "accept", "after_convergence", "state_dict", "load_state_dict"):
            if not callable(getattr(objective, attr, None)):
                raise InputError(f"the objective lacks the method {attr}(); see Objective")
        self.objective = objective
        self.coords = coords
        self.settings = settings if settings is not None else OptimizerSettings()
        self.convergence = convergence if convergence is not None else ConvergenceSettings.preset()
        self._observers: list[Observer] = list(observers)
        self.update = make_update(self.settings.hessian_update, self.settings.curvature_policy)
        bind = getattr(objective, "use_convergence", None)
        if callable(bind):  # objectives that verify their own convergence need the thresholds
            bind(self.convergence)
        self.evaluations = 0
        self.warnings: list[str] = []
        self.history: list[StepRecord] = []
        self.outcome: tuple[Status, str] | None = None
        self._loaded: Mapping[str, Any] | None = None
        self._state: _State | None = None
        self._t0 = 0.0

    # ------------------------------------------------------------------ public
    def attach(self, observer: Observer) -> Observer:
        """Add an observer; returns it."""
        if not callable(observer):
            raise InputError(f"an observer must be callable, got {observer!r}")
        self._observers.append(observer)
        return observer

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Continue from a ``StepRecord.resume_state`` at the next :meth:`run`/:meth:`iterate`."""
        missing = {"format", "iteration", "evaluations", "trust_radius", "hessian",
                   "objective", "update"} - set(state)
        if missing:
            raise CheckpointError(f"optimizer state lacks {', '.join(sorted(missing))}")
        if int(state["format"]) != STATE_FORMAT:
            raise CheckpointError(f"optimizer state format {state['format']} is not {STATE_FORMAT}")
        self._loaded = dict(state)

    def state_dict(self) -> dict[str, Any]:
        """Resume state at the current accepted point (after a run has started)."""
        if self._state is None:
            raise InputError("the optimizer has not started: no state to save")
        return self._resume_state(self._state)

    def run(self, geometry: Geometry) -> OptimizationResult:
        """Optimize from ``geometry``; plain non-convergence is a status, not an exception."""
        for _ in self.iterate(geometry):
            pass
        status, message = self.outcome
        st = self._state
        return OptimizationResult(
            status=status, message=message, geometry=st.geometry, value=st.value,
            iterations=st.iteration, evaluations=self.evaluations, history=tuple(self.history),
            warnings=tuple(self.warnings),
            info={"trust_radius": st.trust, "hessian_update": self.update.name,
                  "update_counts": dict(self.update.counts), "coordinates": self.coords.name,
                  "elapsed_s": time.perf_counter() - self._t0})

    def iterate(self, geometry: Geometry) -> Iterator[StepRecord]:
        """Generator of step records; the final status is in :attr:`outcome` afterwards."""
        self.outcome = None
        self.history = []
        self.warnings = []
        self._t0 = time.perf_counter()
        gen = self._steps(geometry)
        while True:
            try:
                rec = next(gen)
            except StopIteration as done:
                self.outcome = done.value
                logger.debug("optimization ended: %s (%s)", done.value[0].value, done.value[1])
                return
            yield rec

    # ------------------------------------------------------------------ the loop
    def _steps(self, geometry: Geometry):
        st = self._start(geometry)
        resumed, self._loaded = self._loaded is not None, None
        last = self._record(st, st.geometry, st.value, accepted=True,
                            message="resumed" if resumed else "start")
        stop = self._notify(last)
        yield last
        while not stop:
            if all_passed(last.criteria):
                redefined = self.objective.after_convergence(st.value)
                self._count_extra_evaluations()
                if not redefined:
                    return Status.CONVERGED, f"converged after {st.iteration} iterations"
                rec, failure = self._redefined(st), None
            elif st.iteration >= self.settings.max_iterations:
                return (Status.STEP_LIMIT,
                        f"not converged within {self.settings.max_iterations} iterations")
            else:
                rec, failure = self._step(st)
            if rec is not None:
                stop = self._notify(rec)
                yield rec
                if rec.accepted:
                    last = rec
            if failure:
                return Status.FAILED, failure
        return Status.STOPPED, "stopped by an observer"

    def _start(self, geometry: Geometry) -> _State:
        state = self._loaded
        if state is not None:
            self.objective.load_state_dict(state["objective"])
            self.update.load_state_dict(state["update"])
            self.evaluations = int(state["evaluations"])
        else:
            self.evaluations = 0
            self.update = make_update(self.settings.hessian_update, self.settings.curvature_policy)
        value = self._evaluate(geometry)
        if value is None:
            raise EngineError("the objective gave a non-finite value or gradient at the start "
                              "geometry; check the electronic-structure settings")
        x = np.asarray(geometry.coords_bohr)
        gq = self.coords.gradient(x, value.gradient)
        st = _State(geometry=geometry, value=value, gq=gq, H=self._initial_hessian(geometry),
                    trust=self.settings.trust_radius, gm=self._model_gradient(x, value))
        if state is not None:
            self._restore(st, state)
        self._state = st
        self.objective.accept(value)
        st.merit = self._merit(value)
        return st

    def _restore(self, st: _State, state: Mapping[str, Any]) -> None:
        H = np.array(state["hessian"], dtype=float)
        if H.shape != st.H.shape:
            raise CheckpointError(f"saved Hessian has shape {H.shape}, this coordinate system "
                                  f"needs {st.H.shape}: the checkpoint is from another molecule")
        saved = state.get("coords_bohr")
        if saved is not None and np.abs(np.asarray(saved) - st.x).max() > 1e-6:
            self._warn("resuming at a geometry that differs from the saved one")
        st.H = H
        st.trust = float(state["trust_radius"])
        st.iteration = int(state["iteration"])
        st.streak = int(state.get("good_streak", 0))
        st.rejections = int(state.get("rejections", 0))
        prev = state.get("previous_value")
        st.prev_value = None if prev is None else float(prev)
        last = state.get("last_step_bohr")
        st.last_step = None if last is None else np.array(last, dtype=float)

    def _step(self, st: _State) -> tuple[StepRecord | None, str | None]:
        """One trial from the current point: (record, failure message or None)."""
        s = self.settings
        composed = not st.value.exact_gradient
        Hw = self._working_hessian(st)
        prop = rfo_step(st.gq, Hw, st.trust)
        dq = self.coords.project_step(st.x, prop.step)
        try:
            dq, x_new = self._displace(st.x, dq)
            trial_geom = st.geometry.with_coords(x_new)
        except (BackTransformError, InputError) as exc:
            return self._failed_displacement(st, dq, exc)
        length = float(np.linalg.norm(dq))
        value = self._evaluate(trial_geom)
        if value is None:
            return self._failed_displacement(st, dq, "non-finite value or gradient")
        if composed:
            decision = judge_composed_step(
                merit_change=value.merit_value - st.merit, step_length=length,
                radius=st.trust, good_streak=st.streak, grow_after=s.grow_after,
                trust_min=s.trust_min, trust_max=s.trust_max,
                rise_tolerance=s.merit_rise_tolerance, objective_rejects=value.reject_step)
        else:
            # the prediction is that of the RFO step itself: the projection applied afterwards
            # only removes redundant/constrained components (no first-order change of the
            # geometry), but with a quasi-Newton H that has learned curvature along them it
            # could turn the predicted change positive for a step that lowers the energy
            decision = judge_true_step(
                actual=value.value - st.value.value, predicted=quadratic_change(st.gq, Hw, prop.step),
                step_length=length, radius=st.trust, trust_min=s.trust_min,
                trust_max=s.trust_max, rise_tolerance=s.energy_rise_tolerance,
                objective_rejects=value.reject_step)
        step_cart = x_new - st.x
        if composed and not decision.accept and not value.reject_step:
            corrected = self._corrected_trial(st, value, x_new, length)
            if corrected is not None:
                trial_geom, value, dq, decision = corrected
                x_new = np.asarray(trial_geom.coords_bohr)
                step_cart = x_new - st.x
        if not decision.accept:
            stuck = decision.trust_radius >= length * (1.0 - 1e-9)
            if stuck and not value.reject_step:
                self._warn(f"iteration {st.iteration + 1}: {decision.reason}; accepted because "
                           "a shorter step is not possible")
            else:
                st.trust, st.streak = decision.trust_radius, 0
                st.rejections += 1
                self._learn(st, value, trial_geom, dq)
                rec = self._record(st, trial_geom, value, accepted=False, step=step_cart,
                                   message=f"rejected: {decision.reason}")
                self._refresh(st)
                if stuck or st.rejections > s.max_rejections:
                    return rec, (f"{st.rejections} consecutive steps rejected "
                                 f"(last: {decision.reason}); check the objective near this geometry")
                return rec, None
        self._accept(st, trial_geom, value, dq, step_cart, decision.trust_radius, decision.good_streak)
        return self._record(st, st.geometry, st.value, accepted=True, step=step_cart,
                            message=decision.reason), None

    def _corrected_trial(self, st: _State, value: ObjectiveValue, x_new: np.ndarray,
                         length: float):
        """Second-order correction of a composed trial rejected on its merit.

        On a curved seam a step along the intersection space opens the gap to second order
        and the merit rejects it although the step was good (the Maratos effect of
        constrained optimization, textbook). The objective's ``restoration(value)`` gives the
        Cartesian displacement back to the seam from the trial (for a crossing search
        -dE x-hat/|x1|); the corrected point is evaluated once and accepted when its merit
        is below the current one. Only a trial that lowered the energy and opened the gap is
        corrected. Returns (geometry, value, dq, decision) or None."""
        restore = getattr(self.objective, "restoration", None)
        gap_t, gap_0 = value.gap_eh, st.value.gap_eh
        if gap_t is None or gap_0 is None or not (value.value < st.value.value and gap_t > gap_0):
            return None  # only a step that lowered the energy but opened the gap
        r = restore(value) if callable(restore) else None
        if r is None:
            return None
        dq = (x_new - st.x).ravel() + np.asarray(r, float).ravel()
        dq = self.coords.project_step(st.x, dq)
        try:
            dq, x2 = self._displace(st.x, dq)
        except (BackTransformError, InputError):
            return None
        if float(np.linalg.norm(dq)) > 1.5 * max(length, st.trust):
            return None
        value2 = self._evaluate(st.geometry.with_coords(x2))
        if value2 is None or value2.reject_step:
            return None
        s = self.settings
        decision = judge_composed_step(
            merit_change=value2.merit_value - st.merit, step_length=length, radius=st.trust,
            good_streak=st.streak, grow_after=s.grow_after, trust_min=s.trust_min,
            trust_max=s.trust_max, rise_tolerance=s.merit_rise_tolerance)
        if not decision.accept:
            return None
        decision = replace(decision, reason=decision.reason + " (after a correction back to "
                                                              "the seam)")
        return st.geometry.with_coords(x2), value2, dq, decision

    def _learn(self, st: _State, value: ObjectiveValue, geometry: Geometry,
               dq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Update the Hessian with the secant pair of a trial (accepted or rejected: a
        rejected trial still measures the curvature around the current point).

        The step is the one actually taken (the q-space difference of the two geometries,
        which differs from the requested ``dq`` after an internal-coordinate back-transformation
        or a per-atom cap); the gradient difference is that of the objective's model gradient
        (for a composed crossing search the projected mean gradient P_k gbar_k of each point,
        the difference projected once more with the new point's subspace: the gap term does
        not enter the curvature of the intersection space). Returns the new working and model
        q-gradients."""
        x_new = np.asarray(geometry.coords_bohr)
        gq_new = self.coords.gradient(x_new, value.gradient)
        gm_new = self._model_gradient(x_new, value)
        s = self._actual_step(st.x, x_new, dq)
        y = gm_new - (st.gm if st.gm is not None else st.gq)
        if value.subspace is not None:
            P = value.subspace.projector()
            y, s = P @ y, P @ s
        H = self.update.update(st.H, s, y).hessian
        st.H = clamp_eigenvalues(H, self.settings.min_curvature, self.settings.max_curvature)
        return gq_new, gm_new

    def _refresh(self, st: _State) -> None:
        """Let the objective restate the current point after a rejected trial taught it
        something (``objective.refresh(value)`` returns a new value or None; no evaluation)."""
        refresh = getattr(self.objective, "refresh", None)
        new = refresh(st.value) if callable(refresh) else None
        if new is None:
            return
        st.value, st.gq = new, self.coords.gradient(st.x, new.gradient)
        st.gm = self._model_gradient(st.x, new)
        st.merit = self._merit(new)

    def _model_gradient(self, x: np.ndarray, value: ObjectiveValue) -> np.ndarray:
        return self.coords.gradient(x, value.hessian_gradient)

    def _actual_step(self, x_old: np.ndarray, x_new: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """q-space step between two geometries (dihedrals wrapped where the system knows how)."""
        q_new, q_old = self.coords.values(x_new), self.coords.values(x_old)
        difference = getattr(self.coords, "difference", None)
        step = difference(q_new, q_old) if callable(difference) else q_new - q_old
        step = np.asarray(step, float)
        return step if step.shape == np.shape(dq) else np.asarray(dq, float)

    def _merit(self, value: ObjectiveValue) -> float:
        """Merit of ``value`` at the objective's current weights (they may have changed since
        it was computed: a composed search raises its gap weight at accepted points)."""
        remerit = getattr(self.objective, "merit", None)
        return float(remerit(value)) if callable(remerit) else float(value.merit_value)

    def _accept(self, st, geometry, value, dq, step_cart, trust, streak) -> None:
        x_new = np.asarray(geometry.coords_bohr)
        gq_new, gm_new = self._learn(st, value, geometry, dq)
        st.prev_value, st.last_step = st.value.value, step_cart
        st.geometry, st.value, st.gq, st.gm = geometry, value, gq_new, gm_new
        st.trust, st.streak, st.rejections = trust, streak, 0
        st.iteration += 1
        self.objective.accept(value)
        st.merit = self._merit(value)
        if self.coords.needs_rebuild(x_new):
            rebuilt = getattr(self.coords, "rebuilt", None)
            if callable(rebuilt):
                logger.info("coordinate system rebuilt at iteration %d; Hessian re-initialized",
                            st.iteration)
                self.coords = rebuilt(x_new)
                st.gq = self.coords.gradient(x_new, value.gradient)
                st.gm = self._model_gradient(x_new, value)
                st.H = self._initial_hessian(geometry)
            else:
                self._warn("the coordinate system asked for a rebuild but cannot rebuild itself")

    def _redefined(self, st: _State) -> StepRecord:
        """after_convergence returned True: re-evaluate here and carry the Hessian over.

        An objective with ``adjust_hessian(H, to_q)`` (``to_q`` maps a Cartesian covector to
        q-space) adapts the learned Hessian to its new definition (the penalty search rescales
        the curvature along the gap direction to the new weight); one without it gets the
        initial model Hessian, as it may have changed in any way."""
        adjust = getattr(self.objective, "adjust_hessian", None)
        if callable(adjust):
            x = st.x
            st.H = clamp_eigenvalues(np.asarray(adjust(st.H, lambda v: self.coords.gradient(x, v)),
                                                float),
                                     self.settings.min_curvature, self.settings.max_curvature)
        else:
            st.H = self._initial_hessian(st.geometry)
        value = self._evaluate(st.geometry)
        if value is None:
            raise EngineError("the redefined objective gave a non-finite value or gradient")
        st.value, st.gq = value, self.coords.gradient(st.x, value.gradient)
        st.gm = self._model_gradient(st.x, value)
        st.prev_value, st.last_step, st.streak = None, None, 0
        st.iteration += 1
        self.objective.accept(value)
        st.merit = self._merit(value)
        return self._record(st, st.geometry, value, accepted=True,
                            message="objective redefined after convergence; continuing")

    # ------------------------------------------------------------------ pieces
    def _working_hessian(self, st: _State) -> np.ndarray:
        sub = st.value.subspace
        if sub is None:
            return st.H
        return working_hessian(st.H, sub.directions, sub.curvatures)

    def _displace(self, x: np.ndarray, dq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        x_new = self.coords.displace(x, dq)
        factor = cap_atom_displacement(x_new - x, self.settings.max_atom_step)
        if factor < 1.0:
            dq = dq * factor
            x_new = self.coords.displace(x, dq)
        return dq, x_new

    def _failed_displacement(self, st: _State, dq: np.ndarray, why: Any):
        length = float(np.linalg.norm(dq))
        new = max(min(st.trust, length) / 4.0, self.settings.trust_min)
        st.rejections += 1
        self._warn(f"iteration {st.iteration + 1}: trial step failed ({why}); shortening")
        if new >= length * (1.0 - 1e-9) or st.rejections > self.settings.max_rejections:
            return None, f"no usable step from this geometry ({why})"
        st.trust = new
        return None, None

    def _evaluate(self, geometry: Geometry) -> ObjectiveValue | None:
        value = self.objective.evaluate(geometry)
        self.evaluations += 1
        g = np.asarray(value.gradient, float)
        if g.shape != (geometry.natom, 3):
            raise InputError(f"objective {getattr(self.objective, 'name', '?')} returned a gradient "
                             f"of shape {g.shape}, expected ({geometry.natom}, 3)")
        if value.subspace is not None and self.coords.name != "cartesian":
            raise InputError("objectives with a subspace step model (crossing searches) need "
                             "Cartesian coordinates")
        if not (np.isfinite(value.value) and np.all(np.isfinite(g))):
            return None
        return value

    def _count_extra_evaluations(self) -> None:
        """Evaluations an objective made on its own (e.g. a convergence check) count too."""
        consume = getattr(self.objective, "consume_evaluations", None)
        if callable(consume):
            self.evaluations += int(consume())

    def _initial_hessian(self, geometry: Geometry) -> np.ndarray:
        x = np.asarray(geometry.coords_bohr)
        if self.settings.initial_hessian == "diagonal":
            H = self.coords.hessian(x, self.settings.diagonal_curvature * np.eye(x.size))
        else:
            H = self.coords.initial_hessian(geometry.symbols, x)
        return clamp_eigenvalues(np.asarray(H, float), self.settings.min_curvature,
                                 self.settings.max_curvature)

    def _record(self, st: _State, geometry: Geometry, value: ObjectiveValue, *, accepted: bool,
                step: np.ndarray | None = None, message: str = "") -> StepRecord:
        x = np.asarray(geometry.coords_bohr)
        if accepted:
            step, prev = st.last_step, st.prev_value
        else:
            prev = st.value.value
        change = None if prev is None else value.value - prev
        test_gradient = cartesian_test_gradient(self.coords, x, value.test_gradient)
        criteria = evaluate_criteria(self.convergence, test_gradient, step, change,
                                     value.extra_criteria)
        rec = StepRecord(
            iteration=st.iteration + (0 if accepted else 1), geometry=geometry, value=value,
            criteria=criteria, step_bohr=np.zeros_like(x) if step is None else np.array(step),
            trust_radius=st.trust, accepted=accepted, evaluations=self.evaluations,
            elapsed_s=time.perf_counter() - self._t0, message=message,
            resume_state=self._resume_state(st))
        logger.debug("iteration %d%s value %.10f max force %.2e trust %.3f %s", rec.iteration,
                    "" if accepted else " (rejected)", value.value,
                    float(np.abs(test_gradient).max()), st.trust, message)
        return rec

    def _resume_state(self, st: _State) -> dict[str, Any]:
        return {
            "format": STATE_FORMAT, "iteration": st.iteration, "evaluations": self.evaluations,
            "trust_radius": st.trust, "hessian": st.H.copy(), "coords_bohr": st.x.copy(),
            "q": self.coords.values(st.x), "gradient_q": st.gq.copy(), "value": st.value.value,
            "merit": st.value.merit_value, "previous_value": st.prev_value,
            "last_step_bohr": None if st.last_step is None else st.last_step.copy(),
            "good_streak": st.streak, "rejections": st.rejections,
            "coordinate_system": self.coords.name, "update": self.update.state_dict(),
            "objective": self.objective.state_dict(),
        }

    def _notify(self, rec: StepRecord) -> bool:
        self.history.append(rec)
        for obs in list(self._observers):
            try:
                obs(rec)
            except StopIteration:
                logger.info("an observer asked to stop at iteration %d", rec.iteration)
                return True
        return False

    def _warn(self, text: str) -> None:
        logger.warning(text)
        self.warnings.append(text)
