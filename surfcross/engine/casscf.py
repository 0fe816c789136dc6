"""State-averaged CASSCF engine: energies, analytic gradients, interstate coupling vectors and
CI-vector overlaps between geometries, all from PySCF.

What it computes
----------------
* SA-CASSCF over the singlet states S0..S{roots} (``roots + 1`` states), equal weights unless
  ``MethodSpec.state_weights`` says otherwise, active space ``MethodSpec.active_space`` =
  (electrons, orbitals), optional choice of the active orbitals ``MethodSpec.active_orbitals``
  (1-based MO numbers of the starting RHF orbitals, PySCF's convention). A spin penalty keeps
  every averaged state a singlet. Orbitals are carried from the previous geometry by projection
  onto the new basis, together with the previous CI vectors as guesses.
* Analytic gradients of any averaged state (PySCF's SA-CASSCF Lagrangian gradients; equal
  weights only, a PySCF restriction).
* Interstate coupling vectors h = (E_J - E_I) <Psi_I|grad Psi_J> (Eh/bohr, (natom, 3)), I the
  lower and J the upper state, stored in ``Evaluation.couplings[(S_I, S_J)]``. See
  :data:`COUPLING_CONVENTION` for the exact PySCF quantity used.
* Overlaps <Psi_I(R)|Psi_J(R')> of the full CASSCF wavefunctions (see casscf_wavefunction).

Known limits (tell your users)
------------------------------
SA-CASSCF has no dynamic correlation: excitation energies are often off by 1 eV or more, and
the position and even the existence of a crossing can change at a correlated level. A (2,2) or
other minimal active space describes only the orbitals put into it; orbitals rotating in or out
of the active space between geometries make surfaces discontinuous (the engine warns when it
sees this). State averaging also makes every state depend on the others' weights. Check any
geometry or crossing found here with a higher-level method (e.g. multistate CASPT2, MRCI or
XMS-type perturbation theory) before relying on it.
"""

from __future__ import annotations

import logging
import time
from dataclasses import replace
from typing import Sequence

import numpy as np

from ..errors import EngineError, InputError
from ..geometry import Geometry
from ..states import SINGLET, StateLabel, parse_state
from .base import EngineBase, Evaluation, MethodSpec, StateInfo
from .casscf_checks import STATE_NOTE_MARK, continuity_warnings, property_warnings
from .casscf_solver import CasscfSetup, solve_state_averaged, state_properties
from .casscf_wavefunction import ActiveSpaceWavefunction, build_mole, casscf_overlap_matrix

__all__ = ["CASSCFEngine", "COUPLING_CONVENTION", "LIMITATIONS"]

logger = logging.getLogger(__name__)

#: How ``Evaluation.couplings`` is obtained from PySCF (documented for users and tests).
COUPLING_CONVENTION = (
    "h_IJ = (E_J - E_I) <Psi_I|grad Psi_J>, I lower and J upper state, in Eh/bohr. Computed with "
    "pyscf.nac.sacasscf.NonAdiabaticCouplings(mc).kernel(state=(J, I), mult_ediff=True, "
    "use_etfs=False) and used unscaled: with mult_ediff=True PySCF already multiplies by the "
    "energy difference, and for state=(J, I) the result equals +(E_J - E_I) <Psi_I|grad Psi_J> "
    "(established against the finite-difference derivative of the CI-vector overlap, see "
    "tests/test_casscf_couplings.py; PySCF's bra/ket wording in its docstring suggests the "
    "opposite sign, so do not rely on it). use_etfs=False keeps the basis-function ('CSF') "
    "term, so h/(E_J - E_I) is the full derivative coupling including the motion of the atomic "
    "orbitals; that term is proportional to E_J - E_I (zero at an intersection) and gives h a small "
    "component along rigid translations/rotations away from the seam, so remove external "
    "modes before building a branching plane. The overall sign follows the phases of the stored CI vectors and is therefore "
    "arbitrary: compare h across geometries only after aligning CI phases."
)

LIMITATIONS = (
    "SA-CASSCF lacks dynamic correlation and depends on the chosen active space and weights; "
    "energies, geometries and crossings found with it must be checked with a higher-level "
    "method (e.g. multistate CASPT2 or MRCI) before they are relied on"
)


