"""Spin-orbit operators from PySCF integrals, and couplings between the engine's response states.

Operators (all effective one-electron, H_SO = sum_i h(i).s(i) with h_k = i a_k, a_k real
antisymmetric; atomic units, alpha the fine-structure constant from scipy.constants):

* ``'effective-charge'``: the one-electron Breit-Pauli term with effective nuclear charges
  (Koseki, Schmidt and Gordon, J. Phys. Chem. 96 (1992) 10768),

      a_k = (alpha^2 / 2) sum_A Z_eff,A <mu| [grad(1/r_A) x grad]_k |nu>,

  with the charges of :data:`EFFECTIVE_CHARGES` standing in for the two-electron screening.
  The default for molecules of the elements in that table.
* ``'mean-field'``: the full nuclear charges plus the spin-orbit mean field of the two-electron
  Breit-Pauli terms over the closed-shell reference density D (Hess, Marian, Wahlgren and
  Gropen, Chem. Phys. Lett. 251 (1996) 365):

      a_k += -(alpha^2 / 4) sum_kl D_kl [2 G(mu nu|k l) - 3 G(mu l|k nu) - 3 G(k nu|mu l)]_k,

  G(mu nu|k l) = <mu(1) k(2)| grad_1(1/r12) x grad_1 |nu(1) l(2)>: the spin-same-orbit
  Coulomb term and the exchange terms of spin-same-orbit plus spin-other-orbit (the factor 3
  = 1 + 2). Between the reference and a single excitation this is the exact Breit-Pauli
  matrix element; between two excited states it drops the residual two-electron part (the
  approximation of the method). More accurate than effective charges, any element. The
  two-electron integrals are PySCF's ``int2e_p1vxp1`` (one exact pass, cost ~N^4) or, by
  default, their density-fitted form from ``int3c2e_pvxp1`` with the def2-universal-jkfit
  auxiliary basis (differences about 0.1 % of the couplings).
* ``'bare-nuclear'``: the one-electron term with the full nuclear charges and no two-electron
  part. It overestimates couplings (by about 30-50 % for first-row atoms); it is here to
  compare with one-electron relativistic Hamiltonians (PySCF's X2C), not for production.

PySCF conventions used (checked in tests/test_soc_operator.py by quadrature):
``int1e_prinvxp`` = -<mu|grad(1/r_C) x grad|nu>, and ``int2e_p1vxp1`` carries the same sign on
electron 1. Basis sets with effective core potentials are refused: their spin-orbit part is
not the Breit-Pauli operator of the missing core.
"""

from __future__ import annotations

import logging
from typing import Any, Iterable

import numpy as np
from scipy import constants

from ..analysis.spin_orbit import (OPERATORS, SOC_LIMITS_NOTE, SpinOrbitCouplings, make_pair,
                                   reference_triplet_vector, singlet_triplet_vector)
from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state
from .base import Evaluation, MethodSpec

__all__ = ["EFFECTIVE_CHARGES", "ALPHA", "spin_orbit_ao", "spin_orbit_couplings",
           "spin_orbit_at", "choose_operator", "HEAVY_ATOMIC_NUMBER"]

logger = logging.getLogger(__name__)

ALPHA: float = constants.fine_structure

#: Effective nuclear charges of the one-electron operator for all-electron basis sets, after
#: Koseki, Schmidt and Gordon, J. Phys. Chem. 96 (1992) 10768 (values recalled from memory,
#: checked here against atomic and diatomic fine structure in tests/test_soc_reference.py).
#: Hydrogen keeps its bare charge. Elements not listed use the mean-field operator.
EFFECTIVE_CHARGES: dict[str, float] = {
    "H": 1.0,
    "C": 3.6,
    "N": 4.55,
    "O": 5.6,
    "F": 6.7,
}

#: atoms from this atomic number on (K onward) get the heavy-element caution
HEAVY_ATOMIC_NUMBER = 19


