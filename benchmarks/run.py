"""Benchmark runner: evaluations, warm starts, overhead and tracking, side by side.

Usage::

    python benchmarks/run.py [--quick | --full | --models-only] [--json FILE]

``--quick`` (default) takes a few minutes on 2 cores, ``--full`` up to about half an hour,
``--models-only`` a few seconds (analytic model surfaces only; used by the smoke test). The
table compares measured ratios with the targets and says MET or MISSED; nothing here is
asserted. Results on CIS/TDA/TDDFT surfaces inherit the limits of linear response (wrong
S0/S1 intersection topology, no double excitations) and of minimal basis sets: they measure
the optimizers, not the chemistry.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import sys
import time
from pathlib import Path
from typing import Any, Callable, Sequence

os.environ.setdefault("OMP_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

import bench_cases as cases  # noqa: E402
import crossing_runs  # noqa: E402
import engine_costs  # noqa: E402
import minima_runs  # noqa: E402
import bench_summary as summary  # noqa: E402
import tracking_runs  # noqa: E402


def _say(message: str, verbose: bool) -> None:
    if verbose:
        print(message, file=sys.stderr, flush=True)


def _section(items: list, run: Callable[[Any], dict], label: str, verbose: bool) -> list[dict]:
    out = []
    for item in items:
        start = time.perf_counter()
        out.append(run(item))
        _say(f"  {label}: {item.name} ({time.perf_counter() - start:.1f} s)", verbose)
    return out


def _timed(run: Callable[[], dict], label: str, verbose: bool) -> dict:
    start = time.perf_counter()
    out = run()
    _say(f"  {label} ({time.perf_counter() - start:.1f} s)", verbose)
    return out


def overhead(crossings: list[dict], minima: list[dict]) -> dict[str, Any] | None:
    """Share of wall time outside states+gradients, over molecular runs of our own code."""
    wall = engine = overlaps = 0.0
    runs = 0
    for row in minima:
        r = row["runs"]["ours"]
        if r.get("engine_s") is not None:
            wall, engine, overlaps = wall + r["wall_s"], engine + r["engine_s"], overlaps + r[
                "overlaps_s"]
            runs += 1
    for row in crossings:
        if row.get("is_model"):
            continue
        for name in ("auto", "penalty", "projected"):
            r = row["runs"].get(name, {})
            if r.get("engine_s") is not None:
                wall, engine, overlaps = (wall + r["run_s"], engine + r["engine_s"],
                                          overlaps + r["overlaps_s"])
                runs += 1
    if wall <= 0:
        return None
    return {"fraction": (wall - engine) / wall, "overlaps_fraction": overlaps / wall,
            "runs": runs, "wall_s": wall, "engine_s": engine}


def _warm_up() -> None:
    """Import PySCF once before anything is timed (its import takes about a second)."""
    import pyscf.tdscf  # noqa: F401
    import pyscf.grad  # noqa: F401


def run(mode: str, verbose: bool = True) -> dict[str, Any]:
    """All sections of one mode ('models', 'quick', 'full'); returns the JSON dictionary."""
    started = time.perf_counter()
    results: dict[str, Any] = {
        "mode": mode, "date": datetime.date.today().isoformat(),
        "machine": {"cpus": os.cpu_count(), "platform": platform.platform(),
                    "python": platform.python_version(), "numpy": np.__version__,
                    "omp_num_threads": os.environ.get("OMP_NUM_THREADS")},
        "pyberny": "installed" if minima_runs.berny_available() else "not installed",
    }
    if mode != "models":
        _warm_up()
    _say("crossing searches", verbose)
    crossing_cases = cases.crossing_suite(mode)
    results["crossings"] = _section(crossing_cases, crossing_runs.run_case, "crossing", verbose)
    for row, case in zip(results["crossings"], crossing_cases):
        row["is_model"] = case.is_model
    _say("crossing searches from jittered starts", verbose)
    results["crossing_jitter"] = [
        _timed(lambda c=case, r=row: crossing_runs.run_jittered(c, r["one_dimensional"]),
               f"jittered crossing: {case.name}", verbose)
        for row, case in zip(results["crossings"], crossing_cases)]
    if mode != "models":
        _say("minima", verbose)
        minimum_cases = cases.minimum_suite(mode)
        results["minima"] = _section(minimum_cases, minima_runs.run_case, "minimum", verbose)
        results["minima_jitter"] = _section(minimum_cases, minima_runs.run_jittered,
                                            "jittered minimum", verbose)
        _say("warm starts", verbose)
        results["warm_start"] = _section(cases.warm_suite(mode), engine_costs.run_path,
                                         "path", verbose)
        _say("tracking", verbose)
        results["tracking"] = _section(cases.tracking_suite(mode), tracking_runs.run_path,
                                       "path", verbose)
        results["overhead"] = overhead(results["crossings"], results["minima"])
    results["targets"] = summary.evaluate_targets(results)
    results["wall_s"] = time.perf_counter() - started
    return results


def _jsonable(x: Any) -> Any:
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    if isinstance(x, np.ndarray):
        return x.tolist()
    return x


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    group = parser.add_mutually_exclusive_group()
    group.add_argument("--quick", action="store_true", help="a few minutes (default)")
    group.add_argument("--full", action="store_true", help="up to about 30 minutes")
    group.add_argument("--models-only", action="store_true",
                       help="analytic model surfaces only (seconds)")
    parser.add_argument("--json", metavar="FILE", help="write all measurements to FILE")
    parser.add_argument("--silent", action="store_true", help="no progress lines on stderr")
    args = parser.parse_args(argv)
    mode = "full" if args.full else "models" if args.models_only else "quick"
    results = run(mode, verbose=not args.silent)
    print(f"surfcross benchmarks, mode {mode}, {results['date']}, "
          f"{results['machine']['cpus']} cores, pyberny {results['pyberny']}, "
          f"{results['wall_s']:.0f} s\n")
    print(summary.render(results))
    if args.json:
        Path(args.json).write_text(json.dumps(_jsonable(results), indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
