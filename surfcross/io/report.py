"""``report.md``: a human-readable account of one task, built from plain data.

:func:`render_report` takes the result dict (the content of result.json) plus the convergence
criteria of the last step and optional extra sections, and returns Markdown text. It always
ends with the known limits of the method used and the caution that results need checking with
higher-level methods.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Mapping, Sequence

from ..states import parse_state
from ..units import HARTREE_IN_EV

__all__ = ["method_limits", "CAUTION", "render_report", "reference_label"]

CAUTION = ("These numbers come from a model. Check any geometry or energy you rely on with a "
           "higher-level method (for example a multireference calculation) and, where possible, "
           "against experiment.")


def method_limits(method: Mapping[str, Any], states: Sequence[str] = ()) -> list[str]:
    """Known limits of ``method`` that matter for a task on ``states``, as sentences."""
    name = str(method.get("method", "")).lower()
    basis = str(method.get("basis", "")).lower()
    notes: list[str] = []
    response = name in ("cis", "tda", "tdhf", "tddft")
    labels = [parse_state(s) for s in states]
    if response:
        notes.append(
            "Linear response from one reference determinant has no doubly excited states, and "
            "charge-transfer or Rydberg states depend strongly on the functional and basis.")
        # the reference with a response state of its own spin (a singlet/triplet pair
        # crosses on a seam of the right dimension)
        if any(a.is_reference and not b.is_reference and a.manifold == b.manifold
               for a in labels for b in labels):
            notes.append(
                "This crossing involves the reference (ground) state. In CIS/TDA/TDHF/TDDFT the "
                "reference does not couple to the response states, so its crossings with them "
                "have the wrong dimensionality (a seam one dimension too large): the point found "
                "is a crossing of the wrong shape. Use state-averaged CASSCF or a spin-flip "
                "method for ground-state funnels.")
        if name == "tdhf" or name == "tddft":
            notes.append(
                "Full linear response (TDHF/TDDFT) can become unstable near degeneracies with "
                "the ground state; the Tamm-Dancoff variant (tda) is more robust there.")
        if name == "cis" or (name == "tda" and not method.get("xc")):
            notes.append("CIS lacks electron correlation: excitation energies are typically "
                         "too high by an electronvolt or more.")
    if len(labels) == 2 and labels[0].manifold != labels[1].manifold:
        notes.append(
            "A crossing of states of different spin is a geometric landmark only: how fast the "
            "molecule changes spin there depends on the spin-orbit coupling, which is not "
            "computed here.")
    if name == "casscf":
        notes.append("State-averaged CASSCF depends on the active space and state weights and "
                     "lacks dynamic correlation; energies need a perturbative correction.")
    if basis in ("sto-3g", "sto3g", "minao"):
        notes.append("A minimal basis set (STO-3G) is for tests and demonstrations only.")
    return notes


def reference_label(energies_eh: Mapping[str, float]) -> str | None:
    """The label energies are quoted against: S0 or 0 when computed, else the lowest state."""
    for label in energies_eh:
        try:
            if parse_state(label).is_reference:
                return label
        except ValueError:
            continue
    return min(energies_eh, key=energies_eh.get) if energies_eh else None


def _fmt(value: Any) -> str:
    if isinstance(value, bool) or value is None:
        return {True: "yes", False: "no", None: "-"}[value]
    if isinstance(value, float):
        if not math.isfinite(value):
            return "-"
        return f"{value:.6g}" if abs(value) >= 1e-3 or value == 0.0 else f"{value:.3e}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_fmt(v) for v in value)
    return str(value)


def _table(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> list[str]:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join(" --- " for _ in header) + "|"]
    lines += ["| " + " | ".join(_fmt(c) if not isinstance(c, str) else c for c in row) + " |"
              for row in rows]
    return lines


def _field(item: Any, key: str, default: Any = None) -> Any:
    """``item[key]`` for dicts, ``item.key`` for objects such as Criterion."""
    if isinstance(item, Mapping):
        return item.get(key, default)
    return getattr(item, key, default)


def _criteria_section(criteria: Sequence[Any]) -> list[str]:
    if not criteria:
        return ["No convergence tests were recorded for this task."]
    rows = []
    for c in criteria:
        value, threshold = float(_field(c, "value")), float(_field(c, "threshold"))
        rows.append((str(_field(c, "name")), f"{value:.3e}", f"{threshold:.3e}",
                     str(_field(c, "unit", "") or ""), "yes" if abs(value) <= threshold else "no"))
    return _table(("criterion", "value", "threshold", "unit", "passed"), rows)


def _finite(energies: Mapping[str, Any] | None) -> dict[str, float]:
    return {k: float(v) for k, v in (energies or {}).items() if v is not None}


def _energy_section(result: Mapping[str, Any]) -> list[str]:
    """Two tables: the followed states (task labels: names at the start geometry, followed by
    overlap) with the adiabatic root carrying each, and every computed state in energy order
    at the final geometry with the followed state it carries."""
    followed = _finite(result.get("energies_eh"))
    adiabatic = _finite(result.get("adiabatic_energies_eh")) or followed
    if not followed and not adiabatic:
        return ["No energies were recorded."]
    roots = {str(k): str(v) for k, v in (result.get("followed_roots") or {}).items()}
    ref = reference_label(adiabatic)
    base = adiabatic[ref]
    lines: list[str] = []
    same = (set(followed) == set(adiabatic)
            and all(roots.get(k, k) == k for k in followed))
    if followed and not same:
        rows = [(f"**{label}**", f"{e:.10f}", f"{(e - base) * HARTREE_IN_EV:.4f}",
                 roots.get(label, "-")) for label, e in followed.items()]
        lines += ["Followed states (named by their order at the start geometry and followed by "
                  f"wavefunction overlap; eV relative to {ref} at the final geometry):", ""]
        lines += _table(("followed state", "energy / Eh", f"above {ref} / eV",
                         "adiabatic root here"), rows)
        lines += [""]
    carried = {}
    for label, root in roots.items():
        carried.setdefault(root, []).append(label)
    irreps = result.get("irreps") or {}  # point-group labels of the adiabatic roots
    rows = [(f"**{label}**" if label in carried else label, f"{e:.10f}",
             f"{(e - base) * HARTREE_IN_EV:.4f}")
            + ((irreps.get(label) or "-",) if irreps else ())
            + (", ".join(carried.get(label, [])) or "-",)
            for label, e in adiabatic.items()]
    lines += [f"All computed states at the final geometry, labelled by their energy order there "
              f"(adiabatic roots; eV relative to {ref}):", ""]
    header = ("adiabatic root", "energy / Eh", f"above {ref} / eV")
    if irreps:
        header += (f"irrep ({result.get('point_group', '?')})",)
    lines += _table(header + ("carries followed state",), rows)
    gap = result.get("gap_ev")
    if gap is not None:
        gap_eh = result.get("gap_eh", gap / HARTREE_IN_EV)
        lines += ["", f"Gap between the followed states: {gap:.5f} eV ({gap_eh:.3e} Eh)."]
    return lines


def _list_section(items: Sequence[str], empty: str) -> list[str]:
    return [f"- {item}" for item in items] if items else [empty]


def render_report(result: Mapping[str, Any], *, criteria: Sequence[Any] = (),
                  branching: Mapping[str, Any] | None = None, reorderings: Sequence[str] = (),
                  sections: Sequence[tuple[str, str]] = (), plots: Sequence[str] = (),
                  notes: Sequence[str] = (), limits: Sequence[str] | None = None) -> str:
    """Markdown report of one task.

    Parameters
    ----------
    result
        The result dict (result.json content: task, converged, method, energies_eh, ...).
    criteria
        Convergence tests of the last step (:class:`Criterion` objects or dicts with name,
        value, threshold, unit).
    branching
        Characterization of a crossing (pitch, asymmetry, tilt, topography, ...); defaults to
        ``result['branching']`` when present.
    reorderings
        Notes on followed states that moved to other adiabatic roots.
    sections
        Extra (title, Markdown body) sections added before the limits.
    plots
        Image files of the run directory to link.
    notes
        Short remarks (e.g. why no plots were made).
    limits
        Method limits to state; default :func:`method_limits` of the result's method.
    """
    method = result.get("method") or {}
    states = [str(s) for s in result.get("states") or []]
    status = "converged" if result.get("converged") else "NOT converged"
    head = [f"# surfcross {result.get('task', 'task')}: {', '.join(states) or 'states'}", ""]
    head += [f"- Result: **{status}**" + (f" ({result['message']})" if result.get("message") else ""),
             f"- Steps: {result.get('iterations', '-')}, engine evaluations: "
             f"{result.get('evaluations', '-')}",
             f"- Method: {method.get('method', '-')} on {method.get('xc') or 'HF'}, basis "
             f"{method.get('basis', '-')}, {method.get('roots', '-')} excited roots"]
    if result.get("search"):
        head.append(f"- Crossing search: {result['search']}")
    if result.get("final_xyz"):
        head.append(f"- Final geometry: `{result['final_xyz']}`")
    out = head + ["", "## Convergence", ""] + _criteria_section(criteria)
    out += ["", "## Energies", ""] + _energy_section(result)
    branching = branching if branching is not None else result.get("branching")
    if branching:
        out += ["", "## Branching-plane analysis", ""]
        out += _table(("quantity", "value"), [(k, _fmt(v)) for k, v in branching.items()])
    out += ["", "## State tracking", ""]
    out += _list_section(list(reorderings), "No followed state changed its adiabatic root.")
    for title, body in sections:
        out += ["", f"## {title}", "", body.rstrip()]
    if plots:
        out += ["", "## Plots", ""] + [f"![{p}]({p})" for p in plots]
    out += ["", "## Warnings", ""]
    out += _list_section(list(result.get("warnings") or []) + list(notes), "None.")
    lims = method_limits(method, states) if limits is None else list(limits)
    out += ["", "## Limits of the method", ""] + _list_section(lims, "None specific to this task.")
    out += ["", CAUTION, ""]
    return "\n".join(out)
