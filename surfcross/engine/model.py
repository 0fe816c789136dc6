"""Analytic model engines: small diabatic surfaces whose crossings are known in closed form.

They implement the :class:`~surfcross.engine.base.Engine` protocol, so objectives, trackers,
optimizers and the crossing analysis can be tested without any quantum chemistry. A model
molecule is made of one or two hydrogen pseudo-atoms; the surfaces depend on the raw
Cartesian displacement ``q = R - R_ref`` (flattened, bohr) and are *not* invariant to rigid
translation or rotation, so crossing objectives must run on them with the removal of
external modes switched off (they do so automatically through :attr:`ModelEngine.is_model`).

Three models (all energies in Eh, lengths in bohr):

* :func:`conical_model` -- a same-spin pair ``S1``/``S2`` from the diabatic matrix
  ``[[m - d, c], [c, m + d]]`` with mean ``m(q) = e0 + 1/2 (q - q_m)^T K (q - q_m)``,
  half difference ``d(q) = gamma (u.q - a)`` and coupling ``c(q) = lam (w.q - b)``. The seam
  is the linear manifold ``u.q = a, w.q = b`` (codimension two, a conical intersection);
  its minimum (the MECI) follows from a linear solve.
* :func:`spin_model` -- ``S1`` and ``T1`` with the same ``m`` and ``d`` but no coupling (states
  of different spin do not interact through a spin-free Hamiltonian): a one-dimensional
  crossing with seam ``u.q = a`` and a closed-form MECP.
* :func:`avoided_model` -- as the conical model but with a constant coupling ``c = c0``: the
  states never cross; the smallest gap is ``2 c0`` on ``u.q = a``.

Each model also carries a lower, uncoupled ``S0`` well (the reference state), so state
labels and manifolds look like those of a real response calculation.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state
from .base import EngineBase, Evaluation, MethodSpec, StateInfo

__all__ = [
    "ModelSurface",
    "ModelEngine",
    "conical_model",
    "spin_model",
    "avoided_model",
    "model_geometry",
]

#: pseudo-atom reference positions (bohr): two hydrogens 2.8 bohr (1.48 angstrom) apart
_REFERENCE = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 2.8]])


@dataclass(frozen=True, kw_only=True)
class ModelSurface:
    """Parameters of a two-state diabatic model (see the module docstring).

    Attributes
    ----------
    curvatures
        Diagonal of K, (n,), Eh/bohr^2 (positive).
    centre
        q_m, minimum of the mean energy, (n,), bohr.
    offset
        e0, the mean energy at q_m, Eh.
    gamma, u, a
        Half difference d(q) = gamma (u.q - a); u is normalized on construction.
    lam, w, b
        Coupling c(q) = lam (w.q - b); ``lam = 0`` for the spin model.
    constant_coupling
        c0 added to the coupling (avoided crossing).
    labels
        (lower-diabatic label, upper-diabatic label) such as ('S1', 'S2') or ('S1', 'T1').
    ground_offset, ground_curvature
        The uncoupled S0 well: ground_offset + 1/2 ground_curvature |q|^2.
    """

    curvatures: np.ndarray
    centre: np.ndarray
    offset: float = 0.20
    gamma: float = 0.06
    u: np.ndarray
    a: float = 0.0
    lam: float = 0.0
    w: np.ndarray | None = None
    b: float = 0.0
    constant_coupling: float = 0.0
    labels: tuple[str, str] = ("S1", "S2")
    ground_offset: float = -0.10
    ground_curvature: float = 0.40
    name: str = "model"

    def __post_init__(self) -> None:
        k = np.asarray(self.curvatures, float).ravel()
        if np.any(k <= 0):
            raise InputError("model curvatures must be positive")
        n = k.size
        u = np.asarray(self.u, float).ravel()
        if u.size != n:
            raise InputError(f"model direction u has {u.size} components, expected {n}")
        object.__setattr__(self, "curvatures", k)
        object.__setattr__(self, "centre", np.asarray(self.centre, float).ravel())
        object.__setattr__(self, "u", u / np.linalg.norm(u))
        w = np.zeros(n) if self.w is None else np.asarray(self.w, float).ravel()
        if np.linalg.norm(w) > 0:
            w = w / np.linalg.norm(w)
        object.__setattr__(self, "w", w)

    @property
    def size(self) -> int:
        return self.curvatures.size

    # ------------------------------------------------------------------ diabatic pieces
    def mean(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        dq = q - self.centre
        return self.offset + 0.5 * float(dq @ (self.curvatures * dq)), self.curvatures * dq

    def half_difference(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        return self.gamma * (float(self.u @ q) - self.a), self.gamma * self.u

    def coupling(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        value = self.lam * (float(self.w @ q) - self.b) + self.constant_coupling
        return value, self.lam * self.w

    def diabatic(self, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """2x2 diabatic matrix and its gradient (n, 2, 2)."""
        m, dm = self.mean(q)
        d, dd = self.half_difference(q)
        c, dc = self.coupling(q)
        H = np.array([[m - d, c], [c, m + d]])
        dH = np.empty((self.size, 2, 2))
        dH[:, 0, 0] = dm - dd
        dH[:, 1, 1] = dm + dd
        dH[:, 0, 1] = dH[:, 1, 0] = dc
        return H, dH

    # ------------------------------------------------------------------ known answers
    def seam_minimum(self) -> tuple[np.ndarray, float]:
        """Closed-form lowest point of the crossing seam: (q*, energy).

        Minimizes the mean energy subject to d = 0 (and c = 0 when the states couple):
        q* = q_m + K^-1 A^T (A K^-1 A^T)^-1 (r - A q_m).
        """
        rows, rhs = [self.u], [self.a]
        if self.lam != 0.0:
            rows.append(self.w)
            rhs.append(self.b)
        A, r = np.array(rows), np.array(rhs)
        Kinv = 1.0 / self.curvatures
        M = (A * Kinv) @ A.T
        q = self.centre + Kinv * (A.T @ np.linalg.solve(M, r - A @ self.centre))
        return q, self.mean(q)[0]


def model_geometry(q: Sequence[float] | np.ndarray | None = None, natom: int = 2) -> Geometry:
    """Pseudo-atom geometry at displacement ``q`` (flattened, bohr) from the reference."""
    ref = _REFERENCE[:natom]
    disp = np.zeros(ref.size) if q is None else np.asarray(q, float).ravel()
    return Geometry(("H",) * natom, ref + disp.reshape(ref.shape), title="model")


@dataclass(frozen=True)
class _ModelWavefunction:
    """Adiabatic eigenvectors in the (geometry-independent) diabatic basis, per manifold."""

    vectors: dict = field(default_factory=dict)


class ModelEngine(EngineBase):
    """An :class:`~surfcross.engine.base.Engine` on an analytic :class:`ModelSurface`.

    States: ``S0`` (uncoupled well) plus the two model states. For a same-manifold pair
    (``S1``/``S2``) the adiabatic states come from diagonalizing the 2x2 matrix; couplings
    h = <I|dH|J> are analytic. For a different-spin pair (``S1``/``T1``) each state is its own
    diabatic energy and the coupling is zero.
    """

    is_model = True

    def __init__(self, surface: ModelSurface, natom: int = 2) -> None:
        if surface.size != 3 * natom:
            raise InputError(f"model surface has {surface.size} coordinates, "
                             f"{natom} pseudo-atom(s) need {3 * natom}")
        self.surface = surface
        self.natom = natom
        self.spec = MethodSpec(method="cis", basis="analytic-model", roots=2)
        self.labels = tuple(parse_state(x) for x in surface.labels)
        self.same_manifold = self.labels[0].manifold == self.labels[1].manifold
        self.calls = {"states": 0, "gradients": 0}

    @property
    def has_couplings(self) -> bool:
        return True

    def displacement(self, geometry: Geometry) -> np.ndarray:
        if geometry.natom != self.natom:
            raise InputError(f"the model needs {self.natom} pseudo-atom(s), got {geometry.natom}")
        return (geometry.coords_bohr - _REFERENCE[: self.natom]).ravel()

    # ------------------------------------------------------------------ pieces
    def _adiabatic(self, q: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Energies (2,), eigenvectors (2, 2) as columns, and diabatic gradient (n, 2, 2)."""
        H, dH = self.surface.diabatic(q)
        if not self.same_manifold:
            return np.diag(H).copy(), np.eye(2), dH
        e, v = np.linalg.eigh(H)
        return e, v, dH

    def _ground(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        s = self.surface
        return s.ground_offset + 0.5 * s.ground_curvature * float(q @ q), s.ground_curvature * q

    # ------------------------------------------------------------------ protocol
    def states(self, geometry: Geometry) -> Evaluation:
        self.calls["states"] += 1
        q = self.displacement(geometry)
        e, v, _ = self._adiabatic(q)
        e0, _ = self._ground(q)
        l1, l2 = self.labels
        infos = [StateInfo(label=parse_state("S0"), energy_eh=e0),
                 StateInfo(label=l1, energy_eh=float(e[0])),
                 StateInfo(label=l2, energy_eh=float(e[1]))]
        infos.sort(key=lambda s: (s.label.manifold != "S", s.label.manifold, s.label.index))
        vectors = {l1: v[:, 0].copy(), l2: v[:, 1].copy()}
        return Evaluation(geometry=geometry, states=tuple(infos),
                          wavefunction=_ModelWavefunction(vectors))

    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        self.calls["gradients"] += 1
        q = self.displacement(evaluation.geometry)
        _, v, dH = self._adiabatic(q)
        vecs = {self.labels[0]: v[:, 0], self.labels[1]: v[:, 1]}
        shape = (self.natom, 3)
        grads = {}
        for raw in labels:
            label = parse_state(raw)
            if label == parse_state("S0"):
                grads[label] = self._ground(q)[1].reshape(shape)
            elif label in vecs:
                c = vecs[label]
                grads[label] = np.einsum("i,nij,j->n", c, dH, c).reshape(shape)
            else:
                raise InputError(f"the model has no state {label}")
        coup = {}
        for pair in couplings:
            a, b = (parse_state(x) for x in pair)
            if a in vecs and b in vecs and self.same_manifold:
                h = np.einsum("i,nij,j->n", vecs[a], dH, vecs[b])
            else:
                h = np.zeros(3 * self.natom)  # different spin or S0: no coupling
            coup[(a, b)] = h.reshape(shape)
        return evaluation.with_gradients(grads, coup)

    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        out: dict[str, np.ndarray] = {}
        for manifold in sorted({s.label.manifold for s in bra.states}):
            rows, cols = bra.manifold(manifold), ket.manifold(manifold)
            O = np.zeros((len(rows), len(cols)))
            for i, si in enumerate(rows):
                for j, sj in enumerate(cols):
                    O[i, j] = self._overlap(bra, si.label, ket, sj.label)
            out[manifold] = O
        return out

    def _overlap(self, bra: Evaluation, a: StateLabel, ket: Evaluation, b: StateLabel) -> float:
        if a.is_reference or b.is_reference:
            return 1.0 if a == b else 0.0
        va = bra.wavefunction.vectors.get(a)
        vb = ket.wavefunction.vectors.get(b)
        if va is None or vb is None:
            return 0.0
        if not self.same_manifold:
            return 1.0 if a == b else 0.0
        return float(va @ vb)

    def close(self) -> None:
        """Nothing to release."""


# ---------------------------------------------------------------------- ready-made models
_K = np.array([0.30, 0.25, 0.35, 0.40, 0.20, 0.45])
_QM = np.array([0.30, -0.20, 0.10, -0.15, 0.25, 0.20])
_U = np.array([1.0, 0.3, 0.0, -0.2, 0.0, 0.4])
_W = np.array([0.0, 1.0, 0.5, 0.0, -0.3, 0.0])


def conical_model() -> ModelEngine:
    """Same-spin S1/S2 model with a conical intersection (MECI: ``surface.seam_minimum()``)."""
    return ModelEngine(ModelSurface(curvatures=_K, centre=_QM, gamma=0.06, u=_U, a=-0.10,
                                    lam=0.03, w=_W, b=0.05, labels=("S1", "S2"),
                                    name="conical"))


def spin_model() -> ModelEngine:
    """S1/T1 model without coupling: a one-dimensional seam u.q = a (MECP in closed form)."""
    return ModelEngine(ModelSurface(curvatures=_K, centre=_QM, gamma=0.06, u=_U, a=-0.10,
                                    labels=("S1", "T1"), name="spin"))


def avoided_model(coupling_eh: float = 0.01) -> ModelEngine:
    """S1/S2 model with a constant coupling: smallest gap 2*coupling on u.q = a, no crossing."""
    return ModelEngine(ModelSurface(curvatures=_K, centre=_QM, gamma=0.06, u=_U, a=-0.10,
                                    constant_coupling=coupling_eh, labels=("S1", "S2"),
                                    name="avoided"))
