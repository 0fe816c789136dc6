"""Running a job: its tasks in order, each in a sub-run directory of one job folder.

For every task the runner picks the start geometry (the job's molecule, or the final geometry
of the task named in ``from``), sizes the method's roots to cover the states the task asks for,
builds the run options from the task's optimizer keys, and calls the task function. At the
end (and after every task, so an interrupted job leaves a readable record) it writes
``summary.json`` in the job folder.

A task that does not converge or fails in the electronic-structure code stops the job,
unless ``keep_going``; with ``keep_going`` the tasks that start from it are skipped and the
others run. Bad input (:class:`~surfcross.errors.InputError`) always stops the job.
"""

from __future__ import annotations

import importlib.util
import logging
import re
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

from ..coords.constraints import Constraint
from ..engine.base import MethodSpec
from ..errors import InputError, SurfcrossError
from ..geometry import Geometry, read_xyz
from ..io.results import write_json_atomic
from ..io.run import RunDirectory, discard_unused
from ..states import parse_states
from ..tasks import RunOptions, TaskResult, compute_states, find_crossing, relax
from ..tasks.common import check_labels, prepare_method
from . import Job

__all__ = ["TaskOutcome", "JobResult", "run_job", "run_options_from_task", "task_labels",
           "TASK_RUNNERS", "SUMMARY_FILE", "task_folder_name", "EarlierRun"]

log = logging.getLogger(__name__)

SUMMARY_FILE = "summary.json"

#: called before a task runs when a job continues in its old folder: (task, task folder) ->
#: the outcome to keep (a finished or resumed task), or None to run the task afresh
EarlierRun = Callable[[Any, Path], "TaskOutcome | None"]

#: optimizer keys of job files that override single convergence thresholds
_THRESHOLDS = ("max_force", "rms_force", "max_step", "rms_step", "energy_change")


@dataclass(frozen=True, kw_only=True)
class TaskOutcome:
    """What happened to one task. ``status``: a task status ('converged', 'finished',
    'step limit reached', ...), 'failed' (engine or tracking error), 'skipped' (its start
    failed) or 'not run' (the job stopped before it)."""

    name: str
    kind: str
    status: str
    converged: bool = False
    run_dir: Path | None = None
    message: str = ""
    show: tuple[str, ...] = ()
    result: TaskResult | None = field(default=None, compare=False)

    @property
    def ok(self) -> bool:
        return self.converged

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"name": self.name, "kind": self.kind, "status": self.status,
                               "converged": self.converged,
                               "run_dir": None if self.run_dir is None else self.run_dir.name}
        if self.message:
            out["message"] = self.message
        if self.result is not None:
            data = self.result.data
            out.update({"iterations": self.result.iterations, "states": list(self.result.states)})
            keys = ("gap_ev", "search", "warnings") if self.result.task == "states" else \
                ("energies_eh", "followed_roots", "gap_ev", "search", "warnings")
            for key in keys:
                if data.get(key) is not None:
                    out[key] = data[key]
            if self.result.task == "states":
                out["vertical"] = self.vertical_rows()
        return out

    def vertical_rows(self) -> list[dict[str, Any]]:
        """States of a 'states' task, the ``show`` states first: label, eV, f."""
        rows = (self.result.data.get("vertical") or {}).get("states", []) if self.result else []
        order = {label: k for k, label in enumerate(self.show)}
        rows = sorted(rows, key=lambda r: order.get(r["label"], len(order)))
        return [{"label": r["label"], "excitation_ev": r["excitation_ev"],
                 "oscillator_strength": r.get("oscillator_strength")} for r in rows]


@dataclass(frozen=True, kw_only=True)
class JobResult:
    """All task outcomes of a job, in file order."""

    title: str
    run_dir: Path
    outcomes: tuple[TaskOutcome, ...]
    elapsed_s: float = 0.0

    @property
    def converged(self) -> bool:
        """True when every task converged (or finished)."""
        return all(o.converged for o in self.outcomes)

    def to_dict(self) -> dict[str, Any]:
        return {"task": "job", "title": self.title, "converged": self.converged,
                "elapsed_s": round(self.elapsed_s, 2),
                "tasks": [o.to_dict() for o in self.outcomes]}


