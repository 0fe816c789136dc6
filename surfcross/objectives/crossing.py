"""Shared machinery of the crossing searches: one evaluation of a tracked pair of states.

Every crossing objective (penalty, projected, spin) does the same work at a geometry:

1. ``engine.states`` (energies and wavefunctions, no gradients);
2. the pair tracker decides which two adiabatic roots carry the followed pair;
3. ``engine.gradients`` for both roots (and their coupling vector h when the engine has
   couplings and the search wants it);
4. lower/upper are labelled **by energy** at this geometry; x1 = g_upper - g_lower,
   gbar = (g_lower + g_upper)/2, gap = E_upper - E_lower >= 0;
5. rigid translations/rotations are removed from every vector (an option: model engines with
   one or two pseudo-atoms are not rotation invariant and switch it off).

Conventions: full-difference x1 inside the searches (as in the gradient-projection and
spin-crossing literature); the characterization in :mod:`surfcross.analysis.branching` uses
the half difference g = x1/2.
"""

from __future__ import annotations

import abc
import logging
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..coords.cartesian import external_basis
from ..engine.base import Engine, Evaluation
from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_states

__all__ = [
    "MeritWeighted",
    "GAP_TOLERANCES",
    "PairEvaluation",
    "PairEvaluator",
    "remove_external",
    "pair_warnings",
    "LIMITS_NOTE",
    "CASSCF_LIMITS_NOTE",
]

log = logging.getLogger(__name__)

#: gap tolerances (Eh) of the crossing presets; 1e-3 Eh is the degeneracy threshold used by
#: Ruiz-Barragan, Robb, Blancafort (J. Chem. Theory Comput. 2013), 1e-4 our tight choice
GAP_TOLERANCES = {"default": 1e-3, "tight": 1e-4}

LIMITS_NOTE = ("Crossing points from single-reference response methods (CIS/TDA/TDDFT) are "
               "approximations: check the geometry and energies with a higher-level method "
               "(e.g. multireference) before relying on them.")

CASSCF_LIMITS_NOTE = ("Crossing points from state-averaged CASSCF lack dynamic correlation and "
                      "depend on the active space: check the geometry and energies with a "
                      "higher-level method (e.g. multistate perturbation theory or MRCI) before "
                      "relying on them.")

_RESPONSE_METHODS = ("cis", "tda", "tdhf", "tddft")


def remove_external(vector: np.ndarray, basis: np.ndarray | None) -> np.ndarray:
    """``vector`` (any shape with 3N entries) minus its rigid-body part; flat (3N,)."""
    v = np.asarray(vector, float).ravel()
    if basis is None or basis.size == 0:
        return v.copy()
    return v - basis.T @ (basis @ v)


@dataclass(frozen=True, kw_only=True)
class PairEvaluation:
    """Both states of a crossing pair at one geometry (flat Cartesian vectors, Eh, bohr).

    Attributes
    ----------
    lower, upper
        Adiabatic labels of the pair at this geometry, ordered by energy.
    task_labels
        The task labels carried by (lower, upper): for a same-manifold pair the label with the
        smaller index names the lower state; different manifolds keep their own label.
    e_lower, e_upper, gap
        Energies and gap = e_upper - e_lower >= 0.
    g_lower, g_upper, x1, gbar
        Gradients (external modes removed), x1 = g_upper - g_lower, gbar = mean.
    h
        Interstate coupling vector (external modes removed) or None when not computed.
    """

    geometry: Geometry
    evaluation: Evaluation
    tracking: Any
    lower: StateLabel
    upper: StateLabel
    task_labels: tuple[str, str]
    e_lower: float
    e_upper: float
    g_lower: np.ndarray
    g_upper: np.ndarray
    h: np.ndarray | None
    external: np.ndarray | None

    @property
    def gap(self) -> float:
        return self.e_upper - self.e_lower

    @property
    def mean_energy(self) -> float:
        return 0.5 * (self.e_lower + self.e_upper)

    @property
    def x1(self) -> np.ndarray:
        return self.g_upper - self.g_lower

    @property
    def gbar(self) -> np.ndarray:
        return 0.5 * (self.g_lower + self.g_upper)

    @property
    def same_manifold(self) -> bool:
        return self.lower.manifold == self.upper.manifold

    def energies(self) -> dict[str, float]:
        return {self.task_labels[0]: self.e_lower, self.task_labels[1]: self.e_upper}

    def shape(self, flat: np.ndarray) -> np.ndarray:
        return np.asarray(flat, float).reshape(self.geometry.natom, 3)


