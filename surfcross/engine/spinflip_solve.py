"""Spin-flip TDA solves with pyscf-forge: building the solver, Davidson with counted iterations,
warm-start guesses carried through the MO overlap, retries.

pyscf-forge's ``pyscf.sftda`` solves the Tamm-Dancoff spin-flip problem on an unrestricted
Kohn-Sham (or Hartree-Fock exchange) reference; ``extype = 1`` selects the spin-flip-down
excitations (alpha occupied -> beta virtual) that take the M_S = 1 reference to M_S = 0. Its
``collinear_samples`` switch chooses the kernel: a negative value gives the collinear kernel
(only exact exchange couples the flipped configurations), a positive one the multicollinear
kernel evaluated by ``mcfun`` with that many sample points. The energy code treats 0 as
multicollinear and the gradient code as collinear, so 0 is never used here.

Amplitudes come back as (nocc_alpha, nvir_beta) matrices with sum X^2 = 1. Every root is kept,
negative excitation energies included: S0 lies below the triplet reference.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import EngineError, InputError, ResponseNotConvergedError

__all__ = ["MULTICOLLINEAR_SAMPLES", "SpinFlipRoots", "import_spin_flip", "make_solver",
           "solve_spin_flip", "project_amplitudes"]

logger = logging.getLogger(__name__)

#: sample points of the multicollinear kernel. Measured on triplet water / STO-3G with
#: BHandHLYP: excitation energies (to 1e-5 eV) and gradients (to 1e-10 Eh/bohr) are the same
#: with 10, 20, 50, 100 and 200 points (pyscf-forge's default), while the cost grows with the
#: count (gradient 4 s with 10 points, 75 s with 200); 20 keeps a margin.
MULTICOLLINEAR_SAMPLES = 20
COLLINEAR_SAMPLES = -1
#: Davidson cycles of the first attempt and of the retries
FIRST_MAX_CYCLE = 100
RETRY_MAX_CYCLE = 300
#: relative size of the fixed-seed dense admixture to fresh guesses (lets every spatial
#: symmetry into the Davidson space, as in the response engine)
GUESS_SPREAD = 1e-2
_SEED = 20240613

EXTRA_HINT = ("spin-flip TDA needs the optional 'spinflip' extra (pyscf-forge and mcfun): "
              "pip install 'surfcross[spinflip]'; building pyscf-forge needs a system BLAS "
              "(Debian/Ubuntu: apt-get install libopenblas-dev)")


def import_spin_flip() -> None:
    """Import pyscf-forge's spin-flip modules or raise InputError saying how to install them."""
    try:
        import pyscf.sftda  # noqa: F401
        import pyscf.grad.tduks_sf  # noqa: F401  (registers the gradient class)
    except ImportError:
        raise InputError(EXTRA_HINT) from None


def kernel_samples(kernel: str) -> int:
    return MULTICOLLINEAR_SAMPLES if kernel == "multicollinear" else COLLINEAR_SAMPLES


@dataclass
class SpinFlipRoots:
    """Outcome of one spin-flip solve: the solver object and the converged roots, bottom up."""

    td: Any
    iterations: int
    nconverged: int  # roots 0 .. nconverged-1 are converged (contiguous from the bottom)

    @property
    def excitation_eh(self) -> np.ndarray:
        """Energies relative to the M_S = 1 reference (Eh), converged roots only."""
        return np.asarray(self.td.e[: self.nconverged], float)

    def amplitudes(self) -> np.ndarray:
        """(nconverged, nocc_alpha, nvir_beta) amplitudes, sum X^2 = 1 per root."""
        return np.asarray([np.asarray(self.td.xy[k][0], float) for k in range(self.nconverged)])


def make_solver(mf: Any, kernel: str, conv_tol: float) -> Any:
    """pyscf-forge's spin-flip TDA solver for ``mf`` (spin flip down, our kernel choice)."""
    from pyscf.sftda import uks_sf

    td = uks_sf.TDA_SF(mf)
    td.extype = 1
    td.collinear_samples = kernel_samples(kernel)
    td.conv_tol = conv_tol
    td.verbose = mf.verbose
    return td


