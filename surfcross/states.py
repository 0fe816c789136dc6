"""State labels: ``S0`` (closed-shell reference), ``S1..Sn`` singlet excited states,
``T1..Tn`` triplets, and plain indices ``0, 1, 2, ...`` for open-shell references.

A label names a state by its adiabatic (energy) order at the geometry where a task starts;
the tracker then follows that state's character, so during a run the label is an identity,
and the root that currently carries it may have another adiabatic index.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterable, Sequence

from .errors import InputError

__all__ = ["StateLabel", "parse_state", "parse_states", "SINGLET", "TRIPLET", "INDEXED"]

SINGLET = "S"
TRIPLET = "T"
INDEXED = ""  # open-shell reference: plain indices

_LABEL = re.compile(r"^\s*([SsTt]?)(\d+)\s*$")


@dataclass(frozen=True, order=True)
class StateLabel:
    """A state label. ``manifold`` is 'S', 'T' or '' (open-shell plain index)."""

    manifold: str
    index: int

    def __post_init__(self) -> None:
        if self.manifold not in (SINGLET, TRIPLET, INDEXED):
            raise InputError(f"unknown spin manifold {self.manifold!r}")
        if self.index < 0:
            raise InputError(f"state index must be >= 0, got {self.index}")
        if self.manifold == TRIPLET and self.index == 0:
            raise InputError("there is no T0: triplets are numbered from T1")

    def __str__(self) -> str:
        return f"{self.manifold}{self.index}"

    @property
    def is_reference(self) -> bool:
        """True for the SCF reference state (S0, or 0 for open-shell references)."""
        return self.index == 0 and self.manifold != TRIPLET

    @property
    def multiplicity(self) -> int | None:
        return {SINGLET: 1, TRIPLET: 3}.get(self.manifold)


def parse_state(text: str | StateLabel) -> StateLabel:
    """'S1' -> StateLabel('S', 1). Raises InputError for anything else."""
    if isinstance(text, StateLabel):
        return text
    m = _LABEL.match(str(text))
    if m is None:
        raise InputError(
            f"unknown state label {text!r}: use S0, S1, S2, ... for singlets, T1, T2, ... for "
            "triplets, or 0, 1, 2, ... for open-shell references"
        )
    return StateLabel(m.group(1).upper(), int(m.group(2)))


def parse_states(text: str | Iterable[str | StateLabel], count: int | None = None) -> tuple[StateLabel, ...]:
    """Parse 'S1,S2' (or a sequence). Rejects duplicates; checks the count when given."""
    items: Sequence = text.split(",") if isinstance(text, str) else list(text)
    labels = tuple(parse_state(t) for t in items if str(t).strip())
    if len(set(labels)) != len(labels):
        raise InputError(f"the same state is given twice in {', '.join(map(str, labels))}")
    if count is not None and len(labels) != count:
        raise InputError(f"expected {count} state label(s), got {len(labels)}: {text!r}")
    return labels
