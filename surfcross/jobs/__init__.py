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
from typing import Any, Mapping

from ..engine.base import MethodSpec
from ..errors import InputError
from ..geometry import Geometry, parse_xyz, read_xyz
from .kinds import (TASK_BASE_KEYS, TASK_KINDS, Context, KeyRule, TaskKind, fail, check_keys,
                    check_value, register_task_kind)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["KeyRule", "TaskKind", "TASK_KINDS", "register_task_kind", "TaskSpec", "Job",
           "read_job", "parse_job", "job_from_dict", "method_spec_from_dict"]

TOP_KEYS = ("title", "output", "molecule", "method", "task")
MOLECULE_KEYS = ("file", "xyz", "smiles", "example", "charge", "spin", "title")


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
                raise fail(where, f"'{key}' must be a list, got {value!r}")
            kwargs[key] = tuple(value)
        elif kind.startswith("bool") and not isinstance(value, bool):
            raise fail(where, f"'{key}' must be true or false, got {value!r}")
        elif kind.startswith("int") and (isinstance(value, bool) or not isinstance(value, int)):
            raise fail(where, f"'{key}' must be an integer, got {value!r}")
        elif kind.startswith("float") and (isinstance(value, bool) or not isinstance(value, (int, float))):
            raise fail(where, f"'{key}' must be a number, got {value!r}")
        elif kind.startswith("str") and not isinstance(value, str):
            raise fail(where, f"'{key}' must be a string, got {value!r}")
        else:
            kwargs[key] = value
    try:
        return MethodSpec(**kwargs)
    except InputError as exc:
        raise fail(where, str(exc)) from None


def _molecule(data: Any, where: str, base_dir: Path) -> Geometry:
    if not isinstance(data, Mapping):
        raise fail(where, "[molecule] must be a table")
    check_keys(data, MOLECULE_KEYS, where)
    sources = [k for k in ("file", "xyz", "smiles", "example") if k in data]
    if len(sources) != 1:
        raise fail(where, "give exactly one of 'file', 'xyz', 'smiles' or 'example'"
                    + (f" (found {', '.join(sources)})" if sources else ""))
    charge, spin = data.get("charge", 0), data.get("spin", 0)
    for key, value in (("charge", charge), ("spin", spin)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise fail(where, f"'{key}' must be an integer, got {value!r}")
    kind, value = sources[0], data[sources[0]]
    if not isinstance(value, str) or not value.strip():
        raise fail(where, f"'{kind}' must be a non-empty string")
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
            from ..data import example_geometry
            geom = example_geometry(value, charge, spin)
        else:
            from ..io.smiles import geometry_from_smiles
            geom = geometry_from_smiles(value).with_charge_spin(
                data.get("charge"), data.get("spin"))
    except InputError as exc:
        raise fail(where, str(exc)) from None
    title = data.get("title")
    return Geometry(geom.symbols, geom.coords_bohr, geom.charge, geom.spin,
                    str(title) if title is not None else geom.title)


def _task(raw: Any, index: int, ctx: Context, names: set[str]) -> TaskSpec:
    where = f"{ctx.source}, task {index + 1}"
    if not isinstance(raw, Mapping):
        raise fail(where, "each [[task]] must be a table")
    kind_name = raw.get("kind")
    if not isinstance(kind_name, str):
        raise fail(where, f"'kind' is required: one of {', '.join(TASK_KINDS)}")
    kind = TASK_KINDS.get(kind_name.strip().lower())
    if kind is None:
        near = difflib.get_close_matches(kind_name.lower(), list(TASK_KINDS), n=1, cutoff=0.5)
        hint = f"did you mean '{near[0]}'?" if near else f"use one of {', '.join(TASK_KINDS)}"
        raise fail(where, f"unknown task kind '{kind_name}'; {hint}")
    name = raw.get("name")
    if name is None:
        candidates = itertools.chain([kind.name], (f"{kind.name}_{k}" for k in itertools.count(2)))
        name = next(n for n in candidates if n not in names and n not in ctx.earlier)
    if not isinstance(name, str) or not name.strip():
        raise fail(where, f"'name' must be a non-empty string, got {name!r}")
    name = name.strip()
    where = f"{ctx.source}, task '{name}'"
    if name in ctx.earlier:
        raise fail(where, "two tasks have this name; task names must be unique")
    check_keys(raw, list(TASK_BASE_KEYS) + list(kind.keys), where)
    start = raw.get("from")
    if start is not None:
        if not isinstance(start, str):
            raise fail(where, f"'from' must be the name of an earlier task, got {start!r}")
        start = ctx.task_ref(start.strip(), where, "from")
    options = {key: check_value(key, raw[key], rule, where, ctx)
               for key, rule in kind.keys.items() if key in raw}
    missing = [k for k, rule in kind.keys.items() if rule.required and k not in options]
    if missing:
        raise fail(where, f"a {kind.name} task needs '{missing[0]}' ({kind.keys[missing[0]].doc})")
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
        raise fail(source, "a [molecule] table is required")
    molecule = _molecule(data["molecule"], f"{source}, [molecule]", base)
    method_data = data.get("method", {})
    if not isinstance(method_data, Mapping):
        raise fail(source, "[method] must be a table")
    method = method_spec_from_dict(method_data, f"{source}, [method]")
    raw_tasks = data.get("task")
    if not isinstance(raw_tasks, list) or not raw_tasks:
        raise fail(source, "no tasks: add at least one [[task]] table with a 'kind'")
    explicit = {t.get("name") for t in raw_tasks if isinstance(t, Mapping) and isinstance(t.get("name"), str)}
    ctx = Context(source=source, base_dir=base, natom=molecule.natom)
    tasks = tuple(_task(raw, i, ctx, explicit) for i, raw in enumerate(raw_tasks))
    output = data.get("output")
    if output is not None and (not isinstance(output, str) or not output.strip()):
        raise fail(source, f"'output' must be a folder name, got {output!r}")
    title = data.get("title", "")
    if not isinstance(title, str):
        raise fail(source, f"'title' must be a string, got {title!r}")
    return Job(molecule=molecule, method=method, tasks=tasks, title=title,
               output=(base / output) if output else None, method_keys=tuple(method_data))


def parse_job(text: str, *, source: str = "job", base_dir: str | Path = ".") -> Job:
    """Parse job-file text (TOML). Relative file names are taken from ``base_dir``."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise fail(source, f"not valid TOML: {exc}") from None
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
