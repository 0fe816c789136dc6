"""Wrong-state steps along paths where excited states change order.

A path is a list of geometries (here a bending scan of water, C2v throughout). The followed
state is named at the first point by its adiabatic label; at every later point it is assigned
either by wavefunction overlap with the previous point (surfcross's tracker, through
:class:`surfcross.objectives.single.SingleStateObjective`) or by adiabatic index (tracking
off). A step is *wrong* when the assigned root's dominant excitation belongs to another
irreducible representation than the followed state's at the first point: an outside criterion
from PySCF's point-group labels of the canonical orbitals (irrep of i -> a = product of the
orbital irreps; in PySCF's numbering for D2h and its subgroups the product is the XOR of the
irrep ids, common practice in PySCF's own code).

With CIS/STO-3G the A2 and A1 excited singlets of water (S2 and S3 near the equilibrium
angle) swap order between about 110 and 115 degrees (measured here; see the scan printed by
``--json``), so following either one across the scan tests root flipping.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from surfcross.engine import MethodSpec, make_engine
from surfcross.geometry import Geometry
from surfcross.objectives.single import SingleStateObjective
from surfcross.tasks import prepare_method
from surfcross.tracking import TrackingOptions

from bench_common import MeteredEngine, quiet, triatomic


@dataclass(frozen=True)
class TrackingPath:
    name: str
    geometries: tuple[Geometry, ...]
    state: str
    method: MethodSpec
    quick: bool = True


def orbital_irreps(geometry: Geometry, basis: str) -> tuple[list[int], str]:
    """PySCF irrep ids of the canonical RHF orbitals at ``geometry`` and the point group."""
    from pyscf import gto, scf, symm

    mol = gto.M(atom=[(s, c) for s, c in zip(geometry.symbols, geometry.coords_angstrom)],
                basis=basis, symmetry=True, verbose=0)
    mf = scf.RHF(mol).run()
    ids = symm.label_orb_symm(mol, mol.irrep_id, mol.symm_orb, mf.mo_coeff)
    return [int(i) for i in ids], mol.groupname


def excitation_irrep(evaluation: Any, root: str, orbitals: list[int], group: str) -> str:
    """Irrep name of the dominant single excitation of ``root``."""
    from pyscf import symm

    info = evaluation.state(root)
    if not info.transitions:
        return "A1"  # the reference determinant itself (totally symmetric, closed shell)
    t = max(info.transitions, key=lambda x: x.weight)
    return symm.irrep_id2name(group, orbitals[t.occupied] ^ orbitals[t.virtual])


def follow(path: TrackingPath, tracking: bool) -> dict[str, Any]:
    spec = prepare_method(path.method, [path.state])
    engine = MeteredEngine(make_engine(spec))
    objective = SingleStateObjective(engine, path.state,
                                     tracking=TrackingOptions(enabled=tracking))
    irreps, roots = [], []
    for geometry in path.geometries:
        value = objective.evaluate(geometry)
        objective.accept(value)
        root = str(value.info.get("root"))
        orbitals, group = orbital_irreps(geometry, spec.basis)
        irreps.append(excitation_irrep(value.evaluation, root, orbitals, group))
        roots.append(root)
    wrong = sum(1 for ir in irreps[1:] if ir != irreps[0])
    return {"roots": roots, "irreps": irreps, "wrong_steps": wrong, "steps": len(irreps) - 1}


def run_path(path: TrackingPath) -> dict[str, Any]:
    with quiet():
        try:
            on, off = follow(path, True), follow(path, False)
        except Exception as exc:  # reported, not raised
            return {"case": path.name, "error": str(exc)}
    return {"case": path.name, "state": path.state, "tracking": on, "adiabatic_index": off}


def water_bend(state: str, start_deg: float = 100.0, stop_deg: float = 130.0,
               step_deg: float = 2.0, quick: bool = True) -> TrackingPath:
    angles = np.arange(start_deg, stop_deg + 1e-9, step_deg)
    geoms = tuple(triatomic(("O", "H", "H"), 0.9578, float(a)) for a in angles)
    return TrackingPath(name=f"water bend {start_deg:.0f}->{stop_deg:.0f} deg, {state}",
                        geometries=geoms, state=state,
                        method=MethodSpec(method="cis", basis="sto-3g"), quick=quick)
