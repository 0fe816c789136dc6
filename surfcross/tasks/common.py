"""Pieces shared by every task: run options, the task result, and small builders.

A task composes an engine, a tracker, an objective, a coordinate system, the optimizer and
(optionally) a run directory. This module holds no science of its own.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from ..coords.constraints import Constraint
from ..engine.base import Evaluation, MethodSpec
from ..errors import InputError
from ..geometry import Geometry
from ..states import SINGLET, TRIPLET, StateLabel, parse_states
from ..units import HARTREE_IN_EV

__all__ = ["RunOptions", "TaskResult", "prepare_method", "COORDINATES", "CONVERGENCE_PRESETS",
           "method_warnings", "LIMITS_NOTE", "check_request"]

log = logging.getLogger(__name__)

COORDINATES = ("auto", "internal", "cartesian")
CONVERGENCE_PRESETS = ("loose", "normal", "tight")

LIMITS_NOTE = (
    "Linear-response CIS/TDA/TDDFT on a closed-shell reference cannot describe the shape of "
    "intersections with the ground state, lacks doubly excited states, and minimal basis sets "
    "are for tests only; check results you rely on with higher-level methods."
)


@dataclass(frozen=True, kw_only=True)
class RunOptions:
    """How a minimization or crossing search runs (everything but the method and the states).

    Attributes
    ----------
    coordinates
        'auto' (redundant internals for minima of molecules with 3 or more atoms, Cartesians
        for crossing searches and 1-2 atoms), 'internal' or 'cartesian'.
    convergence
        Preset 'loose', 'normal' or 'tight'; ``convergence_overrides`` replaces single
        thresholds (max_force, rms_force, max_step, rms_step, energy_change).
    max_iterations
        Optimizer steps before giving up (status 'step limit reached', exit code 1).
    tracking
        Follow states by wavefunction overlap (True) or by adiabatic index (False).
    strict_tracking
        Make a low-confidence state assignment an error instead of a warning.
    constraints
        Frozen atoms and fixed internal coordinates (minimizations).
    curvature_check
        After a minimization, compute the finite-difference Hessian and frequencies of the
        state (6N gradient evaluations); with ``follow_imaginary`` displace along an
        imaginary mode and continue.
    follow_instability
        When the internal stability analysis finds the warm-started SCF reference unstable
        mid-run, move to the lower SCF solution and continue there (default: report it with
        the remedies and stay on the followed solution).
    """

    coordinates: str = "auto"
    convergence: str = "normal"
    convergence_overrides: Mapping[str, float] = field(default_factory=dict)
    max_iterations: int = 100
    trust_radius: float | None = None
    hessian_update: str = "bfgs"
    tracking: bool = True
    strict_tracking: bool = False
    min_overlap: float = 0.5
    constraints: tuple[Constraint, ...] = ()
    curvature_check: bool = False
    follow_imaginary: bool = False
    warm_start: bool = True
    characterize: bool = True
    follow_instability: bool = False

    def __post_init__(self) -> None:
        if self.coordinates not in COORDINATES:
            raise InputError(f"unknown coordinates {self.coordinates!r}: choose {', '.join(COORDINATES)}")
        if self.convergence not in CONVERGENCE_PRESETS:
            raise InputError(f"unknown convergence preset {self.convergence!r}: choose "
                             f"{', '.join(CONVERGENCE_PRESETS)}")
        if self.max_iterations < 1:
            raise InputError(f"the step limit must be >= 1, got {self.max_iterations}")
        if not 0.0 < self.min_overlap < 1.0:
            raise InputError(f"the minimum overlap must lie between 0 and 1, got {self.min_overlap}")
        object.__setattr__(self, "constraints", tuple(self.constraints))
        object.__setattr__(self, "convergence_overrides", dict(self.convergence_overrides))

    def to_dict(self) -> dict[str, Any]:
        out = {k: getattr(self, k) for k in self.__dataclass_fields__}
        out["constraints"] = [
            {"kind": c.kind, "atoms": list(c.atoms), "target": c.target} for c in self.constraints
        ]
        out["convergence_overrides"] = dict(self.convergence_overrides)
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "RunOptions":
        data = dict(data)
        data["constraints"] = tuple(
            Constraint(c["kind"], tuple(c["atoms"]), c.get("target")) for c in data.get("constraints", ())
        )
        return cls(**{k: v for k, v in data.items() if k in cls.__dataclass_fields__})

    def with_updates(self, **changes: Any) -> "RunOptions":
        return replace(self, **changes)


@dataclass(frozen=True)
class TaskResult:
    """Outcome of one task (states, relax, cross, and the workflows built on them).

    ``data`` is the result.json dictionary: the contract keys plus task-specific ones
    (``branching``, ``curvature``, ``absorption_ev``, ...).
    """

    task: str
    converged: bool
    status: str
    message: str
    geometry: Geometry
    evaluation: Evaluation | None
    states: tuple[str, ...]
    method: MethodSpec
    iterations: int = 0
    evaluations: int = 0
    search: str | None = None
    warnings: tuple[str, ...] = ()
    data: Mapping[str, Any] = field(default_factory=dict)
    optimization: Any = None
    run_dir: Path | None = None

    @property
    def energies_eh(self) -> dict[str, float]:
        """Energies of the followed states (task labels) at the final geometry."""
        if self.optimization is not None:
            return dict(self.optimization.value.energies_eh)
        if self.evaluation is None:
            return {}
        return {s: self.evaluation.energy(s) for s in self.states}

    @property
    def gap_ev(self) -> float | None:
        if self.optimization is not None and self.optimization.value.gap_eh is not None:
            return float(self.optimization.value.gap_eh) * HARTREE_IN_EV
        return None

    def to_json(self) -> dict[str, Any]:
        """The result.json dictionary (contract keys plus task-specific ones)."""
        return dict(self.data)


def prepare_method(spec: MethodSpec, labels: Iterable[StateLabel | str],
                   geometry: Geometry | None = None, *, strict_roots: bool = False) -> MethodSpec:
    """The method with enough roots for ``labels`` (two above the highest state asked).

    With ``geometry`` the request is checked first (:func:`check_request`: InputError for
    states or active spaces the basis cannot give, and with ``strict_roots`` for more roots
    than there are) and the roots are capped at the number of excitations there are.
    """
    labels = parse_states(list(labels))
    room = (check_request(geometry, spec, labels, strict_roots=strict_roots)
            if geometry is not None else None)
    roots, troots = spec.roots, spec.triplet_roots
    for lab in labels:
        if lab.manifold == TRIPLET:
            if spec.method == "casscf":
                raise InputError("the CASSCF engine computes singlets only: use S labels")
            if spec.triplets == "high-spin":
                if lab.index > 1:
                    raise InputError(f"{lab} is not available with --triplets high-spin "
                                     "(only T1, the high-spin SCF state)")
                troots = max(troots, 1)
            else:
                troots = max(troots, lab.index + 2)
        else:
            if spec.method == "casscf":
                roots = max(roots, lab.index)
            else:
                roots = max(roots, lab.index + 2)
    if spec.triplets == "high-spin":
        troots = min(troots, 1)
    if room is not None:
        if roots > room or (troots > room and spec.triplets != "high-spin"):
            log.info("roots capped at %d: the basis gives no more excited states", room)
        roots = min(roots, room)
        if spec.triplets != "high-spin":
            troots = min(troots, room)
    return spec.with_updates(roots=roots, triplet_roots=troots)


def _formula(geometry: Geometry) -> str:
    counts: dict[str, int] = {}
    for s in geometry.symbols:
        counts[s] = counts.get(s, 0) + 1
    return "".join(s + (str(n) if n > 1 else "") for s, n in counts.items())


def check_request(geometry: Geometry, spec: MethodSpec,
                  labels: Sequence[StateLabel | str] = (),
                  constraints: Sequence[Constraint] = (), *, strict_roots: bool = True) -> int:
    """Refuse, before any SCF, what this molecule and basis cannot give.

    Counts the reference's occupied x virtual orbitals on the PySCF molecule (no SCF): a
    state beyond that number of excitations, more roots than there are (``strict_roots``;
    otherwise the caller caps them), an active space or a number of CASSCF states that does
    not fit, or a frozen/held atom that does not exist is an :class:`InputError` naming what
    is possible. Returns the number of excited states the method can give per manifold.
    """
    from ..engine.pyscf_scf import capacity

    labels = parse_states(list(labels))
    check_labels(geometry, labels)
    for c in constraints:
        c.check(geometry.natom)
    room = capacity(geometry, spec)
    where = f"{_formula(geometry)} in {spec.basis}"
    if spec.method == "casscf":
        return _check_active_space(geometry, spec, labels, room, where)
    most = room.excitations
    asked = [lab for lab in labels if not lab.is_reference
             and not (lab.manifold == TRIPLET and spec.triplets == "high-spin")]
    for lab in asked:
        if lab.index > most:
            first = "1" if lab.manifold == "" else f"{lab.manifold}1"
            raise InputError(f"state {lab} does not exist for {where}: it has {room.describe()}, "
                             f"so the states go up to {lab.manifold}{most}; ask for {first}.."
                             f"{lab.manifold}{most} or use a larger basis")
    for name, n in (("roots", spec.roots), ("triplet roots", spec.triplet_roots)):
        if strict_roots and n > most and not (name == "triplet roots"
                                              and spec.triplets == "high-spin"):
            raise InputError(f"{n} {name} asked, but {where} has {room.describe()}: ask for at "
                             f"most {most} or use a larger basis")
    return most


def _check_active_space(geometry: Geometry, spec: MethodSpec, labels: Sequence[StateLabel],
                        room: Any, where: str) -> int:
    electrons, orbitals = spec.active_space
    core2 = geometry.nelectron - electrons
    if core2 < 0 or core2 % 2:
        raise InputError(f"an active space of {electrons} electrons does not fit the "
                         f"{geometry.nelectron} electrons of {where} with a doubly occupied core")
    if core2 // 2 + orbitals > room.orbitals:
        raise InputError(f"{where} has {room.orbitals} orbitals, too few for {core2 // 2} core "
                         f"plus {orbitals} active orbitals: use at most "
                         f"{room.orbitals - core2 // 2} active orbitals or a larger basis")
    most = int(room.active_states) - 1
    top = max([spec.roots] + [lab.index for lab in labels])
    if top > most:
        raise InputError(f"CASSCF({electrons},{orbitals}) has {most + 1} singlet states "
                         f"(S0..S{most}), so S{top} cannot be computed: ask for fewer roots or "
                         "a larger active space")
    return most


def check_labels(geometry: Geometry, labels: Sequence[StateLabel]) -> None:
    """Labels must fit the reference: S/T for closed shells, plain indices for open shells."""
    for lab in labels:
        if geometry.spin > 0 and lab.manifold in (SINGLET, TRIPLET):
            raise InputError(f"state {lab} does not exist for an open-shell reference "
                             f"(2S = {geometry.spin}); use plain indices 0, 1, 2, ...")
        if geometry.spin == 0 and lab.manifold == "":
            raise InputError(f"use S/T labels (S0, S1, T1, ...) for a closed-shell molecule, "
                             f"not {lab}")


def method_warnings(spec: MethodSpec, labels: Sequence[StateLabel]) -> list[str]:
    """Warnings about the method's known limits for these states."""
    out = []
    # the reference with a response state of its own spin (a singlet/triplet pair crosses
    # on a seam of the right dimension)
    if spec.method != "casscf" and any(a.is_reference and not b.is_reference
                                       and a.manifold == b.manifold
                                       for a in labels for b in labels):
        out.append(
            f"{'/'.join(map(str, labels))} involves the reference state: with linear-response "
            f"{spec.method.upper()} the intersection with the reference has the wrong dimension "
            "(the reference does not couple to response states); treat the point as a rough "
            "guess and refine it with SA-CASSCF (--method casscf) or a spin-flip method"
        )
    if spec.basis.lower().replace("-", "") in ("sto3g", "sto6g"):
        out.append(f"minimal basis ({spec.basis}): fine for tests and demonstrations, not for "
                   "quantitative answers")
    return out


def final_gap_ev(value: Any) -> float | None:
    gap = getattr(value, "gap_eh", None)
    return None if gap is None else float(gap) * HARTREE_IN_EV


def flat(a: np.ndarray) -> list[float]:
    return [float(x) for x in np.ravel(a)]
