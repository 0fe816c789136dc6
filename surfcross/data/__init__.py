"""Built-in example molecules (XYZ, angstrom) for demos, examples and tests.

Each file's comment line names the structure's source. They are start geometries, not
optimized at any particular level of theory.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from ..errors import InputError
from ..geometry import Geometry, read_xyz

__all__ = ["example_names", "example_path", "example_geometry"]


def example_names() -> tuple[str, ...]:
    """Names of the built-in molecules ('ethylene', 'formaldehyde', 'water', ...)."""
    folder = resources.files(__package__)
    return tuple(sorted(p.name[:-4] for p in folder.iterdir() if p.name.endswith(".xyz")))


def example_path(name: str) -> Path:
    """Path of the XYZ file of a built-in molecule."""
    key = name.strip().lower()
    if key not in example_names():
        raise InputError(f"no built-in molecule {name!r}; available: {', '.join(example_names())}")
    return Path(str(resources.files(__package__) / f"{key}.xyz"))


def example_geometry(name: str, charge: int = 0, spin: int = 0) -> Geometry:
    """The built-in molecule as a Geometry."""
    return read_xyz(example_path(name), charge, spin)
