"""Active-space wavefunction data of the state-averaged CASSCF engine, and its overlaps.

A state-averaged CASSCF state is a CI expansion over determinants that all share the same
doubly occupied core orbitals and differ only in how the active electrons fill the active
orbitals. For two geometries with orbitals ``C`` and ``C'`` the overlap of two such
determinants (per spin) is the determinant of the MO overlap matrix restricted to the
occupied orbitals of each (Lowdin's rule for non-orthogonal determinants)::

    <D_I(R)|D_J(R')> = det S[core + I, core + J],     S = C^T S_AO(R, R') C'

With the core block ``A = S[core, core]`` invertible this factorizes exactly (Schur
complement) into ``det(A)`` times the determinant of the active-active minor of
``S_eff = S_aa - S_ac A^-1 S_ca``; both routes are implemented and used according to how well
``A`` is conditioned. No approximation is made beyond the finite basis: the result is the
exact overlap of the two CI wavefunctions, including orbital relaxation and basis-function
motion (the AO cross overlap). Everything here is plain numpy plus PySCF's string tables.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

__all__ = ["ActiveSpaceWavefunction", "build_mole", "ao_cross_overlap", "casscf_overlap_matrix"]

#: below this smallest singular value of the core-core MO overlap the Schur factorization is
#: skipped and full determinants (core included) are formed instead
_CORE_CONDITION_LIMIT = 1e-3


@dataclass(frozen=True)
class ActiveSpaceWavefunction:
    """Everything needed to compare CASSCF states between geometries.

    Attributes
    ----------
    symbols, coords_bohr, basis, charge, spin, cartesian_basis
        Enough to rebuild the AO basis at this geometry.
    mo_coeff
        Converged state-averaged orbitals, (nao, nmo): core, then active, then virtual.
    ci
        One CI matrix per state, (n_alpha_strings, n_beta_strings) in PySCF's string order,
        in energy order S0, S1, ...
    ncore, ncas
        Number of doubly occupied core orbitals and of active orbitals.
    nelecas
        Active (alpha, beta) electrons.
    weights
        State-averaging weights.
    """

    symbols: tuple[str, ...]
    coords_bohr: np.ndarray
    basis: str
    mo_coeff: np.ndarray
    ci: tuple[np.ndarray, ...]
    ncore: int
    ncas: int
    nelecas: tuple[int, int]
    weights: tuple[float, ...]
    charge: int = 0
    spin: int = 0
    cartesian_basis: bool = False

    @property
    def nstates(self) -> int:
        return len(self.ci)

    @property
    def active_coeff(self) -> np.ndarray:
        """AO coefficients of the active orbitals, (nao, ncas)."""
        return self.mo_coeff[:, self.ncore:self.ncore + self.ncas]


def build_mole(symbols, coords_bohr, basis: str, charge: int = 0, spin: int = 0,
               cartesian: bool = False, stdout=None, verbose: int = 0):
    """A PySCF Mole in bohr (``stdout``/``verbose`` route PySCF's own log)."""
    from pyscf import gto

    mol = gto.Mole()
    mol.atom = [(s, tuple(float(x) for x in xyz)) for s, xyz in zip(symbols, coords_bohr)]
    mol.unit = "Bohr"
    mol.basis = basis
    mol.charge = charge
    mol.spin = spin
    mol.cart = cartesian
    mol.verbose = verbose
    if stdout is not None:
        mol.stdout = stdout
    try:
        mol.build(parse_arg=False, dump_input=False)
    except (KeyError, RuntimeError, ValueError) as exc:
        raise InputError(f"PySCF could not build basis {basis!r} for this molecule: {exc}") from exc
    return mol


def _mole_of(wfn: ActiveSpaceWavefunction):
    return build_mole(wfn.symbols, wfn.coords_bohr, wfn.basis, wfn.charge, wfn.spin,
                      wfn.cartesian_basis)


def ao_cross_overlap(bra: ActiveSpaceWavefunction, ket: ActiveSpaceWavefunction) -> np.ndarray:
    """<chi_mu(R_bra)|chi_nu(R_ket)>, (nao, nao)."""
    from pyscf import gto

    return gto.intor_cross("int1e_ovlp", _mole_of(bra), _mole_of(ket))


def _string_occupations(ncas: int, nelec: int) -> np.ndarray:
    """Occupied active orbitals of every string in PySCF's order, (nstrings, nelec)."""
    from pyscf.fci import cistring

    strings = cistring.make_strings(range(ncas), nelec)
    occ = [[k for k in range(ncas) if (int(s) >> k) & 1] for s in strings]
    return np.array(occ, dtype=int).reshape(len(strings), nelec)


def _string_overlaps(s_mo: np.ndarray, nfixed: int, occ: np.ndarray) -> np.ndarray:
    """det S[fixed + I, fixed + J] for all string pairs (I, J), one spin.

    ``s_mo`` holds the ``nfixed`` always-occupied orbitals first, then the active ones.
    """
    nstr, nel = occ.shape
    idx = np.concatenate([np.tile(np.arange(nfixed), (nstr, 1)), nfixed + occ], axis=1)
    if idx.shape[1] == 0:
        return np.ones((nstr, nstr))
    sub = s_mo[idx[:, None, :, None], idx[None, :, None, :]]  # (nstr, nstr, n, n)
    return np.linalg.det(sub)


def _active_determinant_overlaps(s_mo: np.ndarray, ncore: int, ncas: int,
                                 nelecas: tuple[int, int]) -> tuple[float, list[np.ndarray]]:
    """(core factor, [alpha, beta] string-overlap matrices) for MO overlap ``s_mo``."""
    nact = ncore + ncas
    s = s_mo[:nact, :nact]
    a = s[:ncore, :ncore]
    use_schur = ncore == 0 or np.linalg.svd(a, compute_uv=False).min() > _CORE_CONDITION_LIMIT
    if use_schur:
        core_factor = float(np.linalg.det(a)) ** 2 if ncore else 1.0
        s_eff = s[ncore:, ncore:]
        if ncore:
            s_eff = s_eff - s[ncore:, :ncore] @ np.linalg.solve(a, s[:ncore, ncore:])
        mats = [_string_overlaps(s_eff, 0, _string_occupations(ncas, n)) for n in nelecas]
    else:
        core_factor = 1.0
        mats = [_string_overlaps(s, ncore, _string_occupations(ncas, n)) for n in nelecas]
    return core_factor, mats


def casscf_overlap_matrix(bra: ActiveSpaceWavefunction, ket: ActiveSpaceWavefunction,
                          ao_overlap: np.ndarray | None = None) -> np.ndarray:
    """<Psi_I(bra)|Psi_J(ket)> for all state pairs, rows bra states, columns ket states.

    Parameters
    ----------
    bra, ket
        Wavefunctions at two geometries (same molecule, basis and active space).
    ao_overlap
        AO cross overlap <chi(R_bra)|chi(R_ket)>; computed when not given.

    Returns
    -------
    numpy.ndarray
        (bra.nstates, ket.nstates). The identity (up to signs) at the same geometry.
    """
    _check_compatible(bra, ket)
    if ao_overlap is None:
        ao_overlap = ao_cross_overlap(bra, ket)
    s_mo = bra.mo_coeff.T @ ao_overlap @ ket.mo_coeff
    core_factor, (d_alpha, d_beta) = _active_determinant_overlaps(
        s_mo, bra.ncore, bra.ncas, bra.nelecas)
    out = np.empty((bra.nstates, ket.nstates))
    for j, cj in enumerate(ket.ci):
        # transformed ket: sum_J D_a[I_a, J_a] c[J_a, J_b] D_b[I_b, J_b]
        t = d_alpha @ np.asarray(cj).reshape(d_alpha.shape[1], d_beta.shape[1]) @ d_beta.T
        for i, ci in enumerate(bra.ci):
            out[i, j] = core_factor * float(np.vdot(np.asarray(ci).ravel(), t.ravel()))
    return out


def _check_compatible(bra: ActiveSpaceWavefunction, ket: ActiveSpaceWavefunction) -> None:
    if not isinstance(bra, ActiveSpaceWavefunction) or not isinstance(ket, ActiveSpaceWavefunction):
        raise InputError("CASSCF overlaps need two evaluations from the CASSCF engine")
    if bra.symbols != ket.symbols or bra.basis != ket.basis:
        raise InputError("overlaps compare the same molecule in the same basis at two geometries")
    if (bra.ncore, bra.ncas, tuple(bra.nelecas)) != (ket.ncore, ket.ncas, tuple(ket.nelecas)):
        raise InputError(
            f"the active spaces differ (core {bra.ncore} vs {ket.ncore}, active orbitals "
            f"{bra.ncas} vs {ket.ncas}, electrons {bra.nelecas} vs {ket.nelecas}); overlaps "
            "need the same active space at both geometries"
        )
