"""HDF5 checkpoint of a run: everything needed to resume it and to re-analyse it.

The file is rewritten completely after every step, atomically: it is written to
``checkpoint.h5.partial`` in the same folder, flushed, synced to disk and then moved over the
old file with :func:`os.replace`. A run killed at any moment leaves either the previous or the
new checkpoint, never a broken one. (Rewriting costs O(steps) per step, which is negligible for
the molecules and step counts this tool is meant for.)

Layout (format ``surfcross-checkpoint``, version 1; see DEVELOPERS.md for the full schema)::

    /            attrs: format, version, iteration, records, updated
    /task        the task definition (nested groups/attrs, see io.h5tree)
    /settings    every effective setting (nested)
    /molecule    symbols, charge, spin
    /resume      latest resume_state of the optimizer (nested); attr iteration
    /history     one row per step record (arrays, first axis = record)
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import h5py
import numpy as np

from ..errors import CheckpointError
from ..geometry import Geometry
from .h5tree import read_tree, write_tree
from .results import all_state_energies, to_jsonable

__all__ = ["FORMAT", "VERSION", "CheckpointData", "CheckpointWriter", "load_checkpoint",
           "record_row"]

FORMAT = "surfcross-checkpoint"
VERSION = 1

_SCALARS = ("iteration", "accepted", "value_eh", "merit", "gap_eh", "step_length_bohr",
            "trust_radius", "max_force", "evaluations", "elapsed_s")
_ARRAYS = ("geometries_bohr", "gradient", "test_gradient")
_STRINGS = ("roots", "message", "info_json")


@dataclass(frozen=True, kw_only=True)
class CheckpointData:
    """What :func:`load_checkpoint` returns.

    Attributes
    ----------
    path
        The checkpoint file.
    task, settings
        The task definition and the effective settings, as saved.
    iteration
        Iteration of the last accepted step (0 if only the start point was done).
    records
        Number of step records (accepted and rejected).
    geometry
        The last accepted geometry (None if no step was recorded yet).
    resume_state
        The latest optimizer/objective state (empty if none was recorded).
    history
        Per-record arrays: iteration, accepted, geometries_bohr (n, natom, 3), value_eh,
        merit, gap_eh (NaN where none), target_energies_eh (n, len(target_labels)),
        state_energies_eh (n, len(state_labels), NaN where absent), gradient, test_gradient,
        step_length_bohr, trust_radius, max_force, evaluations, elapsed_s,
        criteria_value / criteria_threshold (n, len(criteria_names)), roots, message, info_json.
    state_gradients
        {adiabatic label: (n, natom, 3)} analytic state gradients, NaN where not computed.
    overlaps
        {record index: {manifold: overlap matrix}} where tracking recorded overlaps.
    """

    path: Path
    task: Mapping[str, Any]
    settings: Mapping[str, Any]
    iteration: int
    records: int
    geometry: Geometry | None
    resume_state: Mapping[str, Any]
    history: Mapping[str, np.ndarray]
    target_labels: tuple[str, ...] = ()
    state_labels: tuple[str, ...] = ()
    criteria_names: tuple[str, ...] = ()
    criteria_units: tuple[str, ...] = ()
    state_gradients: Mapping[str, np.ndarray] = field(default_factory=dict)
    overlaps: Mapping[int, Mapping[str, np.ndarray]] = field(default_factory=dict)


def record_row(record: Any) -> dict[str, Any]:
    """The data of one StepRecord that goes into the checkpoint history."""
    value = record.value
    evaluation = value.evaluation
    tracking = value.tracking
    grads = {}
    if evaluation is not None:
        grads = {str(k): np.asarray(v, float) for k, v in getattr(evaluation, "gradients", {}).items()}
    track = {}
    if tracking is not None:
        track = {"roots": list(tracking.roots), "previous_roots": list(tracking.previous_roots),
                 "confidence": list(tracking.confidence), "flags": list(tracking.flags)}
    return {
        "iteration": int(record.iteration), "accepted": bool(record.accepted),
        "geometries_bohr": np.asarray(record.geometry.coords_bohr, float),
        "value_eh": float(value.value), "merit": float(value.merit_value),
        "gap_eh": np.nan if value.gap_eh is None else float(value.gap_eh),
        "targets": {str(k): float(v) for k, v in value.energies_eh.items()},
        "states": all_state_energies(value),
        "gradient": np.asarray(value.gradient, float),
        "test_gradient": np.asarray(value.test_gradient, float),
        "state_gradients": grads,
        "step_length_bohr": record.step_length, "trust_radius": float(record.trust_radius),
        "max_force": record.max_force, "evaluations": int(record.evaluations),
        "elapsed_s": float(record.elapsed_s),
        "criteria": {c.name: (float(c.value), float(c.threshold), c.unit) for c in record.criteria},
        "roots": ",".join(track.get("roots", [])),
        "message": str(record.message),
        "info_json": json.dumps(to_jsonable({"info": dict(value.info), "tracking": track})),
        "overlaps": ({str(m): np.asarray(o, float) for m, o in tracking.overlaps.items()}
                     if tracking is not None else {}),
    }


def _labels(rows: list[dict], key: str) -> list[str]:
    seen: dict[str, None] = {}
    for row in rows:
        for label in row[key]:
            seen.setdefault(label, None)
    return list(seen)


def _table(rows: list[dict], key: str, labels: list[str]) -> np.ndarray:
    return np.array([[row[key].get(lab, np.nan) for lab in labels] for row in rows], float)


def _write_history(group: h5py.Group, rows: list[dict]) -> None:
    if not rows:
        return
    for key in _SCALARS:
        group.create_dataset(key, data=np.array([r[key] for r in rows]))
    for key in _ARRAYS:
        group.create_dataset(key, data=np.stack([r[key] for r in rows]))
    for key in _STRINGS:
        group.create_dataset(key, data=np.array([r[key] for r in rows], dtype=object),
                             dtype=h5py.string_dtype())
    for key, name in (("targets", "target"), ("states", "state")):
        labels = _labels(rows, key)
        ds = group.create_dataset(f"{name}_energies_eh", data=_table(rows, key, labels))
        ds.attrs["labels"] = np.array(labels, dtype=h5py.string_dtype())
    names = _labels(rows, "criteria")
    units = {n: r["criteria"][n][2] for r in rows for n in r["criteria"]}
    for col, name in ((0, "criteria_value"), (1, "criteria_threshold")):
        data = np.array([[r["criteria"][n][col] if n in r["criteria"] else np.nan for n in names]
                         for r in rows], float).reshape(len(rows), len(names))
        ds = group.create_dataset(name, data=data)
        ds.attrs["names"] = np.array(names, dtype=h5py.string_dtype())
        ds.attrs["units"] = np.array([units[n] for n in names], dtype=h5py.string_dtype())
    shape = rows[0]["geometries_bohr"].shape
    grads = group.create_group("state_gradients", track_order=True)
    for label in _labels(rows, "state_gradients"):
        grads.create_dataset(label, data=np.stack(
            [r["state_gradients"].get(label, np.full(shape, np.nan)) for r in rows]))
    overlaps = group.create_group("overlaps")
    for i, row in enumerate(rows):
        if row["overlaps"]:
            sub = overlaps.create_group(f"{i:06d}")
            for manifold, matrix in row["overlaps"].items():
                sub.create_dataset(manifold or "_", data=matrix)


class CheckpointWriter:
    """Observer that writes the checkpoint after every StepRecord.

    Parameters
    ----------
    path
        The checkpoint file (usually ``checkpoint.h5`` of a run directory).
    task, settings
        Task definition and effective settings stored with every write.
    previous
        Data of an earlier checkpoint of the same run: its history is kept (used on resume).
    """

    def __init__(self, path: str | os.PathLike, *, task: Mapping[str, Any] | None = None,
                 settings: Mapping[str, Any] | None = None,
                 previous: CheckpointData | None = None) -> None:
        self.path = Path(path)
        self.task: dict[str, Any] = dict(previous.task if previous and task is None else task or {})
        self.settings: dict[str, Any] = dict(
            previous.settings if previous and settings is None else settings or {})
        self._rows: list[dict[str, Any]] = _rows_from_data(previous) if previous else []
        self._molecule: Geometry | None = previous.geometry if previous else None
        self._resume: dict[str, Any] = dict(previous.resume_state) if previous else {}

    def set_task(self, task: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> None:
        """Store the task definition (and settings) and write the file right away."""
        self.task = dict(task)
        if settings is not None:
            self.settings = dict(settings)
        self.write()

    def __call__(self, record: Any) -> None:
        row = record_row(record)
        last = self._last_accepted()
        if (row["accepted"] and last is not None and last["iteration"] == row["iteration"]
                and np.allclose(last["geometries_bohr"], row["geometries_bohr"], atol=1e-12)):
            # the same point reported again (first record after a resume): keep one row
            self._rows.remove(last)
        self._rows.append(row)
        if self._molecule is None or record.accepted:
            self._molecule = record.geometry
        if record.resume_state:
            self._resume = dict(record.resume_state)
        self.write()

    def _last_accepted(self) -> dict[str, Any] | None:
        return next((r for r in reversed(self._rows) if r["accepted"]), None)

    @property
    def records(self) -> int:
        return len(self._rows)

    def write(self) -> None:
        """Write the whole checkpoint atomically (temp file, fsync, os.replace)."""
        tmp = self.path.with_name(self.path.name + ".partial")
        try:
            with h5py.File(tmp, "w", track_order=True) as fh:
                self._fill(fh)
                fh.flush()
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
            os.replace(tmp, self.path)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise

    def _fill(self, fh: h5py.File) -> None:
        last = self._last_accepted()
        fh.attrs.update({"format": FORMAT, "version": VERSION, "records": len(self._rows),
                         "iteration": last["iteration"] if last else 0,
                         "updated": time.strftime("%Y-%m-%dT%H:%M:%S%z")})
        write_tree(fh.create_group("task", track_order=True), self.task)
        write_tree(fh.create_group("settings", track_order=True), self.settings)
        resume = fh.create_group("resume", track_order=True)
        write_tree(resume, self._resume)
        if self._molecule is not None:
            mol = fh.create_group("molecule")
            mol.create_dataset("symbols", data=np.array(self._molecule.symbols, dtype=object),
                               dtype=h5py.string_dtype())
            mol.attrs["charge"], mol.attrs["spin"] = self._molecule.charge, self._molecule.spin
        _write_history(fh.create_group("history"), self._rows)


def _rows_from_data(data: CheckpointData) -> list[dict[str, Any]]:
    """Rebuild writer rows from loaded history arrays (NaN entries dropped from label maps)."""
    h = data.history
    rows = []
    for i in range(data.records):
        row: dict[str, Any] = {k: h[k][i].item() for k in _SCALARS}
        row.update({k: np.array(h[k][i]) for k in _ARRAYS})
        row.update({k: str(h[k][i]) for k in _STRINGS})
        for key, labels, table in (("targets", data.target_labels, "target_energies_eh"),
                                   ("states", data.state_labels, "state_energies_eh")):
            row[key] = {lab: float(h[table][i, j]) for j, lab in enumerate(labels)
                        if np.isfinite(h[table][i, j])}
        row["criteria"] = {n: (float(h["criteria_value"][i, j]), float(h["criteria_threshold"][i, j]),
                               data.criteria_units[j])
                           for j, n in enumerate(data.criteria_names)
                           if np.isfinite(h["criteria_value"][i, j])}
        row["state_gradients"] = {lab: np.array(g[i]) for lab, g in data.state_gradients.items()
                                  if np.all(np.isfinite(g[i]))}
        row["overlaps"] = {m: np.array(o) for m, o in data.overlaps.get(i, {}).items()}
        rows.append(row)
    return rows


def _strings(attr: Any) -> tuple[str, ...]:
    return tuple(str(s.decode() if isinstance(s, bytes) else s) for s in np.atleast_1d(attr))


def _read_history(group: h5py.Group) -> dict[str, Any]:
    out: dict[str, Any] = {"history": {}, "state_gradients": {}, "overlaps": {}}
    if "iteration" not in group:
        return out
    h = out["history"]
    for key in _SCALARS + _ARRAYS + ("target_energies_eh", "state_energies_eh",
                                     "criteria_value", "criteria_threshold"):
        h[key] = group[key][()]
    for key in _STRINGS:
        h[key] = np.asarray(group[key].asstr()[()], dtype=str)
    out["target_labels"] = _strings(group["target_energies_eh"].attrs["labels"])
    out["state_labels"] = _strings(group["state_energies_eh"].attrs["labels"])
    out["criteria_names"] = _strings(group["criteria_value"].attrs["names"])
    out["criteria_units"] = _strings(group["criteria_value"].attrs["units"])
    out["state_gradients"] = {k: v[()] for k, v in group["state_gradients"].items()}
    out["overlaps"] = {int(k): {("" if m == "_" else m): o[()] for m, o in sub.items()}
                       for k, sub in group["overlaps"].items()}
    return out


def load_checkpoint(path: str | os.PathLike) -> CheckpointData:
    """Read a checkpoint. Raises CheckpointError for a missing, truncated or foreign file."""
    path = Path(path)
    if path.is_dir():
        path = path / "checkpoint.h5"
    if not path.exists():
        raise CheckpointError(
            f"no checkpoint at {path}: the run stopped before its first step or this is not a "
            "surfcross run directory; start the task again")
    try:
        with h5py.File(path, "r") as fh:
            return _load_open(fh, path)
    except CheckpointError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        reason = str(exc).splitlines()[0][:120] if str(exc) else type(exc).__name__
        raise CheckpointError(
            f"checkpoint {path} is truncated or corrupted ({reason}); it cannot be resumed: "
            "start the task again (the trajectory.xyz of the run still holds its geometries)"
        ) from None


def _load_open(fh: h5py.File, path: Path) -> CheckpointData:
    if fh.attrs.get("format") != FORMAT:
        raise CheckpointError(f"{path} is not a surfcross checkpoint (no '{FORMAT}' mark)")
    version = int(fh.attrs["version"])
    if version > VERSION:
        raise CheckpointError(f"{path} was written by a newer surfcross (checkpoint format "
                              f"{version}, this version reads {VERSION}); update surfcross")
    hist = _read_history(fh["history"])
    h = hist.pop("history")
    geometry = None
    if h:
        accepted = np.flatnonzero(h["accepted"])
        last = int(accepted[-1]) if accepted.size else len(h["accepted"]) - 1
        mol = fh["molecule"]
        geometry = Geometry(tuple(mol["symbols"].asstr()[()]), h["geometries_bohr"][last],
                            int(mol.attrs["charge"]), int(mol.attrs["spin"]))
    return CheckpointData(
        path=path, task=read_tree(fh["task"]), settings=read_tree(fh["settings"]),
        iteration=int(fh.attrs["iteration"]), records=int(fh.attrs["records"]),
        geometry=geometry, resume_state=read_tree(fh["resume"]), history=h, **hist)
