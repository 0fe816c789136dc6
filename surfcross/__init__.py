"""surfcross: excited-state minima and minimum-energy crossing points on PySCF surfaces.

Typical use::

    import surfcross as sc
    mol = sc.read_xyz("formaldehyde.xyz")
    method = sc.MethodSpec(method="cis", basis="6-31g")
    s1 = sc.relax(mol, "S1", method)                      # excited-state minimum, tracked
    x = sc.find_crossing(s1.geometry, ["S1", "T1"], method)  # singlet/triplet crossing
    print(x.data["gap_ev"], x.data["branching"])
    ev, soc = sc.spin_orbit_at(mol, method)               # S/T spin-orbit couplings, cm^-1
    print(soc.total_cm("S1", "T2"))

Results from linear-response methods (CIS, TDA, TDDFT) near intersections with the ground
state have known qualitative errors; check important results with higher-level methods.
"""

from .errors import (BackTransformError, CheckpointError, ConvergenceError, EngineError,
                     InputError, StateTrackingError, SurfcrossError)
from .geometry import Geometry, kabsch_align, read_xyz, read_xyz_frames, rmsd, write_xyz
from .states import StateLabel, parse_state, parse_states
from .engine.base import Evaluation, MethodSpec
from .engine import make_engine
from .coords.constraints import Constraint
from .tasks import RunOptions, TaskResult, compute_states, find_crossing, relax, resume
from .analysis.spin_orbit import SpinOrbitCouplings, SpinOrbitPair
from .analysis.hopping import HopEstimate, hop_at_crossing, landau_zener_hop
from .engine.pyscf_soc import spin_orbit_at, spin_orbit_couplings

__version__ = "0.1.0"

__all__ = [
    "BackTransformError", "CheckpointError", "ConvergenceError", "EngineError", "InputError",
    "StateTrackingError", "SurfcrossError",
    "Geometry", "kabsch_align", "read_xyz", "read_xyz_frames", "rmsd", "write_xyz",
    "StateLabel", "parse_state", "parse_states",
    "Evaluation", "MethodSpec", "make_engine", "Constraint",
    "RunOptions", "TaskResult", "compute_states", "relax", "find_crossing", "resume",
    "SpinOrbitCouplings", "SpinOrbitPair", "spin_orbit_couplings", "spin_orbit_at",
    "HopEstimate", "landau_zener_hop", "hop_at_crossing",
]
