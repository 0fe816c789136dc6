"""Builders that turn task options into engine, objective, coordinates and optimizer."""

from __future__ import annotations

from dataclasses import replace
from typing import Any, Callable, Iterable

from ..coords.cartesian import CartesianCoordinates
from ..coords.constraints import Constraint
from ..engine import make_engine
from ..engine.base import MethodSpec
from ..errors import InputError
from ..geometry import Geometry
from ..optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from ..tracking import TrackingOptions
from .common import RunOptions

__all__ = ["build_engine", "build_coordinates", "build_optimizer", "tracking_options"]


def build_engine(spec: MethodSpec, run_dir: Any = None, *, warm_start: bool = True,
                 follow_instability: bool = False):
    """The engine for ``spec``; PySCF output goes into the run directory's log file."""
    kwargs: dict[str, Any] = {}
    if run_dir is not None:
        kwargs["log_path"] = str(run_dir.pyscf_log)
    if spec.method != "casscf":
        kwargs["warm_start"] = bool(warm_start)
        kwargs["stability"] = "follow" if follow_instability else "report"
    return make_engine(spec, **kwargs)


def tracking_options(options: RunOptions) -> TrackingOptions:
    return TrackingOptions(enabled=options.tracking, min_overlap=options.min_overlap,
                           strict=options.strict_tracking)


def _frozen_atoms(constraints: Iterable[Constraint]) -> tuple[int, ...]:
    return tuple(a for c in constraints if c.kind == "atom" for a in c.atoms)


def build_coordinates(geometry: Geometry, options: RunOptions, *, composed: bool = False):
    """The coordinate system a task asked for ('auto' chooses, see RunOptions)."""
    for c in options.constraints:
        c.check(geometry.natom)
    if len(set(_frozen_atoms(options.constraints))) >= geometry.natom:
        raise InputError("every atom is frozen: nothing is left to optimize (unfreeze at least "
                         "one atom)")
    kind = options.coordinates
    internal_constraints = [c for c in options.constraints if c.kind != "atom"]
    if kind == "auto":
        kind = "cartesian" if (composed or geometry.natom < 3) else "internal"
        if internal_constraints:
            kind = "internal"
    if kind == "internal":
        if composed:
            raise InputError("this crossing search works in Cartesian coordinates; drop "
                             "--coords internal (or use the penalty search)")
        from ..coords.internal import RedundantInternals

        return RedundantInternals(geometry.symbols, geometry.coords_bohr, options.constraints)
    if internal_constraints:
        raise InputError("bond, angle and dihedral constraints need internal coordinates "
                         "(--coords internal or auto)")
    return CartesianCoordinates(geometry.natom, project_external=geometry.natom > 1,
                                frozen_atoms=_frozen_atoms(options.constraints),
                                symbols=geometry.symbols)


def build_optimizer(objective: Any, coords: Any, options: RunOptions, *,
                    adjust: Callable[[OptimizerSettings], OptimizerSettings] | None = None,
                    observers: Iterable[Any] = ()) -> Optimizer:
    """One optimizer for every task: settings and convergence thresholds from ``options``.

    ``adjust`` lets a task change the defaults (crossing searches start with a smaller trust
    radius); a trust radius the user gave always wins.
    """
    settings = OptimizerSettings(max_iterations=options.max_iterations,
                                 hessian_update=options.hessian_update)
    if adjust is not None:
        settings = adjust(settings)
    if options.trust_radius is not None:
        radius = options.trust_radius
        settings = replace(settings, trust_radius=radius, trust_min=min(settings.trust_min, radius),
                           trust_max=max(radius, settings.trust_max))
    convergence = ConvergenceSettings.preset(options.convergence)
    if options.convergence_overrides:
        convergence = convergence.with_overrides(**options.convergence_overrides)
    return Optimizer(objective, coords, settings=settings, convergence=convergence,
                     observers=observers)
