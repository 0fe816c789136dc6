"""Progress lines: one line per optimizer step, and a header listing every setting.

Everything goes through the logger ``surfcross.progress`` at INFO level; the command line
decides where it ends up. Example line::

    step   4  E(S1) -74.512345678  gap 0.0672 eV  Fmax 1.23e-03  step 0.0412  trust 0.300  3.2 s
"""

from __future__ import annotations

import logging
from typing import Any, Iterable, Mapping

from ..units import HARTREE_IN_EV

__all__ = ["logger", "flatten_settings", "settings_lines", "log_settings", "step_line",
           "ProgressWriter"]

logger = logging.getLogger("surfcross.progress")


def flatten_settings(settings: Mapping[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    """Nested settings -> [('optimizer.max_steps', 100), ...] in the given order."""
    out: list[tuple[str, Any]] = []
    for key, value in settings.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value:
            out.extend(flatten_settings(value, name + "."))
        else:
            out.append((name, value))
    return out


def _show(value: Any) -> str:
    if isinstance(value, (list, tuple)):
        return ", ".join(_show(v) for v in value) if value else "(none)"
    if value is None:
        return "(none)"
    if hasattr(value, "natom") and hasattr(value, "symbols"):
        return f"{value.natom} atoms, charge {value.charge}, 2S {value.spin}"
    return str(value)


def settings_lines(settings: Mapping[str, Any], title: str = "settings") -> list[str]:
    """The header as text lines: every effective setting, one per line, aligned."""
    items = flatten_settings(settings)
    width = max((len(k) for k, _ in items), default=0)
    return [f"-- {title} --"] + [f"  {k:<{width}}  {_show(v)}" for k, v in items]


def log_settings(settings: Mapping[str, Any], title: str = "settings") -> None:
    """Log the settings header at INFO level."""
    for line in settings_lines(settings, title):
        logger.info(line)


def _roots(value: Any) -> tuple[str, ...]:
    """Adiabatic roots that carry the followed states (tracking record, else info['root(s)'])."""
    tracking = getattr(value, "tracking", None)
    if tracking is not None and getattr(tracking, "roots", None):
        return tuple(str(r) for r in tracking.roots)
    info = getattr(value, "info", {}) or {}
    if "roots" in info:
        return tuple(str(r) for r in info["roots"])
    if "root" in info:
        return (str(info["root"]),)
    return ()


def step_line(record: Any, previous_roots: Iterable[str] = ()) -> str:
    """One progress line for a StepRecord; names the roots followed when they changed."""
    value = record.value
    parts = [f"step {record.iteration:3d}"]
    parts += [f"E({label}) {energy:.9f}" for label, energy in value.energies_eh.items()]
    if not value.energies_eh:
        parts.append(f"value {value.value:.9f}")
    if value.gap_eh is not None:
        parts.append(f"gap {value.gap_eh * HARTREE_IN_EV:.4f} eV")
    parts.append(f"Fmax {record.max_force:.2e}")
    parts.append(f"step {record.step_length:.4f}")
    parts.append(f"trust {record.trust_radius:.3f}")
    parts.append(f"{record.elapsed_s:.1f} s")
    roots = _roots(value)
    previous = tuple(previous_roots)
    if roots and roots != previous:
        tracking = getattr(value, "tracking", None)
        targets = tuple(getattr(tracking, "targets", ()) or value.energies_eh) or roots
        # a pair lists its roots by energy: use the tracker's target -> root assignment
        assignment = dict((getattr(tracking, "info", None) or {}).get("assignment", {}))
        if assignment:
            follow = ", ".join(f"{t} on root {r}" for t, r in assignment.items())
        elif len(targets) == 2 and len(roots) == 2:
            follow = f"{targets[0]}/{targets[1]} on roots {roots[0]} (lower), {roots[1]} (upper)"
        else:
            follow = ", ".join(f"{t} on root {r}" for t, r in zip(targets, roots))
        parts.append(f"[following {follow}]" if not previous else f"[root change: {follow}]")
    if record.converged:
        parts.append("[converged]")
    if not record.accepted:
        why = record.message.removeprefix("rejected").lstrip(": ")
        parts.append("[rejected" + (f": {why}]" if why else "]"))
    elif record.message:
        parts.append(f"({record.message})")
    return "  ".join(parts)


class ProgressWriter:
    """Observer logging one line per StepRecord to ``surfcross.progress``."""

    def __init__(self) -> None:
        self._roots: tuple[str, ...] = ()

    def __call__(self, record: Any) -> None:
        logger.info(step_line(record, self._roots))
        if record.accepted:
            self._roots = _roots(record.value) or self._roots