def choose_operator(symbols: Iterable[str], operator: str) -> str:
    """'auto' -> 'effective-charge' when every element has an effective charge, else
    'mean-field'; other names are checked and returned."""
    if operator == "auto":
        missing = sorted(set(symbols) - set(EFFECTIVE_CHARGES))
        return "mean-field" if missing else "effective-charge"
    if operator not in OPERATORS:
        raise InputError(f"unknown spin-orbit operator {operator!r}: choose auto, "
                         + ", ".join(OPERATORS))
    return operator


def _nuclear_term(mol: Any, charges: np.ndarray) -> np.ndarray:
    total = np.zeros((3, mol.nao, mol.nao))
    for atom, z in enumerate(charges):
        if z == 0.0:
            continue
        with mol.with_rinv_origin(mol.atom_coord(atom)):
            total -= z * mol.intor("int1e_prinvxp", comp=3)
    return 0.5 * ALPHA ** 2 * total


#: auxiliary basis of the density-fitted mean field (PySCF's name for def2-universal-jkfit)
FITTING_BASIS = "weigend"


def _mean_field_term(mol: Any, density: np.ndarray, fitted: bool) -> np.ndarray:
    """-(alpha^2/4) sum D [2 G(mu nu|k l) - 3 G(mu l|k nu) - 3 G(k nu|mu l)], G = -I.

    I = PySCF's int2e_p1vxp1 is antisymmetric in (mu nu) and symmetric in (k l), so the
    second exchange term is minus the transpose of the first: a = (alpha^2/4)(2J - 3K + 3K^T).
    """
    d = np.asarray(density, float)
    if fitted:
        coulomb, exchange = _fitted_terms(mol, d)
    else:
        from pyscf.scf import jk

        # symmetric density: 'lk' is 'kl'; the a4ij kernels use the (mu nu) antisymmetry
        coulomb, exchange = jk.get_jk(mol, [d, d], scripts=["ijkl,lk->ij", "ijkl,jk->il"],
                                      intor="int2e_p1vxp1", comp=3, aosym="a4ij")
    exchange = np.asarray(exchange)
    return 0.25 * ALPHA ** 2 * (2.0 * np.asarray(coulomb) - 3.0 * exchange
                                + 3.0 * exchange.transpose(0, 2, 1))