class CASSCFEngine(EngineBase):
    """State-averaged CASSCF through PySCF (see the module docstring for limits).

    Parameters
    ----------
    spec
        ``method='casscf'``, ``active_space=(electrons, orbitals)``, ``roots`` excited states
        (``roots + 1`` states are averaged), optional ``active_orbitals`` and ``state_weights``.
    log_path
        File that receives PySCF's own output (appended); None keeps PySCF silent.
    """

    def __init__(self, spec: MethodSpec, *, log_path: str | None = None) -> None:
        if spec.method != "casscf" or spec.active_space is None:
            raise InputError("CASSCFEngine needs method 'casscf' with an active space")
        self.spec = spec
        nelecas, ncas = spec.active_space
        if nelecas % 2:
            raise InputError(f"the CASSCF engine computes singlets: {nelecas} active electrons "
                             "is odd; use an even number")
        if spec.active_orbitals is not None and len(spec.active_orbitals) != ncas:
            raise InputError(f"{len(spec.active_orbitals)} active orbitals chosen for an active "
                             f"space of {ncas} orbitals; give exactly {ncas} orbital numbers")
        self._setup = CasscfSetup(ncas=ncas, nelecas=nelecas, weights=_weights(spec))
        self._log = open(log_path, "a", encoding="utf-8") if log_path else None
        self._previous: tuple[object, ActiveSpaceWavefunction] | None = None
        self._live: tuple[ActiveSpaceWavefunction, object] | None = None
        self._limits_noted = False

    # ------------------------------------------------------------------ protocol
    @property
    def has_couplings(self) -> bool:
        return True

    @property
    def nstates(self) -> int:
        return len(self._setup.weights)

    def states(self, geometry: Geometry) -> Evaluation:
        """SA-CASSCF energies, <S^2>, oscillator strengths and CI data at ``geometry``."""
        from pyscf import lib

        mol = self._mole(geometry)
        t0 = time.perf_counter()
        guess_mol, guess_mo, guess_ci = None, None, None
        if self._previous is not None and self._previous[1].symbols == geometry.symbols:
            guess_mol, prev = self._previous
            guess_mo, guess_ci = prev.mo_coeff, prev.ci
        with lib.with_omp_threads(self.spec.threads):
            mc = solve_state_averaged(
                mol, self._setup, scf_conv_tol=self.spec.scf_conv_tol,
                active_orbitals=self.spec.active_orbitals if guess_mo is None else None,
                guess_mo=guess_mo, guess_mol=guess_mol, guess_ci=guess_ci)
            props = state_properties(mc, mol)
        wfn = self._wavefunction(geometry, mc)
        warnings = self._warnings(wfn, props)
        states = tuple(
            StateInfo(label=StateLabel(SINGLET, k), energy_eh=float(mc.e_states[k]),
                      oscillator_strength=props["oscillator"][k],
                      spin_square=props["spin_square"][k])
            for k in range(self.nstates))
        self._previous = (mol, wfn)
        self._live = (wfn, mc)
        return Evaluation(geometry=geometry, states=states, wavefunction=wfn,
                          timings_s={"casscf": time.perf_counter() - t0},
                          warnings=warnings)

    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        """Analytic gradients of ``labels`` and coupling vectors h of ``couplings`` pairs."""
        from pyscf import lib
        from pyscf.nac.sacasscf import NonAdiabaticCouplings

        roots = [self._root(lab) for lab in labels]
        pairs = [tuple(sorted((self._root(a), self._root(b)))) for a, b in couplings]
        if any(i == j for i, j in pairs):
            raise InputError("a coupling vector needs two different states")
        if (roots or pairs) and np.ptp(self._setup.weights) > 1e-12:
            raise InputError("PySCF's SA-CASSCF gradients and couplings need equal state "
                             "weights; drop state_weights")
        if not roots and not pairs:
            return evaluation
        mc = self._casscf_for(evaluation)
        grads, coups, notes = {}, {}, []
        t0 = time.perf_counter()
        with lib.with_omp_threads(self.spec.threads):
            solver = mc.nuc_grad_method()
            for k in roots:
                grads[StateLabel(SINGLET, k)] = np.asarray(solver.kernel(state=k), dtype=float)
                if not solver.converged:
                    notes.append(f"the response equations for the S{k} gradient did not fully "
                                 "converge; the gradient may be inaccurate")
            t1 = time.perf_counter()
            for i, j in dict.fromkeys(pairs):
                nac = NonAdiabaticCouplings(mc)
                # = (E_j - E_i) <Psi_i|grad Psi_j>; see COUPLING_CONVENTION
                raw = nac.kernel(state=(j, i), mult_ediff=True, use_etfs=False)
                h = np.array(raw, dtype=float)
                h.setflags(write=False)
                coups[(StateLabel(SINGLET, i), StateLabel(SINGLET, j))] = h
                if not nac.converged:
                    notes.append(f"the response equations for the S{i}/S{j} coupling did not "
                                 "fully converge; the coupling vector may be inaccurate")
        t2 = time.perf_counter()
        for note in notes:
            logger.warning(note)
        out = evaluation.with_gradients(
            grads, coups, timings_s={"gradients": t1 - t0, "couplings": t2 - t1})
        if notes:
            out = replace(out, warnings=tuple(out.warnings) + tuple(notes))
        return out

    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        """{'S': <Psi_I(bra)|Psi_J(ket)>}, rows and columns in state order S0, S1, ..."""
        return {SINGLET: casscf_overlap_matrix(bra.wavefunction, ket.wavefunction)}

    def close(self) -> None:
        """Drop cached PySCF objects and close the PySCF log file."""
        self._live = None
        self._previous = None
        if self._log is not None:
            self._log.close()
            self._log = None

    # ------------------------------------------------------------------ helpers
    def _mole(self, geometry: Geometry):
        if geometry.spin != 0:
            raise InputError("the CASSCF engine computes singlet states: use spin 0 "
                             f"(got 2S = {geometry.spin})")
        ncore2 = geometry.nelectron - self._setup.nelecas
        if ncore2 < 0 or ncore2 % 2:
            raise InputError(
                f"{geometry.nelectron} electrons cannot hold an active space of "
                f"{self._setup.nelecas} electrons with a doubly occupied core")
        mol = build_mole(geometry.symbols, geometry.coords_bohr, self.spec.basis,
                         geometry.charge, 0, stdout=self._log,
                         verbose=4 if self._log is not None else 0)
        mol.max_memory = self.spec.max_memory_mb
        if ncore2 // 2 + self._setup.ncas > mol.nao:
            raise InputError(f"basis {self.spec.basis} has {mol.nao} orbitals, too few for "
                             f"{ncore2 // 2} core plus {self._setup.ncas} active orbitals")
        return mol

    def _wavefunction(self, geometry: Geometry, mc) -> ActiveSpaceWavefunction:
        coords = np.array(geometry.coords_bohr)
        coords.setflags(write=False)
        return ActiveSpaceWavefunction(
            symbols=geometry.symbols, coords_bohr=coords, basis=self.spec.basis,
            mo_coeff=np.array(mc.mo_coeff), ci=tuple(np.array(c) for c in mc.ci),
            ncore=int(mc.ncore), ncas=int(mc.ncas),
            nelecas=tuple(int(n) for n in mc.nelecas), weights=self._setup.weights,
            charge=geometry.charge, spin=0)

    def _warnings(self, wfn: ActiveSpaceWavefunction, props: dict) -> tuple[str, ...]:
        notes = list(property_warnings(props))
        if self._previous is not None and self._previous[1].symbols == wfn.symbols:
            notes.extend(continuity_warnings(self._previous[1], wfn))
        if not self._limits_noted:
            notes.append(LIMITATIONS)
            self._limits_noted = True
        for note in notes:
            # states trading character is expected near crossings: informational only
            # (the method-limits note travels in Evaluation.warnings and reaches the user there)
            level = logging.INFO if (STATE_NOTE_MARK in note or note == LIMITATIONS) else logging.WARNING
            logger.log(level, note)
        return tuple(notes)

    def _root(self, label: StateLabel | str) -> int:
        lab = parse_state(label)
        if lab.manifold != SINGLET or lab.index >= self.nstates:
            raise InputError(
                f"state {lab} is not among the averaged CASSCF states "
                f"(S0..S{self.nstates - 1}); ask for more roots")
        return lab.index

    def _casscf_for(self, evaluation: Evaluation):
        """The converged PySCF object behind ``evaluation`` (recomputed if not cached)."""
        wfn = evaluation.wavefunction
        if not isinstance(wfn, ActiveSpaceWavefunction):
            raise InputError("this evaluation was not computed by the CASSCF engine")
        if self._live is not None and self._live[0] is wfn:
            return self._live[1]
        logger.info("recomputing CASSCF at an earlier geometry for its gradients")
        mol = self._mole(evaluation.geometry)
        mc = solve_state_averaged(mol, self._setup, scf_conv_tol=self.spec.scf_conv_tol,
                                  guess_mo=wfn.mo_coeff, guess_mol=mol, guess_ci=wfn.ci)
        energies = np.array([s.energy_eh for s in evaluation.states])
        if np.max(np.abs(np.asarray(mc.e_states) - energies)) > 1e-6:
            raise EngineError("recomputing CASSCF at an earlier geometry gave other states "
                              "than before; evaluate the geometry again with states()")
        # keep the phases of the stored CI vectors, so coupling signs refer to them
        mc.ci = [c if np.vdot(c, old) >= 0 else -c for c, old in zip(mc.ci, wfn.ci)]
        self._live = (wfn, mc)
        return mc


def _weights(spec: MethodSpec) -> tuple[float, ...]:
    nstates = spec.roots + 1
    if spec.state_weights is None:
        return tuple([1.0 / nstates] * nstates)
    w = np.asarray(spec.state_weights, dtype=float)
    if w.shape != (nstates,):
        raise InputError(f"{len(w)} state weights given for {nstates} averaged states "
                         f"(S0..S{nstates - 1}); give one weight per state")
    if np.any(w <= 0) or not np.all(np.isfinite(w)):
        raise InputError("state weights must be positive numbers")
    return tuple(float(x) for x in w / w.sum())
