"""Scans of one internal coordinate: relaxed on one state, along a seam, or rigid.

* **Relaxed scan** (``state`` given): at each value the coordinate is held (a constraint with
  that target) and every other coordinate is minimized on the state, in redundant internals.
  Each point starts from the previous point's geometry, first displaced so that the coordinate
  already has its new value; the state is followed by overlap within each point and handed
  on from point to point (the root that carried it at the previous point).
* **Seam scan** (``along_seam`` = two states): at each value the minimum-energy crossing
  point of the pair with the coordinate held. This uses the *penalty* search, the only
  crossing search that accepts held bonds, angles and dihedrals; its points have a small
  residual gap (reported). A point that does not converge is never handed on: the next
  point starts from the last converged point (its geometry and states), and the engine's
  warm-start guess is dropped.
* **Rigid scan** (``relax=False``): only the coordinate changes (a displacement in redundant
  internals), all states are computed and connected by overlap, nothing is minimized.

Units at the edge: bonds in angstrom, angles and dihedrals in degrees. A relaxed scan is a
sequence of constrained minima; along a dihedral it can jump when the molecule finds another
way down (watch the ``achieved`` values and the step to the previous point). Energies carry
the limits of the chosen method and need checking with higher-level methods.
"""

from __future__ import annotations

import logging
from typing import Any, Sequence

import numpy as np

from ..engine.base import MethodSpec
from ..errors import BackTransformError, InputError
from ..geometry import Geometry
from ..io.results import complete_result
from ..states import StateLabel, parse_state, parse_states
from ..tasks import RunOptions, TaskResult, find_crossing, prepare_method, relax
from ..tasks.build import build_engine
from ..tasks.common import check_labels, method_warnings
from ..units import HARTREE_IN_EV
from .coordinate import (SCAN_KINDS, UNITS, _constraint, _kind, companion_targets,
                         coordinate_value, drive_coordinate)
from .shared import connect_roots, merge_warnings, stage_summary

__all__ = ["scan", "scan_values", "coordinate_value", "drive_coordinate", "SCAN_KINDS",
           "SEAM_SEARCH"]

log = logging.getLogger(__name__)

#: the crossing search used along seams: the only one that accepts held internal coordinates
SEAM_SEARCH = "penalty"


def scan_values(start: float, stop: float, points: int) -> list[float]:
    """``points`` evenly spaced values from ``start`` to ``stop`` (both included)."""
    if points < 1:
        raise InputError(f"a scan needs at least one point, got {points}")
    if points == 1:
        return [float(start)]
    return [float(v) for v in np.linspace(start, stop, points)]


def _guess(geometry: Geometry, atoms: Sequence[int], value: float,
           options: RunOptions) -> Geometry:
    try:
        return drive_coordinate(geometry, atoms, value, options.constraints)
    except (BackTransformError, InputError) as exc:
        log.info("no direct displacement to %g (%s): the minimization drives it", value, exc)
        return geometry


def _mode(state: Any, along_seam: Any, relax_points: bool) -> str:
    if along_seam is not None:
        if not relax_points:
            raise InputError("a scan along a seam minimizes at every point; it cannot be rigid")
        return "seam"
    if not relax_points:
        return "rigid"
    if state is None:
        raise InputError("a relaxed scan needs the state to minimize (e.g. S0 or S1), or "
                         "two states to scan along their seam, or a rigid scan")
    return "relaxed"


def _child(run_dir: Any, index: int) -> Any:
    return None if run_dir is None else run_dir.child(f"point_{index + 1:02d}")


def _handed_on(engine: Any, previous: Any, labels: Sequence[StateLabel],
               guess: Geometry) -> tuple[list[StateLabel], Any]:
    """Labels at the guess geometry of the states the previous point ended on (by overlap)."""
    from .shared import carrier_root

    if previous is None or all(lab.is_reference for lab in labels):
        return list(labels), None
    at_guess = engine.states(guess)
    return [carrier_root(engine, previous, lab, at_guess)[0] for lab in labels], at_guess


def _point(mode: str, guess: Geometry, labels: list[StateLabel], spec: MethodSpec,
           options: RunOptions, run_dir: Any, progress: bool, engine: Any) -> TaskResult:
    if mode == "seam":
        # the penalty search keeps no branching plane to characterize a seam point with
        return find_crossing(guess, labels, spec, search=SEAM_SEARCH,
                             options=options.with_updates(characterize=False),
                             run_dir=run_dir, progress=progress, engine=engine)
    return relax(guess, labels[0], spec, options=options, run_dir=run_dir, progress=progress,
                 engine=engine)


