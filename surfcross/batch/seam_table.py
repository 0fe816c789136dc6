"""The table of a seam exploration: seam_crossings.json, .csv and .xyz."""

from __future__ import annotations

import csv
import io
from typing import Any

from ..analysis.vertical import limits_note
from ..engine.base import MethodSpec
from ..geometry import write_xyz
from ..io.results import write_json_atomic

__all__ = ["SEAM_JSON", "SEAM_CSV", "SEAM_XYZ", "TABLE_COLUMNS", "CAUTION", "seam_rows",
           "write_table"]

SEAM_JSON, SEAM_CSV, SEAM_XYZ = "seam_crossings.json", "seam_crossings.csv", "seam_crossings.xyz"

CAUTION = ("Distinct crossings of the chosen method only: a seam can hold minima no start "
           "reached, and linear-response methods misplace crossings with the ground state. "
           "Check the crossings you rely on with higher-level methods.")

TABLE_COLUMNS = ("crossing", "energy_eh", "vs_lowest_ev", "vs_centre_ev", "gap_ev", "kind",
                 "topography", "paths", "probe", "count", "starts", "folder")


def seam_rows(result: Any, centre_state: str) -> list[dict[str, Any]]:
    if not result.crossings:
        return []
    lowest = min(c.energy_eh for c in result.crossings)
    centre = result.centre_energies_eh.get(centre_state)
    return [c.row(lowest, centre) for c in result.crossings]


def write_table(result: Any, labels: list[str], method: MethodSpec, merge: Any,
           centre_state: str) -> None:
    rows = seam_rows(result, centre_state)
    doc = {"format": "surfcross-seam", "version": 1, "states": labels,
           "centre_state": centre_state, "centre_energies_eh": dict(result.centre_energies_eh),
           "merge": {"rmsd_angstrom": merge.rmsd_angstrom, "energy_eh": merge.energy_eh,
                     "mirror_images_equal": merge.mirror},
           "interrupted": result.interrupted, "crossings": rows,
           "searches": [{k: v for k, v in s.items() if k not in ("coords_bohr", "plane")}
                        for s in result.searches],
           "notes": list(result.notes), "method_note": limits_note(method), "caution": CAUTION}
    write_json_atomic(result.folder / SEAM_JSON, doc)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=TABLE_COLUMNS, extrasaction="ignore",
                            lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({k: (" ".join(row[k]) if k == "starts" else
                             "" if row.get(k) is None else
                             f"{row[k]:.6f}" if isinstance(row.get(k), float) else row[k])
                         for k in TABLE_COLUMNS})
    (result.folder / SEAM_CSV).write_text(buffer.getvalue(), encoding="utf-8")
    if result.crossings:
        write_xyz(result.folder / SEAM_XYZ, [c.geometry for c in result.crossings],
                  [f"{c.label} E={c.energy_eh:.10f} Eh starts={','.join(c.starts)}"
                   for c in result.crossings])
