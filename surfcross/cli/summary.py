"""Short end-of-task summaries printed by the subcommands (stdout)."""

from __future__ import annotations

from ..tasks.common import TaskResult
from ..units import HARTREE_IN_EV

__all__ = ["print_summary", "exit_code"]


def exit_code(result: TaskResult) -> int:
    return 0 if result.converged else 1


def print_summary(result: TaskResult) -> None:
    data = result.data
    status = "converged" if result.converged else f"NOT converged ({result.status})"
    print(f"{result.task}: {status} after {result.iterations} steps, "
          f"{result.evaluations} evaluations")
    if not result.converged and result.message:
        print(f"  reason: {result.message}")
        if result.status == "step limit reached" and result.run_dir is not None:
            print(f"  continue with: surfcross resume {result.run_dir} --more-steps N")
    roots = data.get("followed_roots") or {}
    for label, e in data.get("energies_eh", {}).items():
        root = roots.get(label, label)
        where = "" if root == label else f"  (adiabatic root {root} at the final geometry)"
        print(f"  E({label}) = {e:.8f} Eh{where}")
    if data.get("gap_ev") is not None:
        print(f"  gap = {data['gap_ev']:.4f} eV ({data['gap_ev'] / HARTREE_IN_EV:.2e} Eh)")
    branching = data.get("branching")
    if branching:
        if branching.get("kind") == "conical":
            print(f"  branching plane ({branching.get('h_source')}): pitch "
                  f"{branching.get('pitch'):.4f} Eh/bohr, asymmetry {branching.get('asymmetry'):.2f}, "
                  f"tilt {branching.get('tilt'):.2f} -> {branching.get('topography')}, "
                  f"{branching.get('paths')}")
        else:
            print(f"  crossing kind: {branching.get('kind')} (|x1| = "
                  f"{branching.get('x1_norm_eh_bohr'):.4f} Eh/bohr)")
    probe = data.get("probe")
    if probe:
        print(f"  in-plane probe: {probe.get('verdict')}")
    curvature = data.get("curvature")
    if curvature:
        imag = curvature.get("imaginary_cm") or []
        low = ", ".join(f"{f:.0f}" for f in curvature.get("frequencies_cm", [])[:3])
        print(f"  curvature: {'minimum' if not imag else f'{len(imag)} imaginary mode(s)'}"
              f" (lowest frequencies {low} cm^-1)")
    for w in result.warnings:
        print(f"  warning: {w}")
    if result.run_dir is not None:
        print(f"  run directory: {result.run_dir}")
