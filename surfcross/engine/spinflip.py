"""Spin-flip TDA engine: S0, S1, ... and M_S = 0 triplets from one high-spin reference.

What it computes for a closed-shell molecule (``Geometry.spin == 0``) and ``method='sf-tda'``:

* an M_S = 1 unrestricted Kohn-Sham reference (UKS with ``MethodSpec.xc``, default BHandHLYP,
  50 % exact exchange; ``xc='hf'`` gives Hartree-Fock exchange), converged with the response
  engine's SCF fallbacks, stabilized on cold starts, warm-started from the previous geometry;
* spin-flip-down Tamm-Dancoff excitations (alpha occupied -> beta virtual, pyscf-forge's
  ``pyscf.sftda`` with ``extype = 1``) with the collinear or the multicollinear kernel
  (``MethodSpec.spin_flip_kernel``); all M_S = 0 states, S0 included, are response states on
  an equal footing, so S0 couples to S1 and their intersections are conical;
* <S^2> of every state (pyscf-forge's spin-flip formula; checked against PySCF's FCI <S^2> of
  the same determinant expansion in tests/test_spinflip_engine.py), labels S0, S1, ... and
  T1, ... by <S^2> (see :mod:`.spinflip_states`), oscillator strengths from S0;
* analytic gradients of any listed state (pyscf-forge's ``pyscf.grad.tduks_sf``, both kernels;
  they agree with central finite differences to about 5e-6 Eh/bohr in our checks: ethylene
  and water, STO-3G, BHandHLYP and Hartree-Fock exchange);
* exact overlaps of the spin-flip determinant expansions between geometries
  (:mod:`.spinflip_overlap`), per spin class 'S' and 'T'.

Roots: enough spin-flip roots are solved for ``roots + 1`` singlets (S0..S{roots}) and
``triplet_roots`` triplets plus two singlets of room for tracking; the count grows until the
classification finds them. No coupling vectors: crossing searches use the branching-plane
update. Known limits: :data:`~.spinflip_states.SPIN_FLIP_LIMITS` (also ``limits_note``).
"""

from __future__ import annotations

import contextlib
import logging
import time
from dataclasses import dataclass, field, replace
from typing import Any, Sequence

import numpy as np

from ..errors import EngineError, InputError
from ..geometry import Geometry
from ..states import SINGLET, TRIPLET, StateLabel, parse_states
from .base import SPIN_FLIP, EngineBase, Evaluation, MethodSpec, StateInfo
from .pyscf_scf import build_molecule, check_functional, run_reference, stabilize, warm_density
from .spinflip_overlap import spin_flip_overlaps
from .spinflip_solve import (SpinFlipRoots, import_spin_flip, make_solver, project_amplitudes,
                             solve_spin_flip)
from .spinflip_states import (SPIN_FLIP_LIMITS, classify_roots, contamination_warning,
                              spin_flip_transitions)

__all__ = ["SpinFlipEngine", "SpinFlipWavefunction"]

logger = logging.getLogger(__name__)

#: singlets computed above the highest one asked (room for state tracking)
EXTRA_SINGLETS = 2
#: rounds of growing the number of roots until the classification finds the states asked, and
#: the largest number of roots solved, as a multiple of the first count
MAX_ROUNDS = 3
MAX_GROWTH = 3
#: Z-vector (CPHF) convergence of the gradients; PySCF's default 1e-8 leaves ~1e-6 Eh/bohr
CPHF_CONV_TOL = 1e-9
#: reference <S^2> allowed to deviate from 2 by this much before a warning
REFERENCE_S2_DEVIATION = 0.1


@dataclass(frozen=True)
class SpinFlipWavefunction:
    """Plain arrays for overlaps between geometries (no PySCF objects).

    ``amplitudes[k]`` is root k (nocc_alpha, nvir_beta); ``roots[m]`` lists, for the spin class
    m ('S' or 'T'), the root numbers in the order of ``Evaluation.manifold(m)``.
    """

    symbols: tuple[str, ...]
    coords_bohr: np.ndarray
    basis: str
    mo_coeff: np.ndarray  # (2, nao, nmo) of the M_S = 1 reference
    mo_occ: np.ndarray  # (2, nmo)
    amplitudes: np.ndarray  # (nroots, nocc_alpha, nvir_beta)
    spin_squares: tuple[float, ...]
    roots: dict[str, tuple[int, ...]] = field(default_factory=dict)
    cartesian_basis: bool = False


@dataclass
class _Held:
    wavefunction: SpinFlipWavefunction
    roots: SpinFlipRoots
    root_of: dict[StateLabel, int]
    gradient: Any = None