def pair_warnings(engine: Engine, targets: Sequence[StateLabel]) -> tuple[str, ...]:
    """Warnings a user must see for this pair and method (wrong seam dimension, limits)."""
    out = []
    method = getattr(getattr(engine, "spec", None), "method", "")
    model = bool(getattr(engine, "is_model", False))
    high_spin = getattr(getattr(engine, "spec", None), "triplets", "") == "high-spin"

    def is_response(label: StateLabel) -> bool:  # an excited state of linear response
        if label.is_reference:
            return False
        return not (label.manifold == "T" and label.index == 1 and high_spin)

    response = [t for t in targets if is_response(t)]
    ref = next((t for t in targets if t.is_reference), None)
    linear = not model and method in _RESPONSE_METHODS and ref is not None
    if linear and response and all(t.manifold != ref.manifold for t in response):
        # different spin: a one-dimensional crossing is the right dimension here
        out.append(
            f"The pair contains the reference state {ref} and a response state of other spin: "
            "their crossing is one-dimensional, as it should be, but where the excitation "
            "energy of that state approaches zero the closed-shell reference is close to an "
            "instability and linear response becomes unreliable; check the crossing with a "
            "spin-adapted multireference method.")
    elif linear and response:
        out.append(
            f"The pair contains the reference state {ref}: with {method.upper()} (a closed-shell "
            "linear-response method) the reference does not couple to the response states, so "
            "its crossings with them have the wrong dimension (a one-dimensional crossing "
            "instead of a conical intersection; Levine, Ko, Quenneville, Martinez, Mol. Phys. "
            "2006; Li, Marenich, Xu, Truhlar, J. Phys. Chem. Lett. 2014). The located point has "
            "the wrong topology and a questionable energy; use state-averaged CASSCF or a "
            "spin-flip method for intersections with the ground state.")
    if not model:
        out.append(CASSCF_LIMITS_NOTE if method == "casscf" else LIMITS_NOTE)
    return tuple(out)


