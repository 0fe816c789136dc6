"""Settings of the optimizer loop and of its convergence tests (frozen, keyword-only).

Units: bohr for lengths and steps (in the coordinate system's q-space for the trust radius),
hartree for energies, Eh/bohr for forces, Eh/bohr^2 for curvatures.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any, Mapping

from ..errors import InputError

__all__ = ["OptimizerSettings", "ConvergenceSettings", "HESSIAN_UPDATES", "CURVATURE_POLICIES",
           "INITIAL_HESSIANS", "CONVERGENCE_PRESETS"]

HESSIAN_UPDATES = ("bfgs", "sr1", "psb", "bofill")
CURVATURE_POLICIES = ("damp", "skip")
INITIAL_HESSIANS = ("model", "diagonal")


def _choice(name: str, value: str, valid: tuple[str, ...]) -> str:
    low = str(value).lower()
    if low not in valid:
        raise InputError(f"unknown {name} {value!r}: valid choices are {', '.join(valid)}")
    return low


def _positive(name: str, value: Any, *, allow_zero: bool = False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        raise InputError(f"{name} must be {'>= 0' if allow_zero else '> 0'}, got {value!r}")
    return v


def _count(name: str, value: Any, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise InputError(f"{name} must be an integer >= {minimum}, got {value!r}")
    return value


def _replace_checked(obj: Any, overrides: Mapping[str, Any]) -> Any:
    valid = [f.name for f in dataclasses.fields(obj)]
    unknown = sorted(set(overrides) - set(valid))
    if unknown:
        raise InputError(
            f"unknown {type(obj).__name__} option(s) {', '.join(unknown)}: valid options are "
            f"{', '.join(valid)}"
        )
    return dataclasses.replace(obj, **dict(overrides))


@dataclass(frozen=True, kw_only=True)
class OptimizerSettings:
    """How the optimizer takes steps.

    Attributes
    ----------
    max_iterations
        Accepted steps before the run stops with status 'step limit reached'.
    trust_radius, trust_min, trust_max
        Initial, smallest and largest trust radius (Euclidean norm of the step in q-space,
        bohr for Cartesian coordinates). 0.3 / 1e-3 / 1.0 bohr are our defaults for minima;
        0.1 bohr is a sensible start for crossing searches.
    hessian_update
        Quasi-Newton update: 'bfgs', 'sr1', 'psb' or 'bofill'.
    curvature_policy
        What an update does when the step fails the curvature condition (s.y too small):
        'damp' (Powell damping of y) or 'skip' (leave the Hessian unchanged).
    initial_hessian
        'model' (coordinate system's model Hessian, Lindh for molecules) or 'diagonal'
        (``diagonal_curvature`` times the identity).
    diagonal_curvature
        Curvature of the 'diagonal' start Hessian, Eh/bohr^2.
    min_curvature, max_curvature
        Eigenvalues of the quasi-Newton Hessian are clamped to this range after every update
        (keeps it positive definite for minimizations).
    max_atom_step
        Largest displacement of any single atom in one step, bohr (None: no cap).
    energy_rise_tolerance
        True objectives: a trial whose value rises by more than this (Eh) is rejected.
    merit_rise_tolerance
        Composed objectives: a trial whose merit rises by more than this (Eh) is rejected.
    grow_after
        Composed objectives: consecutive accepted steps at the trust boundary before the
        trust radius doubles.
    max_rejections
        Consecutive rejected trials before the run stops with status 'failed'.
    """

    max_iterations: int = 100
    trust_radius: float = 0.3
    trust_min: float = 1e-3
    trust_max: float = 1.0
    hessian_update: str = "bfgs"
    curvature_policy: str = "damp"
    initial_hessian: str = "model"
    diagonal_curvature: float = 0.5
    min_curvature: float = 1e-4
    max_curvature: float = 1e2
    max_atom_step: float | None = None
    energy_rise_tolerance: float = 1e-8
    merit_rise_tolerance: float = 1e-4
    grow_after: int = 2
    max_rejections: int = 8

    def __post_init__(self) -> None:
        _count("max_iterations", self.max_iterations, 0)
        _count("grow_after", self.grow_after, 1)
        _count("max_rejections", self.max_rejections, 1)
        for name in ("trust_radius", "trust_min", "trust_max", "diagonal_curvature",
                     "min_curvature", "max_curvature"):
            object.__setattr__(self, name, _positive(name, getattr(self, name)))
        for name in ("energy_rise_tolerance", "merit_rise_tolerance"):
            object.__setattr__(self, name, _positive(name, getattr(self, name), allow_zero=True))
        if not self.trust_min <= self.trust_radius <= self.trust_max:
            raise InputError(
                f"trust radii must satisfy trust_min <= trust_radius <= trust_max, got "
                f"{self.trust_min} <= {self.trust_radius} <= {self.trust_max}"
            )
        if self.min_curvature >= self.max_curvature:
            raise InputError(
                f"min_curvature ({self.min_curvature}) must be below max_curvature ({self.max_curvature})"
            )
        if self.max_atom_step is not None:
            object.__setattr__(self, "max_atom_step", _positive("max_atom_step", self.max_atom_step))
        object.__setattr__(self, "hessian_update",
                           _choice("Hessian update", self.hessian_update, HESSIAN_UPDATES))
        object.__setattr__(self, "curvature_policy",
                           _choice("curvature policy", self.curvature_policy, CURVATURE_POLICIES))
        object.__setattr__(self, "initial_hessian",
                           _choice("initial Hessian", self.initial_hessian, INITIAL_HESSIANS))

    def with_overrides(self, **overrides: Any) -> "OptimizerSettings":
        """A copy with some fields changed (unknown names raise InputError)."""
        return _replace_checked(self, overrides)


#: Threshold sets. 'normal' is the widely used set for ordinary minima (common practice, no
#: single published source): max force 4.5e-4, rms force 3e-4 Eh/bohr, max step 1.8e-3, rms
#: step 1.2e-3 bohr, energy change 1e-6 Eh. 'loose' (x4, energy 1e-5) and 'tight' (/30,
#: energy 1e-8) are our own scalings of it.
CONVERGENCE_PRESETS: dict[str, dict[str, float]] = {
    "loose": dict(max_force=1.8e-3, rms_force=1.2e-3, max_step=7.2e-3, rms_step=4.8e-3,
                  energy_change=1e-5),
    "normal": dict(max_force=4.5e-4, rms_force=3.0e-4, max_step=1.8e-3, rms_step=1.2e-3,
                   energy_change=1e-6),
    "tight": dict(max_force=1.5e-5, rms_force=1.0e-5, max_step=6.0e-5, rms_step=4.0e-5,
                  energy_change=1e-8),
}


@dataclass(frozen=True, kw_only=True)
class ConvergenceSettings:
    """Thresholds of the convergence tests; every test must pass.

    Forces are tested on the objective's test gradient (Cartesian, after removing rigid-body
    and constrained directions), steps on the Cartesian displacement that led to the current
    geometry, the energy change on the objective value. ``None`` switches a test off
    (at least one force test must stay on). Objective-specific tests (e.g. the gap of a
    crossing) are added by the objective.
    """

    max_force: float | None = 4.5e-4
    rms_force: float | None = 3.0e-4
    max_step: float | None = 1.8e-3
    rms_step: float | None = 1.2e-3
    energy_change: float | None = 1e-6

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if v is not None:
                object.__setattr__(self, f.name, _positive(f.name, v))
        if self.max_force is None and self.rms_force is None:
            raise InputError("at least one force threshold (max_force or rms_force) is needed")

    @classmethod
    def preset(cls, name: str = "normal") -> "ConvergenceSettings":
        """One of the named threshold sets: 'loose', 'normal' or 'tight'."""
        key = _choice("convergence preset", name, tuple(CONVERGENCE_PRESETS))
        return cls(**CONVERGENCE_PRESETS[key])

    def with_overrides(self, **overrides: Any) -> "ConvergenceSettings":
        """A copy with some thresholds changed (unknown names raise InputError)."""
        return _replace_checked(self, overrides)
