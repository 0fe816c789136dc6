"""Turning PySCF results into surfcross records: states, transitions, wavefunction data.

Plain numpy arrays only leave this module; PySCF objects stay inside the engine.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..states import StateLabel
from ..units import HARTREE_IN_EV
from .base import StateInfo, Transition
from .pyscf_spin import cis_spin_square
from .pyscf_tdsolve import ResponseRoots
from .wavefunction import ManifoldWavefunction, ReferenceWavefunction

__all__ = ["dominant_transitions", "reference_wavefunction", "response_states",
           "manifold_wavefunction", "LOW_EXCITATION_EV", "SPIN_DEVIATION"]

#: excitation energies below this (eV) get a warning
LOW_EXCITATION_EV = 0.1
#: allowed deviation of a reference's <S^2> from S(S+1)
SPIN_DEVIATION = 0.1
#: transitions with at least this weight are listed, at most MAX_TRANSITIONS of them
MIN_WEIGHT = 0.1
MAX_TRANSITIONS = 4


def dominant_transitions(amplitudes: Any, restricted: bool) -> tuple[Transition, ...]:
    """Largest orbital contributions of one root (0-based MO indices, weights summing to 1)."""
    found: list[Transition] = []
    if restricted:
        blocks = [(np.asarray(amplitudes), "", 2.0)]
    else:
        blocks = [(np.asarray(amplitudes[0]), "a", 1.0), (np.asarray(amplitudes[1]), "b", 1.0)]
    for amp, spin, factor in blocks:
        nocc = amp.shape[0]
        weights = factor * amp ** 2
        for i, a in zip(*np.nonzero(weights >= MIN_WEIGHT)):
            found.append(Transition(int(i), int(nocc + a), float(weights[i, a]), spin))
    found.sort(key=lambda t: -t.weight)
    return tuple(found[:MAX_TRANSITIONS])


def reference_wavefunction(mf: Any) -> ReferenceWavefunction:
    coeff = np.array(mf.mo_coeff, float)
    occ = np.array(mf.mo_occ, float)
    return ReferenceWavefunction(mo_coeff=coeff, mo_occ=occ, restricted=coeff.ndim == 2)


def manifold_wavefunction(mf: Any, roots: ResponseRoots | None, includes_reference: bool,
                          coupling: str) -> ManifoldWavefunction:
    amps = roots.amplitudes() if roots is not None else ()
    return ManifoldWavefunction(reference=reference_wavefunction(mf),
                                includes_reference=includes_reference,
                                coupling=coupling, amplitudes=amps)


def response_states(mf: Any, roots: ResponseRoots, manifold: str, first_index: int,
                    oscillator: bool, warnings: list[str]) -> list[StateInfo]:
    """StateInfo records of the reported response roots; appends warnings for low roots.

    Imaginary roots of a full response (``roots.imaginary``) keep their labels: the real
    roots are numbered above them, so the labels of the missing ones are absent from the
    evaluation instead of passing to the next real root.
    """
    e_exc = roots.excitation_eh
    if roots.imaginary:
        missing = [str(StateLabel(manifold, first_index + k)) for k in range(roots.imaginary)]
        first_index += roots.imaginary
        kind = {"S": "singlet", "T": "triplet"}.get(manifold, "")
        warnings.append(
            f"{', '.join(missing)}: imaginary excitation energ{'ies' if len(missing) > 1 else 'y'}"
            f" (the reference is unstable towards {'a lower solution' if kind != 'triplet' else 'an unrestricted (triplet) solution'} "
            f"along {'them' if len(missing) > 1 else 'it'}); full response has no real root "
            f"there, so {'these labels are' if len(missing) > 1 else 'this label is'} missing "
            f"and the next real root is {StateLabel(manifold, first_index)}, not relabelled. "
            "Use TDA (it keeps such states as negative roots) or an unrestricted reference")
    amps = roots.amplitudes()
    f = np.asarray(roots.td.oscillator_strength()[: roots.nreport]) if oscillator else None
    s_ao = mf.mol.intor_symmetric("int1e_ovlp") if roots.unrestricted else None
    out = []
    for k, (de, amp) in enumerate(zip(e_exc, amps)):
        label = StateLabel(manifold, first_index + k)
        ev = de * HARTREE_IN_EV
        if ev < LOW_EXCITATION_EV:
            warnings.append(
                f"{label}: excitation energy {ev:.3f} eV is below {LOW_EXCITATION_EV} eV or "
                "negative: the reference is close to unstable or degenerate with this state. "
                "Linear response is unreliable here; prefer TDA (if full response), check the "
                "SCF stability, or use a multireference method")
        s2 = None
        if roots.unrestricted and not roots.full:
            s2 = cis_spin_square(mf.mo_coeff, mf.mo_occ, s_ao, amp[0], amp[1])
        out.append(StateInfo(
            label=label,
            energy_eh=float(mf.e_tot + de),
            oscillator_strength=None if f is None else float(f[k]),
            spin_square=s2,
            transitions=dominant_transitions(amp, not roots.unrestricted),
        ))
    return out


def reference_spin_square(mf: Any, label: StateLabel, spin: int, warnings: list[str]) -> float:
    """<S^2> of an unrestricted reference; warns when it deviates from S(S+1)."""
    s2 = float(mf.spin_square()[0])
    exact = 0.5 * spin * (0.5 * spin + 1.0)
    if abs(s2 - exact) > SPIN_DEVIATION:
        warnings.append(
            f"{label}: the unrestricted reference has <S^2> = {s2:.3f} instead of {exact:.3f} "
            "(spin contamination); its energies and gradients mix spin states, check with a "
            "spin-adapted or multireference method")
    return s2
