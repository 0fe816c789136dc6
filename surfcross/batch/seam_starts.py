"""Starts for seam exploration: where the crossing searches of :func:`explore_seam` begin.

Every generator returns :class:`SeamStart` items (name, what made it, geometry) around a
centre; lengths in bohr, Cartesian. The random starts come from a generator with a fixed seed,
so the same call gives the same starts on every machine.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from ..errors import InputError
from ..geometry import Geometry

__all__ = ["StartPlan", "SeamStart", "plane_starts", "mode_starts", "random_starts", "load_starts"]


@dataclass(frozen=True, kw_only=True)
class StartPlan:
    """Which starts to make around the centre (lengths in bohr, Cartesian).

    ``plane``: starts on a circle of radius ``plane_radius_bohr`` in the branching plane of the
    anchor crossing (found from the centre). ``modes``: the lowest normal modes of
    ``mode_state`` (default: the first of the pair) at the centre, each at +/-
    ``mode_amplitude_bohr`` (largest atom displacement). ``random``: distortions with RMS
    ``random_rms_bohr`` per atom, from the generator seeded with ``seed``. ``scan``: a relaxed
    scan ``(atoms (0-based), values, state)`` whose points become starts. ``extra``: starts
    given as geometries (e.g. the frames of an XYZ file).
    """

    plane: int = 6
    plane_radius_bohr: float = 0.3
    modes: int = 2
    mode_amplitude_bohr: float = 0.3
    mode_state: str | None = None
    random: int = 4
    random_rms_bohr: float = 0.15
    seed: int = 20251
    scan: tuple[tuple[int, ...], tuple[float, ...], str] | None = None
    extra: tuple[Geometry, ...] = ()

    def __post_init__(self) -> None:
        for name in ("plane", "modes", "random"):
            if getattr(self, name) < 0:
                raise InputError(f"the number of {name} starts must be >= 0")
        for name in ("plane_radius_bohr", "mode_amplitude_bohr", "random_rms_bohr"):
            if not getattr(self, name) > 0:
                raise InputError(f"{name} must be positive")
        object.__setattr__(self, "extra", tuple(self.extra))


@dataclass(frozen=True)
class SeamStart:
    name: str
    origin: str
    geometry: Geometry


def plane_starts(centre: Geometry, plane: np.ndarray, count: int, radius_bohr: float,
                 prefix: str = "plane") -> list[SeamStart]:
    """``count`` points on a circle of radius ``radius_bohr`` in the plane (2, 3N)."""
    u, v = (np.asarray(x, float).reshape(centre.natom, 3) for x in np.asarray(plane)[:2])
    out = []
    for k in range(count):
        angle = 2 * math.pi * k / count
        shift = radius_bohr * (math.cos(angle) * u + math.sin(angle) * v)
        out.append(SeamStart(f"{prefix}_{k + 1:02d}", f"branching plane, {math.degrees(angle):.0f} deg",
                             centre.with_coords(centre.coords_bohr + shift)))
    return out


def mode_starts(centre: Geometry, modes: Sequence[np.ndarray], amplitude_bohr: float,
                frequencies: Sequence[float] = ()) -> list[SeamStart]:
    """+/- along each mode, scaled so that the largest atom displacement is the amplitude."""
    out = []
    for k, mode in enumerate(modes):
        m = np.asarray(mode, float).reshape(centre.natom, 3)
        m = m / np.linalg.norm(m, axis=1).max()
        freq = f" ({frequencies[k]:.0f} cm^-1)" if k < len(frequencies) else ""
        for sign, tag in ((1.0, "p"), (-1.0, "m")):
            out.append(SeamStart(f"mode{k + 1}{tag}", f"normal mode {k + 1}{freq}, {'+' if sign > 0 else '-'}",
                                 centre.with_coords(centre.coords_bohr + sign * amplitude_bohr * m)))
    return out


def random_starts(centre: Geometry, count: int, rms_bohr: float, seed: int) -> list[SeamStart]:
    """Random distortions (no net translation), RMS ``rms_bohr`` per atom, fixed seed."""
    rng = np.random.default_rng(seed)
    out = []
    for k in range(count):
        d = rng.normal(size=(centre.natom, 3))
        d -= d.mean(0)
        d *= rms_bohr / max(np.sqrt((d ** 2).sum(1).mean()), 1e-12)
        out.append(SeamStart(f"random_{k + 1:02d}", f"random distortion (seed {seed}, #{k + 1})",
                             centre.with_coords(centre.coords_bohr + d)))
    return out


def load_starts(paths: Iterable[str | Path], charge: int = 0, spin: int = 0) -> tuple[Geometry, ...]:
    """Starts from XYZ files (every frame), e.g. the trajectory.xyz of a relaxed scan."""
    from ..geometry import read_xyz_frames

    return tuple(g for p in paths for g in read_xyz_frames(p, charge, spin))
