"""One table for a whole batch: per molecule and task, status and the numbers people compare.

Built from the chain folders alone (the job's summary.json and each task's result.json, read
through :mod:`surfcross.batch.records`), so it can be rebuilt at any time from what is on disk.

Reference points of a molecule (energies in eV relative to the ground state at the
Franck-Condon point):

* Franck-Condon point (FC): the ground-state minimum of the first ``emission`` task, else the
  geometry of the first ``states`` task.
* Relaxed excited state: the excited-state minimum of the first ``emission`` task, else the
  first converged ``relax`` task of an excited state (S1 for closed shells, 1 for open shells).

Per task: the followed energy (a crossing's is the mean of its two states), the gap, the
absorption (first excited state of a ``states`` task, the absorbing state of ``emission``),
emission and Stokes shift (``emission``, or a relax of the excited state with a ``states``
task at FC: vertical gap to the ground state at that minimum), and for crossings the energy
relative to the relaxed excited state and to the same state at FC, with the characterization.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

from ..units import HARTREE_IN_EV
from . import records

__all__ = ["COLUMNS", "molecule_rows", "write_summary", "overview_plot", "SUMMARY_JSON",
           "SUMMARY_CSV", "OVERVIEW_PNG"]

SUMMARY_JSON = "batch_summary.json"
SUMMARY_CSV = "batch_summary.csv"
OVERVIEW_PNG = "batch_overview.png"

#: columns of the CSV table (JSON rows have the same keys)
COLUMNS = ("molecule", "chain_status", "task", "kind", "status", "states", "energy_eh",
           "energy_ev", "gap_ev", "absorption_ev", "oscillator_strength", "emission_ev",
           "stokes_shift_ev", "vs_relaxed_ev", "vs_fc_ev", "character", "folder", "message")


def _ev(a: float | None, b: float | None) -> float | None:
    return None if a is None or b is None else (a - b) * HARTREE_IN_EV


def _labels(result: Mapping[str, Any]) -> tuple[str, str]:
    """(reference label, first excited label) for this molecule's spin."""
    spin = (result.get("method") or {}).get("spin", 0)
    return ("0", "1") if spin else ("S0", "S1")


class _References:
    """FC point and relaxed excited state of one molecule, from its task results."""

    def __init__(self, results: Sequence[tuple[Mapping[str, Any], Mapping[str, Any]]]) -> None:
        self.fc_ground = self.fc_excited = self.relaxed = None
        self.excited_label = None
        emission = [r for t, r in results if t["kind"] == "emission" and r]
        states = [r for t, r in results if t["kind"] == "states" and r]
        relaxes = [r for t, r in results if t["kind"] == "relax" and r and records.is_converged(r)]
        if emission:
            e = emission[0]
            self.fc_ground = e.get("ground_minimum_eh")
            self.excited_label = (e.get("states") or [None])[0]
            if self.fc_ground is not None and e.get("absorption_ev") is not None:
                self.fc_excited = self.fc_ground + e["absorption_ev"] / HARTREE_IN_EV
            if records.is_converged(e):
                self.relaxed = e.get("excited_minimum_eh")
        elif states:
            ref, first = _labels(states[0])
            energies = records.state_energies(states[0])
            self.fc_ground, self.fc_excited = energies.get(ref), energies.get(first)
            self.excited_label = first
        if self.relaxed is None:
            for r in relaxes:
                label = (r.get("states") or [None])[0]
                ref, first = _labels(r)
                if label is not None and label != ref and label in (self.excited_label, first):
                    self.relaxed = records.followed_energies(r).get(label)
                    self.excited_label = self.excited_label or label
                    break


def _task_row(task: Mapping[str, Any], result: Mapping[str, Any] | None,
              refs: _References) -> dict[str, Any]:
    row: dict[str, Any] = {"task": task.get("name"), "kind": task.get("kind"),
                           "status": task.get("status"), "message": task.get("message", "")}
    if not result:
        return row
    kind = task.get("kind")
    followed = records.followed_energies(result)
    row["states"] = "/".join(followed) or "/".join(result.get("states") or [])
    energy = records.crossing_energy(result) if kind == "cross" else (
        next(iter(followed.values())) if len(followed) == 1 else None)
    row["energy_eh"] = energy
    row["energy_ev"] = _ev(energy, refs.fc_ground)
    row["gap_ev"] = records.gap_ev(result)
    if kind == "states":
        ref, first = _labels(result)
        rows = (result.get("vertical") or {}).get("states") or []
        excited = next((r for r in rows if r.get("label") == first), None)
        if excited is not None:
            row["absorption_ev"] = excited.get("excitation_ev")
            row["oscillator_strength"] = excited.get("oscillator_strength")
        row["energy_eh"] = row["energy_ev"] = None
    elif kind == "emission":
        for key in ("absorption_ev", "emission_ev", "stokes_shift_ev"):
            row[key] = result.get(key)
        row["oscillator_strength"] = result.get("emission_oscillator_strength")
    elif kind == "relax":
        ref, first = _labels(result)
        label = (result.get("states") or [None])[0]
        every = records.state_energies(result)
        if label not in (None, ref) and ref in every and energy is not None:
            row["emission_ev"] = (energy - every[ref]) * HARTREE_IN_EV
            absorb = _ev(refs.fc_excited, refs.fc_ground) if label == refs.excited_label else None
            if absorb is not None:
                row["stokes_shift_ev"] = absorb - row["emission_ev"]
    elif kind == "cross":
        row["vs_relaxed_ev"] = _ev(energy, refs.relaxed)
        row["vs_fc_ev"] = _ev(energy, refs.fc_excited)
        character = records.branching_kind(result)
        row["character"] = ", ".join(str(v) for k, v in character.items()
                                     if v is not None and k in ("kind", "topography", "paths", "probe"))
    return row


