"""``surfcross batch JOB.toml MOLECULES...``: one job on many molecules, in parallel."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

__all__ = ["add_parser", "run", "add_cluster_options", "cluster_from_args", "EXIT_STOPPED"]

EXIT_STOPPED = 130


def add_cluster_options(parser: argparse.ArgumentParser, *, threads: bool = True) -> None:
    """--cluster, --workers and (unless the command has it already) --threads."""
    g = parser.add_argument_group("where the work runs")
    g.add_argument("--cluster", default="auto", metavar="WHERE",
                   help="auto (a local Dask cluster when Dask is installed, else one after "
                        "another in this process), serial, local, or the address of a running "
                        "Dask scheduler such as tcp://host:8786 (default: auto)")
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="worker processes of the local cluster (default: one per core, at "
                        "most one per chain)")
    if threads:
        g.add_argument("--threads", type=int, default=None, metavar="N",
                       help="PySCF threads per chain (default: the cores left per worker)")


def cluster_from_args(args: argparse.Namespace):
    from ..batch import ClusterSettings

    return ClusterSettings(mode=args.cluster.strip().lower() if "://" not in args.cluster
                           else args.cluster.strip(), workers=args.workers,
                           threads=getattr(args, "threads", None))


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "batch", help="run one job file on many molecules (in parallel with Dask)",
        description="Run the tasks of one job file on every molecule given: XYZ files (a file "
                    "with several frames gives one chain per frame, e.g. many starts of one "
                    "molecule), folders of XYZ files, SMILES lists (.smi/.smiles/.txt, one "
                    "'SMILES name' per line). The job file's [molecule] table may be absent; "
                    "its charge and spin apply to every molecule. Each molecule gets a job "
                    "folder inside OUT; batch_summary.json/.csv and batch_overview.png sum up "
                    "the set. Running the same command again continues the batch.")
    parser.add_argument("job", metavar="JOB.toml", help="the job file")
    parser.add_argument("molecules", nargs="+", metavar="MOLECULES",
                        help="XYZ files, folders of XYZ files, SMILES lists")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="batch folder (default: <job>_batch beside the job file); an "
                             "existing batch of the same job is continued")
    parser.add_argument("--stop-chain-at-failure", action="store_true",
                        help="within a molecule, stop at the first task that fails or does not "
                             "converge (default: run the tasks that do not start from it)")
    add_cluster_options(parser)
    parser.set_defaults(handler=run)
    return parser


def _number(value, digits: int = 3) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def summary_lines(result) -> list[str]:
    """What the command prints at the end: one line per chain, then its task rows."""
    lines = [f"batch {result.folder}: {result.count('finished')} finished, "
             f"{result.count('not converged')} not converged, {result.count('failed')} failed, "
             f"{result.count('interrupted')} interrupted, of {len(result.reports)} "
             f"({result.elapsed_s:.0f} s)"]
    by_name: dict[str, list[dict]] = {}
    for row in result.rows:
        by_name.setdefault(row["molecule"], []).append(row)
    for report in result.reports:
        head = f"  {report.name}: {report.status}"
        if report.reason:
            head += f" -- {report.reason}"
        lines.append(head)
        for row in by_name.get(report.name, []):
            if row.get("task") is None:
                continue
            parts = [f"{row['task']} ({row['kind']}): {row['status']}"]
            if row.get("energy_ev") is not None:
                parts.append(f"E {_number(row['energy_ev'])} eV")
            for key, name in (("absorption_ev", "abs"), ("emission_ev", "em"),
                              ("stokes_shift_ev", "Stokes"), ("vs_relaxed_ev", "vs relaxed"),
                              ("vs_fc_ev", "vs FC")):
                if row.get(key) is not None:
                    parts.append(f"{name} {_number(row[key])} eV")
            if row.get("gap_ev") is not None:
                parts.append(f"gap {row['gap_ev']:.1e} eV")
            if row.get("character"):
                parts.append(row["character"])
            lines.append("    " + ", ".join(parts))
    lines += [f"  files: {', '.join(p.name for p in result.files)}"]
    return lines


def run(args: argparse.Namespace) -> int:
    from ..batch import run_batch
    from ..batch.molecules import CAUTION
    from ..batch.summary import SUMMARY_JSON
    from ..batch.records import read_json

    job = Path(args.job)
    out = Path(args.out) if args.out else job.parent / f"{job.stem}_batch"

    def report(line: str) -> None:
        if not args.quiet:
            print(f"surfcross: {line}", file=sys.stderr, flush=True)

    try:
        result = run_batch(job, args.molecules, out, cluster=cluster_from_args(args),
                           keep_going=not args.stop_chain_at_failure, report=report)
    except KeyboardInterrupt:  # a second Ctrl-C: the checkpoints written so far remain
        print(f"surfcross: stopped at once; run the same command again to continue the batch "
              f"in {out}", file=sys.stderr)
        return EXIT_STOPPED
    print("\n".join(summary_lines(result)))
    note = (read_json(out / SUMMARY_JSON) or {}).get("note")
    if note:
        print(f"  note: {note}")
    print(f"  caution: {CAUTION}")
    if result.interrupted:
        print(f"surfcross: interrupted; run the same command again to continue the batch in "
              f"{out}", file=sys.stderr)
        return EXIT_STOPPED
    return 0 if result.all_finished else 1
