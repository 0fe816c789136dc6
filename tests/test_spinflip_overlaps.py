"""Overlaps of spin-flip TDA states between geometries.

Outside references: determinants of the full spin-orbital overlap matrix, built configuration
by configuration from the definition of a spin-flip-down configuration (a+_{a beta} a_{i alpha}
acting on the high-spin determinant; the overlap of two Slater determinants is the determinant
of their orbital overlaps, textbook second quantization), with triplet (M_S = 1) UHF orbitals
from PySCF at two geometries and random orthonormal amplitudes; numpy's determinant of explicit
minors for the cofactor and bordered-determinant pieces. With the optional pyscf-forge extra,
also the engine's own overlaps: identity at equal geometries and the same blocks as the
formula.
"""

import numpy as np
import pytest

from surfcross.engine.spinflip_overlap import (bordered_determinants, cofactors,
                                               spin_flip_overlaps)

pyscf = pytest.importorskip("pyscf")

WATER = "O 0 0 0; H 0 -0.757 0.587; H 0 0.757 0.587"
WATER_MOVED = "O 0.01 0.02 -0.01; H 0 -0.80 0.60; H 0.03 0.74 0.55"

def _triplet_uhf(atom: str):
    from pyscf import gto, scf

    mol = gto.M(atom=atom, basis="sto-3g", spin=2, verbose=0)
    mf = scf.UHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    return mol, mf

def _random_roots(n: int, nocc_a: int, nvir_b: int, seed: int) -> np.ndarray:
    q, _ = np.linalg.qr(np.random.default_rng(seed).standard_normal((nocc_a * nvir_b, n)))
    return q.T.reshape(n, nocc_a, nvir_b)

def _brute_force(mf_bra, x_bra, mf_ket, x_ket, s_ao) -> np.ndarray:
    """<Psi_I|Psi'_J> from N x N spin-orbital determinants, one configuration pair at a time."""
    def configurations(mf):
        ca, cb = mf.mo_coeff
        occ_a = np.flatnonzero(mf.mo_occ[0] > 0)
        occ_b = np.flatnonzero(mf.mo_occ[1] > 0)
        vir_b = np.flatnonzero(mf.mo_occ[1] == 0)
        out = {}
        for p, i in enumerate(occ_a):
            for q, a in enumerate(vir_b):
                # a+_a a_i |alpha_1..alpha_n beta_1..beta_m>: a_i gives (-1)^p; the created
                # beta orbital goes in front of the beta string after the remaining alphas
                # (the sign of that move is equal at both geometries and left out)
                alpha = [ca[:, k] for k in occ_a if k != i]
                beta = [cb[:, a]] + [cb[:, k] for k in occ_b]
                out[(p, q)] = ((-1) ** p, alpha, beta)
        return out

    def det_overlap(bra, ket):
        sb, ab, bb = bra
        sk, ak, bk = ket
        na, nb = len(ab), len(bb)
        m = np.zeros((na + nb, na + nb))  # alpha-beta blocks vanish (spin orthogonality)
        m[:na, :na] = np.array(ab) @ s_ao @ np.array(ak).T
        m[na:, na:] = np.array(bb) @ s_ao @ np.array(bk).T
        return sb * sk * np.linalg.det(m)

    cb_, ck_ = configurations(mf_bra), configurations(mf_ket)
    pair = {(u, v): det_overlap(cb_[u], ck_[v]) for u in cb_ for v in ck_}
    out = np.zeros((len(x_bra), len(x_ket)))
    for (u, v), d in pair.items():
        out += d * np.outer(x_bra[:, u[0], u[1]], x_ket[:, v[0], v[1]])
    return out