def _fitted_terms(mol: Any, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coulomb J and exchange K of the spin-orbit mean field with density fitting:
    (mu nu|k l)' = sum_PQ (mu nu|P)' (P|Q)^-1 (Q|k l)."""
    import scipy.linalg
    from pyscf import df

    aux = df.addons.make_auxmol(mol, FITTING_BASIS)
    so3 = df.incore.aux_e2(mol, aux, intor="int3c2e_pvxp1", comp=3, aosym="s1")
    ordinary = df.incore.aux_e2(mol, aux, intor="int3c2e", aosym="s1")
    factor = scipy.linalg.cho_factor(aux.intor("int2c2e"))
    fitted_density = scipy.linalg.cho_solve(factor, np.einsum("klP,kl->P", ordinary, d))
    coulomb = np.einsum("kmnP,P->kmn", so3, fitted_density)
    weights = scipy.linalg.cho_solve(factor, ordinary.reshape(-1, aux.nao).T).T
    weights = weights.reshape(ordinary.shape)  # (k n|Q) (Q|P)^-1, indexed [k, n, P]
    half = np.einsum("kmlP,lj->kmjP", so3, d, optimize=True)
    exchange = np.einsum("kmjP,jnP->kmn", half, weights, optimize=True)
    return coulomb, exchange


def spin_orbit_ao(mol: Any, operator: str, density: np.ndarray | None = None, *,
                  density_fitting: bool = True) -> np.ndarray:
    """a_k (3, nao, nao), hartree, of the spin-orbit operator h_k = i a_k in the AO basis.

    ``operator`` is one of 'effective-charge', 'mean-field', 'bare-nuclear'; 'mean-field'
    needs the total (alpha + beta) AO density of the reference. ``density_fitting``: the mean field's
    two-electron integrals by density fitting (auxiliary basis :data:`FITTING_BASIS`; errors
    below 0.5 % of the couplings in our tests), else one exact pass over the four-index
    spin-orbit integrals (cost ~N^4).
    """
    if mol.has_ecp():
        raise InputError("spin-orbit couplings need an all-electron basis: the effective core "
                         "potentials of this basis replace the core whose spin-orbit terms the "
                         "Breit-Pauli operator describes")
    symbols = [mol.atom_pure_symbol(i) for i in range(mol.natm)]
    if operator == "effective-charge":
        missing = sorted(set(symbols) - set(EFFECTIVE_CHARGES))
        if missing:
            raise InputError(f"no effective nuclear charge for {', '.join(missing)} (tabulated: "
                             f"{', '.join(EFFECTIVE_CHARGES)}); use the mean-field operator")
        charges = np.array([EFFECTIVE_CHARGES[s] for s in symbols])
        return _nuclear_term(mol, charges)
    charges = np.array([float(mol.atom_charge(i)) for i in range(mol.natm)])
    if operator == "bare-nuclear":
        return _nuclear_term(mol, charges)
    if operator == "mean-field":
        if density is None:
            raise InputError("the mean-field spin-orbit operator needs the reference density")
        return _nuclear_term(mol, charges) + _mean_field_term(mol, density, density_fitting)
    raise InputError(f"unknown spin-orbit operator {operator!r}: choose one of "
                     + ", ".join(OPERATORS))


def _molecule(geometry: Geometry, wavefunction: Any) -> Any:
    """The engine's PySCF molecule of this evaluation (same basis, same AO order)."""
    from .pyscf_scf import build_molecule

    mol = build_molecule(geometry, MethodSpec(basis=wavefunction.basis), geometry.spin, None, 0)
    if bool(wavefunction.cartesian_basis) != bool(mol.cart):
        mol.cart = bool(wavefunction.cartesian_basis)
        mol.build(dump_input=False, parse_arg=False)
    return mol


def _response_data(evaluation: Evaluation) -> tuple[Any, Any, Any]:
    wf = evaluation.wavefunction
    manifolds = getattr(wf, "manifolds", None)
    if manifolds is None or "S" not in manifolds:
        raise InputError("spin-orbit couplings need the states of the response engine with a "
                         "restricted closed-shell reference (CIS, TDA, TDHF or TDDFT; not "
                         "CASSCF or unrestricted references)")
    singlets, triplets = manifolds["S"], manifolds.get("T")
    if triplets is None or triplets.coupling != "triplet" or not triplets.amplitudes:
        raise InputError("spin-orbit couplings need response triplets of the closed-shell "
                         "reference: ask for triplet roots (>= 1) with triplets='response' "
                         "(not the high-spin reference)")
    return wf, singlets, triplets


def _selected(labels: Iterable[StateLabel | str] | None, available: list[StateLabel],
              kind: str) -> list[StateLabel]:
    if labels is None:
        return available
    chosen = [parse_state(x) for x in labels]
    for label in chosen:
        if label not in available:
            raise InputError(f"{kind} {label} was not computed here (computed: "
                             f"{', '.join(str(x) for x in available)})")
    return chosen


def spin_orbit_couplings(evaluation: Evaluation, operator: str = "auto", *,
                         singlets: Iterable[StateLabel | str] | None = None,
                         triplets: Iterable[StateLabel | str] | None = None,
                         method: MethodSpec | None = None,
                         density_fitting: bool = True) -> SpinOrbitCouplings:
    """<S_m|H_SO|T_n, M> (M = -1, 0, +1) and totals in cm^-1 at one evaluation.

    Parameters
    ----------
    evaluation
        From the PySCF response engine (restricted closed-shell reference with response
        triplets, ``MethodSpec(triplet_roots >= 1)``).
    operator
        'auto' (effective charges when tabulated for every element, else mean field),
        'effective-charge', 'mean-field' or 'bare-nuclear' (see the module docstring).
    singlets, triplets
        Labels to couple (default: S0 and every computed singlet; every triplet).
    method
        The method the evaluation came from, to record which amplitudes were used ('cis' for
        CIS/TDA, 'x+y' for TDHF/TDDFT); without it the record says 'cis-like'.
    density_fitting
        Mean field only: fit the two-electron spin-orbit integrals (default; about 0.1 %
        of the couplings) instead of one exact four-index pass (cost ~N^4).

    Cost (acetone, 6-31G*, benchmarks/soc_costs.py): effective charges under 1 % of the
    states calculation, the fitted mean field about 7 % of a CIS and 0.4 % of a TDA-B3LYP one.
    """
    wf, sing_wf, trip_wf = _response_data(evaluation)
    geometry = evaluation.geometry
    chosen = choose_operator(geometry.symbols, operator)
    mol = _molecule(geometry, wf)
    coeff = np.asarray(sing_wf.reference.mo_coeff)
    occ = np.asarray(sing_wf.reference.mo_occ)
    nocc = int(np.count_nonzero(occ > 0))
    density = (coeff * occ) @ coeff.T if chosen == "mean-field" else None
    a_mo = np.einsum("pm,kpq,qn->kmn", coeff, spin_orbit_ao(mol, chosen, density,
                                                        density_fitting=density_fitting), coeff)
    s_labels = [s.label for s in evaluation.manifold("S")]
    t_labels = [s.label for s in evaluation.manifold("T")]
    s_chosen = _selected(singlets, s_labels, "singlet")
    t_chosen = _selected(triplets, t_labels, "triplet")
    pairs = []
    for s in s_chosen:
        for t in t_chosen:
            x_t = trip_wf.amplitudes[t.index - 1]
            if s.index == 0:
                z = reference_triplet_vector(a_mo, nocc, x_t)
            else:
                z = singlet_triplet_vector(a_mo, nocc, sing_wf.amplitudes[s.index - 1], x_t)
            pairs.append(make_pair(s, t, z))
    kind = "cis-like" if method is None else (
        "x+y" if method.method in ("tdhf", "tddft") else "cis")
    return SpinOrbitCouplings(operator=chosen, amplitudes=kind, pairs=tuple(pairs),
                              notes=_notes(mol, kind))


def _notes(mol: Any, amplitudes: str) -> tuple[str, ...]:
    notes = [SOC_LIMITS_NOTE]
    heavy = sorted({mol.atom_pure_symbol(i) for i in range(mol.natm)
                    if mol.atom_charge(i) >= HEAVY_ATOMIC_NUMBER})
    if heavy:
        notes.append(f"{', '.join(heavy)}: beyond the third period the Breit-Pauli couplings "
                     "lose accuracy (relativistic effects beyond first order); use a "
                     "relativistic method for numbers that matter")
    if amplitudes == "x+y":
        notes.append("full-response states: couplings from X + Y renormalized to the CIS norm "
                     "(a CIS-like approximation to the response wavefunction)")
    return tuple(notes)


def spin_orbit_at(geometry: Geometry, method: MethodSpec, operator: str = "auto",
                  **engine_options: Any) -> tuple[Evaluation, SpinOrbitCouplings]:
    """Compute the states at ``geometry`` and their singlet-triplet couplings in one call.

    A method without triplet roots gets as many triplets as singlets (response triplets).
    Returns the evaluation and the couplings.
    """
    from .pyscf_response import PySCFResponseEngine

    spec = method
    if spec.triplet_roots == 0 or spec.triplets != "response":
        spec = spec.with_updates(triplet_roots=max(spec.triplet_roots, spec.roots, 1),
                                 triplets="response")
    with PySCFResponseEngine(spec, **engine_options) as engine:
        evaluation = engine.states(geometry)
    return evaluation, spin_orbit_couplings(evaluation, operator, method=spec)