# ------------------------------------------------------------------------------ options
def run_options_from_task(options: Mapping[str, Any]) -> RunOptions:
    """RunOptions from a task's optimizer keys (see README, "Job files")."""
    kwargs: dict[str, Any] = {}
    if "max_iterations" in options:
        kwargs["max_iterations"] = options["max_iterations"]
    if "convergence" in options:
        kwargs["convergence"] = options["convergence"]
    if "coordinates" in options:
        kwargs["coordinates"] = options["coordinates"]
    if "trust_radius" in options:
        kwargs["trust_radius"] = options["trust_radius"]
    if "overlap_threshold" in options:
        if options["overlap_threshold"] >= 1.0:
            raise InputError("'overlap_threshold' must be below 1 (1 would reject every step)")
        kwargs["min_overlap"] = options["overlap_threshold"]
    overrides = {k: options[k] for k in _THRESHOLDS if k in options}
    if overrides:
        kwargs["convergence_overrides"] = overrides
    if "frozen_atoms" in options:  # 1-based in the file, 0-based inside
        kwargs["constraints"] = tuple(Constraint("atom", (a - 1,)) for a in options["frozen_atoms"])
    if "follow_instability" in options:
        kwargs["follow_instability"] = bool(options["follow_instability"])
    return RunOptions(**kwargs)


def task_labels(kind: str, options: Mapping[str, Any]) -> list[str]:
    """The states a task asks for (used to size the roots)."""
    if kind == "states":
        return list(options.get("show", ()))
    if kind == "cross":
        return list(options["states"])
    if kind == "emission":
        return [options.get("state", "S1")]
    if kind == "scan" and "along_seam" in options:
        return list(options["along_seam"])
    if kind in ("relax", "scan"):
        return [options["state"]] if "state" in options else []
    if kind == "path":
        return list(options.get("show", ()))
    return []


def method_for(job: Job, labels: list[str]) -> MethodSpec:
    """The job's method with roots raised to cover ``labels`` (plus two, see prepare_method).

    Roots given in the file are a lower bound: a task that asks for a higher state gets the
    roots it needs, and the log says so.
    """
    spec = prepare_method(job.method, labels, job.molecule)
    if "roots" in job.method_keys and spec.roots > job.method.roots:
        log.info("roots raised from %d to %d to cover %s", job.method.roots, spec.roots,
                 ", ".join(labels))
    return spec


# ------------------------------------------------------------------------------ task kinds
@dataclass(frozen=True)
class Step:
    """Everything a task function needs."""

    job: Job
    name: str
    options: Mapping[str, Any]
    geometry: Geometry
    run_dir: RunDirectory
    progress: bool
    geometries: Mapping[str, Geometry]


def _states(step: Step) -> TaskResult:
    labels = task_labels("states", step.options)
    return compute_states(step.geometry, method_for(step.job, labels), run_dir=step.run_dir,
                          source=step.name)


def _relax(step: Step) -> TaskResult:
    label = step.options["state"]
    return relax(step.geometry, label, method_for(step.job, [label]),
                 options=run_options_from_task(step.options), run_dir=step.run_dir,
                 progress=step.progress)


def _cross(step: Step) -> TaskResult:
    labels = list(step.options["states"])
    return find_crossing(step.geometry, labels, method_for(step.job, labels),
                         search=step.options.get("search", "auto"),
                         options=run_options_from_task(step.options), run_dir=step.run_dir,
                         progress=step.progress,
                         gap_tolerance_eh=step.options.get("gap_tolerance"))


def _emission(step: Step) -> TaskResult:
    from ..workflows.emission import emission

    label = step.options.get("state", "S1")
    return emission(step.geometry, method_for(step.job, [label]), state=label,
                    options=run_options_from_task(step.options), run_dir=step.run_dir,
                    progress=step.progress,
                    relax_ground=step.options.get("relax_ground", False),
                    zero_point=step.options.get("zero_point", False))


def _path(step: Step) -> TaskResult:
    from ..workflows.path import pathway

    show = list(step.options.get("show", ()))
    points = [geometry_reference(ref, step.geometries, step.job.molecule)
              for ref in step.options["geometries"]]
    kwargs = {k: step.options[k] for k in ("images", "interpolation", "mass_weighted")
              if k in step.options}
    return pathway(points, method_for(step.job, show), show=show, run_dir=step.run_dir, **kwargs)


