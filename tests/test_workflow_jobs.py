"""The emission, scan and path task kinds in one job file, chained, run by ``surfcross run``.

Checks that the job keys reach the workflows and that tasks chain from earlier results: the
pathway passes through the emission task's excited-state minimum, so its energies there must
equal the emission task's energies at its final geometry (the same geometry up to a rigid
motion, which the Kabsch alignment removes; Kabsch, Acta Cryst. A 1976, 32, 922). The
formaldehyde physics (pyramidal S1, emission below absorption; Henderson & Muramoto 1965,
Clouthier & Ramsay 1983) is checked again on the job's emission task.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import pytest

from surfcross.data import example_geometry
from surfcross.units import HARTREE_IN_EV

pytestmark = [pytest.mark.pyscf, pytest.mark.slow]

JOB = """
title = "formaldehyde photophysics"
[molecule]
file = "h2co.xyz"
[method]
method = "cis"
basis = "sto-3g"
[[task]]
name = "em"
kind = "emission"
state = "S1"
convergence = "loose"
relax_ground = true
[[task]]
name = "stretch"
kind = "scan"
from = "em"
atoms = [1, 2]
values = [1.30, 1.34]
state = "S1"
convergence = "loose"
[[task]]
name = "line"
kind = "path"
geometries = ["h2co.xyz", "em", "stretch"]
images = 1
mass_weighted = true
"""


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    work = tmp_path_factory.mktemp("job")
    g = example_geometry("formaldehyde")
    xyz = g.coords_bohr.copy()
    xyz[0, 0] += 0.1  # carbon out of plane, so S1 can leave the planar saddle
    (work / "h2co.xyz").write_text(g.with_coords(xyz).to_xyz("formaldehyde, pyramidalized"))
    (work / "job.toml").write_text(JOB)
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run(program() + ["-q", "run", "job.toml", "--out", "out"], cwd=work,
                          env=env, text=True, capture_output=True, timeout=600)
    assert proc.returncode == 0, proc.stderr + proc.stdout
    out = work / "out"
    return {name: json.loads((out / name / "result.json").read_text())
            for name in ("em", "stretch", "line")}


def test_emission_task_keys_reach_the_workflow(job):
    em = job["em"]
    assert em["task"] == "emission" and em["converged"]
    assert em["ground_relaxed"] is True
    assert any("as asked" in w for w in em["warnings"])
    assert em["emission_ev"] < em["absorption_ev"]  # Clouthier & Ramsay 1983


def test_scan_task_chains_from_emission(job):
    scan = job["stretch"]
    assert scan["task"] == "scan" and scan["converged"] and scan["states"] == ["S1"]
    assert scan["profile"]["achieved"] == pytest.approx([1.30, 1.34], abs=1e-5)
    # the S1 minimum's C=O (about 1.31 A) lies between the two values: both points are above
    # the emission task's minimum energy
    e_min = job["em"]["excited_minimum_eh"]
    assert all(p["energy_eh"] > e_min - 1e-6 for p in scan["profile"]["points"])


def test_path_task_passes_through_earlier_results(job):
    profile = job["line"]["profile"]
    assert profile["given_points"] == [0, 2, 4]
    assert profile["x_unit"] == "amu^1/2 angstrom"
    em = job["em"]["adiabatic_energies_eh"]
    base = profile["reference_eh"]
    for label, curve in profile["adiabatic_ev"].items():
        assert curve[2] == pytest.approx((em[label] - base) * HARTREE_IN_EV, abs=1e-5)
