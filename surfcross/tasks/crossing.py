"""Minimum-energy crossing point of two states, then its characterization."""

from __future__ import annotations

import logging
from dataclasses import replace
from typing import Any, Callable, Iterable, Sequence

import numpy as np

from ..analysis.branching import characterize_crossing, characterize_from_probe
from ..analysis.probe import ProbeSettings, plane_from_value, probe_crossing
from ..engine.base import MethodSpec
from ..errors import InputError
from ..geometry import Geometry
from ..optimize import Status
from ..objectives.searches import (choose_search, default_settings, make_crossing_objective,
                                   optimizer_settings_for, with_gap_tolerance)
from ..states import StateLabel, parse_states
from .build import build_coordinates, build_engine, build_optimizer, tracking_options
from .common import RunOptions, TaskResult, check_labels, method_warnings, prepare_method
from .run import final_stability, finish_task, run_optimization, task_spec

__all__ = ["find_crossing", "characterize"]

log = logging.getLogger(__name__)

def _gap_preset(options: RunOptions) -> str:
    return "tight" if options.convergence == "tight" else "default"


def find_crossing(geometry: Geometry, states: str | Sequence[str | StateLabel],
                  method: MethodSpec, *, search: str = "auto", options: RunOptions = RunOptions(),
                  run_dir: Any = None, observers: Iterable[Callable] = (), progress: bool = True,
                  engine: Any = None, resume_state: dict | None = None,
                  gap_tolerance_eh: float | None = None) -> TaskResult:
    """Locate the minimum-energy crossing point of two states from ``geometry``.

    Parameters
    ----------
    states
        Two labels, e.g. 'S1,S2' (conical intersection) or 'S1,T1' / 'S0,T1' (spin crossing).
    search
        'auto' (projected search with branching-plane updating, or with derivative couplings
        when the engine has them, for states of one spin; the one-dimensional spin-crossing
        search for states of different spin and for the reference state with a
        linear-response state, which do not couple), 'penalty', 'projected' or 'spin'.
    options
        Convergence preset ('tight' also tightens the gap tolerance from 1e-3 to 1e-4 Eh),
        tracking, step limit; ``characterize`` runs the in-plane probe and the branching
        analysis at a converged point (about 15 extra energy evaluations).
    gap_tolerance_eh
        Largest gap accepted as a crossing (Eh); default 1e-3 (1e-4 with 'tight').
    """
    labels = parse_states(states, count=2)
    check_labels(geometry, labels)
    spec = prepare_method(method, labels, geometry)  # impossible requests: before any SCF
    args = (geometry, labels, spec, search, options, run_dir, observers, progress,
            resume_state, gap_tolerance_eh)
    if engine is not None:
        return _find_crossing(*args, engine=engine)
    with build_engine(spec, run_dir, warm_start=options.warm_start,  # closed at the end
                      follow_instability=options.follow_instability) as own:
        return _find_crossing(*args, engine=own)


def _find_crossing(geometry: Geometry, labels: Sequence[StateLabel], spec: MethodSpec,
                   search: str, options: RunOptions, run_dir: Any, observers: Iterable[Callable],
                   progress: bool, resume_state: dict | None, gap_tolerance_eh: float | None, *,
                   engine: Any) -> TaskResult:
    one_dimensional = _one_dimensional(labels, spec)  # prepare_method changed roots only
    name = choose_search(labels, search, spec)
    settings = default_settings(name, _gap_preset(options))
    if gap_tolerance_eh is not None:
        if not gap_tolerance_eh > 0:
            raise InputError(f"the gap tolerance must be positive, got {gap_tolerance_eh}")
        settings = with_gap_tolerance(settings, float(gap_tolerance_eh))
    objective = make_crossing_objective(engine, labels, name, settings,
                                        tracking_options=tracking_options(options))
    composed = name != "penalty"
    if composed and any(c.kind != "atom" for c in options.constraints):
        raise InputError(f"the {name} search supports frozen atoms only; use the penalty search "
                         "for bond/angle/dihedral constraints")
    coords = build_coordinates(geometry, options, composed=composed)
    optimizer = build_optimizer(objective, coords, options,
                                adjust=lambda base: optimizer_settings_for(name, base))
    spec_dict = task_spec("cross", geometry, labels, spec, options, search=name,
                          gap_tolerance_eh=settings.gap_tol_eh)
    result = run_optimization(optimizer, geometry, run_dir, spec_dict, observers=observers,
                              progress=progress, resume_state=resume_state)
    stability = final_stability(engine, result)  # before the probe moves the engine on
    searched = list(getattr(objective, "warnings", ()))
    warnings = [w for w in method_warnings(spec, labels)  # one reference-state caveat is enough
                if not ("reference state" in w and any("reference state" in o for o in searched))]
    warnings += searched
    branching = None
    data: dict[str, Any] = {}
    if getattr(objective, "failed", False) and result.converged:
        # the penalty search gave up raising its weight with the gap still open
        result = replace(result, status=Status.FAILED,
                         message="the gap stayed above the tolerance at the largest penalty "
                                 "weight: probably an avoided crossing")
    if result.converged and options.characterize and not one_dimensional \
            and getattr(result.value, "subspace", None) is None:
        # the penalty search keeps no branching-plane directions to probe or analyse
        warnings.append("not characterized: the penalty search gives no branching plane; rerun "
                        "from final.xyz with --search projected to analyse and probe the crossing")
    elif result.converged and options.characterize:
        branching, probe = characterize(engine, result.value, same_spin=not one_dimensional)
        if probe is not None:
            data["probe"] = probe
            if probe["verdict"] == "avoided":
                warnings.append("the in-plane probe finds a finite gap at the centre: an avoided "
                                "crossing, not a true intersection")
    if result.value.evaluation is not None:
        warnings += list(result.value.evaluation.warnings)
    warnings += stability
    return finish_task("cross", result, labels, spec, run_dir, search=name, warnings=warnings,
                       data=data, branching=branching)


def _one_dimensional(labels: Sequence[StateLabel], method: MethodSpec) -> bool:
    """True when the pair cannot form a conical intersection in this method: states of
    different spin, or the reference state with a linear-response state (no coupling)."""
    if labels[0].manifold != labels[1].manifold:
        return True
    return method.method != "casscf" and any(lab.is_reference for lab in labels)


def characterize(engine: Any, value: Any, *, same_spin: bool) -> tuple[dict | None, dict | None]:
    """Branching analysis (and the in-plane probe) at a converged crossing.

    Uses the coupling vector h when the engine provides it; otherwise the probe's estimate of
    the branching plane (labelled as an estimate). Different-spin crossings: gap direction only.
    """
    ev = value.evaluation
    roots = value.info.get("roots") if value.info else None
    if ev is None or not roots:
        return None, None
    lower, upper = (parse_states(roots, count=2))
    g_lo, g_up = np.asarray(ev.gradient(lower)), np.asarray(ev.gradient(upper))
    if not same_spin:
        return characterize_crossing(g_lo, g_up, None, one_dimensional=True).to_dict(), None
    probe = probe_crossing(engine, value.evaluation.geometry, [lower, upper],
                           plane_from_value(value), ProbeSettings())
    h = ev.couplings.get((lower, upper)) if ev.couplings else None
    if h is not None:
        character = characterize_crossing(g_lo, g_up, np.asarray(h), h_source="coupling")
    else:
        character = characterize_from_probe(probe, g_lo, g_up)
    return character.to_dict(), probe.to_dict()
