"""``surfcross seams GEOM.xyz --states S1,S2``: crossing searches from many starts, merged."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import InputError
from ..objectives.searches import SEARCHES
from ..units import ANGSTROM_IN_BOHR
from .batch import EXIT_STOPPED, add_cluster_options, cluster_from_args
from .options import (add_geometry_argument, add_method_options, add_run_options,
                      geometry_from_args, method_from_args, run_options_from_args)

__all__ = ["add_parser", "run"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "seams", help="crossing searches from many starts around a point; the distinct crossings",
        description="Make starts around GEOM (in the branching plane of the crossing found "
                    "from GEOM itself, along low normal modes, random distortions with a fixed "
                    "seed, points of a relaxed scan, given XYZ frames), run one crossing search "
                    "per start in parallel, and merge the converged points that are the same "
                    "crossing (RMSD after superposition, equivalent atoms exchangeable, and "
                    "energy). Writes seam_crossings.json/.csv/.xyz in OUT; running the same "
                    "command again continues.")
    add_geometry_argument(parser)
    parser.add_argument("--states", required=True, help="two states, e.g. S1,S2 or S1,T1")
    parser.add_argument("--search", default="auto", choices=list(SEARCHES),
                        help="crossing search of every start (default: auto)")
    s = parser.add_argument_group("starts (lengths in angstrom)")
    s.add_argument("--plane", type=int, default=6, metavar="N",
                   help="starts on a circle in the branching plane (default: 6; 0: none)")
    s.add_argument("--plane-radius", type=float, default=0.15, metavar="ANG",
                   help="radius of that circle (default: 0.15)")
    s.add_argument("--modes", type=int, default=2, metavar="N",
                   help="lowest normal modes at GEOM, each + and - (default: 2; costs 6N "
                        "gradients once; 0: none)")
    s.add_argument("--mode-amplitude", type=float, default=0.15, metavar="ANG",
                   help="largest atom displacement along a mode (default: 0.15)")
    s.add_argument("--mode-state", default=None, metavar="STATE",
                   help="state whose normal modes are used (default: the first of --states)")
    s.add_argument("--random", type=int, default=4, metavar="N",
                   help="random distortions (default: 4; 0: none)")
    s.add_argument("--random-rms", type=float, default=0.08, metavar="ANG",
                   help="RMS atom displacement of a random distortion (default: 0.08)")
    s.add_argument("--seed", type=int, default=20251, help="seed of the random distortions")
    s.add_argument("--scan", default=None, metavar="I,J[,K[,L]]",
                   help="also start from the points of a relaxed scan of this bond, angle or "
                        "dihedral (1-based atoms), with --scan-values and --scan-state")
    s.add_argument("--scan-values", default=None, metavar="V1,V2,..",
                   help="scan values: angstrom for bonds, degrees for angles")
    s.add_argument("--scan-state", default=None, metavar="STATE",
                   help="state minimized in the scan (default: the first of --states)")
    s.add_argument("--starts", nargs="+", default=[], metavar="FILE.xyz",
                   help="more starts: every frame of these XYZ files (e.g. a scan's trajectory.xyz)")
    m = parser.add_argument_group("what counts as one crossing")
    m.add_argument("--same-rmsd", type=float, default=0.1, metavar="ANG",
                   help="largest RMSD between two points of one crossing (default: 0.1)")
    m.add_argument("--same-energy", type=float, default=5e-4, metavar="EH",
                   help="largest energy difference between two points of one crossing, hartree "
                        "(default: 5e-4)")
    m.add_argument("--mirror-distinct", action="store_true",
                   help="count mirror images as different crossings (default: the same)")
    add_method_options(parser)
    add_run_options(parser, crossing=True)
    add_cluster_options(parser, threads=False)
    parser.set_defaults(handler=run)
    return parser


def _ints(text: str, what: str) -> tuple[int, ...]:
    try:
        values = tuple(int(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise InputError(f"{what} expects comma-separated atom numbers, got {text!r}") from None
    if not 2 <= len(values) <= 4 or min(values) < 1:
        raise InputError(f"{what} needs 2, 3 or 4 atom numbers starting at 1, got {text!r}")
    return tuple(v - 1 for v in values)


def _plan(args: argparse.Namespace, geometry, labels):
    from ..batch.seam import StartPlan, load_starts

    scan = None
    if args.scan is not None:
        if not args.scan_values:
            raise InputError("--scan needs --scan-values")
        try:
            values = tuple(float(x) for x in args.scan_values.split(",") if x.strip())
        except ValueError:
            raise InputError(f"--scan-values expects numbers, got {args.scan_values!r}") from None
        scan = (_ints(args.scan, "--scan"), values, args.scan_state or str(labels[0]))
    extra = load_starts(args.starts, geometry.charge, geometry.spin)
    bohr = ANGSTROM_IN_BOHR
    return StartPlan(plane=args.plane, plane_radius_bohr=args.plane_radius * bohr,
                     modes=args.modes, mode_amplitude_bohr=args.mode_amplitude * bohr,
                     mode_state=args.mode_state, random=args.random,
                     random_rms_bohr=args.random_rms * bohr, seed=args.seed, scan=scan,
                     extra=extra)


def run(args: argparse.Namespace) -> int:
    from ..batch.seam import MergeRule, explore_seam, seam_rows, CAUTION
    from ..analysis.vertical import limits_note
    from ..states import parse_states
    from ..tasks.common import prepare_method

    labels = parse_states(args.states, count=2)
    geometry = geometry_from_args(args)
    spec = prepare_method(method_from_args(args), labels)
    options = run_options_from_args(args)
    plan = _plan(args, geometry, labels)
    merge = MergeRule(rmsd_angstrom=args.same_rmsd, energy_eh=args.same_energy,
                      mirror=not args.mirror_distinct)
    out = Path(args.out) if args.out else Path(f"{Path(args.geometry).stem}_seams")

    def report(line: str) -> None:
        if not args.quiet:
            print(f"surfcross: {line}", file=sys.stderr, flush=True)

    try:
        result = explore_seam(geometry, [str(x) for x in labels], spec, out, plan=plan,
                              search=args.search, options=options, merge=merge,
                              cluster=cluster_from_args(args), report=report)
    except KeyboardInterrupt:  # a second Ctrl-C: the checkpoints written so far remain
        print(f"surfcross: stopped at once; run the same command again to continue in {out}",
              file=sys.stderr)
        return EXIT_STOPPED
    converged = sum(bool(s.get("converged")) for s in result.searches)
    print(f"seams {out}: {len(result.searches)} searches, {converged} converged, "
          f"{len(result.crossings)} distinct crossing(s) ({result.elapsed_s:.0f} s)")
    centre_state = plan.mode_state or str(labels[0])
    for row in seam_rows(result, centre_state):
        vs = "" if row["vs_centre_ev"] is None else f", {row['vs_centre_ev']:+.3f} eV vs {centre_state} at the start"
        what = ", ".join(str(row[k]) for k in ("kind", "topography", "paths") if row.get(k))
        print(f"  {row['crossing']}: E = {row['energy_eh']:.8f} Eh ({row['vs_lowest_ev']:+.3f} eV vs "
              f"lowest{vs}), gap {row['gap_ev']:.1e} eV, {what or 'not characterized'}; "
              f"{row['count']} start(s): {' '.join(row['starts'])}  [{row['folder']}]")
    failed = [s for s in result.searches if not s.get("converged")]
    for s in failed:
        print(f"  {s['name']}: {s.get('status')}" + (f" -- {s['message']}" if s.get("message") else ""))
    for note in result.notes:
        print(f"  note: {note}")
    print(f"  merged when RMSD <= {merge.rmsd_angstrom} angstrom and |dE| <= {merge.energy_eh} Eh")
    print(f"  note: {limits_note(spec)}")
    print(f"  caution: {CAUTION}")
    if result.interrupted:
        print(f"surfcross: interrupted; run the same command again to continue in {out}",
              file=sys.stderr)
        return EXIT_STOPPED
    return 0 if result.crossings else 1
