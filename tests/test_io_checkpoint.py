"""HDF5 checkpoint: round trip, atomic rewrite, damaged files.

The step records are synthetic (a scenario of our own: water with three computed singlets);
what is checked is that the file read back with h5py (the reference HDF5 reader) holds exactly
what was written, and that a crash never leaves an unreadable checkpoint.
"""

import os
import shutil
import subprocess
import sys
import textwrap

import h5py
import numpy as np
import pytest

from surfcross.engine.base import Evaluation, MethodSpec, StateInfo
from surfcross.errors import CheckpointError
from surfcross.geometry import Geometry
from surfcross.io import checkpoint as ckpt
from surfcross.io.checkpoint import CheckpointWriter, load_checkpoint
from surfcross.objectives.base import Criterion, ObjectiveValue
from surfcross.optimize.records import StepRecord
from surfcross.states import parse_state
from surfcross.tracking.records import TrackingRecord

WATER = Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0], [0, 0.757, 0.587], [0, -0.757, 0.587]])


def make_record(i, *, accepted=True, shift=0.0, roots=("S1",), resume=None):
    geom = WATER.with_coords(WATER.coords_bohr + shift)
    e = {"S0": -74.96 + 0.001 * i, "S1": -74.50 - 0.002 * i, "S2": -74.40 - 0.001 * i}
    grad = np.full((3, 3), 0.01 / (i + 1))
    evaluation = Evaluation(geometry=geom, states=tuple(StateInfo(parse_state(k), v) for k, v in e.items()),
                            gradients={parse_state(roots[0]): grad})
    tracking = TrackingRecord(targets=("S1",), roots=roots, previous_roots=("S1",),
                              overlaps={"S": np.eye(3) * 0.9}, confidence=(0.9,))
    value = ObjectiveValue(value=e[roots[0]], gradient=grad, energies_eh={"S1": e[roots[0]]},
                           evaluation=evaluation, tracking=tracking, info={"sigma": 3.5})
    crit = (Criterion("max force", float(grad.max()), 4.5e-4, "Eh/bohr"),
            Criterion("rms step", 1e-3, 1.2e-3, "bohr"))
    return StepRecord(iteration=i, geometry=geom, value=value, criteria=crit,
                      step_bohr=np.full((3, 3), 0.01 * i), trust_radius=0.3, accepted=accepted,
                      evaluations=i + 1, elapsed_s=1.5 * i, message="" if accepted else "energy rose",
                      resume_state=resume or {"iteration": i, "hessian": np.eye(9) * (i + 1)})


RESUME = {
    "iteration": 2, "trust_radius": 0.25, "hessian": np.arange(81.0).reshape(9, 9),
    "objective": {"name": "penalty", "sigma": 3.5, "roots": ["S1", "S2"], "converged": False,
                  "vector": np.linspace(0, 1, 9), "nothing": None, "pair": ("S1", 2),
                  "mixed": [np.ones(2), {"a": 1}], "weights": [0.5, 0.5], "empty": [],
                  "odd/key": 1, ".hidden": "x"},
}
TASK = {"kind": "relax", "states": ["S1"], "method": MethodSpec(method="cis").to_dict(),
        "options": {"max_steps": 50, "coordinates": "internal"}, "geometry": WATER}


def _equal(a, b):
    if isinstance(a, dict):
        assert isinstance(b, dict) and list(a) == list(b) or set(a) == set(b)
        for k in a:
            _equal(a[k], b[k])
    elif isinstance(a, np.ndarray):
        np.testing.assert_array_equal(a, b)
    elif isinstance(a, (list, tuple)):
        assert type(a) is type(b) and len(a) == len(b)
        for x, y in zip(a, b):
            _equal(x, y)
    elif isinstance(a, Geometry):
        assert a == b or (a.symbols == b.symbols and np.array_equal(a.coords_bohr, b.coords_bohr))
    else:
        assert a == b and type(a) is type(b)


