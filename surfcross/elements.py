"""Element data: symbols, atomic numbers, masses, covalent radii.

The numbers are read from PySCF's plain data tables (``pyscf.data``: IUPAC standard atomic
weights; covalent radii of Cordero et al., Dalton Trans. 2008, in bohr). This module is the one
place outside ``engine/`` that touches PySCF, and it only reads these tables.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from .errors import InputError

__all__ = ["atomic_number", "normalize_symbol", "mass_amu", "covalent_radius_bohr", "period"]


@lru_cache(maxsize=1)
def _tables():
    from pyscf.data import elements, radii

    symbols = list(elements.ELEMENTS)  # index = Z, 0 is a dummy
    lookup = {s.upper(): z for z, s in enumerate(symbols) if z > 0}
    return symbols, lookup, np.asarray(elements.MASSES, float), np.asarray(radii.COVALENT, float)


def normalize_symbol(symbol: str) -> str:
    """'cl', 'CL', 'Cl' -> 'Cl'; atomic numbers as text ('6') are accepted too."""
    symbols, lookup, _, _ = _tables()
    text = symbol.strip()
    if text.isdigit():
        z = int(text)
        if 0 < z < len(symbols):
            return symbols[z]
        raise InputError(f"unknown element with atomic number {text!r}")
    z = lookup.get(text.upper())
    if z is None:
        raise InputError(f"unknown element {symbol!r}: use a chemical symbol such as H, C, N, O")
    return symbols[z]


def atomic_number(symbol: str) -> int:
    _, lookup, _, _ = _tables()
    return lookup[normalize_symbol(symbol).upper()]


def mass_amu(symbol: str) -> float:
    """Standard atomic weight (most abundant isotope mixture) in unified atomic mass units."""
    _, _, masses, _ = _tables()
    return float(masses[atomic_number(symbol)])


def covalent_radius_bohr(symbol: str) -> float:
    _, _, _, radii = _tables()
    return float(radii[atomic_number(symbol)])


def period(symbol: str) -> int:
    """Row of the periodic table (1 for H, He; 2 for Li-Ne; ...)."""
    z = atomic_number(symbol)
    for row, last in enumerate((2, 10, 18, 36, 54, 86, 118), start=1):
        if z <= last:
            return row
    return 7
