"""Pieces shared by the benchmark sections: a metering engine wrapper, quiet runs, geometries.

Nothing here is part of the surfcross package: the benchmarks only call its public API.
"""

from __future__ import annotations

import contextlib
import logging
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from surfcross.geometry import Geometry, read_xyz

DATA = Path(__file__).resolve().parents[1] / "surfcross" / "data"


@dataclass
class Meter:
    """Counts and wall times of the calls made to an engine."""

    states: int = 0
    gradients: int = 0
    overlaps: int = 0
    scf_cycles: int = 0
    response_iterations: int = 0
    time_states_s: float = 0.0
    time_gradients_s: float = 0.0
    time_overlaps_s: float = 0.0

    @property
    def engine_s(self) -> float:
        """Time inside the electronic-structure calculation proper (states + gradients)."""
        return self.time_states_s + self.time_gradients_s


class MeteredEngine:
    """Wraps any surfcross engine and meters ``states``, ``gradients`` and ``overlaps``.

    Every other attribute is passed through, so objectives and trackers see the same engine.
    """

    def __init__(self, engine: Any) -> None:
        self._engine = engine
        self.meter = Meter()

    def __getattr__(self, name: str) -> Any:
        return getattr(self._engine, name)

    @property
    def has_couplings(self) -> bool:
        return bool(self._engine.has_couplings)

    def states(self, geometry: Geometry):
        start = time.perf_counter()
        ev = self._engine.states(geometry)
        dt = time.perf_counter() - start
        m = self.meter
        m.states += 1
        m.time_states_s += dt
        m.scf_cycles += int(ev.scf_cycles)
        m.response_iterations += int(ev.response_iterations)
        return ev

    def gradients(self, evaluation, labels, couplings=()):
        start = time.perf_counter()
        out = self._engine.gradients(evaluation, labels, couplings)
        dt = time.perf_counter() - start
        self.meter.gradients += 1
        self.meter.time_gradients_s += dt
        return out

    def evaluate(self, geometry: Geometry, gradients_for=()):
        ev = self.states(geometry)
        labels = list(gradients_for)
        return self.gradients(ev, labels) if labels else ev

    def overlaps(self, bra, ket):
        start = time.perf_counter()
        out = self._engine.overlaps(bra, ket)
        self.meter.overlaps += 1
        self.meter.time_overlaps_s += time.perf_counter() - start
        return out

    def close(self) -> None:
        close = getattr(self._engine, "close", None)
        if callable(close):
            close()


@contextlib.contextmanager
def quiet() -> Iterator[list[str]]:
    """Collect warnings (returned list) and keep library log output off the terminal."""
    root = logging.getLogger("surfcross")
    level = root.level
    root.setLevel(logging.ERROR)
    caught: list[str] = []
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        try:
            yield caught
        finally:
            caught.extend(str(w.message) for w in rec)
            root.setLevel(level)


def molecule(name: str) -> Geometry:
    """A shipped example molecule (surfcross/data/NAME.xyz)."""
    return read_xyz(DATA / f"{name}.xyz")


def triatomic(symbols: tuple[str, str, str], bond_angstrom: float, angle_deg: float,
              spin: int = 0) -> Geometry:
    """A symmetric X-A-X molecule (A first) in the yz plane, C2v, bisector along z."""
    half = np.radians(angle_deg) / 2.0
    coords = np.array([[0.0, 0.0, 0.0],
                       [0.0, bond_angstrom * np.sin(half), bond_angstrom * np.cos(half)],
                       [0.0, -bond_angstrom * np.sin(half), bond_angstrom * np.cos(half)]])
    return Geometry.from_angstrom(list(symbols), coords, spin=spin)


def displaced(geometry: Geometry, shift_bohr: np.ndarray) -> Geometry:
    """``geometry`` moved by a fixed (natom, 3) displacement in bohr."""
    return geometry.with_coords(geometry.coords_bohr + np.asarray(shift_bohr, float))


def fixed_shift(natom: int, size_bohr: float, seed: int) -> np.ndarray:
    """A reproducible small displacement (breaks symmetry of a start geometry)."""
    rng = np.random.default_rng(seed)
    return size_bohr * rng.uniform(-1.0, 1.0, size=(natom, 3))


def ratio(a: float | None, b: float | None) -> float | None:
    if a is None or b is None or b == 0:
        return None
    return float(a) / float(b)
