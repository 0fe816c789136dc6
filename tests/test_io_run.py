"""Run directory: naming, observers (trajectory, checkpoint, progress), result.json, resume.

Step records are synthetic (our own scenario, built in test_io_checkpoint). Trajectories are
checked by reading them back with the XYZ reader, result.json with the standard json module.
"""

import json
import logging
import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from test_io_checkpoint import TASK, WATER, make_record  # noqa: E402

from surfcross.engine.base import MethodSpec  # noqa: E402
from surfcross.errors import InputError  # noqa: E402
from surfcross.geometry import read_xyz, read_xyz_frames  # noqa: E402
from surfcross.io.progress import settings_lines, step_line  # noqa: E402
from surfcross.io.results import RESULT_KEYS, dumps, result_dict, to_jsonable  # noqa: E402
from surfcross.io.run import RunDirectory, default_run_name  # noqa: E402
from surfcross.io.trajectory import parse_comment  # noqa: E402
from surfcross.optimize.records import OptimizationResult, Status  # noqa: E402
from surfcross.units import HARTREE_IN_EV  # noqa: E402

# the keys listed for result.json in ARCHITECTURE.md ("Contracts")
CONTRACT_KEYS = {"task", "converged", "iterations", "evaluations", "states", "energies_eh",
                 "adiabatic_energies_eh", "followed_roots", "gap_ev", "final_xyz", "method",
                 "search", "warnings"}


def test_default_names_never_overwrite(tmp_path):
    assert default_run_name("molecules/water.xyz", "relax") == "water_relax"
    assert default_run_name("my mol.v2.xyz", "cross") == "my_mol.v2_cross"
    a = RunDirectory.create(None, input_name="in/water.xyz", task="relax", parent=tmp_path)
    b = RunDirectory.create(None, input_name="water.xyz", task="relax", parent=tmp_path)
    c = RunDirectory.create(None, input_name="water.xyz", task="relax", parent=tmp_path)
    assert [p.path.name for p in (a, b, c)] == ["water_relax", "water_relax_2", "water_relax_3"]
    assert all(p.path.is_dir() for p in (a, b, c))


def test_explicit_out(tmp_path):
    run = RunDirectory.create(tmp_path / "deep" / "out")
    assert run.path.is_dir()
    run.save_task(TASK)
    with pytest.raises(InputError, match="already holds a run.*surfcross resume"):
        RunDirectory.create(tmp_path / "deep" / "out")
    (tmp_path / "afile").write_text("x")
    with pytest.raises(InputError, match="is a file"):
        RunDirectory.create(tmp_path / "afile")
    assert run.pyscf_log.parent == run.path


def _run_steps(run, n=3):
    observers = run.observers()
    records = [make_record(0)]
    records += [make_record(i, shift=0.01 * i) for i in range(1, n)]
    records.insert(2, make_record(2, shift=0.5, accepted=False))
    for rec in records:
        for obs in observers:
            obs(rec)
    return [r for r in records if r.accepted]


def test_trajectory_frames_parse_back(tmp_path):
    run = RunDirectory.create(tmp_path / "r")
    run.save_task(TASK)
    accepted = _run_steps(run, 4)
    frames = read_xyz_frames(run.trajectory_xyz)
    assert len(frames) == 4  # the rejected trial is not written
    for frame, rec in zip(frames, accepted):
        np.testing.assert_allclose(frame.coords_bohr, rec.geometry.coords_bohr, atol=1e-9)
        fields = parse_comment(frame.title)
        assert fields["step"] == rec.iteration
        assert fields["E_S1"] == pytest.approx(rec.value.energies_eh["S1"], abs=1e-10)
        assert fields["max_force"] == pytest.approx(rec.max_force, rel=1e-3)


def test_gap_in_comment(tmp_path):
    from dataclasses import replace

    from surfcross.io.trajectory import frame_comment
    rec = make_record(1)
    rec = replace(rec, value=replace(rec.value, gap_eh=0.01))
    # eV per hartree from CODATA via surfcross.units (checked in test_units)
    assert parse_comment(frame_comment(rec))["gap_ev"] == pytest.approx(0.01 * HARTREE_IN_EV, abs=1e-6)


