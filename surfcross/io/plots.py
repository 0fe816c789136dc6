"""Plots of a run (PNG): state energies vs step, gap vs step, energy profiles.

matplotlib is optional (extra ``plot``). Without it every function returns None and
:data:`NO_PLOTS_NOTE` explains why; nothing raises. Figures are drawn with the Agg canvas
directly, so the global matplotlib backend of the caller is left alone.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from ..units import HARTREE_IN_EV

__all__ = ["NO_PLOTS_NOTE", "have_matplotlib", "plot_energies", "plot_gap", "plot_profile",
           "history_plots"]

NO_PLOTS_NOTE = "matplotlib is not installed, so no plots were made (pip install 'surfcross[plot]')."


def _figure():
    """A (figure, axes) pair on an Agg canvas, or None without matplotlib."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        return None
    fig = Figure(figsize=(6.4, 4.2), dpi=100)
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot(1, 1, 1)


def have_matplotlib() -> bool:
    """True when matplotlib can be imported."""
    try:
        import matplotlib
    except ImportError:
        return False
    return matplotlib is not None


def _save(fig: Any, path: str | os.PathLike) -> Path:
    path = Path(path)
    fig.tight_layout()
    fig.savefig(path, format="png")
    return path


def plot_energies(path: str | os.PathLike, steps: Sequence[int],
                  energies_eh: Mapping[str, Sequence[float]], *,
                  reference_eh: float | None = None,
                  followed_eh: Mapping[str, Sequence[float]] | None = None) -> Path | None:
    """Energies against the step number (eV above ``reference_eh``, default the lowest value).

    ``energies_eh`` are the adiabatic roots (energy order at each step: thin, dashed lines
    labelled 'root S1', ...); ``followed_eh`` the followed states (thick lines under their
    task labels), which may pass from one root to another.
    """
    made = _figure()
    if made is None:
        return None
    fig, ax = made
    values = {k: np.asarray(v, float) for k, v in energies_eh.items()}
    followed = {k: np.asarray(v, float) for k, v in (followed_eh or {}).items()}
    finite = [v[np.isfinite(v)] for v in list(values.values()) + list(followed.values())]
    base = reference_eh if reference_eh is not None else min(float(f.min()) for f in finite if f.size)
    for label, curve in values.items():
        ax.plot(steps, (curve - base) * HARTREE_IN_EV, marker=".", markersize=2, linewidth=0.8,
                linestyle="--", label=f"root {label}")
    for label, curve in followed.items():
        ax.plot(steps, (curve - base) * HARTREE_IN_EV, marker="o", markersize=4, linewidth=2.5,
                label=f"{label} (followed)")
    ax.set_xlabel("step")
    ax.set_ylabel("energy / eV")
    ax.set_title("followed states and adiabatic roots along the optimization")
    ax.legend(fontsize="small")
    return _save(fig, path)


def plot_gap(path: str | os.PathLike, steps: Sequence[int], gap_ev: Sequence[float]) -> Path | None:
    """Gap between the followed states (eV, log scale when positive) against the step."""
    made = _figure()
    if made is None:
        return None
    fig, ax = made
    gap = np.abs(np.asarray(gap_ev, float))
    ax.plot(steps, gap, marker="o", markersize=3)
    if np.all(gap[np.isfinite(gap)] > 0):
        ax.set_yscale("log")
    ax.set_xlabel("step")
    ax.set_ylabel("gap / eV")
    ax.set_title("energy gap of the followed states")
    return _save(fig, path)


def plot_profile(path: str | os.PathLike, x: Sequence[float],
                 curves_ev: Mapping[str, Sequence[float]], *, xlabel: str = "point",
                 ylabel: str = "energy / eV", title: str = "energy profile") -> Path | None:
    """Energy curves along a pathway or scan coordinate (values already in the plot units)."""
    made = _figure()
    if made is None:
        return None
    fig, ax = made
    for label, curve in curves_ev.items():
        ax.plot(x, np.asarray(curve, float), marker="o", markersize=3, label=label)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    if curves_ev:
        ax.legend(fontsize="small")
    return _save(fig, path)


def history_plots(directory: str | os.PathLike, history: Mapping[str, np.ndarray],
                  state_labels: Sequence[str], target_labels: Sequence[str] = ()) -> list[Path]:
    """energies.png (and gap.png when a gap was recorded) from checkpoint history arrays;
    accepted steps only. ``state_labels`` name the adiabatic columns of
    ``state_energies_eh``, ``target_labels`` the followed columns of ``target_energies_eh``.
    Returns the files written (empty without matplotlib or history)."""
    if not history or not have_matplotlib():
        return []
    directory = Path(directory)
    keep = np.asarray(history["accepted"], bool)
    steps = np.asarray(history["iteration"])[keep]
    table = np.asarray(history["state_energies_eh"])[keep]
    if not steps.size:
        return []
    made = []
    energies = {lab: table[:, j] for j, lab in enumerate(state_labels)}
    followed = {}
    if target_labels and "target_energies_eh" in history:
        targets = np.asarray(history["target_energies_eh"])[keep]
        followed = {lab: targets[:, j] for j, lab in enumerate(target_labels)}
    out = plot_energies(directory / "energies.png", steps, energies, followed_eh=followed)
    made += [out] if out else []
    gap_ev = np.asarray(history["gap_eh"])[keep] * HARTREE_IN_EV
    if np.any(np.isfinite(gap_ev)):
        out = plot_gap(directory / "gap.png", steps, gap_ev)
        made += [out] if out else []
    return made
