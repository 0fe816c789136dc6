"""Running many independent pieces of work: in this process, or on Dask's distributed scheduler.

A piece of :class:`Work` is a picklable function with its keyword arguments and a name (a
chain of one molecule, or one crossing search of a seam exploration). :func:`run_all` runs
them and returns their results in the order given.

* ``serial`` (also what ``auto`` does without Dask installed): one after another, here.
* ``local`` (``auto`` with Dask): a ``distributed.LocalCluster`` of worker processes, each
  running one piece at a time with its own PySCF (OpenMP) thread count, so that workers x
  threads equals the cores available to this process (:func:`plan_workers`).
* a scheduler address (``tcp://host:8786``): an existing Dask cluster, e.g. one started on a
  batch queue with dask-jobqueue (README, "Many molecules").

A worker process that dies (killed, out of memory, node lost) has its piece rerun by the
scheduler on another worker (up to Dask's ``distributed.scheduler.allowed-failures``, 3 by
default); a piece that kills its worker every time is reported failed with that reason.
A stop request (Ctrl-C: :data:`surfcross.tasks.run.STOP_REQUEST`) is passed to every worker,
whose pieces stop after their current optimizer step with their checkpoints written.
"""

from __future__ import annotations

import logging
import os
import time
import uuid
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

from ..errors import InputError, SurfcrossError
from ..tasks.run import STOP_REQUEST
from .chain import CHAIN_STOP, stop_chains

__all__ = ["Work", "ClusterSettings", "Progress", "Runner", "run_all", "plan_workers",
           "available_cores", "have_dask", "MODES"]

log = logging.getLogger(__name__)

MODES = ("auto", "serial", "local")

#: how often (s) the progress line is repeated while nothing changes
PROGRESS_EVERY_S = 60.0


@dataclass(frozen=True)
class Work:
    """One piece of work: ``function(**kwargs)``, picklable, named for progress and errors.
    ``failed`` builds the result reported when the piece cannot run at all (its worker died
    too often); it receives the reason."""

    name: str
    function: Callable[..., Any]
    kwargs: Mapping[str, Any] = field(default_factory=dict)
    failed: Callable[[str], Any] | None = None


