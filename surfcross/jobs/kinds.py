"""Task kinds of job files and how their keys are checked.

:data:`TASK_KINDS` maps each kind to its allowed keys (:class:`KeyRule`); a new kind is added
in one place with :func:`register_task_kind`. Unknown keys are errors naming the nearest
valid key (difflib).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

from ..errors import InputError
from ..states import parse_state, parse_states

__all__ = ["KeyRule", "TaskKind", "TASK_KINDS", "TASK_BASE_KEYS", "register_task_kind",
           "check_keys", "check_value", "Context", "fail"]

TASK_BASE_KEYS = ("name", "kind", "from")


def fail(where: str, message: str) -> InputError:
    return InputError(f"{where}: {message}")


def check_keys(given: Mapping[str, Any], allowed: tuple[str, ...] | list[str], where: str) -> None:
    """InputError for the first unknown key, naming the nearest allowed key."""
    for key in given:
        if key not in allowed:
            near = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
            hint = f"did you mean '{near[0]}'?" if near else f"valid keys: {', '.join(allowed)}"
            raise fail(where, f"unknown key '{key}'; {hint}")


# ------------------------------------------------------------------------------ key rules
@dataclass(frozen=True, kw_only=True)
class KeyRule:
    """How one task key is checked.

    ``type`` is one of: int, float, bool, str, choice, state, states, pair, atoms, floats,
    geometries. ``low``/``high`` bound numbers (exclusive for floats when ``open_low``).
    """

    type: str
    doc: str
    required: bool = False
    choices: tuple[str, ...] = ()
    low: float | None = None
    high: float | None = None
    open_low: bool = False
    length: tuple[int, int] | None = None  # allowed list length (min, max)


def _number(value: Any, rule: KeyRule, key: str, where: str, integer: bool) -> Any:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or (integer and not isinstance(value, int)):
        raise fail(where, f"'{key}' must be {'an integer' if integer else 'a number'}, got {value!r}")
    if rule.low is not None and (value <= rule.low if rule.open_low else value < rule.low):
        raise fail(where, f"'{key}' must be {'>' if rule.open_low else '>='} {rule.low:g}, got {value}")
    if rule.high is not None and value > rule.high:
        raise fail(where, f"'{key}' must be <= {rule.high:g}, got {value}")
    return int(value) if integer else float(value)


def _list(value: Any, rule: KeyRule, key: str, where: str) -> list:
    if not isinstance(value, list):
        raise fail(where, f"'{key}' must be a list, got {value!r}")
    if rule.length and not rule.length[0] <= len(value) <= rule.length[1]:
        lo, hi = rule.length
        size = str(lo) if lo == hi else f"{lo} to {hi}" if hi < 10**6 else f"at least {lo}"
        raise fail(where, f"'{key}' needs {size} entries, got {len(value)}")
    return value


def check_value(key: str, value: Any, rule: KeyRule, where: str, ctx: "Context") -> Any:
    t = rule.type
    try:
        if t in ("int", "float"):
            return _number(value, rule, key, where, t == "int")
        if t == "bool":
            if not isinstance(value, bool):
                raise fail(where, f"'{key}' must be true or false, got {value!r}")
            return value
        if t in ("str", "choice"):
            if not isinstance(value, str) or not value.strip():
                raise fail(where, f"'{key}' must be a non-empty string, got {value!r}")
            text = value.strip().lower() if t == "choice" else value.strip()
            if t == "choice" and text not in rule.choices:
                raise fail(where, f"'{key}' must be one of {', '.join(rule.choices)}, got {value!r}")
            return text
        if t == "state":
            return str(parse_state(value if isinstance(value, str) else str(value)))
        if t in ("states", "pair"):
            items = _list(value, rule, key, where)
            return tuple(str(s) for s in parse_states([str(v) for v in items]))
        if t == "atoms":
            items = _list(value, rule, key, where)
            atoms = tuple(_number(v, KeyRule(type="int", doc="", low=1, high=ctx.natom), key, where, True)
                          for v in items)
            if len(set(atoms)) != len(atoms):
                raise fail(where, f"'{key}' names the same atom twice: {list(atoms)}")
            return atoms
        if t == "floats":
            items = _list(value, rule, key, where)
            return tuple(_number(v, KeyRule(type="float", doc=""), key, where, False) for v in items)
        if t == "geometries":
            return tuple(ctx.geometry_ref(v, key, where) for v in _list(value, rule, key, where))
    except InputError as exc:
        if str(exc).startswith(where):
            raise
        raise fail(where, f"'{key}': {exc}") from None
    raise ValueError(f"unknown key rule type {t!r}")  # a registry mistake, not user input


@dataclass(frozen=True, kw_only=True)
class TaskKind:
    """A task kind: its keys and whether it ends with one geometry others can start from."""

    name: str
    doc: str
    keys: Mapping[str, KeyRule]
    gives_geometry: bool = True
    check: Callable[[dict[str, Any], str], None] | None = None


#: registry of task kinds (name -> TaskKind)
TASK_KINDS: dict[str, TaskKind] = {}


def register_task_kind(kind: TaskKind) -> None:
    """Add (or replace) a task kind in :data:`TASK_KINDS`."""
    clash = set(kind.keys) & set(TASK_BASE_KEYS)
    if clash:
        raise ValueError(f"task kind {kind.name!r} redefines the common key(s) {sorted(clash)}")
    TASK_KINDS[kind.name] = kind


def _searches() -> tuple[str, ...]:
    from ..objectives.searches import SEARCHES
    return tuple(SEARCHES)


def _presets() -> tuple[str, ...]:
    from ..optimize.settings import CONVERGENCE_PRESETS
    return tuple(CONVERGENCE_PRESETS)


# names follow surfcross.optimize.settings (OptimizerSettings, ConvergenceSettings)
_OPT = {
    "max_iterations": KeyRule(type="int", low=1, doc="largest number of optimizer steps"),
    "convergence": KeyRule(type="choice", choices=_presets(), doc="threshold set: loose, normal or tight"),
    "coordinates": KeyRule(type="choice", choices=("internal", "cartesian"),
                           doc="coordinate system of the steps"),
    "trust_radius": KeyRule(type="float", low=0.0, open_low=True, doc="initial trust radius, bohr"),
    "max_force": KeyRule(type="float", low=0.0, open_low=True, doc="threshold of the largest gradient component, Eh/bohr"),
    "rms_force": KeyRule(type="float", low=0.0, open_low=True, doc="threshold of the RMS gradient, Eh/bohr"),
    "max_step": KeyRule(type="float", low=0.0, open_low=True, doc="threshold of the largest step component, bohr"),
    "rms_step": KeyRule(type="float", low=0.0, open_low=True, doc="threshold of the RMS step, bohr"),
    "energy_change": KeyRule(type="float", low=0.0, open_low=True, doc="threshold of the energy change, Eh"),
    "overlap_threshold": KeyRule(type="float", low=0.0, high=1.0, open_low=True,
                                 doc="smallest wavefunction overlap accepted when following a state"),
    "frozen_atoms": KeyRule(type="atoms", length=(1, 10**9), doc="atoms held fixed (1-based)"),
    "follow_instability": KeyRule(type="bool", doc="move to the lower SCF solution when the "
                                  "reference becomes unstable mid-run (default: report it)"),
}


def _check_scan(options: dict[str, Any], where: str) -> None:
    if options.get("relax") and "state" not in options and "along_seam" not in options:
        raise fail(where, "a relaxed scan ('relax = true') needs 'state', the state minimized "
                          "(or 'along_seam', two states)")
    if "along_seam" in options and options.get("relax") is False:
        raise fail(where, "a scan along a seam minimizes at every point: drop 'relax = false'")


for _kind in (
    TaskKind(name="states", doc="vertical states at the geometry: energies, oscillator strengths, transitions",
             keys={"show": KeyRule(type="states", length=(1, 10**9), doc="states to list first")}),
    TaskKind(name="relax", doc="minimum of one state (ground or excited), followed by overlap",
             keys={"state": KeyRule(type="state", required=True, doc="state to minimize, e.g. S1"), **_OPT}),
    TaskKind(name="cross", doc="minimum-energy crossing point of two states",
             keys={"states": KeyRule(type="pair", required=True, length=(2, 2), doc="the two states, e.g. [\"S1\", \"S2\"]"),
                   "search": KeyRule(type="choice", choices=_searches(),
                                     doc="crossing search: auto, penalty, projected or spin"),
                   "gap_tolerance": KeyRule(type="float", low=0.0, open_low=True,
                                            doc="largest gap accepted at the crossing, Eh"),
                   **_OPT}),
    TaskKind(name="emission", doc="absorption, relaxed excited state, emission, Stokes shift",
             keys={"state": KeyRule(type="state", doc="emitting state (default S1)"),
                   "relax_ground": KeyRule(type="bool", doc="relax the ground state first even "
                                           "when the start passes the force threshold"),
                   "zero_point": KeyRule(type="bool", doc="frequencies at both minima and the "
                                         "zero-point corrected 0-0 energy"),
                   **_OPT}),
    TaskKind(name="path", doc="interpolated pathway through geometries, with all state energies",
             gives_geometry=False,
             keys={"geometries": KeyRule(type="geometries", required=True, length=(2, 10**9),
                                         doc="XYZ files (relative to the job file) or names of earlier tasks"),
                   "images": KeyRule(type="int", low=1, doc="points between consecutive geometries"),
                   "interpolation": KeyRule(type="choice", choices=("cartesian", "internal"),
                                            doc="how geometries are interpolated"),
                   "show": KeyRule(type="states", length=(1, 10**9), doc="states to draw (default all)"),
                   "mass_weighted": KeyRule(type="bool", doc="mass-weighted path length and alignment")}),
    TaskKind(name="scan", doc="energies along one bond, angle or dihedral",
             check=_check_scan,
             keys={"atoms": KeyRule(type="atoms", required=True, length=(2, 4),
                                    doc="2 (bond), 3 (angle) or 4 (dihedral) atoms, 1-based"),
                   "values": KeyRule(type="floats", required=True, length=(1, 10**9),
                                     doc="coordinate values: angstrom for bonds, degrees for angles"),
                   "relax": KeyRule(type="bool", doc="minimize the other coordinates at each point"),
                   "state": KeyRule(type="state", doc="state minimized in a relaxed scan"),
                   "along_seam": KeyRule(type="pair", length=(2, 2),
                                         doc="two states: crossing point (penalty search) at each value"),
                   "companion": KeyRule(type="atoms", length=(2, 4),
                                        doc="a second coordinate of the same kind moved by the same amount and held"),
                   **_OPT}),
):
    register_task_kind(_kind)



@dataclass
class Context:
    source: str
    base_dir: Path
    natom: int
    earlier: dict[str, TaskKind] = field(default_factory=dict)

    def geometry_ref(self, value: Any, key: str, where: str) -> tuple[str, str]:
        if not isinstance(value, str) or not value.strip():
            raise fail(where, f"'{key}' entries must be file names or task names, got {value!r}")
        text = value.strip()
        if text.lower().endswith(".xyz"):
            path = (self.base_dir / text).resolve()
            if not path.is_file():
                raise fail(where, f"'{key}': geometry file {str(path)!r} does not exist")
            return ("file", str(path))
        return ("task", self.task_ref(text, where, key))

    def task_ref(self, name: str, where: str, key: str) -> str:
        kind = self.earlier.get(name)
        if kind is None:
            earlier = ", ".join(self.earlier) or "none"
            raise fail(where, f"'{key}' refers to '{name}', which is not an earlier task "
                               f"(earlier tasks: {earlier})")
        if not kind.gives_geometry:
            raise fail(where, f"'{key}': task '{name}' ({kind.name}) ends with no single geometry")
        return name


