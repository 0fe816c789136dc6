"""Many molecules times one job: inputs, isolation of failures, Dask, lost workers, resume.

Molecules are diatomics and water with CIS/STO-3G (a few seconds per chain). The parallel runs
are checked against the serial run of the same chains (same code, one process: the results
must agree to the convergence thresholds); the energies themselves against PySCF called
directly (reference library).
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from surfcross.batch import ClusterSettings, collect_molecules, plan_workers, run_batch
from surfcross.batch.inputs import job_template, make_chains
from surfcross.errors import InputError
from surfcross.geometry import read_xyz
from surfcross.tasks.run import request_stop

JOB = """
title = "diatomics and water"
[molecule]
charge = 0
[method]
method = "cis"
basis = "sto-3g"

[[task]]
name = "fc"
kind = "states"

[[task]]
name = "s0"
kind = "relax"
state = "S0"
coordinates = "cartesian"
trust_radius = 0.05
"""

MOLECULES = {
    "lih": "2\nLiH\nLi 0 0 0\nH 0 0 1.90\n",
    "hf": "2\nHF\nF 0 0 0\nH 0 0 1.10\n",
    "water": "3\nwater, bent and stretched\nO 0.0 0.0 0.1173\nH 0.0 0.95 -0.4692\nH 0.0 -0.7572 -0.60\n",
}
#: no STO-3G basis for radon: the engine refuses the molecule when its chain runs
BROKEN = "2\nbroken\nRn 0 0 0\nRn 0 0 3.0\n"


def _inputs(folder: Path, broken: bool = True) -> tuple[Path, Path]:
    mols = folder / "mols"
    mols.mkdir(parents=True, exist_ok=True)
    for name, text in MOLECULES.items():
        (mols / f"{name}.xyz").write_text(text)
    if broken:
        (mols / "rn2.xyz").write_text(BROKEN)
    job = folder / "job.toml"
    job.write_text(JOB)
    return job, mols


def _final(batch: Path, molecule: str, task: str = "s0") -> tuple[float, np.ndarray]:
    result = json.loads((batch / molecule / task / "result.json").read_text())
    geom = read_xyz(batch / molecule / task / "final.xyz")
    return result["energies_eh"]["S0"], geom.coords_angstrom


def _assert_same(batch: Path, reference: Path, molecules=MOLECULES) -> None:
    for name in molecules:
        e, x = _final(batch, name)
        e_ref, x_ref = _final(reference, name)
        # the same chain run twice: equal to well inside the convergence thresholds
        assert e == pytest.approx(e_ref, abs=1e-7), name
        assert np.abs(x - x_ref).max() < 1e-3, name
        fc = json.loads((batch / name / "fc" / "result.json").read_text())["energies_eh"]
        fc_ref = json.loads((reference / name / "fc" / "result.json").read_text())["energies_eh"]
        assert fc == pytest.approx(fc_ref, abs=1e-8)


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    """The whole set run serially in this process: the reference of the parallel runs."""
    folder = tmp_path_factory.mktemp("serial")
    job, mols = _inputs(folder)
    result = run_batch(job, [mols], folder / "out", cluster=ClusterSettings(mode="serial", threads=1))
    return folder / "out", result


# ------------------------------------------------------------------------------ inputs
def test_molecules_from_files_folders_and_frames(tmp_path):
    job, mols = _inputs(tmp_path, broken=False)
    (tmp_path / "two.xyz").write_text(MOLECULES["lih"] + MOLECULES["lih"].replace("1.90", "1.60"))
    entries = collect_molecules([mols, tmp_path / "two.xyz", mols / "hf.xyz"])
    names = [e.name for e in entries]
    # a folder in name order, one chain per frame, a repeated stem gets a suffix
    assert names == ["hf", "lih", "water", "two_001", "two_002", "hf_2"]
    with pytest.raises(InputError, match="does not exist"):
        collect_molecules([tmp_path / "missing.xyz"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no .xyz files"):
        collect_molecules([tmp_path / "empty"])


def test_job_charge_applies_and_a_molecule_that_does_not_fit_is_reported_alone(tmp_path):
    job, mols = _inputs(tmp_path, broken=False)
    (mols / "li.xyz").write_text("1\nlithium atom\nLi 0 0 0\n")  # 3 electrons, singlet asked
    template = job_template({"method": {"method": "cis"}, "molecule": {"charge": 0},
                             "task": [{"kind": "states"}]}, source="inline")
    chains = {c.name: c for c in make_chains(template, collect_molecules([mols]))}
    assert chains["li"].job is None and "electrons" in chains["li"].error
    assert all(chains[n].job is not None for n in MOLECULES)
    assert chains["water"].job.molecule.natom == 3


def test_smiles_lists(tmp_path):
    pytest.importorskip("rdkit")
    (tmp_path / "set.smi").write_text("# candidates\nC=O formaldehyde\n[H][H]\n")
    entries = collect_molecules([tmp_path / "set.smi"])
    assert [e.name for e in entries] == ["formaldehyde", "set_003"]
    assert entries[0].source == {"smiles": "C=O"}
    template = job_template({"method": {"method": "cis"}, "task": [{"kind": "states"}]})
    chains = make_chains(template, entries)
    assert [c.job.molecule.natom for c in chains] == [4, 2]  # hydrogens added by RDKit


def test_without_dask_the_same_command_runs_serially(monkeypatch):
    from surfcross.batch import scheduler
    from surfcross.batch.chain import CHAIN_STOP
    from surfcross.tasks.run import STOP_REQUEST

    STOP_REQUEST.clear()  # an interrupt test earlier in this process may have left it set
    CHAIN_STOP.clear()
    monkeypatch.setattr(scheduler, "have_dask", lambda: False)
    with scheduler.Runner(ClusterSettings()) as runner:
        assert runner.mode == "serial" and runner.client is None
        assert runner.run([scheduler.Work("w", lambda threads=None: threads)]) == [runner.threads]
    with pytest.raises(InputError, match="unknown cluster"):
        ClusterSettings(mode="everywhere")


def test_workers_and_threads_share_the_cores():
    # common practice: fill the cores, one chain per worker, spare cores as threads
    assert plan_workers(8, 20) == (8, 1)
    assert plan_workers(8, 2) == (2, 4)
    assert plan_workers(8, 20, threads=2) == (4, 2)
    assert plan_workers(8, 20, workers=3) == (3, 2)
    assert plan_workers(1, 5) == (1, 1)


# ------------------------------------------------------------------------------ serial
def test_serial_set_isolates_the_broken_molecule(serial):
    out, result = serial
    status = {r.name: r for r in result.reports}
    assert {n: status[n].status for n in MOLECULES} == dict.fromkeys(MOLECULES, "finished")
    assert status["rn2"].status == "failed" and "Rn" in status["rn2"].reason
    summary = json.loads((out / "batch_summary.json").read_text())
    rows = {(r["molecule"], r["task"]): r for r in summary["rows"]}
    assert rows[("rn2", None)]["message"] == status["rn2"].reason
    assert rows[("lih", "s0")]["status"] == "converged"
    header = (out / "batch_summary.csv").read_text().splitlines()[0]
    assert header.startswith("molecule,chain_status,task,kind,status")
    assert "limits" not in summary and "linear response" in summary["note"]


@pytest.mark.pyscf
def test_serial_energies_match_pyscf(serial):
    pytest.importorskip("pyscf")
    from pyscf import gto, scf, tdscf

    out, _ = serial
    e, x = _final(out, "lih")
    mol = gto.M(atom=[("Li", x[0]), ("H", x[1])], basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-11)
    # reference library: PySCF RHF at the geometry the batch relaxed
    assert e == pytest.approx(mf.e_tot, abs=1e-7)
    fc = json.loads((out / "lih" / "fc" / "result.json").read_text())
    start = read_xyz(out / "lih" / "fc" / "final.xyz").coords_angstrom
    mf0 = scf.RHF(gto.M(atom=[("Li", start[0]), ("H", start[1])], basis="sto-3g",
                        unit="Angstrom", verbose=0)).run(conv_tol=1e-11)
    td = tdscf.TDA(mf0).run(nstates=3, conv_tol=1e-8)
    # reference library: PySCF CIS (TDA on HF) excitation energy of S1 at the start geometry
    assert fc["energies_eh"]["S1"] - fc["energies_eh"]["S0"] == pytest.approx(td.e[0], abs=1e-6)
    rows = json.loads((out / "batch_summary.json").read_text())["rows"]
    lih = next(r for r in rows if r["molecule"] == "lih" and r["task"] == "fc")
    assert lih["absorption_ev"] == pytest.approx(td.e[0] * 27.211386245988, abs=1e-4)


# ------------------------------------------------------------------------------ Dask
@pytest.mark.slow
def test_local_cluster_equals_serial(serial, tmp_path):
    pytest.importorskip("distributed")
    ref, _ = serial
    job, mols = _inputs(tmp_path)
    result = run_batch(job, [mols], tmp_path / "out",
                       cluster=ClusterSettings(mode="local", workers=2, threads=1))
    status = {r.name: r.status for r in result.reports}
    assert status == {**dict.fromkeys(MOLECULES, "finished"), "rn2": "failed"}
    _assert_same(tmp_path / "out", ref)


@pytest.mark.pyscf
@pytest.mark.slow
def test_killed_worker_chain_is_rerun(serial, tmp_path):
    distributed = pytest.importorskip("distributed")
    ref, _ = serial
    job, mols = _inputs(tmp_path, broken=False)
    slow = job.read_text().replace("trust_radius = 0.05", "trust_radius = 0.02")
    job.write_text(slow)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        killed: dict[str, int] = {}

        def kill_when_running() -> None:
            target = tmp_path / "out" / "water" / "s0" / "checkpoint.h5"
            deadline = time.time() + 120
            while time.time() < deadline and not killed:
                if target.exists():
                    for worker, keys in client.processing().items():
                        if any(str(k).startswith("water-") for k in keys):
                            pid = client.run(os.getpid, workers=[worker])[worker]
                            os.kill(pid, signal.SIGKILL)
                            killed[worker] = pid
                            break
                time.sleep(0.05)

        watcher = threading.Thread(target=kill_when_running)
        watcher.start()
        result = run_batch(job, [mols], tmp_path / "out",
                           cluster=ClusterSettings(mode=cluster.scheduler_address, threads=1))
        watcher.join()
    assert killed, "the water chain was never seen running"
    assert all(r.status == "finished" for r in result.reports)
    attempts = (tmp_path / "out" / "water" / "attempts.log").read_text().splitlines()
    assert len(attempts) >= 2  # started again on another (or the restarted) worker
    # the reference used trust 0.05: compare with a serial run of the same (slower) job
    serial_job = tmp_path / "serial"
    serial_job.mkdir()
    (serial_job / "job.toml").write_text(slow)
    run_batch(serial_job / "job.toml", [mols / "water.xyz"], serial_job / "out",
              cluster=ClusterSettings(mode="serial", threads=1))
    _assert_same(tmp_path / "out", serial_job / "out", molecules=["water"])


@pytest.mark.pyscf
def test_rerun_continues_an_interrupted_batch(serial, tmp_path, monkeypatch):
    ref, _ = serial
    job, mols = _inputs(tmp_path, broken=False)
    from surfcross.io import run as run_module

    original = run_module.RunDirectory.observers

    def observers(self, *, progress=True):
        found = original(self, progress=progress)
        if self.path.parent.name == "water" and self.path.name == "s0":
            def stop_at_step_two(record):  # a Ctrl-C arriving during step 2
                if record.iteration == 2:
                    request_stop()
            found.append(stop_at_step_two)
        return found

    monkeypatch.setattr(run_module.RunDirectory, "observers", observers)
    first = run_batch(job, [mols], tmp_path / "out", cluster=ClusterSettings(mode="serial", threads=1))
    status = {r.name: r.status for r in first.reports}
    assert first.interrupted and status == {"hf": "finished", "lih": "finished",
                                           "water": "interrupted"}
    # an interrupted run leaves its record with status "interrupted" (and its checkpoint)
    assert json.loads((tmp_path / "out" / "water" / "s0" / "result.json").read_text())["status"] == "interrupted"
    assert (tmp_path / "out" / "water" / "s0" / "checkpoint.h5").exists()
    monkeypatch.setattr(run_module.RunDirectory, "observers", original)

    again = run_batch(job, [mols], tmp_path / "out", cluster=ClusterSettings(mode="serial", threads=1))
    reports = {r.name: r for r in again.reports}
    assert not again.interrupted and all(r.status == "finished" for r in again.reports)
    assert reports["hf"].kept == ("fc", "s0") and reports["lih"].kept == ("fc", "s0")
    assert reports["water"].kept == ("fc",) and reports["water"].resumed == ("s0",)
    _assert_same(tmp_path / "out", ref)


def test_rerun_with_another_job_is_refused(serial, tmp_path):
    out, _ = serial
    other = tmp_path / "other.toml"
    other.write_text(JOB.replace('basis = "sto-3g"', 'basis = "6-31g"'))
    with pytest.raises(InputError, match="different job"):
        run_batch(other, [out.parent / "mols"], out, cluster=ClusterSettings(mode="serial"))


@pytest.mark.pyscf
def test_command_line(tmp_path, capsys):
    from surfcross.cli.main import main

    job, mols = _inputs(tmp_path, broken=False)
    (mols / "water.xyz").unlink()
    job.write_text(JOB.split("[[task]]\nname = \"s0\"")[0])  # vertical states only
    code = main(["-q", "batch", str(job), str(mols), "--out", str(tmp_path / "cli"),
                 "--cluster", "serial"])
    out = capsys.readouterr().out
    assert code == 0
    assert "2 finished" in out and "lih: finished" in out and "caution:" in out
    assert (tmp_path / "cli" / "batch_summary.csv").is_file()
    # bad input: one line, exit code 2
    code = main(["batch", str(job), str(tmp_path / "nothing.xyz"), "--cluster", "serial"])
    assert code == 2
    assert "does not exist" in capsys.readouterr().err
    code = main(["batch", str(job), str(mols), "--cluster", "bogus"])
    assert code == 2
