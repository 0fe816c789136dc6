"""The S0/S1 minimum-energy conical intersection of ethylene with spin-flip TDA (BHandHLYP).

Published reference (qualitative): spin-flip TDDFT with BHHLYP locates the twisted-
pyramidalized S0/S1 intersection of ethylene (C=C twisted near 90 degrees, one CH2 group
strongly pyramidalized), in agreement with MR-CI and MS-CASPT2 (Minezawa and Gordon,
J. Phys. Chem. A 113 (2009) 12749; recalled from memory, as is the shape, which also matches
the SA-CASSCF intersection of tests/test_casscf_meci.py). Linear response from a closed-shell
reference cannot give this point its conical shape; spin flip can, and the in-plane probe must
see the gap open linearly in both branching directions (definition of a conical intersection,
common practice).

This is the shorter suite version: STO-3G, DFT grid level 1 and the 'loose' thresholds, from
the same start as the SA-CASSCF test, judged by the same geometric windows as that test.
benchmarks/spinflip_meci.py runs the full comparison (grid level 3, 'normal' thresholds, the
SA-CASSCF search from the same start, descriptor by descriptor, and the probe).

Observed here (STO-3G, grid level 1, for the record, not asserted): 16 evaluations, twist 80
degrees, one carbon 8.5 and the other 67 degrees out of plane, C-C 1.417 angstrom, <S^2> of
S0/S1 0.19/0.04. These are spin-flip TDA numbers in a minimal basis; they need checking with a
spin-adapted multireference method before any chemical conclusion.
"""

import pytest

pytest.importorskip("pyscf.sftda", reason="needs the optional 'spinflip' extra (pyscf-forge)")

from test_casscf_meci import (_out_of_plane_degrees, _twist_degrees,  # noqa: E402
                              _twisted_pyramidalized_start)

from surfcross.analysis.probe import plane_from_value, probe_crossing  # noqa: E402
from surfcross.coords.cartesian import CartesianCoordinates  # noqa: E402
from surfcross.engine import MethodSpec, make_engine  # noqa: E402
from surfcross.objectives.projected import ProjectedSettings  # noqa: E402
from surfcross.objectives.searches import (make_crossing_objective,  # noqa: E402
                                           optimizer_settings_for)
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings  # noqa: E402
from surfcross.units import BOHR_IN_ANGSTROM  # noqa: E402

pytestmark = [pytest.mark.slow, pytest.mark.pyscf]

SPEC = MethodSpec(method="sf-tda", basis="sto-3g", roots=1, grid_level=1)


def spin_flip_search(engine, convergence: str, max_iterations: int):
    """S0/S1 projected search (branching-plane update) from the SA-CASSCF test's start
    (also used by benchmarks/spinflip_meci.py)."""
    objective = make_crossing_objective(engine, ("S0", "S1"), "projected",
                                        ProjectedSettings(plane="updated"))
    start = _twisted_pyramidalized_start()
    opt = Optimizer(objective, CartesianCoordinates(6, symbols=start.symbols),
                    settings=optimizer_settings_for(
                        objective.search, OptimizerSettings(max_iterations=max_iterations)),
                    convergence=ConvergenceSettings.preset(convergence))
    return opt.run(start)


def test_spin_flip_meci_is_twisted_pyramidalized_and_conical():
    with make_engine(SPEC) as engine:
        result = spin_flip_search(engine, "loose", 40)
        assert result.converged, result.message
        assert result.gap_eh < 1e-3
        g = result.geometry
        # the windows of the SA-CASSCF test, point by point
        assert 70.0 < _twist_degrees(g) < 110.0
        pyramid = sorted([_out_of_plane_degrees(g, 0, 1, (2, 3)),
                          _out_of_plane_degrees(g, 1, 0, (4, 5))])
        assert pyramid[0] < 20.0 and pyramid[1] > 45.0
        assert 1.30 < g.distance(0, 1) * BOHR_IN_ANGSTROM < 1.50
        # both crossing states are singlet-like spin-flip states; every state has its <S^2>
        ev = result.value.evaluation
        assert all(s.spin_square is not None for s in ev.states)
        assert all(ev.state(lab).spin_square < 0.5 for lab in result.value.info["roots"])
        probe = probe_crossing(engine, g, ("S0", "S1"), plane_from_value(result.value))
    assert probe.verdict == "conical", probe.message
    assert all(order < 1.5 for order in probe.opening_orders)
