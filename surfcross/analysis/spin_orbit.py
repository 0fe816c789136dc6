"""Spin-orbit coupling matrix elements between spin-adapted CIS-type states (pure numpy).

The operator
------------
Every operator surfcross offers is an effective one-electron spin-orbit operator

    H_SO = sum_i h(i) . s(i),     h_k = i a_k   (k = x, y, z),

with ``a_k`` a real antisymmetric matrix over real spatial orbitals (``h_k`` is purely imaginary
and Hermitian). How ``a_k`` is built (one-electron Breit-Pauli with effective nuclear charges,
or with the spin-orbit mean field of the two-electron terms) lives in
:mod:`surfcross.engine.pyscf_soc`; everything here only needs ``a_k`` in the MO basis.

The states
----------
Closed-shell reference |0> with ``nocc`` doubly occupied real orbitals. With the singlet and
triplet excitation operators (Condon-Shortley phases)

    E_ai = a+_{a,alpha} a_{i,alpha} + a+_{a,beta} a_{i,beta}
    T(+1)_ai = -a+_{a,alpha} a_{i,beta}
    T(0)_ai  = (a+_{a,alpha} a_{i,alpha} - a+_{a,beta} a_{i,beta}) / sqrt(2)
    T(-1)_ai = a+_{a,beta} a_{i,alpha}

the states are |S> = sum X_ia E_ai |0> and |T, M> = sqrt(2) sum X_ia T(M)_ai |0>, with the
amplitudes X (nocc, nvir) in PySCF's restricted normalization sum X^2 = 1/2 (``beta = +alpha``
for singlets, ``beta = -alpha`` for triplets). The three sublevels are related by the spin
ladder operators in the Condon-Shortley convention: S+ |T, 0> = sqrt(2) |T, +1>.

For full linear response (TDHF/TDDFT) there is no wavefunction; the engine stores X + Y
renormalized to the CIS norm, and the couplings are those of that CIS-like expansion (an
approximation in common use, stated wherever the numbers are shown).

The formulas
------------
By rotational invariance of the spin part, <S|H_SO|T_k> = i z_k for the Cartesian triplet
components T_z = T(0), T_x = (T(-1) - T(+1))/sqrt(2), T_y = i (T(-1) + T(+1))/sqrt(2), with
real

    S0 - T:   z_k = sum_ia a_k[i, a] X^T_ia
    S  - T:   z_k = sum_ia X^T_ia [ (X^S a_k[vir, vir])_ia - (a_k[occ, occ] X^S)_ia ]

(a Slater-rule evaluation of <S|sum_pq h_k,pq (s_z)_pq|T(0)>). The sublevel elements follow:

    <S|H_SO|T, 0>  = i z_z
    <S|H_SO|T, +1> = (z_y - i z_x) / sqrt(2)
    <S|H_SO|T, -1> = (z_y + i z_x) / sqrt(2)

and the total sqrt(sum_M |<S|H_SO|T, M>|^2) = |z|, independent of the orientation of the
molecule. The sign of every response state is arbitrary (it is whatever the eigensolver
returned), so the overall phase of a pair's three elements is arbitrary too; their relative
phases and the total are not.

Known limits (state them where users see the numbers): first-order perturbative couplings
between spin-pure states of a linear-response method; heavier elements need a relativistic
treatment beyond the Breit-Pauli operator; results that matter need checking with
higher-level methods.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..states import StateLabel, parse_state
from ..units import HARTREE_IN_WAVENUMBER

__all__ = ["SUBLEVELS", "OPERATORS", "SOC_LIMITS_NOTE", "SpinOrbitPair", "SpinOrbitCouplings",
           "reference_triplet_vector", "singlet_triplet_vector", "sublevel_elements",
           "shell_levels"]

#: the triplet sublevels in the order of ``SpinOrbitPair.elements_cm``
SUBLEVELS = (-1, 0, 1)

#: operator names (see surfcross.engine.pyscf_soc): one-electron Breit-Pauli with effective
#: nuclear charges, with the spin-orbit mean field of the two-electron terms, or with bare
#: nuclear charges and no two-electron part (for comparisons only)
OPERATORS = ("effective-charge", "mean-field", "bare-nuclear")

SOC_LIMITS_NOTE = (
    "Spin-orbit couplings are first-order perturbative matrix elements of the Breit-Pauli "
    "operator between spin-pure linear-response states: the operators reproduce light-atom "
    "fine structure to about 10 %, the response states add their own errors, heavier "
    "elements need a relativistic treatment beyond this, and results that matter need "
    "checking with higher-level methods.")


def reference_triplet_vector(a_mo: np.ndarray, nocc: int, x_triplet: np.ndarray) -> np.ndarray:
    """z_k (k = x, y, z) of <S0|H_SO|T_k> = i z_k, in the units of ``a_mo``.

    ``a_mo`` (3, nmo, nmo) real antisymmetric; ``x_triplet`` (nocc, nvir), sum X^2 = 1/2.
    """
    a_ov = np.asarray(a_mo)[:, :nocc, nocc:]
    return np.einsum("kia,ia->k", a_ov, x_triplet)


def singlet_triplet_vector(a_mo: np.ndarray, nocc: int, x_singlet: np.ndarray,
                           x_triplet: np.ndarray) -> np.ndarray:
    """z_k of <S_m|H_SO|T_k> = i z_k between two excited CIS-type states (module docstring)."""
    a_mo = np.asarray(a_mo)
    a_oo = a_mo[:, :nocc, :nocc]
    a_vv = a_mo[:, nocc:, nocc:]
    particle = np.einsum("ib,kba,ia->k", x_singlet, a_vv, x_triplet)
    hole = np.einsum("kij,ja,ia->k", a_oo, x_singlet, x_triplet)
    return particle - hole


def sublevel_elements(z: np.ndarray) -> np.ndarray:
    """<S|H_SO|T, M> for M = -1, 0, +1 (complex) from the Cartesian vector z (real)."""
    zx, zy, zz = (float(v) for v in z)
    root = math.sqrt(0.5)
    return np.array([complex(zy, zx) * root, complex(0.0, zz), complex(zy, -zx) * root])


def shell_levels(a_shell: np.ndarray) -> np.ndarray:
    """Eigenvalues of sum_k h_k s_k over the spin orbitals of a set of orbitals.

    ``a_shell`` (3, n, n): the real antisymmetric a_k restricted to n orbitals (for a p shell
    the three p orbitals). Returns the 2n one-electron levels in ascending order; for a p
    shell with h = zeta l: -zeta (twice, j = 1/2) and +zeta/2 (four times, j = 3/2).
    """
    a_shell = np.asarray(a_shell, float)
    sigma = (np.array([[0, 1], [1, 0]], complex), np.array([[0, -1j], [1j, 0]]),
             np.array([[1, 0], [0, -1]], complex))
    n = a_shell.shape[1]
    h = np.zeros((2 * n, 2 * n), complex)
    for k in range(3):
        h += np.kron(1j * a_shell[k], 0.5 * sigma[k])
    return np.linalg.eigvalsh(h)


@dataclass(frozen=True)
class SpinOrbitPair:
    """Coupling of one singlet with the three sublevels of one triplet.

    ``elements_cm``: <singlet|H_SO|triplet, M> for M = -1, 0, +1 (cm^-1, complex; phase
    conventions in the module docstring). ``cartesian_cm``: the real z_k with
    <singlet|H_SO|T_k> = i z_k (k = x, y, z of the molecule's frame).
    """

    singlet: StateLabel
    triplet: StateLabel
    elements_cm: tuple[complex, complex, complex]
    cartesian_cm: tuple[float, float, float]

    @property
    def total_cm(self) -> float:
        """sqrt(sum_M |<S|H_SO|T, M>|^2), cm^-1 (orientation independent)."""
        return float(math.sqrt(sum(abs(v) ** 2 for v in self.elements_cm)))

    def to_dict(self) -> dict[str, Any]:
        return {
            "singlet": str(self.singlet),
            "triplet": str(self.triplet),
            "total_cm": self.total_cm,
            "sublevels": {f"{m:+d}" if m else "0": {"re_cm": v.real, "im_cm": v.imag,
                                                    "abs_cm": abs(v)}
                          for m, v in zip(SUBLEVELS, self.elements_cm)},
        }


@dataclass(frozen=True)
class SpinOrbitCouplings:
    """Singlet-triplet spin-orbit couplings at one geometry.

    Attributes
    ----------
    operator
        One of :data:`OPERATORS`: which spin-orbit operator was used.
    amplitudes
        'cis' (TDA/CIS amplitudes X) or 'x+y' (full response, X + Y at the CIS norm).
    pairs
        Every computed (singlet, triplet) pair, singlets in the order S0, S1, ..., triplets
        T1, T2, ... within each singlet.
    notes
        Caveats that apply to these numbers (limits of the method, heavy elements, ...).
    """

    operator: str
    amplitudes: str
    pairs: tuple[SpinOrbitPair, ...]
    notes: tuple[str, ...] = ()

    def pair(self, singlet: StateLabel | str, triplet: StateLabel | str) -> SpinOrbitPair:
        s, t = parse_state(singlet), parse_state(triplet)
        for p in self.pairs:
            if p.singlet == s and p.triplet == t:
                return p
        raise InputError(f"no spin-orbit coupling between {s} and {t} was computed (pairs: "
                         f"{', '.join(f'{p.singlet}-{p.triplet}' for p in self.pairs)})")

    def total_cm(self, singlet: StateLabel | str, triplet: StateLabel | str) -> float:
        """sqrt(sum_M |<singlet|H_SO|triplet, M>|^2) in cm^-1."""
        return self.pair(singlet, triplet).total_cm

    def to_dict(self) -> dict[str, Any]:
        return {"operator": self.operator, "amplitudes": self.amplitudes,
                "pairs": [p.to_dict() for p in self.pairs], "notes": list(self.notes)}


def make_pair(singlet: StateLabel, triplet: StateLabel, z_eh: np.ndarray) -> SpinOrbitPair:
    """A :class:`SpinOrbitPair` from z_k in hartree."""
    z_cm = np.asarray(z_eh, float) * HARTREE_IN_WAVENUMBER
    elements = sublevel_elements(z_cm)
    return SpinOrbitPair(singlet=singlet, triplet=triplet,
                         elements_cm=tuple(complex(v) for v in elements),
                         cartesian_cm=tuple(float(v) for v in z_cm))
