"""The run directory: one folder per task holding its complete record.

Files (see DEVELOPERS.md, "Run directories and checkpoints")::

    result.json      machine-readable outcome (keys: io.results.RESULT_KEYS and more)
    trajectory.xyz   accepted geometries, one XYZ frame per step
    final.xyz        the last geometry
    checkpoint.h5    task, settings, history, latest optimizer state (for resume)
    report.md        human-readable report
    energies.png ... plots, when matplotlib is installed
    pyscf.log        PySCF's own output

Typical use by a task::

    run = RunDirectory.create(args.out, input_name="water.xyz", task="relax")
    run.save_task(spec, settings)
    result = optimizer.run(..., observers=run.observers())
    run.finish(result_dict(...), result.geometry, criteria=result.history[-1].criteria)
"""

from __future__ import annotations

import logging
import os
import re
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from ..errors import InputError
from ..geometry import Geometry
from .checkpoint import CheckpointData, CheckpointWriter, load_checkpoint
from .plots import NO_PLOTS_NOTE, have_matplotlib, history_plots, plot_profile
from .progress import ProgressWriter, settings_lines
from .report import render_report
from .results import complete_result, write_json_atomic
from .trajectory import TrajectoryWriter, trim_trajectory

__all__ = ["RunDirectory", "default_run_name", "discard_unused"]

log = logging.getLogger(__name__)
progress_log = logging.getLogger("surfcross.progress")

RESULT_FILE = "result.json"
TRAJECTORY_FILE = "trajectory.xyz"
FINAL_FILE = "final.xyz"
CHECKPOINT_FILE = "checkpoint.h5"
REPORT_FILE = "report.md"
PYSCF_LOG_FILE = "pyscf.log"
SETTINGS_FILE = "settings.txt"

Observer = Callable[[Any], None]


def default_run_name(input_name: str | os.PathLike, task: str) -> str:
    """'molecules/water.xyz', 'relax' -> 'water_relax' (unsafe characters become '_')."""
    stem = Path(str(input_name)).name
    stem = stem[: -len(Path(stem).suffix)] if Path(stem).suffix else stem
    text = f"{stem}_{task}" if stem else task
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._") or "run"