@pytest.mark.pyscf
def test_formula_matches_brute_force_determinants_between_geometries():
    from pyscf import gto

    mol_a, mf_a = _triplet_uhf(WATER)
    mol_b, mf_b = _triplet_uhf(WATER_MOVED)
    na = int(mf_a.mo_occ[0].sum())
    nvb = int((mf_a.mo_occ[1] == 0).sum())
    xa, xb = _random_roots(5, na, nvb, 1), _random_roots(4, na, nvb, 2)
    s_ao = gto.intor_cross("int1e_ovlp", mol_a, mol_b)
    got = spin_flip_overlaps(mf_a.mo_coeff, mf_a.mo_occ, xa, mf_b.mo_coeff, mf_b.mo_occ, xb, s_ao)
    ref = _brute_force(mf_a, xa, mf_b, xb, s_ao)
    assert np.abs(ref).max() > 0.1  # a real test: the states do overlap
    np.testing.assert_allclose(got, ref, atol=1e-12)
    # equal geometries: orthonormal roots give the identity
    s_aa = mol_a.intor("int1e_ovlp")
    same = spin_flip_overlaps(mf_a.mo_coeff, mf_a.mo_occ, xa, mf_a.mo_coeff, mf_a.mo_occ, xa, s_aa)
    np.testing.assert_allclose(same, np.eye(5), atol=1e-10)

def _minor(m, i, j):
    return np.delete(np.delete(m, i, axis=0), j, axis=1)

@pytest.mark.parametrize("rank_drop", [0, 1, 2])
def test_cofactors_and_bordered_determinants_without_division(rank_drop):
    # numpy determinants of explicit minors; singular matrices (rank n-1, n-2) included, where
    # a formula dividing by det(A) would fail
    rng = np.random.default_rng(3 + rank_drop)
    n, v = 4, 3
    s = rng.standard_normal((n + v, n + v))
    u, w, vt = np.linalg.svd(s[:n, :n])
    w[n - rank_drop:] = 0.0
    s[:n, :n] = (u * w) @ vt
    a = s[:n, :n]
    ref = np.array([[(-1) ** (i + j) * np.linalg.det(_minor(a, i, j)) for j in range(n)]
                    for i in range(n)])
    np.testing.assert_allclose(cofactors(a), ref, atol=1e-12)
    bordered = np.array([[np.linalg.det(np.block([[s[n + p, n + q], s[n + p, :n]],
                                                   [s[:n, n + q][:, None], a]]))
                          for q in range(v)] for p in range(v)])
    np.testing.assert_allclose(bordered_determinants(s, n), bordered, atol=1e-12)


@pytest.mark.pyscf
def test_engine_overlaps_are_the_formula_blocks_and_identity_at_equal_geometries():
    pytest.importorskip("pyscf.sftda", reason="needs the optional 'spinflip' extra (pyscf-forge)")
    from surfcross.engine import MethodSpec, make_engine
    from surfcross.engine.pyscf_overlap import cross_ao_overlap
    from surfcross.geometry import Geometry

    def geometry(atom):
        symbols = [a.split()[0] for a in atom.split(";")]
        xyz = np.array([[float(c) for c in a.split()[1:]] for a in atom.split(";")])
        return Geometry.from_angstrom(symbols, xyz)

    with make_engine(MethodSpec(method="sf-tda", basis="sto-3g", roots=1)) as engine:
        first = engine.states(geometry(WATER))
        second = engine.states(geometry(WATER_MOVED))
        same = engine.overlaps(first, first)
        moved = engine.overlaps(first, second)
    wa, wb = first.wavefunction, second.wavefunction
    full = spin_flip_overlaps(wa.mo_coeff, wa.mo_occ, wa.amplitudes, wb.mo_coeff, wb.mo_occ,
                              wb.amplitudes, cross_ao_overlap(wa, wb))
    for m in ("S", "T"):
        assert same[m].shape == (len(first.manifold(m)),) * 2
        np.testing.assert_allclose(same[m], np.eye(len(first.manifold(m))), atol=1e-8)
        np.testing.assert_allclose(moved[m], full[np.ix_(wa.roots[m], wb.roots[m])], atol=1e-12)
    # the moved geometry is close: S0 continues S0 clearly
    assert abs(moved["S"][0, 0]) > 0.9
