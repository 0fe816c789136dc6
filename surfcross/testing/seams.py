"""An analytic triatomic A-B-A with two distinct conical intersections, for seam exploration.

The surfaces depend only on the three interatomic distances, so they are invariant to
translation, rotation, reflection and to the exchange of the two equivalent end atoms (as a
real molecule's are). With r1 = |A1 - B|, r2 = |A2 - B|, r3 = |A1 - A2| (bohr), s = (r1 + r2)/2
and t = (r1 - r2)/2, the two coupled states S1/S2 come from the diabatic matrix
``[[m - d, c], [c, m + d]]`` with

* mean ``m = e0 + 1/2 ks (s - s0)^2 + 1/2 kt t^2 + 1/2 kb (r3 - b0)^2``,
* half difference ``d = gamma (s - a)``,
* coupling ``c = lam t (t^2 - tc^2)`` (odd in t: exchanging A1 and A2 flips its sign, which
  leaves the adiabatic energies unchanged).

The seam (d = c = 0) has three branches at s = a: t = 0 (a C2v crossing) and t = +tc, -tc
(one asymmetric crossing and its copy with the end atoms exchanged). Minimizing m on each:

* crossing A: r1 = r2 = a, r3 = b0, energy ``e0 + 1/2 ks (a - s0)^2``;
* crossing B: r1 = a + tc, r2 = a - tc (or exchanged), r3 = b0, energy that of A plus
  ``1/2 kt tc^2``.

An uncoupled S0 well lies below both. This is a test surface of our own, not a molecule.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from ..engine.base import EngineBase, Evaluation, MethodSpec, StateInfo
from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state

__all__ = ["TwoSeamParameters", "TwoSeamEngine", "two_seam_engine", "two_seam_geometry",
           "two_seam_crossings", "SYMBOLS"]

#: end atom, centre atom, end atom
SYMBOLS = ("H", "He", "H")


@dataclass(frozen=True)
class TwoSeamParameters:
    e0: float = 0.20
    s0: float = 1.80
    ks: float = 0.40
    kt: float = 0.60
    kb: float = 0.15
    b0: float = 3.00
    a: float = 2.00
    tc: float = 0.30
    gamma: float = 0.10
    lam: float = 0.60
    ground_offset: float = -0.20
    ground_k: float = 0.30


def _distances(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(r1, r2, r3) and their Cartesian derivatives (3, 3, 3)."""
    pairs = ((0, 1), (2, 1), (0, 2))
    r = np.empty(3)
    dr = np.zeros((3, 3, 3))
    for k, (i, j) in enumerate(pairs):
        v = x[i] - x[j]
        r[k] = np.linalg.norm(v)
        dr[k, i] = v / r[k]
        dr[k, j] = -v / r[k]
    return r, dr


def _pieces(p: TwoSeamParameters, x: np.ndarray):
    """Diabatic m, d, c and their Cartesian gradients, plus the ground state."""
    r, dr = _distances(x)
    s, t = 0.5 * (r[0] + r[1]), 0.5 * (r[0] - r[1])
    ds, dt = 0.5 * (dr[0] + dr[1]), 0.5 * (dr[0] - dr[1])
    m = p.e0 + 0.5 * p.ks * (s - p.s0) ** 2 + 0.5 * p.kt * t ** 2 + 0.5 * p.kb * (r[2] - p.b0) ** 2
    dm = p.ks * (s - p.s0) * ds + p.kt * t * dt + p.kb * (r[2] - p.b0) * dr[2]
    d, dd = p.gamma * (s - p.a), p.gamma * ds
    c = p.lam * t * (t ** 2 - p.tc ** 2)
    dc = p.lam * (3 * t ** 2 - p.tc ** 2) * dt
    g_ref = np.array([p.s0, p.s0, p.b0])
    e_ground = p.ground_offset + 0.5 * p.ground_k * float(((r - g_ref) ** 2).sum())
    g_ground = p.ground_k * np.einsum("k,kab->ab", r - g_ref, dr)
    return (m, dm), (d, dd), (c, dc), (e_ground, g_ground)


@dataclass(frozen=True)
class _Vectors:
    vectors: dict = field(default_factory=dict)