def test_round_trip(tmp_path):
    path = tmp_path / "checkpoint.h5"
    writer = CheckpointWriter(path, task=TASK, settings={"optimizer": {"max_steps": 50}})
    writer(make_record(0))
    writer(make_record(1, shift=0.01))
    writer(make_record(2, shift=0.02, accepted=False))
    writer(make_record(2, shift=0.015, roots=("S2",), resume=RESUME))
    data = load_checkpoint(path)
    assert data.records == 4 and data.iteration == 2
    _equal(RESUME, dict(data.resume_state))
    _equal({k: v for k, v in TASK.items() if k != "geometry"},
           {k: v for k, v in data.task.items() if k != "geometry"})
    assert data.task["geometry"].symbols == WATER.symbols
    np.testing.assert_array_equal(data.task["geometry"].coords_bohr, WATER.coords_bohr)
    assert data.settings == {"optimizer": {"max_steps": 50}}
    # last accepted geometry, not the rejected trial
    np.testing.assert_allclose(data.geometry.coords_bohr, WATER.coords_bohr + 0.015)
    h = data.history
    assert list(h["iteration"]) == [0, 1, 2, 2]
    assert list(h["accepted"]) == [True, True, False, True]
    assert data.state_labels == ("S0", "S1", "S2")
    np.testing.assert_allclose(h["state_energies_eh"][1], [-74.959, -74.502, -74.401])
    assert data.target_labels == ("S1",)
    np.testing.assert_allclose(h["target_energies_eh"][3, 0], -74.40 - 0.002)
    assert list(h["roots"]) == ["S1", "S1", "S1", "S2"]
    assert h["message"][2] == "energy rose"
    assert data.criteria_names == ("max force", "rms step")
    assert data.criteria_units == ("Eh/bohr", "bohr")
    np.testing.assert_allclose(h["criteria_threshold"][:, 0], 4.5e-4)
    np.testing.assert_allclose(h["step_length_bohr"][1], np.linalg.norm(np.full((3, 3), 0.01)))
    # gradients of the adiabatic roots, NaN where not computed
    assert set(data.state_gradients) == {"S1", "S2"}
    assert np.isnan(data.state_gradients["S2"][0]).all()
    np.testing.assert_allclose(data.state_gradients["S2"][3], 0.01 / 3)
    np.testing.assert_allclose(data.overlaps[1]["S"], np.eye(3) * 0.9)
    assert np.isnan(h["gap_eh"]).all()


def test_schema_read_with_plain_h5py(tmp_path):
    # the layout documented in DEVELOPERS.md, read with h5py alone
    path = tmp_path / "checkpoint.h5"
    writer = CheckpointWriter(path, task=TASK)
    writer(make_record(0))
    with h5py.File(path, "r") as fh:
        assert fh.attrs["format"] == "surfcross-checkpoint" and fh.attrs["version"] == 1
        assert {"task", "settings", "molecule", "resume", "history"} <= set(fh)
        assert fh["history/geometries_bohr"].shape == (1, 3, 3)
        assert fh["history/state_energies_eh"].attrs["labels"].tolist() == ["S0", "S1", "S2"]
        assert fh["task"].attrs["kind"] == "relax"
        assert list(fh["molecule/symbols"].asstr()[()]) == ["O", "H", "H"]


def test_resume_keeps_history_and_drops_repeated_point(tmp_path):
    path = tmp_path / "checkpoint.h5"
    writer = CheckpointWriter(path, task=TASK)
    for i in range(3):
        writer(make_record(i, shift=0.01 * i))
    data = load_checkpoint(path)
    again = CheckpointWriter(path, previous=data)
    again(make_record(2, shift=0.02))  # the resumed run reports its start point again
    again(make_record(3, shift=0.03))
    data2 = load_checkpoint(path)
    assert list(data2.history["iteration"]) == [0, 1, 2, 3]
    assert data2.task["kind"] == "relax"
    np.testing.assert_allclose(data2.history["state_energies_eh"][:3], data.history["state_energies_eh"])


def test_task_saved_before_first_step(tmp_path):
    path = tmp_path / "checkpoint.h5"
    CheckpointWriter(path).set_task(TASK, {"a": 1})
    data = load_checkpoint(path)
    assert data.records == 0 and data.geometry is None and data.task["kind"] == "relax"