@dataclass(frozen=True, kw_only=True)
class ClusterSettings:
    """Where the work runs.

    Attributes
    ----------
    mode
        'auto' (a local Dask cluster when Dask is installed, else serial), 'serial', 'local',
        or the address of a running Dask scheduler ('tcp://host:8786').
    workers
        Worker processes of a local cluster (default: from the cores, see plan_workers).
    threads
        PySCF threads per piece of work (default: from the cores).
    """

    mode: str = "auto"
    workers: int | None = None
    threads: int | None = None

    def __post_init__(self) -> None:
        if self.mode not in MODES and "://" not in self.mode:
            raise InputError(f"unknown cluster {self.mode!r}: use auto, serial, local or a "
                             "scheduler address such as tcp://host:8786")
        for name in ("workers", "threads"):
            value = getattr(self, name)
            if value is not None and value < 1:
                raise InputError(f"{name} must be >= 1, got {value}")

    @property
    def address(self) -> str | None:
        return self.mode if "://" in self.mode else None


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity, e.g. a queue's allocation)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def plan_workers(cores: int, pieces: int, workers: int | None = None,
                 threads: int | None = None) -> tuple[int, int]:
    """(workers, threads per worker) for ``pieces`` of work on ``cores`` cores.

    Small molecules use several processes better than several threads, so the default is one
    worker per core with one thread each; with fewer pieces than cores, the spare cores
    become threads. Whatever is given explicitly is kept.
    """
    cores, pieces = max(1, cores), max(1, pieces)
    if workers is None and threads is None:
        workers = min(pieces, cores)
    if workers is None:
        workers = max(1, min(pieces, cores // threads))
    if threads is None:
        threads = max(1, cores // workers)
    return int(workers), int(threads)


def have_dask() -> bool:
    try:
        import distributed  # noqa: F401
    except ImportError:
        return False
    return True


# ------------------------------------------------------------------------------ progress
class Progress:
    """Counts of pieces done / running / failed / waiting, and an estimate of the time left."""

    def __init__(self, total: int, noun: str = "chains", failed: Callable[[Any], bool] | None = None,
                 report: Callable[[str], None] | None = None) -> None:
        self.total, self.noun = total, noun
        self.is_failure = failed or (lambda result: False)
        self.report = report or log.info
        self.done = self.failed = self.running = self.stopped = 0
        self.started = time.perf_counter()
        self._last: tuple[int, ...] | None = None
        self._last_time = 0.0

    def finished(self, result: Any) -> None:
        status = result.get("status") if isinstance(result, Mapping) else getattr(result, "status", None)
        if result is None or status == "interrupted":
            self.stopped += 1
        elif self.is_failure(result):
            self.failed += 1
        else:
            self.done += 1

    @property
    def waiting(self) -> int:
        return max(0, self.total - self.done - self.failed - self.running - self.stopped)

    def eta_s(self) -> float | None:
        ended = self.done + self.failed
        if ended == 0:
            return None
        rate = ended / max(time.perf_counter() - self.started, 1e-9)
        return (self.total - ended) / rate

    def line(self) -> str:
        elapsed = time.perf_counter() - self.started
        eta = self.eta_s()
        left = "time left unknown" if eta is None else f"about {_duration(eta)} left"
        if self.done + self.failed + self.stopped == self.total:
            left = "all ended"
        stopped = f", {self.stopped} stopped" if self.stopped else ""
        return (f"{self.noun}: {self.done} done, {self.running} running, {self.failed} failed"
                f"{stopped}, {self.waiting} waiting of {self.total}; {_duration(elapsed)} "
                f"elapsed, {left}")

    def show(self, force: bool = False) -> None:
        state = (self.done, self.failed, self.running, self.stopped)
        now = time.perf_counter()
        if force or state != self._last or now - self._last_time > PROGRESS_EVERY_S:
            self._last, self._last_time = state, now
            self.report(self.line())


def _duration(seconds: float) -> str:
    seconds = max(0.0, seconds)
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


# ------------------------------------------------------------------------------ running
class Runner:
    """An open place to run work: this process, or a Dask client (and its local cluster).

    Use as a context manager; :meth:`run` may be called several times (the cluster is
    started once). ``pieces`` sizes a local cluster (workers x threads, see plan_workers).
    """

    def __init__(self, settings: ClusterSettings = ClusterSettings(), pieces: int = 1,
                 report: Callable[[str], None] | None = None) -> None:
        self.settings, self.pieces = settings, pieces
        self.report = report or log.info
        mode = settings.mode
        if mode == "auto":
            mode = "local" if have_dask() else "serial"
        self.mode = mode
        self.client = self.cluster = None
        self.threads = settings.threads or available_cores()

    def __enter__(self) -> "Runner":
        if self.mode != "serial":
            distributed = _dask()
            self.client, self.cluster, self.threads = _open(self.settings, self.pieces)
            self.client.register_plugin(_worker_setup(distributed), name="surfcross-worker-setup")
            where = self.settings.address or "a local Dask cluster"
            self.report(f"running on {where}: {len(self.client.nthreads())} worker(s), "
                        f"{self.threads} PySCF thread(s) each")
        return self

    def __exit__(self, *exc: Any) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        self.client = self.cluster = None

    def run(self, works: Sequence[Work], progress: Progress | None = None) -> list[Any]:
        """Run every piece; results in the order of ``works``.

        A stop request ends the run after the pieces in progress reach their next checkpoint;
        pieces that never started have the result None. The caller checks
        :data:`~surfcross.tasks.run.STOP_REQUEST` afterwards.
        """
        progress = progress or Progress(len(works), report=self.report)
        if self.client is None:
            return _serial(works, self.threads, progress)
        return _collect(_dask(), self.client, works, self.threads, progress)


def run_all(works: Sequence[Work], settings: ClusterSettings = ClusterSettings(), *,
            progress: Progress | None = None) -> list[Any]:
    """Run every piece once on a place opened for them (see :class:`Runner`)."""
    STOP_REQUEST.clear()
    CHAIN_STOP.clear()
    report = progress.report if progress is not None else None
    with Runner(settings, len(works), report=report) as runner:
        return runner.run(works, progress)


def _serial(works: Sequence[Work], threads: int, progress: Progress) -> list[Any]:
    results: list[Any] = [None] * len(works)
    for k, work in enumerate(works):
        if STOP_REQUEST.is_set() or CHAIN_STOP.is_set():
            CHAIN_STOP.set()
            break
        progress.running = 1
        log.debug("starting %s", work.name)
        results[k] = work.function(**{**work.kwargs, "threads": threads})
        progress.running = 0
        progress.finished(results[k])
        progress.show()
    progress.running = 0
    return results


def _dask():
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise InputError("running on a cluster needs Dask: pip install 'surfcross[dask]' "
                         "(or use --cluster serial)") from None
    return distributed


def _quiet_worker() -> None:
    """In each worker: surfcross logs only errors (every outcome is in the records), and a
    Ctrl-C that reaches the worker stops its chain after the current step."""
    import signal

    logging.getLogger("surfcross").setLevel(logging.ERROR)
    try:
        signal.signal(signal.SIGINT, lambda signum, frame: stop_chains())
    except ValueError:  # not the main thread of the worker
        pass


def _reset_stop() -> None:
    CHAIN_STOP.clear()
    STOP_REQUEST.clear()


def _open(settings: ClusterSettings, pieces: int):
    distributed = _dask()
    if settings.address is not None:
        client = distributed.Client(settings.address, timeout="30s")
        threads = settings.threads or 1
        return client, None, threads
    workers, threads = plan_workers(available_cores(), pieces, settings.workers, settings.threads)
    env = {"OMP_NUM_THREADS": str(threads), "OPENBLAS_NUM_THREADS": str(threads),
           "MKL_NUM_THREADS": str(threads)}
    try:
        cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1,
                                           processes=True, dashboard_address=None,
                                           silence_logs=logging.ERROR, env=env)
    except Exception as exc:  # noqa: BLE001 - Dask gives RuntimeError, OSError, timeouts
        raise SurfcrossError(
            f"the local Dask cluster could not start its worker processes ({exc}). Worker "
            "processes import the main script again: in a script, call surfcross under "
            "'if __name__ == \"__main__\":'; or run without Dask (cluster 'serial')") from None
    client = distributed.Client(cluster)
    return client, cluster, threads


def _worker_setup(distributed: Any) -> Any:
    """A worker plugin: every worker, also one that joins or restarts after a crash, logs
    quietly, passes Ctrl-C on as a stop request and starts with no stop pending."""

    class WorkerSetup(distributed.WorkerPlugin):
        def setup(self, worker: Any) -> None:
            _quiet_worker()
            _reset_stop()

    return WorkerSetup()


def _collect(distributed: Any, client: Any, works: Sequence[Work], threads: int,
             progress: Progress) -> list[Any]:
    token = uuid.uuid4().hex[:8]
    futures = [client.submit(w.function, **{**w.kwargs, "threads": threads},
                             key=f"{w.name}-{token}", pure=False) for w in works]
    index = {f.key: k for k, f in enumerate(futures)}
    results: list[Any] = [None] * len(works)
    pending, stopping = set(futures), False
    progress.show(force=True)
    while pending:
        try:
            done, pending = distributed.wait(pending, timeout=1.0, return_when="FIRST_COMPLETED")
        except TimeoutError:
            done = set()
        for future in done:
            k = index[future.key]
            results[k] = _outcome(future, works[k])
            progress.finished(results[k])
        if STOP_REQUEST.is_set() and not stopping:
            stopping = True
            progress.report(f"stopping: the running {progress.noun} end after their current step")
            client.run(stop_chains)
            running = _running_keys(client)
            waiting = [f for f in pending if f.key not in running]
            client.cancel(waiting)
            pending -= set(waiting)
        slots = _slots(client)
        progress.running = min(len(_running_keys(client) & {f.key for f in pending}), slots)
        progress.show()
    progress.running = 0
    return results


def _slots(client: Any) -> int:
    """Pieces the cluster runs at once (one per worker thread)."""
    try:
        return max(1, sum(client.nthreads().values()))
    except Exception:  # noqa: BLE001 - progress only
        return 1


def _running_keys(client: Any) -> set:
    try:
        return {key for keys in client.processing().values() for key in keys}
    except Exception:  # noqa: BLE001 - progress only; the scheduler may be restarting
        return set()


def _outcome(future: Any, work: Work) -> Any:
    if future.status == "cancelled":
        return None
    try:
        return future.result()
    except Exception as exc:  # noqa: BLE001 - reported per piece, the others go on
        name = type(exc).__name__
        if name == "KilledWorker":
            reason = ("its worker process died every time it ran (killed, out of memory, or "
                      "the node was lost); see the worker logs")
        else:
            reason = f"{name}: {exc}"
        log.warning("%s: %s", work.name, reason)
        return work.failed(reason) if work.failed is not None else None