class TwoSeamEngine(EngineBase):
    """:class:`~surfcross.engine.base.Engine` on the two-seam surfaces (S0, S1, S2)."""

    def __init__(self, parameters: TwoSeamParameters = TwoSeamParameters()) -> None:
        self.p = parameters
        self.spec = MethodSpec(method="cis", basis="analytic-model", roots=2)
        self.calls = {"states": 0, "gradients": 0}

    @property
    def has_couplings(self) -> bool:
        return True

    def _check(self, geometry: Geometry) -> np.ndarray:
        if tuple(geometry.symbols) != SYMBOLS:
            raise InputError(f"the two-seam model needs atoms {SYMBOLS}, got {geometry.symbols}")
        return np.asarray(geometry.coords_bohr, float)

    def _adiabatic(self, x: np.ndarray):
        (m, dm), (d, dd), (c, dc), ground = _pieces(self.p, x)
        H = np.array([[m - d, c], [c, m + d]])
        e, v = np.linalg.eigh(H)
        dH = np.empty((2, 2, 3, 3))
        dH[0, 0], dH[1, 1] = dm - dd, dm + dd
        dH[0, 1] = dH[1, 0] = dc
        return e, v, dH, ground

    def states(self, geometry: Geometry) -> Evaluation:
        self.calls["states"] += 1
        e, v, _, (e0, _) = self._adiabatic(self._check(geometry))
        s1, s2 = parse_state("S1"), parse_state("S2")
        infos = (StateInfo(label=parse_state("S0"), energy_eh=e0),
                 StateInfo(label=s1, energy_eh=float(e[0])),
                 StateInfo(label=s2, energy_eh=float(e[1])))
        return Evaluation(geometry=geometry, states=infos,
                          wavefunction=_Vectors({s1: v[:, 0].copy(), s2: v[:, 1].copy()}))

    def gradients(self, evaluation: Evaluation, labels: Sequence[StateLabel],
                  couplings: Sequence[tuple[StateLabel, StateLabel]] = ()) -> Evaluation:
        self.calls["gradients"] += 1
        _, v, dH, (_, g0) = self._adiabatic(self._check(evaluation.geometry))
        vecs = {parse_state("S1"): v[:, 0], parse_state("S2"): v[:, 1]}
        grads = {}
        for raw in labels:
            label = parse_state(raw)
            if label.is_reference:
                grads[label] = g0
            elif label in vecs:
                grads[label] = np.einsum("i,ijab,j->ab", vecs[label], dH, vecs[label])
            else:
                raise InputError(f"the two-seam model has no state {label}")
        coup = {}
        for pair in couplings:
            a, b = (parse_state(x) for x in pair)
            if a in vecs and b in vecs:
                coup[(a, b)] = np.einsum("i,ijab,j->ab", vecs[a], dH, vecs[b])
            else:
                coup[(a, b)] = np.zeros((3, 3))
        return evaluation.with_gradients(grads, coup)

    def overlaps(self, bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
        rows, cols = bra.manifold("S"), ket.manifold("S")
        O = np.zeros((len(rows), len(cols)))
        for i, a in enumerate(rows):
            for j, b in enumerate(cols):
                if a.label.is_reference or b.label.is_reference:
                    O[i, j] = float(a.label == b.label)
                else:
                    O[i, j] = float(bra.wavefunction.vectors[a.label] @ ket.wavefunction.vectors[b.label])
        return {"S": O}

    def close(self) -> None:
        """Nothing to release."""


def two_seam_engine() -> TwoSeamEngine:
    """The engine with the default parameters (a picklable factory for workers)."""
    return TwoSeamEngine()


def two_seam_geometry(r1: float, r2: float, r3: float, *, rotation: np.ndarray | None = None,
                      shift: Sequence[float] = (0.0, 0.0, 0.0)) -> Geometry:
    """A1-B-A2 with the given distances (bohr), B at the origin, in the xy plane, then rotated
    and shifted (to test that nothing depends on orientation)."""
    cos = (r1 ** 2 + r2 ** 2 - r3 ** 2) / (2 * r1 * r2)
    angle = np.arccos(np.clip(cos, -1.0, 1.0))
    x = np.array([[r1, 0.0, 0.0], [0.0, 0.0, 0.0], [r2 * np.cos(angle), r2 * np.sin(angle), 0.0]])
    if rotation is not None:
        x = x @ np.asarray(rotation, float).T
    return Geometry(SYMBOLS, x + np.asarray(shift, float))


def two_seam_crossings(p: TwoSeamParameters = TwoSeamParameters()) -> dict[str, dict]:
    """The closed-form seam minima: distances (bohr) and energy (Eh) of crossings A and B."""
    e_a = p.e0 + 0.5 * p.ks * (p.a - p.s0) ** 2
    return {"A": {"distances": (p.a, p.a, p.b0), "energy_eh": e_a},
            "B": {"distances": (p.a + p.tc, p.a - p.tc, p.b0),
                  "energy_eh": e_a + 0.5 * p.kt * p.tc ** 2}}
