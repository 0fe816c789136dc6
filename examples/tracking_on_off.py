"""State following by overlap versus by root number, on the second excited singlet of ethylene.

Scenario (invented): a colleague on the photostability bench minimized an upper excited state
"by root number" and got a run that never settled. This script repeats that minimization of
S2 of ethylene (CIS/STO-3G) twice: once following the state by wavefunction overlap (the
default), once following whatever root is second in energy. Near the start the two lowest
excited singlets swap order: the overlap-followed run notices, keeps the state's character
and converges; the root-number run keeps switching between characters and stops at its step
limit.

    python examples/tracking_on_off.py [--out DIR]

CIS/STO-3G is a demonstration level; excited-state minima that matter need a larger basis
and a higher-level check.
"""

from __future__ import annotations

import argparse
import sys

import surfcross as sc
from surfcross.data import example_geometry
from surfcross.io.run import RunDirectory

#: step limit of the root-number run (it does not converge; a longer run shows nothing new)
STEP_LIMIT = 25


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default="tracking_on_off", help="folder for the two runs")
    args = parser.parse_args(argv)

    top = RunDirectory.create(args.out)
    method = sc.MethodSpec(method="cis", basis="sto-3g")
    mol = example_geometry("ethylene")
    print("ethylene S2, CIS/STO-3G")
    outcome = {}
    for tracking, name in ((True, "by_overlap"), (False, "by_root_number")):
        options = sc.RunOptions(tracking=tracking, max_iterations=STEP_LIMIT)
        run = sc.relax(mol, "S2", method, options=options, run_dir=top.child(name),
                       progress=False)
        outcome[name] = run
        state = "converged" if run.converged else f"NOT converged ({run.status})"
        print(f"  {name:15s} {state} after {run.iterations} steps, "
              f"E = {run.energies_eh['S2']:.6f} Eh")
        for note in run.warnings:
            if note.startswith("tracking:"):
                print(f"    {note}")
    print(f"  records: {top.path}")
    # the example succeeds when it shows the difference it is about
    shows_it = outcome["by_overlap"].converged and not outcome["by_root_number"].converged
    return 0 if shows_it else 1


if __name__ == "__main__":
    sys.exit(main())
