"""The installed ``surfcross`` program, run as a user would, on tiny molecules.

Every subcommand runs in a subprocess; the tests read result.json (or the JSON output) and
check the numbers against PySCF called directly at the geometry the run wrote (reference
library): energies agree, gradients vanish at minima, and the two states are degenerate at
crossing points.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from pyscf_reference import solve_dense  # tests/pyscf_reference.py

pytestmark = pytest.mark.pyscf

# water near its experimental structure, angstrom (our own test input)
WATER = "3\nwater\nO 0.0 0.0 0.1173\nH 0.0 0.7572 -0.4692\nH 0.0 -0.7572 -0.4692\n"
# methylene with an H-C-H angle of 115 degrees, r(C-H) 1.09 angstrom (our own test input)
METHYLENE = ("3\nmethylene\nC 0.0 0.0 0.0\nH 0.0 0.919 0.586\nH 0.0 -0.919 0.586\n")


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


def run(*args: str, cwd: Path, timeout: float = 300) -> subprocess.CompletedProcess:
    env = dict(os.environ, OMP_NUM_THREADS="1")
    return subprocess.run(program() + list(args), cwd=cwd, env=env, text=True,
                          capture_output=True, timeout=timeout)


def result(folder: Path) -> dict:
    return json.loads((folder / "result.json").read_text())


def atoms(xyz: Path) -> str:
    return "\n".join(xyz.read_text().splitlines()[2:])


def pyscf_cis(xyz: Path, nstates: int = 4, triplet: bool = False, gradient_of: int = 0):
    """RHF and CIS (TDA on RHF) with PySCF directly: (E_S0, excited totals, gradient)."""
    from pyscf import gto, scf, tdscf

    mol = gto.M(atom=atoms(xyz), basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    td = tdscf.rhf.TDA(mf)
    td.singlet = not triplet
    solve_dense(td, nstates)  # PySCF's response matrix, diagonalized densely
    grad = td.nuc_grad_method().kernel(state=gradient_of) if gradient_of else None
    return mf.e_tot, mf.e_tot + np.asarray(td.e), grad


@pytest.fixture(scope="module")
def work(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("e2e")
    (path / "water.xyz").write_text(WATER)
    (path / "methylene.xyz").write_text(METHYLENE)
    return path


@pytest.fixture(scope="module")
def water_s1(work) -> Path:
    """An uninterrupted S1 minimization of water (the reference for the resume tests)."""
    proc = run("-q", "relax", "water.xyz", "--state", "S1", "--method", "cis", "--out", "s1_full",
               cwd=work)
    assert proc.returncode == 0, proc.stderr
    return work / "s1_full"


def test_states_json_matches_pyscf(work):
    proc = run("states", "water.xyz", "--method", "cis", "--json", cwd=work)
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    e0, excited, _ = pyscf_cis(work / "water.xyz", nstates=3)
    energies = [s["energy_eh"] for s in data["states"]]
    # reference library: PySCF RHF + TDA at the same geometry
    assert energies[0] == pytest.approx(e0, abs=1e-8)
    assert energies[1:4] == pytest.approx(list(excited), abs=1e-6)


def test_relax_s1_ends_where_pyscf_gradient_vanishes(water_s1):
    data = result(water_s1)
    assert data["converged"] and data["task"] == "relax" and data["states"] == ["S1"]
    e0, excited, grad = pyscf_cis(water_s1 / "final.xyz", gradient_of=1)
    # reference library: PySCF's TDA energy and analytic gradient at final.xyz
    assert data["energies_eh"]["S1"] == pytest.approx(excited[0], abs=1e-6)
    assert np.abs(grad).max() < 1e-3
    for name in ("trajectory.xyz", "checkpoint.h5", "report.md", "final.xyz"):
        assert (water_s1 / name).is_file()


def test_cross_methylene_singlet_triplet_is_degenerate_in_pyscf(work):
    proc = run("-q", "cross", "methylene.xyz", "--states", "S0,T1", "--triplets", "high-spin",
               "--basis", "6-31g", "--method", "cis", "--out", "ch2_cross", cwd=work)
    assert proc.returncode == 0, proc.stderr
    data = result(work / "ch2_cross")
    assert data["search"] == "spin" and data["converged"]
    from pyscf import gto, scf

    geo = atoms(work / "ch2_cross" / "final.xyz")
    singlet = scf.RHF(gto.M(atom=geo, basis="6-31g", verbose=0)).run(conv_tol=1e-11).e_tot
    triplet = scf.UHF(gto.M(atom=geo, basis="6-31g", spin=2, verbose=0)).run(conv_tol=1e-11).e_tot
    # reference library: RHF singlet and high-spin UHF triplet from PySCF at final.xyz
    assert singlet == pytest.approx(triplet, abs=1e-5)
    assert data["energies_eh"]["S0"] == pytest.approx(singlet, abs=1e-6)


@pytest.mark.slow
def test_step_limit_then_resume_equals_uninterrupted_run(work, water_s1):
    first = run("-q", "relax", "water.xyz", "--state", "S1", "--method", "cis",
                "--max-steps", "3", "--out", "s1_cut", cwd=work)
    assert first.returncode == 1, first.stderr  # not converged: exit 1, run kept
    cut = work / "s1_cut"
    assert result(cut)["status"] == "step limit reached" and (cut / "checkpoint.h5").is_file()
    shutil.copytree(cut, work / "s1_cut_copy")
    # a step-limited run continues with a new budget
    again = run("-q", "resume", "s1_cut", "--more-steps", "60", cwd=work)
    assert again.returncode == 0, again.stderr
    resumed, full = result(cut), result(water_s1)
    assert resumed["converged"]
    # the uninterrupted run is the reference (our own contract: within 1e-6 Eh)
    assert resumed["energies_eh"]["S1"] == pytest.approx(
        full["energies_eh"]["S1"], abs=1e-6)
    assert resumed["iterations"] == full["iterations"]
    # a converged run is not continued
    done = run("-q", "resume", "s1_cut", cwd=work)
    assert done.returncode == 2 and "already converged" in done.stderr


def test_step_limited_run_resumes_with_its_original_budget(work):
    copy = work / "s1_cut_copy"
    if not copy.exists():
        pytest.skip("needs the step-limited run of the previous test")
    proc = run("-q", "resume", str(copy), cwd=work)
    data = result(copy)
    # 3 steps before plus the original limit of 3 steps again
    assert proc.returncode == 1 and data["status"] == "step limit reached"
    assert data["iterations"] == 6


def test_truncated_checkpoint_gives_a_clear_message(work):
    proc = run("-q", "relax", "water.xyz", "--state", "S0", "--method", "cis", "--max-steps", "2",
               "--out", "s0_cut", cwd=work)
    assert proc.returncode in (0, 1), proc.stderr
    ckpt = work / "s0_cut" / "checkpoint.h5"
    ckpt.write_bytes(ckpt.read_bytes()[: ckpt.stat().st_size // 2])
    (work / "s0_cut" / "result.json").unlink()
    proc = run("resume", "s0_cut", cwd=work)
    lines = proc.stderr.strip().splitlines()
    assert proc.returncode == 2 and len(lines) == 1 and "Traceback" not in proc.stderr
    assert "checkpoint" in lines[0] and "s0_cut" in lines[0]


def _default_signals() -> None:
    # a shell starts background jobs with SIGINT ignored, and children inherit that; a user's
    # Ctrl-C in a terminal arrives with the default disposition, which this restores
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.mark.slow
@pytest.mark.parametrize("signum,code", [(signal.SIGINT, 130), (signal.SIGTERM, -signal.SIGTERM)],
                         ids=["SIGINT", "SIGTERM"])
def test_interrupt_with_a_signal_then_resume(work, water_s1, signum, code):
    """Stop a run with Ctrl-C (SIGINT) or a queue's SIGTERM after a few steps, resume it."""
    env = dict(os.environ, OMP_NUM_THREADS="1")
    name = f"s1_{signal.Signals(signum).name.lower()}"
    proc = subprocess.Popen(program() + ["-q", "relax", "water.xyz", "--state", "S1",
                                         "--method", "cis", "--out", name],
                            cwd=work, env=env, text=True, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, preexec_fn=_default_signals)
    trajectory = work / name / "trajectory.xyz"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if trajectory.exists() and trajectory.read_text().count("step=") >= 3:
            break
        time.sleep(0.01)
    assert proc.poll() is None, "the run ended before it could be interrupted"
    proc.send_signal(signum)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == code and "Traceback" not in err
    if signum == signal.SIGINT:
        # Ctrl-C: the record is written at the last finished step, status 'interrupted',
        # with the command that continues it (our own contract)
        assert "surfcross resume" in err
        stopped = result(work / name)
        assert stopped["status"] == "interrupted" and not stopped["converged"]
        assert stopped["resume_command"] == f"surfcross resume {name}"
        assert "surfcross resume" in (work / name / "report.md").read_text()
    else:  # a queue's SIGTERM ends the process at once: only the checkpoint is there
        assert not (work / name / "result.json").exists()
    resumed = run("-q", "resume", name, cwd=work)
    assert resumed.returncode == 0, resumed.stderr
    # the uninterrupted run is the reference (our own contract: within 1e-6 Eh)
    assert result(work / name)["energies_eh"]["S1"] == pytest.approx(
        result(water_s1)["energies_eh"]["S1"], abs=1e-6)


