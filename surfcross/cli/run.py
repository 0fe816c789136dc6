"""``surfcross run JOB.toml``: the tasks of a job file, in order, in one job folder."""

from __future__ import annotations

import argparse

from ..jobs import read_job
from ..jobs.runner import JobResult, TaskOutcome, run_job
from ..analysis.vertical import limits_note
from ..tasks.common import LIMITS_NOTE
from ..units import HARTREE_IN_EV

__all__ = ["add_parser", "run", "job_summary_lines"]

#: warnings shown per task in the summary (all of them are in the task's result.json)
MAX_WARNINGS = 3


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "run", help="run the tasks of a TOML job file",
        description="Run the tasks of a job file in order (README, 'Job files'). Each task "
                    "gets a folder inside the job folder; a task can start from the final "
                    "geometry of an earlier one. summary.json in the job folder lists them all.")
    parser.add_argument("job", metavar="JOB.toml", help="the job file")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="job folder (default: 'output' of the job file, else a folder "
                             "named after the job file)")
    parser.add_argument("--keep-going", action="store_true",
                        help="run the remaining tasks after one fails or does not converge "
                             "(tasks starting from it are skipped)")
    parser.set_defaults(handler=run)
    return parser


def _task_line(o: TaskOutcome) -> str:
    where = f"  [{o.run_dir.name}]" if o.run_dir is not None else ""
    head = f"  {o.name} ({o.kind}): {o.status}"
    if o.result is None:
        return head + (f" -- {o.message}" if o.message else "") + where
    r = o.result
    if r.task not in ("states", "path"):
        head += f" after {r.iterations} steps"
    followed = r.data.get("energies_eh", {}) if r.task not in ("states", "path") else {}
    parts = [f"E({k}) = {v:.8f} Eh" for k, v in followed.items()]
    if r.data.get("gap_ev") is not None:
        parts.append(f"gap {r.data['gap_ev'] / HARTREE_IN_EV:.1e} Eh")
    if r.task == "states":
        parts += [f"{row['label']} {row['excitation_ev']:.3f} eV"
                  for row in o.vertical_rows()[:4] if row["excitation_ev"] > 0]
    return head + ("; " + ", ".join(parts) if parts else "") + where


def job_summary_lines(result: JobResult, method=None) -> list[str]:
    """The end-of-job summary (one line per task), with the limits of ``method``."""
    done = sum(o.converged for o in result.outcomes)
    lines = [f"job {result.title or result.run_dir.name}: {done} of {len(result.outcomes)} task(s) "
             f"converged/finished in {result.elapsed_s:.0f} s; folder {result.run_dir}"]
    lines += [_task_line(o) for o in result.outcomes]
    for o in result.outcomes:
        if o.status == "step limit reached" and o.run_dir is not None:
            later = [x.name for x in result.outcomes if x.status == "not run"]
            lines.append(f"  continue {o.name} with: surfcross resume {o.run_dir} --more-steps N"
                         + (f" (it does not run {', '.join(later)})" if later else ""))
    seen: list[str] = []
    for o in result.outcomes:
        new = [w for w in (o.result.warnings if o.result is not None else ()) if w not in seen]
        seen += new
        lines += [f"  warning ({o.name}): {w}" for w in new[:MAX_WARNINGS]]
        if len(new) > MAX_WARNINGS:
            lines.append(f"  ... {len(new) - MAX_WARNINGS} more warning(s) of {o.name} in "
                         f"{o.run_dir.name}/result.json")
    lines.append(f"  note: {limits_note(method) if method is not None else LIMITS_NOTE}")
    return lines


def run(args: argparse.Namespace) -> int:
    job = read_job(args.job)
    result = run_job(job, out=args.out, keep_going=args.keep_going, progress=not args.quiet)
    print("\n".join(job_summary_lines(result, job.method)))
    return 0 if result.converged else 1
