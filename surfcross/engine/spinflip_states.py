"""Spin classification, labels and warnings of spin-flip TDA states; the method's limits note.

Spin-flip-down excitations of an M_S = 1 reference are M_S = 0 states, but they are not
eigenfunctions of S^2: configurations that flip an electron outside the two singly occupied
orbitals miss their spin partners. Every state is therefore classified by its <S^2>, to the
nearest of S(S+1) = 0 (singlet, label S), 2 (triplet, label T) and 6 (quintet, not labelled):

* <S^2> < 1: singlet-like, named S0, S1, ... in energy order (S0 = the lowest of them; it is a
  spin-flip state like the others, not the SCF determinant);
* 1 <= <S^2> < 4: triplet-like, named T1, T2, ...;
* <S^2> >= 4: quintet-like, computed but not listed (a note says how many).

A state with <S^2> near 1 is an even mixture of singlet and triplet and its label is arbitrary;
a followed state more than :data:`STRONG_CONTAMINATION` away from its ideal value is warned
about, and so is a followed state whose best match at the next geometry lies in the other spin
class.
"""

from __future__ import annotations

import numpy as np

from ..states import SINGLET, TRIPLET, StateLabel
from .base import StateInfo, Transition

__all__ = ["SPIN_FLIP_LIMITS", "STRONG_CONTAMINATION", "spin_class", "ideal_spin_square",
           "classify_roots", "contamination_warning", "spin_flip_transitions"]

#: |<S^2> - S(S+1)| above which a followed state is called strongly contaminated
STRONG_CONTAMINATION = 0.3
#: transitions listed per state: weight at least MIN_WEIGHT, at most MAX_TRANSITIONS
MIN_WEIGHT = 0.1
MAX_TRANSITIONS = 4

#: Known limits of the method, carried by the engine (``SpinFlipEngine.limits_note``)
SPIN_FLIP_LIMITS = (
    "Spin-flip TDA builds S0, S1 and the M_S = 0 triplets from one high-spin (M_S = 1) "
    "triplet reference, so S0/S1 intersections have the right (conical) shape, but its states "
    "are spin-contaminated: configurations outside the two open-shell orbitals miss their spin "
    "partners, <S^2> is reported for every state and labels follow it (S below 1, T from 1), "
    "and a state near <S^2> = 1 is a singlet/triplet mixture whose label and energy mean "
    "little. Results depend on the reference (a poor or unstable M_S = 1 UKS solution spoils "
    "every state; check its <S^2>) and strongly on the functional: only exact exchange couples "
    "the flipped configurations in the collinear kernel, hence the default BHandHLYP with 50 % "
    "exact exchange, and the collinear kernel places the M_S = 0 partner of the reference "
    "triplet too high; the multicollinear kernel is closer for triplets but slower. Check "
    "geometries and energies with a spin-adapted multireference method (e.g. MRCI or "
    "multistate CASPT2) before relying on them.")


def ideal_spin_square(manifold: str) -> float:
    return {SINGLET: 0.0, TRIPLET: 2.0}.get(manifold, 6.0)


def spin_class(s2: float) -> str | None:
    """'S' (singlet-like), 'T' (triplet-like) or None (quintet-like) by the nearest S(S+1)."""
    if s2 < 1.0:
        return SINGLET
    if s2 < 4.0:
        return TRIPLET
    return None


def spin_flip_transitions(x: np.ndarray, nocc_beta: int) -> tuple[Transition, ...]:
    """Dominant alpha-occupied -> beta-virtual transitions of one root (0-based MO numbers of
    each spin's orbitals; weights are X^2)."""
    weights = np.asarray(x) ** 2
    found = [Transition(int(i), int(nocc_beta + a), float(weights[i, a]), "ab")
             for i, a in zip(*np.nonzero(weights >= MIN_WEIGHT))]
    found.sort(key=lambda t: -t.weight)
    return tuple(found[:MAX_TRANSITIONS])


def classify_roots(energies: np.ndarray, spin_squares: np.ndarray) -> tuple[list, list[int]]:
    """Labels of the roots (in root order; None for quintet-like roots) and the quintet-like
    root numbers. Roots are in increasing energy, so the labels count upward in each class."""
    counters = {SINGLET: 0, TRIPLET: 1}
    labels: list[StateLabel | None] = []
    quintets = []
    for k, s2 in enumerate(spin_squares):
        cls = spin_class(float(s2))
        if cls is None:
            labels.append(None)
            quintets.append(k)
            continue
        labels.append(StateLabel(cls, counters[cls]))
        counters[cls] += 1
    return labels, quintets


def contamination_warning(state: StateInfo) -> str | None:
    """Warning for a followed state far from its ideal <S^2> (None when it is clean enough)."""
    s2 = state.spin_square
    if s2 is None:
        return None
    ideal = ideal_spin_square(state.label.manifold)
    if abs(s2 - ideal) <= STRONG_CONTAMINATION:
        return None
    kind = "singlet" if state.label.manifold == SINGLET else "triplet"
    return (f"{state.label}: <S^2> = {s2:.2f} instead of {ideal:.0f} for a {kind}: strongly "
            "spin-contaminated (a singlet/triplet mixture in spin-flip TDA); its energy and "
            "gradient are unreliable, check with a spin-adapted method")
