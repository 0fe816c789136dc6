"""Molecule and SCF reference for the PySCF response engine.

Builds the PySCF molecule of a :class:`Geometry`, runs the RHF/RKS/UHF/UKS reference with a
chain of fallbacks (DIIS, then level shift + damping, then a second-order solver) and counts
the SCF cycles. Warm starts take the occupied orbitals of the previous geometry, orthonormalized
in the overlap metric of the new one, as the density guess.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass
from typing import IO, Any

import numpy as np

from ..errors import InputError, SCFNotConvergedError
from ..geometry import Geometry
from .base import MethodSpec

__all__ = ["ScfResult", "Capacity", "build_molecule", "capacity", "check_functional",
           "run_reference", "warm_density", "internal_stability", "stabilize",
           "STABILITY_TAG", "STABILITY_SPACING_BOHR", "STABILITY_MODES"]

#: analyse the reference again once an atom has moved this far (bohr) since the last analysis
STABILITY_SPACING_BOHR = 0.2
#: lowest orbital-Hessian eigenvalue (Eh) below -this: unstable (PySCF's own threshold)
STABILITY_TOL = 1e-5
#: orbital-rotation spaces up to this size are diagonalized densely
STABILITY_DENSE_LIMIT = 24
_STABILITY_SEED = 20261203
#: what the engine does with a warm-started reference found unstable mid-run
STABILITY_MODES = ("report", "follow")

logger = logging.getLogger(__name__)

#: level shift (Eh) and damping factor of the second SCF attempt
FALLBACK_LEVEL_SHIFT = 0.3
FALLBACK_DAMPING = 0.5
#: orbital-gradient threshold = this factor * sqrt(energy threshold)
ORBITAL_GRADIENT_FACTOR = 1e-2


@dataclass(frozen=True)
class ScfResult:
    """A converged SCF reference: the PySCF object, cycles used and strategy that worked."""

    mf: Any
    cycles: int
    strategy: str


def build_molecule(geometry: Geometry, spec: MethodSpec, spin: int, stdout: IO | None,
                   verbose: int) -> Any:
    """PySCF ``Mole`` at ``geometry`` (bohr) with charge from the geometry and ``spin`` = 2S."""
    from pyscf import gto

    mol = gto.Mole()
    mol.atom = [(s, tuple(float(c) for c in xyz))
                for s, xyz in zip(geometry.symbols, geometry.coords_bohr)]
    mol.unit = "Bohr"
    mol.basis = spec.basis
    mol.charge = geometry.charge
    mol.spin = spin
    mol.symmetry = False
    mol.verbose = verbose
    mol.max_memory = spec.max_memory_mb
    if stdout is not None:
        mol.stdout = stdout
    try:
        with warnings.catch_warnings():  # PySCF's hint for unknown basis names is not one line
            warnings.filterwarnings("ignore", message="Basis may be available", category=UserWarning)
            mol.build(dump_input=False, parse_arg=False)
    except (KeyError, RuntimeError, ValueError) as exc:
        reason = " ".join(str(exc).split())
        raise InputError(f"PySCF cannot build the molecule with basis {spec.basis!r}: {reason}; "
                         "check the basis name (e.g. sto-3g, 6-31g, def2-svp)") from None
    if stdout is not None:
        mol.stdout = stdout
    return mol


@dataclass(frozen=True)
class Capacity:
    """How many states a method can give for one molecule in one basis (no SCF needed).

    ``occupied``/``virtual`` are (alpha, beta) orbital counts of the reference determinant;
    ``excitations`` the number of single excitations of the response manifold (occupied x
    virtual, summed over spins for an unrestricted reference); ``active_states`` the number
    of singlet configuration state functions of a CASSCF active space (None without one).
    """

    orbitals: int
    occupied: tuple[int, int]
    virtual: tuple[int, int]
    excitations: int
    unrestricted: bool
    active_states: int | None = None

    def describe(self) -> str:
        if self.unrestricted:
            return (f"{self.excitations} excitations ({self.occupied[0]} x {self.virtual[0]} "
                    f"alpha + {self.occupied[1]} x {self.virtual[1]} beta occupied x virtual "
                    "orbitals)")
        return (f"{self.excitations} excitations per spin manifold ({self.occupied[0]} occupied "
                f"x {self.virtual[0]} virtual orbitals)")


def singlet_csf_count(electrons: int, orbitals: int) -> int:
    """Number of singlet configuration state functions of ``electrons`` in ``orbitals``.

    Weyl's dimension formula (as used for the unitary-group approach to CI, common practice):
    N = (2S + 1)/(n + 1) * C(n + 1, N/2 - S) * C(n + 1, N/2 + S + 1) with S = 0.
    """
    from math import comb

    if electrons % 2 or electrons > 2 * orbitals:
        return 0
    half = electrons // 2
    return comb(orbitals + 1, half) * comb(orbitals + 1, half + 1) // (orbitals + 1)


def capacity(geometry: Geometry, spec: MethodSpec) -> Capacity:
    """Orbital and excitation counts of ``geometry`` in ``spec.basis``, from the PySCF molecule
    alone (builds the basis; no integrals beyond that, no SCF). Raises InputError for a
    basis PySCF does not know or an impossible charge/spin."""
    mol = build_molecule(geometry, spec, geometry.spin, None, 0)
    nao = int(mol.nao_nr())
    na, nb = (int(n) for n in mol.nelec)
    unrestricted = geometry.spin > 0 or spec.unrestricted
    occ, vir = (na, nb), (nao - na, nao - nb)
    excitations = occ[0] * vir[0] + (occ[1] * vir[1] if unrestricted else 0)
    active = None
    if spec.active_space is not None:
        active = singlet_csf_count(*spec.active_space)
    return Capacity(orbitals=nao, occupied=occ, virtual=vir, excitations=excitations,
                    unrestricted=unrestricted, active_states=active)


def check_functional(xc: str | None) -> None:
    """Raise InputError when PySCF (libxc) does not know the functional name."""
    if xc is None:
        return
    from pyscf.dft import libxc

    try:
        libxc.parse_xc(xc)
    except (KeyError, ValueError, RuntimeError) as exc:
        raise InputError(f"unknown exchange-correlation functional {xc!r} ({exc}); use a name "
                         "PySCF knows, e.g. b3lyp, pbe0, camb3lyp, pbe") from None


def _new_scf(mol: Any, spec: MethodSpec, unrestricted: bool) -> Any:
    from pyscf import dft, scf

    if spec.xc is None:
        mf = scf.UHF(mol) if unrestricted else scf.RHF(mol)
    else:
        mf = dft.UKS(mol) if unrestricted else dft.RKS(mol)
        mf.xc = spec.xc
        mf.grids.level = spec.grid_level
    mf.conv_tol = spec.scf_conv_tol
    # PySCF's default orbital-gradient threshold, sqrt(conv_tol), leaves excited-state
    # energies and gradients with errors of ~1e-8 Eh and ~1e-5 Eh/bohr; ask for more
    mf.conv_tol_grad = ORBITAL_GRADIENT_FACTOR * np.sqrt(spec.scf_conv_tol)
    mf.max_memory = spec.max_memory_mb
    mf.chkfile = None  # no per-cycle HDF5 scratch file: the run record is ours
    mf.verbose = mol.verbose
    mf.stdout = mol.stdout
    return mf


def _counted_kernel(mf: Any, dm0: np.ndarray | None) -> tuple[bool, int]:
    """Run ``mf.kernel`` and count its cycles through the per-cycle callback."""
    count = [0]

    def tick(_envs: dict) -> None:
        count[0] += 1

    mf.callback = tick
    try:
        mf.kernel(dm0=dm0)
    finally:
        mf.callback = None
    return bool(mf.converged), count[0]


def run_reference(mol: Any, spec: MethodSpec, unrestricted: bool,
                  dm0: np.ndarray | None) -> ScfResult:
    """Converge the SCF reference or raise :class:`SCFNotConvergedError`.

    Strategy: DIIS from ``dm0`` (or PySCF's default guess); then level shift + damping from
    the default guess; then the second-order (Newton) solver. A reference converged by a
    fallback is re-converged once without shift/damping, so its canonical orbitals and
    orbital energies are the plain ones the response and gradient code expect.
    """
    mf = _new_scf(mol, spec, unrestricted)
    ok, total = _counted_kernel(mf, dm0)
    if ok:
        return ScfResult(mf, total, "diis")
    logger.info("SCF not converged with DIIS after %d cycles; retrying with level shift and "
                "damping", total)
    shifted = _new_scf(mol, spec, unrestricted)
    shifted.level_shift = FALLBACK_LEVEL_SHIFT
    shifted.damp = FALLBACK_DAMPING
    shifted.max_cycle = 200
    ok, n = _counted_kernel(shifted, None)
    total += n
    strategy = "level shift + damping"
    if not ok:
        logger.info("SCF still not converged; retrying with the second-order solver")
        newton = _new_scf(mol, spec, unrestricted).newton()
        ok, n = _counted_kernel(newton, shifted.make_rdm1())
        total += n
        strategy = "second-order"
        shifted = newton
    if ok:
        polished = _new_scf(mol, spec, unrestricted)
        ok, n = _counted_kernel(polished, shifted.make_rdm1())
        total += n
        if ok:
            return ScfResult(polished, total, strategy)
    kind = reference_kind(spec, unrestricted)
    raise SCFNotConvergedError(
        f"the {kind} reference did not converge ({total} cycles: DIIS, level shift + damping, "
        "second-order solver). Check charge and spin, start from a more reasonable geometry, "
        + ("" if unrestricted else "try an unrestricted reference ")
        + "or try another basis")


def _lowest_hessian_mode(hessian_x: Any, hdiag: np.ndarray) -> tuple[float, np.ndarray]:
    """Lowest eigenvalue and eigenvector of the orbital-rotation Hessian.

    Small problems are diagonalized densely. Larger ones use PySCF's Davidson solver from
    unit vectors on the smallest diagonal elements plus a fixed-seed dense admixture: a guess
    built from the orbital gradient alone (which is zero by symmetry along a
    symmetry-breaking instability) can miss the unstable mode, or find it only through
    rounding noise, so that the verdict would depend on the BLAS kernel.
    """
    dim = hdiag.size
    if dim <= STABILITY_DENSE_LIMIT:
        h = np.column_stack([hessian_x(e) for e in np.eye(dim)])
        w, v = np.linalg.eigh(0.5 * (h + h.T))
        return float(w[0]), v[:, 0]
    from pyscf import lib

    k = min(4, dim)
    guess = np.eye(dim)[np.argsort(hdiag, kind="stable")[:k]]
    noise = np.random.default_rng(_STABILITY_SEED).standard_normal(guess.shape)
    guess = guess + 1e-2 * noise / np.linalg.norm(noise, axis=1)[:, None]

    def precond(dx, e, *_):
        d = hdiag - e
        d[np.abs(d) < 1e-8] = 1e-8
        return dx / d

    e, v = lib.davidson(hessian_x, list(guess), precond, tol=1e-6, nroots=min(2, dim),
                        max_cycle=100)
    return float(np.atleast_1d(e)[0]), np.asarray(v[0] if np.ndim(e) else v)


def internal_stability(mf: Any) -> tuple[bool, Any]:
    """Internal stability analysis of a converged RHF/UHF/RKS/UKS reference.

    Internal: orbital rotations that keep the kind of reference (restricted stays
    restricted). The orbital Hessian is PySCF's (the one its second-order SCF solver uses),
    without point-group restrictions; the reference is unstable when its lowest eigenvalue
    is below -STABILITY_TOL. Returns (stable, orbitals rotated along the lowest mode when
    unstable, else the unchanged orbitals).
    """
    from pyscf.scf import stability as pyscf_stability
    from pyscf.soscf import newton_ah

    unrestricted = np.ndim(mf.mo_occ) == 2
    gen = newton_ah.gen_g_hop_uhf if unrestricted else newton_ah.gen_g_hop_rhf
    _, hop, hdiag = gen(mf, mf.mo_coeff, mf.mo_occ, with_symmetry=False)

    def hessian_x(x):  # the full Hessian times x (PySCF's convention, see its stability module)
        return np.asarray(hop(x)).real * 2

    lowest, mode = _lowest_hessian_mode(hessian_x, 2 * np.asarray(hdiag, float))
    if lowest > -STABILITY_TOL:
        return True, mf.mo_coeff
    if unrestricted:
        nov = int((mf.mo_occ[0] > 0).sum() * (mf.mo_occ[0] == 0).sum())
        mo = (pyscf_stability._rotate_mo(mf.mo_coeff[0], mf.mo_occ[0], mode[:nov]),
              pyscf_stability._rotate_mo(mf.mo_coeff[1], mf.mo_occ[1], mode[nov:]))
        return False, np.asarray(mo)
    return False, pyscf_stability._rotate_mo(mf.mo_coeff, mf.mo_occ, mode)


def stabilize(mf: Any, spec: MethodSpec, unrestricted: bool,
              max_tries: int = 3) -> tuple[Any, int, bool]:
    """Follow internal instabilities of a converged reference down to a stable solution.

    A cold start (e.g. of a high-spin triplet) can land on an excited SCF solution, and a
    warm start carries a solution on past the geometry where it stops being the lowest (H2
    stretched with an unrestricted reference stays on the restricted-like solution). From the
    rotated orbitals of :func:`internal_stability` the SCF is reconverged (at most
    ``max_tries`` times). Returns the mean-field object (the lowest one found), the extra
    SCF cycles spent and whether it passed the analysis.
    """
    cycles = 0
    for _ in range(max_tries):
        stable, mo_new = internal_stability(mf)
        if stable:
            return mf, cycles, True
        trial = _new_scf(mf.mol, spec, unrestricted)
        ok, n = _counted_kernel(trial, mf.make_rdm1(mo_new, mf.mo_occ))
        cycles += n
        if not ok or trial.e_tot > mf.e_tot - 1e-9:
            return mf, cycles, False
        logger.info("SCF reference was unstable; moved to a lower solution (%.8f -> %.8f Eh)",
                    mf.e_tot, trial.e_tot)
        mf = trial
    return mf, cycles, internal_stability(mf)[0]


def reference_kind(spec: MethodSpec, unrestricted: bool) -> str:
    """'RHF', 'UKS/B3LYP', ... for messages."""
    if spec.xc is None:
        return "UHF" if unrestricted else "RHF"
    return ("UKS" if unrestricted else "RKS") + f"/{spec.xc}"


def instability_note(spec: MethodSpec, unrestricted: bool, label: str) -> str:
    """The warning for a reference found unstable mid-run (with the remedies)."""
    other = "" if unrestricted else "an unrestricted reference (--unrestricted), "
    return (f"{label}: the {reference_kind(spec, unrestricted)} reference became unstable "
            f"{STABILITY_TAG}: a lower SCF solution exists, so the states there were computed "
            "on an excited SCF solution that the warm start carried along. Rerun with "
            "--follow-instability (moves to the lower solution and continues there), "
            f"--cold-start, {other}or SA-CASSCF, and compare")


def followed_note(spec: MethodSpec, unrestricted: bool, label: str) -> str:
    return (f"{label}: the {reference_kind(spec, unrestricted)} reference became unstable "
            f"{STABILITY_TAG} and was moved to the lower SCF solution, as asked "
            "(--follow-instability); the surface changes character there, check the states "
            "before and after")


#: marks the run-level stability messages (tasks collect them from every accepted step)
STABILITY_TAG = "(internal stability analysis)"


def warm_density(mol: Any, mo_coeff: np.ndarray, mo_occ: np.ndarray) -> np.ndarray:
    """Density guess at ``mol`` from the previous geometry's occupied orbitals.

    The occupied orbitals are Loewdin-orthonormalized in the new overlap metric, so the guess
    is idempotent and has the right number of electrons.
    """
    s = mol.intor_symmetric("int1e_ovlp")

    def one(c: np.ndarray, occ: np.ndarray) -> np.ndarray:
        mask = occ > 0
        cocc = c[:, mask]
        m = cocc.T @ s @ cocc
        w, v = np.linalg.eigh(m)
        cocc = cocc @ (v * w ** -0.5) @ v.T
        return (cocc * occ[mask]) @ cocc.T

    if np.ndim(mo_occ) == 2:
        return np.asarray([one(mo_coeff[0], mo_occ[0]), one(mo_coeff[1], mo_occ[1])])
    return one(mo_coeff, mo_occ)
