"""``surfcross relax GEOM.xyz --state S1``: minimum of one state, followed by overlap."""

from __future__ import annotations

import argparse

from ..states import parse_state
from ..tasks import relax
from ..tasks.common import prepare_method
from .options import (add_geometry_argument, add_method_options, add_run_options,
                      geometry_from_args, method_from_args, open_run_dir, run_options_from_args)
from .summary import exit_code, print_summary

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "relax", help="minimize one state (ground or excited), followed by overlap",
        description="Minimize the energy of one state. The state is named by its order at the "
                    "start geometry (S0, S1, T1, ... or 0, 1, ... for open shells) and followed "
                    "by wavefunction overlap, so the run never jumps to another root.")
    add_geometry_argument(parser)
    parser.add_argument("--state", required=True, help="state to minimize, e.g. S1")
    add_method_options(parser)
    add_run_options(parser)
    parser.set_defaults(handler=run)
    return parser


def run(args: argparse.Namespace) -> int:
    label = parse_state(args.state)
    geometry = geometry_from_args(args)
    spec = prepare_method(method_from_args(args), [label], geometry,
                          strict_roots=args.roots is not None)
    options = run_options_from_args(args)
    run_dir = open_run_dir(args, "relax")
    result = relax(geometry, label, spec, options=options, run_dir=run_dir,
                   progress=not args.quiet)
    print_summary(result)
    return exit_code(result)
