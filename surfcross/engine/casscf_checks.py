"""Sanity checks on a state-averaged CASSCF solution, phrased as warnings for the user.

* spin contamination of an averaged state (should not happen with the singlet penalty, but a
  too-small penalty or near-degenerate triplets can still leak in);
* active natural orbitals that are (almost) doubly occupied or empty: the active space holds an
  orbital that does not take part in the chemistry, and may swap with another one later;
* active orbitals that changed character since the previous geometry (small overlap of the two
  active spaces): surfaces become discontinuous;
* averaged states that changed order or character since the previous geometry.
"""

from __future__ import annotations

import numpy as np

from .casscf_wavefunction import ActiveSpaceWavefunction, ao_cross_overlap, casscf_overlap_matrix

__all__ = ["property_warnings", "continuity_warnings", "STATE_NOTE_MARK"]

#: <S^2> deviation from 0 above which a state is reported as spin contaminated
SPIN_TOLERANCE = 0.05
#: natural occupations closer than this to 0 or 2 flag an inert active orbital
INERT_OCCUPATION = 0.02
#: smallest singular value of the active-active orbital overlap below which the active
#: space is reported as having changed character
ACTIVE_SPACE_CONTINUITY = 0.9
#: prefix-free marker: notes about states changing order/character are informational near
#: crossings (states mix there by nature); the engine logs them at INFO level
STATE_NOTE_MARK = "since the previous geometry (overlap"
#: |overlap| of a state with its own previous self below which it is reported as changed
STATE_CONTINUITY = 0.7


def property_warnings(props: dict) -> list[str]:
    """Warnings from <S^2> values and active natural occupations."""
    notes = []
    for k, ss in enumerate(props["spin_square"]):
        if abs(ss) > SPIN_TOLERANCE:
            notes.append(f"S{k} has <S^2> = {ss:.3f} instead of 0: spin contamination in the "
                         "state average; results for this state are unreliable")
    occ = np.asarray(props["natural_occupations"])
    inert = [f"{n:.3f}" for n in occ if n < INERT_OCCUPATION or n > 2.0 - INERT_OCCUPATION]
    if inert:
        notes.append("active natural orbital occupations " + ", ".join(inert) + " are almost "
                     "0 or 2: such orbitals do not need to be active and may swap with others "
                     "along a path; consider a different active space")
    return notes


def continuity_warnings(prev: ActiveSpaceWavefunction, cur: ActiveSpaceWavefunction) -> list[str]:
    """Warnings when the active space or the averaged states changed since ``prev``."""
    if (prev.ncore, prev.ncas, tuple(prev.nelecas)) != (cur.ncore, cur.ncas, tuple(cur.nelecas)):
        return []
    s_ao = ao_cross_overlap(prev, cur)
    notes = []
    s_act = prev.active_coeff.T @ s_ao @ cur.active_coeff
    smallest = float(np.linalg.svd(s_act, compute_uv=False).min())
    if smallest < ACTIVE_SPACE_CONTINUITY:
        notes.append(f"the active orbitals changed character since the previous geometry "
                     f"(smallest active-space overlap {smallest:.2f}); energies may jump. Take "
                     "smaller steps or choose the active orbitals explicitly")
    overlap = np.abs(casscf_overlap_matrix(prev, cur, s_ao))
    for k in range(min(overlap.shape)):
        best = int(np.argmax(overlap[k]))
        if best != k and overlap[k, best] > overlap[k, k]:
            notes.append(f"the adiabatic order of the averaged states changed: S{k} now "
                         f"resembles S{best} since the previous geometry (overlap "
                         f"{overlap[k, best]:.2f} vs {overlap[k, k]:.2f})")
        elif overlap[k, k] < STATE_CONTINUITY:
            notes.append(f"S{k} changed character since the previous geometry (overlap "
                         f"{overlap[k, k]:.2f} with its previous self)")
    return notes