class PairEvaluator:
    """Evaluates a followed pair of states at geometries, with state tracking.

    Parameters
    ----------
    engine
        Any :class:`~surfcross.engine.base.Engine`.
    states
        The two task labels, e.g. ('S1', 'S2') or ('S1', 'T1').
    want_coupling
        Ask the engine for the coupling vector h of the pair when it has couplings.
    project_external
        Remove rigid translations/rotations from all vectors; None = automatic (on, except for
        model engines, whose surfaces are not rotation invariant).
    tracker
        A pair tracker with ``start``/``assign``/``accept``; built from
        :class:`surfcross.tracking.StateTracker` when None.
    tracking_options
        Options for the default tracker.
    """

    def __init__(self, engine: Engine, states: Sequence[str | StateLabel], *,
                 want_coupling: bool = False, project_external: bool | None = None,
                 tracker: Any = None, tracking_options: Any = None) -> None:
        targets = parse_states(list(states), count=2)
        self.engine = engine
        self.targets = targets
        self.want_coupling = bool(want_coupling and engine.has_couplings)
        if project_external is None:
            project_external = not bool(getattr(engine, "is_model", False))
        self.project_external = project_external
        if tracker is None:
            tracker = _default_tracker(engine, targets, tracking_options)
        self.tracker = tracker
        self._started = False
        self.evaluations = 0

    @property
    def same_manifold(self) -> bool:
        return self.targets[0].manifold == self.targets[1].manifold

    def evaluate(self, geometry: Geometry) -> PairEvaluation:
        """States, tracking, gradients (and coupling) of the pair at ``geometry``."""
        ev = self.engine.states(geometry)
        if not self._started:
            record = self.tracker.start(ev)
            self._started = True
        else:
            record = self.tracker.assign(ev)
        roots = tuple(record.roots)
        if len(roots) != 2:
            raise InputError(f"the tracker returned {len(roots)} roots for a pair")
        labels = sorted((ev.state(r) for r in roots), key=lambda s: s.energy_eh)
        lower, upper = labels[0].label, labels[1].label
        couplings = [(lower, upper)] if self.want_coupling else []
        ev = self.engine.gradients(ev, [lower, upper], couplings)
        self.evaluations += 1
        basis = external_basis(geometry.coords_bohr) if self.project_external else None
        h = None
        if couplings:
            raw = ev.couplings.get((lower, upper))
            if raw is None and (upper, lower) in ev.couplings:
                raw = ev.couplings[(upper, lower)]
            h = None if raw is None else remove_external(raw, basis)
        return PairEvaluation(
            geometry=geometry, evaluation=ev, tracking=record, lower=lower, upper=upper,
            task_labels=self._task_labels(lower, upper),
            e_lower=labels[0].energy_eh, e_upper=labels[1].energy_eh,
            g_lower=remove_external(ev.gradient(lower), basis),
            g_upper=remove_external(ev.gradient(upper), basis), h=h, external=basis)

    def _task_labels(self, lower: StateLabel, upper: StateLabel) -> tuple[str, str]:
        a, b = self.targets
        if self.same_manifold:
            # adiabatic names within one manifold: the smaller index names the lower state,
            # whichever order the pair was given in
            a, b = sorted((a, b), key=lambda t: t.index)
            return str(a), str(b)
        return (str(a), str(b)) if lower.manifold == a.manifold else (str(b), str(a))

    def accept(self, pair: PairEvaluation) -> None:
        """Move the tracker's reference to this (accepted) geometry."""
        self.tracker.accept(pair.evaluation, pair.tracking)

    def state_dict(self) -> dict[str, Any]:
        state = getattr(self.tracker, "state_dict", None)
        return {"tracker": state() if callable(state) else {},
                "targets": [str(t) for t in self.targets]}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        loader = getattr(self.tracker, "load_state_dict", None)
        if callable(loader) and state.get("tracker"):
            loader(state["tracker"])


def _default_tracker(engine: Engine, targets: tuple[StateLabel, ...], options: Any) -> Any:
    from ..tracking import StateTracker, TrackingOptions  # the tracker package owns these

    opts = TrackingOptions() if options is None else options
    return StateTracker(engine, [str(t) for t in targets], options=opts, pair=True)


