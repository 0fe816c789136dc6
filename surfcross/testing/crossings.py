"""Model crossings with known answers, for tests and benchmarks of crossing searches.

Each :class:`KnownCrossing` bundles an analytic model engine (:mod:`surfcross.engine.model`),
the pair of states, a start geometry and the closed-form answer: the lowest point of the seam
(MECI / MECP) and its energy, or for the avoided crossing the smallest gap.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..engine.model import (ModelEngine, ModelSurface, avoided_model, conical_model,
                            model_geometry, spin_model)
from ..geometry import Geometry

__all__ = ["KnownCrossing", "conical_case", "spin_case", "avoided_case", "crossing_cases",
           "ModelEngine", "ModelSurface", "conical_model", "spin_model", "avoided_model",
           "model_geometry", "CurvedSeamSurface", "turning_plane_model",
           "uncoupled_same_spin_model", "seam_point"]


@dataclass(frozen=True, kw_only=True)
class KnownCrossing:
    """A model pair with its exact answer.

    Attributes
    ----------
    kind
        'conical', 'one-dimensional' or 'avoided'.
    crossing_q
        Displacement (bohr, flat) of the seam minimum; for 'avoided', the point of smallest
        gap that also minimizes the mean energy on u.q = a.
    crossing_energy_eh
        Mean energy of the pair there (equal to both energies at a real crossing).
    minimum_gap_eh
        0 for real crossings, 2 c0 for the avoided crossing.
    """

    name: str
    make_engine: Callable[[], ModelEngine]
    states: tuple[str, str]
    kind: str
    start: Geometry
    crossing_q: np.ndarray
    crossing_energy_eh: float
    minimum_gap_eh: float

    @property
    def crossing_geometry(self) -> Geometry:
        return model_geometry(self.crossing_q)


def _case(name: str, factory: Callable[[], ModelEngine], states: tuple[str, str],
          kind: str, gap: float) -> KnownCrossing:
    q, e = factory().surface.seam_minimum()
    return KnownCrossing(name=name, make_engine=factory, states=states, kind=kind,
                         start=model_geometry(np.zeros(6)), crossing_q=q, crossing_energy_eh=e,
                         minimum_gap_eh=gap)


def conical_case() -> KnownCrossing:
    """S1/S2 conical intersection of :func:`conical_model`."""
    return _case("conical", conical_model, ("S1", "S2"), "conical", 0.0)


def spin_case() -> KnownCrossing:
    """S1/T1 one-dimensional crossing of :func:`spin_model`."""
    return _case("spin", spin_model, ("S1", "T1"), "one-dimensional", 0.0)


def avoided_case(coupling_eh: float = 0.01) -> KnownCrossing:
    """S1/S2 avoided crossing of :func:`avoided_model` (smallest gap 2 * coupling)."""
    return _case("avoided", lambda: avoided_model(coupling_eh), ("S1", "S2"), "avoided",
                 2.0 * coupling_eh)


def crossing_cases() -> tuple[KnownCrossing, ...]:
    """All model cases."""
    return conical_case(), spin_case(), avoided_case()


@dataclass(frozen=True, kw_only=True)
class CurvedSeamSurface(ModelSurface):
    """A conical model whose branching plane turns along the seam.

    The half difference and the coupling get quadratic terms,
    d(q) = gamma (u.q - a) + q^T A q / 2 and c(q) = lam (w.q - b) + q^T B q / 2, so their
    gradients gamma u + A q and lam w + B q (the branching plane) change from one seam point
    to the next, and the seam d = c = 0 is curved. Its lowest point has no closed form: tests
    find it with a general-purpose constrained minimizer on the (smooth) diabatic conditions.
    """

    quad_d: np.ndarray = field(default_factory=lambda: np.zeros((6, 6)))
    quad_c: np.ndarray = field(default_factory=lambda: np.zeros((6, 6)))

    def half_difference(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        d, grad = super().half_difference(q)
        A = np.asarray(self.quad_d, float)
        return d + 0.5 * float(q @ A @ q), grad + A @ q

    def coupling(self, q: np.ndarray) -> tuple[float, np.ndarray]:
        c, grad = super().coupling(q)
        B = np.asarray(self.quad_c, float)
        return c + 0.5 * float(q @ B @ q), grad + B @ q

    def seam_minimum(self) -> tuple[np.ndarray, float]:
        raise NotImplementedError("the curved seam has no closed-form minimum; minimize the "
                                  "mean energy on d = c = 0 with a constrained minimizer")


def turning_plane_model() -> ModelEngine:
    """S1/S2 conical model of our own whose branching plane turns along a curved seam."""
    rng = np.random.default_rng(12)
    A = rng.standard_normal((6, 6))
    B = rng.standard_normal((6, 6))
    base = conical_model().surface
    return ModelEngine(CurvedSeamSurface(
        curvatures=base.curvatures, centre=base.centre, gamma=base.gamma, u=base.u, a=base.a,
        lam=base.lam, w=base.w, b=base.b, labels=("S1", "S2"), name="turning plane",
        quad_d=0.04 * (A + A.T), quad_c=0.04 * (B + B.T)))


def uncoupled_same_spin_model() -> ModelEngine:
    """S1/S2 of one spin that never couple (c = 0): a one-dimensional crossing of a same-spin
    pair, as for states of different spatial symmetry. Its lowest seam point is the closed
    form of ``surface.seam_minimum()`` (the coupling condition drops out)."""
    base = spin_model().surface
    return ModelEngine(ModelSurface(curvatures=base.curvatures, centre=base.centre,
                                    gamma=base.gamma, u=base.u, a=base.a, labels=("S1", "S2"),
                                    name="uncoupled S1/S2"))


def seam_point(surface: ModelSurface, q: np.ndarray, *, coupled: bool = True,
               iterations: int = 50) -> np.ndarray:
    """The point of the seam d = 0 (and c = 0 when ``coupled``) nearest ``q``, by Newton steps
    of minimum norm on the diabatic conditions."""
    q = np.asarray(q, float).copy()
    for _ in range(iterations):
        d, gd = surface.half_difference(q)
        rows, values = [gd], [d]
        if coupled:
            c, gc = surface.coupling(q)
            rows.append(gc)
            values.append(c)
        J, r = np.array(rows), np.array(values)
        if np.abs(r).max() < 1e-14:
            break
        q = q - J.T @ np.linalg.solve(J @ J.T, r)
    return q
