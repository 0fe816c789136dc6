"""Targets, measured ratios and the printed table (plain text, also valid Markdown)."""

from __future__ import annotations

from typing import Any, Iterable

# target: (description, comparison, threshold)
TARGETS = {
    "crossing_vs_penalty": ("default crossing search / penalty search, evaluations", "<=", 0.5),
    "crossing_vs_plain": ("default crossing search / plain composed gradient, evaluations",
                          "<=", 0.7),
    "minima_vs_pyberny": ("our minimizer / pyberny, evaluations", "<=", 0.8),
    "overhead": ("wall time outside the engine (states+gradients), fraction", "<", 0.03),
    "warm_start": ("cold / warm wall time per step (smallest over paths)", ">=", 1.5),
    "tracking": ("wrong-state steps with overlap tracking (total)", "<=", 0),
}


def _both_converged(runs: dict, a: str, b: str) -> bool:
    return bool(runs.get(a, {}).get("converged") and runs.get(b, {}).get("converged"))


def summed_ratio(rows: Iterable[dict], a: str, b: str) -> tuple[float | None, list[str]]:
    """sum(evaluations of a) / sum(evaluations of b) over the cases where both converged."""
    num = den = 0
    excluded = []
    for row in rows:
        runs = row["runs"]
        if a not in runs or b not in runs:
            continue
        if _both_converged(runs, a, b):
            num += runs[a]["evaluations"]
            den += runs[b]["evaluations"]
        else:
            excluded.append(row["case"])
    return (num / den if den else None), excluded