class CrossingObjectiveBase(abc.ABC):
    """Common part of the crossing objectives: pair evaluation, tracking, warnings, resume.

    Subclasses implement ``_compose(pair) -> (ObjectiveValue, payload)`` and may implement
    ``_commit(pair, payload)`` (called when the optimizer accepts that value).
    """

    name = "crossing"
    search = ""

    def __init__(self, engine: Engine, states: Sequence[str | StateLabel], settings: Any, *,
                 want_coupling: bool = False, tracker: Any = None,
                 tracking_options: Any = None) -> None:
        self.settings = settings
        self.pairs = PairEvaluator(engine, states, want_coupling=want_coupling,
                                   project_external=settings.project_external,
                                   tracker=tracker, tracking_options=tracking_options)
        opts = tracking_options
        self.min_overlap = 0.5 if opts is None else float(getattr(opts, "min_overlap", 0.5))
        self.tracking_enabled = True if opts is None else bool(getattr(opts, "enabled", True))
        self._warnings: list[str] = list(pair_warnings(engine, self.pairs.targets))
        self._pending: dict[int, tuple[Any, PairEvaluation, Any]] = {}
        self.last_pair: PairEvaluation | None = None
        self.accepted_pair: PairEvaluation | None = None

    @property
    def targets(self) -> tuple[StateLabel, ...]:
        return self.pairs.targets

    @property
    def warnings(self) -> tuple[str, ...]:
        """Method limits and search-specific problems, for result.json ``warnings``."""
        return tuple(dict.fromkeys(self._warnings))

    def warn(self, message: str) -> None:
        if message not in self._warnings:
            log.warning(message)
            self._warnings.append(message)

    def evaluate(self, geometry: Geometry):
        pair = self.pairs.evaluate(geometry)
        self.last_pair = pair
        value, payload = self._compose(pair)
        if self.pair_lost(pair):
            # the followed pair changed character at this trial geometry: a shorter step
            from dataclasses import replace

            log.info("the pair %s lost its character at the trial geometry (overlap %.2f): "
                     "asking for a shorter step", "/".join(map(str, self.targets)),
                     min(pair.tracking.confidence))
            value = replace(value, reject_step=True)
        if len(self._pending) > 16:  # rejected trials are never accepted; forget old ones
            self._pending.pop(next(iter(self._pending)))
        self._pending[id(value)] = (value, pair, payload)
        return value

    def accept(self, value) -> None:
        entry = self._pending.pop(id(value), None)
        if entry is None or entry[0] is not value:
            raise InputError("accept() was given a value this objective did not produce")
        _, pair, payload = entry
        self._pending.clear()
        self.pairs.accept(pair)
        self.accepted_pair = pair
        self._commit(pair, payload)

    def restoration(self, value: Any) -> np.ndarray | None:
        """Displacement from a trial back to the seam along its gap direction,
        -dE x-hat/|x1| (linear extrapolation; composed searches only), or None."""
        entry = self._pending.get(id(value))
        if entry is None or entry[0] is not value or value.exact_gradient:
            return None
        pair = entry[1]
        n1 = float(np.linalg.norm(pair.x1))
        if n1 < 1e-12 or pair.gap <= 0.0:
            return None
        return pair.shape(-(pair.gap / n1**2) * pair.x1)

    def pair_lost(self, pair: PairEvaluation) -> bool:
        """True when tracking is on and the trial's pair overlap fell below the threshold
        (the start geometry, which has no previous point, is never 'lost')."""
        record = pair.tracking
        if not self.tracking_enabled or record is None or not getattr(record, "previous_roots", ()):
            return False
        confidence = tuple(getattr(record, "confidence", ()) or ())
        return bool(confidence) and min(confidence) < self.min_overlap

    def after_convergence(self, value) -> bool:
        return False

    def _commit(self, pair: PairEvaluation, payload: Any) -> None:
        """Default: nothing to commit."""

    @abc.abstractmethod
    def _compose(self, pair: PairEvaluation):
        """(ObjectiveValue, payload) for this pair: each search defines its working gradient."""

    def composed_value(self, pair: PairEvaluation, working: np.ndarray, projected: np.ndarray,
                       directions: list, curvatures: list, mu: float, **info: Any):
        """ObjectiveValue of a composed search: working gradient, step model, force test on the
        projected mean gradient, gap criterion, merit Ebar + mu dE."""
        from .base import ObjectiveValue, SubspaceModel

        model = SubspaceModel(directions=np.array(directions), curvatures=np.array(curvatures))
        return ObjectiveValue(
            value=pair.mean_energy, gradient=pair.shape(working), exact_gradient=False,
            merit=pair.mean_energy + mu * pair.gap, energies_eh=pair.energies(),
            gap_eh=pair.gap, convergence_gradient=pair.shape(projected), subspace=model,
            extra_criteria=(gap_criterion(pair.gap, self.settings.gap_tol_eh),),
            evaluation=pair.evaluation, tracking=pair.tracking,
            info=self._info(pair, merit_gap_weight=mu, **info),
            model_gradient=pair.shape(projected))

    def _info(self, pair: PairEvaluation, **extra: Any) -> dict[str, Any]:
        info = {"search": self.search, "roots": [str(pair.lower), str(pair.upper)],
                "gap_eh": pair.gap, "mean_energy_eh": pair.mean_energy,
                "x1_norm": float(np.linalg.norm(pair.x1))}
        info.update(extra)
        return info

    def state_dict(self) -> dict[str, Any]:
        return {"search": self.search, "pairs": self.pairs.state_dict(),
                "warnings": list(self._warnings)}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        if state.get("search", self.search) != self.search:
            raise InputError(f"checkpoint was written by the {state['search']!r} search, "
                             f"not {self.search!r}")
        self.pairs.load_state_dict(state.get("pairs", {}))
        for w in state.get("warnings", []):
            if w not in self._warnings:
                self._warnings.append(w)


