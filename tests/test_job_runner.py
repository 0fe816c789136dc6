"""The job runner: task order, geometries passed on with ``from``, roots, failures, folders.

Runs in-process on water with CIS/STO-3G (a second or two per job). Energies are checked
against PySCF called directly (reference library); the rest is the job-file contract written
in README.md ("Job files").
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from surfcross.errors import EngineError, InputError
from surfcross.geometry import read_xyz
from surfcross.jobs import parse_job
from surfcross.jobs import runner
from surfcross.jobs.runner import method_for, run_job, run_options_from_task
from pyscf_reference import solve_dense  # tests/pyscf_reference.py

pytestmark = pytest.mark.pyscf

MOLECULE = '''[molecule]
xyz = """
O 0.0  0.0     0.1173
H 0.0  0.7572 -0.4692
H 0.0 -0.7572 -0.4692
"""
[method]
method = "cis"
'''


def job(tasks: str, tmp_path, head: str = MOLECULE):
    return parse_job(head + tasks, source="test.toml", base_dir=tmp_path)


def summary(folder) -> dict:
    return json.loads((folder / "summary.json").read_text())


def test_optimizer_keys_become_run_options():
    options = run_options_from_task({
        "max_iterations": 7, "convergence": "tight", "coordinates": "cartesian",
        "trust_radius": 0.2, "max_force": 1e-4, "energy_change": 1e-7,
        "overlap_threshold": 0.4, "frozen_atoms": (1, 3)})
    assert options.max_iterations == 7 and options.convergence == "tight"
    assert options.coordinates == "cartesian" and options.trust_radius == 0.2
    assert options.convergence_overrides == {"max_force": 1e-4, "energy_change": 1e-7}
    assert options.min_overlap == 0.4
    # atoms are 1-based in job files and 0-based inside (README, "Job files")
    assert [c.atoms for c in options.constraints] == [(0,), (2,)]
    assert all(c.kind == "atom" for c in options.constraints)


def test_roots_cover_the_states_asked(tmp_path):
    j = job('[[task]]\nkind = "relax"\nstate = "S3"\n', tmp_path,
            head=MOLECULE + "roots = 1\n")
    # two roots above the highest state followed (the engine's rule, common practice)
    assert method_for(j, ["S3"]).roots == 5
    assert method_for(j, ["T2"]).triplet_roots == 4


def test_chain_passes_the_final_geometry_on(tmp_path):
    j = job('[[task]]\nname = "s0"\nkind = "relax"\nstate = "S0"\n'
            '[[task]]\nname = "there"\nkind = "states"\nfrom = "s0"\nshow = ["S3", "S1"]\n',
            tmp_path)
    out = run_job(j, out=tmp_path / "chain", progress=False)
    assert out.converged and [o.status for o in out.outcomes] == ["converged", "finished"]
    relaxed = read_xyz(tmp_path / "chain" / "s0" / "final.xyz")
    there = read_xyz(tmp_path / "chain" / "there" / "final.xyz")
    np.testing.assert_allclose(there.coords_bohr, relaxed.coords_bohr, atol=1e-8)
    rows = summary(tmp_path / "chain")["tasks"][1]["vertical"]
    assert [r["label"] for r in rows[:2]] == ["S3", "S1"]
    # reference library: RHF and CIS energies of PySCF at the relaxed geometry
    from pyscf import gto, scf, tdscf

    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(there.symbols, there.coords_bohr)],
                unit="Bohr", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    td = tdscf.rhf.TDA(mf)
    solve_dense(td, 3)  # PySCF's response matrix, diagonalized densely
    energies = json.loads((tmp_path / "chain" / "there" / "result.json").read_text())["energies_eh"]
    assert energies["S0"] == pytest.approx(mf.e_tot, abs=1e-8)
    assert [energies[k] for k in ("S1", "S2", "S3")] == pytest.approx(list(td.e_tot), abs=1e-6)


TASKS_WITH_A_SHORT_RELAX = (
    '[[task]]\nname = "short"\nkind = "relax"\nstate = "S1"\nmax_iterations = 1\n'
    '[[task]]\nname = "after"\nkind = "states"\nfrom = "short"\n'
    '[[task]]\nname = "other"\nkind = "states"\n')


def test_stops_at_the_first_task_that_does_not_converge(tmp_path):
    out = run_job(job(TASKS_WITH_A_SHORT_RELAX, tmp_path), out=tmp_path / "stop", progress=False)
    assert not out.converged
    assert [o.status for o in out.outcomes] == ["step limit reached", "not run", "not run"]
    assert summary(tmp_path / "stop")["converged"] is False
    assert (tmp_path / "stop" / "short" / "checkpoint.h5").is_file()


def test_keep_going_skips_only_the_tasks_that_start_from_it(tmp_path):
    out = run_job(job(TASKS_WITH_A_SHORT_RELAX, tmp_path), out=tmp_path / "go", keep_going=True,
                  progress=False)
    assert [o.status for o in out.outcomes] == ["step limit reached", "skipped", "finished"]
    assert "short" in out.outcomes[1].message


def test_engine_failure_is_recorded_and_stops_the_job(tmp_path, monkeypatch):
    def failing(step):
        raise EngineError("SCF did not converge (simulated)")

    monkeypatch.setitem(runner.TASK_RUNNERS, "states", failing)
    j = job('[[task]]\nname = "a"\nkind = "states"\n[[task]]\nname = "b"\nkind = "states"\n',
            tmp_path)
    out = run_job(j, out=tmp_path / "fail", progress=False)
    assert [o.status for o in out.outcomes] == ["failed", "not run"]
    assert "simulated" in summary(tmp_path / "fail")["tasks"][0]["message"]


def test_unavailable_kind_is_refused_before_anything_runs(tmp_path, monkeypatch):
    monkeypatch.setitem(runner.WORKFLOW_MODULES, "path", "no_such_workflow")
    j = job('[[task]]\nname = "a"\nkind = "states"\n'
            '[[task]]\nkind = "path"\ngeometries = ["a", "a"]\n', tmp_path)
    with pytest.raises(InputError, match="not available in this version"):
        run_job(j, out=tmp_path / "never", progress=False)
    assert not (tmp_path / "never").exists()


def test_labels_are_checked_against_the_molecule_first(tmp_path):
    head = MOLECULE.replace("[method]", "charge = 1\nspin = 1\n[method]") + "unrestricted = true\n"
    j = job('[[task]]\nkind = "relax"\nstate = "S1"\n', tmp_path, head=head)
    with pytest.raises(InputError, match="open-shell reference"):
        run_job(j, out=tmp_path / "never", progress=False)


def test_folders_are_never_reused(tmp_path):
    text = 'output = "named"\n' + MOLECULE + '[[task]]\nkind = "states"\n'
    j = parse_job(text, source="test.toml", base_dir=tmp_path)
    first = run_job(j, progress=False)
    second = run_job(j, progress=False)
    assert first.run_dir == tmp_path / "named" and second.run_dir == tmp_path / "named_2"
    with pytest.raises(InputError, match="already holds a job run"):
        run_job(j, out=tmp_path / "named", progress=False)