class SpinFlipEngine(EngineBase):
    """Spin-flip TDA states and analytic gradients from pyscf-forge.

    Parameters
    ----------
    spec
        A MethodSpec with ``method='sf-tda'``.
    log_path
        File that receives PySCF's own output (appended); None discards it.
    warm_start
        Start each geometry from the previous orbitals and spin-flip vectors.
    """

    limits_note = SPIN_FLIP_LIMITS

    def __init__(self, spec: MethodSpec, *, log_path: str | None = None,
                 warm_start: bool = True) -> None:
        if spec.method != SPIN_FLIP:
            raise InputError(f"the spin-flip engine computes method {SPIN_FLIP}, not {spec.method}")
        import_spin_flip()
        check_functional(spec.xc)
        self.spec = spec
        self.warm_start = warm_start
        self._log = open(log_path, "a") if log_path else None
        self._verbose = 4 if log_path else 0
        self._held: _Held | None = None
        self._previous: dict[str, Any] = {}
        self._continuity: dict[int, dict[str, str]] = {}
        self._warned: set[tuple[str, bool]] = set()

    @property
    def has_couplings(self) -> bool:
        return False

    def _pyscf_output(self) -> contextlib.AbstractContextManager:
        from pyscf import lib

        lib.num_threads(self.spec.threads)
        if self._log is None:
            return contextlib.nullcontext()
        return contextlib.redirect_stderr(self._log)

    # ------------------------------------------------------------------ states
    def states(self, geometry: Geometry) -> Evaluation:
        """Energies, <S^2>, oscillator strengths and wavefunction data of the listed states."""
        if geometry.spin != 0:
            raise InputError("spin-flip TDA starts from the M_S = 1 triplet of a closed-shell "
                             f"molecule: give the molecule spin 0 (2S), not {geometry.spin}; "
                             "its singlets and triplets come from the spin flip")
        with self._pyscf_output():
            return self._states(geometry)

    def _states(self, geometry: Geometry) -> Evaluation:
        key = (geometry.symbols, geometry.charge, self.spec)
        if self._previous.get("key") != key:
            self._previous = {"key": key}
        warnings: list[str] = []
        times = {}
        start = time.perf_counter()
        mf, cycles = self._reference(geometry, warnings)
        times["scf"] = time.perf_counter() - start
        start = time.perf_counter()
        roots, labels = self._solve(mf, warnings)
        times["response"] = time.perf_counter() - start
        states, root_of, s2 = self._records(mf, roots, labels)
        wavefunction = SpinFlipWavefunction(
            symbols=geometry.symbols, coords_bohr=np.array(geometry.coords_bohr),
            basis=self.spec.basis, mo_coeff=np.array(mf.mo_coeff), mo_occ=np.array(mf.mo_occ),
            amplitudes=roots.amplitudes(), spin_squares=tuple(float(v) for v in s2),
            roots={m: tuple(root_of[s.label] for s in states if s.label.manifold == m)
                   for m in (SINGLET, TRIPLET)},
            cartesian_basis=bool(mf.mol.cart))
        self._held = _Held(wavefunction=wavefunction, roots=roots, root_of=root_of)
        self._previous["response"] = {"mol": mf.mol, "mo_coeff": np.array(mf.mo_coeff),
                                      "mo_occ": np.array(mf.mo_occ),
                                      "amplitudes": roots.amplitudes()}
        return Evaluation(geometry=geometry, states=tuple(states), wavefunction=wavefunction,
                          scf_cycles=cycles, response_iterations=roots.iterations,
                          timings_s=times, warnings=tuple(warnings))

    def _reference(self, geometry: Geometry, warnings: list[str]) -> tuple[Any, int]:
        mol = build_molecule(geometry, self.spec, 2, self._log, self._verbose)
        prev = self._previous.get("scf") if self.warm_start else None
        dm0 = warm_density(mol, prev["mo_coeff"], prev["mo_occ"]) if prev else None
        result = run_reference(mol, self.spec, True, dm0)
        mf, cycles = result.mf, result.cycles
        if prev is None:
            mf, extra, stable = stabilize(mf, self.spec, True)
            cycles += extra
            if not stable:
                warnings.append("the M_S = 1 reference stays internally unstable after "
                                "following its instabilities: the spin-flip states rest on a "
                                "saddle point of the SCF; try another start geometry or functional")
        self._previous["scf"] = {"mo_coeff": np.array(mf.mo_coeff), "mo_occ": np.array(mf.mo_occ)}
        s2 = float(mf.spin_square()[0])
        if abs(s2 - 2.0) > REFERENCE_S2_DEVIATION:
            warnings.append(f"the M_S = 1 reference has <S^2> = {s2:.3f} instead of 2 (spin "
                            "contamination): every spin-flip state inherits it; check the "
                            "reference, or use a functional with more exact exchange")
        return mf, cycles

    def _solve(self, mf: Any, warnings: list[str]) -> tuple[SpinFlipRoots, list]:
        spec = self.spec
        want_s, want_t = spec.roots + 1, spec.triplet_roots
        td = make_solver(mf, spec.spin_flip_kernel, spec.response_conv_tol)
        prev = self._previous.get("response") if self.warm_start else None
        guess = project_amplitudes(prev, mf.mol, mf) if prev else None
        first = want_s + want_t + EXTRA_SINGLETS + 2
        nstates, iterations = first, 0
        for _ in range(MAX_ROUNDS):
            roots = solve_spin_flip(td, nstates, nstates - 2, guess)
            iterations += roots.iterations
            labels, _ = classify_roots(roots.excitation_eh,
                                       self._spin_squares(td, roots.nconverged))
            n_s = sum(1 for lab in labels if lab is not None and lab.manifold == SINGLET)
            n_t = sum(1 for lab in labels if lab is not None and lab.manifold == TRIPLET)
            # grow only for missing asked states: singlet-like roots can be rare (in small
            # bases only the configurations inside the two open-shell orbitals are)
            missing = max(0, want_s - n_s) + max(0, want_t - n_t)
            if missing == 0 or nstates >= min(self._dimension(mf), MAX_GROWTH * first):
                break
            nstates += 2 * missing + 2
            guess = roots.amplitudes().reshape(roots.nconverged, -1)
        roots.iterations = iterations
        if n_s < want_s or n_t < want_t:
            raise EngineError(f"spin-flip TDA found {n_s} singlet-like and {n_t} triplet-like "
                              f"states among its lowest {roots.nconverged} roots, fewer than the "
                              f"{want_s} singlets and {want_t} triplets asked; ask for fewer "
                              "states (spin-flip TDA has few singlet-like states in small bases)")
        if n_s < want_s + EXTRA_SINGLETS:
            logger.debug("spin-flip TDA: %d singlet(s) above the asked ones", n_s - want_s)
        return roots, labels

    @staticmethod
    def _dimension(mf: Any) -> int:
        return int((mf.mo_occ[0] > 0).sum()) * int((mf.mo_occ[1] == 0).sum())

    @staticmethod
    def _spin_squares(td: Any, n: int) -> np.ndarray:
        return np.atleast_1d(np.asarray(td.spin_square(state=np.arange(1, n + 1)), float))

    def _records(self, mf: Any, roots: SpinFlipRoots,
                 labels: list) -> tuple[list, dict, np.ndarray]:
        td = roots.td
        s2 = self._spin_squares(td, roots.nconverged)
        e_exc = roots.excitation_eh
        amps = roots.amplitudes()
        nocc_b = int((mf.mo_occ[1] > 0).sum())
        root_of = {lab: k for k, lab in enumerate(labels) if lab is not None}
        ground = root_of[StateLabel(SINGLET, 0)]
        others = np.array([k + 1 for k in range(roots.nconverged) if k != ground])
        f = np.atleast_1d(td.oscillator_strength(ref=ground + 1, state=others)) \
            if len(others) else []
        strength = {int(k) - 1: float(v) for k, v in zip(others, f)}
        states = []
        for manifold in (SINGLET, TRIPLET):
            mine = sorted((lab, k) for lab, k in root_of.items() if lab.manifold == manifold)
            for lab, k in mine:
                states.append(StateInfo(
                    label=lab, energy_eh=float(mf.e_tot + e_exc[k]),
                    oscillator_strength=strength.get(k), spin_square=float(s2[k]),
                    transitions=spin_flip_transitions(amps[k], nocc_b)))
        return states, root_of, s2

    # ------------------------------------------------------------------ gradients
    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel | str],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        """``evaluation`` plus analytic gradients (natom, 3), Eh/bohr, of ``labels``; adds
        warnings for followed states that are strongly contaminated or changed spin class."""
        if couplings:
            raise EngineError("the spin-flip engine has no interstate coupling vectors; use a "
                              "crossing search that does not need them (branching-plane update)")
        held = self._held
        if held is None or evaluation.wavefunction is not held.wavefunction:
            raise EngineError("gradients were asked for an evaluation this engine no longer "
                              "holds (only the most recent geometry is kept); call states() "
                              "again at that geometry")
        start = time.perf_counter()
        new, notes = {}, []
        with self._pyscf_output():
            for label in parse_states(labels):
                state = evaluation.state(label)  # InputError for a state not computed
                text = contamination_warning(state)
                if text:
                    notes.append(text)
                if label not in evaluation.gradients:
                    new[label] = self._gradient(held, label)
        changes = self._continuity.pop(id(evaluation.wavefunction), {})
        notes += [text for key, text in changes.items()
                  if key == "" or key in {str(lab) for lab in parse_states(labels)}]
        for text in notes:
            # on the terminal once per kind and state; every evaluation keeps its own warnings
            key = (text.split(" ")[0].rstrip(":"), "contaminated" in text)
            (logger.debug if key in self._warned else logger.warning)(text)
            self._warned.add(key)
        out = evaluation.with_gradients(new, timings_s={"gradients": time.perf_counter() - start})
        fresh = tuple(t for t in notes if t not in out.warnings)
        return replace(out, warnings=out.warnings + fresh) if fresh else out

    def _gradient(self, held: _Held, label: StateLabel) -> np.ndarray:
        if held.gradient is None:
            grad = held.roots.td.nuc_grad_method()
            grad.verbose = self._verbose
            grad.cphf_conv_tol = CPHF_CONV_TOL
            held.gradient = grad
        try:
            # pyscf numbers the spin-flip roots from 1
            value = held.gradient.kernel(state=held.root_of[label] + 1)
        except NotImplementedError as exc:
            raise EngineError(f"pyscf-forge has no analytic spin-flip gradient for "
                              f"{self.spec.reference}: {exc}") from None
        return np.array(value, float)

    # ------------------------------------------------------------------ overlaps
    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        """Overlap matrices <bra_I|ket_J> for the spin classes 'S' and 'T'.

        Also notes, for the next gradients() call at ``ket``, states whose best match lies in
        the other spin class (their spin character changed between the geometries).
        """
        from .pyscf_overlap import cross_ao_overlap

        wb, wk = bra.wavefunction, ket.wavefunction
        if not isinstance(wb, SpinFlipWavefunction) or not isinstance(wk, SpinFlipWavefunction):
            raise InputError("these evaluations carry no spin-flip wavefunction data, so states "
                             "cannot be compared between geometries")
        full = spin_flip_overlaps(wb.mo_coeff, wb.mo_occ, wb.amplitudes, wk.mo_coeff, wk.mo_occ,
                                  wk.amplitudes, cross_ao_overlap(wb, wk))
        out = {m: full[np.ix_(np.asarray(wb.roots.get(m, ()), int),
                              np.asarray(wk.roots.get(m, ()), int))] for m in (SINGLET, TRIPLET)}
        # only the latest ket is kept: gradients() follows the overlaps of its own geometry
        self._continuity = {id(wk): _class_changes(bra, ket, full)}
        return out

    def close(self) -> None:
        """Drop the held PySCF objects and warm-start data; close the PySCF log file."""
        self._held = None
        self._previous = {}
        self._continuity = {}
        self._warned = set()
        if self._log is not None:
            self._log.close()
            self._log = None
        self._verbose = 0


