"""Running state-averaged CASSCF with PySCF at one geometry: setup, warm starts, retries,
and the per-state properties the engine reports.

Only the engine module calls into here. PySCF objects never leave ``engine/``.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from ..errors import EngineError

__all__ = ["CasscfSetup", "solve_state_averaged", "state_properties"]

logger = logging.getLogger(__name__)

#: convergence of the state-averaged energy (Eh) and of the orbital gradient. With the singlet
#: spin penalty PySCF's one-step solver often stalls with an orbital gradient of 1e-7..1e-6
#: (observed with PySCF 2.14), so the gradient criterion cannot be much tighter; a stalled run
#: whose orbital gradient is below STALLED_GRADIENT_OK is accepted
CASSCF_CONV_TOL = 1e-10
CASSCF_CONV_TOL_GRAD = 1e-6
STALLED_GRADIENT_OK = 3e-6
#: convergence of the active-space CI eigenvalues (PySCF's default 1e-8 leaves noise of
#: ~1e-5 Eh/bohr in analytic vs finite-difference gradients)
CI_CONV_TOL = 1e-12
#: spin penalty shift (Eh) of the singlet constraint (H + shift (S^2 - 0))
SPIN_PENALTY_SHIFT = 0.5


@dataclass(frozen=True, kw_only=True)
class CasscfSetup:
    """Fixed settings of one engine: active space, number of states and weights."""

    ncas: int
    nelecas: int
    weights: tuple[float, ...]
    max_cycle_macro: int = 60


def _new_casscf(mol, setup: CasscfSetup, scf_conv_tol: float):
    from pyscf import mcscf, scf

    mf = scf.RHF(mol)
    mf.conv_tol = scf_conv_tol
    mc = mcscf.CASSCF(mf, setup.ncas, setup.nelecas)
    # singlets only: without the penalty, triplets of the active space enter the average
    # wherever they come close (e.g. twisted double bonds)
    mc.fix_spin_(shift=SPIN_PENALTY_SHIFT, ss=0)
    mc.state_average_(list(setup.weights))
    mc.conv_tol = CASSCF_CONV_TOL
    mc.conv_tol_grad = CASSCF_CONV_TOL_GRAD
    mc.fcisolver.conv_tol = CI_CONV_TOL
    mc.max_cycle_macro = setup.max_cycle_macro
    mc.verbose = mol.verbose
    mc.stdout = mol.stdout
    return mc


def _initial_orbitals(mc, active_orbitals, guess_mo, guess_mol):
    """Orbitals to start from: projected previous orbitals, or RHF (optionally sorted)."""
    from pyscf import mcscf

    if guess_mo is not None:
        # raw orbitals of another geometry are not orthonormal here: project them (least
        # squares into the new basis, then orthonormalize core first, then active) within the
        # span of the symmetrically orthonormalized AOs; no SCF is needed for that
        from pyscf import lo

        mc._scf.mo_coeff = lo.orth_ao(mc.mol, "lowdin")
        return mcscf.project_init_guess(mc, guess_mo, prev_mol=guess_mol, use_hf_core=False)
    mf = mc._scf
    mf.kernel()
    if not mf.converged:
        logger.warning("RHF for the starting CASSCF orbitals did not converge; using them anyway")
    if active_orbitals is not None:
        return mc.sort_mo(list(active_orbitals), mf.mo_coeff, base=1)
    return mf.mo_coeff


def solve_state_averaged(mol, setup: CasscfSetup, *, scf_conv_tol: float,
                         active_orbitals=None, guess_mo=None, guess_mol=None, guess_ci=None):
    """Converged state-averaged CASSCF object at ``mol``.

    Tries, in order: previous orbitals and CI vectors; previous orbitals alone; fresh RHF
    orbitals (with the requested active orbitals). Raises EngineError if none converges.
    """
    attempts = []
    if guess_mo is not None:
        attempts.append(("previous orbitals and CI vectors", guess_mo, guess_ci))
        attempts.append(("previous orbitals without CI guess", guess_mo, None))
    attempts.append(("fresh RHF orbitals", None, None))
    last = None
    for name, mo_guess, ci_guess in attempts:
        mc = _new_casscf(mol, setup, scf_conv_tol)
        try:
            mo0 = _initial_orbitals(mc, active_orbitals, mo_guess, guess_mol)
            mc.kernel(mo0, ci0=None if ci_guess is None else [np.asarray(c) for c in ci_guess])
        except (np.linalg.LinAlgError, ValueError, RuntimeError) as exc:
            logger.warning("CASSCF start from %s failed: %s", name, exc)
            last = str(exc)
            continue
        if not mc.converged and _stalled_but_stationary(mc):
            mc.converged = True
        if mc.converged:
            if name != attempts[0][0]:
                logger.warning("CASSCF converged only after restarting from %s", name)
            return mc
        logger.warning("CASSCF from %s did not converge in %d macro iterations",
                       name, setup.max_cycle_macro)
        last = "not converged"
    raise EngineError(
        f"state-averaged CASSCF({setup.nelecas},{setup.ncas}) did not converge at this geometry "
        f"({last}). Try: a smaller step or a geometry closer to the last good one; choosing the "
        "active orbitals explicitly (active_orbitals); averaging over one more state; or a "
        "different active space"
    )


def _stalled_but_stationary(mc) -> bool:
    """True when the run stopped on the iteration limit with a negligible orbital gradient."""
    try:
        norm = float(np.linalg.norm(mc.get_grad()))
    except (AttributeError, ValueError, np.linalg.LinAlgError):
        return False
    if norm < STALLED_GRADIENT_OK:
        logger.info("CASSCF stalled at orbital gradient %.1e; accepted as converged", norm)
        return True
    return False


def state_properties(mc, mol) -> dict:
    """Per-state <S^2>, oscillator strengths from S0 and active natural occupations.

    Oscillator strengths f_0k = 2/3 (E_k - E_0) |<0|mu|k>|^2 (length gauge, a.u.) from the
    active-space transition density; core orbitals are shared by all states and do not
    contribute. SA-CASSCF values lack dynamic correlation and are qualitative.
    """
    from pyscf.fci import direct_spin1, spin_op

    ncas, nelecas, ncore = mc.ncas, mc.nelecas, mc.ncore
    ci = list(mc.ci)
    e = np.asarray(mc.e_states)
    ss = [float(spin_op.spin_square0(c, ncas, nelecas)[0]) for c in ci]
    mo_cas = mc.mo_coeff[:, ncore:ncore + ncas]
    with mol.with_common_orig(_charge_center(mol)):
        r_ao = mol.intor_symmetric("int1e_r", comp=3)
    r_cas = np.einsum("xuv,up,vq->xpq", r_ao, mo_cas, mo_cas)
    osc = [None]
    for k in range(1, len(ci)):
        t = direct_spin1.trans_rdm1(ci[0], ci[k], ncas, nelecas)
        mu = -np.einsum("xpq,pq->x", r_cas, t)
        osc.append(float(2.0 / 3.0 * (e[k] - e[0]) * mu @ mu))
    dm_avg = sum(w * direct_spin1.make_rdm1(c, ncas, nelecas) for w, c in zip(mc.weights, ci))
    occupations = np.sort(np.linalg.eigvalsh(dm_avg))[::-1]
    return {"spin_square": ss, "oscillator": osc, "natural_occupations": occupations}


def _charge_center(mol) -> np.ndarray:
    z = mol.atom_charges()
    return np.einsum("i,ix->x", z, mol.atom_coords()) / z.sum()
