"""Spin-orbit operators against outside values: fine structure and PySCF's X2C.

Fine structure through the same operator: for one hole in a closed p shell (halogen atoms
2P, p^5) or a closed pi shell (OH, SH X 2Pi, pi^3) outside closed shells, the frozen-orbital
Breit-Pauli splitting is the splitting of the spin-orbit operator's one-electron levels in the
open shell, with the mean field of the filled shell (Slater's rules for a single hole; common
practice). With h = zeta l for the shell, E(2P1/2) - E(2P3/2) = 3 zeta / 2 for p^5 and
E(2Pi1/2) - E(2Pi3/2) = -A for pi^3; a positive one-electron splitting means the inverted
order that the handbooks give. Single-determinant (ROHF) orbitals; one p electron outside
closed shells (B, Al, CH) is poorly described by one determinant (large 2s^2 -> 2p^2
correlation) and is not used here.
"""

from __future__ import annotations

import numpy as np
import pytest

from surfcross.analysis.spin_orbit import shell_levels
from surfcross.engine.pyscf_soc import spin_orbit_ao
from surfcross.units import HARTREE_IN_WAVENUMBER

pytest.importorskip("pyscf")

# Koseki, Schmidt and Gordon fitted the effective charges to reproduce spin-orbit constants
# of their calibration set to within about 10 % (recalled from memory); with the 6-31G*
# ROHF orbitals used here we allow 12 %. The mean-field operator is the full Breit-Pauli
# operator in the frozen-orbital limit; allowed 10 % for what one determinant misses.
EFFECTIVE_CHARGE_TOLERANCE = 0.12
MEAN_FIELD_TOLERANCE = 0.10


