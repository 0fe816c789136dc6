"""``surfcross cross GEOM.xyz --states S1,S2``: minimum-energy crossing point of two states."""

from __future__ import annotations

import argparse

from ..objectives.searches import SEARCHES
from ..states import parse_states
from ..tasks import find_crossing
from ..tasks.common import prepare_method
from ..tasks.crossing import check_high_spin_pair
from .options import (add_geometry_argument, add_method_options, add_run_options,
                      geometry_from_args, method_from_args, open_run_dir, run_options_from_args)
from .summary import exit_code, print_summary

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "cross", help="minimum-energy crossing point of two states",
        description="Locate the lowest-energy point where two states meet: a conical "
                    "intersection for states of one spin, a spin crossing otherwise. The pair "
                    "is followed by overlap; the converged point is characterized.")
    add_geometry_argument(parser)
    parser.add_argument("--states", required=True, help="two states, e.g. S1,S2 or S1,T1")
    parser.add_argument("--search", default="auto", choices=list(SEARCHES),
                        help="auto: projected search (same spin) or spin-crossing search "
                             "(different spin); penalty: smoothed penalty function (default: auto)")
    parser.add_argument("--gap-tol", type=float, default=None, metavar="EH",
                        help="largest gap accepted as a crossing, hartree (default: 1e-3; "
                             "1e-4 with --converge tight)")
    add_method_options(parser)
    add_run_options(parser, crossing=True)
    parser.set_defaults(handler=run)
    return parser


def run(args: argparse.Namespace) -> int:
    labels = parse_states(args.states, count=2)
    geometry = geometry_from_args(args)
    spec = prepare_method(method_from_args(args), labels, geometry,
                          strict_roots=args.roots is not None)
    check_high_spin_pair(labels, spec)  # before any folder is made
    options = run_options_from_args(args)
    run_dir = open_run_dir(args, "cross")
    result = find_crossing(geometry, labels, spec, search=args.search, options=options,
                           run_dir=run_dir, progress=not args.quiet,
                           gap_tolerance_eh=args.gap_tol)
    print_summary(result)
    return exit_code(result)