def _row(mode: str, value: float, atoms: Sequence[int], res: TaskResult,
         labels: list[StateLabel]) -> dict[str, Any]:
    info = res.optimization.value.info or {}
    roots = info.get("roots") or [info.get("root", str(labels[0]))]
    ev = res.evaluation
    row = {"value": value, "achieved": coordinate_value(res.geometry, atoms),
           "converged": res.converged, "iterations": res.iterations,
           "evaluations": res.evaluations, "roots": [str(r) for r in roots],
           "adiabatic_energies_eh": ev.energies(),
           "run_dir": None if res.run_dir is None else res.run_dir.name}
    if mode == "seam":
        lower, upper = (ev.energy(r) for r in roots)
        row.update(energy_eh=0.5 * (lower + upper), lower_eh=lower, upper_eh=upper,
                   gap_ev=(upper - lower) * HARTREE_IN_EV)
    else:
        row["energy_eh"] = ev.energy(roots[0])
    return row


def _minimized(mode: str, geometry: Geometry, labels: list[StateLabel], spec: MethodSpec,
               atoms: Sequence[int], values: Sequence[float], options: RunOptions,
               run_dir: Any, progress: bool, engine: Any, companions: Sequence[Sequence[int]]):
    rows, results, current, previous = [], [], geometry, None
    start_labels, source = list(labels), "the input geometry"
    for i, value in enumerate(values):
        guess = _guess(current, atoms, value, options)
        labels, _ = _handed_on(engine, previous, labels, guess)
        held = options.with_updates(constraints=tuple(options.constraints)
                                    + (_constraint(atoms, value),)
                                    + tuple(companion_targets(geometry, atoms, companions, value)))
        log.info("scan point %d of %d: %s = %g", i + 1, len(values), _kind(atoms), value)
        res = _point(mode, guess, labels, spec, held, _child(run_dir, i), progress, engine)
        rows.append(_row(mode, value, atoms, res, labels))
        rows[-1]["started_from"] = source
        results.append(res)
        if res.converged:
            labels = [parse_state(r) for r in rows[-1]["roots"]]
            current, previous, source = res.geometry, res.evaluation, f"point {i + 1}"
        else:
            # never hand on a failed point: its geometry and states can belong to another
            # pair of roots or a broken SCF; the next point starts from the last good one
            log.warning("scan point %d did not converge (%s); the next point starts from %s",
                        i + 1, res.message, source)
            if previous is None:
                labels = list(start_labels)
            forget = getattr(engine, "forget_guess", None)
            if callable(forget):
                forget()
    return rows, results


def _rigid(geometry: Geometry, atoms: Sequence[int], values: Sequence[float],
           options: RunOptions, engine: Any):
    evaluations, current = [], geometry
    for i, value in enumerate(values):
        log.info("rigid scan point %d of %d: %s = %g", i + 1, len(values), _kind(atoms), value)
        current = drive_coordinate(current, atoms, value, options.constraints)
        evaluations.append(engine.states(current))
    roots, notes = connect_roots(engine, evaluations)
    rows = [{"value": v, "achieved": coordinate_value(ev.geometry, atoms), "converged": True,
             "iterations": 0, "evaluations": 1, "adiabatic_energies_eh": ev.energies(),
             "roots": {name: rs[i] for name, rs in roots.items()}, "run_dir": None}
            for i, (v, ev) in enumerate(zip(values, evaluations))]
    return rows, evaluations, roots, notes


def _profile(mode: str, rows: list[dict[str, Any]], atoms: Sequence[int], followed_name: str | None,
             followed_eh: list[float] | None, connected: dict[str, list[float]] | None) -> dict[str, Any]:
    kind = _kind(atoms)
    first = rows[0]["adiabatic_energies_eh"]
    ref = next((k for k in first if parse_state(k).is_reference), min(first, key=first.get))
    base = first[ref]
    labels = list(first)
    adiabatic = {lab: [None if r["adiabatic_energies_eh"].get(lab) is None
                       else (r["adiabatic_energies_eh"][lab] - base) * HARTREE_IN_EV for r in rows]
                 for lab in labels}
    profile: dict[str, Any] = {
        "mode": mode, "x": [r["value"] for r in rows], "achieved": [r["achieved"] for r in rows],
        "x_unit": UNITS[kind],
        "coordinate": {"kind": kind, "atoms": [a + 1 for a in atoms], "unit": UNITS[kind]},
        "reference": f"{ref} at the first point", "reference_eh": base,
        "adiabatic_ev": adiabatic, "points": rows}
    if connected is not None:
        profile["connected_ev"] = {k: [(e - base) * HARTREE_IN_EV for e in v]
                                   for k, v in connected.items()}
    if mode == "seam":
        profile["gap_ev"] = [r["gap_ev"] for r in rows]
    if followed_eh is not None:
        ev = np.array([(e - base) * HARTREE_IN_EV for e in followed_eh])
        lo, hi = int(np.argmin(ev)), int(np.argmax(ev))
        profile.update(followed=followed_name, followed_ev=ev.tolist(),
                       followed_relative_ev=(ev - ev[lo]).tolist(),
                       minimum={"value": rows[lo]["value"], "ev": float(ev[lo])},
                       maximum={"value": rows[hi]["value"], "ev": float(ev[hi])})
    return profile