def _open_shell_splitting(atom: str, shell: list[int], operator: str,
                          basis: str = "6-31g*") -> float:
    """One-electron level splitting (cm^-1) of a one-hole doublet's open shell.

    The density is the closed-shell one with the hole filled (ROHF orbitals): the mean field
    a single hole sees. Returns mean(upper levels) - mean(lower levels): 3 zeta/2 for a p
    shell, the splitting a of a pi shell.
    """
    from pyscf import gto, scf

    mol = gto.M(atom=atom, spin=1, basis=basis, verbose=0)
    mf = scf.ROHF(mol).run(conv_tol=1e-10)
    filled = mf.mo_coeff[:, : (mol.nelectron + 1) // 2]
    density = 2.0 * filled @ filled.T
    c = mf.mo_coeff[:, shell]
    a = np.einsum("pm,kpq,qn->kmn", c, spin_orbit_ao(mol, operator, density), c)
    levels = shell_levels(a) * HARTREE_IN_WAVENUMBER
    lower = 2  # j = 1/2 (p shell) or Omega = 1/2 (pi shell): two levels
    return float(levels[lower:].mean() - levels[:lower].mean())


# NIST Atomic Spectra Database, ground-term levels (values recalled from memory):
# F 2P1/2 at 404.14 cm^-1 above 2P3/2; Cl 2P1/2 at 882.35 cm^-1.
# Huber and Herzberg, Constants of Diatomic Molecules (1979), X 2Pi_i spin-orbit constants
# (recalled from memory): OH A = -139.2 cm^-1 (r_e 0.9697 A), SH A = -377 cm^-1 (r_e 1.3409 A).
HALOGEN_CASES = [
    ("F 0 0 0", [2, 3, 4], 404.14, "effective-charge", EFFECTIVE_CHARGE_TOLERANCE),
    ("F 0 0 0", [2, 3, 4], 404.14, "mean-field", MEAN_FIELD_TOLERANCE),
    ("Cl 0 0 0", [6, 7, 8], 882.35, "mean-field", MEAN_FIELD_TOLERANCE),
]
RADICAL_CASES = [
    ("O 0 0 0; H 0 0 0.9697", [3, 4], -139.2, "effective-charge", EFFECTIVE_CHARGE_TOLERANCE),
    ("O 0 0 0; H 0 0 0.9697", [3, 4], -139.2, "mean-field", MEAN_FIELD_TOLERANCE),
    ("S 0 0 0; H 0 0 1.3409", [7, 8], -377.0, "mean-field", MEAN_FIELD_TOLERANCE),
]


@pytest.mark.pyscf
@pytest.mark.parametrize("atom, shell, reference_cm, operator, tolerance", HALOGEN_CASES)
def test_halogen_atom_fine_structure(atom, shell, reference_cm, operator, tolerance):
    splitting = _open_shell_splitting(atom, shell, operator)
    # p^5: E(2P1/2) - E(2P3/2) = 3 zeta / 2 = the one-electron level splitting; positive
    # means 2P3/2 lowest, as observed
    assert splitting > 0
    assert abs(splitting - reference_cm) < tolerance * reference_cm, splitting


@pytest.mark.pyscf
@pytest.mark.parametrize("atom, shell, reference_cm, operator, tolerance", RADICAL_CASES)
def test_hydroxyl_and_mercapto_radical_spin_orbit_constant(atom, shell, reference_cm, operator,
                                                           tolerance):
    a_constant = -_open_shell_splitting(atom, shell, operator)  # pi^3: A = -(pi splitting)
    assert a_constant < 0  # inverted 2Pi, as observed
    assert abs(a_constant - reference_cm) < tolerance * abs(reference_cm), a_constant


@pytest.mark.pyscf
def test_two_electron_screening_order():
    """Bare nuclear charges overestimate (no two-electron screening); the mean field and the
    effective charges screen (common practice: the screening is about a third for first-row
    atoms)."""
    bare = _open_shell_splitting("F 0 0 0", [2, 3, 4], "bare-nuclear")
    mean = _open_shell_splitting("F 0 0 0", [2, 3, 4], "mean-field")
    effective = _open_shell_splitting("F 0 0 0", [2, 3, 4], "effective-charge")
    assert bare > 1.25 * mean and bare > 1.25 * effective


# ------------------------------------------------------------------------- X2C
def _x2c_spin_part(mol) -> np.ndarray:
    """a_k (h_k = i a_k) of the spin-dependent part of PySCF's X2C one-electron Hamiltonian
    in the real-spherical spin-orbital basis: h = h0 + sum_k h_k s_k (s = sigma/2)."""
    from pyscf import scf

    h = scf.GHF(mol).x2c().get_hcore()
    n = mol.nao
    aa, ab, ba, bb = h[:n, :n], h[:n, n:], h[n:, :n], h[n:, n:]
    hk = np.array([ab + ba, 1j * (ab - ba), aa - bb])
    # purely imaginary up to the noise of X2C's basis projection
    assert np.abs(hk.real).max() < 1e-3 * np.abs(hk).max()
    return (-1j * hk).real


def _bare_vs_x2c(atom: str, shell: list[int]) -> tuple[float, float, float]:
    from pyscf import gto, scf

    mol = gto.M(atom=atom, basis="cc-pvdz", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-10)
    c = mf.mo_coeff
    ours = np.einsum("pm,kpq,qn->kmn", c, spin_orbit_ao(mol, "bare-nuclear"), c)
    x2c = np.einsum("pm,kpq,qn->kmn", c, _x2c_spin_part(mol), c)
    s_ours, s_x2c = (np.ptp(shell_levels(m[:, shell][:, :, shell])) for m in (ours, x2c))
    occ = mol.nelectron // 2
    block = np.s_[:, :occ + 6, :occ + 6]  # occupied and low virtual orbitals
    deviation = np.abs(ours[block] - x2c[block]).max() / np.abs(x2c[block]).max()
    return float(s_ours), float(s_x2c), float(deviation)


@pytest.mark.parametrize("atom, shell", [("Ar 0 0 0", [2, 3, 4]), ("Ar 0 0 0", [6, 7, 8]),
                                         ("H 0 0 0; Cl 0 0 1.2746", [7, 8]),
                                         ("F 0 0 0; H 0 0 0.917", [3, 4])])
@pytest.mark.pyscf
def test_one_electron_operator_against_x2c(atom, shell):
    """First-order Breit-Pauli with bare charges vs the spin-orbit part of PySCF's X2C
    one-electron Hamiltonian (a general-purpose reference library), in the same RHF orbitals.
    They agree to order (alpha Z)^2 (1.7 % for Cl/Ar): we allow 3 %."""
    s_ours, s_x2c, deviation = _bare_vs_x2c(atom, shell)
    assert abs(s_ours - s_x2c) < 0.03 * s_x2c
    assert deviation < 0.03


@pytest.mark.pyscf
def test_breit_pauli_drifts_from_x2c_for_heavier_atoms():
    """The first-order operator loses accuracy down the periodic table (the documented
    heavy-element caution): for the valence p shell, Kr deviates from X2C more than Ar."""
    _, _, dev_ar = _bare_vs_x2c("Ar 0 0 0", [6, 7, 8])
    s_kr, x_kr, dev_kr = _bare_vs_x2c("Kr 0 0 0", [15, 16, 17])
    assert abs(s_kr - x_kr) / x_kr > 0.03
    assert dev_kr > 2 * dev_ar
