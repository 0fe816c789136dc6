"""``surfcross states GEOM.xyz``: vertical states at one geometry, as a table or JSON."""

from __future__ import annotations

import argparse
import json
import sys

from ..analysis.spin_orbit import OPERATORS, SpinOrbitCouplings
from ..analysis.vertical import VerticalRow, limits_note, vertical_rows, vertical_summary
from ..engine import make_engine
from ..errors import InputError
from ..tasks.common import prepare_method
from .options import add_geometry_argument, add_method_options, geometry_from_args, method_from_args

__all__ = ["add_parser", "run", "format_table", "format_couplings"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "states", help="vertical excited states: energies, oscillator strengths, transitions",
        description="Compute the reference and excited states at one geometry and print "
                    "excitation energies, wavelengths, oscillator strengths and dominant "
                    "orbital transitions.")
    add_geometry_argument(parser)
    add_method_options(parser)
    parser.add_argument("--triplet-count", type=int, default=0, metavar="N",
                        help="also compute N triplets of a closed-shell molecule (default: 0)")
    parser.add_argument("--soc", nargs="?", const="auto", default=None, metavar="OPERATOR",
                        choices=("auto",) + OPERATORS,
                        help="also print singlet-triplet spin-orbit couplings (cm^-1): "
                             "auto (default when given), " + ", ".join(OPERATORS)
                             + "; computes triplets if --triplet-count is 0")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.add_argument("--pyscf-log", default=None, metavar="FILE",
                        help="append PySCF's own output to FILE (default: discard it)")
    parser.set_defaults(handler=run)
    return parser


def _number(value: float | None, fmt: str) -> str:
    return "-" if value is None else format(value, fmt)


def format_table(rows: tuple[VerticalRow, ...]) -> str:
    """Fixed-width text table of the rows (one line per state)."""
    show_s2 = any(r.spin_square is not None for r in rows)
    show_irrep = any(r.irrep is not None for r in rows)
    head = f"{'state':<6}{'dE/eV':>9}{'lambda/nm':>11}{'E/Eh':>17}{'f':>9}"
    if show_s2:
        head += f"{'<S^2>':>8}"
    if show_irrep:
        head += f"  {'sym':<5}"
    lines = [head + "  transitions (weight)"]
    for r in rows:
        line = (f"{r.label:<6}{r.excitation_ev:>9.3f}{_number(r.wavelength_nm, '.1f'):>11}"
                f"{r.energy_eh:>17.8f}{_number(r.oscillator_strength, '.4f'):>9}")
        if show_s2:
            line += f"{_number(r.spin_square, '.3f'):>8}"
        if show_irrep:
            line += f"  {r.irrep or '-':<5}"
        lines.append(line + "  " + ", ".join(r.transitions))
    return "\n".join(lines)


def format_couplings(couplings: SpinOrbitCouplings) -> str:
    """Singlets down, triplets across: total couplings sqrt(sum_M |<S|H_SO|T, M>|^2)."""
    singlets = list(dict.fromkeys(str(p.singlet) for p in couplings.pairs))
    triplets = list(dict.fromkeys(str(p.triplet) for p in couplings.pairs))
    totals = {(str(p.singlet), str(p.triplet)): p.total_cm for p in couplings.pairs}
    lines = [f"spin-orbit couplings / cm^-1, total over M = -1, 0, +1 ({couplings.operator} "
             "operator)", f"{'':<6}" + "".join(f"{t:>9}" for t in triplets)]
    for s in singlets:
        lines.append(f"{s:<6}" + "".join(f"{totals[(s, t)]:>9.2f}" for t in triplets))
    return "\n".join(lines)


def _soc_spec(args: argparse.Namespace, geometry, spec):
    """The method with response triplets for --soc, or an InputError before any work."""
    if spec.method == "casscf" or geometry.spin > 0 or spec.unrestricted \
            or spec.triplets != "response":
        raise InputError("--soc needs a linear-response method (cis, tda, tdhf, tddft) on a "
                         "restricted closed-shell reference with response triplets")
    if spec.triplet_roots == 0:
        spec = spec.with_updates(triplet_roots=spec.roots)
    return spec


def run(args: argparse.Namespace) -> int:
    if args.triplet_count < 0:
        raise InputError("--triplet-count must be >= 0")
    geometry = geometry_from_args(args)
    spec = method_from_args(args, roots=3, triplet_roots=args.triplet_count)
    if spec.method == "casscf" and args.triplet_count:
        raise InputError("--triplet-count applies to the linear-response methods only")
    if args.soc:
        spec = _soc_spec(args, geometry, spec)
    spec = prepare_method(spec, [], geometry, strict_roots=args.roots is not None
                          or args.triplet_count > 0)
    kwargs = {"log_path": args.pyscf_log} if args.pyscf_log else {}
    engine = make_engine(spec, **kwargs)
    try:
        evaluation = engine.states(geometry)
        with_irreps = getattr(engine, "with_irreps", None)
        if callable(with_irreps):  # point-group labels, in the input frame
            evaluation = with_irreps(evaluation)
    finally:
        engine.close()
    couplings = None
    if args.soc:
        from ..engine.pyscf_soc import spin_orbit_couplings

        couplings = spin_orbit_couplings(evaluation, args.soc, method=spec)
    if args.json:
        summary = vertical_summary(evaluation, spec, source=args.geometry)
        if couplings is not None:
            summary["spin_orbit"] = couplings.to_dict()
        json.dump(summary, sys.stdout, indent=2)
        sys.stdout.write("\n")
        return 0
    group = f"  point group {evaluation.point_group}" if evaluation.point_group else ""
    print(f"{spec.method.upper()}/{spec.reference}/{spec.basis}  charge {geometry.charge}  "
          f"spin (2S) {geometry.spin}{group}  {len(evaluation.states)} states  "
          f"(SCF cycles {evaluation.scf_cycles}, response iterations "
          f"{evaluation.response_iterations})")
    print(format_table(vertical_rows(evaluation)))
    if couplings is not None:
        print(format_couplings(couplings))
    for text in evaluation.warnings:
        print(f"warning: {text}")
    print(f"note: {limits_note(spec)}")
    if couplings is not None:
        for text in couplings.notes:
            print(f"note: {text}")
    return 0