def _scan(step: Step) -> TaskResult:
    from ..workflows.scan import scan

    state = step.options.get("state")
    seam = step.options.get("along_seam")
    relax_points = step.options.get("relax", state is not None or seam is not None)
    companion = step.options.get("companion")
    return scan(step.geometry, method_for(step.job, task_labels("scan", step.options)),
                atoms=[a - 1 for a in step.options["atoms"]], values=list(step.options["values"]),
                state=state, relax_points=relax_points, along_seam=seam,
                companions=[[a - 1 for a in companion]] if companion else [],
                options=run_options_from_task(step.options), run_dir=step.run_dir,
                progress=step.progress)


#: task kind -> function running it
TASK_RUNNERS: dict[str, Callable[[Step], TaskResult]] = {
    "states": _states, "relax": _relax, "cross": _cross, "emission": _emission,
    "path": _path, "scan": _scan,
}
#: task kind -> the workflow module it needs (kinds whose module is missing cannot run)
WORKFLOW_MODULES = {"emission": "emission", "path": "path", "scan": "scan"}


def kind_available(kind: str) -> bool:
    """True when this installation can run task kind ``kind``."""
    module = WORKFLOW_MODULES.get(kind)
    if module is not None and importlib.util.find_spec(f"surfcross.workflows.{module}") is None:
        return False
    return kind in TASK_RUNNERS


# ------------------------------------------------------------------------------ the job
def task_folder_name(name: str) -> str:
    """The folder of task ``name`` inside its job folder (as RunDirectory.child names it)."""
    return re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "task"


def _job_folder(job: Job, out: str | Path | None, continuing: bool = False) -> RunDirectory:
    names = [task_folder_name(t.name) for t in job.tasks]
    if out is not None:
        path = Path(out)
        if continuing:
            path.mkdir(parents=True, exist_ok=True)
            return RunDirectory(path)
        if path.is_dir() and any((path / n).exists() for n in [*names, SUMMARY_FILE]):
            raise InputError(f"{str(path)!r} already holds a job run; choose another --out")
        return RunDirectory.create(path)
    base = job.output if job.output is not None else (
        job.source.parent / job.source.stem if job.source is not None else Path.cwd() / "job")
    base.parent.mkdir(parents=True, exist_ok=True)
    for n in range(1, 10000):
        path = base if n == 1 else base.with_name(f"{base.name}_{n}")
        try:
            path.mkdir()  # atomic: two jobs never share a folder
        except FileExistsError:
            continue
        return RunDirectory(path)
    raise InputError(f"could not find a free folder name for {base}")


def validate_job(job: Job) -> None:
    """Checks that need the molecule: labels fit its spin, every kind can run."""
    source = job.source.name if job.source is not None else "job"
    for task in job.tasks:
        where = f"{source}, task '{task.name}'"
        try:
            labels = parse_states(task_labels(task.kind, task.options))
            check_labels(job.molecule, labels)
            prepare_method(job.method, labels, job.molecule,
                           strict_roots="roots" in job.method_keys)
            if task.kind == "cross" or (task.kind == "scan" and task.options.get("along_seam")):
                from ..tasks.crossing import check_high_spin_pair

                check_high_spin_pair(labels, job.method)
            if task.kind in ("relax", "cross", "emission", "scan"):
                for c in run_options_from_task(task.options).constraints:
                    c.check(job.molecule.natom)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from None
        if not kind_available(task.kind):
            raise InputError(f"{where}: tasks of kind '{task.kind}' are not available in this "
                             "version of surfcross; remove the task or run it separately")


def _start(job: Job, task: Any, geometries: Mapping[str, Geometry]) -> Geometry:
    if task.start_from is None:
        return job.molecule
    return geometries[task.start_from]


