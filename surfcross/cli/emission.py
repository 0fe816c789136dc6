"""``surfcross emission GEOM.xyz --state S1``: absorption, emission and Stokes shift."""

from __future__ import annotations

import argparse

from ..tasks.common import LIMITS_NOTE

from ..states import parse_state
from ..tasks.common import prepare_method
from ..workflows import emission
from .options import (add_geometry_argument, add_method_options, add_run_options,
                      geometry_from_args, method_from_args, open_run_dir, run_options_from_args)
from .summary import exit_code

__all__ = ["add_parser", "run", "print_photophysics"]


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "emission", help="absorption, relaxed excited state, emission and Stokes shift",
        description="Vertical absorption at the Franck-Condon point, minimum of the chosen "
                    "excited state (followed by overlap, started from the given geometry), "
                    "vertical emission there, adiabatic energy and Stokes shift. Gas-phase "
                    "electronic energies: no vibronic band shape, no solvent.")
    add_geometry_argument(parser)
    parser.add_argument("--state", default="S1", help="emitting state to relax (default: S1)")
    parser.add_argument("--relax-ground", action="store_true",
                        help="relax the ground state first even when the start geometry passes "
                             "the force threshold (it is relaxed anyway when it does not)")
    parser.add_argument("--zero-point", action="store_true",
                        help="harmonic frequencies at both minima (6N gradients each) and the "
                             "zero-point corrected 0-0 energy")
    add_method_options(parser)
    add_run_options(parser)
    parser.set_defaults(handler=run)
    return parser


def _nm(value) -> str:
    return "-" if value is None else f"{value:.1f} nm"


def print_photophysics(data: dict) -> None:
    """The photophysical numbers of an emission result (stdout)."""
    f = data.get("emission_oscillator_strength")
    print(f"  absorption {data['absorption_ev']:.4f} eV ({_nm(data['absorption_nm'])}), "
          f"root {data['absorption_root']} at the Franck-Condon point")
    print(f"  emission   {data['emission_ev']:.4f} eV ({_nm(data['emission_nm'])}), "
          f"f = {'-' if f is None else f'{f:.4f}'}, root {data['emission_root']}")
    print(f"  adiabatic  {data['adiabatic_ev']:.4f} eV")
    print(f"  Stokes shift {data['stokes_shift_ev']:.4f} eV = {data['stokes_shift_cm']:.0f} cm^-1")
    if data.get("zero_zero_ev") is not None:
        print(f"  0-0 energy (zero-point corrected) {data['zero_zero_ev']:.4f} eV")
    print("  (vertical gas-phase gaps: compare with band maxima, the 0-0 energy with origins)")


def run(args: argparse.Namespace) -> int:
    label = parse_state(args.state)
    geometry = geometry_from_args(args)
    spec = prepare_method(method_from_args(args), [label], geometry,
                          strict_roots=args.roots is not None)
    options = run_options_from_args(args)
    run_dir = open_run_dir(args, "emission")
    result = emission(geometry, spec, state=label, options=options,
                      relax_ground=args.relax_ground, zero_point=args.zero_point,
                      run_dir=run_dir, progress=not args.quiet)
    status = "converged" if result.converged else f"NOT converged ({result.status})"
    print(f"emission: {status} after {result.iterations} steps, "
          f"{result.evaluations} evaluations")
    print_photophysics(result.data)
    for w in result.warnings:
        print(f"  warning: {w}")
    print(f"  note: {LIMITS_NOTE}")
    print(f"  run directory: {result.run_dir}")
    return exit_code(result)