def molecule_rows(name: str, chain_status: str, folder: str | Path,
                  reason: str = "") -> list[dict[str, Any]]:
    """The rows of one molecule (one per task; one row with the reason if nothing ran)."""
    folder = Path(folder)
    summary = records.read_job_summary(folder) if folder.is_dir() else None
    tasks = (summary or {}).get("tasks") or []
    if not tasks:
        return [{**dict.fromkeys(COLUMNS), "molecule": name, "chain_status": chain_status,
                 "message": reason}]
    results = []
    for t in tasks:
        run_dir = t.get("run_dir")
        results.append((t, records.read_result(folder / run_dir) if run_dir else None))
    refs = _References(results)
    rows = []
    for t, r in results:
        row = {**dict.fromkeys(COLUMNS), "molecule": name, "chain_status": chain_status,
               **_task_row(t, r, refs)}
        row["folder"] = str(Path(folder.name) / t["run_dir"]) if t.get("run_dir") else folder.name
        if chain_status == "failed" and not row["message"]:
            row["message"] = reason
        rows.append(row)
    return rows


def _csv_text(rows: Iterable[Mapping[str, Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=COLUMNS, extrasaction="ignore",
                            lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: ("" if row.get(k) is None else
                             f"{row[k]:.6f}" if isinstance(row.get(k), float) else row[k])
                         for k in COLUMNS})
    return buffer.getvalue()


def write_summary(out: str | Path, document: Mapping[str, Any]) -> tuple[Path, Path]:
    """Write the batch summary as JSON and CSV (atomically); returns both paths."""
    from ..io.results import write_json_atomic

    out = Path(out)
    json_path = write_json_atomic(out / SUMMARY_JSON, document)
    csv_path = out / SUMMARY_CSV
    partial = csv_path.with_name(csv_path.name + ".partial")
    partial.write_text(_csv_text(document.get("rows", [])), encoding="utf-8")
    partial.replace(csv_path)
    return json_path, csv_path


def overview_plot(out: str | Path, rows: Sequence[Mapping[str, Any]]) -> Path | None:
    """Energy levels of every molecule (eV above its ground state at FC): absorption,
    relaxed excited state, emission and crossings. None without matplotlib."""
    from ..io.plots import _figure, _save

    made = _figure()
    if made is None:
        return None
    fig, ax = made
    names = list(dict.fromkeys(r["molecule"] for r in rows))
    marks = {"absorption": ("^", "tab:blue"), "relaxed excited state": ("o", "tab:green"),
             "crossing": ("x", "tab:red")}
    used: set[str] = set()
    for x, name in enumerate(names):
        mine = [r for r in rows if r["molecule"] == name]
        points = _levels(mine)
        if not points:
            ax.text(x, 0.0, mine[0].get("chain_status") or "-", rotation=90, ha="center",
                    va="bottom", fontsize="small", color="grey")
        for what, value in points:
            marker, colour = marks[what]
            ax.scatter([x], [value], marker=marker, color=colour,
                       label=None if what in used else what)
            used.add(what)
    ax.axhline(0.0, color="black", linewidth=0.8)
    ax.set_xticks(range(len(names)))
    ax.set_xticklabels(names, rotation=45, ha="right", fontsize="small")
    ax.set_ylabel("energy above the ground state at FC / eV")
    ax.set_title("absorption, relaxed excited state and crossings per molecule")
    if used:
        ax.legend(fontsize="small")
    return _save(fig, Path(out) / OVERVIEW_PNG)


def _levels(rows: Sequence[Mapping[str, Any]]) -> list[tuple[str, float]]:
    out: list[tuple[str, float]] = []
    for r in rows:
        if r.get("kind") in ("states", "emission") and r.get("absorption_ev") is not None:
            out.append(("absorption", r["absorption_ev"]))
        if r.get("kind") == "emission" and r.get("energy_ev") is not None:
            out.append(("relaxed excited state", r["energy_ev"]))
        if r.get("kind") == "relax" and r.get("emission_ev") is not None and r.get("energy_ev") is not None:
            out.append(("relaxed excited state", r["energy_ev"]))
        if r.get("kind") == "cross" and r.get("energy_ev") is not None and r.get("status") == "converged":
            out.append(("crossing", r["energy_ev"]))
    return out