class RunDirectory:
    """A run directory. Build it with :meth:`create` (new run) or :meth:`reopen` (resume)."""

    def __init__(self, path: str | os.PathLike, *, previous: CheckpointData | None = None) -> None:
        self.path = Path(path)
        self.previous = previous
        self._task: dict[str, Any] | None = dict(previous.task) if previous else None
        self._settings: dict[str, Any] | None = dict(previous.settings) if previous else None
        self._checkpoint: CheckpointWriter | None = None
        self._last_frame = -1  # step of the last trajectory frame already on disk

    # ---------------------------------------------------------------- creation
    @classmethod
    def create(cls, out: str | os.PathLike | None, *, input_name: str | os.PathLike = "",
               task: str = "run", parent: str | os.PathLike | None = None) -> "RunDirectory":
        """A new run directory.

        ``out`` given: that folder (created if needed; an existing folder must not already hold
        a run). ``out`` None: a new folder ``<input>_<task>`` in ``parent`` (default the current
        directory), or ``<input>_<task>_2``, ``_3``, ... if taken. Never overwrites a run.
        """
        if out is not None:
            path = Path(out)
            if path.exists() and not path.is_dir():
                raise InputError(f"--out {str(path)!r} is a file, not a directory")
            taken = [f for f in (RESULT_FILE, CHECKPOINT_FILE, TRAJECTORY_FILE) if (path / f).exists()]
            if taken:
                raise InputError(
                    f"{str(path)!r} already holds a run ({taken[0]}); choose another --out, or "
                    f"continue it with 'surfcross resume {path}'")
            path.mkdir(parents=True, exist_ok=True)
            return cls(path)
        base = Path(parent) if parent is not None else Path.cwd()
        base.mkdir(parents=True, exist_ok=True)
        name = default_run_name(input_name, task)
        for n in range(1, 10000):
            path = base / (name if n == 1 else f"{name}_{n}")
            try:
                path.mkdir()  # atomic: fails if another run took the name meanwhile
            except FileExistsError:
                continue
            return cls(path)
        raise InputError(f"could not find a free run directory name for {name!r} in {base}")

    @classmethod
    def reopen(cls, path: str | os.PathLike) -> "RunDirectory":
        """An interrupted run, to resume: loads its checkpoint (CheckpointError if unusable)
        and drops trajectory frames written after it."""
        path = Path(path)
        if not path.is_dir():
            raise InputError(f"{str(path)!r} is not a run directory")
        data = load_checkpoint(path / CHECKPOINT_FILE)
        last = trim_trajectory(path / TRAJECTORY_FILE, data.iteration)
        log.debug("reopened %s at step %d (trajectory up to step %d)", path, data.iteration, last)
        run = cls(path, previous=data)
        run._last_frame = last
        return run

    def child(self, name: str) -> "RunDirectory":
        """A run directory for one task of a job, inside this one (``name`` made file-safe)."""
        safe = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "task"
        return RunDirectory.create(self.path / safe)

    # ---------------------------------------------------------------- file names
    @property
    def result_json(self) -> Path:
        return self.path / RESULT_FILE

    @property
    def trajectory_xyz(self) -> Path:
        return self.path / TRAJECTORY_FILE

    @property
    def final_xyz(self) -> Path:
        return self.path / FINAL_FILE

    @property
    def checkpoint_h5(self) -> Path:
        return self.path / CHECKPOINT_FILE

    @property
    def report_md(self) -> Path:
        return self.path / REPORT_FILE

    @property
    def settings_txt(self) -> Path:
        """Every effective setting of the task, one per line (written by :meth:`save_task`)."""
        return self.path / SETTINGS_FILE

    @property
    def pyscf_log(self) -> Path:
        """File for PySCF's own output (pass to the engine)."""
        return self.path / PYSCF_LOG_FILE

    # ---------------------------------------------------------------- task and observers
    @property
    def task(self) -> dict[str, Any] | None:
        """The saved task definition (after :meth:`save_task`, or from the checkpoint)."""
        return self._task

    @property
    def settings(self) -> dict[str, Any] | None:
        return self._settings

    def save_task(self, spec: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> None:
        """Store the task definition (kind, states, method dict, options, input geometry) and
        the effective settings in the checkpoint, and write the settings list to
        ``settings.txt`` (never to the terminal: one progress line names the file).

        ``spec`` holds nested dicts, lists, numbers, strings, arrays and Geometry objects.
        """
        self._task = dict(spec)
        self._settings = dict(settings if settings is not None else spec)
        self._writer().set_task(self._task, self._settings)
        text = "\n".join(settings_lines(self._settings,
                                        title=f"{spec.get('kind', 'task')} settings")) + "\n"
        tmp = self.settings_txt.with_name(SETTINGS_FILE + ".partial")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, self.settings_txt)
        progress_log.info("%s: run folder %s (every setting in %s)", spec.get("kind", "task"),
                          self.path, SETTINGS_FILE)

    def _writer(self) -> CheckpointWriter:
        if self._checkpoint is None:
            self._checkpoint = CheckpointWriter(self.checkpoint_h5, task=self._task,
                                                settings=self._settings, previous=self.previous)
        return self._checkpoint

    def observers(self, *, progress: bool = True) -> list[Observer]:
        """Callables for the optimizer, each called with every StepRecord: trajectory writer,
        checkpoint writer, progress lines (in that order, so a kill between the first two
        leaves at most one extra trajectory frame, which :meth:`reopen` removes)."""
        found = [TrajectoryWriter(self.trajectory_xyz, last_step=self._last_frame), self._writer()]
        return found + [ProgressWriter()] if progress else found

    # ---------------------------------------------------------------- the end
    def finish(self, result: Mapping[str, Any], final_geometry: Geometry, *,
               criteria: Sequence[Any] = (), branching: Mapping[str, Any] | None = None,
               reorderings: Sequence[str] = (), sections: Sequence[tuple[str, str]] = (),
               profile: Mapping[str, Any] | None = None) -> dict[str, Any]:
        """Write result.json, final.xyz, report.md and plots. Returns the result as written.

        Parameters
        ----------
        result
            Result dict with the contract keys (see :func:`io.results.result_dict`);
            ``final_xyz`` is set here, missing gap_ev/search/warnings default to null/[].
        final_geometry
            Written to final.xyz.
        criteria, branching, reorderings, sections
            Passed to :func:`io.report.render_report`.
        profile
            For pathway/scan tasks: ``{"x": [...], "curves_ev": {label: [...]},
            "xlabel": "..."}`` drawn as profile.png.
        """
        out = complete_result(result, FINAL_FILE)
        if branching is not None:
            out.setdefault("branching", dict(branching))
        comment = " ".join([f"{out['task']} final"] + [
            f"E_{k}={v:.10f}" for k, v in out["energies_eh"].items()
            if v is not None])
        tmp = self.final_xyz.with_name(FINAL_FILE + ".partial")
        tmp.write_text(final_geometry.to_xyz(comment), encoding="utf-8")
        os.replace(tmp, self.final_xyz)
        plots, notes = self._plots(out, profile)
        write_json_atomic(self.result_json, out)
        text = render_report(out, criteria=criteria, branching=branching, reorderings=reorderings,
                             sections=sections, plots=[p.name for p in plots], notes=notes)
        tmp = self.report_md.with_name(REPORT_FILE + ".partial")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, self.report_md)
        log.info("run record written to %s", self.path)
        return out

    def _plots(self, result: Mapping[str, Any], profile: Mapping[str, Any] | None):
        if not have_matplotlib():
            return [], [NO_PLOTS_NOTE]
        made = []
        if self.checkpoint_h5.exists():
            data = load_checkpoint(self.checkpoint_h5)
            made += history_plots(self.path, data.history, data.state_labels,
                                  data.target_labels)
        if profile is not None:
            out = plot_profile(self.path / "profile.png", profile["x"], profile["curves_ev"],
                               xlabel=profile.get("xlabel", "point"))
            made += [out] if out else []
        return made, []



def discard_unused(path: str | os.PathLike) -> bool:
    """Remove ``path`` if it holds nothing but empty folders, PySCF logs and settings lists.

    Used when bad input stops a command after its run folder was made: no half-empty folder
    is left behind to be mistaken for a run. Returns True when the folder was removed.
    """
    path = Path(path)
    if not path.is_dir():
        return False
    for entry in path.iterdir():
        if entry.is_dir() and not entry.is_symlink():
            if not discard_unused(entry):
                return False
        elif entry.name not in (PYSCF_LOG_FILE, SETTINGS_FILE):
            return False
    for entry in path.iterdir():
        entry.unlink()
    path.rmdir()
    return True
