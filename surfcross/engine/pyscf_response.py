"""The PySCF linear-response engine: SCF + CIS/TDA/TDHF/TDDFT states and analytic gradients.

What it computes for a :class:`MethodSpec`:

* closed-shell geometry, restricted reference (RHF, or RKS with ``xc``): manifold 'S' with S0
  and the excited singlets S1..; with ``triplet_roots`` > 0, manifold 'T' holds either the
  response triplets T1.. of the same reference (``triplets='response'``) or T1 as a separate
  M_S = 1 UHF/UKS SCF (``triplets='high-spin'``, one triplet only);
* open-shell geometry (spin > 0) or ``unrestricted``: UHF/UKS reference, manifold '' with the
  plain indices 0 (reference), 1, 2, ... (unrestricted TDA/TDHF/TDDFT).

Roots: ``roots`` excited states are asked; ``roots + 2`` are computed (room for state
tracking). Every asked root must converge (else :class:`ResponseNotConvergedError`); the
extra roots are reported only as far as they converged, contiguously from the bottom.

Counts: ``scf_cycles`` are SCF iterations (all attempts, all references); ``response_iterations``
are Davidson iterations, i.e. applications of the response matrix to a block of trial vectors,
summed over all solves and retries. <S^2> is reported for unrestricted references and for
unrestricted TDA/CIS states (exact for the CIS-type wavefunction); full-response (TDHF/TDDFT)
states have no wavefunction, so their <S^2> is left empty.

Instabilities: TDA keeps zero and negative roots (and warns below 0.1 eV); PySCF's full-response
solver keeps positive roots only, so an instability there shows up as a missing or
unconverged root instead: use TDA to see it.

Known limits (also printed by the command line): linear response from a closed-shell
reference gives S0/S1 crossings of the wrong dimensionality and no double excitations; full
TDDFT can become unstable near such crossings (TDA is more robust). Check results that
matter with a higher-level (multireference) method.
"""

from __future__ import annotations

import contextlib
import logging
import time
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..errors import EngineError, InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_states
from .base import EngineBase, Evaluation, MethodSpec, StateInfo
from .pyscf_records import (manifold_wavefunction, reference_spin_square, response_states)
from .pyscf_scf import (STABILITY_MODES, STABILITY_SPACING_BOHR, build_molecule,
                        check_functional, followed_note, instability_note, internal_stability,
                        run_reference, stabilize, warm_density)
from .pyscf_tdsolve import (EXTRA_ROOTS, ResponseRoots, excitation_dimension, make_response,
                            project_guess, solve_response)
from .wavefunction import ResponseWavefunction

__all__ = ["PySCFResponseEngine"]

logger = logging.getLogger(__name__)


@dataclass
class _Held:
    """PySCF objects of the last evaluated geometry (for gradients without recomputation)."""

    wavefunction: Any
    mf: Any
    responses: dict[str, ResponseRoots] = field(default_factory=dict)
    high_spin: Any = None
    gradient_objects: dict[str, Any] = field(default_factory=dict)


