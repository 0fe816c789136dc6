"""Excited-state overlaps between geometries (surfcross.tracking.overlap).

Outside references used here:
* explicit Slater determinants: <Phi|Phi'> = det of the MO-overlap submatrix of the occupied
  spin orbitals (Loewdin's rule for non-orthogonal determinants; textbook, common practice),
  summed over every singly excited determinant in a brute-force loop written in this file;
* PySCF's own full-CI machinery (pyscf.ci to_fcivec, pyscf.fci.addons.overlap, and the FCI
  Hamiltonian) as the general-purpose reference library for determinant algebra and for the
  spin convention of PySCF's TDA amplitudes.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from pyscf import ao2mo, fci, gto, scf, tdscf
from pyscf.ci import cisd, ucisd

from surfcross.engine.wavefunction import ManifoldWavefunction, ReferenceWavefunction
from surfcross.tracking.overlap import (determinant_overlap, first_order_overlaps,
                                        manifold_overlaps, mo_overlap, spin_block)

pytestmark = pytest.mark.pyscf

WATER = "O 0 0 {z}; H 0 {y} -0.47; H 0 -0.76 -0.47"


def water(z=0.1, y=0.76, spin=0, symmetry=False):
    return gto.M(atom=WATER.format(z=z, y=y), basis="sto-3g", spin=spin, verbose=0,
                 symmetry=symmetry)


def restricted_states(mol, nstates=4, singlet=True, include_reference=True):
    mf = scf.RHF(mol).run(conv_tol=1e-11)
    td = tdscf.TDA(mf)
    td.nstates, td.singlet, td.conv_tol = nstates, singlet, 1e-9
    td.kernel()
    ref = ReferenceWavefunction(mf.mo_coeff, mf.mo_occ, True)
    mwf = ManifoldWavefunction(reference=ref, includes_reference=include_reference,
                               coupling="singlet" if singlet else "triplet",
                               amplitudes=tuple(x for x, _ in td.xy))
    return mf, td, mwf


def unrestricted_states(mol, nstates=4):
    mf = scf.UHF(mol).run(conv_tol=1e-11)
    td = tdscf.TDA(mf)
    td.nstates, td.conv_tol = nstates, 1e-9
    td.kernel()
    ref = ReferenceWavefunction(np.asarray(mf.mo_coeff), np.asarray(mf.mo_occ), False)
    mwf = ManifoldWavefunction(reference=ref, includes_reference=True, coupling="unrestricted",
                               amplitudes=tuple((x[0], x[1]) for x, _ in td.xy))
    return mf, td, mwf


def cross_ao(mol_a, mol_b):
    return gto.intor_cross("int1e_ovlp", mol_a, mol_b)


# ---------------------------------------------------------------------------- brute force
def _replaced(nocc, i, a):
    occ = list(range(nocc))
    if i is not None:
        occ[i] = a  # in-place replacement: orbital a takes the slot of i
    return occ


def brute_force(s_spin, nocc, amps_bra, amps_ket, with_reference):
    """Sum over explicit determinants; s_spin = (S_alpha, S_beta), amps = [(Xa, Xb)]."""
    def expansion(amps):
        out = []
        if with_reference:
            out.append({(None, None, None): 1.0})
        for xa, xb in amps:
            terms = {}
            for spin, x in ((0, xa), (1, xb)):
                for i, a in itertools.product(range(x.shape[0]), range(x.shape[1])):
                    terms[(spin, i, nocc[spin] + a)] = x[i, a]
            out.append(terms)
        return out

    def det_pair(key_b, key_k):
        value = 1.0
        for spin in (0, 1):
            ib = (key_b[1], key_b[2]) if key_b[0] == spin else (None, None)
            ik = (key_k[1], key_k[2]) if key_k[0] == spin else (None, None)
            rows, cols = _replaced(nocc[spin], *ib), _replaced(nocc[spin], *ik)
            value *= np.linalg.det(s_spin[spin][np.ix_(rows, cols)])
        return value

    bra, ket = expansion(amps_bra), expansion(amps_ket)
    out = np.zeros((len(bra), len(ket)))
    for m, tb in enumerate(bra):
        for n, tk in enumerate(ket):
            out[m, n] = sum(cb * ck * det_pair(kb, kk)
                            for kb, cb in tb.items() for kk, ck in tk.items())
    return out


def test_identity_at_same_geometry_singlet_triplet_unrestricted():
    # <I|J> = delta_IJ for orthonormal CIS states (common practice; PySCF TDA eigenvectors)
    mol = water()
    s_ao = mol.intor("int1e_ovlp")
    for mwf in (restricted_states(mol)[2], restricted_states(mol, singlet=False,
                                                            include_reference=False)[2],
                unrestricted_states(mol)[2]):
        o = manifold_overlaps(mwf, mwf, s_ao)
        np.testing.assert_allclose(np.abs(o), np.eye(len(o)), atol=1e-8)


def test_singlet_matches_explicit_determinants_for_displaced_lih():
    # brute-force determinant expansion defined above (Loewdin's rule)
    mol_a = gto.M(atom="Li 0 0 0; H 0 0 1.60", basis="6-31g", verbose=0)
    mol_b = gto.M(atom="Li 0 0 0.02; H 0.05 0 1.72", basis="6-31g", verbose=0)
    _, _, wa = restricted_states(mol_a, 4)
    _, _, wb = restricted_states(mol_b, 4)
    s_ao = cross_ao(mol_a, mol_b)
    smo = mo_overlap(wa.reference.mo_coeff, s_ao, wb.reference.mo_coeff)
    amps = lambda w, sgn: [(x, sgn * x) for x in w.amplitudes]  # noqa: E731
    ref = brute_force((smo, smo), (2, 2), amps(wa, 1), amps(wb, 1), True)
    got = manifold_overlaps(wa, wb, s_ao)
    np.testing.assert_allclose(got, ref, atol=1e-12)
    assert 0.5 < abs(got[1, 1]) < 0.999  # a genuinely displaced geometry, not the identity


def test_triplet_and_unrestricted_match_explicit_determinants():
    mol_a = water(0.1, 0.76)
    mol_b = water(0.16, 0.70)
    s_ao = cross_ao(mol_a, mol_b)
    _, _, ta = restricted_states(mol_a, 3, singlet=False, include_reference=False)
    _, _, tb = restricted_states(mol_b, 3, singlet=False, include_reference=False)
    smo = mo_overlap(ta.reference.mo_coeff, s_ao, tb.reference.mo_coeff)
    ref = brute_force((smo, smo), (5, 5), [(x, -x) for x in ta.amplitudes],
                      [(x, -x) for x in tb.amplitudes], False)
    np.testing.assert_allclose(manifold_overlaps(ta, tb, s_ao), ref, atol=1e-12)
    # open shell: H2O+ doublet, UHF + TDA
    ion_a, ion_b = [gto.M(atom=m.atom, basis="sto-3g", charge=1, spin=1, verbose=0)
                    for m in (mol_a, mol_b)]
    _, _, ua = unrestricted_states(ion_a, 3)
    _, _, ub = unrestricted_states(ion_b, 3)
    s_spin = [mo_overlap(ua.reference.mo_coeff[k], s_ao, ub.reference.mo_coeff[k]) for k in (0, 1)]
    ref = brute_force(s_spin, (5, 4), list(ua.amplitudes), list(ub.amplitudes), True)
    np.testing.assert_allclose(manifold_overlaps(ua, ub, s_ao), ref, atol=1e-12)


def _fci_overlap_and_energy(mol, mf, vec, s_mo, ket_vec):
    norb = mf.mo_coeff.shape[-1]
    nelec = mol.nelec
    h1 = mf.mo_coeff.T @ mf.get_hcore() @ mf.mo_coeff
    eri = ao2mo.restore(1, ao2mo.kernel(mol, mf.mo_coeff), norb)
    energy = fci.direct_spin1.energy(h1, eri, vec, norb, nelec) + mol.energy_nuc()
    return fci.addons.overlap(vec, ket_vec, norb, nelec, s=s_mo), energy


def test_pyscf_fci_reference_for_singlets_and_triplets():
    # PySCF FCI: the CIS vector with beta = +alpha (singlet) or -alpha (triplet) must have the
    # TDA energy (checks PySCF's amplitude convention), and fci.addons.overlap is the reference
    # for the cross-geometry overlap.
    mol_a, mol_b = water(0.1, 0.76), water(0.13, 0.72)
    s_ao = cross_ao(mol_a, mol_b)
    for singlet in (True, False):
        mf_a, td_a, wa = restricted_states(mol_a, 3, singlet, include_reference=False)
        mf_b, td_b, wb = restricted_states(mol_b, 3, singlet, include_reference=False)
        norb, nocc = mf_a.mo_coeff.shape[1], 5
        sign = 1.0 if singlet else -1.0

        def vec(x):
            c2 = np.zeros((nocc, nocc, norb - nocc, norb - nocc))
            c2z = (c2, c2, c2)
            v = ucisd.amplitudes_to_cisdvec(0.0, (x, sign * x), c2z)
            return ucisd.to_fcivec(v, norb, (nocc, nocc))

        smo = mo_overlap(mf_a.mo_coeff, s_ao, mf_b.mo_coeff)
        got = manifold_overlaps(wa, wb, s_ao)
        for i, j in itertools.product(range(3), range(3)):
            o, e = _fci_overlap_and_energy(mol_a, mf_a, vec(wa.amplitudes[i]), smo,
                                           vec(wb.amplitudes[j]))
            assert e == pytest.approx(td_a.e_tot[i], abs=1e-8)
            assert got[i, j] == pytest.approx(o, abs=1e-10)


def test_singlet_with_reference_matches_pyscf_cisd_to_fci():
    # pyscf.ci.cisd.to_fcivec builds the spin-adapted singlet; S0 row/column included
    mol_a, mol_b = water(0.1, 0.76), water(0.05, 0.80)
    mf_a, _, wa = restricted_states(mol_a, 3)
    mf_b, _, wb = restricted_states(mol_b, 3)
    norb, nocc = 7, 5
    zeros2 = np.zeros((nocc, nocc, norb - nocc, norb - nocc))

    def vec(c0, x):
        return cisd.to_fcivec(cisd.amplitudes_to_cisdvec(c0, x, zeros2), norb, 10)

    bra = [vec(1.0, 0 * wa.amplitudes[0])] + [vec(0.0, x) for x in wa.amplitudes]
    ket = [vec(1.0, 0 * wb.amplitudes[0])] + [vec(0.0, x) for x in wb.amplitudes]
    smo = mo_overlap(mf_a.mo_coeff, cross_ao(mol_a, mol_b), mf_b.mo_coeff)
    ref = np.array([[fci.addons.overlap(b, k, norb, (5, 5), s=smo) for k in ket] for b in bra])
    np.testing.assert_allclose(manifold_overlaps(wa, wb, cross_ao(mol_a, mol_b)), ref, atol=1e-10)


def test_unrestricted_equals_restricted_for_closed_shell():
    # the same closed-shell molecule treated by RHF/TDA and UHF/TDA: identical physics
    # (UHF of closed-shell water converges to the RHF solution; PySCF reference library)
    mol_a, mol_b = water(0.1, 0.76), water(0.14, 0.73)
    s_ao = cross_ao(mol_a, mol_b)
    _, td_a, ra = restricted_states(mol_a, 2)
    _, td_b, rb = restricted_states(mol_b, 2)
    _, tdu_a, ua = unrestricted_states(mol_a, 6)
    _, tdu_b, ub = unrestricted_states(mol_b, 6)
    o_r = manifold_overlaps(ra, rb, s_ao)
    o_u = manifold_overlaps(ua, ub, s_ao)
    # pick the UHF roots that are the RHF singlets (same energies, PySCF)
    pick_a = [0] + [1 + int(np.argmin(abs(tdu_a.e - e))) for e in td_a.e]
    pick_b = [0] + [1 + int(np.argmin(abs(tdu_b.e - e))) for e in td_b.e]
    # tolerance: Davidson eigenvectors converged to conv_tol = 1e-9 in energy (~1e-5 in vector)
    np.testing.assert_allclose(np.abs(o_u[np.ix_(pick_a, pick_b)]), np.abs(o_r), atol=1e-5)
    assert abs(o_r[1, 2]) > 0.1  # a real mixing element is compared, not only zeros


def test_spin_block_survives_orthogonal_references():
    # an occupied and a virtual orbital exchanged between the two sides: det A = 0 exactly,
    # yet excited-determinant overlaps stay finite; reference: explicit determinants
    rng = np.random.default_rng(7)

    def block_rotation():
        out = np.zeros((5, 5))
        out[:2, :2] = np.linalg.qr(rng.normal(size=(2, 2)))[0]
        out[2:, 2:] = np.linalg.qr(rng.normal(size=(3, 3)))[0]
        return out

    swap = np.eye(5)[:, [0, 3, 2, 1, 4]]  # ket occupied orbital 1 = bra virtual orbital 3
    s_mo = block_rotation().T @ swap @ block_rotation()
    xb, xk = [rng.normal(size=(2, 3))], [rng.normal(size=(2, 3))]
    block = spin_block(s_mo, 2, xb, xk)
    empty = np.zeros((0, 5))
    ref = brute_force((s_mo, np.eye(5)), (2, 0), [(xb[0], empty)], [(xk[0], empty)], True)
    assert abs(ref[0, 0]) < 1e-12 and abs(ref[1, 1]) > 0.1  # orthogonal references
    np.testing.assert_allclose([[block.d0, block.v[0]], [block.u[0], block.w[0, 0]]], ref,
                               atol=1e-12)


def test_first_order_close_to_exact_for_small_steps():
    # cheap variant: agreement to ~1e-3 for a 0.015 angstrom step (our own check
    # against the exact formula, which is itself checked against PySCF FCI above)
    mol_a, mol_b = water(0.1, 0.76), water(0.115, 0.775)
    s_ao = cross_ao(mol_a, mol_b)
    _, _, wa = restricted_states(mol_a, 4, include_reference=False)
    _, _, wb = restricted_states(mol_b, 4, include_reference=False)
    exact = manifold_overlaps(wa, wb, s_ao)
    approx = first_order_overlaps(wa, wb, s_ao)
    assert np.max(np.abs(exact - approx)) < 3e-3  # measured 1.5e-3 here


def test_high_spin_determinant_overlap():
    # single determinants: Loewdin's rule, checked against pyscf.fci.addons.overlap of two
    # one-determinant FCI vectors
    mol_a, mol_b = water(0.1, 0.76, spin=2), water(0.12, 0.74, spin=2)
    mf_a = scf.UHF(mol_a).run(conv_tol=1e-11)
    mf_b = scf.UHF(mol_b).run(conv_tol=1e-11)
    ra = ReferenceWavefunction(np.asarray(mf_a.mo_coeff), np.asarray(mf_a.mo_occ), False)
    rb = ReferenceWavefunction(np.asarray(mf_b.mo_coeff), np.asarray(mf_b.mo_occ), False)
    s_ao = cross_ao(mol_a, mol_b)
    s = [mo_overlap(mf_a.mo_coeff[k], s_ao, mf_b.mo_coeff[k]) for k in (0, 1)]
    na, nb = mol_a.nelec
    hf_vec = np.zeros((fci.cistring.num_strings(7, na), fci.cistring.num_strings(7, nb)))
    hf_vec[0, 0] = 1.0
    ref = fci.addons.overlap(hf_vec, hf_vec, 7, (na, nb), s=s)
    got = determinant_overlap(ra, rb, s_ao)
    assert got == pytest.approx(ref, abs=1e-12)
    assert 0.9 < abs(got) < 1.0
    mwf = lambda r: ManifoldWavefunction(reference=r, includes_reference=True,  # noqa: E731
                                         coupling="unrestricted")
    assert manifold_overlaps(mwf(ra), mwf(rb), s_ao)[0, 0] == pytest.approx(got, abs=1e-12)