def _plot_curves(profile: dict[str, Any]) -> dict[str, list[float]]:
    curves = dict(profile.get("connected_ev") or profile["adiabatic_ev"])
    if profile.get("followed") and profile["mode"] != "rigid":
        curves = {f"{profile['followed']} (followed)": profile["followed_ev"], **curves}
    return {k: v for k, v in curves.items() if all(x is not None for x in v)}


def scan(geometry: Geometry, method: MethodSpec, *, atoms: Sequence[int],
         values: Sequence[float], state: str | StateLabel | None = None,
         along_seam: str | Sequence[str] | None = None, relax_points: bool = True,
         companions: Sequence[Sequence[int]] = (), options: RunOptions = RunOptions(),
         run_dir: Any = None, progress: bool = True, engine: Any = None) -> TaskResult:
    """Scan one bond, angle or dihedral (see the module docstring for the three kinds).

    Parameters
    ----------
    atoms
        2, 3 or 4 atom indices, 0-based (bond, angle, dihedral).
    values
        Coordinate values in order: angstrom for bonds, degrees for angles and dihedrals.
    state
        Relaxed scan: the state minimized (named by its order at the start geometry).
        Rigid scan: the state whose connected curve is reported as followed (optional).
    along_seam
        Two states, e.g. 'S1,S2': a crossing search (penalty) at every value.
    relax_points
        False for a rigid scan (no minimization).
    companions
        Further coordinates of the same kind (0-based atoms) held and moved by the same
        amount as the scanned one, e.g. the second H-C-C-H dihedral of a twist, so the
        relaxation cannot undo the motion another way (relaxed and seam scans).
    options
        Run options of every point's minimization; the scan adds one held coordinate.
    run_dir
        A RunDirectory; each minimized point goes to a child folder point_01, point_02, ...

    Returns
    -------
    TaskResult
        ``data['profile']`` holds the values, the followed curve, all states and the points.
    """
    mode = _mode(state, along_seam, relax_points)
    atoms = tuple(int(a) for a in atoms)
    _kind(atoms)
    if not len(values):
        raise InputError("a scan needs at least one value")
    _constraint(atoms, float(values[0])).check(geometry.natom)
    labels = list(parse_states(along_seam, count=2) if mode == "seam"
                  else [parse_state(state)] if state is not None else [])
    check_labels(geometry, labels)
    own = engine is None  # a given engine (e.g. a model) knows its own states
    spec = prepare_method(method, labels, geometry if own else None)
    engine = engine or build_engine(spec, run_dir, warm_start=options.warm_start,
                                    follow_instability=options.follow_instability)
    try:
        if mode == "rigid":
            rows, evaluations, roots, notes = _rigid(geometry, atoms, values, options, engine)
            results, geoms = [], [ev.geometry for ev in evaluations]
            connected = {k: [ev.energy(r) for ev, r in zip(evaluations, rs)]
                         for k, rs in roots.items()}
            name = str(labels[0]) if labels else None
            followed = connected.get(name) if name else None
            last_eval = evaluations[-1]
        else:
            rows, results = _minimized(mode, geometry, labels, spec, atoms, values, options,
                                       run_dir, progress, engine, companions)
            geoms, notes, connected = [r.geometry for r in results], [], None
            name = "/".join(map(str, labels)) if mode == "seam" else str(labels[0])
            followed = [r["energy_eh"] for r in rows]
            last_eval = results[-1].evaluation
    finally:
        if own:
            engine.close()
    profile = _profile(mode, rows, atoms, name, followed, connected)
    return _finish(geometry, spec, mode, labels, rows, results, geoms, last_eval, profile,
                   notes, run_dir)


