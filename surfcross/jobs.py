"""TOML job files: one molecule, one method, a list of tasks run in order.

A job file has the top-level keys ``title``, ``output``, the tables ``[molecule]`` and
``[method]``, and an array of tables ``[[task]]``. Every task has a ``kind`` (see
:data:`TASK_KINDS`), an optional ``name`` and an optional ``from``: the name of an earlier
task whose final geometry this one starts from. README.md ("Job files") shows a full example.

Task kinds and their keys live in one registry, :data:`TASK_KINDS`; a new kind is added with
:func:`register_task_kind`. Unknown keys are errors that name the nearest valid key.
"""

from __future__ import annotations

import difflib
import itertools
import sys
import types
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

from .engine.base import MethodSpec
from .errors import InputError
from .geometry import Geometry, parse_xyz, read_xyz
from .states import parse_state, parse_states

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["KeyRule", "TaskKind", "TASK_KINDS", "register_task_kind", "TaskSpec", "Job",
           "read_job", "parse_job", "job_from_dict", "method_spec_from_dict"]

TOP_KEYS = ("title", "output", "molecule", "method", "task")
MOLECULE_KEYS = ("file", "xyz", "smiles", "example", "charge", "spin", "title")
TASK_BASE_KEYS = ("name", "kind", "from")


def _fail(where: str, message: str) -> InputError:
    return InputError(f"{where}: {message}")


def check_keys(given: Mapping[str, Any], allowed: tuple[str, ...] | list[str], where: str) -> None:
    """InputError for the first unknown key, naming the nearest allowed key."""
    for key in given:
        if key not in allowed:
            near = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
            hint = f"did you mean '{near[0]}'?" if near else f"valid keys: {', '.join(allowed)}"
            raise _fail(where, f"unknown key '{key}'; {hint}")


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
        raise _fail(where, f"'{key}' must be {'an integer' if integer else 'a number'}, got {value!r}")
    if rule.low is not None and (value <= rule.low if rule.open_low else value < rule.low):
        raise _fail(where, f"'{key}' must be {'>' if rule.open_low else '>='} {rule.low:g}, got {value}")
    if rule.high is not None and value > rule.high:
        raise _fail(where, f"'{key}' must be <= {rule.high:g}, got {value}")
    return int(value) if integer else float(value)


def _list(value: Any, rule: KeyRule, key: str, where: str) -> list:
    if not isinstance(value, list):
        raise _fail(where, f"'{key}' must be a list, got {value!r}")
    if rule.length and not rule.length[0] <= len(value) <= rule.length[1]:
        lo, hi = rule.length
        size = str(lo) if lo == hi else f"{lo} to {hi}" if hi < 10**6 else f"at least {lo}"
        raise _fail(where, f"'{key}' needs {size} entries, got {len(value)}")
    return value


def _check_value(key: str, value: Any, rule: KeyRule, where: str, ctx: "_Context") -> Any:
    t = rule.type
    try:
        if t in ("int", "float"):
            return _number(value, rule, key, where, t == "int")
        if t == "bool":
            if not isinstance(value, bool):
                raise _fail(where, f"'{key}' must be true or false, got {value!r}")
            return value
        if t in ("str", "choice"):
            if not isinstance(value, str) or not value.strip():
                raise _fail(where, f"'{key}' must be a non-empty string, got {value!r}")
            text = value.strip().lower() if t == "choice" else value.strip()
            if t == "choice" and text not in rule.choices:
                raise _fail(where, f"'{key}' must be one of {', '.join(rule.choices)}, got {value!r}")
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
                raise _fail(where, f"'{key}' names the same atom twice: {list(atoms)}")
            return atoms
        if t == "floats":
            items = _list(value, rule, key, where)
            return tuple(_number(v, KeyRule(type="float", doc=""), key, where, False) for v in items)
        if t == "geometries":
            return tuple(ctx.geometry_ref(v, key, where) for v in _list(value, rule, key, where))
    except InputError as exc:
        if str(exc).startswith(where):
            raise
        raise _fail(where, f"'{key}': {exc}") from None
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
    from .objectives.searches import SEARCHES
    return tuple(SEARCHES)


