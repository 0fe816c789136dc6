"""Problems met when using the program as a photochemist would, each pinned by a test.

Subprocess cases run the installed ``surfcross`` program. The expectations are our own
command-line and run-record contracts (README: exit codes, run-directory files), plus two
facts of the trade named where used: a singlet/triplet pair crosses on a seam of dimension
N_int - 1 whatever the reference (common practice: states of different spin do not couple
without spin-orbit coupling), and the intersystem-crossing rate needs the spin-orbit
coupling (common practice).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

import surfcross as sc
from surfcross.errors import SCFNotConvergedError
from surfcross.io.progress import step_line
from surfcross.io.report import method_limits
from surfcross.io.run import RunDirectory
from surfcross.states import parse_states
from surfcross.tasks.common import method_warnings
from surfcross.units import BOHR_IN_ANGSTROM

pytestmark = pytest.mark.pyscf

# water near its experimental structure, angstrom (our own test input)
WATER = "3\nwater\nO 0.0 0.0 0.117\nH 0.0 0.757 -0.470\nH 0.0 -0.757 -0.470\n"
EXE = shutil.which("surfcross")
needs_exe = pytest.mark.skipif(EXE is None, reason="surfcross command not installed")
ENV = {**os.environ, "OMP_NUM_THREADS": "1"}


def _run(args, cwd, **kw):
    return subprocess.run([EXE, "-q", *args], cwd=cwd, capture_output=True, text=True, env=ENV,
                          timeout=300, **kw)


@pytest.fixture()
def water_dir(tmp_path):
    (tmp_path / "water.xyz").write_text(WATER)
    return tmp_path


@needs_exe
def test_hold_at_a_new_value_converges_there(water_dir):
    # before: the drive to the target fought the energy and every step was rejected (exit 1)
    out = _run(["relax", "water.xyz", "--state", "S0", "--hold", "1,2=1.05", "--out", "r"],
               water_dir)
    assert out.returncode == 0, out.stdout + out.stderr
    geom = sc.read_xyz(water_dir / "r" / "final.xyz")
    assert abs(geom.distance(0, 1) * BOHR_IN_ANGSTROM - 1.05) < 1e-4


@needs_exe
def test_penalty_search_on_one_spin_pair_writes_its_record(water_dir):
    # before: the characterization asked the penalty value for a branching plane (exit 2,
    # no result.json); water S2/S3 CIS/STO-3G cross near the start (our own scenario). Their
    # irreps (A2, A1; water has no A2 vibration) make the crossing one-dimensional, which
    # needs no branching plane: the penalty point is characterized by its gap direction
    out = _run(["cross", "water.xyz", "--states", "S2,S3", "--method", "cis", "--search",
                "penalty", "--gap-tol", "5e-4", "--out", "x"], water_dir)
    assert out.returncode == 0, out.stdout + out.stderr
    data = json.loads((water_dir / "x" / "result.json").read_text())
    assert data["converged"] and data["search"] == "penalty"
    assert data["pair_symmetry"]["can_mix"] is False
    assert data["branching"]["kind"] == "one-dimensional"
    assert (water_dir / "x" / "report.md").exists()


@needs_exe
@pytest.mark.parametrize("args", [
    ["relax", "water.xyz", "--state", "S0", "--trust", "-1"],
    ["cross", "water.xyz", "--states", "S1,S2", "--gap-tol", "0"],
    ["emission", "water.xyz", "--state", "S0"],
    ["relax", "water.xyz", "--state", "S0", "--hold", "1,5=1.0"],
])
def test_bad_input_leaves_no_empty_run_folder(water_dir, args):
    out = _run(args, water_dir)
    assert out.returncode == 2 and "error" in out.stderr
    assert sorted(p.name for p in water_dir.iterdir()) == ["water.xyz"]


@needs_exe
def test_bad_input_keeps_a_folder_the_user_made(water_dir):
    (water_dir / "mine").mkdir()
    out = _run(["relax", "water.xyz", "--state", "S0", "--trust", "-1", "--out", "mine"], water_dir)
    assert out.returncode == 2 and (water_dir / "mine").is_dir()


@needs_exe
def test_json_piped_into_a_reader_that_stops_early(water_dir):
    proc = subprocess.Popen([EXE, "states", "water.xyz", "--json"], cwd=water_dir, env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.readline()
    proc.stdout.close()  # like '| head -1'
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == 0 and "Traceback" not in err


@needs_exe
def test_step_limit_summary_says_why_and_how_to_continue(water_dir):
    out = _run(["relax", "water.xyz", "--state", "S0", "--max-steps", "1", "--out", "s"],
               water_dir)
    assert out.returncode == 1
    assert "reason: not converged within 1 iterations" in out.stdout
    assert "surfcross resume s --more-steps" in out.stdout


def test_reference_warning_only_for_pairs_of_one_spin():
    tda = sc.MethodSpec(method="tda", basis="6-31g")
    # S0/T1 is a spin crossing: its seam has the right dimension (common practice)
    assert not any("reference" in w for w in method_warnings(tda, parse_states("S0,T1", count=2)))
    assert any("reference" in w for w in method_warnings(tda, parse_states("S0,S1", count=2)))
    limits = method_limits({"method": "tda", "basis": "6-31g"}, ["S0", "T1"])
    assert not any("wrong dimensionality" in s for s in limits)
    # the rate of intersystem crossing needs the spin-orbit coupling (common practice)
    assert any("spin-orbit" in s for s in limits)
    assert not any("spin-orbit" in s for s in method_limits({"method": "tda"}, ["S1", "S2"]))


def test_engine_failure_mid_run_still_writes_the_record(tmp_path):
    geometry = sc.Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0.117], [0, 0.757, -0.47],
                                                           [0, -0.757, -0.47]])
    engine = sc.make_engine(sc.MethodSpec(method="cis", basis="sto-3g", roots=3))
    real_states, calls = engine.states, []

    def states(geom, *a, **k):  # the SCF fails at the third geometry
        calls.append(1)
        if len(calls) == 3:
            raise SCFNotConvergedError("the RHF reference did not converge (test)")
        return real_states(geom, *a, **k)

    engine.states = states
    run = RunDirectory.create(tmp_path / "r")
    res = sc.relax(geometry, "S0", engine.spec, engine=engine, run_dir=run, progress=False)
    assert not res.converged and res.status == "failed" and "did not converge" in res.message
    data = json.loads(run.result_json.read_text())
    for key in ("task", "converged", "iterations", "evaluations", "states", "energies_eh",
                "gap_ev", "final_xyz", "method", "search", "warnings"):
        assert key in data
    assert data["iterations"] == 1 and run.final_xyz.exists() and run.report_md.exists()
    # the geometry written is the last accepted one, not the failed trial
    assert np.allclose(sc.read_xyz(run.final_xyz).coords_bohr, res.geometry.coords_bohr, atol=1e-8)


def test_interrupt_names_the_folder_to_resume(tmp_path):
    from surfcross.tasks import run as task_run

    geometry = sc.Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0.117], [0, 0.757, -0.47],
                                                           [0, -0.757, -0.47]])
    run = RunDirectory.create(tmp_path / "r")

    def stop(record):
        if record.iteration == 1:
            task_run.request_stop()

    with pytest.raises(KeyboardInterrupt) as info:
        sc.relax(geometry, "S0", sc.MethodSpec(method="cis", basis="sto-3g"), run_dir=run,
                 progress=False, observers=[stop])
    assert Path(info.value.run_dir) == run.path


def test_states_task_writes_a_report(tmp_path):
    geometry = sc.Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0.117], [0, 0.757, -0.47],
                                                           [0, -0.757, -0.47]])
    run = RunDirectory.create(tmp_path / "v")
    res = sc.compute_states(geometry, sc.MethodSpec(method="cis", basis="sto-3g"),
                                  run_dir=run)
    text = run.report_md.read_text()
    assert "## Vertical states" in text and "## Limits of the method" in text
    # no crossing in a single-point task: the crossing-shape caveat does not belong here
    assert "wrong dimensionality" not in text
    s1 = res.data["vertical"]["states"][1]
    assert f"{s1['excitation_ev']:.3f}" in text


def test_progress_line_says_rejected_once():
    class Value:
        energies_eh = {"S0": -1.0}
        test_gradient = np.zeros((1, 3))
        gap_eh = None
        info: dict = {}
        tracking = None

    class Record:
        iteration, accepted, converged, trust_radius, elapsed_s = 2, False, False, 0.1, 0.0
        step_length = 0.01
        message = "rejected: value rose by 1e-3 Eh"
        value = Value()
        max_force = 0.0

    line = step_line(Record())
    assert "[rejected: value rose" in line and "rejected: rejected" not in line


def test_readme_python_snippet_runs(tmp_path):
    # the README's Python example, on the formaldehyde geometry of its job-file example
    import re
    import sys

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    snippet = re.search(r"```python\n(.*?)```", readme, re.S).group(1)
    xyz = re.search(r'xyz = """\n(.*?)"""', readme, re.S).group(1).strip().splitlines()
    (tmp_path / "formaldehyde.xyz").write_text(f"{len(xyz)}\nformaldehyde\n" + "\n".join(xyz) + "\n")
    out = subprocess.run([sys.executable, "-c", snippet], cwd=tmp_path, capture_output=True,
                         text=True, env=ENV, timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    assert " True " in out.stdout  # the S1/T1 crossing converged


@needs_exe
def test_seam_scan_of_a_same_spin_pair(water_dir):
    # before: each seam point (a penalty crossing of S2/S3) crashed in the characterization.
    # Water's S2 (A2) and S3 (A1), CIS/STO-3G, cross along the symmetric stretch at 115 and
    # 125 degrees (near 0.98 and 1.2 angstrom), but not at 100 or 110 degrees, where their
    # gap stays above 0.02 Eh from 0.95 to 1.65 angstrom (PySCF's symmetry-blocked roots,
    # computed for this test): a seam scan from 100 degrees has no crossing to find at its
    # first point, and a search there runs off toward dissociation.
    out = _run(["scan", "water.xyz", "--coordinate", "2,1,3", "--from", "115", "--to", "125",
                "--points", "2", "--along-seam", "S2,S3", "--method", "cis", "--out", "seam"],
               water_dir)
    assert out.returncode == 0, out.stdout + out.stderr
    assert "not characterized" not in out.stdout
    data = json.loads((water_dir / "seam" / "result.json").read_text())
    assert data["converged"]


@needs_exe
def test_job_stopped_at_a_step_limit_says_how_to_continue(water_dir):
    (water_dir / "job.toml").write_text(
        'output = "j"\n[molecule]\nfile = "water.xyz"\n[method]\nmethod = "cis"\n'
        '[[task]]\nname = "m"\nkind = "relax"\nstate = "S0"\nmax_iterations = 1\n'
        '[[task]]\nname = "v"\nkind = "states"\nfrom = "m"\n')
    out = _run(["run", "job.toml"], water_dir)
    assert out.returncode == 1
    assert "surfcross resume" in out.stdout and "--more-steps" in out.stdout
    assert "(it does not run v)" in out.stdout


def test_progress_line_pairs_each_state_with_its_own_root():
    from surfcross.tracking.records import TrackingRecord

    # a singlet cannot sit on a triplet root (common practice: spin is conserved)
    tracking = TrackingRecord(targets=("S1", "T1"), roots=("T1", "S1"),
                              info={"assignment": {"S1": "S1", "T1": "T1"}})

    class Value:
        energies_eh = {"T1": -1.1, "S1": -1.0}
        test_gradient = np.zeros((1, 3))
        gap_eh = 0.1
        info = {"roots": ["T1", "S1"]}

    Value.tracking = tracking

    class Record:
        iteration, accepted, converged, trust_radius, elapsed_s = 0, True, False, 0.1, 0.0
        step_length, message, max_force = 0.0, "start", 0.0
        value = Value()

    line = step_line(Record())
    assert "[following S1 on root S1, T1 on root T1]" in line


def test_resume_of_a_job_folder_names_the_task_folders(tmp_path):
    from surfcross.errors import CheckpointError

    for name in ("a", "b"):
        (tmp_path / "job" / name).mkdir(parents=True)
        (tmp_path / "job" / name / "checkpoint.h5").write_bytes(b"")
    (tmp_path / "job" / "summary.json").write_text("{}")
    with pytest.raises(CheckpointError, match="resume one of them") as info:
        sc.resume(tmp_path / "job")
    assert str(tmp_path / "job" / "a") in str(info.value)


@needs_exe
@pytest.mark.parametrize("args, expected", [
    (["--hold", "1,2,3,1"], "names an atom twice in '1,2,3,1'"),
    (["--freeze", "2,2"], "names an atom twice"),
    (["--hold", "1,2=-1"], "bond length must be positive"),
])
def test_constraint_input_errors_speak_in_the_users_numbering(water_dir, args, expected):
    out = _run(["relax", "water.xyz", "--state", "S0", *args], water_dir)
    assert out.returncode == 2 and expected in out.stderr


# pyramidal formaldehyde near its CIS/STO-3G S1 minimum, angstrom (our own scenario)
H2CO_S1 = ("4\nformaldehyde\nC -0.1193 0.0 -0.0609\nO 0.0339 0.0 1.2390\n"
           "H 0.1027 0.9292 -0.5742\nH 0.1027 -0.9292 -0.5742\n")


@needs_exe
@pytest.mark.slow
def test_ground_state_crossing_warns_once_about_the_reference(tmp_path):
    # the reference/response caveat (common practice for linear response) is stated, once
    (tmp_path / "h2co.xyz").write_text(H2CO_S1)
    out = _run(["cross", "h2co.xyz", "--states", "S0,S1", "--method", "cis", "--out", "x"],
               tmp_path)
    assert out.returncode in (0, 1), out.stderr
    data = json.loads((tmp_path / "x" / "result.json").read_text())
    assert sum("reference state" in w for w in data["warnings"]) == 1


@needs_exe
def test_path_between_different_molecules_leaves_no_folder(water_dir):
    (water_dir / "h2co.xyz").write_text(H2CO_S1)
    out = _run(["path", "water.xyz", "h2co.xyz"], water_dir)
    assert out.returncode == 2 and "same atoms" in out.stderr
    assert sorted(p.name for p in water_dir.iterdir()) == ["h2co.xyz", "water.xyz"]


@needs_exe
def test_rigid_scan_prints_the_energies(water_dir):
    # before: a rigid scan printed only the coordinate values, no energy at all
    out = _run(["scan", "water.xyz", "--coordinate", "1,2", "--from", "0.9", "--to", "1.1",
                "--points", "2", "--rigid", "--out", "s"], water_dir)
    assert out.returncode == 0, out.stderr
    data = json.loads((water_dir / "s" / "result.json").read_text())
    s1 = data["profile"]["connected_ev"]["S1"]
    assert f"{s1[1]:8.3f}" in out.stdout and "S0" in out.stdout.split("connected curves")[1]


@needs_exe
@pytest.mark.slow
def test_emission_from_a_state_that_is_not_the_lowest_warns(tmp_path):
    # formaldehyde, CIS/STO-3G: the followed T1 ends as root T2 at its minimum (our own
    # scenario); Kasha's rule (emission from the lowest state of a multiplicity; common
    # practice) makes that emission doubtful, and the run says so
    (tmp_path / "h2co.xyz").write_text(  # both H 0.06 angstrom out of plane
        "4\nformaldehyde\nC 0 0 0\nO 0 0 1.205\nH 0.06 0.9428641 -0.5876464\n"
        "H 0.06 -0.9428641 -0.5876464\n")
    out = _run(["emission", "h2co.xyz", "--state", "T1", "--method", "cis", "--out", "e"],
               tmp_path)
    assert out.returncode == 0, out.stderr
    data = json.loads((tmp_path / "e" / "result.json").read_text())
    root = parse_states(data["emission_root"], count=1)[0]
    kasha = any("Kasha" in w for w in data["warnings"])
    assert root.index > 1 and kasha
