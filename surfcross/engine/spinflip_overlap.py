"""Exact overlaps of spin-flip TDA states computed at two geometries (pure numpy).

A spin-flip-down state on the high-spin (M_S = 1) reference determinant Phi is

    Psi = sum_ia X_ia a+_{a beta} a_{i alpha} Phi,     i alpha-occupied, a beta-virtual,

with sum X^2 = 1 (pyscf-forge's normalization). Its alpha string is Phi_alpha with orbital i
removed, its beta string is Phi_beta with orbital a added in front; the sign (-1)^(N_alpha - 1)
of moving a+ past the remaining alpha operators is the same at both geometries and cancels.
The overlap with a state at another geometry (primed, same numbers of electrons) therefore
factorizes into one alpha and one beta determinant:

    <Psi_I | Psi'_J> = sum_{ia,jb} X_ia X'_jb  C_ij  W_ab

* alpha: ``C_ij = <a_i Phi_alpha | a_j Phi'_alpha> = (-1)^(i+j) det(A without row i, column j)``,
  the cofactor matrix of ``A = S^alpha_oo`` (bra occupied x ket occupied MO overlap);
* beta: ``W_ab = <a+_a Phi_beta | a+_b Phi'_beta>``, the determinant of ``B = S^beta_oo``
  bordered by the row ``S^beta_vo[a, :]``, the column ``S^beta_ov[:, b]`` and the corner
  ``S^beta_vv[a, b]``: ``W = det(B) S_vv - S_vo adj(B) S_ov``.

Both are built without dividing by a determinant, from the singular values of A and B
(``A = U diag(s) V^T``: ``cof(A) = det(U) det(V) U diag(p) V^T`` with ``p_i = prod_{k != i} s_k``,
and ``adj(B) = cof(B)^T``), so they stay exact when the two reference determinants are nearly
orthogonal (an occupied and a virtual orbital exchanging character between the geometries).
At equal geometries C and W are identity blocks and the overlap matrix is X X'^T, the identity
for orthonormal roots. tests/test_spinflip_overlaps.py checks this against determinants of the
full spin-orbital overlap matrix built configuration by configuration.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["cofactors", "bordered_determinants", "spin_flip_overlaps"]


def _leave_one_out(s: np.ndarray) -> np.ndarray:
    """p_i = prod_{k != i} s_k without division (prefix and suffix products)."""
    n = len(s)
    prefix = np.concatenate(([1.0], np.cumprod(s)[:-1])) if n else s
    suffix = np.concatenate((np.cumprod(s[::-1])[:-1][::-1], [1.0])) if n else s
    return prefix * suffix


def cofactors(a: np.ndarray) -> np.ndarray:
    """Cofactor matrix ``C_ij = (-1)^(i+j) det(a without row i, column j)`` of a square matrix
    (``det(a) a^{-T}`` for a regular one), computed without division."""
    a = np.asarray(a, float)
    n = a.shape[0]
    if n == 0:
        return np.zeros((0, 0))
    u, s, vt = np.linalg.svd(a)
    sign = float(np.sign(np.linalg.det(u)) * np.sign(np.linalg.det(vt)))
    return sign * (u * _leave_one_out(s)) @ vt


def bordered_determinants(s_mo: np.ndarray, nocc: int) -> np.ndarray:
    """``W_ab = det([[S_vv[a, b], S_vo[a, :]], [S_ov[:, b], S_oo]])`` for all bra virtuals a and
    ket virtuals b; ``s_mo`` is the MO overlap with the occupied orbitals first."""
    s_mo = np.asarray(s_mo, float)
    o = nocc
    s_vv = s_mo[o:, o:]
    if o == 0:
        return s_vv.copy()
    s_oo, s_vo, s_ov = s_mo[:o, :o], s_mo[o:, :o], s_mo[:o, o:]
    u, s, vt = np.linalg.svd(s_oo)
    sign = float(np.sign(np.linalg.det(u)) * np.sign(np.linalg.det(vt)))
    det_b = sign * float(np.prod(s))
    adj_b = sign * (vt.T * _leave_one_out(s)) @ u.T  # adj(B) = cof(B)^T
    return det_b * s_vv - s_vo @ adj_b @ s_ov


def _ordered(c: np.ndarray, occ: np.ndarray) -> tuple[np.ndarray, int]:
    """Orbitals reordered occupied first, and the number of occupied ones."""
    occ_idx = np.flatnonzero(np.asarray(occ) > 0)
    vir_idx = np.flatnonzero(np.asarray(occ) <= 0)
    return np.asarray(c)[:, np.concatenate((occ_idx, vir_idx))], len(occ_idx)


def spin_flip_overlaps(bra_coeff: np.ndarray, bra_occ: np.ndarray, bra_x: np.ndarray,
                       ket_coeff: np.ndarray, ket_occ: np.ndarray, ket_x: np.ndarray,
                       s_ao: np.ndarray) -> np.ndarray:
    """Overlap matrix ``<Psi_I(bra) | Psi_J(ket)>`` of spin-flip-down states.

    Parameters
    ----------
    bra_coeff, ket_coeff
        (2, nao, nmo) alpha/beta MO coefficients of the high-spin references.
    bra_occ, ket_occ
        (2, nmo) occupations.
    bra_x, ket_x
        (nroots, nocc_alpha, nvir_beta) amplitudes, occupied alpha and virtual beta orbitals in
        the order of increasing MO index (pyscf-forge's layout).
    s_ao
        (nao_bra, nao_ket) atomic-orbital overlap between the two geometries.
    """
    ca, na = _ordered(bra_coeff[0], bra_occ[0])
    cb, nb = _ordered(bra_coeff[1], bra_occ[1])
    ka, na_k = _ordered(ket_coeff[0], ket_occ[0])
    kb, nb_k = _ordered(ket_coeff[1], ket_occ[1])
    if (na, nb) != (na_k, nb_k):
        raise InputError("the two geometries have different numbers of alpha/beta electrons")
    x = np.asarray(bra_x, float).reshape(-1, na, cb.shape[1] - nb)
    xp = np.asarray(ket_x, float).reshape(-1, na, kb.shape[1] - nb)
    c_alpha = cofactors(ca[:, :na].T @ s_ao @ ka[:, :na])
    w_beta = bordered_determinants(cb.T @ s_ao @ kb, nb)
    # O_IJ = sum X_ia C_ij X'_jb W_ab, contracted ket side first
    ket_side = np.einsum("ij,Jjb,ab->Jia", c_alpha, xp, w_beta, optimize=True)
    return np.einsum("Iia,Jia->IJ", x, ket_side, optimize=True)
