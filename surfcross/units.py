"""Unit conversions, all derived from scipy.constants (CODATA); no hand-typed constants.

Inside surfcross lengths are bohr and energies hartree (Eh). At the edges (files, command
line, reports) we use angstrom, eV, nm and cm^-1.
"""

from __future__ import annotations

from scipy import constants as _c

__all__ = [
    "BOHR_IN_ANGSTROM",
    "ANGSTROM_IN_BOHR",
    "HARTREE_IN_EV",
    "HARTREE_IN_KCALMOL",
    "HARTREE_IN_KJMOL",
    "HARTREE_IN_WAVENUMBER",
    "EV_NM",
    "AMU_IN_ELECTRON_MASS",
    "AU_FREQUENCY_IN_WAVENUMBER",
    "ev_to_nm",
    "nm_to_ev",
    "hartree_to_ev",
    "ev_to_wavenumber",
]

BOHR_IN_ANGSTROM: float = _c.physical_constants["Bohr radius"][0] * 1e10
ANGSTROM_IN_BOHR: float = 1.0 / BOHR_IN_ANGSTROM
HARTREE_IN_EV: float = _c.physical_constants["Hartree energy in eV"][0]
HARTREE_IN_KJMOL: float = _c.physical_constants["Hartree energy"][0] * _c.N_A / 1000.0
HARTREE_IN_KCALMOL: float = HARTREE_IN_KJMOL / _c.calorie
#: cm^-1 per hartree
HARTREE_IN_WAVENUMBER: float = _c.physical_constants["hartree-inverse meter relationship"][0] / 100.0
#: E[eV] * lambda[nm] = EV_NM
EV_NM: float = _c.h * _c.c / _c.e * 1e9
AMU_IN_ELECTRON_MASS: float = _c.physical_constants["atomic mass constant"][0] / _c.m_e


#: sqrt(Eh / (bohr^2 amu)) expressed as a wavenumber in cm^-1 (harmonic frequencies)
AU_FREQUENCY_IN_WAVENUMBER: float = (
    (_c.physical_constants["Hartree energy"][0]
     / (_c.physical_constants["Bohr radius"][0] ** 2 * _c.physical_constants["atomic mass constant"][0])) ** 0.5
    / (2.0 * _c.pi * _c.c * 100.0)
)


def hartree_to_ev(energy_eh: float) -> float:
    return energy_eh * HARTREE_IN_EV


def ev_to_nm(energy_ev: float) -> float:
    """Photon wavelength (nm) of an energy in eV; inf for zero or negative energies."""
    if energy_ev <= 0.0:
        return float("inf")
    return EV_NM / energy_ev


def nm_to_ev(wavelength_nm: float) -> float:
    return EV_NM / wavelength_nm


def ev_to_wavenumber(energy_ev: float) -> float:
    return energy_ev / HARTREE_IN_EV * HARTREE_IN_WAVENUMBER