def unit(vector: np.ndarray, tiny: float = 1e-14) -> tuple[np.ndarray, float]:
    """(vector/|vector|, |vector|); a zero vector gives (zeros, 0)."""
    n = float(np.linalg.norm(vector))
    return (vector / n if n > tiny else np.zeros_like(vector)), n


def gap_criterion(gap: float, tol: float):
    from .base import Criterion

    return Criterion(name="gap", value=gap, threshold=tol, unit="Eh")


#: smallest gap weight of the acceptance merit (see merit_weight)
MERIT_WEIGHT_FLOOR = 3.0


def merit_weight(pair: PairEvaluation, fixed: float | None) -> float:
    """Weight mu of the gap in the step-acceptance merit Ebar + mu * dE.

    The merit is an exact (L1) penalty: a step toward the seam lowers it only while mu exceeds
    the Lagrange multiplier lambda = |gbar.x-hat|/|x1| of the crossing, which is unknown at the
    start and grows along typical paths (about 0.3 -> 1 for methylene's singlet/triplet
    crossing). We take mu = max(3, 2 lambda_start) and keep it fixed for the run, so that the
    merits of all points stay comparable. (A larger mu, e.g. from |gbar|/|x1|, slowed the
    ethylene S1/S2 search from 41 to 71 evaluations; a floor of 1 stalled the methylene one.)
    """
    if fixed is not None:
        return float(fixed)
    n1 = float(np.linalg.norm(pair.x1))
    if n1 == 0.0:
        return MERIT_WEIGHT_FLOOR
    return max(MERIT_WEIGHT_FLOOR, 2.0 * abs(float(pair.gbar @ pair.x1)) / n1**2)


def check_merit_weight(objective: "CrossingObjectiveBase", pair: PairEvaluation,
                       mu: float) -> float:
    """The merit weight to use from now on: ``mu``, or twice the local multiplier when that
    has grown beyond ``mu``.

    The merit Ebar + mu dE has its minimum on the seam only while mu exceeds the Lagrange
    multiplier |gbar.x1|/|x1|^2; below it, every step toward the seam raises the merit, gets
    rejected and the search stalls at the smallest trust radius. After a raise the optimizer
    compares the next trial with the current point's merit recomputed at the new weight
    (:meth:`MeritWeighted.merit`); comparing with the merit stored at the old weight would
    count a false rise of (mu_new - mu_old) dE against every step.
    """
    n1 = float(np.linalg.norm(pair.x1))
    multiplier = abs(float(pair.gbar @ pair.x1)) / n1**2 if n1 > 0 else 0.0
    if multiplier <= mu:
        return mu
    new = 2.0 * multiplier
    log.info("merit weight raised from %.3g to %.3g (the crossing's multiplier grew)", mu, new)
    return new


class MeritWeighted:
    """Merit-weight bookkeeping shared by the composed searches (projected and spin).

    The weight mu of the acceptance merit Ebar + mu dE is sized at the first evaluation
    (:func:`merit_weight`), raised at accepted points when the crossing's multiplier outgrows
    it (:func:`check_merit_weight`), and saved/restored with the objective's state.
    """

    mu: float | None = None

    def merit_for(self, pair: PairEvaluation) -> float:
        if self.mu is None:
            self.mu = merit_weight(pair, None)
        return self.mu

    def update_merit(self, pair: PairEvaluation) -> None:
        self.mu = check_merit_weight(self, pair, self.merit_for(pair))

    def merit(self, value: Any) -> float:
        """Merit Ebar + mu dE of an earlier value at the *current* weight mu (the optimizer
        compares trials with the current point at one weight; a raised mu would otherwise
        show up as a false rise (mu_new - mu_old) dE at the next trial)."""
        gap = value.gap_eh if value.gap_eh is not None else 0.0
        mu = self.mu if self.mu is not None else float(value.info.get("merit_gap_weight", 0.0))
        return float(value.value) + mu * float(gap)

    def merit_state(self) -> dict[str, Any]:
        return {"merit_gap_weight": self.mu}

    def load_merit_state(self, state: Mapping[str, Any]) -> None:
        self.mu = state.get("merit_gap_weight", self.mu)