def run_job(job: Job, *, out: str | Path | None = None, keep_going: bool = False,
            progress: bool = True, earlier_run: EarlierRun | None = None) -> JobResult:
    """Run the tasks of ``job`` in order and write the job folder.

    Parameters
    ----------
    out
        Job folder; default the job's ``output`` or a folder named after the job file
        (``_2``, ``_3``, ... when taken).
    keep_going
        Continue after a task that did not converge or failed (tasks starting from it are
        skipped). Default: stop at the first such task.
    earlier_run
        Continue the job in its existing folder ``out`` (required then): called with each task
        and its folder before the task runs; the outcome it returns is kept (a finished or
        resumed task), None runs the task afresh (its folder must then be free).

    Returns
    -------
    JobResult
        ``converged`` is True only if every task converged or finished.
    """
    validate_job(job)
    if earlier_run is not None and out is None:
        raise InputError("continuing a job needs its folder (out)")
    folder = _job_folder(job, out, continuing=earlier_run is not None)
    log.info("job %s: %d task(s) in %s", job.title or job.source or "", len(job.tasks), folder.path)
    started = time.perf_counter()
    outcomes: list[TaskOutcome] = []
    try:
        _run_tasks(job, folder, outcomes, keep_going, progress, started, earlier_run)
    except InputError:  # bad input found late (e.g. a basis PySCF does not know)
        discard_unused(folder.path)
        raise
    result = JobResult(title=job.title, run_dir=folder.path, outcomes=tuple(outcomes),
                       elapsed_s=time.perf_counter() - started)
    write_json_atomic(folder.path / SUMMARY_FILE, result.to_dict())
    return result


def _run_tasks(job: Job, folder: RunDirectory, outcomes: list[TaskOutcome], keep_going: bool,
               progress: bool, started: float, earlier_run: EarlierRun | None = None) -> None:
    geometries: dict[str, Geometry] = {}
    stopped = False
    for task in job.tasks:
        if stopped:
            outcomes.append(TaskOutcome(name=task.name, kind=task.kind, status="not run",
                                        message="the job stopped at an earlier task"))
            continue
        outcome = _run_one(job, task, folder, geometries, progress, earlier_run)
        outcomes.append(outcome)
        if outcome.result is not None and outcome.converged:  # others give no start
            geometries[task.name] = outcome.result.geometry
        _write_summary(job, folder, outcomes, started)
        if not outcome.converged and not keep_going:
            stopped = True


def _blocked(task: Any, geometries: Mapping[str, Geometry]) -> str | None:
    needed = [task.start_from] if task.start_from else []
    needed += [ref for kind, ref in task.options.get("geometries", ()) if kind == "task"]
    for name in needed:
        if name not in geometries:
            return name
    return None


def _run_one(job: Job, task: Any, folder: RunDirectory, geometries: dict[str, Geometry],
             progress: bool, earlier_run: EarlierRun | None = None) -> TaskOutcome:
    blocker = _blocked(task, geometries)
    if blocker is not None:
        return TaskOutcome(name=task.name, kind=task.kind, status="skipped",
                           message=f"starts from '{blocker}', which did not converge or finish")
    if earlier_run is not None:
        kept = earlier_run(task, folder.path / task_folder_name(task.name))
        if kept is not None:
            return kept
    run_dir = folder.child(task.name)
    log.info("task %s (%s) in %s", task.name, task.kind, run_dir.path)
    step = Step(job, task.name, task.options, _start(job, task, geometries), run_dir, progress,
                geometries)
    try:
        result = TASK_RUNNERS[task.kind](step)
    except InputError:
        raise
    except SurfcrossError as exc:
        log.warning("task %s failed: %s", task.name, exc)
        return TaskOutcome(name=task.name, kind=task.kind, status="failed", run_dir=run_dir.path,
                           message=str(exc))
    return TaskOutcome(name=task.name, kind=task.kind, status=result.status,
                       converged=bool(result.converged), run_dir=run_dir.path,
                       message=result.message, result=result,
                       show=tuple(task.options.get("show", ())) if task.kind == "states" else ())


def _write_summary(job: Job, folder: RunDirectory, outcomes: list[TaskOutcome],
                   started: float) -> None:
    partial = JobResult(title=job.title, run_dir=folder.path, outcomes=tuple(outcomes),
                        elapsed_s=time.perf_counter() - started)
    write_json_atomic(folder.path / SUMMARY_FILE, partial.to_dict())


def geometry_reference(ref: tuple[str, str], geometries: Mapping[str, Geometry],
                       molecule: Geometry) -> Geometry:
    """A geometry of a path task: ('file', path) read with the molecule's charge and spin, or
    ('task', name) an earlier task's final geometry."""
    kind, value = ref
    if kind == "file":
        return read_xyz(value, molecule.charge, molecule.spin)
    return geometries[value]
