"""Vertical states at one geometry as table rows and JSON-ready data (no printing here).

Used by ``surfcross states``: one row per computed state with its excitation energy above the
reference (S0, or 0 for open shells), photon wavelength, total energy, oscillator strength,
<S^2> and dominant orbital transitions named relative to the HOMO.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..engine.base import Evaluation, MethodSpec, StateInfo
from ..units import ev_to_nm

__all__ = ["VerticalRow", "vertical_rows", "limits_note", "vertical_summary"]


@dataclass(frozen=True, kw_only=True)
class VerticalRow:
    """One state of a vertical calculation, in the units people read (eV, nm, Eh)."""

    label: str
    energy_eh: float
    excitation_ev: float
    wavelength_nm: float | None  # None for the reference and non-positive excitations
    oscillator_strength: float | None
    spin_square: float | None
    transitions: tuple[str, ...]
    irrep: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "label": self.label,
            "irrep": self.irrep,
            "energy_eh": self.energy_eh,
            "excitation_ev": self.excitation_ev,
            "wavelength_nm": self.wavelength_nm,
            "oscillator_strength": self.oscillator_strength,
            "spin_square": self.spin_square,
            "transitions": list(self.transitions),
        }


def _homos(evaluation: Evaluation, manifold: str) -> dict[str, int | None]:
    """HOMO index per spin tag ('' restricted, 'a', 'b') for naming transitions."""
    out: dict[str, int | None] = {"": evaluation.homo, "a": None, "b": None}
    wf = getattr(evaluation.wavefunction, "manifolds", {}).get(manifold)
    if wf is not None:
        na, nb = wf.reference.nocc
        out.update({"a": na - 1, "b": nb - 1})
        if wf.reference.restricted:
            out[""] = na - 1
    return out


def _row(evaluation: Evaluation, state: StateInfo) -> VerticalRow:
    homos = _homos(evaluation, state.label.manifold)
    excitation = evaluation.excitation_ev(state.label)
    is_ref = state.label.is_reference
    return VerticalRow(
        label=str(state.label),
        energy_eh=state.energy_eh,
        excitation_ev=0.0 if is_ref else excitation,
        wavelength_nm=None if is_ref or excitation <= 0.0 or math.isinf(ev_to_nm(excitation))
        else ev_to_nm(excitation),
        oscillator_strength=state.oscillator_strength,
        spin_square=state.spin_square,
        transitions=tuple(t.describe(homos.get(t.spin)) for t in state.transitions),
        irrep=state.irrep,
    )


def vertical_rows(evaluation: Evaluation) -> tuple[VerticalRow, ...]:
    """Rows in the evaluation's state order (reference first, then excited, then triplets)."""
    return tuple(_row(evaluation, s) for s in evaluation.states)


def limits_note(spec: MethodSpec) -> str:
    """One line on what the method cannot do, shown wherever its numbers are shown."""
    if spec.method == "casscf":
        return ("SA-CASSCF lacks dynamic correlation: excitation energies are often too high; "
                "check important results with a perturbation-corrected or higher-level method.")
    name = {"cis": "CIS", "tda": "TDA", "tdhf": "TDHF", "tddft": "TDDFT"}[spec.method]
    text = (f"{name} is linear response from a single reference: no double excitations, and "
            "crossings with the ground state have the wrong shape")
    if spec.method in ("tdhf", "tddft"):
        text += "; full response can turn unstable near such crossings (TDA is more robust)"
    return text + ". Check results that matter with a higher-level method."


def vertical_summary(evaluation: Evaluation, spec: MethodSpec, *,
                     source: str | None = None) -> dict[str, Any]:
    """JSON-ready description of a vertical calculation."""
    geom = evaluation.geometry
    return {
        "geometry": source,
        "charge": geom.charge,
        "spin": geom.spin,
        "method": spec.to_dict(),
        "point_group": evaluation.point_group,
        "states": [r.to_dict() for r in vertical_rows(evaluation)],
        "warnings": list(evaluation.warnings),
        "scf_cycles": evaluation.scf_cycles,
        "response_iterations": evaluation.response_iterations,
        "timings_s": dict(evaluation.timings_s),
        "note": limits_note(spec),
    }
