"""Unit conversions. surfcross takes every constant from scipy.constants (CODATA); these
tests check that and compare with independent tables."""

import math

import pytest
from scipy import constants as c

from surfcross import units


def test_values_come_from_scipy_codata():
    # scipy.constants holds the CODATA recommended values (reference library)
    assert units.HARTREE_IN_EV == c.physical_constants["Hartree energy in eV"][0]
    assert units.BOHR_IN_ANGSTROM == pytest.approx(c.physical_constants["Bohr radius"][0] * 1e10, rel=1e-15)
    assert units.ANGSTROM_IN_BOHR * units.BOHR_IN_ANGSTROM == pytest.approx(1.0, rel=1e-15)
    assert units.HARTREE_IN_WAVENUMBER == pytest.approx(
        c.physical_constants["hartree-inverse meter relationship"][0] / 100, rel=1e-15)
    # 1 eV in joule / (h c) -> cm^-1, from scipy's separate entries
    assert units.ev_to_wavenumber(1.0) == pytest.approx(
        c.physical_constants["electron volt-inverse meter relationship"][0] / 100, rel=1e-12)


def test_values_against_published_tables():
    # CODATA 2018/2022 values, recalled from memory (they agree to the digits compared)
    assert units.HARTREE_IN_EV == pytest.approx(27.211386246, abs=1e-8)
    assert units.BOHR_IN_ANGSTROM == pytest.approx(0.52917721, abs=1e-8)
    assert units.HARTREE_IN_WAVENUMBER == pytest.approx(219474.63136, abs=1e-3)
    assert units.AMU_IN_ELECTRON_MASS == pytest.approx(1822.888486, abs=1e-5)
    # thermochemical calorie: 627.5095 kcal/mol and 2625.4996 kJ/mol per hartree (recalled
    # from memory; common practice in quantum chemistry)
    assert units.HARTREE_IN_KCALMOL == pytest.approx(627.5095, abs=1e-3)
    assert units.HARTREE_IN_KJMOL == pytest.approx(2625.4996, abs=1e-3)
    # h c = 1239.84198 eV nm; 1 eV = 8065.544 cm^-1 (recalled from memory)
    assert units.EV_NM == pytest.approx(1239.84198, abs=1e-4)
    assert units.ev_to_wavenumber(1.0) == pytest.approx(8065.544, abs=1e-2)
    # harmonic-frequency factor sqrt(Eh / (bohr^2 amu)) / (2 pi c) = 5140.487 cm^-1
    # (recalled from memory)
    assert units.AU_FREQUENCY_IN_WAVENUMBER == pytest.approx(5140.487, abs=1e-2)


@pytest.mark.pyscf
def test_against_pyscf_tables():
    # PySCF's own constant table (reference library; older CODATA, so 1e-7 relative)
    from pyscf.data import nist
    assert units.HARTREE_IN_EV == pytest.approx(nist.HARTREE2EV, rel=1e-7)
    assert units.BOHR_IN_ANGSTROM == pytest.approx(nist.BOHR, rel=1e-7)


def test_helpers():
    assert units.hartree_to_ev(2.0) == 2.0 * units.HARTREE_IN_EV
    assert units.nm_to_ev(units.ev_to_nm(3.1)) == pytest.approx(3.1, rel=1e-14)
    # 500 nm green light is 2.48 eV (textbook example, E = hc / lambda)
    assert units.nm_to_ev(500.0) == pytest.approx(2.4797, abs=1e-4)
    assert math.isinf(units.ev_to_nm(0.0)) and math.isinf(units.ev_to_nm(-1.0))