class PySCFResponseEngine(EngineBase):
    """SCF + linear-response states and analytic gradients from PySCF.

    Parameters
    ----------
    spec
        The method (any method except 'casscf').
    log_path
        File that receives PySCF's own output (appended); None discards it.
    warm_start
        Start each geometry from the previous one's orbitals (SCF density guess) and, for
        TDA/CIS, response vectors (Davidson guess, carried through the MO overlap). Off = cold
        starts, useful for benchmarks and when consecutive geometries are unrelated.
    stability
        Internal stability analysis of the SCF reference runs at the first geometry and
        again whenever an atom has moved more than STABILITY_SPACING_BOHR since the last
        analysis. A cold-started reference found unstable there is always replaced by the
        lower solution; a warm-started one is reported with the remedies ('report', default)
        or moved to the lower solution ('follow').
    """

    def __init__(self, spec: MethodSpec, *, log_path: str | None = None,
                 warm_start: bool = True, stability: str = "report") -> None:
        if spec.method == "casscf":
            raise InputError("method casscf is handled by the CASSCF engine, not the response one")
        if spec.triplets == "high-spin" and spec.triplet_roots > 1:
            raise InputError("the high-spin reference gives one triplet (T1) only; ask for 1 "
                             "triplet or use response triplets for more")
        check_functional(spec.xc)
        if stability not in STABILITY_MODES:
            raise InputError(f"unknown stability mode {stability!r}: choose "
                             f"{', '.join(STABILITY_MODES)}")
        self.spec = spec
        self.warm_start = warm_start
        self.stability = stability
        self._log = open(log_path, "a") if log_path else None
        self._verbose = 4 if log_path else 0
        self._held: _Held | None = None
        self._previous: dict[str, Any] = {}

    @property
    def has_couplings(self) -> bool:
        return False

    # ------------------------------------------------------------------ states
    def _pyscf_output(self) -> contextlib.AbstractContextManager:
        """While PySCF runs: its warnings to stderr go to the log file too (never the terminal)."""
        from pyscf import lib

        lib.num_threads(self.spec.threads)
        if self._log is None:
            return contextlib.nullcontext()
        return contextlib.redirect_stderr(self._log)

    def states(self, geometry: Geometry) -> Evaluation:
        """Energies, properties and wavefunction data of every computed state at ``geometry``."""
        with self._pyscf_output():
            return self._states(geometry)

    def _states(self, geometry: Geometry) -> Evaluation:
        spec = self.spec
        unrestricted = geometry.spin > 0 or spec.unrestricted
        if spec.triplet_roots and geometry.spin > 0:
            raise InputError("triplet roots are defined for closed-shell (spin 0) molecules; "
                             "for open shells all states are in the plain-index manifold")
        key = (geometry.symbols, geometry.charge, geometry.spin, spec)
        if self._previous.get("key") != key:
            self._previous = {"key": key}
        warnings: list[str] = []
        counts = {"scf": 0, "response": 0}
        times = {"scf": 0.0, "response": 0.0}
        manifold = "" if unrestricted else "S"
        mf = self._reference(geometry, geometry.spin, unrestricted, "ref", counts, times,
                             warnings)
        held = _Held(wavefunction=None, mf=mf)
        states: list[StateInfo] = [self._reference_state(mf, manifold, geometry.spin,
                                                         unrestricted, warnings)]
        manifolds = {}
        main = self._response(mf, manifold, spec.roots, True, counts, times, warnings)
        if main is not None:
            held.responses[manifold] = main
            states += response_states(mf, main, manifold, 1, True, warnings)
        manifolds[manifold] = manifold_wavefunction(
            mf, main, True, "unrestricted" if unrestricted else "singlet")
        if spec.triplet_roots:
            states += self._triplets(geometry, mf, unrestricted, held, manifolds, counts, times,
                                     warnings)
        wavefunction = ResponseWavefunction(
            symbols=geometry.symbols, coords_bohr=np.array(geometry.coords_bohr),
            basis=spec.basis, manifolds=manifolds, cartesian_basis=bool(mf.mol.cart))
        held.wavefunction = wavefunction
        self._held = held
        return Evaluation(
            geometry=geometry, states=tuple(states), wavefunction=wavefunction,
            scf_cycles=counts["scf"], response_iterations=counts["response"],
            timings_s=dict(times), warnings=tuple(warnings),
            homo=None if unrestricted else int((mf.mo_occ > 0).sum()) - 1)

    def _reference(self, geometry: Geometry, spin: int, unrestricted: bool, slot: str,
                   counts: dict, times: dict, warnings: list[str]) -> Any:
        start = time.perf_counter()
        mol = build_molecule(geometry, self.spec, spin, self._log, self._verbose)
        prev = self._previous.get(slot) if self.warm_start else None
        dm0 = warm_density(mol, prev["mo_coeff"], prev["mo_occ"]) if prev else None
        result = run_reference(mol, self.spec, unrestricted, dm0)
        if result.strategy != "diis":
            logger.info("SCF converged with the %s fallback", result.strategy)
        counts["scf"] += result.cycles
        mf = result.mf
        coords = np.asarray(geometry.coords_bohr)
        last = self._previous.get(f"analysed:{slot}")
        if last is None or np.abs(coords - last).max() > STABILITY_SPACING_BOHR:
            mf = self._analyse(mf, unrestricted, prev is not None, slot, counts, warnings)
            self._previous[f"analysed:{slot}"] = coords.copy()
        times["scf"] += time.perf_counter() - start
        self._previous[slot] = {"mo_coeff": np.array(mf.mo_coeff), "mo_occ": np.array(mf.mo_occ)}
        return mf

    def _analyse(self, mf: Any, unrestricted: bool, warm: bool, slot: str, counts: dict,
                 warnings: list[str]) -> Any:
        """Internal stability analysis of a converged reference (see ``stability``).

        A cold start moves to the lower solution without asking: nothing ties it to the
        unstable one, which warm starts would otherwise carry through the whole run.
        """
        label = "T1" if slot == "high-spin" else ("0" if unrestricted and slot == "ref" else "S0")
        if warm and self.stability == "report":
            stable, _ = internal_stability(mf)
            if not stable:
                warnings.append(instability_note(self.spec, unrestricted, label))
            return mf
        new, extra, _ = stabilize(mf, self.spec, unrestricted)
        counts["scf"] += extra
        if warm and new is not mf:
            warnings.append(followed_note(self.spec, unrestricted, label))
        return new

    def _reference_state(self, mf: Any, manifold: str, spin: int, unrestricted: bool,
                         warnings: list[str]) -> StateInfo:
        label = StateLabel(manifold, 0)
        s2 = reference_spin_square(mf, label, spin, warnings) if unrestricted else None
        return StateInfo(label=label, energy_eh=float(mf.e_tot), spin_square=s2)

    def _response(self, mf: Any, manifold: str, nroots: int, singlet: bool, counts: dict,
                  times: dict, warnings: list[str]) -> ResponseRoots | None:
        if nroots == 0:
            return None
        start = time.perf_counter()
        spec = self.spec
        unrestricted = np.ndim(mf.mo_occ) == 2
        full = spec.method in ("tdhf", "tddft")
        td = make_response(mf, spec.method, unrestricted, singlet, spec.response_conv_tol)
        slot = f"response:{manifold}"
        # Only the Hermitian (TDA/CIS) solver is warm-started: PySCF's non-Hermitian solver
        # took more iterations from projected (X, Y) than from its own orbital-energy guess
        # in our checks (water, formaldehyde; STO-3G and 6-31G), so full response starts cold.
        prev = self._previous.get(slot) if self.warm_start and not full else None
        wanted = min(nroots + EXTRA_ROOTS, excitation_dimension(mf))
        x0 = project_guess(prev, mf.mol, mf, wanted) if prev else None
        what = {"S": "singlet response", "T": "triplet response"}.get(manifold, "response")
        roots = solve_response(td, nroots, full=full, unrestricted=unrestricted, x0=x0, what=what)
        warnings += roots.notes
        counts["response"] += roots.iterations
        times["response"] += time.perf_counter() - start
        self._previous[slot] = {"mol": mf.mol, "mo_coeff": np.array(mf.mo_coeff),
                                "mo_occ": np.array(mf.mo_occ), "xy": list(td.xy),
                                "unrestricted": unrestricted, "full": full}
        return roots

    def _triplets(self, geometry: Geometry, mf: Any, unrestricted: bool, held: _Held,
                  manifolds: dict, counts: dict, times: dict, warnings: list[str]) -> list[StateInfo]:
        spec = self.spec
        if spec.triplets == "high-spin":
            hs = self._reference(geometry, 2, True, "high-spin", counts, times, warnings)
            held.high_spin = hs
            label = StateLabel("T", 1)
            s2 = reference_spin_square(hs, label, 2, warnings)
            manifolds["T"] = manifold_wavefunction(hs, None, True, "unrestricted")
            return [StateInfo(label=label, energy_eh=float(hs.e_tot), spin_square=s2)]
        if unrestricted:
            warnings.append("response triplets were not computed separately: with an "
                            "unrestricted reference, singlet and triplet (M_S = 0) excitations "
                            "are mixed in the plain-index manifold")
            return []
        roots = self._response(mf, "T", spec.triplet_roots, False, counts, times, warnings)
        held.responses["T"] = roots
        manifolds["T"] = manifold_wavefunction(mf, roots, False, "triplet")
        return response_states(mf, roots, "T", 1, False, warnings)

    # ------------------------------------------------------------------ gradients
    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel | str],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        """``evaluation`` plus analytic gradients (natom, 3), Eh/bohr, of ``labels``."""
        if couplings:
            raise EngineError("the PySCF response engine has no interstate coupling vectors; "
                              "use a crossing search that does not need them")
        held = self._held
        if held is None or evaluation.wavefunction is not held.wavefunction:
            raise EngineError("gradients were asked for an evaluation this engine no longer "
                              "holds (only the most recent geometry is kept); call states() "
                              "again at that geometry")
        start = time.perf_counter()
        new = {}
        with self._pyscf_output():
            for label in parse_states(labels):
                evaluation.state(label)  # raises InputError for a state that was not computed
                if label not in evaluation.gradients:
                    new[label] = self._gradient(held, label)
        return evaluation.with_gradients(new, timings_s={"gradients": time.perf_counter() - start})

    def _gradient(self, held: _Held, label: StateLabel) -> np.ndarray:
        if label.manifold == "T" and held.high_spin is not None:
            key, obj, root = "high-spin", held.high_spin, 0
        elif label.index == 0:
            key, obj, root = "ref", held.mf, 0
        else:
            key, obj, root = label.manifold, held.responses[label.manifold].td, label.index
        grad = held.gradient_objects.get(key)
        try:
            if grad is None:
                grad = obj.nuc_grad_method()
                grad.verbose = self._verbose
                held.gradient_objects[key] = grad
            # PySCF numbers excited roots from 1, as surfcross labels do within a manifold
            value = grad.kernel() if root == 0 else grad.kernel(state=root)
        except NotImplementedError as exc:
            raise EngineError(f"PySCF has no analytic gradient for {label} with "
                              f"{self.spec.method}/{self.spec.reference}: {exc}") from None
        return np.array(value, float)

    # ------------------------------------------------------------------ symmetry
    def with_irreps(self, evaluation: Evaluation, tolerance_bohr: float | None = None) -> Evaluation:
        """``evaluation`` with its point group and the irrep of every state (input frame; the
        surfaces are not touched, see :mod:`surfcross.engine.symmetry`)."""
        from .symmetry import TOLERANCE_BOHR, find_point_group, label_irreps, state_irreps

        geometry = evaluation.geometry
        tol = TOLERANCE_BOHR if tolerance_bohr is None else tolerance_bohr
        group = find_point_group(geometry.symbols, geometry.coords_bohr, tol)
        if group.name == "C1":
            return label_irreps(evaluation, {s.label: "A" for s in evaluation.states}, group)
        mol = build_molecule(geometry, self.spec, geometry.spin, None, 0)
        return label_irreps(evaluation, state_irreps(evaluation, group, mol), group)

    def check_reference(self, evaluation: Evaluation) -> list[str]:
        """Internal stability analysis of the references behind ``evaluation`` (the last one
        computed), unless it ran at that geometry already; for the end of a run. Returns
        warnings (never moves to another solution: the run is over)."""
        held = self._held
        if held is None or evaluation.wavefunction is not held.wavefunction:
            return []
        coords = np.asarray(evaluation.geometry.coords_bohr)
        unrestricted = np.ndim(held.mf.mo_occ) == 2
        notes = []
        with self._pyscf_output():
            for slot, mf, label in (("ref", held.mf, "0" if unrestricted else "S0"),
                                    ("high-spin", held.high_spin, "T1")):
                last = self._previous.get(f"analysed:{slot}")
                if mf is None or (last is not None and np.array_equal(last, coords)):
                    continue
                stable, _ = internal_stability(mf)
                if not stable:
                    notes.append(instability_note(self.spec, np.ndim(mf.mo_occ) == 2, label)
                                 .replace("became unstable", "is unstable at the final geometry"))
        return notes

    # ------------------------------------------------------------------ the rest
    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        """Wavefunction overlaps per manifold (delegated to the overlap module)."""
        from .pyscf_overlap import response_state_overlaps

        return response_state_overlaps(bra, ket)

    def forget_guess(self) -> None:
        """Start the next geometry cold (no orbitals or response vectors carried over)."""
        self._previous = {}

    def close(self) -> None:
        """Drop the held PySCF objects and warm-start data; close the PySCF log file."""
        self._held = None
        self._previous = {}
        if self._log is not None:
            self._log.close()
            self._log = None
        self._verbose = 0  # without its log file PySCF would write to the terminal