def test_roots_below_the_state_asked_are_raised(work):
    """--roots 1 with --state S3: the roots are raised to cover S3 (documented behaviour)."""
    proc = run("-q", "relax", "water.xyz", "--state", "S3", "--roots", "1", "--method", "cis",
               "--max-steps", "1", "--out", "s3_roots", cwd=work)
    assert proc.returncode == 1, proc.stderr  # one step: not converged, but it ran
    data = result(work / "s3_roots")
    assert data["method"]["roots"] >= 3 and "S3" in data["energies_eh"]
    e0, excited, _ = pyscf_cis(work / "water.xyz", nstates=3)
    # reference library: S3 at the start geometry (step 0) is PySCF's third TDA root
    first = (work / "s3_roots" / "trajectory.xyz").read_text().splitlines()[1]
    assert float(first.split("E_S3=")[1].split()[0]) == pytest.approx(excited[2], abs=1e-6)


def test_run_job_file_chains_tasks(work):
    (work / "chain.toml").write_text(
        'title = "water chain"\n[molecule]\nfile = "water.xyz"\n[method]\nmethod = "cis"\n'
        '[[task]]\nname = "s0"\nkind = "relax"\nstate = "S0"\n'
        '[[task]]\nname = "at_s0"\nkind = "states"\nfrom = "s0"\nshow = ["S2"]\n')
    proc = run("-q", "run", "chain.toml", "--out", "chain", cwd=work)
    assert proc.returncode == 0, proc.stderr
    summary = json.loads((work / "chain" / "summary.json").read_text())
    assert [t["status"] for t in summary["tasks"]] == ["converged", "finished"]
    assert summary["tasks"][1]["vertical"][0]["label"] == "S2"
    # the states task ran at the relaxed geometry: its S0 equals PySCF's RHF energy there
    e0, _, _ = pyscf_cis(work / "chain" / "s0" / "final.xyz", nstates=2)
    assert result(work / "chain" / "at_s0")["energies_eh"]["S0"] == pytest.approx(e0, abs=1e-8)