def _presets() -> tuple[str, ...]:
    from .optimize.settings import CONVERGENCE_PRESETS
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
}


def _check_scan(options: dict[str, Any], where: str) -> None:
    if options.get("relax") and "state" not in options:
        raise _fail(where, "a relaxed scan ('relax = true') needs 'state', the state minimized")


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
             keys={"state": KeyRule(type="state", doc="emitting state (default S1)"), **_OPT}),
    TaskKind(name="path", doc="interpolated pathway through geometries, with all state energies",
             gives_geometry=False,
             keys={"geometries": KeyRule(type="geometries", required=True, length=(2, 10**9),
                                         doc="XYZ files (relative to the job file) or names of earlier tasks"),
                   "images": KeyRule(type="int", low=1, doc="points between consecutive geometries"),
                   "interpolation": KeyRule(type="choice", choices=("cartesian", "internal"),
                                            doc="how geometries are interpolated"),
                   "show": KeyRule(type="states", length=(1, 10**9), doc="states to draw (default all)")}),
    TaskKind(name="scan", doc="energies along one bond, angle or dihedral",
             check=_check_scan,
             keys={"atoms": KeyRule(type="atoms", required=True, length=(2, 4),
                                    doc="2 (bond), 3 (angle) or 4 (dihedral) atoms, 1-based"),
                   "values": KeyRule(type="floats", required=True, length=(1, 10**9),
                                     doc="coordinate values: angstrom for bonds, degrees for angles"),
                   "relax": KeyRule(type="bool", doc="minimize the other coordinates at each point"),
                   "state": KeyRule(type="state", doc="state minimized in a relaxed scan"),
                   **_OPT}),
):
    register_task_kind(_kind)


# ------------------------------------------------------------------------------ results
@dataclass(frozen=True, kw_only=True)
class TaskSpec:
    """One task of a job. ``options`` holds the validated task keys (read-only mapping):
    state labels normalized ('s1' -> 'S1'), atoms 1-based tuples, geometries of path tasks as
    ``('file', absolute path)`` or ``('task', name)`` pairs."""

    name: str
    kind: str
    options: Mapping[str, Any] = field(default_factory=dict)
    start_from: str | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.options, types.MappingProxyType):
            object.__setattr__(self, "options", types.MappingProxyType(dict(self.options)))

    def __reduce__(self):  # a read-only mapping does not pickle by itself
        return (_task_spec, (self.name, self.kind, dict(self.options), self.start_from))

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "kind": self.kind, "options": dict(self.options),
                "start_from": self.start_from}


def _task_spec(name: str, kind: str, options: dict[str, Any], start_from: str | None) -> TaskSpec:
    return TaskSpec(name=name, kind=kind, options=options, start_from=start_from)


@dataclass(frozen=True, kw_only=True)
class Job:
    """A parsed job file."""

    molecule: Geometry
    method: MethodSpec
    tasks: tuple[TaskSpec, ...]
    title: str = ""
    source: Path | None = None
    output: Path | None = None
    method_keys: tuple[str, ...] = ()  # method keys given explicitly in the file

    def task(self, name: str) -> TaskSpec:
        for t in self.tasks:
            if t.name == name:
                return t
        raise InputError(f"no task named {name!r} (tasks: {', '.join(t.name for t in self.tasks)})")


@dataclass
class _Context:
    source: str
    base_dir: Path
    natom: int
    earlier: dict[str, TaskKind] = field(default_factory=dict)

    def geometry_ref(self, value: Any, key: str, where: str) -> tuple[str, str]:
        if not isinstance(value, str) or not value.strip():
            raise _fail(where, f"'{key}' entries must be file names or task names, got {value!r}")
        text = value.strip()
        if text.lower().endswith(".xyz"):
            path = (self.base_dir / text).resolve()
            if not path.is_file():
                raise _fail(where, f"'{key}': geometry file {str(path)!r} does not exist")
            return ("file", str(path))
        return ("task", self.task_ref(text, where, key))

    def task_ref(self, name: str, where: str, key: str) -> str:
        kind = self.earlier.get(name)
        if kind is None:
            earlier = ", ".join(self.earlier) or "none"
            raise _fail(where, f"'{key}' refers to '{name}', which is not an earlier task "
                               f"(earlier tasks: {earlier})")
        if not kind.gives_geometry:
            raise _fail(where, f"'{key}': task '{name}' ({kind.name}) ends with no single geometry")
        return name


