"""Linear-response solves (CIS/TDA/TDHF/TDDFT) for the PySCF response engine.

Responsibilities: build the PySCF response object, run it with an optional guess, count the
Davidson iterations honestly (one per application of the response matrix to a block of trial
vectors), check convergence root by root, retry, and turn PySCF's (X, Y) into the amplitudes
stored for overlaps.

Amplitude convention (what :class:`ManifoldWavefunction` receives): for TDA/CIS the X
amplitudes as PySCF normalizes them (restricted: sum X^2 = 1/2 per spin block, unrestricted:
sum Xa^2 + Xb^2 = 1). For full response (TDHF/TDDFT) there is no many-electron wavefunction;
we store X + Y rescaled to the same norm (a common auxiliary CIS-like expansion).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..errors import InputError, ResponseNotConvergedError

__all__ = ["ResponseRoots", "make_response", "solve_response", "cis_like_amplitudes",
           "project_guess", "spread_guess", "EXTRA_ROOTS"]

logger = logging.getLogger(__name__)

#: roots computed beyond those asked (tracking needs room above the followed state)
EXTRA_ROOTS = 2
#: Davidson cycles of the first attempt, and of the retry
FIRST_MAX_CYCLE = 100
RETRY_MAX_CYCLE = 300
RETRY_LINDEP = 1e-14
#: relative size of the dense, fixed-seed admixture added to every fresh Davidson guess
GUESS_SPREAD = 1e-2
_SPREAD_SEED = 20240613


@dataclass
class ResponseRoots:
    """Outcome of one response solve (mutable only while being built).

    ``nreport`` roots are reported: all asked roots (converged, or we raise) plus the run of
    converged extra roots directly above them.
    """

    td: Any
    full: bool
    unrestricted: bool
    iterations: int
    nreport: int
    notes: list[str] = field(default_factory=list)
    #: full response only: lowest excitations whose energy is imaginary (dropped by PySCF's
    #: solver); the reported roots are the ones above them
    imaginary: int = 0

    @property
    def excitation_eh(self) -> np.ndarray:
        return np.asarray(self.td.e[: self.nreport], float)

    def amplitudes(self) -> tuple:
        return tuple(cis_like_amplitudes(self.td.xy[k], self.unrestricted, self.full)
                     for k in range(self.nreport))


def make_response(mf: Any, method: str, unrestricted: bool, singlet: bool, conv_tol: float) -> Any:
    """PySCF response object of the right class for ``method`` on the reference ``mf``."""
    from pyscf.tdscf import rhf, rks, uhf, uks

    full = method in ("tdhf", "tddft")
    dft = hasattr(mf, "xc")
    if unrestricted:
        cls = (uks.TDDFT if full else uks.TDA) if dft else (uhf.TDHF if full else uhf.TDA)
    else:
        cls = (rks.TDDFT if full else rks.TDA) if dft else (rhf.TDHF if full else rhf.TDA)
    td = cls(mf)
    # declare the attributes set on this instance (threshold below, counting wrapper in
    # _run_counted), so PySCF's attribute check does not write warnings to the terminal
    td._keys = set(cls._keys) | {"positive_eig_threshold", "gen_vind"}
    if not unrestricted:
        td.singlet = singlet
    td.conv_tol = conv_tol
    if not full:
        # TDA is Hermitian: keep zero and negative roots so that instabilities are reported
        # instead of silently dropped (PySCF drops roots below 1e-3 Eh by default).
        td.positive_eig_threshold = -1e3
    else:
        # full response: keep small real roots too; imaginary ones cannot be kept by the
        # solver and are counted separately (imaginary_roots)
        td.positive_eig_threshold = 1e-8
    return td


def _run_counted(td: Any, x0: np.ndarray | None) -> int:
    """``td.kernel(x0)`` counting the applications of the response matrix."""
    count = [0]
    original = td.gen_vind

    def counted(mf: Any = None):
        vind, hdiag = original(mf)

        def apply(x):
            count[0] += 1
            return vind(x)
        return apply, hdiag

    td.gen_vind = counted
    try:
        td.kernel(x0=x0)
    finally:
        del td.gen_vind
    return count[0]


def _converged_flags(td: Any, n: int) -> np.ndarray:
    flags = np.zeros(n, bool)
    conv = np.atleast_1d(np.asarray(td.converged, bool)) if td.converged is not None else []
    got = min(n, len(conv), len(td.e) if td.e is not None else 0)
    flags[:got] = conv[:got]
    return flags


def excitation_dimension(mf: Any) -> int:
    """Number of single excitations (occupied x virtual, per spin for unrestricted) of ``mf``."""
    occ = np.asarray(mf.mo_occ)
    if occ.ndim == 2:
        return int(sum((o > 0).sum() * (o == 0).sum() for o in occ))
    return int((occ > 0).sum() * (occ == 0).sum())


def solve_response(td: Any, needed: int, *, full: bool, unrestricted: bool,
                   x0: np.ndarray | None, what: str) -> ResponseRoots:
    """Solve for ``needed`` roots (+ EXTRA_ROOTS) and check every root's convergence.

    No more roots are asked than there are excitations (``excitation_dimension``); asking
    for more than that is an InputError, raised before any SCF by the tasks.

    Attempt 1: ``needed + EXTRA_ROOTS`` roots from ``x0`` (or PySCF's orbital-energy guess),
    with the symmetry-breaking admixture of :func:`spread_guess`.
    Attempt 2: restart from attempt 1's vectors with three times the Davidson cycles (a fresh
    subspace and a lower linear-dependence threshold cure most stalls).
    Attempt 3: two more roots from PySCF's default guess.
    When only the extra roots stall, attempt 2 is made once and its outcome accepted.
    Raises :class:`ResponseNotConvergedError` when any asked root is still unconverged.
    """
    dim = excitation_dimension(td._scf)
    if needed > dim:
        raise InputError(f"{what}: {needed} roots asked, but there are only {dim} excitations "
                         "in this basis; ask for fewer roots or use a larger basis")
    nstates = min(needed + EXTRA_ROOTS, dim)
    attempts = [(nstates, FIRST_MAX_CYCLE, x0), (nstates, RETRY_MAX_CYCLE, "restart"),
                (min(nstates + 2, dim), RETRY_MAX_CYCLE, None)]
    iterations = 0
    for k, (n, cycles, guess) in enumerate(attempts):
        if isinstance(guess, str):
            guess = np.asarray([xy_to_vector(xy, unrestricted, full) for xy in td.xy])
        else:
            if guess is not None and len(guess) < n:
                guess = None
            guess = spread_guess(td, n, guess)
        td.nstates, td.max_cycle = n, cycles
        if k > 0:
            # small problems exhaust the trial space; a lower linear-dependence threshold
            # lets the last few residual directions in
            td.lindep = RETRY_LINDEP
        iterations += _run_counted(td, guess)
        flags = _converged_flags(td, n)
        if flags[:nstates].all() or (flags[:needed].all() and k > 0):
            break
        if flags[:needed].all():
            logger.debug("%s: extra roots not converged; one restart", what)
            continue
        bad = [str(i + 1) for i in np.flatnonzero(~flags[:needed])]
        logger.debug("%s: roots %s not converged (attempt %d)", what, ", ".join(bad), k + 1)
    else:
        raise ResponseNotConvergedError(
            f"{what}: excited roots {', '.join(bad)} did not converge ({iterations} Davidson "
            "iterations, also with a restart and more roots). Near-degenerate or unstable "
            "states: try TDA instead of full response, a different number of roots, or a "
            "higher-level method")
    extra = 0
    while extra < EXTRA_ROOTS and needed + extra < len(flags) and flags[needed + extra]:
        extra += 1
    # the non-Hermitian solver drops imaginary roots: count them, for the labels
    imaginary = imaginary_roots(td, nstates) if full else 0
    result = ResponseRoots(td=td, full=full, unrestricted=unrestricted,
                           iterations=iterations, nreport=needed + extra, imaginary=imaginary)
    if extra < min(EXTRA_ROOTS, dim - imaginary - needed):
        result.notes.append(f"{what}: only {extra} of {EXTRA_ROOTS} extra roots above the asked "
                            "ones converged; state tracking has less room above the top root")
    return result


#: largest response dimension for which the full-response stability matrices are built densely
DENSE_LIMIT = 600
#: eigenvalues below -this (Eh) count as negative
NEGATIVE_TOL = 1e-6


def _response_blocks(td: Any) -> tuple[np.ndarray, np.ndarray]:
    """Dense A+B and A-B of a full-response object (from its own matrix-vector product:
    the upper half of vind([X, Y]) is A X + B Y)."""
    vind, hdiag = td.gen_vind()
    dim = np.asarray(hdiag).size // 2
    eye = np.eye(dim)
    blocks = []
    for sign in (1.0, -1.0):
        cols = [np.asarray(vind(np.hstack([eye[k:k + 100], sign * eye[k:k + 100]])))[:, :dim]
                for k in range(0, dim, 100)]
        m = np.vstack(cols)
        blocks.append(0.5 * (m + m.T))
    return blocks[0], blocks[1]


def imaginary_roots(td: Any, lowest: int) -> int:
    """How many of the lowest excitations of a full (TDHF/TDDFT) response are imaginary.

    Real orbitals: the excitation energies are the square roots of the eigenvalues of
    (A - B)(A + B); a negative eigenvalue is an imaginary excitation (the reference is
    unstable along it), which PySCF's non-Hermitian solver drops, so the next real root would
    take its label. Small problems are diagonalized densely; larger ones count the negative
    eigenvalues of A + B among its ``lowest`` ones (Davidson), which by Sylvester's law of
    inertia is the same number while A - B is positive definite, the usual case.
    """
    vind, hdiag = td.gen_vind()
    dim = np.asarray(hdiag).size // 2
    if dim <= DENSE_LIMIT:
        apb, amb = _response_blocks(td)
        w = np.linalg.eigvals(amb @ apb)
        return int(np.sum((w.real < -NEGATIVE_TOL) | (np.abs(w.imag) > NEGATIVE_TOL)))
    from pyscf import lib

    diag = np.asarray(hdiag)[:dim]

    def apply(x):
        x = np.atleast_2d(x)
        return np.asarray(vind(np.hstack([x, x])))[:, :dim]

    def precond(dx, e, *_):
        d = diag - e
        d[np.abs(d) < 1e-8] = 1e-8
        return dx / d

    k = min(max(lowest, 1), dim)
    guess = np.eye(dim)[np.argsort(diag)[:k]]
    e, _ = lib.davidson(lambda x: apply(x)[0], list(guess), precond, nroots=k, tol=1e-8)
    return int(np.sum(np.atleast_1d(e) < -NEGATIVE_TOL))


def spread_guess(td: Any, n: int, guess: np.ndarray | None) -> np.ndarray:
    """Guess vectors (PySCF's own when ``guess`` is None) plus a small dense admixture.

    Davidson residuals keep the spatial symmetry of the trial vectors. PySCF's default guess
    (the lowest orbital-energy differences) and the previous geometry's roots can all belong
    to a few irreducible representations; at a symmetric geometry the solver then never
    reaches states of the others, and higher roots are reported as the lowest ones (C2v water
    with stretched bonds: S1 0.045 Eh too high). A fixed-seed random component of relative
    size GUESS_SPREAD in every vector lets all symmetries in; results stay reproducible.
    """
    x = np.atleast_2d(np.asarray(td.get_init_guess(td._scf, n) if guess is None else guess,
                                 dtype=float))
    noise = np.random.default_rng(_SPREAD_SEED).standard_normal(x.shape)
    scale = GUESS_SPREAD * np.linalg.norm(x, axis=1) / np.linalg.norm(noise, axis=1)
    return x + noise * scale[:, None]


def xy_to_vector(xy: Sequence, unrestricted: bool, full: bool) -> np.ndarray:
    """PySCF's (X, Y) of one root as a trial vector in the solver's layout."""
    x, y = xy
    if unrestricted:
        parts = [np.ravel(x[0]), np.ravel(x[1])]
        if full:
            parts += [np.ravel(y[0]), np.ravel(y[1])]
    else:
        parts = [np.ravel(x)] + ([np.ravel(y)] if full else [])
    return np.concatenate(parts)


def cis_like_amplitudes(xy: Sequence, unrestricted: bool, full: bool):
    """CIS-normalized amplitudes of one root (see the module docstring)."""
    x, y = xy
    if unrestricted:
        za, zb = np.array(x[0], float), np.array(x[1], float)
        if full:
            za = za + np.asarray(y[0], float)
            zb = zb + np.asarray(y[1], float)
        norm = np.sqrt((za ** 2).sum() + (zb ** 2).sum())
        return za / norm, zb / norm
    z = np.array(x, float)
    if full:
        z = z + np.asarray(y, float)
    return z * np.sqrt(0.5 / (z ** 2).sum())


def _mo_overlap(mol_old: Any, c_old: np.ndarray, mol_new: Any, c_new: np.ndarray) -> np.ndarray:
    from pyscf import gto

    s_ao = gto.intor_cross("int1e_ovlp", mol_old, mol_new)
    return c_old.T @ s_ao @ c_new


def _project_block(amp: np.ndarray, s_mo: np.ndarray, nocc_old: int, nocc_new: int) -> np.ndarray:
    """X_old (o, v) expressed in the new orbitals: S_oo^T X S_vv."""
    s_oo = s_mo[:nocc_old, :nocc_new]
    s_vv = s_mo[nocc_old:, nocc_new:]
    return s_oo.T @ amp @ s_vv


def project_guess(previous: dict, mol_new: Any, mf_new: Any, nstates: int) -> np.ndarray | None:
    """Davidson guess at the new geometry from the previous roots' (X, Y).

    ``previous`` holds 'mol', 'mo_coeff', 'mo_occ', 'xy' (PySCF's list), 'unrestricted',
    'full'. Amplitudes are carried through the MO overlap between the two geometries, so
    orbital sign flips and small rotations do not spoil the guess. Returns None when there
    are not enough previous roots.
    """
    xy = previous["xy"]
    if len(xy) < nstates:
        return None
    c_old, occ_old = previous["mo_coeff"], previous["mo_occ"]
    rows = []
    if previous["unrestricted"]:
        spins = []
        for s in (0, 1):
            s_mo = _mo_overlap(previous["mol"], c_old[s], mol_new, mf_new.mo_coeff[s])
            spins.append((s_mo, int((occ_old[s] > 0).sum()), int((mf_new.mo_occ[s] > 0).sum())))
        for x, y in xy[:nstates]:
            parts = [_project_block(np.asarray(x[s]), *spins[s]).ravel() for s in (0, 1)]
            if previous["full"]:
                parts += [_project_block(np.asarray(y[s]), *spins[s]).ravel() for s in (0, 1)]
            rows.append(np.concatenate(parts))
    else:
        s_mo = _mo_overlap(previous["mol"], c_old, mol_new, mf_new.mo_coeff)
        no, nn = int((occ_old > 0).sum()), int((mf_new.mo_occ > 0).sum())
        for x, y in xy[:nstates]:
            parts = [_project_block(np.asarray(x), s_mo, no, nn).ravel()]
            if previous["full"]:
                parts.append(_project_block(np.asarray(y), s_mo, no, nn).ravel())
            rows.append(np.concatenate(parts))
    return np.asarray(rows)
