"""<S^2> of CIS-type states built on an unrestricted determinant.

For Psi = sum_ia Xa_ia |i->a (alpha)> + sum_jb Xb_jb |j->b (beta)> (sum Xa^2 + Xb^2 = 1):

    <S^2> = Sz(Sz+1) + N_beta - sum_pr Da_pr Mb_pr - sum_sq Db_sq Ma_sq
            - 2 sum_{ia,jb} Xa_ia Xb_jb S_ab S_ij

with S = Ca^T S_AO Cb the alpha/beta MO overlap, Mb = S[:, occ_b] S[:, occ_b]^T,
Ma = S[occ_a, :]^T S[occ_a, :], and the one-particle densities of the alpha (beta) excited part
Da = |Xa|^2 D0a - (Xa Xa^T)_oo + (Xa^T Xa)_vv (and likewise Db). It follows from
S_-S_+ = N_beta - sum S_pq S_rs E^a_pr E^b_sq, valid when the MOs span the AO space
(nmo = nao). For the reference alone it reduces to the familiar single-determinant formula.
"""

from __future__ import annotations

import numpy as np

__all__ = ["cis_spin_square"]


def _excited_density(x: np.ndarray, nocc: int, nmo: int) -> np.ndarray:
    d = np.zeros((nmo, nmo))
    d[np.arange(nocc), np.arange(nocc)] = (x ** 2).sum()
    d[:nocc, :nocc] -= x @ x.T
    d[nocc:, nocc:] += x.T @ x
    return d


def cis_spin_square(mo_coeff: np.ndarray, mo_occ: np.ndarray, s_ao: np.ndarray,
                    xa: np.ndarray, xb: np.ndarray) -> float:
    """<S^2> of a CIS-type state on an unrestricted reference.

    Parameters
    ----------
    mo_coeff, mo_occ
        (2, nao, nmo) and (2, nmo) alpha/beta orbitals and occupations.
    s_ao
        AO overlap matrix (nao, nao).
    xa, xb
        Amplitudes (nocc_a, nvir_a), (nocc_b, nvir_b), normalized to sum xa^2 + xb^2 = 1.
        Zero arrays give <S^2> of the reference determinant.
    """
    ca, cb = mo_coeff
    occa, occb = np.asarray(mo_occ[0]) > 0, np.asarray(mo_occ[1]) > 0
    na, nb = int(occa.sum()), int(occb.sum())
    nmo = ca.shape[1]
    s = ca.T @ s_ao @ cb
    mb = s[:, :nb] @ s[:, :nb].T
    ma = s[:na, :].T @ s[:na, :]
    sz = 0.5 * (na - nb)
    if (xa ** 2).sum() + (xb ** 2).sum() == 0.0:  # the reference determinant itself
        return float(sz * (sz + 1) + nb - np.einsum("p,pp->", occa.astype(float), mb))
    da = _excited_density(xa, na, nmo)
    db = _excited_density(xb, nb, nmo)
    cross = np.einsum("ia,ab,jb,ij->", xa, s[na:, nb:], xb, s[:na, :nb])
    value = (sz * (sz + 1) + nb - np.einsum("pr,pr->", da, mb)
             - np.einsum("sq,sq->", db, ma) - 2.0 * cross)
    return float(value)
