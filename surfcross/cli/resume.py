"""``surfcross resume DIR``: continue an interrupted run from its checkpoint."""

from __future__ import annotations

import argparse

from ..tasks import resume
from .summary import exit_code, print_summary

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "resume", help="continue an interrupted run from its checkpoint",
        description="Continue a relax or cross run whose process was stopped (queue limit, "
                    "signal, step limit) from the last step saved in DIR/checkpoint.h5.")
    parser.add_argument("directory", metavar="DIR", help="the run directory")
    parser.add_argument("--more-steps", type=int, default=None, metavar="N",
                        help="steps allowed from the checkpoint on (default: a run stopped at "
                             "its step limit gets its original limit again; an interrupted run "
                             "keeps its limit)")
    parser.set_defaults(handler=run)
    return parser


def run(args: argparse.Namespace) -> int:
    result = resume(args.directory, progress=not args.quiet, more_steps=args.more_steps)
    print_summary(result)
    return exit_code(result)