def test_failed_write_leaves_previous_checkpoint(tmp_path, monkeypatch):
    path = tmp_path / "checkpoint.h5"
    writer = CheckpointWriter(path, task=TASK)
    writer(make_record(0))
    writer(make_record(1, shift=0.01))

    def broken(group, rows):
        group.create_dataset("iteration", data=np.arange(len(rows)))
        raise RuntimeError("disk full")

    monkeypatch.setattr(ckpt, "_write_history", broken)
    with pytest.raises(RuntimeError):
        writer(make_record(2, shift=0.02))
    data = load_checkpoint(path)
    assert data.records == 2 and data.iteration == 1
    assert not (tmp_path / "checkpoint.h5.partial").exists()


def test_killed_process_leaves_previous_checkpoint(tmp_path):
    # a hard kill (os._exit) in the middle of writing the new file
    script = textwrap.dedent(f"""
        import os, sys
        sys.path.insert(0, {os.path.dirname(__file__)!r})
        import numpy as np
        from test_io_checkpoint import make_record, TASK
        from surfcross.io import checkpoint as ckpt
        w = ckpt.CheckpointWriter({str(tmp_path / 'checkpoint.h5')!r}, task=TASK)
        w(make_record(0))
        def die(group, rows):
            group.create_dataset("iteration", data=np.arange(len(rows)))
            group.file.flush()
            os._exit(9)
        ckpt._write_history = die
        w(make_record(1, shift=0.01))
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert proc.returncode == 9, proc.stderr
    assert (tmp_path / "checkpoint.h5.partial").exists()  # the half-written file
    data = load_checkpoint(tmp_path / "checkpoint.h5")
    assert data.records == 1 and data.iteration == 0
    # the next write replaces the stale partial file
    again = CheckpointWriter(tmp_path / "checkpoint.h5", previous=data)
    again(make_record(1, shift=0.01))
    assert load_checkpoint(tmp_path / "checkpoint.h5").records == 2


def _good(tmp_path):
    path = tmp_path / "checkpoint.h5"
    writer = CheckpointWriter(path, task=TASK)
    writer(make_record(0))
    return path


def test_missing_file(tmp_path):
    with pytest.raises(CheckpointError, match="no checkpoint at .*nothing.h5"):
        load_checkpoint(tmp_path / "nothing.h5")


def test_truncated_file(tmp_path):
    path = _good(tmp_path)
    bad = tmp_path / "cut.h5"
    shutil.copy(path, bad)
    with open(bad, "r+b") as fh:
        fh.truncate(os.path.getsize(path) // 2)
    with pytest.raises(CheckpointError, match=r"cut\.h5 is truncated or corrupted.*start the task again"):
        load_checkpoint(bad)


def test_corrupted_file(tmp_path):
    path = _good(tmp_path)
    with open(path, "r+b") as fh:
        fh.write(b"\x00garbage" * 64)  # overwrite the HDF5 superblock
    with pytest.raises(CheckpointError, match="truncated or corrupted"):
        load_checkpoint(path)
    text = tmp_path / "text.h5"
    text.write_text("not an HDF5 file\n")
    with pytest.raises(CheckpointError, match="text.h5"):
        load_checkpoint(text)


def test_foreign_and_newer_files(tmp_path):
    foreign = tmp_path / "other.h5"
    with h5py.File(foreign, "w") as fh:
        fh["x"] = 1
    with pytest.raises(CheckpointError, match="not a surfcross checkpoint"):
        load_checkpoint(foreign)
    path = _good(tmp_path)
    with h5py.File(path, "r+") as fh:
        fh.attrs["version"] = 99
    with pytest.raises(CheckpointError, match="newer surfcross"):
        load_checkpoint(path)


def test_unstorable_value_is_named(tmp_path):
    writer = CheckpointWriter(tmp_path / "c.h5", task={"bad": {"thing": object()}})
    with pytest.raises(TypeError, match="/bad/thing"):
        writer.write()
