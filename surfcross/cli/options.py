"""Command-line options shared by every subcommand that computes states."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..engine.base import METHODS, MethodSpec
from ..errors import InputError
from ..geometry import Geometry, read_xyz

__all__ = ["add_method_options", "method_from_args", "add_geometry_argument", "geometry_from_args",
           "add_run_options", "run_options_from_args", "open_run_dir"]


def add_method_options(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("method")
    g.add_argument("--method", default="tda", choices=[m for m in METHODS],
                   help="electronic-structure method (default: tda)")
    g.add_argument("--xc", default="none",
                   help="exchange-correlation functional as PySCF names it, or 'none' for "
                        "Hartree-Fock (default: none)")
    g.add_argument("--basis", default="sto-3g", help="basis set (default: sto-3g)")
    g.add_argument("--charge", type=int, default=None, help="total charge (default: 0)")
    g.add_argument("--spin", type=int, default=None, help="2S, unpaired electrons (default: 0)")
    g.add_argument("--roots", type=int, default=None,
                   help="excited states computed; raised automatically to the highest state "
                        "asked + 2 (default: just that)")
    g.add_argument("--unrestricted", action="store_true", help="unrestricted reference")
    g.add_argument("--triplets", default="response", choices=["response", "high-spin"],
                   help="T1.. from linear response, or T1 as a separate high-spin SCF")
    g.add_argument("--active-space", default=None, metavar="NE,NO",
                   help="CASSCF active space: electrons,orbitals (method casscf)")
    g.add_argument("--active-orbitals", default=None, metavar="I,J,..",
                   help="CASSCF: 1-based numbers of the starting RHF orbitals to make active "
                        "(default: those around the HOMO/LUMO gap)")
    g.add_argument("--threads", type=int, default=1, help="threads for PySCF (default: 1)")
    g.add_argument("--memory", type=int, default=4000, help="PySCF memory in MB (default: 4000)")


def _active_space(text: str | None) -> tuple[int, int] | None:
    if text is None:
        return None
    try:
        ne, no = (int(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--active-space expects 'electrons,orbitals' such as 2,2; got {text!r}") from None
    return ne, no


def _active_orbitals(text: str | None) -> tuple[int, ...] | None:
    if text is None:
        return None
    try:
        picked = tuple(int(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise InputError(f"--active-orbitals expects 1-based orbital numbers such as 8,9; "
                         f"got {text!r}") from None
    if not picked or min(picked) < 1:
        raise InputError(f"--active-orbitals numbers start at 1; got {text!r}")
    return picked


def method_from_args(args: argparse.Namespace, roots: int = 3, triplet_roots: int = 0) -> MethodSpec:
    """Build the MethodSpec; ``roots``/``triplet_roots`` are what the task needs at least.

    For CASSCF ``--roots`` is the number of excited states in the state average, which changes
    the surfaces themselves; without it we average only the states a task asks for (S0 and S1
    for an S0/S1 search: SA-2), never more.
    """
    if args.roots is None and args.method == "casscf":
        roots = 1
    return MethodSpec(
        method=args.method,
        xc=args.xc,
        basis=args.basis,
        roots=args.roots if args.roots is not None else roots,
        triplet_roots=triplet_roots,
        unrestricted=args.unrestricted,
        triplets=args.triplets,
        active_space=_active_space(args.active_space),
        active_orbitals=_active_orbitals(getattr(args, "active_orbitals", None)),
        threads=args.threads,
        max_memory_mb=args.memory,
    )


def add_geometry_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("geometry", help="start geometry, XYZ file in angstrom")


def geometry_from_args(args: argparse.Namespace, path: str | None = None) -> Geometry:
    # charge and spin go to the reader, so an odd-electron molecule read with --spin 1
    # is not rejected as a singlet first
    charge = args.charge if args.charge is not None else 0
    spin = args.spin if args.spin is not None else 0
    return read_xyz(path or args.geometry, charge, spin)


# ---------------------------------------------------------------------- run options
def add_run_options(parser: argparse.ArgumentParser, *, crossing: bool = False) -> None:
    """Options of every optimization task (minimizations and crossing searches)."""
    g = parser.add_argument_group("optimization")
    g.add_argument("--out", default=None, metavar="DIR",
                   help="run directory (default: a new folder named after the input and task)")
    g.add_argument("--coords", default="auto", choices=["auto", "internal", "cartesian"],
                   help="coordinates: auto = redundant internals for minima, Cartesians for "
                        "crossing searches (default: auto)")
    g.add_argument("--converge", default="normal", choices=["loose", "normal", "tight"],
                   help="convergence thresholds (tight also sets the crossing gap to 1e-4 Eh)")
    g.add_argument("--max-force", type=float, default=None, metavar="EH_BOHR",
                   help="override the largest-force threshold (Eh/bohr)")
    g.add_argument("--max-steps", type=int, default=100, help="step limit (default: 100)")
    g.add_argument("--trust", type=float, default=None, metavar="BOHR",
                   help="starting trust radius (default: 0.3 for minima, 0.1 for crossings)")
    g.add_argument("--update", default="bfgs", choices=["bfgs", "sr1", "psb", "bofill"],
                   help="Hessian update (default: bfgs)")
    g.add_argument("--no-tracking", action="store_true",
                   help="follow the adiabatic root index instead of the state's character")
    g.add_argument("--strict-tracking", action="store_true",
                   help="stop with an error when a state cannot be matched confidently")
    g.add_argument("--cold-start", action="store_true",
                   help="no SCF/response guesses from the previous geometry")
    g.add_argument("--follow-instability", action="store_true",
                   help="when the SCF reference becomes unstable mid-run (internal stability "
                        "analysis), move to the lower SCF solution instead of only reporting it")
    g.add_argument("--freeze", default=None, metavar="I,J,..",
                   help="keep these atoms (1-based) fixed")
    if not crossing:
        g.add_argument("--hold", action="append", default=[], metavar="I,J[,K[,L]][=VALUE]",
                       help="hold a bond (2 atoms, angstrom), angle (3, degrees) or dihedral "
                            "(4, degrees) at its start value or drive it to VALUE; repeatable")
        g.add_argument("--check-curvature", action="store_true",
                       help="finite-difference Hessian and frequencies at the end (6N gradients)")
        g.add_argument("--follow-imaginary", action="store_true",
                       help="with --check-curvature: leave a saddle point along its imaginary "
                            "mode and minimize again")
    else:
        g.add_argument("--no-probe", action="store_true",
                       help="skip the in-plane probe and branching analysis at the end")


def _atoms(text: str, what: str) -> tuple[int, ...]:
    try:
        atoms = tuple(int(a) - 1 for a in text.split(",") if a.strip())
    except ValueError:
        raise InputError(f"{what} expects 1-based atom numbers separated by commas, got {text!r}") from None
    if not atoms or min(atoms) < 0:
        raise InputError(f"{what} expects atom numbers >= 1, got {text!r}")
    if len(set(atoms)) != len(atoms):
        raise InputError(f"{what} names an atom twice in {text!r}: give distinct atom numbers")
    return atoms


def _hold(text: str):
    from ..coords.constraints import Constraint
    from ..units import ANGSTROM_IN_BOHR

    atoms_text, _, value_text = text.partition("=")
    atoms = _atoms(atoms_text, "--hold")
    kind = {2: "bond", 3: "angle", 4: "dihedral"}.get(len(atoms))
    if kind is None:
        raise InputError(f"--hold takes 2, 3 or 4 atoms (bond, angle, dihedral), got {len(atoms)}")
    target = None
    if value_text.strip():
        try:
            target = float(value_text)
        except ValueError:
            raise InputError(f"--hold value must be a number, got {value_text!r}") from None
        if kind == "bond":
            if not target > 0:
                raise InputError(f"--hold bond length must be positive (angstrom), got {target:g}")
            target *= ANGSTROM_IN_BOHR
    return Constraint(kind, atoms, target)


def run_options_from_args(args: argparse.Namespace):
    """RunOptions from the parsed optimization options."""
    from ..coords.constraints import Constraint
    from ..tasks.common import RunOptions

    constraints = []
    if args.freeze:
        constraints += [Constraint("atom", (a,)) for a in _atoms(args.freeze, "--freeze")]
    constraints += [_hold(t) for t in getattr(args, "hold", [])]
    overrides = {"max_force": args.max_force} if args.max_force is not None else {}
    return RunOptions(
        coordinates=args.coords, convergence=args.converge, convergence_overrides=overrides,
        max_iterations=args.max_steps, trust_radius=args.trust, hessian_update=args.update,
        tracking=not args.no_tracking, strict_tracking=args.strict_tracking,
        constraints=tuple(constraints),
        curvature_check=getattr(args, "check_curvature", False),
        follow_imaginary=getattr(args, "follow_imaginary", False),
        warm_start=not args.cold_start, characterize=not getattr(args, "no_probe", False),
        follow_instability=getattr(args, "follow_instability", False))


def open_run_dir(args: argparse.Namespace, task: str):
    """The run directory of a task: --out, or a new folder named after the input and task."""
    from ..io.run import RunDirectory

    new = args.out is None or not Path(args.out).exists()
    run_dir = RunDirectory.create(args.out, input_name=args.geometry, task=task)
    if new:  # removed again if bad input stops the command before anything is written
        args.created_run_dir = run_dir.path
    return run_dir
