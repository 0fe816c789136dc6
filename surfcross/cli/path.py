"""``surfcross path A.xyz B.xyz [C.xyz ...]``: all states along an interpolated pathway."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..analysis.vertical import limits_note

from ..io.run import RunDirectory
from ..workflows import pathway
from .options import add_method_options, geometry_from_args, method_from_args

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "path", help="all states along an interpolated pathway through geometries",
        description="Interpolate through two or more geometries (each aligned onto the "
                    "previous; redundant internal coordinates by default) and compute every "
                    "state at every point. Curves are given by energy order and connected by "
                    "wavefunction overlap (each keeps its character). Points are not "
                    "optimized: barriers along the path are upper bounds.")
    parser.add_argument("geometries", nargs="+", metavar="GEOM.xyz",
                        help="two or more XYZ files (angstrom), same atoms in the same order")
    parser.add_argument("--images", type=int, default=6, metavar="N",
                        help="points between consecutive geometries (default: 6)")
    parser.add_argument("--cartesian", action="store_true",
                        help="interpolate in Cartesian coordinates instead of internals")
    parser.add_argument("--mass-weighted", action="store_true",
                        help="mass-weighted path length (amu^1/2 angstrom) and alignment")
    parser.add_argument("--show", default=None, metavar="S0,S1,..",
                        help="states drawn in the plots (default: all computed)")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="run directory (default: a new folder named after the first input)")
    add_method_options(parser)
    parser.set_defaults(handler=run)
    return parser


def run(args: argparse.Namespace) -> int:
    from ..errors import InputError

    if len(args.geometries) < 2:
        raise InputError("a pathway needs at least two geometries")
    geometries = [geometry_from_args(args, path) for path in args.geometries]
    show = [s for s in (args.show or "").split(",") if s.strip()]
    new = args.out is None or not Path(args.out).exists()
    run_dir = RunDirectory.create(args.out, input_name=args.geometries[0], task="path")
    if new:  # removed again if bad input stops the command before anything is written
        args.created_run_dir = run_dir.path
    result = pathway(geometries, method_from_args(args), images=args.images,
                     interpolation="cartesian" if args.cartesian else "internal",
                     mass_weighted=args.mass_weighted, show=show, run_dir=run_dir)
    profile = result.data["profile"]
    print(f"path: {len(profile['x'])} points, {result.evaluations} evaluations, length "
          f"{profile['x'][-1]:.3f} {profile['x_unit']} ({', '.join(profile['interpolation'])})")
    names = list(profile["connected_ev"])
    print("  energies / eV relative to " + profile["reference"] + " (connected curves):")
    print("  " + f"{'x':>8}" + "".join(f"  {n:>8}" for n in names))
    for k, x in enumerate(profile["x"]):
        print("  " + f"{x:8.3f}" + "".join(f"  {profile['connected_ev'][n][k]:8.3f}" for n in names))
    if result.data.get("character_changes"):
        print("  states changing adiabatic root along the path: "
              + ", ".join(result.data["character_changes"]))
    for w in result.warnings:
        print(f"  warning: {w}")
    print(f"  note: {limits_note(result.method)}")
    print(f"  run directory: {result.run_dir}")
    return 0