def test_run_job_not_converged_gives_exit_1_and_keeps_folders(work):
    (work / "short.toml").write_text(
        '[molecule]\nfile = "water.xyz"\n[method]\nmethod = "cis"\n'
        '[[task]]\nname = "s1"\nkind = "relax"\nstate = "S1"\nmax_iterations = 1\n'
        '[[task]]\nname = "later"\nkind = "states"\n')
    proc = run("-q", "run", "short.toml", "--out", "short", cwd=work)
    assert proc.returncode == 1
    summary = json.loads((work / "short" / "summary.json").read_text())
    assert [t["status"] for t in summary["tasks"]] == ["step limit reached", "not run"]
    assert (work / "short" / "s1" / "checkpoint.h5").is_file()


@pytest.mark.slow
def test_readme_job_example_runs(work):
    """The job file shown in README.md ('Job files') runs as printed."""
    import re

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    block = re.search(r"## Job files.*?```toml\n(.*?)```", readme, re.S).group(1)
    (work / "readme_job.toml").write_text(block)
    proc = run("-q", "run", "readme_job.toml", "--out", "readme_job", cwd=work)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    summary = json.loads((work / "readme_job" / "summary.json").read_text())
    assert all(t["converged"] for t in summary["tasks"])
    crossing = [t for t in summary["tasks"] if t["kind"] == "cross"][0]
    assert crossing["gap_ev"] < 1e-3 * 27.2114  # gap below the stated tolerance, 1e-3 Eh


@pytest.mark.slow
def test_demo(work):
    proc = run("demo", "--out", "demo", cwd=work, timeout=600)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "limits:" in proc.stdout and "higher-level" in proc.stdout
    demo = work / "demo"
    summary = json.loads((demo / "summary.json").read_text())
    assert [s["name"] for s in summary["stages"]] == ["vertical", "s1_minimum", "s1_t1_crossing"]
    s1 = result(demo / "s1_minimum")
    _, excited, grad = pyscf_cis(demo / "s1_minimum" / "final.xyz", gradient_of=1)
    # reference library: PySCF TDA energy and gradient of S1 at the demo's S1 minimum
    assert s1["energies_eh"]["S1"] == pytest.approx(excited[0], abs=1e-6)
    assert np.abs(grad).max() < 1e-3
    # S1 of formaldehyde is pyramidal with a C-O bond near 1.3 angstrom (experiment about
    # 1.32 angstrom and ~34 degrees out of plane; recalled from memory, loose bounds)
    lines = (demo / "s1_minimum" / "final.xyz").read_text().splitlines()[2:]
    xyz = np.array([[float(v) for v in ln.split()[1:]] for ln in lines])
    assert 1.25 < np.linalg.norm(xyz[1] - xyz[0]) < 1.40
    cross = result(demo / "s1_t1_crossing")
    crossing_xyz = demo / "s1_t1_crossing" / "final.xyz"
    _, singlets, _ = pyscf_cis(crossing_xyz, nstates=3)
    _, triplets, _ = pyscf_cis(crossing_xyz, nstates=3, triplet=True)
    # reference library: at the crossing some singlet and some triplet root of PySCF coincide
    gap = np.abs(singlets[:, None] - triplets[None, :]).min()
    assert gap < 1e-5 and cross["converged"]
    assert min(abs(singlets - cross["energies_eh"]["S1"])) < 1e-6
