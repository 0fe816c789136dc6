"""Following electronic states between geometries by wavefunction overlap.

A task names its states by adiabatic order at the start ('S1' = lowest excited singlet
there). :class:`StateTracker` keeps, for each of these targets, the adiabatic root that carries
it at the last accepted geometry, and at a new geometry maps it to the root with the largest
overlap (optimal one-to-one assignment). A pair of states in one spin manifold (crossing
searches) is followed as a two-state subspace and labelled lower/upper by energy at each
geometry; a pair in different manifolds (e.g. S1/T1) is followed state by state.

Overlaps tell which computed root continues a state; they cannot repair a poor electronic
structure method. Linear-response CIS/TDDFT states can change character for reasons that a
higher-level method would not show; results need checking with such methods.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field, replace
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import InputError, StateTrackingError
from ..states import StateLabel, parse_state
from .assign import match_pair, match_row, row_flags
from .records import TrackingRecord

__all__ = ["TrackingOptions", "StateTracker", "normalized_overlaps"]

log = logging.getLogger(__name__)

#: trial evaluations remembered for accept(record) (the optimizer may try several steps)
_PENDING = 8


@dataclass(frozen=True, kw_only=True)
class TrackingOptions:
    """How states are followed.

    Parameters
    ----------
    enabled
        False follows the adiabatic index instead (useful to compare with and without
        tracking).
    min_overlap
        Assigned |overlap| below this means the state was lost between geometries.
    ambiguity
        Best and second-best |overlap| closer than this flag an ambiguous match.
    min_window
        Sum of |overlap|^2 of a state over all computed roots below this means the state left
        the computed roots; compute more roots.
    strict
        True turns a lost state into a StateTrackingError instead of a flag.
    """

    enabled: bool = True
    min_overlap: float = 0.5
    ambiguity: float = 0.1
    min_window: float = 0.8
    strict: bool = False

    def __post_init__(self) -> None:
        for name in ("min_overlap", "ambiguity", "min_window"):
            value = getattr(self, name)
            if not 0.0 <= value <= 1.0:
                raise InputError(f"tracking option {name} must lie between 0 and 1, got {value}")


@dataclass
class _Assignment:
    """Scratch space of one assignment: per target and per new root."""

    mapping: dict = field(default_factory=dict)  # target -> new root
    confidence: dict = field(default_factory=dict)  # target -> confidence
    window: dict = field(default_factory=dict)  # target -> sum |O|^2 of its previous root
    phase: dict = field(default_factory=dict)  # new root -> +1/-1
    flags: list = field(default_factory=list)
    scale: dict = field(default_factory=dict)  # manifold -> largest singular value


def normalized_overlaps(overlap) -> tuple[np.ndarray, float]:
    """The overlap matrix divided by its largest singular value, and that value.

    When the nuclei move, the basis functions move with them and every overlap between the
    two geometries shrinks by nearly the same factor (mostly from the tight core orbitals:
    about 0.74 for a 0.1 angstrom change of the CO bond in STO-3G), whatever happens to the
    electronic character. All singular values of the matrix then share that factor, so
    dividing by the largest one puts the thresholds of :class:`TrackingOptions` on the scale
    of a change of character. A state that leaves the computed roots still shows up as a
    small row sum, relative to the states that stay.
    """
    o = np.asarray(overlap, dtype=float)
    if o.size == 0:
        return o, 1.0
    top = float(np.linalg.svd(o, compute_uv=False)[0])
    if top < 1e-8:
        raise StateTrackingError("the states at the two geometries do not overlap at all; the "
                                 "step was far too long or the molecule changed")
    return o / top, top


def _index(evaluation, label: StateLabel) -> int:
    states = evaluation.manifold(label.manifold)
    for k, s in enumerate(states):
        if s.label == label:
            return k
    raise StateTrackingError(f"root {label} is not among the states computed at this geometry "
                             f"({', '.join(str(s.label) for s in evaluation.states)})")


class StateTracker:
    """Follow one state, several states, or a crossing pair by overlap.

    Parameters
    ----------
    engine
        Anything with ``overlaps(bra, ket) -> {manifold: matrix}``.
    targets
        Labels of the followed states, as adiabatic labels at the start.
    options
        :class:`TrackingOptions`.
    pair
        True for the two states of a crossing search: roots are reported (lower, upper) by
        energy at each geometry, and states of one manifold are followed as a subspace.
    """

    def __init__(self, engine: Any, targets: Sequence[StateLabel | str], *,
                 options: TrackingOptions = TrackingOptions(), pair: bool = False) -> None:
        self.engine = engine
        self.targets = tuple(parse_state(t) for t in targets)
        if not self.targets or len(set(self.targets)) != len(self.targets):
            raise InputError("the tracker needs one or more distinct state labels")
        if pair and len(self.targets) != 2:
            raise InputError(f"pair tracking needs two states, got {len(self.targets)}")
        self.options = options
        self.pair = pair
        self._roots: dict[StateLabel, StateLabel] = {}
        self._reference = None
        self._resume: dict[StateLabel, StateLabel] | None = None
        self._phases = {t: 1 for t in self.targets}
        self._step = 0
        self._reorderings: list[str] = []
        self._pending: list[tuple[TrackingRecord, Any]] = []

    # ------------------------------------------------------------------ queries
    @property
    def started(self) -> bool:
        return self._reference is not None

    @property
    def roots(self) -> dict[str, str]:
        """{target: root carrying it at the last accepted geometry}."""
        return {str(t): str(r) for t, r in self._roots.items()}

    @property
    def reorderings(self) -> list[str]:
        """Changes of adiabatic index seen at accepted steps, as sentences."""
        return list(self._reorderings)

    # ------------------------------------------------------------------ lifecycle
    def start(self, evaluation) -> TrackingRecord:
        """Take ``evaluation`` as the reference geometry. Targets map to their own labels, or
        to the roots saved by :meth:`load_state_dict` when resuming."""
        mapping = dict(self._resume) if self._resume else {t: t for t in self.targets}
        for root in mapping.values():
            _index(evaluation, root)
        self._roots = mapping
        self._reference = evaluation
        self._resume = None
        self._pending.clear()
        roots = self._ordered(evaluation, mapping)
        record = TrackingRecord(
            targets=tuple(map(str, self.targets)), roots=tuple(map(str, roots)),
            confidence=tuple(1.0 for _ in roots), phases=tuple(1 for _ in roots),
            info={"assignment": {str(t): str(r) for t, r in mapping.items()}, "started": True})
        return self._remember(evaluation, record)

    def assign(self, evaluation) -> TrackingRecord:
        """Map the targets onto the roots of ``evaluation`` (vs the last accepted geometry)."""
        if self._reference is None:
            raise StateTrackingError("the tracker has no reference geometry yet: call start()")
        if not self.options.enabled:
            return self._remember(evaluation, self._adiabatic(evaluation))
        overlaps = self.engine.overlaps(self._reference, evaluation)
        acc = _Assignment()
        for manifold, group in self._groups().items():
            if manifold not in overlaps:
                raise StateTrackingError(f"the engine returned no overlaps for the "
                                         f"{manifold or 'open-shell'} states")
            o, acc.scale[manifold] = normalized_overlaps(overlaps[manifold])
            if self.pair and len(group) == 2:
                self._follow_pair(evaluation, o, group, acc)
            else:
                for target in group:
                    self._follow_one(evaluation, o, target, acc)
        return self._remember(evaluation, self._record(evaluation, acc, overlaps))

    def accept(self, evaluation, record: TrackingRecord | None = None) -> None:
        """Make the evaluation of ``record`` the reference geometry and commit its assignment.

        Called as ``accept(evaluation, record)``, or as ``accept(record)`` with a record that
        :meth:`start` or :meth:`assign` returned recently (the tracker remembers its
        evaluation).
        """
        if record is None:
            if not isinstance(evaluation, TrackingRecord):
                raise InputError("accept() needs the tracking record of the accepted geometry")
            record = evaluation
            evaluation = self._pending_evaluation(record)
        if record.previous_roots:  # the start record is step 0, as in the optimizer
            self._step += 1
        assignment = {parse_state(t): parse_state(r)
                      for t, r in dict(record.info.get("assignment", {})).items()}
        for target, root in assignment.items():
            old = self._roots.get(target)
            if old is not None and old != root:
                text = f"{target} moved from root {old} to root {root} at step {self._step}"
                self._reorderings.append(text)
                log.info(text)
        phase = dict(record.info.get("phase_by_target", {}))
        for target in self.targets:
            self._phases[target] *= int(phase.get(str(target), 1))
        if assignment:
            self._roots = assignment
        self._reference = evaluation

    # ------------------------------------------------------------------ resume
    def state_dict(self) -> dict[str, Any]:
        """What a restart needs: current roots of each target, step count, reorder log."""
        return {"targets": [str(t) for t in self.targets],
                "roots": self.roots,
                "phases": {str(t): int(p) for t, p in self._phases.items()},
                "step": self._step,
                "pair": self.pair,
                "reorderings": list(self._reorderings)}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        """Restore :meth:`state_dict`. The next :meth:`start` (at the saved geometry) maps each
        target to its saved root."""
        saved = [str(t) for t in state.get("targets", [])]
        if saved != [str(t) for t in self.targets]:
            raise InputError(f"the saved tracking state follows {', '.join(saved) or 'nothing'}, "
                             f"not {', '.join(map(str, self.targets))}")
        self._resume = {parse_state(t): parse_state(r) for t, r in state["roots"].items()}
        self._phases = {parse_state(t): int(p) for t, p in state.get("phases", {}).items()} or \
            {t: 1 for t in self.targets}
        self._step = int(state.get("step", 0))
        self._reorderings = [str(s) for s in state.get("reorderings", [])]
        self._reference = None

    # ------------------------------------------------------------------ internals
    def _remember(self, evaluation, record: TrackingRecord) -> TrackingRecord:
        self._pending.append((record, evaluation))
        del self._pending[:-_PENDING]
        return record

    def _pending_evaluation(self, record: TrackingRecord):
        for rec, evaluation in self._pending:
            if rec is record:
                return evaluation
        raise StateTrackingError("accept() got a tracking record this tracker did not produce "
                                 "recently; pass the evaluation too: accept(evaluation, record)")

    def _groups(self) -> dict[str, list[StateLabel]]:
        groups: dict[str, list[StateLabel]] = {}
        for t in self.targets:
            groups.setdefault(self._roots[t].manifold, []).append(t)
        return groups

    def _ordered(self, evaluation, mapping: Mapping[StateLabel, StateLabel]) -> list[StateLabel]:
        roots = [mapping[t] for t in self.targets]
        if self.pair:
            roots.sort(key=lambda r: (evaluation.energy(r), r))
        return roots

    def _opts(self) -> dict[str, float]:
        o = self.options
        return {"min_overlap": o.min_overlap, "ambiguity": o.ambiguity, "min_window": o.min_window}

    def _follow_one(self, evaluation, o: np.ndarray, target: StateLabel,
                    acc: "_Assignment") -> None:
        old = self._roots[target]
        match = match_row(o, _index(self._reference, old))
        new = evaluation.manifold(old.manifold)[match.column].label
        if old.is_reference and new != old:
            # The reference state is the SCF determinant itself: response roots are built on
            # it and cannot take its place. A better overlap with an excited root means the
            # reference changed character (e.g. an unstable RHF at a twisted double bond).
            acc.flags.append(f"{target}: the reference determinant resembles root {new} more "
                             "than itself here (the SCF solution changed character); the "
                             "reference is kept, check the SCF (try --cold-start, an "
                             "unrestricted reference or CASSCF)")
            col = _index(evaluation, old)
            others = [abs(v) for j, v in enumerate(o[match.row]) if j != col]
            match = replace(match, column=col, overlap=float(o[match.row, col]),
                            second_best=max(others, default=0.0))
            new = old
        acc.mapping[target], acc.confidence[target] = new, match.confidence
        acc.window[target], acc.phase[new] = match.window, match.phase
        acc.flags.extend(row_flags(str(target), str(old), str(new), match, **self._opts()))

    def _follow_pair(self, evaluation, o: np.ndarray, group: list[StateLabel],
                     acc: "_Assignment") -> None:
        rows = tuple(_index(self._reference, self._roots[t]) for t in group)
        pm = match_pair(o, rows)
        states = evaluation.manifold(self._roots[group[0]].manifold)
        new = sorted((states[c].label for c in pm.columns),
                     key=lambda r: (evaluation.energy(r), r))
        # the target that was lower at the start takes the lower root (labels by energy)
        for target, root in zip(sorted(group, key=lambda t: t.index), new):
            acc.mapping[target], acc.confidence[target] = root, pm.confidence
        for target, m in zip(group, pm.matches):
            acc.window[target] = m.window
            acc.phase[states[m.column].label] = m.phase
        name = "/".join(map(str, group))
        if pm.confidence < self.options.min_overlap:
            acc.flags.append(f"pair {name}: lost its character between geometries (smallest "
                             f"overlap of the pair subspace {pm.confidence:.2f}); shorten the "
                             "step")
        for target, m in zip(group, pm.matches):
            if m.window < self.options.min_window:
                acc.flags.append(f"{target}: only {100 * m.window:.0f}% of the state found "
                                 "among the computed roots; compute more roots")

    def _record(self, evaluation, acc: "_Assignment", overlaps) -> TrackingRecord:
        roots = self._ordered(evaluation, acc.mapping)
        by_root = {acc.mapping[t]: t for t in self.targets}
        lost = [t for t in self.targets if acc.confidence[t] < self.options.min_overlap]
        for text in acc.flags:
            log.warning(text)
        if lost and self.options.strict:
            raise StateTrackingError("; ".join(acc.flags) + " (strict tracking)")
        previous = self._ordered(self._reference, self._roots)
        return TrackingRecord(
            targets=tuple(map(str, self.targets)), roots=tuple(map(str, roots)),
            previous_roots=tuple(map(str, previous)), overlaps=dict(overlaps),
            confidence=tuple(float(acc.confidence[by_root[r]]) for r in roots),
            flags=tuple(acc.flags), phases=tuple(int(acc.phase[r]) for r in roots),
            info={"assignment": {str(t): str(acc.mapping[t]) for t in self.targets},
                  "phase_by_target": {str(t): int(acc.phase[acc.mapping[t]])
                                      for t in self.targets},
                  "window": {str(t): float(acc.window[t]) for t in self.targets},
                  "overlap_scale": dict(acc.scale),
                  "lost": [str(t) for t in lost]})

    def _adiabatic(self, evaluation) -> TrackingRecord:
        mapping = {t: t for t in self.targets}
        for t in self.targets:
            _index(evaluation, t)
        roots = self._ordered(evaluation, mapping)
        return TrackingRecord(targets=tuple(map(str, self.targets)), roots=tuple(map(str, roots)),
                              previous_roots=tuple(map(str, self._ordered(self._reference,
                                                                          self._roots))),
                              info={"assignment": {str(t): str(t) for t in self.targets},
                                    "tracking": "disabled (adiabatic index followed)"})