def test_progress_lines_and_header(tmp_path, caplog):
    caplog.set_level(logging.INFO, logger="surfcross.progress")
    run = RunDirectory.create(tmp_path / "r")
    settings = {"task": "relax", "optimizer": {"max_steps": 50, "trust_radius": 0.3},
                "method": MethodSpec(method="cis").to_dict()}
    run.save_task(TASK, settings)
    _run_steps(run, 3)
    # every setting goes to settings.txt; the log (the terminal) gets one line naming it
    text = run.settings_txt.read_text()
    for name in ("optimizer.max_steps", "optimizer.trust_radius", "method.basis", "method.roots"):
        assert name in text and name not in caplog.text
    assert "settings.txt" in caplog.text
    lines = [r.getMessage() for r in caplog.records if r.getMessage().startswith("step")]
    assert len(lines) == 4
    assert "[following S1 on root S1]" in lines[0]
    assert "[rejected: energy rose]" in lines[2]
    assert "E(S1) -74.502000000" in lines[1]
    assert "trust 0.300" in lines[1]


def test_root_change_is_reported():
    first = make_record(0)
    moved = make_record(1, roots=("S2",))
    assert "[root change: S1 on root S2]" in step_line(moved, ("S1",))
    assert "root" not in step_line(make_record(1), ("S1",)).split("s  ")[-1]
    assert settings_lines({"a": {"b": [1, 2]}, "c": None})[1:] == ["  a.b  1, 2", "  c    (none)"]
    assert "converged" not in step_line(first)


def _optimization_result(history):
    last = history[-1]
    return OptimizationResult(status=Status.CONVERGED, message="all criteria met",
                              geometry=last.geometry, value=last.value, iterations=last.iteration,
                              evaluations=last.evaluations, history=tuple(history),
                              warnings=("example warning",))


def test_finish_writes_contract_files(tmp_path):
    run = RunDirectory.create(tmp_path / "r")
    run.save_task(TASK)
    history = _run_steps(run, 3)
    history.append(make_record(3, shift=0.03, roots=("S2",)))
    result = _optimization_result(history)
    data = result_dict(task="relax", result=result, states=["S1"], method=MethodSpec(method="cis"))
    written = run.finish(data, result.geometry, criteria=history[-1].criteria,
                         reorderings=["step 3: S1 now root S2 (was S1)"])
    loaded = json.loads(run.result_json.read_text())
    assert CONTRACT_KEYS <= set(loaded) and set(RESULT_KEYS) == CONTRACT_KEYS
    assert loaded == json.loads(dumps(written))
    assert loaded["final_xyz"] == "final.xyz" and loaded["converged"] is True
    # the followed S1 sits on root S2 at the last step: its energy is S2's, under its own name
    assert loaded["energies_eh"] == {"S1": -74.403}
    assert loaded["adiabatic_energies_eh"] == {"S0": -74.957, "S1": -74.506, "S2": -74.403}
    assert loaded["followed_roots"] == {"S1": "S2"}
    assert loaded["gap_ev"] is None and loaded["search"] is None
    assert loaded["method"]["method"] == "cis"
    assert any("state reordering at step 3" in w for w in loaded["warnings"])
    final = read_xyz(run.final_xyz)
    np.testing.assert_allclose(final.coords_bohr, result.geometry.coords_bohr, atol=1e-9)
    report = run.report_md.read_text()
    assert "max force" in report and "step 3: S1 now root S2" in report
    assert run.checkpoint_h5.exists()


def test_result_requires_contract_keys(tmp_path):
    run = RunDirectory.create(tmp_path / "r")
    with pytest.raises(ValueError, match="energies_eh"):
        run.finish({"task": "relax", "converged": True, "iterations": 1, "evaluations": 1,
                    "states": ["S1"], "method": {}}, WATER)


def test_json_conversion():
    from surfcross.states import parse_state
    data = {"a": np.arange(3), "b": np.float64(1.5), "c": float("nan"), (parse_state("S1"), "S2"): 1,
            "d": Status.CONVERGED, "e": {parse_state("T1"): np.int32(4)}, "f": (1, 2), "g": WATER}
    out = json.loads(json.dumps(to_jsonable(data), allow_nan=False))  # standard-library JSON
    assert out["a"] == [0, 1, 2] and out["b"] == 1.5 and out["c"] is None
    assert out["S1-S2"] == 1 and out["d"] == "converged" and out["e"] == {"T1": 4}
    assert out["g"]["symbols"] == ["O", "H", "H"] and out["f"] == [1, 2]
    with pytest.raises(TypeError, match="object"):
        to_jsonable(object())


