"""Start geometries from SMILES (optional; needs RDKit, extra ``smiles``).

The 3-D structure comes from RDKit's distance-geometry embedding with a fixed random seed
(the same SMILES always gives the same start geometry) followed by a force-field cleanup
(MMFF94 where it has parameters, UFF otherwise). It is a *start* geometry only: optimize it
with the method you use before trusting anything computed at it.
"""

from __future__ import annotations

import logging

from ..errors import InputError
from ..geometry import Geometry

__all__ = ["EMBED_SEED", "geometry_from_smiles"]

log = logging.getLogger(__name__)

#: random seed of the 3-D embedding
EMBED_SEED = 61453


def _rdkit():
    try:
        from rdkit import Chem, RDLogger
        from rdkit.Chem import AllChem
    except ImportError:
        raise InputError("a SMILES start needs RDKit, which is not installed: "
                         "install surfcross[smiles] (pip install 'surfcross[smiles]') or give "
                         "an XYZ geometry") from None
    RDLogger.DisableLog("rdApp.*")  # parse errors are reported by us, in one line
    return Chem, AllChem


def geometry_from_smiles(smiles: str, *, spin: int | None = None, seed: int = EMBED_SEED,
                         title: str | None = None) -> Geometry:
    """3-D geometry (hydrogens added) of a SMILES string.

    Parameters
    ----------
    smiles
        The SMILES text; formal charges in it set the total charge.
    spin
        2S; default: the number of radical electrons RDKit finds (0 for ordinary molecules).
    seed
        Random seed of the embedding.
    title
        Title of the geometry (default: the SMILES).

    Raises
    ------
    InputError
        RDKit missing, invalid SMILES, or no 3-D embedding found.
    """
    Chem, AllChem = _rdkit()
    text = str(smiles).strip()
    mol = Chem.MolFromSmiles(text) if text else None
    if mol is None:
        raise InputError(f"invalid SMILES {smiles!r}: RDKit cannot read it (check brackets, "
                         "ring closures and valences)")
    charge = Chem.GetFormalCharge(mol)
    radicals = sum(atom.GetNumRadicalElectrons() for atom in mol.GetAtoms())
    mol = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = int(seed)
    if AllChem.EmbedMolecule(mol, params) != 0:
        raise InputError(f"RDKit found no 3-D structure for SMILES {smiles!r}; give an XYZ "
                         "geometry instead")
    if AllChem.MMFFHasAllMoleculeParams(mol):
        AllChem.MMFFOptimizeMolecule(mol, maxIters=2000)
        field = "MMFF94"
    else:
        AllChem.UFFOptimizeMolecule(mol, maxIters=2000)
        field = "UFF"
    log.debug("SMILES %s embedded (seed %d) and cleaned with %s", text, seed, field)
    coords = mol.GetConformer().GetPositions()
    symbols = [atom.GetSymbol() for atom in mol.GetAtoms()]
    return Geometry.from_angstrom(symbols, coords, charge=charge,
                                  spin=radicals if spin is None else spin,
                                  title=title if title is not None else text)
