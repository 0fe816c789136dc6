"""Command-line options shared by every subcommand that computes states."""

from __future__ import annotations

import argparse

from ..engine.base import METHODS, MethodSpec
from ..errors import InputError
from ..geometry import Geometry, read_xyz

__all__ = ["add_method_options", "method_from_args", "add_geometry_argument", "geometry_from_args"]


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
                   help="excited states computed (default: enough for the states asked + 2)")
    g.add_argument("--unrestricted", action="store_true", help="unrestricted reference")
    g.add_argument("--triplets", default="response", choices=["response", "high-spin"],
                   help="T1.. from linear response, or T1 as a separate high-spin SCF")
    g.add_argument("--active-space", default=None, metavar="NE,NO",
                   help="CASSCF active space: electrons,orbitals (method casscf)")
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


def method_from_args(args: argparse.Namespace, roots: int = 3, triplet_roots: int = 0) -> MethodSpec:
    """Build the MethodSpec; ``roots``/``triplet_roots`` are what the task needs at least."""
    return MethodSpec(
        method=args.method,
        xc=args.xc,
        basis=args.basis,
        roots=args.roots if args.roots is not None else roots,
        triplet_roots=triplet_roots,
        unrestricted=args.unrestricted,
        triplets=args.triplets,
        active_space=_active_space(args.active_space),
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
