"""Analytic gradients of the PySCF response engine against central finite differences.

Source of the check: the standard central-difference derivative of the engine's own energies
(step 1e-3 bohr, error O(h^2) ~ 1e-7 Eh/bohr here), the same test PySCF uses for its own TD
gradients. Tolerances: 1e-5 Eh/bohr for Hartree-Fock based methods; 2e-4 Eh/bohr for DFT,
because PySCF's analytic DFT gradients leave out the response of the moving integration grid
(common practice to accept at coarse grids). Only a few Cartesian components are
differentiated, to keep the tests fast.
"""

from __future__ import annotations

import numpy as np
import pytest

from surfcross.engine.base import MethodSpec
from surfcross.engine.pyscf_response import PySCFResponseEngine
from surfcross.geometry import Geometry
from surfcross.states import parse_state

pytestmark = pytest.mark.pyscf

STEP = 1e-3  # bohr
# (atom, Cartesian axis) pairs that are differentiated
COMPONENTS = ((0, 2), (1, 1))

# a slightly asymmetric water (angstrom, our own scenario) so that no component vanishes by symmetry
WATER = Geometry.from_angstrom(["O", "H", "H"], [[0.0, 0.02, 0.1173], [0.0, 0.77, -0.47],
                                                 [0.01, -0.75, -0.46]])
NH2 = Geometry.from_angstrom(["N", "H", "H"], [[0.0, 0.0, 0.0], [0.0, 0.80, 0.62],
                                               [0.0, -0.82, 0.60]], spin=1)
CH2 = Geometry.from_angstrom(["C", "H", "H"], [[0.0, 0.0, 0.0], [0.0, 0.99, 0.55],
                                               [0.0, -0.98, 0.57]])


def _finite_difference(spec: MethodSpec, geometry: Geometry, label: str) -> np.ndarray:
    engine = PySCFResponseEngine(spec)
    out = []
    for atom, axis in COMPONENTS:
        values = []
        for sign in (1.0, -1.0):
            coords = np.array(geometry.coords_bohr)
            coords[atom, axis] += sign * STEP
            values.append(engine.states(geometry.with_coords(coords)).energy(label))
        out.append((values[0] - values[1]) / (2 * STEP))
    engine.close()
    return np.array(out)


def _analytic(spec: MethodSpec, geometry: Geometry, labels: list[str]) -> dict[str, np.ndarray]:
    engine = PySCFResponseEngine(spec)
    ev = engine.evaluate(geometry, gradients_for=labels)
    engine.close()
    return {lab: np.array([ev.gradient(lab)[a, x] for a, x in COMPONENTS]) for lab in labels}


CASES = [
    # id, spec, geometry, labels, tolerance (Eh/bohr)
    ("cis", MethodSpec(method="cis", roots=1), WATER, ["S0", "S1"], 1e-5),
    ("tdhf", MethodSpec(method="tdhf", roots=1), WATER, ["S1"], 1e-5),
    ("tda-pbe", MethodSpec(method="tda", xc="pbe", roots=1, grid_level=2), WATER, ["S1"], 2e-4),
    ("tddft-b3lyp", MethodSpec(method="tddft", xc="b3lyp", roots=1, grid_level=2), WATER,
     ["S0", "S1"], 2e-4),
    ("cis-triplet", MethodSpec(method="cis", roots=1, triplet_roots=1), WATER, ["T1"], 1e-5),
    ("uhf-doublet", MethodSpec(method="cis", roots=1), NH2, ["0", "1"], 1e-5),
    ("high-spin", MethodSpec(method="cis", roots=1, triplet_roots=1, triplets="high-spin"),
     CH2, ["T1"], 1e-5),
]


@pytest.mark.parametrize("spec, geometry, labels, tol", [c[1:] for c in CASES],
                         ids=[c[0] for c in CASES])
def test_analytic_gradient_matches_finite_difference(spec, geometry, labels, tol):
    analytic = _analytic(spec, geometry, labels)
    for label in labels:
        fd = _finite_difference(spec, geometry, label)
        err = np.abs(analytic[label] - fd).max()
        print(f"{label}: max |analytic - FD| = {err:.2e} Eh/bohr")  # shown with pytest -s
        assert err < tol, (label, analytic[label], fd)
        # the components are not trivially zero (else the check would prove nothing)
        assert np.abs(fd).max() > 1e-3


def test_gradient_of_a_stale_evaluation_is_refused():
    # contract of Engine.gradients (surfcross.engine.base): only the held evaluation
    from surfcross.errors import EngineError, InputError

    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=1))
    first = engine.states(WATER)
    second = engine.states(WATER.with_coords(WATER.coords_bohr * 1.01))
    with pytest.raises(EngineError, match="no longer"):
        engine.gradients(first, [parse_state("S1")])
    with pytest.raises(InputError, match="more roots"):
        engine.gradients(second, [parse_state("S9")])
    with pytest.raises(EngineError, match="coupling"):
        engine.gradients(second, [parse_state("S1")], couplings=[(parse_state("S0"),
                                                                 parse_state("S1"))])
    done = engine.gradients(second, ["S1"])
    assert done.gradient("S1").shape == (3, 3)
    engine.close()
