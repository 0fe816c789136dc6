"""Many molecules times one job: :func:`run_batch`.

Layout of the batch folder ``OUT``::

    OUT/batch.json            what the batch is: job file, its fingerprint, the molecules
    OUT/<molecule>/           one job folder per molecule (summary.json, one folder per task)
    OUT/batch_summary.json    every chain's status and reason, one row per molecule and task
    OUT/batch_summary.csv     the same rows as a table
    OUT/batch_overview.png    energy levels of every molecule (with matplotlib)

Running the same command again continues the batch: finished tasks are kept, interrupted
optimizations continue from their checkpoints, and the summary is rebuilt from the folders.
"""

from __future__ import annotations

import functools
import logging
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Sequence

from ..analysis.vertical import limits_note
from ..errors import InputError
from ..io.results import write_json_atomic
from ..tasks.run import STOP_REQUEST
from . import records
from .chain import CHAIN_STOP, ChainReport, run_chain
from .inputs import Chain, JobTemplate, collect_molecules, make_chains, read_job_template
from .scheduler import ClusterSettings, Progress, Work, run_all
from .summary import SUMMARY_CSV, SUMMARY_JSON, molecule_rows, overview_plot, write_summary

__all__ = ["BatchResult", "run_batch", "run_chains", "BATCH_FILE", "CAUTION"]

log = logging.getLogger(__name__)

BATCH_FILE = "batch.json"

CAUTION = ("Every number comes from the job's method on isolated molecules; screening ranks "
           "candidates, it does not predict spectra or yields. Check the candidates you pick "
           "with higher-level methods before relying on them.")


@dataclass(frozen=True)
class BatchResult:
    """Outcome of a batch: one report per chain (input order), the summary rows, the files."""

    folder: Path
    reports: tuple[ChainReport, ...]
    rows: tuple[dict, ...]
    interrupted: bool = False
    elapsed_s: float = 0.0
    files: tuple[Path, ...] = field(default_factory=tuple)

    def count(self, status: str) -> int:
        return sum(r.status == status for r in self.reports)

    @property
    def all_finished(self) -> bool:
        return all(r.status == "finished" for r in self.reports)


def _failed_report(name: str, folder: str, reason: str) -> ChainReport:
    return ChainReport(name=name, status="failed", reason=reason, folder=folder)


def _claim_folder(out: Path, template: JobTemplate, chains: Sequence[Chain]) -> None:
    """Create OUT (or check that it holds a batch of the same job) and write batch.json."""
    old = records.read_json(out / BATCH_FILE)
    if old is None and out.is_dir() and any(out.iterdir()):
        raise InputError(f"{str(out)!r} is not empty and holds no batch; choose another --out")
    if old is not None and old.get("job_fingerprint") != template.fingerprint:
        raise InputError(f"{str(out)!r} holds a batch of a different job definition "
                         f"({old.get('job')}); choose another --out, or use that job file")
    out.mkdir(parents=True, exist_ok=True)
    known = {c["name"]: c for c in (old or {}).get("chains", [])}
    for chain in chains:
        known[chain.name] = {"name": chain.name, "origin": chain.origin}
    write_json_atomic(out / BATCH_FILE, {
        "format": "surfcross-batch", "version": 1, "job": template.source,
        "job_fingerprint": template.fingerprint, "chains": list(known.values())})


def run_chains(chains: Sequence[Chain], out: str | Path, *,
               cluster: ClusterSettings = ClusterSettings(), keep_going: bool = True,
               report: Any = None) -> list[ChainReport]:
    """Run prepared chains, each in ``out/<name>``; reports in the order of ``chains``.

    Chains with an ``error`` (bad input found while preparing them) are not run and come back
    failed with that reason.
    """
    out = Path(out).resolve()  # workers on other machines do not share our working folder
    STOP_REQUEST.clear()  # a stop asked of an earlier run in this process is not ours
    CHAIN_STOP.clear()
    runnable = [c for c in chains if c.job is not None]
    works = [Work(name=c.name, function=run_chain,
                  kwargs={"name": c.name, "job": c.job, "folder": str(out / c.name),
                          "keep_going": keep_going},
                  failed=functools.partial(_failed_report, c.name, str(out / c.name)))
             for c in runnable]
    progress = Progress(len(chains), "chains",
                        failed=lambda r: r is None or r.status == "failed", report=report)
    progress.failed = len(chains) - len(runnable)
    for c in chains:
        if c.job is None:
            log.warning("%s: not run: %s", c.name, c.error)
    results = iter(run_all(works, cluster, progress=progress))
    out_reports = []
    for c in chains:
        if c.job is None:
            out_reports.append(_failed_report(c.name, "", f"bad input: {c.error}"))
            continue
        r = next(results)
        out_reports.append(r if r is not None else ChainReport(
            name=c.name, status="interrupted", reason="not started before the stop",
            folder=str(out / c.name)))
    return out_reports


def run_batch(job: str | Path | JobTemplate, molecules: Iterable[str | Path], out: str | Path, *,
              cluster: ClusterSettings = ClusterSettings(), keep_going: bool = True,
              report: Any = None) -> BatchResult:
    """Run one job definition on many molecules; rerun with the same arguments to continue.

    Parameters
    ----------
    job
        A TOML job file (or its :class:`~surfcross.batch.inputs.JobTemplate`) without a
        molecule, or whose molecule is replaced by each of ``molecules``.
    molecules
        XYZ files (several frames: one chain per frame), folders of XYZ files, SMILES lists.
    out
        The batch folder (created; a folder holding a batch of the same job is continued).
    cluster
        Where the chains run (:class:`~surfcross.batch.scheduler.ClusterSettings`).
    keep_going
        Within a chain, run the tasks that do not start from a failed one.
    report
        Callable receiving progress lines (default: the log at INFO level).
    """
    started = time.perf_counter()
    template = job if isinstance(job, JobTemplate) else read_job_template(job)
    chains = make_chains(template, collect_molecules(molecules))
    out = Path(out)
    _claim_folder(out, template, chains)
    reports = run_chains(chains, out, cluster=cluster, keep_going=keep_going, report=report)
    interrupted = STOP_REQUEST.is_set() or any(r.status == "interrupted" for r in reports)
    rows = [row for c, r in zip(chains, reports)
            for row in molecule_rows(c.name, r.status, out / c.name, r.reason)]
    document = {
        "format": "surfcross-batch-summary", "version": 1, "job": template.source,
        "interrupted": interrupted, "elapsed_s": round(time.perf_counter() - started, 2),
        "chains": [{**r.to_dict(), "origin": c.origin} for c, r in zip(chains, reports)],
        "rows": rows, "note": _note(chains), "caution": CAUTION}
    files = list(write_summary(out, document))
    plot = overview_plot(out, rows)
    if plot is not None:
        files.append(plot)
    return BatchResult(folder=out, reports=tuple(reports), rows=tuple(rows),
                       interrupted=interrupted, elapsed_s=time.perf_counter() - started,
                       files=tuple(files))


def _note(chains: Sequence[Chain]) -> str:
    job = next((c.job for c in chains if c.job is not None), None)
    return limits_note(job.method) if job is not None else ""


__all__ += ["SUMMARY_JSON", "SUMMARY_CSV"]