def _class_changes(bra: Evaluation, ket: Evaluation, full: np.ndarray) -> dict[str, str]:
    """Notes on states whose largest overlap across the two geometries lies in the other spin
    class: keyed by the ket label that continues a state of other class, and '' for a state
    followed at ``bra`` (it has a gradient there) that continues as a state of other class."""
    wb, wk = bra.wavefunction, ket.wavefunction
    label_b = {k: s.label for m in (SINGLET, TRIPLET) for k, s in zip(wb.roots[m], bra.manifold(m))}
    label_k = {k: s.label for m in (SINGLET, TRIPLET) for k, s in zip(wk.roots[m], ket.manifold(m))}
    out: dict[str, str] = {}
    tail = ("spin-flip states mix singlet and triplet character; check this region with a "
            "spin-adapted method")
    for col, lab in label_k.items():
        row = int(np.argmax(np.abs(full[:, col])))
        before = label_b.get(row)
        if before is not None and before.manifold != lab.manifold:
            out[str(lab)] = (f"{lab} here continues {before} of the previous geometry: its spin "
                             f"character changed (<S^2> {wb.spin_squares[row]:.2f} -> "
                             f"{wk.spin_squares[col]:.2f}); {tail}")
    lost = []
    for row, lab in label_b.items():
        col = int(np.argmax(np.abs(full[row, :])))
        after = label_k.get(col)
        if lab in bra.gradients and after is not None and after.manifold != lab.manifold:
            lost.append(f"{lab} (followed at the previous geometry, <S^2> "
                        f"{wb.spin_squares[row]:.2f}) continues here as {after} (<S^2> "
                        f"{wk.spin_squares[col]:.2f}) of the other spin class, where it cannot "
                        "be followed")
    if lost:
        out[""] = "; ".join(lost) + f"; {tail}"
    return out