# ------------------------------------------------------------------------------ parsing
def method_spec_from_dict(data: Mapping[str, Any], where: str = "method") -> MethodSpec:
    """MethodSpec from a plain dict (TOML table or a saved ``MethodSpec.to_dict()``)."""
    fields = MethodSpec.__dataclass_fields__
    check_keys(data, list(fields), where)
    kwargs: dict[str, Any] = {}
    for key, value in data.items():
        kind = str(fields[key].type)
        if value is None or (isinstance(value, str) and kind.startswith("str")):
            kwargs[key] = value
        elif kind.startswith("tuple"):
            if not isinstance(value, (list, tuple)):
                raise _fail(where, f"'{key}' must be a list, got {value!r}")
            kwargs[key] = tuple(value)
        elif kind.startswith("bool") and not isinstance(value, bool):
            raise _fail(where, f"'{key}' must be true or false, got {value!r}")
        elif kind.startswith("int") and (isinstance(value, bool) or not isinstance(value, int)):
            raise _fail(where, f"'{key}' must be an integer, got {value!r}")
        elif kind.startswith("float") and (isinstance(value, bool) or not isinstance(value, (int, float))):
            raise _fail(where, f"'{key}' must be a number, got {value!r}")
        elif kind.startswith("str") and not isinstance(value, str):
            raise _fail(where, f"'{key}' must be a string, got {value!r}")
        else:
            kwargs[key] = value
    try:
        return MethodSpec(**kwargs)
    except InputError as exc:
        raise _fail(where, str(exc)) from None


