"""Characterization of a crossing point from its branching-space vectors.

Linear two-state model around an intersection at R_X (displacement r):

    E_upper/lower(R_X + r) = E_X + s.r +/- sqrt((g.r)^2 + (h.r)^2)

with the **half-difference convention** g = (g_upper - g_lower)/2 (half of x1, the full
gradient difference used by the searches), s = (g_lower + g_upper)/2 and h the interstate
coupling vector <lower|dH/dR|upper> (not the derivative coupling). Quantities, as defined by
Fdez. Galvan, Delcey, Pedersen, Aquilante, Lindh, J. Chem. Theory Comput. 2016, 12, 3636:

* orthogonalized plane: g~, h~ from the 2x2 Gram matrix of (g, h) (|g~| >= |h~|);
* pitch delta_gh = sqrt((|g~|^2 + |h~|^2)/2), Eh/bohr (doubles with the full difference);
* asymmetry Delta_gh = (|g~|^2 - |h~|^2)/(|g~|^2 + |h~|^2), in [0, 1];
* tilt: s_x = s.x-hat/delta, s_y = s.y-hat/delta, relative tilt sigma = |(s_x, s_y)|,
  heading theta_s = atan2(s_y, s_x), reported folded into [0, 90] degrees;
* peaked vs sloped: P = sigma^2 (1 - Delta cos 2 theta_s)/(1 - Delta^2); P < 1 peaked;
* bifurcating vs single-path: B = (sigma^2/(4 Delta^2))^(1/3) [((1+Delta) cos^2 theta_s)^(1/3)
  + ((1-Delta) sin^2 theta_s)^(1/3)]; B < 1 bifurcating (two descent channels).

Vectors are Cartesian (not mass-weighted). With a branching-plane update instead of couplings,
only the direction of h is known; its magnitude then comes from the in-plane probe
(:func:`characterize_from_probe`) and every number is labelled an estimate. For crossings of
states that do not couple (different spin) only the gap direction and |x1| are meaningful.

These numbers describe the linear model at the point found; they inherit every error of the
electronic-structure method (check with higher-level methods).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["BranchingCharacter", "characterize_crossing", "characterize_from_probe",
           "cone_energies"]

CONVENTION = "half-difference: g = (g_upper - g_lower)/2, s = (g_lower + g_upper)/2"


@dataclass(frozen=True, kw_only=True)
class BranchingCharacter:
    """Shape of the surfaces around a crossing point (see the module docstring).

    ``tilt_x``/``tilt_y`` are signed along ``x_hat``/``y_hat``; the heading is reported folded.
    ``kind`` is 'conical' (two branching directions), 'one-dimensional' (different spin or
    symmetry: only ``x1_norm`` and ``x_hat`` are defined, the rest is None) or 'avoided' (the
    probe found a finite gap: nothing but ``x1_norm`` is meaningful). ``h_source`` says
    where h came from: 'coupling' (engine), 'estimate' (probe), or 'none'.
    """

    kind: str
    h_source: str
    x1_norm: float
    g_norm: float | None = None
    h_norm: float | None = None
    pitch: float | None = None
    asymmetry: float | None = None
    tilt_x: float | None = None
    tilt_y: float | None = None
    relative_tilt: float | None = None
    tilt_heading_deg: float | None = None
    peaked_measure: float | None = None
    bifurcation_measure: float | None = None
    x_hat: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    y_hat: np.ndarray | None = field(default=None, repr=False)
    convention: str = CONVENTION

    @property
    def topography(self) -> str | None:
        """'peaked' (P < 1) or 'sloped'; None for one-dimensional crossings."""
        if self.peaked_measure is None:
            return None
        return "peaked" if self.peaked_measure < 1.0 else "sloped"

    @property
    def paths(self) -> str | None:
        """'bifurcating' (B < 1) or 'single-path'; None for one-dimensional crossings."""
        if self.bifurcation_measure is None:
            return None
        return "bifurcating" if self.bifurcation_measure < 1.0 else "single-path"

    def to_dict(self) -> dict[str, Any]:
        """JSON-able summary for result.json key ``branching``."""
        def num(x: float | None) -> float | None:
            return None if x is None or not math.isfinite(x) else float(x)

        return {
            "kind": self.kind, "h_source": self.h_source, "convention": self.convention,
            "x1_norm_eh_bohr": num(self.x1_norm), "g_norm_eh_bohr": num(self.g_norm),
            "h_norm_eh_bohr": num(self.h_norm), "pitch": num(self.pitch),
            "asymmetry": num(self.asymmetry), "tilt": num(self.relative_tilt),
            "tilt_heading_deg": num(self.tilt_heading_deg),
            "peaked_measure": num(self.peaked_measure), "topography": self.topography,
            "bifurcation_measure": num(self.bifurcation_measure), "paths": self.paths,
        }


def _flat(v: Any) -> np.ndarray:
    return np.asarray(v, float).ravel()


def characterize_crossing(g_lower: Any, g_upper: Any, h: Any = None, *,
                          one_dimensional: bool = False,
                          h_source: str = "coupling") -> BranchingCharacter:
    """Characterize a crossing from the two gradients and the coupling vector h (Eh/bohr).

    Parameters
    ----------
    g_lower, g_upper
        Gradients of the lower and upper state at the crossing, any shape with 3N entries.
    h
        Interstate coupling vector; None (or ``one_dimensional=True``) for states that do not
        couple, which gives only the gap direction and |x1|.
    h_source
        Label of h: 'coupling' when it came from the engine, 'estimate' otherwise.
    """
    gl, gu = _flat(g_lower), _flat(g_upper)
    x1 = gu - gl
    x1_norm = float(np.linalg.norm(x1))
    xhat = x1 / x1_norm if x1_norm > 0 else x1
    if one_dimensional or h is None:
        return BranchingCharacter(kind="one-dimensional", h_source="none", x1_norm=x1_norm,
                                  x_hat=xhat)
    return _cone(0.5 * x1, _flat(h), 0.5 * (gl + gu), x1_norm, h_source)


def characterize_from_probe(probe: Any, g_lower: Any, g_upper: Any) -> BranchingCharacter:
    """Characterize from an in-plane probe (no couplings): |g~|, |h~| and their directions
    from the probe's quadratic-form fit, the tilt from the mean gradient. Labelled 'estimate'.

    The sign of g~ is aligned with the analytic gradient difference.
    """
    gl, gu = _flat(g_lower), _flat(g_upper)
    x1 = gu - gl
    e1, e2 = (np.asarray(v, float).ravel() for v in probe.principal_directions)
    if e1 @ x1 < 0:
        e1 = -e1
    if probe.verdict != "conical":  # one-dimensional, or avoided: no cone to describe
        one = characterize_crossing(gl, gu, None)
        return one if probe.verdict == "one-dimensional" else \
            BranchingCharacter(kind="avoided", h_source="none", x1_norm=one.x1_norm,
                               x_hat=one.x_hat)
    g = probe.g_tilde_norm * e1
    h = probe.h_tilde_norm * e2
    return _cone(g, h, 0.5 * (gl + gu), float(np.linalg.norm(x1)), "estimate")


def _cone(g: np.ndarray, h: np.ndarray, s: np.ndarray, x1_norm: float,
          h_source: str) -> BranchingCharacter:
    gram = np.array([[g @ g, g @ h], [g @ h, h @ h]])
    lam, vec = np.linalg.eigh(gram)  # ascending
    g2, h2 = float(max(lam[1], 0.0)), float(max(lam[0], 0.0))
    gt = vec[0, 1] * g + vec[1, 1] * h
    ht = vec[0, 0] * g + vec[1, 0] * h
    gn, hn = math.sqrt(g2), math.sqrt(h2)
    xhat = gt / gn if gn > 0 else gt
    yhat = ht / hn if hn > 0 else ht
    pitch = math.sqrt(0.5 * (g2 + h2))
    total = g2 + h2
    asym = (g2 - h2) / total if total > 0 else 0.0
    sx = float(s @ xhat) / pitch if pitch > 0 else 0.0
    sy = float(s @ yhat) / pitch if pitch > 0 and hn > 0 else 0.0
    tilt = math.hypot(sx, sy)
    theta = math.atan2(sy, sx)
    folded = math.degrees(math.atan2(abs(sy), abs(sx)))
    return BranchingCharacter(
        kind="conical", h_source=h_source, x1_norm=x1_norm, g_norm=gn, h_norm=hn, pitch=pitch,
        asymmetry=asym, tilt_x=sx, tilt_y=sy, relative_tilt=tilt,
        tilt_heading_deg=folded, peaked_measure=_peaked(tilt, asym, theta),
        bifurcation_measure=_bifurcation(tilt, asym, theta), x_hat=xhat, y_hat=yhat)


def _peaked(tilt: float, asym: float, theta: float) -> float:
    """P in the equivalent form s_x^2/(1 + Delta) + s_y^2/(1 - Delta) (finite at Delta = 1)."""
    sx2 = (tilt * math.cos(theta)) ** 2
    sy2 = (tilt * math.sin(theta)) ** 2
    if asym >= 1.0:
        return sx2 / 2.0 + (math.inf if sy2 > 1e-30 else 0.0)
    return sx2 / (1.0 + asym) + sy2 / (1.0 - asym)


def _bifurcation(tilt: float, asym: float, theta: float) -> float:
    if asym <= 0.0:
        return 0.0 if tilt == 0.0 else math.inf  # circular cone: single path unless untilted
    c2, s2 = math.cos(theta) ** 2, math.sin(theta) ** 2
    pre = (tilt**2 / (4.0 * asym**2)) ** (1.0 / 3.0)
    return pre * (((1.0 + asym) * c2) ** (1.0 / 3.0) + ((1.0 - asym) * s2) ** (1.0 / 3.0))


def cone_energies(character: BranchingCharacter, radius: float,
                  angles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear-model (lower, upper) energies relative to E_X on a circle in the plane."""
    d, D, s = character.pitch, character.asymmetry, character.relative_tilt
    theta_s = math.atan2(character.tilt_y or 0.0, character.tilt_x or 0.0)
    root = np.sqrt(1.0 + D * np.cos(2.0 * angles))
    tilt = s * np.cos(angles - theta_s)
    return radius * d * (tilt - root), radius * d * (tilt + root)
