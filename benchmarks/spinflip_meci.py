"""Ethylene S0/S1 minimum-energy conical intersection: spin-flip TDA against SA-CASSCF.

    OMP_NUM_THREADS=1 python benchmarks/spinflip_meci.py [--basis sto-3g] [--json out.json]

Needs the optional 'spinflip' extra (pyscf-forge). Both searches start from the start geometry
of tests/test_casscf_meci.py: spin-flip TDA (BHandHLYP, collinear kernel, DFT grid level 3)
with the projected search and the branching-plane update, SA-2-CASSCF(2,2) with the projected
search and its coupling vectors (the project's own SA-CASSCF intersection, as in that test),
both with the 'normal' thresholds. Printed side by side: evaluations, wall time, gap,
geometric descriptors (twist, out-of-plane angles of both carbons, C-C, the H-C-C angles of
the pyramidalized carbon), the RMSD between the two structures after alignment, <S^2> of the
spin-flip pair and the in-plane probe of the spin-flip point.

Expected shape (Minezawa and Gordon, J. Phys. Chem. A 113 (2009) 12749, recalled from memory):
twisted near 90 degrees with one CH2 strongly pyramidalized. Minimal basis, for comparison of
methods only: check any such point with a spin-adapted multireference method.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

from surfcross.engine.spinflip_solve import import_spin_flip  # noqa: E402
from surfcross.errors import InputError  # noqa: E402

try:
    import_spin_flip()
except InputError as exc:
    sys.exit(f"spinflip_meci: {exc}")

TESTS = Path(__file__).resolve().parents[1] / "tests"
sys.path.insert(0, str(TESTS))

from test_casscf_meci import _out_of_plane_degrees, _search, _twist_degrees  # noqa: E402
from test_spinflip_meci import spin_flip_search  # noqa: E402

from surfcross.analysis.probe import plane_from_value, probe_crossing  # noqa: E402
from surfcross.engine import MethodSpec, make_engine  # noqa: E402
from surfcross.geometry import rmsd  # noqa: E402
from surfcross.units import BOHR_IN_ANGSTROM  # noqa: E402


def descriptors(g) -> dict[str, float]:
    oop = [_out_of_plane_degrees(g, 0, 1, (2, 3)), _out_of_plane_degrees(g, 1, 0, (4, 5))]
    pyr = int(np.argmax(oop))  # the pyramidalized carbon and its hydrogens
    other, hyd = 1 - pyr, ((2, 3), (4, 5))[pyr]
    bends = sorted(g.angle(h, pyr, other) for h in hyd)
    return {"twist_deg": _twist_degrees(g), "oop_planar_deg": min(oop),
            "oop_pyramidal_deg": max(oop), "cc_angstrom": g.distance(0, 1) * BOHR_IN_ANGSTROM,
            "hcc_small_deg": bends[0], "hcc_large_deg": bends[1]}


def run_spin_flip(basis: str, grid: int):
    engine = make_engine(MethodSpec(method="sf-tda", basis=basis, roots=1, grid_level=grid))
    return engine, spin_flip_search(engine, "normal", 60)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--basis", default="sto-3g", help="basis of the spin-flip search")
    parser.add_argument("--grid", type=int, default=3, help="DFT grid level (spin flip)")
    parser.add_argument("--json", help="write the measurements to this file")
    args = parser.parse_args(argv)
    rows = {}
    start = time.perf_counter()
    engine, sf = run_spin_flip(args.basis, args.grid)
    sf_time = time.perf_counter() - start
    probe = probe_crossing(engine, sf.geometry, ("S0", "S1"), plane_from_value(sf.value)) \
        if sf.converged else None
    ev = sf.value.evaluation
    s2 = {lab: ev.state(lab).spin_square for lab in sf.value.info["roots"]}
    engine.close()
    start = time.perf_counter()
    cas_engine, cas = _search("coupling")
    cas_time = time.perf_counter() - start
    cas_engine.close()
    for name, res, wall in (("spin-flip TDA", sf, sf_time), ("SA-CASSCF", cas, cas_time)):
        rows[name] = {"converged": res.converged, "evaluations": res.evaluations,
                      "wall_s": wall, "gap_eh": res.gap_eh, **descriptors(res.geometry)}
    align = rmsd(sf.geometry.coords_bohr, cas.geometry.coords_bohr) * BOHR_IN_ANGSTROM
    print(f"ethylene S0/S1 MECI from one start (spin flip: {args.basis}, grid {args.grid})")
    keys = list(rows["spin-flip TDA"])
    print("| quantity | spin-flip TDA (BHandHLYP) | SA-CASSCF(2,2)/STO-3G |")
    print("|---|---|---|")
    for key in keys:
        a, b = rows["spin-flip TDA"][key], rows["SA-CASSCF"][key]
        fmt = (lambda v: f"{v:.3g}") if isinstance(a, float) else str
        print(f"| {key} | {fmt(a)} | {fmt(b)} |")
    print(f"RMSD between the two structures after alignment: {align:.3f} angstrom")
    print("spin-flip pair <S^2>: " + ", ".join(f"{k} {v:.3f}" for k, v in s2.items()))
    if probe is not None:
        print(f"in-plane probe of the spin-flip point: {probe.verdict} ({probe.message}; "
              f"opening orders {', '.join(f'{o:.2f}' for o in probe.opening_orders)})")
    if args.json:
        out = {"rows": rows, "rmsd_angstrom": align, "spin_squares": s2,
               "probe": None if probe is None else {"verdict": probe.verdict,
                                                    "orders": list(probe.opening_orders)}}
        Path(args.json).write_text(json.dumps(out, indent=2, default=float))
    return 0 if sf.converged and cas.converged else 1


if __name__ == "__main__":
    sys.exit(main())
