"""Reference-side PySCF response calculations that do not depend on a Davidson solve.

The tests compare the engine with PySCF run by hand. PySCF's iterative (Davidson) solvers can
leave a root unconverged on one CPU and not on another (the last bits of the BLAS kernel
decide), so for the small matrices of the test molecules the reference builds the response
matrix from PySCF's own matrix-vector product (``td.gen_vind()``: the operator its solver
uses) and diagonalizes it densely. The results are stored on the PySCF object as its solver
would store them (``e``, ``xy``, ``converged``), so ``td.e_tot`` and
``td.oscillator_strength()`` work as after ``td.kernel()``.
"""

from __future__ import annotations

import numpy as np

#: response dimensions up to this are diagonalized densely (more would be slow)
DENSE_LIMIT = 2000


def _blocks(td):
    occ = np.asarray(td._scf.mo_occ)
    if occ.ndim == 2:
        return [(int((o > 0).sum()), int((o == 0).sum())) for o in occ]
    return [(int((occ > 0).sum()), int((occ == 0).sum()))]


def _split(vec, blocks):
    out, start = [], 0
    for nocc, nvir in blocks:
        out.append(vec[start:start + nocc * nvir].reshape(nocc, nvir))
        start += nocc * nvir
    return out


def solve_dense(td, nstates):
    """Lowest ``nstates`` roots of a PySCF TDA or TDHF/TDDFT object by dense diagonalization.

    TDA: eigenvalues of the Hermitian matrix A. Full response: the positive real eigenvalues
    of the non-Hermitian [[A, B], [-B, -A]] (as PySCF's solver keeps them). Amplitudes are
    normalized as PySCF normalizes them (restricted: X.X - Y.Y = 1/2; unrestricted: 1).
    Returns ``td`` with ``e``, ``xy``, ``converged`` and ``nstates`` set.
    """
    vind, hdiag = td.gen_vind()
    size = np.asarray(hdiag).size
    assert size <= DENSE_LIMIT, f"response dimension {size} too large for a dense reference"
    blocks = _blocks(td)
    restricted = len(blocks) == 1
    dim = sum(o * v for o, v in blocks)
    full = size == 2 * dim
    matrix = np.asarray(vind(np.eye(size))).T  # column k = matrix applied to unit vector k
    if full:
        # Hermitian form (real orbitals, A - B positive definite): with S = (A - B)^(1/2),
        # S (A + B) S T = w^2 T, X + Y = w^(-1/2) S T and X - Y = w^(1/2) S^(-1) T
        a, b = matrix[:dim, :dim], matrix[:dim, dim:]
        apb, amb = 0.5 * ((a + b) + (a + b).T), 0.5 * ((a - b) + (a - b).T)
        lam, u = np.linalg.eigh(amb)
        assert lam.min() > 0, "A - B is not positive definite"
        root = (u * np.sqrt(lam)) @ u.T
        w2, t = np.linalg.eigh(root @ apb @ root)
        keep = np.flatnonzero(w2 > 1e-16)[:nstates]
        energies = np.sqrt(w2[keep])
        xpy = (root @ t[:, keep]) / np.sqrt(energies)
        xmy = np.linalg.solve(root, t[:, keep]) * np.sqrt(energies)
        vectors = np.vstack([0.5 * (xpy + xmy), 0.5 * (xpy - xmy)])
    else:
        w, v = np.linalg.eigh(0.5 * (matrix + matrix.T))
        energies, vectors = w[:nstates], v[:, :nstates]
    norm_target = 0.5 if restricted else 1.0
    xy = []
    for k in range(len(energies)):
        vec = vectors[:, k]
        x, y = vec[:dim], (vec[dim:] if full else np.zeros(dim))
        scale = np.sqrt(norm_target / (x @ x - y @ y))
        xs, ys = _split(x * scale, blocks), _split(y * scale, blocks)
        if restricted:
            xy.append((xs[0], ys[0] if full else 0))
        else:
            xy.append(((xs[0], xs[1]), (ys[0], ys[1]) if full else (0, 0)))
    td.nstates = nstates
    td.e = np.asarray(energies)
    td.xy = xy
    td.converged = np.ones(len(energies), bool)
    return td
