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
    check_high_spin_pair(labels, method)
    # impossible requests: before any SCF (a given engine, e.g. a model, knows its own states)
    spec = prepare_method(method, labels, geometry if engine is None else None)
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
    symmetry = pair_symmetry(engine, geometry, labels) if resume_state is None else None
    one_dimensional = _one_dimensional(labels, spec) or \
        (symmetry is not None and symmetry.get("can_mix") is False)
    name = choose_search(labels, search, spec, symmetry)
    settings = default_settings(name, _gap_preset(options))
    if gap_tolerance_eh is not None:
        if not gap_tolerance_eh > 0:
            raise InputError(f"the gap tolerance must be positive, got {gap_tolerance_eh}")
        settings = with_gap_tolerance(settings, float(gap_tolerance_eh))
    objective = make_crossing_objective(engine, labels, name, settings,
                                        tracking_options=tracking_options(options),
                                        symmetry=symmetry)
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
    searched += _symmetry_notes(symmetry, name, labels)
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
    data["verification"] = verification_record(objective, result)
    if symmetry is not None and symmetry.get("can_mix") is False:
        data["verification"]["symmetry"] = (
            f"One-dimensional by symmetry: no vibration of symmetry {symmetry['coupling_irrep']} "
            f"({symmetry['point_group']}) can couple the pair.")
    if symmetry is not None:
        data["pair_symmetry"] = symmetry
    final = _final_irreps(engine, result.value.evaluation)
    if final is not None:
        data["point_group"], data["irreps"] = final
    sections = [("Convergence check", verification_text(data["verification"]))]
    return finish_task("cross", result, labels, spec, run_dir, search=name, warnings=warnings,
                       data=data, branching=branching, sections=sections)


def check_high_spin_pair(labels: Sequence[StateLabel], method: MethodSpec) -> None:
    """The separate high-spin T1 pairs only with S0 (both separate SCF states).

    A response singlet S_n paired with a separately optimized high-spin determinant compares
    states with orbital relaxation on one side only (formaldehyde at its ground-state
    geometry: T1 2.09 eV as a high-spin SCF state, 3.22 eV from linear response, CIS/STO-3G
    on our machine), which drives the search far off (C=O collapsing to 0.82 angstrom).
    """
    if method.triplets != "high-spin":
        return
    triplet = [lab for lab in labels if lab.manifold == "T"]
    other = [lab for lab in labels if lab.manifold != "T"]
    if triplet and other and not other[0].is_reference:
        raise InputError(
            f"{'/'.join(map(str, labels))}: the high-spin T1 (a separate SCF state) pairs only "
            "with S0, the other separate SCF state; for a crossing of an excited singlet with "
            "a triplet use response triplets (--triplets response), which treat both states "
            "alike")


def pair_symmetry(engine: Any, geometry: Geometry, labels: Sequence[StateLabel]) -> dict | None:
    """Point group and irreps of a same-spin pair at ``geometry``, and whether any nuclear
    motion can couple the two states (None when the engine gives no irreps, the pair is of
    different spin, or the geometry has no symmetry)."""
    from ..engine.symmetry import can_mix, find_point_group, irrep_product, vibration_irreps

    with_irreps = getattr(engine, "with_irreps", None)
    if not callable(with_irreps) or labels[0].manifold != labels[1].manifold:
        return None
    group = find_point_group(geometry.symbols, geometry.coords_bohr)
    if group.name == "C1":
        return None
    evaluation = with_irreps(engine.states(geometry))
    irreps = [evaluation.state(lab).irrep for lab in labels]
    out: dict[str, Any] = {"point_group": group.name, "irreps": dict(zip(map(str, labels), irreps)),
                           "deviation_from_symmetry_bohr": group.deviation_bohr,
                           "can_mix": None, "coupling_irrep": None}
    if None not in irreps:
        modes = vibration_irreps(group, geometry.coords_bohr)
        out["coupling_irrep"] = irrep_product(group, *irreps)
        out["can_mix"] = can_mix(group, irreps[0], irreps[1], modes)
        out["vibrations"] = modes
    return out


