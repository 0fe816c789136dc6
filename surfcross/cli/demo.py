"""``surfcross demo [--out DIR]``: the main job on built-in formaldehyde in about a minute."""

from __future__ import annotations

import argparse

from ..workflows.demo import DEMO_FOLDER, demo_summary_lines, run_demo

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "demo", help="built-in example: vertical states, S1 minimum, S1/T1 crossing",
        description="Run the main job on formaldehyde with CIS/STO-3G: the vertical states at "
                    "a slightly pyramidal start, the minimum of the first excited singlet "
                    "(followed by overlap), and the singlet/triplet crossing point nearest to "
                    "it. Takes well under a minute on a laptop.")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help=f"demo folder (default: a new folder {DEMO_FOLDER}, "
                             f"{DEMO_FOLDER}_2, ...)")
    parser.set_defaults(handler=run)
    return parser


def run(args: argparse.Namespace) -> int:
    result = run_demo(args.out, progress=not args.quiet)
    print("\n".join(demo_summary_lines(result)))
    return 0 if result.converged else 1