def evaluate_targets(results: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """Measured value and MET/MISSED (or 'n/a') for each target."""
    measured: dict[str, tuple[float | None, str]] = {}
    crossings = results.get("crossings", [])
    for key, other in (("crossing_vs_penalty", "penalty"), ("crossing_vs_plain", "plain")):
        value, excluded = summed_ratio(crossings, "auto", other)
        measured[key] = (value, f"not both converged: {', '.join(excluded)}" if excluded else "")
    minima = results.get("minima", [])
    value, excluded = summed_ratio(minima, "ours", "pyberny")
    measured["minima_vs_pyberny"] = (value, f"not both converged: {', '.join(excluded)}"
                                     if excluded else "")
    over = results.get("overhead")
    measured["overhead"] = (None if not over else over["fraction"], "")
    warm = [p["speedup"] for p in results.get("warm_start", []) if "speedup" in p]
    measured["warm_start"] = (min(warm) if warm else None, "")
    tracked = [p["tracking"]["wrong_steps"] for p in results.get("tracking", []) if "tracking" in p]
    measured["tracking"] = (float(sum(tracked)) if tracked else None, "")
    out = {}
    for key, (desc, op, threshold) in TARGETS.items():
        value, note = measured[key]
        if value is None:
            verdict = "n/a"
        else:
            ok = {"<=": value <= threshold, "<": value < threshold, ">=": value >= threshold}[op]
            verdict = "MET" if ok else "MISSED"
        out[key] = {"description": desc, "target": f"{op} {threshold:g}", "measured": value,
                    "verdict": verdict, "note": note}
    return out


def _fmt(x: Any, spec: str = "") -> str:
    if x is None:
        return "-"
    if isinstance(x, float) and spec:
        return format(x, spec)
    return str(x)


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    return lines


def _run_cell(run: dict) -> str:
    if run.get("status") == "not installed":
        return "not installed"
    mark = "" if run.get("converged") else " (not converged)"
    return f"{_fmt(run.get('evaluations'))}{mark}"


def crossing_lines(rows: list[dict]) -> list[str]:
    if not rows:
        return []
    names = list(rows[0]["runs"])
    header = ["crossing"] + [f"{n} evals" for n in names] + ["auto/penalty", "auto/plain",
                                                              "gap / mean E (Eh) per search"]
    body = []
    for row in rows:
        runs = row["runs"]
        cells = [row["case"]] + [_run_cell(runs[n]) for n in names]
        for other in ("penalty", "plain"):
            ok = _both_converged(runs, "auto", other)
            cells.append(_fmt(runs["auto"]["evaluations"] / runs[other]["evaluations"], ".2f")
                         if ok else "-")
        cells.append("; ".join(f"{n} {_fmt(runs[n].get('gap_eh'), '.1e')}/"
                               f"{_fmt(runs[n].get('mean_energy_eh'), '.5f')}" for n in names))
        cells.append("; ".join(f"{n} {_fmt(runs[n].get('residual_eh_bohr'), '.1e')}"
                               for n in names))
        body.append(cells)
    header.append("residual seam gradient (Eh/bohr) per search")
    return ["Crossing searches (engine evaluations to converge):", ""] + _table(header, body)


def jitter_lines(rows: list[dict], title: str, energy_key: str) -> list[str]:
    if not rows:
        return []
    body = []
    for row in rows:
        runs = row["runs"]
        evals = [r["evaluations"] for r in runs if r.get("evaluations") is not None]
        residual = [r.get("residual_eh_bohr") for r in runs if r.get("residual_eh_bohr") is not None]
        body.append([row["case"], f"{sum(bool(r['converged']) for r in runs)} of {len(runs)}",
                     f"{min(evals)}-{max(evals)}" if evals else "-",
                     "; ".join(_fmt(r.get(energy_key), ".6f") for r in runs),
                     _fmt(row.get("spread_eh"), ".1e"),
                     _fmt(max(residual), ".1e") if residual else "-",
                     "yes" if row["same_point"] else "NO"])
    header = ["case", "converged", "evals", "energies (Eh)", "spread (Eh)",
              "largest residual (Eh/bohr)", "same point (spread <= 5e-4 Eh)"]
    if not any(r["runs"] and "residual_eh_bohr" in r["runs"][0] for r in rows):
        header.pop(5)
        body = [b[:5] + b[6:] for b in body]
    return [title, ""] + _table(header, body)


def minima_lines(rows: list[dict]) -> list[str]:
    if not rows:
        return []
    names = list(rows[0]["runs"])
    header = ["minimum"] + [f"{n} evals" for n in names] + ["ours/pyberny", "energies (Eh)"]
    body = []
    for row in rows:
        runs = row["runs"]
        cells = [row["case"]] + [_run_cell(runs[n]) for n in names]
        ok = _both_converged(runs, "ours", "pyberny")
        cells.append(_fmt(runs["ours"]["evaluations"] / runs["pyberny"]["evaluations"], ".2f")
                     if ok else "-")
        cells.append("; ".join(f"{n} {_fmt(runs[n].get('energy_eh'), '.6f')}" for n in names))
        body.append(cells)
    return ["Minima (engine evaluations to converge):", ""] + _table(header, body)


def warm_lines(rows: list[dict]) -> list[str]:
    body = []
    for p in rows:
        if "error" in p:
            body.append([p["case"], "error: " + p["error"], "", "", ""])
            continue
        c, w = p["cold"], p["warm"]
        body.append([p["case"], str(c["points"]),
                     f"{c['scf_cycles_per_step']:.1f} / {w['scf_cycles_per_step']:.1f}",
                     f"{c['response_iterations_per_step']:.1f} / "
                     f"{w['response_iterations_per_step']:.1f}",
                     f"{c['wall_s_per_step']:.3f} / {w['wall_s_per_step']:.3f} "
                     f"(x{p['speedup']:.2f})"])
    header = ["path", "points", "SCF cycles/step cold / warm",
              "response iterations/step cold / warm", "wall s/step cold / warm"]
    return ["Warm starts (same path replayed):", ""] + _table(header, body) if rows else []


def tracking_lines(rows: list[dict]) -> list[str]:
    body = []
    for p in rows:
        if "error" in p:
            body.append([p["case"], "error: " + p["error"], ""])
            continue
        t, a = p["tracking"], p["adiabatic_index"]
        body.append([p["case"], f"{t['wrong_steps']} of {t['steps']}",
                     f"{a['wrong_steps']} of {a['steps']}"])
    header = ["path", "wrong-state steps, overlap tracking", "wrong-state steps, adiabatic index"]
    return ["State tracking (wrong = other irrep than at the start):", ""] + _table(header, body) \
        if rows else []


def target_lines(targets: dict[str, dict]) -> list[str]:
    body = [[t["description"], t["target"], _fmt(t["measured"], ".3g"), t["verdict"], t["note"]]
            for t in targets.values()]
    return ["Targets:", ""] + _table(["measure", "target", "measured", "verdict", "note"], body)


def render(results: dict[str, Any]) -> str:
    blocks = [crossing_lines(results.get("crossings", [])),
              jitter_lines(results.get("crossing_jitter", []),
                           "Default crossing search from 3 starts jittered by 1e-3 angstrom "
                           "(seeds 1-3):", "mean_energy_eh"),
              minima_lines(results.get("minima", [])),
              jitter_lines(results.get("minima_jitter", []),
                           "Our minimizer from 3 starts jittered by 1e-3 angstrom (seeds 1-3):",
                           "energy_eh"),
              warm_lines(results.get("warm_start", [])),
              tracking_lines(results.get("tracking", []))]
    over = results.get("overhead")
    if over:
        blocks.append([f"Overhead: {over['fraction'] * 100:.2f} % of wall time outside the "
                       f"engine's states+gradients ({over['overlaps_fraction'] * 100:.2f} % in "
                       f"overlap calculations for tracking), over {over['runs']} runs, "
                       f"{over['wall_s']:.1f} s"])
    blocks.append(target_lines(results["targets"]))
    return "\n\n".join("\n".join(b) for b in blocks if b)