def test_reopen_trims_frames_after_checkpoint(tmp_path):
    run = RunDirectory.create(tmp_path / "r")
    run.save_task(TASK)
    _run_steps(run, 3)  # steps 0, 1, 2 in trajectory and checkpoint
    # a kill after the trajectory frame of step 3 but before its checkpoint write
    run.observers()[0](make_record(3, shift=0.03))
    with open(run.trajectory_xyz, "a") as fh:
        fh.write("3\nstep=4\nO 0 0 0\n")  # and a frame cut off mid-write
    again = RunDirectory.reopen(run.path)
    assert again.previous.iteration == 2 and again.task["kind"] == "relax"
    assert [parse_comment(f.title)["step"] for f in read_xyz_frames(run.trajectory_xyz)] == [0, 1, 2]
    observers = again.observers(progress=False)
    for rec in (make_record(2, shift=0.02), make_record(3, shift=0.03)):
        for obs in observers:
            obs(rec)
    steps = [parse_comment(f.title)["step"] for f in read_xyz_frames(run.trajectory_xyz)]
    assert steps == [0, 1, 2, 3]
    from surfcross.io.checkpoint import load_checkpoint
    assert list(load_checkpoint(run.checkpoint_h5).history["iteration"]) == [0, 1, 2, 2, 3]


def test_reopen_needs_a_run(tmp_path):
    from surfcross.errors import CheckpointError
    with pytest.raises(InputError):
        RunDirectory.reopen(tmp_path / "missing")
    with pytest.raises(CheckpointError, match="no checkpoint"):
        RunDirectory.reopen(tmp_path)


def test_child_directories(tmp_path):
    job = RunDirectory.create(tmp_path / "job")
    a = job.child("s1 min")
    assert a.path == tmp_path / "job" / "s1_min" and a.path.is_dir()


class _Kill(Exception):
    """Stands in for a kill: raised by an observer after the run record of a step is written."""


def test_interrupted_run_resumes_from_the_run_directory(tmp_path):
    # the real optimizer on the Rosenbrock valley of surfcross.testing (minimum at (1, 1),
    # Rosenbrock 1960, a classic test function); killed after step 6, resumed from disk
    from surfcross.coords.cartesian import CartesianCoordinates
    from surfcross.optimize import Optimizer, OptimizerSettings
    from surfcross.testing.surfaces import SURFACES, AnalyticObjective

    surf = SURFACES["valley"]
    settings = OptimizerSettings(initial_hessian="diagonal", max_iterations=150)

    def optimizer(observers):
        obj = AnalyticObjective.from_surface(surf)
        opt = Optimizer(obj, CartesianCoordinates(obj.natom, project_external=False),
                        settings=settings, observers=observers)
        return obj, opt

    obj, full_opt = optimizer([])
    full = full_opt.run(obj.geometry(surf.start))
    assert full.converged

    run = RunDirectory.create(tmp_path / "valley")
    run.save_task({"kind": "relax", "surface": surf.name, "geometry": obj.geometry(surf.start)})

    def kill(rec):
        if rec.accepted and rec.iteration == 6:
            raise _Kill

    obj, opt = optimizer(run.observers(progress=False) + [kill])
    with pytest.raises(_Kill):
        opt.run(obj.geometry(surf.start))

    again = RunDirectory.reopen(run.path)
    data = again.previous
    assert data.iteration == 6 and data.task["surface"] == surf.name
    obj2, opt2 = optimizer(again.observers(progress=False))
    opt2.load_state_dict(data.resume_state)  # read back from HDF5, not the in-memory record
    resumed = opt2.run(data.geometry)
    assert resumed.converged and resumed.iterations == full.iterations
    np.testing.assert_allclose(resumed.geometry.coords_bohr, full.geometry.coords_bohr, atol=1e-10)
    # the record on disk is that of one uninterrupted run
    frames = read_xyz_frames(run.trajectory_xyz, spin=1)  # one H atom: a doublet
    steps = [parse_comment(f.title)["step"] for f in frames]
    assert steps == list(range(full.iterations + 1))
    np.testing.assert_allclose(frames[-1].coords_bohr, full.geometry.coords_bohr, atol=1e-9)
    from surfcross.io.checkpoint import load_checkpoint
    hist = load_checkpoint(run.checkpoint_h5).history
    accepted = hist["iteration"][hist["accepted"]]
    assert list(accepted) == list(range(full.iterations + 1))
    np.testing.assert_allclose(hist["value_eh"][hist["accepted"]],
                               [r.value.value for r in full.history if r.accepted], rtol=1e-10)