def _symmetry_notes(symmetry: dict | None, name: str, labels: Sequence[StateLabel]) -> list[str]:
    if not symmetry or symmetry.get("can_mix") is None:
        return []
    a, b = (symmetry["irreps"][str(lab)] for lab in labels)
    group = symmetry["point_group"]
    if symmetry["can_mix"] is False:
        return [f"{labels[0]} ({a}) and {labels[1]} ({b}) differ in symmetry ({group}) and no "
                f"vibration of the molecule has the symmetry {symmetry['coupling_irrep']} that "
                f"could couple them: their crossing is one-dimensional"
                + (" (searched as such)" if name == "spin" else
                   f"; the {name} search treats it as conical")]
    if a != b:
        return [f"{labels[0]} ({a}) and {labels[1]} ({b}) differ in symmetry ({group}), but "
                f"vibrations of symmetry {symmetry['coupling_irrep']} couple them: away from "
                f"{group} they can intersect conically, and a converged point that keeps "
                f"{group} can be a saddle of the seam; to look for a lower crossing, restart "
                "from a geometry displaced out of the symmetry"]
    return []


def _final_irreps(engine: Any, evaluation: Any) -> tuple[str, dict] | None:
    with_irreps = getattr(engine, "with_irreps", None)
    if not callable(with_irreps) or evaluation is None:
        return None
    try:
        labelled = with_irreps(evaluation)
    except Exception as exc:  # irreps are a report, never a reason to lose the result
        log.info("no irreps at the final geometry: %s", exc)
        return None
    return labelled.point_group, labelled.irreps()


def verification_record(objective: Any, result: Any) -> dict[str, Any]:
    """What was verified at the final point, with the residual seam gradient (result.json)."""
    record = getattr(objective, "verification", None)
    value = result.value
    residual = np.asarray(value.test_gradient, float).ravel()
    if record is not None and result.converged:
        return dict(record)
    out = {"verified": False, "mode": getattr(objective, "mode", objective.search),
           "residual_seam_gradient_max_eh_bohr": float(np.abs(residual).max()),
           "residual_seam_gradient_rms_eh_bohr": float(np.sqrt(np.mean(residual ** 2)))}
    if result.converged:
        out["verified"] = True
        out["how"] = {"spin": "one-dimensional test (1 - x-hat x-hat^T) gbar",
                      "penalty": "stationary point of the penalty function with the gap "
                                 "within the tolerance (the mean energy lies slightly below "
                                 "the seam)"}.get(objective.search, "convergence tests")
    else:
        out["how"] = "not converged"
    return out


def verification_text(record: dict[str, Any]) -> str:
    lines = [f"Verified: {'yes' if record.get('verified') else 'no'} ({record.get('how', '-')}).",
             f"Residual seam gradient: max {record['residual_seam_gradient_max_eh_bohr']:.2e}, "
             f"rms {record['residual_seam_gradient_rms_eh_bohr']:.2e} Eh/bohr."]
    if record.get("one_dimensional_residual_max_eh_bohr") is not None:
        lines.append("Largest component of (1 - x-hat x-hat^T) gbar: "
                     f"{record['one_dimensional_residual_max_eh_bohr']:.2e} Eh/bohr (non-zero at "
                     "a conical intersection, where gbar has a part along the second direction).")
    if record.get("switched_to_one_dimensional"):
        lines.append(f"The search switched to the one-dimensional test: "
                     f"{record['switched_to_one_dimensional']}.")
    check = record.get("check")
    if check and "coupling_along_y_eh_bohr" in check:
        lines.append(f"Second branching direction: coupling along it {check['coupling_along_y_eh_bohr']:.3e} "
                     f"Eh/bohr ({check['evaluations']} extra evaluations).")
    elif check:
        found = "found" if check["coupling_found"] else "not found"
        lines.append(f"A second branching direction was {found} along {check['directions_tested']} "
                     f"test directions (largest |h.y|/|g| {check['largest_coupling_ratio']:.3f}; "
                     f"{check['evaluations']} extra evaluations).")
    if record.get("symmetry"):
        lines.append(record["symmetry"])
    return " ".join(lines)


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
