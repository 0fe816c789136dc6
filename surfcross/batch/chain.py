"""One chain: a job run in its own folder, started afresh or continued where it stopped.

:func:`run_chain` is what a worker executes. It never raises for a problem of its molecule:
bad input, an SCF that does not converge, a lost state are all reported in the returned
:class:`ChainReport` (status and reason), so one molecule cannot stop the others. A stop
request (Ctrl-C, or the batch asking its workers to stop) ends the chain after the step in
progress, with its checkpoint written: status 'interrupted'.

Continuing: a chain folder that already holds tasks is continued through the job runner's
``earlier_run`` hook. A task whose result.json is final is kept as it is; a relax or cross
task stopped before its result (killed worker, Ctrl-C, machine lost) continues from its
checkpoint through :func:`surfcross.tasks.resume`; any other unfinished task folder is moved
aside (``NAME.unfinished``, ``NAME.unfinished_2``, ...; nothing is deleted) and the task runs
again.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import threading
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from ..errors import CheckpointError, InputError, SurfcrossError
from ..geometry import read_xyz
from ..jobs import Job
from ..jobs.runner import TaskOutcome, run_job
from ..tasks import TaskResult, resume
from ..tasks.resume import method_from_dict
from ..tasks.run import STOP_REQUEST
from . import records

__all__ = ["ChainReport", "run_chain", "CHAIN_STOP", "stop_chains", "RESUMABLE_KINDS",
           "ATTEMPTS_FILE", "quiet_logs", "move_aside"]

log = logging.getLogger(__name__)

#: task kinds whose interrupted run continues from its checkpoint
RESUMABLE_KINDS = ("relax", "cross")
#: one line per start of the chain in its folder (host, process, time): shows reruns
ATTEMPTS_FILE = "attempts.log"

#: set to stop every chain of this process after its current step (see :func:`stop_chains`)
CHAIN_STOP = threading.Event()


def stop_chains() -> None:
    """Ask the chains of this process to stop after their current optimizer step."""
    CHAIN_STOP.set()
    STOP_REQUEST.set()


@dataclass(frozen=True)
class ChainReport:
    """What became of one chain (small and plain: it travels back from the worker).

    ``status``: 'finished' (every task converged or finished), 'not converged' (a task ended
    without converging, e.g. at its step limit), 'failed' (bad input or an engine failure;
    ``reason`` says which), 'interrupted' (stopped on request; a rerun continues it).
    """

    name: str
    status: str
    reason: str = ""
    folder: str = ""
    elapsed_s: float = 0.0
    kept: tuple[str, ...] = ()
    resumed: tuple[str, ...] = ()
    tasks: tuple[dict, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["kept"], out["resumed"], out["tasks"] = list(self.kept), list(self.resumed), list(self.tasks)
        return out


class _Continuation:
    """The ``earlier_run`` hook of the job runner for one chain folder."""

    def __init__(self, job: Job, progress: bool) -> None:
        self.job, self.progress = job, progress
        self.kept: list[str] = []
        self.resumed: list[str] = []

    def __call__(self, task: Any, path: Path) -> TaskOutcome | None:
        if CHAIN_STOP.is_set():
            raise KeyboardInterrupt("stop requested")
        if not path.exists():
            return None
        result = records.read_result(path)
        if result is not None and records.task_status(result) in records.ENDED_STATUSES:
            self.kept.append(task.name)
            return self._kept(task, path, result)
        if task.kind in RESUMABLE_KINDS and (path / "checkpoint.h5").exists():
            try:
                outcome = resume(path, progress=self.progress)
            except CheckpointError as exc:
                log.info("%s: cannot continue (%s); running it again", path, exc)
            else:
                self.resumed.append(task.name)
                return TaskOutcome(name=task.name, kind=task.kind, status=outcome.status,
                                   converged=bool(outcome.converged), run_dir=path,
                                   message=outcome.message, result=outcome)
        move_aside(path)
        return None

    def _kept(self, task: Any, path: Path, result: dict) -> TaskOutcome:
        geometry = None
        final = path / str(result.get("final_xyz") or "final.xyz")
        if final.is_file():
            mol = self.job.molecule
            geometry = read_xyz(final, mol.charge, mol.spin)
        converged = records.is_converged(result)
        task_result = None
        if geometry is not None:
            method = method_from_dict(result.get("method") or {})
            task_result = TaskResult(
                task=str(result.get("task", task.kind)), converged=converged,
                status=records.task_status(result), message=str(result.get("message", "")),
                geometry=geometry, evaluation=None, states=tuple(result.get("states") or ()),
                method=method, iterations=int(result.get("iterations") or 0),
                evaluations=int(result.get("evaluations") or 0), search=result.get("search"),
                warnings=tuple(result.get("warnings") or ()), data=result, run_dir=path)
        return TaskOutcome(name=task.name, kind=task.kind, status=records.task_status(result),
                           converged=converged and geometry is not None, run_dir=path,
                           message=str(result.get("message", "")), result=task_result,
                           show=tuple(task.options.get("show", ())) if task.kind == "states" else ())


def move_aside(path: Path) -> Path:
    """Rename an unfinished folder to NAME.unfinished (_2, _3, ...): nothing is deleted."""
    for n in range(1, 10000):
        target = path.with_name(f"{path.name}.unfinished" + ("" if n == 1 else f"_{n}"))
        if not target.exists():
            os.replace(path, target)
            log.info("moved the unfinished folder %s aside to %s", path, target.name)
            return target
    raise InputError(f"too many unfinished copies of {path}")


@contextlib.contextmanager
def quiet_logs(quiet: bool = True):
    """Within: surfcross logs warnings and errors only (a batch reports its chains, not their
    steps and settings)."""
    logger = logging.getLogger("surfcross")
    level = logger.level
    if quiet and logger.getEffectiveLevel() < logging.WARNING:
        logger.setLevel(logging.WARNING)
    try:
        yield
    finally:
        logger.setLevel(level)


def _note_attempt(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / ATTEMPTS_FILE, "a", encoding="utf-8") as fh:
        fh.write(f"{time.strftime('%Y-%m-%dT%H:%M:%S')} host={socket.gethostname()} "
                 f"pid={os.getpid()}\n")


def _task_rows(outcomes: Any) -> tuple[dict, ...]:
    return tuple({"name": o.name, "kind": o.kind, "status": o.status, "converged": o.converged,
                  "message": o.message} for o in outcomes)


def run_chain(name: str, job: Job, folder: str | Path, *, progress: bool = False,
              keep_going: bool = True, threads: int | None = None) -> ChainReport:
    """Run (or continue) ``job`` in ``folder``; never raises for a problem of the molecule.

    Parameters
    ----------
    keep_going
        Run the tasks that do not depend on a failed one (the job runner's ``keep_going``).
    threads
        OpenMP threads for PySCF in this process (None: leave as it is).
    """
    folder = Path(folder)
    started = time.perf_counter()
    if threads is not None:  # the batch shares the cores out: its count wins over the file's
        set_threads(threads)
        job = replace(job, method=job.method.with_updates(threads=int(threads)))
    if CHAIN_STOP.is_set():
        return ChainReport(name=name, status="interrupted", reason="stopped before it started",
                           folder=str(folder))
    _note_attempt(folder)
    continuing = records.read_job_summary(folder) is not None or any(
        p.is_dir() for p in folder.iterdir())
    hook = _Continuation(job, progress)
    try:
        with quiet_logs(not progress):
            result = run_job(job, out=folder, keep_going=keep_going, progress=progress,
                             earlier_run=hook if continuing else None)
    except KeyboardInterrupt:
        return ChainReport(name=name, status="interrupted", folder=str(folder),
                           reason="stopped on request; rerun the batch to continue",
                           elapsed_s=time.perf_counter() - started, kept=tuple(hook.kept),
                           resumed=tuple(hook.resumed))
    except SurfcrossError as exc:  # bad input found when the task ran (e.g. unknown basis)
        return ChainReport(name=name, status="failed", reason=" ".join(str(exc).split()),
                           folder=str(folder), elapsed_s=time.perf_counter() - started)
    except Exception as exc:  # noqa: BLE001 - a bug must not take the other chains down
        log.exception("chain %s: unexpected error", name)
        return ChainReport(name=name, status="failed", folder=str(folder),
                           reason=f"unexpected {type(exc).__name__}: {exc}",
                           elapsed_s=time.perf_counter() - started)
    failed = [o for o in result.outcomes if o.status == "failed"]
    if failed:
        status, reason = "failed", f"task {failed[0].name}: {failed[0].message}"
    elif result.converged:
        status, reason = "finished", ""
    else:
        first = next(o for o in result.outcomes if not o.converged)
        status = "not converged"
        reason = f"task {first.name}: {first.status}" + (f" ({first.message})" if first.message else "")
    return ChainReport(name=name, status=status, reason=reason, folder=str(folder),
                       elapsed_s=time.perf_counter() - started, kept=tuple(hook.kept),
                       resumed=tuple(hook.resumed), tasks=_task_rows(result.outcomes))


def set_threads(threads: int) -> None:
    """OpenMP threads of PySCF in this process (and of children it starts)."""
    os.environ["OMP_NUM_THREADS"] = str(int(threads))
    try:
        from pyscf import lib
    except ImportError:  # pragma: no cover - PySCF is a core dependency
        return
    lib.num_threads(int(threads))