def _finish(geometry: Geometry, spec: MethodSpec, mode: str, labels: list[StateLabel],
            rows: list[dict[str, Any]], results: list[TaskResult], geoms: list[Geometry],
            last_eval: Any, profile: dict[str, Any], notes: list[str], run_dir: Any) -> TaskResult:
    converged = all(r["converged"] for r in rows)
    bad = [i + 1 for i, r in enumerate(rows) if not r["converged"]]
    message = "" if converged else f"point(s) {bad} did not converge"
    status = "converged" if converged else "not converged"
    if mode == "rigid":
        status = "finished"
    if mode == "relaxed" and labels[0].is_reference:
        odd = [f"{r['value']:g} ({r['roots'][0]})" for r in rows
               if not parse_state(r["roots"][0]).is_reference]
        if odd:
            notes = notes + [
                f"at {', '.join(odd)} the ground state's character was followed onto an "
                "excited root: the reference SCF solution changed (an instability, e.g. at a "
                "pi/pi* degeneracy); the energies there are unreliable. Try --cold-start or "
                "--no-tracking, and check with a multireference method"]
    if mode == "seam":
        notes = notes + [f"every seam point is a penalty-search crossing with the coordinate "
                         f"held; largest residual gap {max(profile['gap_ev']):.2e} eV"]
    warnings = merge_warnings(method_warnings(spec, labels), notes, *(r.warnings for r in results))
    out = {"task": "scan", "converged": converged, "status": status, "message": message,
           "iterations": sum(r["iterations"] for r in rows),
           "evaluations": sum(r["evaluations"] for r in rows) + (len(rows) if results else 0),
           "states": [str(s) for s in labels], **_followed_at_end(mode, labels, rows, last_eval),
           "gap_ev": rows[-1].get("gap_ev"),
           "method": {**spec.to_dict(), "charge": geometry.charge, "spin": geometry.spin},
           "search": SEAM_SEARCH if mode == "seam" else None, "warnings": warnings,
           "scan_mode": mode, "profile": profile}
    if results:
        out["points"] = [stage_summary(f"point {i + 1}", r) for i, r in enumerate(results)]
    if run_dir is not None:
        out = _record(run_dir, out, geoms, rows, profile)
    else:
        out = complete_result(out)
    return TaskResult(task="scan", converged=converged, status=status, message=message,
                      geometry=geoms[-1], evaluation=last_eval,
                      states=tuple(out["states"]), method=spec, iterations=out["iterations"],
                      evaluations=out["evaluations"], search=out["search"],
                      warnings=tuple(warnings), data=out,
                      run_dir=None if run_dir is None else run_dir.path)


def _followed_roots(row: dict[str, Any], states: Sequence[str]) -> dict[str, str]:
    """{followed label: adiabatic root at this point} (a rigid scan follows every state of
    the first point, named there)."""
    roots = row["roots"]
    if isinstance(roots, dict):
        return {str(k): str(v) for k, v in roots.items()}
    if len(states) == 2 and len(roots) == 2:  # a seam point lists its pair by energy
        return dict(zip(states, roots))
    return {str(states[0]): str(roots[0])} if states else {}


def _followed_at_end(mode: str, labels: list[StateLabel], rows: list[dict[str, Any]],
                     last_eval: Any) -> dict[str, Any]:
    """energies_eh (followed labels), adiabatic_energies_eh and followed_roots of the last point."""
    roots = _followed_roots(rows[-1], [str(s) for s in labels])
    return {"energies_eh": {k: last_eval.energy(r) for k, r in roots.items()},
            "adiabatic_energies_eh": last_eval.energies(), "followed_roots": roots}


def _record(run_dir: Any, out: dict[str, Any], geoms: list[Geometry], rows: list[dict[str, Any]],
            profile: dict[str, Any]) -> dict[str, Any]:
    from ..geometry import write_xyz

    comments = [" ".join([f"step={i}", f"value={r['value']:.6f}"]
                         + [f"E_{k}={r['adiabatic_energies_eh'][root]:.10f}"
                            for k, root in _followed_roots(r, out["states"]).items()])
                for i, r in enumerate(rows)]
    write_xyz(run_dir.trajectory_xyz, geoms, comments)
    coord = profile["coordinate"]
    xlabel = f"{coord['kind']} {'-'.join(map(str, coord['atoms']))} / {coord['unit']}"
    lines = [f"Scan mode: {profile['mode']}; energies in eV relative to {profile['reference']}.",
             "", "| value | achieved | followed / eV | converged | steps |",
             "| --- | --- | --- | --- | --- |"]
    followed = profile.get("followed_ev") or [None] * len(rows)
    for r, f in zip(rows, followed):
        lines.append(f"| {r['value']:.4f} | {r['achieved']:.4f} | "
                     f"{'-' if f is None else f'{f:.4f}'} | {'yes' if r['converged'] else 'no'} "
                     f"| {r['iterations']} |")
    if "maximum" in profile:
        lines += ["", f"Highest point of the followed curve at {profile['maximum']['value']:g} "
                      f"{coord['unit']}, lowest at {profile['minimum']['value']:g} {coord['unit']}."]
    lines += ["", __doc__.split("Units at the edge:")[1].strip().replace("\n", " ")]
    return run_dir.finish(out, geoms[-1], sections=[("Scan", "\n".join(lines))],
                          profile={"x": profile["x"], "xlabel": xlabel,
                                   "curves_ev": _plot_curves(profile)})
