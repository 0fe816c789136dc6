"""Multi-frame XYZ trajectory of the accepted geometries of a run.

Each frame's comment line holds ``key=value`` fields separated by spaces, e.g.::

    step=3 E_S1=-74.5012345678 E_S2=-74.4987654321 gap_ev=0.067185 max_force=1.234e-03

(energies of the followed states in Eh, the gap in eV when the task has one, the largest
component of the tested gradient in Eh/bohr). Any XYZ reader opens the file;
:func:`parse_comment` reads the fields back.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any

from ..units import HARTREE_IN_EV

__all__ = ["frame_comment", "parse_comment", "TrajectoryWriter", "trim_trajectory"]


def frame_comment(record: Any) -> str:
    """Comment line of the frame of one StepRecord."""
    value = record.value
    parts = [f"step={record.iteration}"]
    parts += [f"E_{label}={energy:.10f}" for label, energy in value.energies_eh.items()]
    if value.gap_eh is not None:
        parts.append(f"gap_ev={value.gap_eh * HARTREE_IN_EV:.6f}")
    parts.append(f"max_force={record.max_force:.3e}")
    return " ".join(parts)


def parse_comment(comment: str) -> dict[str, float | int | str]:
    """Fields of a comment written by :func:`frame_comment` ('step' as int, numbers as float)."""
    out: dict[str, float | int | str] = {}
    for token in comment.split():
        key, sep, text = token.partition("=")
        if not sep:
            continue
        if key == "step":
            out[key] = int(text)
            continue
        try:
            out[key] = float(text)
        except ValueError:
            out[key] = text
    return out


class TrajectoryWriter:
    """Observer appending one XYZ frame per accepted StepRecord.

    Records whose step number is not larger than the last written one are skipped, so the
    point a resumed run reports again is not written twice.
    """

    def __init__(self, path: str | os.PathLike, *, last_step: int = -1) -> None:
        self.path = Path(path)
        self.last_step = last_step

    def __call__(self, record: Any) -> None:
        if not record.accepted or record.iteration <= self.last_step:
            return
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(record.geometry.to_xyz(frame_comment(record)))
            fh.flush()
        self.last_step = record.iteration


def _atom_line(line: str) -> bool:
    """True for a complete 'Symbol x y z' line (charge and spin are not known here, so the
    frame is checked for shape only, not as a molecule)."""
    parts = line.split()
    if len(parts) != 4:
        return False
    try:
        return all(math.isfinite(float(v)) for v in parts[1:])
    except ValueError:
        return False


def trim_trajectory(path: str | os.PathLike, max_step: int) -> int:
    """Drop frames with a step above ``max_step`` (written after the last checkpoint of an
    interrupted run). Returns the step of the last frame kept (-1 when none is left).

    A frame cut off by a kill (incomplete last lines) is dropped too.
    """
    path = Path(path)
    if not path.exists():
        return -1
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    kept: list[str] = []
    last = -1
    pos = 0
    while pos < len(lines):
        try:
            natom = int(lines[pos].split()[0])
        except (ValueError, IndexError):
            break
        frame = lines[pos:pos + natom + 2]
        if len(frame) < natom + 2 or not frame[-1].endswith("\n"):
            break
        if not all(_atom_line(line) for line in frame[2:]):
            break
        step = parse_comment(frame[1]).get("step", last + 1)
        if int(step) > max_step:
            break
        kept.extend(frame)
        last = int(step)
        pos += natom + 2
    tmp = path.with_name(path.name + ".partial")
    tmp.write_text("".join(kept), encoding="utf-8")
    os.replace(tmp, path)
    return last
