"""SMILES start geometries (optional RDKit) and the error without RDKit."""

import sys

import numpy as np
import pytest

from surfcross.errors import InputError
from surfcross.io.smiles import geometry_from_smiles
from surfcross.units import ANGSTROM_IN_BOHR


def test_missing_rdkit_is_a_clear_input_error(monkeypatch):
    for name in list(sys.modules):
        if name == "rdkit" or name.startswith("rdkit."):
            monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "rdkit", None)
    with pytest.raises(InputError, match=r"install surfcross\[smiles\]"):
        geometry_from_smiles("CCO")


def test_ethanol():
    pytest.importorskip("rdkit")
    geom = geometry_from_smiles("CCO")
    assert sorted(geom.symbols) == sorted(["C", "C", "O"] + ["H"] * 6)
    assert geom.charge == 0 and geom.spin == 0 and geom.title == "CCO"
    c, o = geom.symbols.index("C") + 1, geom.symbols.index("O")  # RDKit keeps the SMILES order
    # C-O single bond about 1.43 angstrom in alcohols (handbook value, e.g. CRC Handbook
    # "Bond lengths in organic compounds", recalled from memory); a force field lands close
    assert geom.distance(c, o) / ANGSTROM_IN_BOHR == pytest.approx(1.43, abs=0.04)
    again = geometry_from_smiles("CCO")
    np.testing.assert_array_equal(geom.coords_bohr, again.coords_bohr)  # fixed seed


def test_charged_and_radical():
    pytest.importorskip("rdkit")
    ammonium = geometry_from_smiles("[NH4+]")
    assert ammonium.charge == 1 and ammonium.natom == 5 and ammonium.nelectron == 10
    methyl = geometry_from_smiles("[CH3]")  # one radical electron -> doublet (2S = 1)
    assert methyl.spin == 1 and methyl.natom == 4


def test_invalid_smiles():
    pytest.importorskip("rdkit")
    with pytest.raises(InputError, match="invalid SMILES 'C1CC'"):
        geometry_from_smiles("C1CC")
    with pytest.raises(InputError, match="invalid SMILES"):
        geometry_from_smiles("  ")
