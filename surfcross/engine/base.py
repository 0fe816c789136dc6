"""The engine contract: what an electronic-structure backend computes at one geometry.

An engine is constructed with a :class:`MethodSpec` and answers, for a :class:`Geometry`:

* :meth:`Engine.states` -- energies of every computed state, properties (oscillator strengths,
  <S^2>, dominant transitions) and the wavefunction data needed for overlaps. No gradients.
* :meth:`Engine.gradients` -- the same evaluation plus analytic gradients of the given
  (adiabatic) labels, and interstate coupling vectors for pairs when the engine has them.
  Two phases, because the state tracker must see the wavefunctions before deciding whose
  gradient is wanted.
* :meth:`Engine.overlaps` -- wavefunction overlap matrices between two evaluations, one per
  spin manifold.

Labels in an :class:`Evaluation` are adiabatic at that geometry: ``S1`` is the lowest excited
singlet there. The tracker maps the states a task follows onto these labels.
PySCF lives in ``engine/`` and nowhere else; units are bohr and hartree.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping, Protocol, Sequence, runtime_checkable

import numpy as np

from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state
from ..units import HARTREE_IN_EV

__all__ = [
    "METHODS",
    "TRIPLET_MODES",
    "SPIN_FLIP",
    "SPIN_FLIP_KERNELS",
    "SPIN_FLIP_DEFAULT_XC",
    "MethodSpec",
    "Transition",
    "StateInfo",
    "Evaluation",
    "Engine",
    "EngineBase",
]

#: linear-response methods of the PySCF response engine; 'casscf' is the state-averaged engine
METHODS = ("cis", "tda", "tdhf", "tddft", "casscf")
TRIPLET_MODES = ("response", "high-spin")
#: spin-flip TDA (engine/spinflip.py, optional extra): accepted by MethodSpec and make_engine;
#: not yet among the command line's METHODS (the search choice and limits text come later)
SPIN_FLIP = "sf-tda"
SPIN_FLIP_KERNELS = ("collinear", "multicollinear")
#: the functional spin-flip TDA uses when none is given: about 50 % exact exchange (libxc's
#: BHandHLYP = 0.5 HF + 0.5 Becke-88 exchange + LYP correlation, the usual BHHLYP choice)
SPIN_FLIP_DEFAULT_XC = "bhandhlyp"


@dataclass(frozen=True, kw_only=True)
class MethodSpec:
    """How the states are computed. Charge and spin belong to the :class:`Geometry`.

    Parameters
    ----------
    method
        'cis' (Hartree-Fock + Tamm-Dancoff), 'tda' (TDA on HF or DFT), 'tdhf' (full linear
        response on HF), 'tddft' (full linear response on DFT), 'casscf' (state-averaged CASSCF).
    xc
        Exchange-correlation functional as PySCF names it ('b3lyp', 'pbe0', 'camb3lyp', ...);
        None for Hartree-Fock.
    basis
        Basis set name as PySCF knows it.
    roots
        Number of excited states computed in the singlet (or open-shell) manifold.
    triplet_roots
        Number of response triplets computed from a closed-shell reference (0 = none).
    unrestricted
        Use an unrestricted reference even for closed shells.
    triplets
        'response' (T1.. from linear response of the closed-shell reference) or 'high-spin'
        (T1 is a separate M_S = 1 unrestricted SCF).
    spin_flip_kernel
        'sf-tda' only: 'collinear' (only exact exchange couples the spin-flipped
        configurations) or 'multicollinear' (the functional's own spin-flip kernel, slower).
        For 'sf-tda' ``xc`` defaults to BHandHLYP; 'none'/'hf' means Hartree-Fock exchange.
    """

    method: str = "tda"
    xc: str | None = None
    basis: str = "sto-3g"
    roots: int = 3
    triplet_roots: int = 0
    unrestricted: bool = False
    triplets: str = "response"
    scf_conv_tol: float = 1e-10
    response_conv_tol: float = 1e-6
    grid_level: int = 3
    max_memory_mb: int = 4000
    threads: int = 1
    # state-averaged CASSCF only
    active_space: tuple[int, int] | None = None  # (electrons, orbitals)
    active_orbitals: tuple[int, ...] | None = None  # 1-based MO indices, PySCF's convention
    state_weights: tuple[float, ...] | None = None
    # spin-flip TDA only
    spin_flip_kernel: str = "collinear"

    def __post_init__(self) -> None:
        method = self.method.lower()
        object.__setattr__(self, "method", method)
        xc = self.xc
        hartree_fock = isinstance(xc, str) and xc.strip().lower() in ("", "none", "hf")
        if method == SPIN_FLIP:
            # always a string (UKS), so that copies made with replace() keep the choice
            xc = SPIN_FLIP_DEFAULT_XC if xc is None else ("hf" if hartree_fock else xc)
        elif hartree_fock:
            xc = None
        object.__setattr__(self, "xc", xc)
        if method not in METHODS + (SPIN_FLIP,):
            raise InputError(f"unknown method {self.method!r}: choose one of {', '.join(METHODS)}")
        self._check_spin_flip(method)
        if method in ("cis", "tdhf") and xc is not None:
            raise InputError(f"method {method} is Hartree-Fock based; drop the functional "
                             f"(--xc none) or use {'tda' if method == 'cis' else 'tddft'}")
        if method == "tddft" and xc is None:
            raise InputError("method tddft needs a functional (--xc, e.g. b3lyp); "
                             "with Hartree-Fock use tdhf")
        if self.triplets not in TRIPLET_MODES:
            raise InputError(f"unknown triplet mode {self.triplets!r}: choose response or high-spin")
        if self.roots < 0 or self.triplet_roots < 0:
            raise InputError("the number of roots must be >= 0")
        if self.grid_level < 1:
            raise InputError(f"DFT grid level must be >= 1, got {self.grid_level}")
        if self.threads < 1:
            raise InputError(f"threads must be >= 1, got {self.threads}")
        if method == "casscf" and self.active_space is None:
            raise InputError("method casscf needs an active space (electrons, orbitals)")
        if self.active_space is not None:
            ne, no = self.active_space
            if ne < 1 or no < 1 or ne > 2 * no:
                raise InputError(f"active space ({ne} electrons, {no} orbitals) is impossible")

    def _check_spin_flip(self, method: str) -> None:
        if self.spin_flip_kernel not in SPIN_FLIP_KERNELS:
            raise InputError(f"unknown spin-flip kernel {self.spin_flip_kernel!r}: choose "
                             f"{' or '.join(SPIN_FLIP_KERNELS)}")
        if method != SPIN_FLIP:
            if self.spin_flip_kernel != "collinear":
                raise InputError("a spin-flip kernel applies to method sf-tda only")
            return
        if self.triplets != "response":
            raise InputError("sf-tda computes its triplets as spin-flip states; drop the "
                             "high-spin triplet mode")
        if self.active_space is not None or self.state_weights is not None:
            raise InputError("active spaces and state weights belong to method casscf, not sf-tda")

    @property
    def reference(self) -> str:
        """'HF' or the functional name, for reports."""
        return "HF" if self.xc is None or self.xc.lower() == "hf" else self.xc.upper()

    def with_updates(self, **changes: Any) -> "MethodSpec":
        return replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        out = {k: getattr(self, k) for k in self.__dataclass_fields__}
        for k, v in out.items():
            if isinstance(v, tuple):
                out[k] = list(v)
        return out


@dataclass(frozen=True)
class Transition:
    """A dominant orbital transition of an excited state (0-based MO indices)."""

    occupied: int
    virtual: int
    weight: float  # fraction of the state's norm, 0..1
    spin: str = ""  # '' restricted, 'a' alpha, 'b' beta, 'ab' alpha -> beta (spin flip)

    def describe(self, homo: int | None = None) -> str:
        """'HOMO-1 -> LUMO (0.93)' when the HOMO index is known, else MO numbers (1-based)."""
        def name(i: int) -> str:
            if homo is None:
                return str(i + 1)
            if i <= homo:
                return "HOMO" if i == homo else f"HOMO-{homo - i}"
            return "LUMO" if i == homo + 1 else f"LUMO+{i - homo - 1}"
        if self.spin == "ab":  # spin flip: alpha occupied -> beta virtual
            return f"{name(self.occupied)}(a) -> {name(self.virtual)}(b) ({self.weight:.2f})"
        tag = {"a": "(a)", "b": "(b)"}.get(self.spin, "")
        return f"{name(self.occupied)}{tag} -> {name(self.virtual)}{tag} ({self.weight:.2f})"


@dataclass(frozen=True)
class StateInfo:
    """One computed state at one geometry.

    ``root`` is the adiabatic index inside the manifold (equal to ``label.index``). ``irrep``
    is the state's irreducible representation in the geometry's abelian point group
    (``Evaluation.point_group``) when it was determined (see ``engine.symmetry``), else None.
    """

    label: StateLabel
    energy_eh: float
    oscillator_strength: float | None = None
    spin_square: float | None = None
    transitions: tuple[Transition, ...] = ()
    converged: bool = True
    irrep: str | None = None


@dataclass(frozen=True)
class Evaluation:
    """Everything an engine computed at one geometry. Immutable.

    Attributes
    ----------
    geometry
        Where the states were computed.
    states
        All computed states: reference first, then excited states of each manifold in energy
        order (S0, S1, ..., T1, ...).
    gradients
        Analytic gradients (natom, 3), Eh/bohr, keyed by adiabatic label.
    couplings
        Interstate coupling vectors h = (E_j - E_i) d_ij, (natom, 3), Eh/bohr, keyed by an
        ordered pair of labels (lower, upper); only engines with derivative couplings fill it.
    wavefunction
        Engine-specific data for :meth:`Engine.overlaps` (MO coefficients, occupations,
        amplitudes, basis at this geometry). Treat as opaque outside the engine.
    """

    geometry: Geometry
    states: tuple[StateInfo, ...]
    gradients: Mapping[StateLabel, np.ndarray] = field(default_factory=dict)
    couplings: Mapping[tuple[StateLabel, StateLabel], np.ndarray] = field(default_factory=dict)
    wavefunction: Any = None
    scf_cycles: int = 0
    response_iterations: int = 0
    timings_s: Mapping[str, float] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    homo: int | None = None  # 0-based index of the highest occupied MO (restricted)
    point_group: str | None = None  # abelian point group of the irreps in ``states``, if found

    def irreps(self) -> dict[str, str | None]:
        """{label: irrep or None} of every computed state (all None without symmetry)."""
        return {str(s.label): s.irrep for s in self.states}

    @property
    def labels(self) -> tuple[StateLabel, ...]:
        return tuple(s.label for s in self.states)

    def state(self, label: StateLabel | str) -> StateInfo:
        label = parse_state(label)
        for s in self.states:
            if s.label == label:
                return s
        raise InputError(
            f"state {label} was not computed here (computed: "
            f"{', '.join(str(s.label) for s in self.states)}); ask for more roots"
        )

    def energy(self, label: StateLabel | str) -> float:
        return self.state(label).energy_eh

    def gradient(self, label: StateLabel | str) -> np.ndarray:
        label = parse_state(label)
        try:
            return self.gradients[label]
        except KeyError:
            raise KeyError(f"no gradient was computed for {label}") from None

    def energies(self) -> dict[str, float]:
        """{label: energy (Eh)} for every computed state."""
        return {str(s.label): s.energy_eh for s in self.states}

    def reference_energy(self) -> float:
        """Energy of the lowest state of the reference manifold (S0 or 0)."""
        return min(s.energy_eh for s in self.states if s.label.index == 0 or s.label.manifold == "T")

    def excitation_ev(self, label: StateLabel | str) -> float:
        """Energy above the reference state (S0 / 0), eV."""
        ref = [s for s in self.states if s.label.is_reference]
        base = ref[0].energy_eh if ref else min(s.energy_eh for s in self.states)
        return (self.energy(label) - base) * HARTREE_IN_EV

    def manifold(self, manifold: str) -> tuple[StateInfo, ...]:
        """States of one manifold ('S', 'T' or ''), in the order the overlap matrices use."""
        return tuple(s for s in self.states if s.label.manifold == manifold)

    def with_gradients(self, gradients: Mapping[StateLabel, np.ndarray],
                       couplings: Mapping[tuple[StateLabel, StateLabel], np.ndarray] | None = None,
                       timings_s: Mapping[str, float] | None = None) -> "Evaluation":
        """A copy with more gradients (and couplings) added."""
        grads = dict(self.gradients)
        for k, v in gradients.items():
            arr = np.array(v, dtype=float)
            arr.setflags(write=False)
            grads[k] = arr
        coup = dict(self.couplings)
        if couplings:
            coup.update(couplings)
        times = dict(self.timings_s)
        if timings_s:
            for k, v in timings_s.items():
                times[k] = times.get(k, 0.0) + v
        return replace(self, gradients=grads, couplings=coup, timings_s=times)


@runtime_checkable
class Engine(Protocol):
    """What every electronic-structure backend provides."""

    spec: MethodSpec

    @property
    def has_couplings(self) -> bool:
        """True when :meth:`gradients` can also return interstate coupling vectors."""

    def states(self, geometry: Geometry) -> Evaluation:
        """Energies, properties and wavefunction data of all states; no gradients."""

    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        """``evaluation`` plus analytic gradients of ``labels`` (adiabatic labels of that
        evaluation) and, where supported, coupling vectors of the given pairs."""

    def evaluate(self, geometry: Geometry, gradients_for: Iterable[StateLabel | str] = ()) -> Evaluation:
        """:meth:`states` then :meth:`gradients` in one call (no tracking in between)."""

    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        """Wavefunction overlaps <bra_I|ket_J> per manifold ('S', 'T', '').

        Rows follow ``bra.manifold(m)``, columns ``ket.manifold(m)`` (reference state included
        where it belongs to the manifold). Identity (up to signs) for equal geometries.
        """

    def close(self) -> None:
        """Release scratch files and PySCF objects."""


class EngineBase:
    """Shared behaviour of the concrete engines (they implement ``states``/``gradients``)."""

    def evaluate(self, geometry: Geometry, gradients_for: Iterable[StateLabel | str] = ()) -> Evaluation:
        """:meth:`states`, then :meth:`gradients` of ``gradients_for`` (no tracking between)."""
        evaluation = self.states(geometry)  # type: ignore[attr-defined]
        labels = [parse_state(x) for x in gradients_for]
        return self.gradients(evaluation, labels) if labels else evaluation  # type: ignore[attr-defined]

    def __enter__(self):
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()  # type: ignore[attr-defined]
