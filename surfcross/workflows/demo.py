"""The built-in demonstration: the main job of surfcross on formaldehyde in well under a minute.

Three stages, each in its own sub-run directory of one demo folder:

1. ``vertical`` -- the states at a slightly pyramidalized start (both hydrogens moved
   0.06 angstrom out of the molecular plane; a planar start would stay on the planar S1
   saddle point, which is a symmetry-constrained stationary point, not a minimum);
2. ``s1_minimum`` -- the first excited singlet minimized, followed by overlap (CIS/STO-3G
   gives a pyramidal structure with a stretched C-O bond);
3. ``s1_t1_crossing`` -- from that minimum, the minimum-energy crossing point of S1 (n-pi*)
   with the lowest triplet it meets, a candidate funnel for intersystem crossing.

Nothing here prints: :func:`demo_summary_lines` gives the text the command line shows.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..data import example_geometry
from ..engine.base import MethodSpec
from ..errors import InputError
from ..geometry import Geometry
from ..io.results import write_json_atomic
from ..io.run import RunDirectory
from ..tasks import RunOptions, TaskResult, compute_states, find_crossing, relax
from ..tasks.common import LIMITS_NOTE, prepare_method
from ..units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM, HARTREE_IN_EV

__all__ = ["DemoResult", "demo_start_geometry", "demo_method", "run_demo", "demo_summary_lines",
           "DEMO_FOLDER"]

log = logging.getLogger(__name__)

#: default name of the demo folder (then ``_2``, ``_3``, ... when taken)
DEMO_FOLDER = "surfcross-demo"
#: out-of-plane displacement of each hydrogen at the start (angstrom)
PYRAMIDALIZATION_ANGSTROM = 0.06
STAGES = ("vertical", "s1_minimum", "s1_t1_crossing")
CROSSING_STATES = ("S1", "T1")


def demo_method() -> MethodSpec:
    """CIS with the minimal STO-3G basis: quick, and good enough to show the workflow."""
    return MethodSpec(method="cis", basis="sto-3g")


def demo_start_geometry() -> Geometry:
    """Built-in formaldehyde (molecular plane yz) with both H moved +x out of the plane."""
    geometry = example_geometry("formaldehyde")
    coords = np.array(geometry.coords_bohr)
    hydrogens = [i for i, s in enumerate(geometry.symbols) if s == "H"]
    coords[hydrogens, 0] += PYRAMIDALIZATION_ANGSTROM * ANGSTROM_IN_BOHR
    return Geometry(geometry.symbols, coords, geometry.charge, geometry.spin,
                    "formaldehyde, hydrogens 0.06 angstrom out of plane (demo start)")


@dataclass(frozen=True, kw_only=True)
class DemoResult:
    """The three stages of the demo. ``crossing`` is None when the minimization failed."""

    run_dir: Path
    vertical: TaskResult
    relaxed: TaskResult
    crossing: TaskResult | None
    elapsed_s: float

    @property
    def converged(self) -> bool:
        return bool(self.relaxed.converged and self.crossing is not None
                    and self.crossing.converged)

    def to_dict(self) -> dict[str, Any]:
        stages = [("vertical", self.vertical), ("s1_minimum", self.relaxed),
                  ("s1_t1_crossing", self.crossing)]
        return {"task": "demo", "converged": self.converged,
                "elapsed_s": round(self.elapsed_s, 2),
                "stages": [_stage(name, r) for name, r in stages],
                "limits": LIMITS_NOTE}


def _stage(name: str, result: TaskResult | None) -> dict[str, Any]:
    if result is None:
        return {"name": name, "status": "not run", "converged": False, "run_dir": None}
    return {"name": name, "kind": result.task, "status": result.status,
            "converged": bool(result.converged), "iterations": result.iterations,
            "run_dir": None if result.run_dir is None else result.run_dir.name}


def _demo_folder(out: str | Path | None, parent: str | Path | None) -> RunDirectory:
    if out is None:
        return RunDirectory.create(None, input_name="", task=DEMO_FOLDER, parent=parent)
    path = Path(out)
    if path.is_dir() and any((path / s).exists() for s in (*STAGES, "summary.json")):
        raise InputError(f"{str(path)!r} already holds a demo run; choose another --out")
    return RunDirectory.create(path)


def run_demo(out: str | Path | None = None, *, parent: str | Path | None = None,
             progress: bool = True) -> DemoResult:
    """Run the demonstration and write its record (sub-run folders and summary.json).

    Parameters
    ----------
    out
        Demo folder; None: a new folder ``surfcross-demo`` (``_2``, ...) in ``parent``
        (default the current directory).
    progress
        Progress lines of the optimizations on the log.
    """
    start_time = time.perf_counter()
    folder = _demo_folder(out, parent)
    method, geometry = demo_method(), demo_start_geometry()
    log.info("demo: %s in %s", geometry.title, folder.path)
    vertical = compute_states(geometry, prepare_method(method, CROSSING_STATES),
                              run_dir=folder.child("vertical"), source="demo start")
    relaxed = relax(geometry, "S1", method, options=RunOptions(max_iterations=60),
                    run_dir=folder.child("s1_minimum"), progress=progress)
    crossing = None
    if relaxed.converged:
        crossing = find_crossing(relaxed.geometry, list(CROSSING_STATES), method,
                                 options=RunOptions(max_iterations=100),
                                 run_dir=folder.child("s1_t1_crossing"), progress=progress)
    result = DemoResult(run_dir=folder.path, vertical=vertical, relaxed=relaxed,
                        crossing=crossing, elapsed_s=time.perf_counter() - start_time)
    write_json_atomic(folder.path / "summary.json", result.to_dict())
    return result


def _co_and_pyramid(geometry: Geometry) -> tuple[float, float]:
    """r(C-O) in angstrom and the out-of-plane angle of O at C (degrees; 0 = planar)."""
    c, o = geometry.symbols.index("C"), geometry.symbols.index("O")
    h = [i for i, s in enumerate(geometry.symbols) if s == "H"][:2]
    p = geometry.coords_bohr
    normal = np.cross(p[h[0]] - p[c], p[h[1]] - p[c])
    bond = p[o] - p[c]
    sine = abs(float(np.dot(normal, bond))) / (np.linalg.norm(normal) * np.linalg.norm(bond))
    return geometry.distance(c, o) * BOHR_IN_ANGSTROM, math.degrees(math.asin(min(1.0, sine)))


def demo_summary_lines(result: DemoResult) -> list[str]:
    """The short summary the command line prints at the end of the demo."""
    v = result.vertical.evaluation
    lines = [f"surfcross demo: formaldehyde, CIS/STO-3G, {result.elapsed_s:.0f} s, "
             f"record in {result.run_dir}"]
    s1 = v.state("S1")
    f = "-" if s1.oscillator_strength is None else f"{s1.oscillator_strength:.4f}"
    lines.append(f"  1. vertical states ({result.vertical.run_dir.name}): S1 at "
                 f"{v.excitation_ev('S1'):.2f} eV (f = {f}), T1 at {v.excitation_ev('T1'):.2f} eV")
    r = result.relaxed
    e_s1 = r.energies_eh["S1"]
    r_co, oop = _co_and_pyramid(r.geometry)
    state = "converged" if r.converged else f"NOT converged ({r.status})"
    lines.append(f"  2. S1 minimum ({r.run_dir.name}): {state} in {r.iterations} steps; "
                 f"E(S1) = {e_s1:.6f} Eh, {(v.energy('S1') - e_s1) * HARTREE_IN_EV:.2f} eV "
                 f"below the vertical S1; r(CO) = {r_co:.3f} A, out-of-plane angle "
                 f"{oop:.1f} deg")
    x = result.crossing
    if x is None:
        lines.append("  3. S1/T1 crossing: not run (the S1 minimization did not converge; "
                     f"continue it with 'surfcross resume {r.run_dir}')")
    else:
        e_x = float(np.mean(list(x.energies_eh.values())))
        state = "converged" if x.converged else f"NOT converged ({x.status})"
        gap = "-" if x.gap_ev is None else f"{x.gap_ev / HARTREE_IN_EV:.1e} Eh"
        lines.append(f"  3. S1/T1 crossing ({x.run_dir.name}, {x.search} search): {state} in "
                     f"{x.iterations} steps; gap {gap}; {(e_x - e_s1) * HARTREE_IN_EV:+.2f} eV "
                     "from the S1 minimum (a candidate intersystem-crossing funnel; its rate "
                     "needs the spin-orbit coupling, which is not computed)")
    lines.append(f"  limits: {LIMITS_NOTE}")
    lines.append("  each folder holds result.json, report.md, final.xyz (and trajectory.xyz, "
                 "checkpoint.h5 for the optimizations)")
    return lines