def _count_applications(td: Any, x0: np.ndarray) -> int:
    """``td.kernel(x0)`` counting applications of the response matrix to trial blocks."""
    count = [0]
    original = type(td).gen_vind

    def counted(self_td=td):
        vind, hdiag = original(self_td)

        def apply(x):
            count[0] += 1
            return vind(x)
        return apply, hdiag

    td.gen_vind = counted
    td._keys = set(td._keys) | {"gen_vind"}
    try:
        td.kernel(x0=x0)
    finally:
        del td.gen_vind
    return count[0]


def _fresh_guess(td: Any, n: int, guess: np.ndarray | None) -> np.ndarray:
    if guess is None or len(guess) < n:
        base = np.asarray(td._init_guess(td._scf, n), float)
        if guess is not None and len(guess):
            base = np.vstack([guess, base])[:max(n, len(guess))]
        guess = base
    x = np.atleast_2d(np.asarray(guess, float))
    noise = np.random.default_rng(_SEED).standard_normal(x.shape)
    scale = GUESS_SPREAD * np.linalg.norm(x, axis=1) / np.linalg.norm(noise, axis=1)
    return x + noise * scale[:, None]


def _converged_count(td: Any, n: int) -> int:
    conv = np.atleast_1d(np.asarray(td.converged, bool)) if td.converged is not None else []
    k = 0
    while k < min(n, len(conv), len(td.e)) and conv[k]:
        k += 1
    return k


def solve_spin_flip(td: Any, nstates: int, needed: int, guess: np.ndarray | None) -> SpinFlipRoots:
    """Solve for ``nstates`` roots; the lowest ``needed`` must converge.

    Attempt 1 from ``guess`` (or orbital-energy differences) with a small dense admixture;
    attempt 2 restarts from attempt 1's vectors with more Davidson cycles; attempt 3 asks two
    more roots from a fresh guess. Raises ResponseNotConvergedError when the lowest ``needed``
    roots are still not converged.
    """
    dimension = int(td._scf.mo_occ[0].sum()) * int((td._scf.mo_occ[1] == 0).sum())
    nstates = min(nstates, dimension)
    needed = min(needed, nstates)
    if needed < 1:
        raise EngineError("no spin-flip configurations exist for this molecule and basis")
    attempts = [(nstates, FIRST_MAX_CYCLE, guess), (nstates, RETRY_MAX_CYCLE, "restart"),
                (min(nstates + 2, dimension), RETRY_MAX_CYCLE, None)]
    iterations, done = 0, 0
    for n, cycles, start in attempts:
        if isinstance(start, str):
            x0 = np.asarray([np.ravel(xy[0]) for xy in td.xy])
        else:
            x0 = _fresh_guess(td, n, start)
        td.nstates, td.max_cycle = n, cycles
        iterations += _count_applications(td, x0)
        done = _converged_count(td, n)
        if done >= needed:
            return SpinFlipRoots(td=td, iterations=iterations, nconverged=done)
        logger.debug("spin-flip TDA: %d of %d roots converged; retrying", done, needed)
    raise ResponseNotConvergedError(
        f"spin-flip TDA: only the lowest {done} of {needed} roots converged ({iterations} "
        "Davidson iterations, also with a restart and more roots); near-degenerate states: "
        "try another number of roots or a different geometry step")


def _mo_overlap(mol_old: Any, c_old: np.ndarray, mol_new: Any, c_new: np.ndarray) -> np.ndarray:
    from pyscf import gto

    return c_old.T @ gto.intor_cross("int1e_ovlp", mol_old, mol_new) @ c_new


def project_amplitudes(previous: dict, mol_new: Any, mf_new: Any) -> np.ndarray:
    """Previous roots' amplitudes expressed in the new orbitals: S^a_oo^T X S^b_vv per root,
    flattened (a Davidson guess that survives orbital sign flips and small rotations)."""
    occ_old, occ_new = previous["mo_occ"], mf_new.mo_occ
    c_old, c_new = previous["mo_coeff"], mf_new.mo_coeff
    oa_old, oa_new = occ_old[0] > 0, occ_new[0] > 0
    vb_old, vb_new = occ_old[1] == 0, occ_new[1] == 0
    s_a = _mo_overlap(previous["mol"], c_old[0][:, oa_old], mol_new, c_new[0][:, oa_new])
    s_b = _mo_overlap(previous["mol"], c_old[1][:, vb_old], mol_new, c_new[1][:, vb_new])
    return np.asarray([(s_a.T @ x @ s_b).ravel() for x in previous["amplitudes"]])
