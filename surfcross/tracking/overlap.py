"""Overlaps of CIS-type excited-state wavefunctions computed at two different geometries.

Pure numpy; no PySCF. The engine builds the atomic-orbital cross overlap
``S_AO[mu, nu] = <chi_mu(R) | chi_nu(R')>`` and calls :func:`manifold_overlaps`.

What is computed
----------------
A CIS/TDA state is ``Psi = sum_sigma sum_ia X^sigma_ia a+_a a_i Phi_0`` (excitation a+_a a_i:
orbital a takes the slot of i in the determinant, no extra sign). Its overlap with a state at
another geometry needs determinants of the molecular-orbital overlap ``S = C^T S_AO C'``
(rows: bra orbitals at R, columns: ket orbitals at R'). Per spin, with ``A = S_oo``:

* ``<Phi_0 | Phi'_0> = det A``
* ``<Phi_i^a | Phi'_0>``, ``<Phi_0 | Phi'_j^b>`` and ``<Phi_i^a | Phi'_j^b>`` are determinants of
  ``A`` with one row and/or one column replaced.

Instead of ``A^{-1}`` we rotate the occupied orbitals of both sides with the singular-value
decomposition ``A = U diag(s) V^T``. The determinant ``A`` then becomes diagonal and every
replaced determinant is a sum of products of the singular values with one or two factors left
out. No division occurs, so the formulas stay exact when the two reference determinants are
(nearly) orthogonal, e.g. when an occupied and a virtual orbital exchanged character.
With ``p_i = prod_{k != i} s_k`` and ``p_ij = prod_{k != i, j} s_k`` (rotated quantities
marked ~; ``r = S_vo V``, ``c = U^T S_ov``):

* ``<Phi~_i^a | Phi~'_0> = r_ai p_i`` and ``<Phi~_0 | Phi~'_j^b> = c_jb p_j``
* ``<Phi~_i^a | Phi~'_j^b> = r_ai c_jb p_ij`` for i != j
* ``<Phi~_i^a | Phi~'_i^b> = S_ab p_i - sum_{l != i} r_al c_lb p_il``

Summing over amplitudes gives, per spin, the scalars/matrices ``d0``, ``u_I``, ``v_J`` and
``W_IJ`` of :class:`SpinBlock`. The many-electron overlap combines the two spins:

``O_IJ = W^a_IJ d0^b + W^b_IJ d0^a + u^a_I v^b_J + u^b_I v^a_J``  (unrestricted),

which for restricted amplitudes (PySCF normalization sum X^2 = 1/2, beta = +alpha for singlets,
-alpha for M_S = 0 triplets) reduces to ``O = 2 (d0 W +- u v)``.

Limits
------
* Exact for CIS and TDA states. TDHF/TDDFT have no many-electron wavefunction: the engine
  passes X + Y renormalized to the CIS norm and these overlaps are an approximation that
  serves state tracking, not a property to report.
* Both geometries must use the same basis set and the same number of electrons per spin.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.wavefunction import ManifoldWavefunction, ReferenceWavefunction
from ..errors import InputError

__all__ = [
    "SpinBlock",
    "mo_overlap",
    "spin_block",
    "manifold_overlaps",
    "first_order_overlaps",
    "determinant_overlap",
]

COUPLINGS = ("singlet", "triplet", "unrestricted")


@dataclass(frozen=True)
class SpinBlock:
    """Overlaps of one spin's determinants between two geometries, summed over amplitudes.

    Attributes
    ----------
    d0
        ``<Phi_0 | Phi'_0>`` of this spin.
    u
        (n_bra,) ``sum_ia X_ia <Phi_i^a | Phi'_0>``.
    v
        (n_ket,) ``sum_jb X'_jb <Phi_0 | Phi'_j^b>``.
    w
        (n_bra, n_ket) ``sum X_ia X'_jb <Phi_i^a | Phi'_j^b>``.
    """

    d0: float
    u: np.ndarray
    v: np.ndarray
    w: np.ndarray


def mo_overlap(c_bra: np.ndarray, s_ao: np.ndarray, c_ket: np.ndarray) -> np.ndarray:
    """MO overlap ``C_bra^T S_AO C_ket`` (rows bra MOs, columns ket MOs)."""
    return np.asarray(c_bra).T @ np.asarray(s_ao) @ np.asarray(c_ket)


def _leave_out_products(s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """p_i = prod_{k != i} s_k and p_ij = prod_{k != i, j} s_k (zero diagonal), no division."""
    n = len(s)
    p1 = np.empty(n)
    p2 = np.zeros((n, n))
    for i in range(n):
        rest = np.delete(s, i)
        p1[i] = np.prod(rest)
        if n < 2:
            continue
        # products of 'rest' leaving one more out, by prefix/suffix products
        prefix = np.concatenate(([1.0], np.cumprod(rest)[:-1]))
        suffix = np.concatenate((np.cumprod(rest[::-1])[:-1][::-1], [1.0]))
        p2[i, np.arange(n) != i] = prefix * suffix
    return p1, p2


def _stack(amplitudes, nocc: int, nvir_ket_or_bra: int) -> np.ndarray:
    if len(amplitudes) == 0:
        return np.zeros((0, nocc, nvir_ket_or_bra))
    x = np.asarray(amplitudes, dtype=float)
    if x.shape[1:] != (nocc, nvir_ket_or_bra):
        raise InputError(f"excitation amplitudes have shape {x.shape[1:]}, expected "
                         f"({nocc}, {nvir_ket_or_bra}) occupied x virtual orbitals")
    return x


def spin_block(s_mo: np.ndarray, nocc: int, x_bra, x_ket) -> SpinBlock:
    """Exact single-spin overlap pieces (see the module docstring).

    Parameters
    ----------
    s_mo
        (nmo_bra, nmo_ket) MO overlap of this spin; occupied orbitals first.
    nocc
        Occupied orbitals of this spin (the same on both sides).
    x_bra, x_ket
        Sequences of (nocc, nvir) amplitude matrices of this spin (may be empty).
    """
    s_mo = np.asarray(s_mo, dtype=float)
    o = nocc
    x = _stack(x_bra, o, s_mo.shape[0] - o)
    xp = _stack(x_ket, o, s_mo.shape[1] - o)
    if o == 0:  # no electrons of this spin: only the vacuum, overlap 1
        return SpinBlock(1.0, np.zeros(len(x)), np.zeros(len(xp)), np.zeros((len(x), len(xp))))
    U, s, Vt = np.linalg.svd(s_mo[:o, :o])
    sign = float(np.sign(np.linalg.det(U)) * np.sign(np.linalg.det(Vt)))
    r = s_mo[o:, :o] @ Vt.T  # bra virtual x rotated ket occupied
    c = U.T @ s_mo[:o, o:]  # rotated bra occupied x ket virtual
    svv = s_mo[o:, o:]
    xt = np.einsum("ki,Ika->Iia", U, x)  # U^T X per root
    xpt = np.einsum("kj,Jkb->Jjb", Vt.T, xp)  # V^T X' per root
    p1, p2 = _leave_out_products(s)
    g = np.einsum("Iia,ai->Ii", xt, r)  # sum_a X~_ia r_ai
    h = np.einsum("Jjb,jb->Jj", xpt, c)  # sum_b X~'_jb c_jb
    u = g @ p1
    v = h @ p1
    term_diag = np.einsum("Iia,ab,Jib,i->IJ", xt, svv, xpt, p1, optimize=True)
    xr = np.einsum("Iia,al->Iil", xt, r)  # (X~ r)_il
    xc = np.einsum("Jib,lb->Jil", xpt, c)  # (X~' c^T)_il
    term_arrow = np.einsum("Iil,Jil,il->IJ", xr, xc, p2, optimize=True)
    term_cross = g @ p2 @ h.T
    w = term_diag - term_arrow + term_cross
    d0 = float(np.prod(s))
    return SpinBlock(sign * d0, sign * u, sign * v, sign * w)


def determinant_overlap(bra: ReferenceWavefunction, ket: ReferenceWavefunction,
                        s_ao: np.ndarray) -> float:
    """Overlap of two single determinants (e.g. high-spin T1 references) at two geometries."""
    total = 1.0
    for (cb, ob), (ck, ok) in zip(_spin_orbitals(bra), _spin_orbitals(ket)):
        if len(ob) != len(ok):
            raise InputError("the two determinants have different numbers of electrons")
        if len(ob):
            total *= float(np.linalg.det(mo_overlap(cb[:, ob], s_ao, ck[:, ok])))
    return total


def _spin_orbitals(ref: ReferenceWavefunction):
    """[(C, occupied indices)] for alpha and beta (restricted: the same orbitals twice)."""
    if ref.restricted:
        occ = np.flatnonzero(np.asarray(ref.mo_occ) > 0)
        return [(np.asarray(ref.mo_coeff), occ)] * 2
    return [(np.asarray(ref.mo_coeff[k]), np.flatnonzero(np.asarray(ref.mo_occ[k]) > 0))
            for k in (0, 1)]


def _ordered(c: np.ndarray, occ_idx: np.ndarray) -> np.ndarray:
    """Orbitals reordered occupied first (PySCF amplitudes index occupied then virtual MOs)."""
    vir = np.setdiff1d(np.arange(c.shape[1]), occ_idx)
    return c[:, np.concatenate((occ_idx, vir))]


def _check_pair(bra: ManifoldWavefunction, ket: ManifoldWavefunction) -> None:
    if bra.coupling not in COUPLINGS or ket.coupling not in COUPLINGS:
        raise InputError(f"unknown amplitude coupling {bra.coupling!r}/{ket.coupling!r}")
    if bra.coupling != ket.coupling or bra.includes_reference != ket.includes_reference:
        raise InputError("cannot compare states of different kinds between the two geometries "
                         f"({bra.coupling} vs {ket.coupling})")


def _spin_amplitudes(mwf: ManifoldWavefunction) -> tuple[list, list]:
    """Per-spin amplitude lists (alpha, beta) in the CIS normalization of the manifold."""
    if mwf.coupling == "unrestricted":
        return [a[0] for a in mwf.amplitudes], [a[1] for a in mwf.amplitudes]
    beta = 1.0 if mwf.coupling == "singlet" else -1.0
    return list(mwf.amplitudes), [beta * np.asarray(a) for a in mwf.amplitudes]


def manifold_overlaps(bra: ManifoldWavefunction, ket: ManifoldWavefunction,
                      s_ao: np.ndarray) -> np.ndarray:
    """Exact overlap matrix ``<bra_I | ket_J>`` of one spin manifold.

    Rows follow the bra manifold's states (reference determinant first when
    ``includes_reference``), columns the ket's. Restricted singlet/triplet amplitudes use
    PySCF's normalization (sum X^2 = 1/2 per spin); unrestricted amplitudes are (Xa, Xb) with
    sum Xa^2 + Xb^2 = 1. A manifold without amplitudes and with its reference (high-spin T1)
    gives the 1 x 1 determinant overlap.
    """
    _check_pair(bra, ket)
    blocks = []
    xa_b, xb_b = _spin_amplitudes(bra)
    xa_k, xb_k = _spin_amplitudes(ket)
    spins = zip(_spin_orbitals(bra.reference), _spin_orbitals(ket.reference),
                (xa_b, xb_b), (xa_k, xb_k))
    for (cb, ob), (ck, ok), xb, xk in spins:
        if len(ob) != len(ok):
            raise InputError("the two geometries have different numbers of electrons")
        s_mo = mo_overlap(_ordered(cb, ob), s_ao, _ordered(ck, ok))
        blocks.append(spin_block(s_mo, len(ob), xb, xk))
    a, b = blocks
    w = a.w * b.d0 + b.w * a.d0 + np.outer(a.u, b.v) + np.outer(b.u, a.v)
    if not bra.includes_reference:
        return w
    n_bra, n_ket = w.shape
    out = np.empty((n_bra + 1, n_ket + 1))
    out[0, 0] = a.d0 * b.d0
    out[0, 1:] = a.v * b.d0 + b.v * a.d0
    out[1:, 0] = a.u * b.d0 + b.u * a.d0
    out[1:, 1:] = w
    return out


def first_order_overlaps(bra: ManifoldWavefunction, ket: ManifoldWavefunction,
                         s_ao: np.ndarray) -> np.ndarray:
    """Cheap approximation: ``O_IJ ~ D0 sum_spin sum X_ia X'_jb S_ij S_ab``.

    Keeps only occupied-occupied and virtual-virtual MO overlaps (first order in the orbital
    change), scaled by the overlap ``D0`` of the two reference determinants. Adequate for
    tracking with small steps; :func:`manifold_overlaps` is exact and rarely much dearer.
    The reference row/column, when present, holds ``D0`` and zero couplings to excited states.
    """
    _check_pair(bra, ket)
    spins = zip(_spin_orbitals(bra.reference), _spin_orbitals(ket.reference),
                _spin_amplitudes(bra), _spin_amplitudes(ket))
    total, d0 = 0.0, 1.0
    for (cb, ob), (ck, ok), xb, xk in spins:
        o = len(ob)
        s_mo = mo_overlap(_ordered(cb, ob), s_ao, _ordered(ck, ok))
        x = _stack(xb, o, s_mo.shape[0] - o)
        xp = _stack(xk, o, s_mo.shape[1] - o)
        total = total + np.einsum("Iia,ij,ab,Jjb->IJ", x, s_mo[:o, :o], s_mo[o:, o:], xp,
                                  optimize=True)
        d0 *= float(np.linalg.det(s_mo[:o, :o])) if o else 1.0
    total = d0 * np.asarray(total)
    if not bra.includes_reference:
        return total
    out = np.zeros((total.shape[0] + 1, total.shape[1] + 1))
    out[0, 0] = d0
    out[1:, 1:] = total
    return out
