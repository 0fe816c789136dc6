"""``surfcross scan GEOM.xyz --coordinate I,J[,K[,L]] ...``: relaxed, seam or rigid scans."""

from __future__ import annotations

import argparse

from ..tasks.common import LIMITS_NOTE

from ..errors import InputError
from ..workflows import scan, scan_values
from ..workflows.scan import SEAM_SEARCH
from .options import (add_geometry_argument, add_method_options, add_run_options,
                      geometry_from_args, method_from_args, open_run_dir, run_options_from_args)
from .summary import exit_code

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "scan", help="scan a bond, angle or dihedral: relaxed on one state, along a seam, or rigid",
        description="Step one internal coordinate through a list of values. With --state every "
                    "other coordinate is minimized on that state (followed by overlap, each "
                    "point starting from the previous one); with --along-seam a crossing "
                    f"search ({SEAM_SEARCH}, the search that accepts held coordinates) runs at "
                    "every value; with --rigid nothing is minimized.")
    add_geometry_argument(parser)
    parser.add_argument("--coordinate", required=True, metavar="I,J[,K[,L]]",
                        help="2 atoms (bond, angstrom), 3 (angle, degrees) or 4 (dihedral, "
                             "degrees), 1-based")
    parser.add_argument("--from", dest="start", type=float, default=None,
                        help="first value (default: the value at the start geometry)")
    parser.add_argument("--to", dest="stop", type=float, default=None, help="last value")
    parser.add_argument("--points", type=int, default=None, help="number of values")
    parser.add_argument("--values", default=None, metavar="V1,V2,..",
                        help="explicit values instead of --from/--to/--points")
    parser.add_argument("--state", default=None, help="state minimized at each point, e.g. S1")
    parser.add_argument("--along-seam", default=None, metavar="S1,S2",
                        help="two states: the crossing point of the pair at each value")
    parser.add_argument("--rigid", action="store_true",
                        help="no minimization: only the coordinate changes, all states computed")
    parser.add_argument("--with", dest="companions", action="append", default=[],
                        metavar="I,J[,K[,L]]",
                        help="another coordinate of the same kind moved by the same amount and "
                             "held (e.g. the second H-C-C-H dihedral of a twist); repeatable")
    add_method_options(parser)
    add_run_options(parser)
    parser.set_defaults(handler=run)
    return parser


def _atoms(text: str, what: str) -> tuple[int, ...]:
    try:
        atoms = tuple(int(a) - 1 for a in text.split(",") if a.strip())
    except ValueError:
        raise InputError(f"{what} expects 1-based atom numbers separated by commas, got {text!r}") from None
    if not 2 <= len(atoms) <= 4 or min(atoms) < 0:
        raise InputError(f"{what} expects 2, 3 or 4 atom numbers >= 1, got {text!r}")
    return atoms


def _values(args: argparse.Namespace, start_value: float) -> list[float]:
    if args.values is not None:
        try:
            return [float(v) for v in args.values.split(",") if v.strip()]
        except ValueError:
            raise InputError(f"--values expects numbers separated by commas, got {args.values!r}") from None
    if args.stop is None or args.points is None:
        raise InputError("give --to and --points (and optionally --from), or --values")
    return scan_values(start_value if args.start is None else args.start, args.stop, args.points)


def run(args: argparse.Namespace) -> int:
    from ..workflows.scan import coordinate_value

    atoms = _atoms(args.coordinate, "--coordinate")
    companions = [_atoms(t, "--with") for t in args.companions]
    geometry = geometry_from_args(args)
    if max(atoms) >= geometry.natom:
        raise InputError(f"--coordinate names atom {max(atoms) + 1}, the molecule has "
                         f"{geometry.natom} atoms")
    values = _values(args, coordinate_value(geometry, atoms))
    if not args.rigid and args.state is None and args.along_seam is None:
        raise InputError("say what to minimize at each point: --state S0/S1/.., "
                         "--along-seam S1,S2, or --rigid for no minimization")
    options = run_options_from_args(args)
    run_dir = open_run_dir(args, "scan")
    result = scan(geometry, method_from_args(args), atoms=atoms, values=values,
                  state=args.state, along_seam=args.along_seam, relax_points=not args.rigid,
                  companions=companions, options=options, run_dir=run_dir,
                  progress=not args.quiet)
    _print(result)
    return exit_code(result)


def _print(result) -> None:
    profile = result.data["profile"]
    coord = profile["coordinate"]
    status = "converged" if result.converged else f"NOT converged ({result.message})"
    print(f"scan ({profile['mode']}) of {coord['kind']} {'-'.join(map(str, coord['atoms']))}: "
          f"{status}, {result.iterations} steps, {result.evaluations} evaluations")
    followed = profile.get("followed_ev")
    gap = profile.get("gap_ev")
    for k, x in enumerate(profile["x"]):
        line = f"  {x:10.4f} {coord['unit']:<8} achieved {profile['achieved'][k]:10.4f}"
        if followed is not None:
            line += f"  {profile['followed']} {followed[k]:9.4f} eV"
        if gap is not None:
            line += f"  gap {gap[k]:.2e} eV"
        print(line)
    connected = profile.get("connected_ev")
    if followed is None and gap is None and connected:  # rigid: every state at every point
        names = list(connected)
        print(f"  energies / eV relative to {profile['reference']} (connected curves):")
        print("  " + f"{coord['unit']:>10}" + "".join(f"  {n:>8}" for n in names))
        for k, x in enumerate(profile["x"]):
            print("  " + f"{x:10.4f}" + "".join(f"  {connected[n][k]:8.3f}" for n in names))
    if "maximum" in profile:
        print(f"  highest at {profile['maximum']['value']:g}, lowest at "
              f"{profile['minimum']['value']:g} {coord['unit']} "
              f"(eV relative to {profile['reference']})")
    for w in result.warnings:
        print(f"  warning: {w}")
    print(f"  note: {LIMITS_NOTE}")
    print(f"  run directory: {result.run_dir}")