def _molecule(data: Any, where: str, base_dir: Path) -> Geometry:
    if not isinstance(data, Mapping):
        raise _fail(where, "[molecule] must be a table")
    check_keys(data, MOLECULE_KEYS, where)
    sources = [k for k in ("file", "xyz", "smiles", "example") if k in data]
    if len(sources) != 1:
        raise _fail(where, "give exactly one of 'file', 'xyz', 'smiles' or 'example'"
                    + (f" (found {', '.join(sources)})" if sources else ""))
    charge, spin = data.get("charge", 0), data.get("spin", 0)
    for key, value in (("charge", charge), ("spin", spin)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise _fail(where, f"'{key}' must be an integer, got {value!r}")
    kind, value = sources[0], data[sources[0]]
    if not isinstance(value, str) or not value.strip():
        raise _fail(where, f"'{kind}' must be a non-empty string")
    try:
        if kind == "file":
            geom = read_xyz(base_dir / value, charge, spin)
        elif kind == "xyz":
            text = value.strip("\n")
            first = text.strip().splitlines()[0].split()
            if not (len(first) == 1 and first[0].isdigit()):  # bare atom lines: add a header
                text = f"{len([ln for ln in text.splitlines() if ln.strip()])}\n\n{text}"
            geom = parse_xyz(text, charge, spin, source=f"{where} 'xyz'")
            if len(geom) != 1:
                raise InputError(f"'xyz' holds {len(geom)} geometries, expected one")
            geom = geom[0]
        elif kind == "example":
            from .data import example_geometry
            geom = example_geometry(value, charge, spin)
        else:
            from .io.smiles import geometry_from_smiles
            geom = geometry_from_smiles(value).with_charge_spin(
                data.get("charge"), data.get("spin"))
    except InputError as exc:
        raise _fail(where, str(exc)) from None
    title = data.get("title")
    return Geometry(geom.symbols, geom.coords_bohr, geom.charge, geom.spin,
                    str(title) if title is not None else geom.title)


def _task(raw: Any, index: int, ctx: _Context, names: set[str]) -> TaskSpec:
    where = f"{ctx.source}, task {index + 1}"
    if not isinstance(raw, Mapping):
        raise _fail(where, "each [[task]] must be a table")
    kind_name = raw.get("kind")
    if not isinstance(kind_name, str):
        raise _fail(where, f"'kind' is required: one of {', '.join(TASK_KINDS)}")
    kind = TASK_KINDS.get(kind_name.strip().lower())
    if kind is None:
        near = difflib.get_close_matches(kind_name.lower(), list(TASK_KINDS), n=1, cutoff=0.5)
        hint = f"did you mean '{near[0]}'?" if near else f"use one of {', '.join(TASK_KINDS)}"
        raise _fail(where, f"unknown task kind '{kind_name}'; {hint}")
    name = raw.get("name")
    if name is None:
        candidates = itertools.chain([kind.name], (f"{kind.name}_{k}" for k in itertools.count(2)))
        name = next(n for n in candidates if n not in names and n not in ctx.earlier)
    if not isinstance(name, str) or not name.strip():
        raise _fail(where, f"'name' must be a non-empty string, got {name!r}")
    name = name.strip()
    where = f"{ctx.source}, task '{name}'"
    if name in ctx.earlier:
        raise _fail(where, "two tasks have this name; task names must be unique")
    check_keys(raw, list(TASK_BASE_KEYS) + list(kind.keys), where)
    start = raw.get("from")
    if start is not None:
        if not isinstance(start, str):
            raise _fail(where, f"'from' must be the name of an earlier task, got {start!r}")
        start = ctx.task_ref(start.strip(), where, "from")
    options = {key: _check_value(key, raw[key], rule, where, ctx)
               for key, rule in kind.keys.items() if key in raw}
    missing = [k for k, rule in kind.keys.items() if rule.required and k not in options]
    if missing:
        raise _fail(where, f"a {kind.name} task needs '{missing[0]}' ({kind.keys[missing[0]].doc})")
    if kind.check is not None:
        kind.check(options, where)
    ctx.earlier[name] = kind
    return TaskSpec(name=name, kind=kind.name, options=options, start_from=start)


def job_from_dict(data: Mapping[str, Any], *, source: str = "job",
                  base_dir: str | Path = ".") -> Job:
    """Validate a job given as nested dicts (the parsed TOML)."""
    base = Path(base_dir)
    check_keys(data, TOP_KEYS, source)
    if "molecule" not in data:
        raise _fail(source, "a [molecule] table is required")
    molecule = _molecule(data["molecule"], f"{source}, [molecule]", base)
    method_data = data.get("method", {})
    if not isinstance(method_data, Mapping):
        raise _fail(source, "[method] must be a table")
    method = method_spec_from_dict(method_data, f"{source}, [method]")
    raw_tasks = data.get("task")
    if not isinstance(raw_tasks, list) or not raw_tasks:
        raise _fail(source, "no tasks: add at least one [[task]] table with a 'kind'")
    explicit = {t.get("name") for t in raw_tasks if isinstance(t, Mapping) and isinstance(t.get("name"), str)}
    ctx = _Context(source=source, base_dir=base, natom=molecule.natom)
    tasks = tuple(_task(raw, i, ctx, explicit) for i, raw in enumerate(raw_tasks))
    output = data.get("output")
    if output is not None and (not isinstance(output, str) or not output.strip()):
        raise _fail(source, f"'output' must be a folder name, got {output!r}")
    title = data.get("title", "")
    if not isinstance(title, str):
        raise _fail(source, f"'title' must be a string, got {title!r}")
    return Job(molecule=molecule, method=method, tasks=tasks, title=title,
               output=(base / output) if output else None, method_keys=tuple(method_data))


def parse_job(text: str, *, source: str = "job", base_dir: str | Path = ".") -> Job:
    """Parse job-file text (TOML). Relative file names are taken from ``base_dir``."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise _fail(source, f"not valid TOML: {exc}") from None
    return job_from_dict(data, source=source, base_dir=base_dir)


def read_job(path: str | Path) -> Job:
    """Read and validate a job file."""
    p = Path(path)
    if not p.is_file():
        raise InputError(f"job file {str(p)!r} does not exist" if not p.exists()
                         else f"{str(p)!r} is not a file")
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise InputError(f"job file {str(p)!r} is not UTF-8 text") from None
    job = parse_job(text, source=str(p), base_dir=p.parent)
    return Job(molecule=job.molecule, method=job.method, tasks=job.tasks, title=job.title,
               source=p.resolve(), output=job.output, method_keys=job.method_keys)
