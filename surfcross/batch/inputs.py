"""What a batch is made of: a list of molecules and one job definition.

Molecules come from XYZ files (a file with several frames gives one chain per frame: one
molecule times many starts), folders (every ``*.xyz`` inside, in name order) and SMILES lists
(``.smi``, ``.smiles`` or ``.txt`` files, one ``SMILES [name]`` per line, ``#`` starts a
comment; RDKit needed). The job definition is a TOML job file whose ``[molecule]`` table is
absent or replaced: its ``charge`` and ``spin`` (if given) apply to every molecule, its
source (``file``, ``xyz``, ``smiles``, ``example``) is replaced by each molecule in turn.

Each molecule with the job makes one :class:`Chain`, validated here, before anything runs; a
molecule that cannot be read or does not fit the job becomes a :class:`Chain` with an
``error`` (reported, never run) and does not stop the others.
"""

from __future__ import annotations

import hashlib
import json
import re
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping

from ..errors import InputError
from ..jobs import Job, job_from_dict

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["MoleculeEntry", "Chain", "JobTemplate", "read_job_template", "job_template",
           "collect_molecules", "make_chains", "SMILES_SUFFIXES", "safe_name"]

SMILES_SUFFIXES = (".smi", ".smiles", ".txt")
_SOURCES = ("file", "xyz", "smiles", "example")


def safe_name(text: str) -> str:
    """A folder name made of letters, digits, '.', '_' and '-'."""
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text).strip("._") or "molecule"


@dataclass(frozen=True)
class MoleculeEntry:
    """One molecule of the list: its chain name, where it came from, and its [molecule]
    table source (``{'xyz': text}`` or ``{'smiles': text}``)."""

    name: str
    origin: str
    source: Mapping[str, str]


@dataclass(frozen=True)
class Chain:
    """One molecule with the job: the unit that runs on one worker in its own folder."""

    name: str
    origin: str
    job: Job | None
    error: str = ""


@dataclass(frozen=True)
class JobTemplate:
    """A job file's tables without its molecule source."""

    data: Mapping[str, Any]
    source: str
    base_dir: Path

    @property
    def fingerprint(self) -> str:
        """Short hash of the job definition: a rerun in the same folder must use the same."""
        text = json.dumps(self.data, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


def job_template(data: Mapping[str, Any], *, source: str = "job",
                 base_dir: str | Path = ".") -> JobTemplate:
    """The template of a parsed job file (``output`` dropped: the batch names the folders)."""
    clean = {k: v for k, v in data.items() if k != "output"}
    molecule = clean.get("molecule", {})
    if not isinstance(molecule, Mapping):
        raise InputError(f"{source}: [molecule] must be a table")
    clean["molecule"] = {k: v for k, v in molecule.items() if k not in (*_SOURCES, "title")}
    return JobTemplate(data=clean, source=source, base_dir=Path(base_dir).resolve())


def read_job_template(path: str | Path) -> JobTemplate:
    """Read a job file to run on many molecules."""
    p = Path(path)
    if not p.is_file():
        raise InputError(f"job file {str(p)!r} does not exist" if not p.exists()
                         else f"{str(p)!r} is not a file")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise InputError(f"job file {str(p)!r} is not UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{p}: not valid TOML: {exc}") from None
    return job_template(data, source=str(p), base_dir=p.parent)


# ------------------------------------------------------------------------------ molecules
def _frames(text: str, path: Path) -> list[str]:
    """The frames of an XYZ file as texts (checked later, with the job's charge and spin)."""
    lines = text.splitlines()
    frames, i = [], 0
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        try:
            n = int(lines[i].split()[0])
        except ValueError:
            raise InputError(f"{path}, line {i + 1}: expected the number of atoms of an XYZ "
                             f"frame, got {lines[i].strip()!r}") from None
        frames.append("\n".join(lines[i:i + n + 2]) + "\n")
        i += n + 2
    if not frames:
        raise InputError(f"XYZ file {str(path)!r} is empty")
    return frames


def _xyz_entries(path: Path) -> list[MoleculeEntry]:
    frames = _frames(path.read_text(encoding="utf-8"), path)
    if len(frames) == 1:
        return [MoleculeEntry(safe_name(path.stem), str(path), {"xyz": frames[0]})]
    return [MoleculeEntry(safe_name(f"{path.stem}_{k:03d}"), f"{path}, frame {k}",
                          {"xyz": text}) for k, text in enumerate(frames, 1)]


def _smiles_entries(path: Path) -> list[MoleculeEntry]:
    out = []
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
        text = line.split("#", 1)[0].strip()
        if not text:
            continue
        parts = text.split(None, 1)
        name = parts[1] if len(parts) > 1 else f"{path.stem}_{number:03d}"
        out.append(MoleculeEntry(safe_name(name), f"{path}, line {number}", {"smiles": parts[0]}))
    if not out:
        raise InputError(f"SMILES list {str(path)!r} holds no SMILES lines")
    return out


def _entries(item: str | Path) -> list[MoleculeEntry]:
    path = Path(item)
    if path.is_dir():
        files = sorted(p for p in path.iterdir() if p.suffix.lower() == ".xyz" and p.is_file())
        if not files:
            raise InputError(f"folder {str(path)!r} holds no .xyz files")
        return [e for f in files for e in _xyz_entries(f)]
    if not path.is_file():
        raise InputError(f"molecule file {str(path)!r} does not exist")
    if path.suffix.lower() == ".xyz":
        return _xyz_entries(path)
    if path.suffix.lower() in SMILES_SUFFIXES:
        return _smiles_entries(path)
    raise InputError(f"{str(path)!r}: give XYZ files (.xyz), folders of them, or SMILES lists "
                     f"({', '.join(SMILES_SUFFIXES)})")


def collect_molecules(items: Iterable[str | Path]) -> list[MoleculeEntry]:
    """The molecules named by files, folders and SMILES lists, with unique chain names."""
    entries = [e for item in items for e in _entries(item)]
    if not entries:
        raise InputError("no molecules given")
    seen: dict[str, int] = {}
    out = []
    for e in entries:
        n = seen.get(e.name, 0) + 1
        seen[e.name] = n
        out.append(e if n == 1 else MoleculeEntry(f"{e.name}_{n}", e.origin, e.source))
    return out


def make_chains(template: JobTemplate, molecules: Iterable[MoleculeEntry]) -> list[Chain]:
    """One validated job per molecule; a molecule that does not fit gives a Chain with its
    error instead of stopping the batch."""
    chains = []
    for entry in molecules:
        data = dict(template.data)
        data["molecule"] = {**template.data.get("molecule", {}), **entry.source,
                            "title": entry.name}
        try:
            job = job_from_dict(data, source=f"{template.source} with {entry.origin}",
                                base_dir=template.base_dir)
        except InputError as exc:
            chains.append(Chain(entry.name, entry.origin, None, error=" ".join(str(exc).split())))
            continue
        chains.append(Chain(entry.name, entry.origin, job))
    return chains
