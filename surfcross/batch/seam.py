"""Seam exploration: crossing searches from many starts around one point, merged into the
distinct crossings they reach.

A search from one start finds the crossing its start happens to fall towards; a funnel can
have several, and the lowest one reachable from the Franck-Condon region is what matters.
:func:`explore_seam` does:

1. at the centre point (e.g. the Franck-Condon point or the relaxed excited state): the
   energies of all states, and optionally the normal modes of one state (finite-difference
   Hessian, 6N gradients); a crossing search from the centre itself (the *anchor*); a relaxed
   scan when asked -- all in parallel;
2. starts: on a circle in the branching plane of the anchor crossing, plus and minus along the
   lowest normal modes, random distortions (fixed seed: the same starts every time), the
   points of the relaxed scan, and starts given by the caller;
3. one crossing search per start, in parallel, each in its own folder ``OUT/starts/NAME``
   (resumable like any run);
4. the converged points merged: two points are one crossing when their energies differ by
   less than ``energy_eh`` *and* their RMSD after superposition, with atoms of one element
   allowed to exchange places (:mod:`surfcross.batch.alignment`), is below ``rmsd_angstrom``;
5. one table (``seam_crossings.json``, ``.csv``; the geometries in ``seam_crossings.xyz``):
   per distinct crossing its energy, its gap, its characterization and the starts that led
   to it.

Different starts can stop at different points of one flat seam: the merge thresholds decide
what counts as one crossing; report them with the table. The crossings are those of the
chosen method, with its limits (see the caution in the table).
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from ..engine.base import MethodSpec
from ..errors import CheckpointError, InputError
from ..geometry import Geometry, read_xyz
from ..io.results import write_json_atomic
from ..io.run import RunDirectory
from ..states import parse_states
from ..tasks import RunOptions
from ..tasks.run import STOP_REQUEST
from ..units import ANGSTROM_IN_BOHR, HARTREE_IN_EV
from . import records
from .alignment import permuted_rmsd
from .chain import CHAIN_STOP, move_aside, quiet_logs
from .scheduler import ClusterSettings, Progress, Runner, Work
from .seam_starts import (SeamStart, StartPlan, load_starts, mode_starts, plane_starts,
                          random_starts)
from .seam_table import CAUTION, SEAM_CSV, SEAM_JSON, SEAM_XYZ, seam_rows, write_table

__all__ = ["StartPlan", "MergeRule", "SeamStart", "SeamCrossing", "SeamResult", "explore_seam",
           "plane_starts", "mode_starts", "random_starts", "merge_crossings", "search_from",
           "SEAM_JSON", "SEAM_CSV", "SEAM_XYZ"]

log = logging.getLogger(__name__)

PLANE_FILE, CENTRE_FILE = "plane.json", "centre.json"


# ------------------------------------------------------------------------------ settings
@dataclass(frozen=True, kw_only=True)
class MergeRule:
    """Two converged points are one crossing when both hold: energy difference below
    ``energy_eh`` and RMSD (equivalent atoms exchangeable; mirror images equal unless
    ``mirror`` is False) below ``rmsd_angstrom``."""

    rmsd_angstrom: float = 0.1
    energy_eh: float = 5e-4
    mirror: bool = True


@dataclass(frozen=True)
class SeamCrossing:
    """One distinct crossing: its lowest-energy member and every start that reached it."""

    label: str
    energy_eh: float
    gap_ev: float | None
    geometry: Geometry
    character: Mapping[str, Any]
    starts: tuple[str, ...]
    folder: str
    rmsd_spread_angstrom: float = 0.0

    def row(self, lowest: float, centre: float | None) -> dict[str, Any]:
        return {"crossing": self.label, "energy_eh": self.energy_eh,
                "vs_lowest_ev": (self.energy_eh - lowest) * HARTREE_IN_EV,
                "vs_centre_ev": None if centre is None else (self.energy_eh - centre) * HARTREE_IN_EV,
                "gap_ev": self.gap_ev, **{k: v for k, v in self.character.items()},
                "starts": list(self.starts), "count": len(self.starts), "folder": self.folder,
                "rmsd_spread_angstrom": self.rmsd_spread_angstrom}


@dataclass(frozen=True)
class SeamResult:
    folder: Path
    crossings: tuple[SeamCrossing, ...]
    searches: tuple[dict, ...]
    centre_energies_eh: Mapping[str, float] = field(default_factory=dict)
    interrupted: bool = False
    notes: tuple[str, ...] = ()
    elapsed_s: float = 0.0


# ------------------------------------------------------------------------------ work
def _engine(factory: Callable[[], Any] | None) -> Any:
    return None if factory is None else factory()


def _search_from_body(name: str, geometry: Geometry, states: Sequence[str],
                      method: MethodSpec,
                folder: str, *, search: str = "auto", options: RunOptions = RunOptions(),
                engine_factory: Callable[[], Any] | None = None, want_plane: bool = False,
                threads: int | None = None) -> dict[str, Any]:
    """One crossing search in ``folder`` (kept if finished, continued if interrupted).
    Returns a plain record (never raises for a failed search)."""
    from ..tasks import find_crossing, resume

    path = Path(folder)
    if threads is not None:
        method = method.with_updates(threads=int(threads))
    if CHAIN_STOP.is_set():
        return {"name": name, "status": "interrupted", "converged": False, "folder": folder}
    try:
        result = records.read_result(path) if path.exists() else None
        if result is not None and records.task_status(result) not in records.ENDED_STATUSES:
            result = None  # an interrupted search keeps a record; it continues below
        task = None
        if result is None and (path / "checkpoint.h5").exists():
            try:
                task = resume(path, progress=False, engine=_engine(engine_factory))
            except CheckpointError as exc:
                log.info("%s: cannot continue (%s); searching again", path, exc)
                move_aside(path)
        elif result is None and path.exists():
            move_aside(path)
        if result is None and task is None:
            path.parent.mkdir(parents=True, exist_ok=True)
            task = find_crossing(geometry, list(states), method, search=search, options=options,
                                 run_dir=RunDirectory.create(path), progress=False,
                                 engine=_engine(engine_factory))
        if task is not None and want_plane and task.converged and task.optimization is not None:
            from ..analysis.probe import plane_from_value

            try:
                plane = plane_from_value(task.optimization.value)
                write_json_atomic(path / PLANE_FILE, {"plane": plane.tolist()})
            except InputError as exc:
                log.info("%s: no branching plane (%s)", name, exc)
        result = records.read_result(path)
    except KeyboardInterrupt:
        return {"name": name, "status": "interrupted", "converged": False, "folder": folder}
    except Exception as exc:  # noqa: BLE001 - one failed search must not end the others
        return {"name": name, "status": "failed", "converged": False, "folder": folder,
                "message": " ".join(str(exc).split())}
    return _search_record(name, path, result, geometry)


def _search_record(name: str, path: Path, result: Mapping[str, Any] | None,
                   start: Geometry) -> dict[str, Any]:
    if result is None:
        return {"name": name, "status": "failed", "converged": False, "folder": str(path),
                "message": "no result written"}
    final = path / str(result.get("final_xyz") or "final.xyz")
    geom = read_xyz(final, start.charge, start.spin) if final.is_file() else None
    plane = records.read_json(path / PLANE_FILE)
    return {"name": name, "status": records.task_status(result),
            "converged": records.is_converged(result), "folder": str(path),
            "message": str(result.get("message", "")),
            "energy_eh": records.crossing_energy(result),
            "energies_eh": records.followed_energies(result), "gap_ev": records.gap_ev(result),
            "character": records.branching_kind(result),
            "symbols": list(geom.symbols) if geom else None,
            "charge": start.charge, "spin": start.spin,
            "coords_bohr": geom.coords_bohr.tolist() if geom else None,
            "plane": plane.get("plane") if plane else None}


def _centre_point_body(geometry: Geometry, method: MethodSpec, folder: str, *, state: str,
                 modes: int = 0, engine_factory: Callable[[], Any] | None = None,
                 threads: int | None = None) -> dict[str, Any]:
    """Energies of all states at the centre and (``modes`` > 0) the lowest normal modes of
    ``state`` there; cached in ``folder/centre.json``."""
    path = Path(folder) / CENTRE_FILE
    cached = records.read_json(path)
    if cached is not None and len(cached.get("modes", [])) >= modes:
        return cached
    from ..analysis.curvature import check_curvature
    from ..tasks.build import build_engine
    from ..tasks.common import prepare_method

    if threads is not None:
        method = method.with_updates(threads=int(threads))
    spec = prepare_method(method, [state])
    engine = _engine(engine_factory) or build_engine(spec, warm_start=False)
    try:
        energies = engine.states(geometry).energies()
        out: dict[str, Any] = {"energies_eh": energies, "modes": [], "frequencies_cm": []}
        if modes > 0:
            curvature = check_curvature(engine, geometry, state)
            freqs = np.asarray(curvature.frequencies_cm, float)
            vectors = np.asarray(curvature.modes, float)
            keep = [k for k in np.argsort(freqs) if abs(freqs[k]) > 1.0][:modes]
            out["modes"] = [vectors[k].tolist() for k in keep]
            out["frequencies_cm"] = [float(freqs[k]) for k in keep]
    finally:
        engine.close()
    Path(folder).mkdir(parents=True, exist_ok=True)
    write_json_atomic(path, out)
    return out


def _scan_points_body(geometry: Geometry, method: MethodSpec, folder: str, *,
                 scan: tuple, engine_factory: Callable[[], Any] | None = None,
                 threads: int | None = None) -> list[list[list[float]]]:
    """Geometries (bohr) of a relaxed scan run in ``folder`` (kept when already finished)."""
    from ..geometry import read_xyz_frames
    from ..workflows.scan import scan as run_scan

    path = Path(folder)
    if records.read_result(path) is None:
        if path.exists():
            move_aside(path)
        atoms, values, state = scan
        if threads is not None:
            method = method.with_updates(threads=int(threads))
        run_scan(geometry, method, atoms=list(atoms), values=list(values), state=state,
                 relax_points=True, run_dir=RunDirectory.create(path), progress=False,
                 engine=_engine(engine_factory))
    frames = read_xyz_frames(path / "trajectory.xyz", geometry.charge, geometry.spin)
    return [g.coords_bohr.tolist() for g in frames]


def search_from(*args: Any, **kwargs: Any) -> dict[str, Any]:
    """One crossing search in its folder (see :func:`_search_from_body`), logging quietly."""
    with quiet_logs():
        return _search_from_body(*args, **kwargs)


def centre_point(*args: Any, **kwargs: Any) -> dict[str, Any]:
    """Energies and normal modes at the centre (see :func:`_centre_point_body`)."""
    with quiet_logs():
        return _centre_point_body(*args, **kwargs)


def _scan_points(*args: Any, **kwargs: Any) -> list:
    with quiet_logs():
        return _scan_points_body(*args, **kwargs)


# ------------------------------------------------------------------------------ merging
def merge_crossings(records_: Sequence[Mapping[str, Any]], rule: MergeRule = MergeRule()
                    ) -> list[SeamCrossing]:
    """Group converged search records into distinct crossings (lowest energy first)."""
    done = sorted((r for r in records_ if r.get("converged") and r.get("coords_bohr") is not None
                   and r.get("energy_eh") is not None), key=lambda r: r["energy_eh"])
    groups: list[list[Mapping[str, Any]]] = []
    spreads: list[float] = []
    for r in done:
        x = np.asarray(r["coords_bohr"]) / ANGSTROM_IN_BOHR
        for k, group in enumerate(groups):
            rep = group[0]
            if abs(r["energy_eh"] - rep["energy_eh"]) > rule.energy_eh:
                continue
            value, _ = permuted_rmsd(rep["symbols"], x, np.asarray(rep["coords_bohr"]) / ANGSTROM_IN_BOHR,
                                     mirror=rule.mirror)
            if value <= rule.rmsd_angstrom:
                group.append(r)
                spreads[k] = max(spreads[k], value)
                break
        else:
            groups.append([r])
            spreads.append(0.0)
    out = []
    for k, (group, spread) in enumerate(zip(groups, spreads), 1):
        rep = group[0]
        geom = Geometry(tuple(rep["symbols"]), np.asarray(rep["coords_bohr"]),
                        int(rep.get("charge", 0)), int(rep.get("spin", 0)))
        out.append(SeamCrossing(label=f"X{k}", energy_eh=float(rep["energy_eh"]),
                                gap_ev=rep.get("gap_ev"), geometry=geom,
                                character=dict(rep.get("character") or {}),
                                starts=tuple(r["name"] for r in group),
                                folder=str(Path(rep["folder"]).relative_to(Path(rep["folder"]).parents[1])),
                                rmsd_spread_angstrom=float(spread)))
    return out


# ------------------------------------------------------------------------------ driver
def _work(label: str, function: Callable[..., Any], **kwargs: Any) -> Work:
    def failed(reason: str) -> dict[str, Any]:
        return {"name": label, "status": "failed", "converged": False, "message": reason}

    return Work(name=label, function=function, kwargs=kwargs, failed=failed)


def _first_stage(centre: Geometry, labels: list[str], method: MethodSpec, out: Path,
                 plan: StartPlan, search: str, options: RunOptions, factory: Any,
                 runner: Runner, report: Any) -> list[Any]:
    works = [_work("centre", search_from, name="centre", geometry=centre, states=labels,
                   method=method, folder=str(out / "starts" / "centre"), search=search,
                   options=options, engine_factory=factory, want_plane=plan.plane > 0),
             _work("centre-point", centre_point, geometry=centre, method=method,
                   folder=str(out), state=plan.mode_state or labels[0], modes=plan.modes,
                   engine_factory=factory)]
    if plan.scan is not None:
        works.append(_work("scan", _scan_points, geometry=centre, method=method,
                           folder=str(out / "scan"), scan=plan.scan, engine_factory=factory))
    progress = Progress(len(works), "first steps", report=report,
                        failed=lambda r: isinstance(r, dict) and r.get("status") == "failed")
    return runner.run(works, progress)


def _starts(centre: Geometry, plan: StartPlan, anchor: Mapping[str, Any] | None,
            point: Mapping[str, Any] | None, scan: Any, notes: list[str]) -> list[SeamStart]:
    starts: list[SeamStart] = []
    if plan.plane:
        if anchor and anchor.get("converged") and anchor.get("plane"):
            x = Geometry(centre.symbols, np.asarray(anchor["coords_bohr"]), centre.charge, centre.spin)
            starts += plane_starts(x, np.asarray(anchor["plane"]), plan.plane, plan.plane_radius_bohr)
        else:
            notes.append("no branching-plane starts: the search from the centre did not "
                         "converge (or gave no plane)")
    if plan.modes and isinstance(point, Mapping) and point.get("modes"):
        starts += mode_starts(centre, point["modes"], plan.mode_amplitude_bohr,
                              point.get("frequencies_cm", ()))
    elif plan.modes:
        notes.append("no normal-mode starts: the curvature at the centre could not be computed")
    if plan.random:
        starts += random_starts(centre, plan.random, plan.random_rms_bohr, plan.seed)
    if isinstance(scan, list):
        starts += [SeamStart(f"scan_{k + 1:02d}", f"relaxed scan point {k + 1}",
                             centre.with_coords(np.asarray(x))) for k, x in enumerate(scan)]
    elif plan.scan is not None:
        notes.append(f"no scan starts: the relaxed scan failed ({(scan or {}).get('message', '')})")
    starts += [SeamStart(f"given_{k + 1:02d}", "given start", g) for k, g in enumerate(plan.extra)]
    return starts


def explore_seam(centre: Geometry, states: str | Sequence[str], method: MethodSpec,
                 out: str | Path, *, plan: StartPlan = StartPlan(), search: str = "auto",
                 options: RunOptions = RunOptions(), merge: MergeRule = MergeRule(),
                 cluster: ClusterSettings = ClusterSettings(),
                 engine_factory: Callable[[], Any] | None = None,
                 report: Callable[[str], None] | None = None) -> SeamResult:
    """Crossing searches of ``states`` from many starts around ``centre``; the distinct
    crossings found (see the module docstring). Rerun with the same arguments to continue.

    ``engine_factory``: a picklable callable making the engine in each worker (default: the
    PySCF engine of ``method``), e.g. an analytic model for tests.
    """
    started = time.perf_counter()
    labels = [str(s) for s in parse_states(states, count=2)]
    out = Path(out).resolve()  # workers on other machines do not share our working folder
    out.mkdir(parents=True, exist_ok=True)
    STOP_REQUEST.clear()
    CHAIN_STOP.clear()
    expected = plan.plane + 2 * plan.modes + plan.random + len(plan.extra) + len(
        plan.scan[1] if plan.scan else ())
    with Runner(cluster, max(expected, 3), report=report) as runner:
        return _explore(centre, labels, method, out, plan, search, options, merge,
                        engine_factory, runner, report, started)


def _explore(centre: Geometry, labels: list[str], method: MethodSpec, out: Path, plan: StartPlan,
             search: str, options: RunOptions, merge: MergeRule, engine_factory: Any,
             runner: Runner, report: Any, started: float) -> SeamResult:
    first = _first_stage(centre, labels, method, out, plan, search, options, engine_factory,
                         runner, report)
    anchor, point = first[0], first[1]
    notes: list[str] = []
    stopped = STOP_REQUEST.is_set() or CHAIN_STOP.is_set()
    starts = [] if stopped else _starts(centre, plan, anchor, point,
                                        first[2] if len(first) > 2 else None, notes)
    works = [_work(s.name, search_from, name=s.name, geometry=s.geometry, states=labels,
                   method=method, folder=str(out / "starts" / s.name), search=search,
                   options=options, engine_factory=engine_factory) for s in starts]
    progress = Progress(len(works), "searches", report=report,
                        failed=lambda r: r is None or not r.get("converged"))
    found = runner.run(works, progress) if works else []
    searches = [dict(anchor or {"name": "centre", "status": "interrupted"}, origin="the centre")]
    searches += [dict(r or {"name": s.name, "status": "interrupted", "converged": False},
                      origin=s.origin) for s, r in zip(starts, found)]
    crossings = merge_crossings(searches, merge)
    interrupted = stopped or STOP_REQUEST.is_set() or any(
        s.get("status") == "interrupted" for s in searches)
    centre_energies = dict((point or {}).get("energies_eh", {})) if isinstance(point, Mapping) else {}
    result = SeamResult(folder=out, crossings=tuple(crossings), searches=tuple(searches),
                        centre_energies_eh=centre_energies, interrupted=interrupted,
                        notes=tuple(notes), elapsed_s=time.perf_counter() - started)
    write_table(result, labels, method, merge, plan.mode_state or labels[0])
    return result


__all__ += ["load_starts", "seam_rows", "CAUTION", "centre_point"]
