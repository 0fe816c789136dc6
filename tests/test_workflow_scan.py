"""Scans of one internal coordinate: relaxed, rigid and along a seam; the command line.

Sources of the expectations:

* a constrained minimization whose constraint sits at the unconstrained optimum's value has
  that optimum as its solution (definition of a constrained minimum; common practice), so
  the relaxed scan point at the optimized angle reproduces the unconstrained minimum;
* water HF/STO-3G minimum: 100.0 deg and -74.96590 Eh (NIST CCCBDB listing, recalled from
  memory; compared to 0.5 deg and 1e-4 Eh only);
* twisting ethylene on S0 with Hartree-Fock: the energy is highest at 90 deg, where the pi
  bond is broken, and symmetric about it (common knowledge of the trade);
* a seam point is a crossing: the gap of the pair must be below the penalty search's gap
  tolerance (1e-3 Eh, the project's stated default) with the coordinate held exactly;
* rigid moves are checked against the engine's energies at geometries built here by hand.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from surfcross.coords.constraints import Constraint
from surfcross.data import example_geometry
from surfcross.engine import make_engine
from surfcross.engine.base import MethodSpec
from surfcross.errors import InputError
from surfcross.tasks import RunOptions, relax
from surfcross.units import ANGSTROM_IN_BOHR, HARTREE_IN_EV
from surfcross.workflows import scan, scan_values
from surfcross.workflows.scan import coordinate_value, drive_coordinate

pytestmark = pytest.mark.pyscf

CIS = MethodSpec(method="cis", basis="sto-3g", roots=3)


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


def test_scan_values_include_both_ends():
    assert scan_values(0.0, 180.0, 5) == [0.0, 45.0, 90.0, 135.0, 180.0]
    with pytest.raises(InputError):
        scan_values(0.0, 1.0, 0)


@pytest.mark.parametrize("atoms,value", [((0, 1), 1.30), ((1, 0, 2), 110.0),
                                         ((2, 0, 1, 4), 60.0), ((2, 0, 1, 4), -150.0)])
def test_drive_sets_the_coordinate_and_moves_a_rigid_group(atoms, value):
    g = example_geometry("ethylene")
    moved = drive_coordinate(g, atoms, value)
    got = coordinate_value(moved, atoms)
    assert got == pytest.approx(value, abs=1e-6)
    # the C-H bonds are carried rigidly with their group
    for i, j in ((0, 2), (0, 3), (1, 4), (1, 5)):
        assert moved.distance(i, j) == pytest.approx(g.distance(i, j), abs=1e-9)


def test_relaxed_scan_at_optimum_reproduces_unconstrained_minimum():
    water = example_geometry("water")
    minimum = relax(water, "S0", CIS, options=RunOptions(convergence="tight"), progress=False)
    angle = minimum.geometry.angle(1, 0, 2)
    e_min = minimum.energies_eh["S0"]
    # NIST CCCBDB, HF/STO-3G water: 100.0 deg, -74.96590 Eh (recalled from memory)
    assert angle == pytest.approx(100.0, abs=0.5) and e_min == pytest.approx(-74.96590, abs=1e-4)
    result = scan(water, CIS, atoms=(1, 0, 2), values=[angle - 8.0, angle], state="S0",
                  options=RunOptions(convergence="tight"), progress=False)
    points = result.data["profile"]["points"]
    assert result.converged and [p["achieved"] for p in points] == pytest.approx([angle - 8.0, angle], abs=1e-5)
    assert points[1]["energy_eh"] == pytest.approx(e_min, abs=1e-5)
    assert points[0]["energy_eh"] > points[1]["energy_eh"]
    assert result.data["profile"]["minimum"]["value"] == pytest.approx(angle)


def test_rigid_scan_matches_engine_at_hand_built_geometries():
    water = example_geometry("water")
    values = [0.95, 1.05, 1.20]
    result = scan(water, CIS, atoms=(0, 1), values=values, relax_points=False, progress=False)
    profile = result.data["profile"]
    assert profile["mode"] == "rigid" and profile["achieved"] == pytest.approx(values, abs=1e-9)
    with make_engine(CIS) as engine:
        for value, point in zip(values, profile["points"]):
            xyz = water.coords_bohr.copy()
            bond = xyz[1] - xyz[0]
            xyz[1] = xyz[0] + bond / np.linalg.norm(bond) * value * ANGSTROM_IN_BOHR
            energies = engine.states(water.with_coords(xyz)).energies()
            for label, e in energies.items():
                assert point["adiabatic_energies_eh"][label] == pytest.approx(e, abs=1e-7)
    assert len(profile["connected_ev"]) == len(profile["adiabatic_ev"])


def test_scan_needs_something_to_minimize():
    with pytest.raises(InputError, match="state"):
        scan(example_geometry("water"), CIS, atoms=(0, 1), values=[1.0])
    with pytest.raises(InputError, match="2 \\(bond\\)"):
        scan(example_geometry("water"), CIS, atoms=(0,), values=[1.0], state="S0")


def test_seam_scan_point_is_a_crossing_with_the_twist_held():
    ethylene = example_geometry("ethylene")
    result = scan(ethylene, MethodSpec(method="tda", basis="sto-3g", roots=2),
                  atoms=(2, 0, 1, 4), values=[60.0], along_seam="S0,T1",
                  companions=[(3, 0, 1, 5)], options=RunOptions(convergence="loose"),
                  progress=False)
    assert result.converged and result.search == "penalty"
    point = result.data["profile"]["points"][0]
    assert point["achieved"] == pytest.approx(60.0, abs=1e-4)
    assert abs(point["gap_ev"]) < 1e-3 * HARTREE_IN_EV  # penalty gap tolerance 1e-3 Eh
    assert coordinate_value(result.geometry, (3, 0, 1, 5)) == pytest.approx(60.0, abs=1e-4)
    assert any("reference" in w for w in result.warnings)  # S0 crossings: wrong dimension


@pytest.mark.slow
def test_ethylene_twist_on_s0_peaks_at_90_degrees(tmp_path):
    (tmp_path / "ethylene.xyz").write_text(example_geometry("ethylene").to_xyz("ethylene"))
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run(
        program() + ["-q", "scan", "ethylene.xyz", "--state", "S0", "--coordinate", "3,1,2,5",
                     "--with", "4,1,2,6", "--from", "0", "--to", "180", "--points", "5",
                     "--method", "cis", "--roots", "2", "--converge", "loose", "--cold-start",
                     "--no-tracking", "--out", "twist"],
        cwd=tmp_path, env=env, text=True, capture_output=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    data = json.loads((tmp_path / "twist" / "result.json").read_text())
    profile = data["profile"]
    assert data["task"] == "scan" and profile["mode"] == "relaxed"
    assert profile["x"] == [0.0, 45.0, 90.0, 135.0, 180.0]
    e = profile["followed_ev"]
    # common knowledge: the twisting barrier of the pi bond peaks at 90 deg, symmetric about it
    assert profile["maximum"]["value"] == 90.0
    assert e[1] == pytest.approx(e[3], abs=0.01) and e[0] == pytest.approx(e[4], abs=0.01)
    assert e[2] > e[1] + 0.5
    assert [d for d in (tmp_path / "twist").iterdir() if d.name.startswith("point_")]
    assert (tmp_path / "twist" / "trajectory.xyz").read_text().count("step=") == 5
