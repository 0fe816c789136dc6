"""Analytic test surfaces with known minima, wrapped as objectives (no quantum chemistry).

Like ``scipy.optimize.rosen``, these let optimizer tests and examples run in milliseconds.
A :class:`Surface` is a function of a flat vector of n <= 6 variables with its analytic gradient
and known minimum. :class:`AnalyticObjective` turns it into an objective: the variables are the
Cartesian displacements of one or two hydrogen atoms (atom k carries variables 3k..3k+2) from
base positions 10 bohr apart, so the Geometry checks (atoms not on top of each other) pass for
any sensible displacement. Unused trailing Cartesian components have zero gradient.

Surfaces shipped (our own choices of parameters):

* ``bowl``: anisotropic quadratic, curvatures 0.2, 1, 5 Eh/bohr^2, minimum at (0.5, -0.3, 0.2).
* ``tilted_bowl``: quadratic with off-diagonal couplings in 4 variables.
* ``quartic``: |x - c|^4 + 0.05 |x - c|^2 in 3 variables, minimum at c.
* ``valley``: the Rosenbrock function (``scipy.optimize.rosen``) divided by 20, a curved
  valley with its minimum at (1, 1) from the classic start (-1.2, 1).
* ``valley_4d``: the chained Rosenbrock function in 4 variables divided by 40, minimum at
  (1, 1, 1, 1).

:class:`SpringNetwork` is a rotation-invariant many-atom surface: harmonic springs between all
atom pairs with rest lengths from a reference geometry, so every rigid copy of that geometry is
a minimum with value 0.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from ..errors import InputError
from ..geometry import Geometry
from ..objectives.base import ObjectiveValue

__all__ = ["Surface", "AnalyticObjective", "SpringNetwork", "SURFACES", "rosenbrock",
           "quadratic", "quartic_bowl", "BASE_SEPARATION_BOHR"]

#: distance (bohr) between the base positions of the two carrier atoms
BASE_SEPARATION_BOHR = 10.0


@dataclass(frozen=True, kw_only=True)
class Surface:
    """An analytic function with gradient and known minimum.

    Attributes
    ----------
    name
        Short identifier.
    function, gradient
        f(x) -> float and grad f(x) -> (n,) for x of shape (n,).
    minimum
        Location of the (global) minimum, (n,).
    minimum_value
        f at the minimum.
    start
        A suggested starting point, (n,).
    """

    name: str
    function: Callable[[np.ndarray], float]
    gradient: Callable[[np.ndarray], np.ndarray]
    minimum: np.ndarray
    minimum_value: float
    start: np.ndarray

    @property
    def ndim(self) -> int:
        return int(np.size(self.minimum))


def quadratic(name: str, hessian: np.ndarray, centre: np.ndarray, start: np.ndarray,
              offset: float = 0.0) -> Surface:
    """f = offset + (x - c)^T A (x - c) / 2 with symmetric positive definite A."""
    A = np.asarray(hessian, float)
    c = np.asarray(centre, float)
    if not np.allclose(A, A.T) or np.linalg.eigvalsh(A)[0] <= 0:
        raise InputError("a quadratic bowl needs a symmetric positive definite matrix")
    return Surface(name=name, function=lambda x: float(offset + 0.5 * (x - c) @ A @ (x - c)),
                   gradient=lambda x: A @ (x - c), minimum=c, minimum_value=float(offset),
                   start=np.asarray(start, float))


def quartic_bowl(name: str, centre: np.ndarray, start: np.ndarray, soft: float = 0.05) -> Surface:
    """f = |x - c|^4 + soft |x - c|^2, minimum 0 at c."""
    c = np.asarray(centre, float)

    def f(x):
        r2 = float((x - c) @ (x - c))
        return r2 * r2 + soft * r2

    def g(x):
        d = x - c
        return (4.0 * float(d @ d) + 2.0 * soft) * d

    return Surface(name=name, function=f, gradient=g, minimum=c, minimum_value=0.0,
                   start=np.asarray(start, float))


def rosenbrock(name: str, ndim: int, start: np.ndarray, scale: float = 1.0) -> Surface:
    """``scale`` times the chained Rosenbrock function of ``scipy.optimize.rosen``:
    sum_i 100 (x_{i+1} - x_i^2)^2 + (1 - x_i)^2; minimum 0 at (1, ..., 1).

    A scale below 1 keeps the curvatures in the range molecular optimizers are tuned for
    (the unscaled valley floor has curvatures near 1000).
    """

    def f(x):
        return float(scale * np.sum(100.0 * (x[1:] - x[:-1] ** 2) ** 2 + (1.0 - x[:-1]) ** 2))

    def g(x):
        out = np.zeros_like(x, dtype=float)
        inner = x[1:] - x[:-1] ** 2
        out[:-1] += -400.0 * x[:-1] * inner - 2.0 * (1.0 - x[:-1])
        out[1:] += 200.0 * inner
        return scale * out

    return Surface(name=name, function=f, gradient=g, minimum=np.ones(ndim), minimum_value=0.0,
                   start=np.asarray(start, float))


_TILT = np.array([[1.0, 0.3, 0.0, 0.1],
                  [0.3, 0.6, 0.2, 0.0],
                  [0.0, 0.2, 2.0, 0.5],
                  [0.1, 0.0, 0.5, 0.8]])

SURFACES: dict[str, Surface] = {s.name: s for s in (
    quadratic("bowl", np.diag([0.2, 1.0, 5.0]), [0.5, -0.3, 0.2], [-1.0, 0.8, 0.9]),
    quadratic("tilted_bowl", _TILT, [0.3, -0.4, 0.1, 0.6], [1.5, 0.5, -1.0, -0.5], offset=-1.25),
    quartic_bowl("quartic", [0.2, 0.1, -0.3], [1.2, -0.9, 0.5]),
    rosenbrock("valley", 2, [-1.2, 1.0], scale=1.0 / 20.0),
    rosenbrock("valley_4d", 4, [1.3, 0.7, 0.8, 1.9], scale=1.0 / 40.0),
)}


class AnalyticObjective:
    """A :class:`Surface` (or any f, grad f of a flat vector) as an objective.

    Parameters
    ----------
    function, gradient
        f(x) -> float and grad f(x) -> (n,), n <= 6.
    ndim
        Number of variables n.
    name
        Name reported by the objective.
    """

    def __init__(self, function: Callable[[np.ndarray], float],
                 gradient: Callable[[np.ndarray], np.ndarray], ndim: int, *,
                 name: str = "analytic surface") -> None:
        if not 1 <= int(ndim) <= 6:
            raise InputError(f"analytic surfaces carry 1 to 6 variables, got {ndim}")
        self.function = function
        self.grad = gradient
        self.ndim = int(ndim)
        self.natom = 1 if self.ndim <= 3 else 2
        self.name = name
        self.base = np.zeros((self.natom, 3))
        self.base[1:, 2] = BASE_SEPARATION_BOHR
        self.evaluations = 0
        self.accepted: list[float] = []
        self.converged_calls = 0

    @classmethod
    def from_surface(cls, surface: Surface) -> "AnalyticObjective":
        return cls(surface.function, surface.gradient, surface.ndim, name=surface.name)

    # ------------------------------------------------------------------ mapping
    def geometry(self, x: np.ndarray) -> Geometry:
        """The Geometry (1-2 H atoms) carrying the variables x."""
        x = np.asarray(x, float).ravel()
        if x.size != self.ndim:
            raise InputError(f"{self.name} takes {self.ndim} variables, got {x.size}")
        flat = np.zeros(3 * self.natom)
        flat[: self.ndim] = x
        spin = self.natom % 2
        return Geometry(("H",) * self.natom, self.base + flat.reshape(self.natom, 3), spin=spin,
                        title=self.name)

    def variables(self, geometry: Geometry) -> np.ndarray:
        """The variables x carried by a geometry."""
        return (np.asarray(geometry.coords_bohr) - self.base).ravel()[: self.ndim].copy()

    # ------------------------------------------------------------------ objective protocol
    def evaluate(self, geometry: Geometry) -> ObjectiveValue:
        x = self.variables(geometry)
        self.evaluations += 1
        f = float(self.function(x))
        flat = np.zeros(3 * self.natom)
        flat[: self.ndim] = self.grad(x)
        return ObjectiveValue(value=f, gradient=flat.reshape(self.natom, 3),
                              energies_eh={self.name: f})

    def accept(self, value: ObjectiveValue) -> None:
        self.accepted.append(float(value.value))

    def after_convergence(self, value: ObjectiveValue) -> bool:
        self.converged_calls += 1
        return False

    def state_dict(self) -> dict[str, Any]:
        return {"evaluations": self.evaluations, "accepted": len(self.accepted),
                "converged_calls": self.converged_calls}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        self.evaluations = int(state["evaluations"])
        self.converged_calls = int(state.get("converged_calls", 0))


class SpringNetwork:
    """Harmonic springs between all atom pairs: E = sum_ij k (r_ij - r0_ij)^2 / 2.

    Rotation- and translation-invariant; minimum value 0 at any rigid copy of ``reference``.
    Optional ``net_force`` and ``net_torque`` (3-vectors, Eh/bohr and Eh/bohr^2) add a rigid
    field f + t x (x_i - centroid) to the gradient (not the value), mimicking the small net
    force and torque of noisy engine gradients; it has no internal component, so the minimum
    does not move.
    """

    def __init__(self, reference: Geometry, *, k: float = 0.5, net_force=None,
                 net_torque=None) -> None:
        self.reference = reference
        self.k = float(k)
        self.r0 = reference.distance_matrix_bohr()
        self.net_force = np.zeros(3) if net_force is None else np.asarray(net_force, float)
        self.net_torque = np.zeros(3) if net_torque is None else np.asarray(net_torque, float)
        self.name = "spring network"
        self.evaluations = 0
        self.accepted = 0

    def evaluate(self, geometry: Geometry) -> ObjectiveValue:
        self.evaluations += 1
        x = np.asarray(geometry.coords_bohr)
        diff = x[:, None, :] - x[None, :, :]
        r = np.sqrt((diff ** 2).sum(-1))
        np.fill_diagonal(r, 1.0)
        dev = r - self.r0
        np.fill_diagonal(dev, 0.0)
        e = 0.25 * self.k * float((dev ** 2).sum())
        grad = self.k * ((dev / r)[:, :, None] * diff).sum(axis=1)
        grad = grad + self.net_force + np.cross(self.net_torque, x - x.mean(axis=0))
        return ObjectiveValue(value=e, gradient=grad, energies_eh={"springs": e})

    def accept(self, value: ObjectiveValue) -> None:
        self.accepted += 1

    def after_convergence(self, value: ObjectiveValue) -> bool:
        return False

    def state_dict(self) -> dict[str, Any]:
        return {"evaluations": self.evaluations, "accepted": self.accepted}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        self.evaluations = int(state["evaluations"])
        self.accepted = int(state["accepted"])
