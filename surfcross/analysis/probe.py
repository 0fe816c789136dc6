"""In-plane gap probe: is a converged crossing point really a conical intersection?

Energies only (no gradients, no couplings). In a plane spanned by two orthonormal Cartesian
directions e1, e2 (the branching plane of the search), evaluate the gap dE of the pair at the
centre and at +/- r for three directions r = delta (cos phi, sin phi), phi = 0, 60, 120 deg.
The symmetrized quantity

    Q(r) = [dE^2(r) + dE^2(-r)]/2 - dE^2(0)

removes the residual gap at the centre and the term linear in the offset; in the linear model
it equals 4[(g.r)^2 + (h.r)^2] exactly (half-difference g). A 2x2 quadratic form fitted to the
three Q values has eigenvalues 4 delta^2 |g~|^2 and 4 delta^2 |h~|^2: estimates of |g~| and
|h~| without coupling vectors. Along both eigen-directions the gap is then evaluated at +/- 2
delta as well, which gives the opening order n (dE ~ r^n; n = 1 linear, n = 2 quadratic).

Verdict:

* 'avoided'      -- finite gap at the centre (above ``centre_gap_tol_eh``), or no direction
                    in which the gap opens linearly;
* 'conical'      -- gap ~0 at the centre and linear opening in both directions;
* 'one-dimensional' -- linear opening in one direction only: a crossing of states that do not
                    couple (different spin or symmetry), or the wrong topology a closed-shell
                    response method gives for crossings with the ground state.

Limits: the probe resolves gaps down to ``centre_gap_tol_eh`` and couplings down to about
``flat_ratio`` |g~|; a narrowly avoided crossing below that looks conical at this resolution.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..engine.base import Engine, Evaluation
from ..errors import InputError
from ..geometry import Geometry
from ..states import StateLabel, parse_state

__all__ = ["ProbeSettings", "ProbeResult", "probe_crossing", "plane_from_value",
           "DirectionCheck", "second_direction_check"]

VERDICTS = ("conical", "one-dimensional", "avoided")


@dataclass(frozen=True, kw_only=True)
class ProbeSettings:
    """Probe radius (bohr) and classification thresholds."""

    radius_bohr: float = 0.01
    centre_gap_tol_eh: float = 1e-3
    linear_order_max: float = 1.5
    flat_ratio: float = 0.05

    def __post_init__(self) -> None:
        if not 0 < self.radius_bohr <= 0.1:
            raise InputError("probe radius must be in (0, 0.1] bohr")
        if self.centre_gap_tol_eh <= 0 or self.flat_ratio <= 0:
            raise InputError("probe tolerances must be positive")


@dataclass(frozen=True, kw_only=True)
class ProbeResult:
    """Outcome of :func:`probe_crossing` (gaps in Eh, norms in Eh/bohr, half-difference)."""

    verdict: str
    centre_gap_eh: float
    radius_bohr: float
    q_form: np.ndarray = field(repr=False)
    g_tilde_norm: float
    h_tilde_norm: float
    opening_orders: tuple[float, float]
    principal_directions: tuple[np.ndarray, np.ndarray] = field(repr=False)
    gaps_eh: dict = field(default_factory=dict, repr=False)
    evaluations: int = 0
    message: str = ""

    def to_dict(self) -> dict[str, Any]:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        return {"verdict": self.verdict, "centre_gap_eh": self.centre_gap_eh,
                "radius_bohr": self.radius_bohr, "g_norm_estimate": self.g_tilde_norm,
                "h_norm_estimate": self.h_tilde_norm,
                "opening_orders": [num(x) for x in self.opening_orders],
                "evaluations": self.evaluations, "message": self.message}


def plane_from_value(value: Any) -> np.ndarray:
    """Two orthonormal in-plane directions (2, 3N) from a crossing objective's value.

    Uses the search's step-model directions (x-hat, y-hat). A one-dimensional search gives
    only x-hat; the second direction is then the projected mean gradient (or, at a converged
    point where that vanishes, a unit vector orthogonalized to x-hat).
    """
    if value.subspace is None:
        raise InputError("this objective value has no branching-plane directions")
    dirs = np.atleast_2d(value.subspace.directions)
    if len(dirs) >= 2:
        return _orthonormal(dirs[0], dirs[1])
    x = dirs[0]
    second = np.asarray(value.test_gradient, float).ravel()
    second = second - (second @ x) * x
    if np.linalg.norm(second) < 1e-6:
        second = np.zeros_like(x)
        second[int(np.argmin(np.abs(x)))] = 1.0
    return _orthonormal(x, second)


def _orthonormal(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    a = np.asarray(a, float).ravel()
    b = np.asarray(b, float).ravel()
    a = a / np.linalg.norm(a)
    b = b - (b @ a) * a
    nb = np.linalg.norm(b)
    if nb < 1e-10:
        raise InputError("the two probe directions are parallel")
    return np.array([a, b / nb])


class _GapMeter:
    """Gap of the pair at displaced geometries, matching roots to the centre by overlap."""

    def __init__(self, engine: Engine, geometry: Geometry, labels: Sequence[StateLabel],
                 centre: Evaluation | None = None) -> None:
        self.engine = engine
        self.geometry = geometry
        self.labels = labels
        self.centre = engine.states(geometry) if centre is None else centre
        self.count = 1 if centre is None else 0

    def gap(self, displacement: np.ndarray) -> float:
        coords = self.geometry.coords_bohr + displacement.reshape(self.geometry.natom, 3)
        ev = self.engine.states(self.geometry.with_coords(coords))
        self.count += 1
        e = [ev.energy(r) for r in self._match(ev)]
        return abs(e[1] - e[0])

    def gap_gradient_of_square(self, displacement: np.ndarray) -> np.ndarray:
        """grad(dE^2) = 2 dE (g_upper - g_lower) of the pair at a displaced geometry, flat."""
        coords = self.geometry.coords_bohr + displacement.reshape(self.geometry.natom, 3)
        ev = self.engine.states(self.geometry.with_coords(coords))
        self.count += 1
        roots = sorted(self._match(ev), key=ev.energy)
        ev = self.engine.gradients(ev, roots)
        gap = ev.energy(roots[1]) - ev.energy(roots[0])
        x1 = np.asarray(ev.gradient(roots[1]), float) - np.asarray(ev.gradient(roots[0]), float)
        return 2.0 * gap * x1.ravel()

    def centre_gap(self) -> float:
        return abs(self.centre.energy(self.labels[1]) - self.centre.energy(self.labels[0]))

    def _match(self, ev: Evaluation) -> list[StateLabel]:
        """Roots at ``ev`` carrying the centre pair (largest summed squared overlap)."""
        try:
            overlaps = self.engine.overlaps(self.centre, ev)
        except Exception:  # engines without overlaps: keep the adiabatic labels
            return list(self.labels)
        a, b = self.labels
        if a.manifold == b.manifold:
            rows = [s.label for s in self.centre.manifold(a.manifold)]
            cols = [s.label for s in ev.manifold(a.manifold)]
            O = overlaps[a.manifold]
            weight = (O[[rows.index(a), rows.index(b)]] ** 2).sum(axis=0)
            best = np.argsort(weight)[::-1][:2]
            return [cols[int(i)] for i in best]
        out = []
        for lab in (a, b):
            rows = [s.label for s in self.centre.manifold(lab.manifold)]
            cols = [s.label for s in ev.manifold(lab.manifold)]
            O = overlaps[lab.manifold]
            out.append(cols[int(np.argmax(np.abs(O[rows.index(lab)])))])
        return out


def probe_crossing(engine: Engine, geometry: Geometry, labels: Sequence[str | StateLabel],
                   plane: Any, settings: ProbeSettings | None = None) -> ProbeResult:
    """Probe the gap of the pair ``labels`` (adiabatic labels at ``geometry``) in ``plane``.

    ``plane`` holds two Cartesian directions (any shapes with 3N entries each); they are
    orthonormalized. See the module docstring for the method and the verdicts.
    """
    opts = settings or ProbeSettings()
    pair = [parse_state(x) for x in labels]
    if len(pair) != 2:
        raise InputError("the probe needs exactly two states")
    e1, e2 = _orthonormal(*[np.asarray(v, float).ravel() for v in plane])
    meter = _GapMeter(engine, geometry, pair)
    d = opts.radius_bohr
    gap0 = meter.centre_gap()
    gaps: dict[str, float] = {"centre": gap0}

    def q_value(direction: np.ndarray, radius: float, tag: str) -> float:
        plus, minus = meter.gap(radius * direction), meter.gap(-radius * direction)
        gaps[f"{tag}+"], gaps[f"{tag}-"] = plus, minus
        return 0.5 * (plus**2 + minus**2) - gap0**2

    rows, rhs = [], []
    for phi in (0.0, 60.0, 120.0):
        c, s = math.cos(math.radians(phi)), math.sin(math.radians(phi))
        rows.append([c * c, 2 * c * s, s * s])
        rhs.append(q_value(c * e1 + s * e2, d, f"phi{phi:.0f}") / d**2)
    a, b, c = np.linalg.solve(np.array(rows), np.array(rhs))
    form = np.array([[a, b], [b, c]])
    lam, vec = np.linalg.eigh(form)
    order_idx = [1, 0]  # largest first
    directions = tuple(vec[0, i] * e1 + vec[1, i] * e2 for i in order_idx)
    lam = lam[order_idx]
    orders, q_small = [], []
    for k, v in enumerate(directions):
        q1 = q_value(v, d, f"axis{k + 1}")
        q2 = q_value(v, 2 * d, f"axis{k + 1}x2")
        q_small.append(q1)
        orders.append(0.5 * math.log2(q2 / q1) if q1 > 0 and q2 > 0 else math.inf)
    g_norm = math.sqrt(max(lam[0], 0.0)) / 2.0
    h_norm = math.sqrt(max(lam[1], 0.0)) / 2.0
    verdict, message = _verdict(gap0, q_small, orders, opts)
    return ProbeResult(verdict=verdict, centre_gap_eh=gap0, radius_bohr=d, q_form=form,
                       g_tilde_norm=g_norm, h_tilde_norm=h_norm,
                       opening_orders=(orders[0], orders[1]), principal_directions=directions,
                       gaps_eh=gaps, evaluations=meter.count, message=message)


def _verdict(gap0: float, q: list[float], orders: list[float],
             opts: ProbeSettings) -> tuple[str, str]:
    if gap0 > opts.centre_gap_tol_eh:
        return "avoided", (f"the gap at the centre is {gap0:.2e} Eh (> {opts.centre_gap_tol_eh:.0e}):"
                           " not a crossing at this resolution")
    scale = max(q[0], 0.0)
    linear = [orders[k] <= opts.linear_order_max and q[k] > (opts.flat_ratio**2) * scale
              and q[k] > 0 for k in range(2)]
    if linear[0] and linear[1]:
        return "conical", "the gap vanishes at the centre and opens linearly in both directions"
    if linear[0] or linear[1]:
        return "one-dimensional", ("the gap opens linearly in one direction only: a crossing of "
                                   "non-interacting states (different spin or symmetry) or of "
                                   "the wrong topology")
    return "avoided", "the gap does not open linearly in any direction"


@dataclass(frozen=True, kw_only=True)
class DirectionCheck:
    """Outcome of :func:`second_direction_check`.

    Attributes
    ----------
    vector
        (Hessian of dE^2) . y, flat (3N,), Eh^2/bohr^2, rigid-body part removed.
    direction
        ``vector`` normalized (zeros when it vanishes).
    coupling_along
        sqrt(y . vector / 8): the estimate of |h . y| (Eh/bohr, h the interstate coupling
        vector); about 0 when y carries no coupling.
    evaluations
        Engine evaluations used (two, with gradients of both states).
    """

    vector: np.ndarray = field(repr=False)
    direction: np.ndarray = field(repr=False)
    coupling_along: float
    evaluations: int


def second_direction_check(engine: Engine, centre: Evaluation, labels: Sequence[str | StateLabel],
                           direction: Any, *, xhat: Any = None, step_bohr: float = 0.005,
                           external: np.ndarray | None = None) -> DirectionCheck:
    """Independent check of a second branching-plane direction y by finite differences.

    Near an intersection the linear model gives dE^2 = 4[(g.r)^2 + (h.r)^2] (half-difference
    g), so the Hessian of dE^2 is M = 8(g g^T + h h^T) (a rank-two matrix spanning the
    branching plane) and, with grad(dE^2) = 2 dE x1 from analytic gradients,

        M y ~ [grad dE^2(+delta y) - grad dE^2(-delta y)] / (2 delta).

    For y orthogonal to x-hat this is 8 h (h.y) (plus 8 g (g.y), which vanishes when x-hat is
    along g): it points along the true second direction whenever y has any part of it, and
    it is ~0 at a one-dimensional crossing (states that do not couple), where
    dE^2 = (x1.r)^2 has no second direction. The central difference removes the residual gap
    of the centre and the term linear in the offset (the same reason as the probe's Q).

    Parameters
    ----------
    engine, centre
        The engine and its evaluation at the centre (roots matched to it by overlap).
    labels
        The pair's adiabatic labels at the centre.
    direction
        y, any shape with 3N entries (normalized here).
    xhat
        The gap direction; when given, y is orthogonalized to it first.
    step_bohr
        delta (bohr).
    external
        Rigid-body basis (k, 3N) to remove from the result, or None.

    Limits: assumes the centre gap is far below (h.y)^2 / (curvature of dE along y); a
    residual gap of 1e-3 Eh and a gap curvature of 0.5 Eh/bohr^2 look like a coupling of
    about 0.01 Eh/bohr.
    """
    pair = [parse_state(x) for x in labels]
    y = np.asarray(direction, float).ravel()
    if xhat is not None:
        x = np.asarray(xhat, float).ravel()
        y = y - (y @ x) * x
    norm = float(np.linalg.norm(y))
    if norm < 1e-12:
        raise InputError("the direction to check is zero (or parallel to the gap direction)")
    y = y / norm
    meter = _GapMeter(engine, centre.geometry, pair, centre=centre)
    plus = meter.gap_gradient_of_square(step_bohr * y)
    minus = meter.gap_gradient_of_square(-step_bohr * y)
    vec = (plus - minus) / (2.0 * step_bohr)
    if external is not None and np.size(external):
        vec = vec - external.T @ (external @ vec)
    n = float(np.linalg.norm(vec))
    along = math.sqrt(max(float(y @ vec), 0.0) / 8.0)
    return DirectionCheck(vector=vec, direction=vec / n if n > 0 else np.zeros_like(vec),
                          coupling_along=along, evaluations=meter.count)
