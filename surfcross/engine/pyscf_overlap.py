"""Cross-geometry overlaps of response states, built with PySCF integrals.

:func:`response_state_overlaps` rebuilds the two molecules from the plain data stored in
``Evaluation.wavefunction`` (a :class:`ResponseWavefunction`), computes the atomic-orbital
overlap between the two geometries with ``gto.intor_cross`` and hands it to the pure-numpy
formulas of :mod:`surfcross.tracking.overlap`.

For TDHF/TDDFT the amplitudes are X + Y renormalized to the CIS norm, so the overlaps are an
approximation suited to state tracking (see :mod:`surfcross.tracking.overlap`).
"""

from __future__ import annotations

from collections import OrderedDict

import logging

import numpy as np
from pyscf import gto

from ..errors import InputError
from ..tracking.overlap import manifold_overlaps
from .base import Evaluation
from .wavefunction import ResponseWavefunction

__all__ = ["response_state_overlaps", "cross_ao_overlap"]

log = logging.getLogger(__name__)


#: the last few molecules built for overlaps, keyed by (symbols, coordinates, basis, cart):
#: consecutive overlap calls share one geometry, and building a Mole costs more than the
#: overlap integrals themselves
_MOLECULES: "OrderedDict[tuple, gto.Mole]" = OrderedDict()
_CACHE_SIZE = 4


def _build(wfn: ResponseWavefunction) -> gto.Mole:
    key = (tuple(wfn.symbols), np.asarray(wfn.coords_bohr, float).tobytes(), str(wfn.basis),
           bool(wfn.cartesian_basis))
    mol = _MOLECULES.get(key)
    if mol is None:
        mol = _new_molecule(wfn)
        _MOLECULES[key] = mol
        while len(_MOLECULES) > _CACHE_SIZE:
            _MOLECULES.popitem(last=False)
    else:
        _MOLECULES.move_to_end(key)
    return mol


def _new_molecule(wfn: ResponseWavefunction) -> gto.Mole:
    """A PySCF molecule carrying only what overlap integrals need (charge and spin do not
    enter them)."""
    mol = gto.Mole()
    mol.atom = [(s, tuple(float(c) for c in xyz)) for s, xyz in zip(wfn.symbols, wfn.coords_bohr)]
    mol.unit = "Bohr"
    mol.basis = wfn.basis
    mol.cart = bool(wfn.cartesian_basis)
    mol.verbose = 0
    mol.spin = None  # let PySCF pick the lowest spin consistent with the electron count
    mol.build(parse_arg=False, dump_input=False)
    return mol


def cross_ao_overlap(bra: ResponseWavefunction, ket: ResponseWavefunction) -> np.ndarray:
    """``S[mu, nu] = <chi_mu(bra geometry) | chi_nu(ket geometry)>`` (nao_bra, nao_ket)."""
    if tuple(bra.symbols) != tuple(ket.symbols):
        raise InputError("overlaps need the same atoms in the same order at both geometries")
    if bra.basis != ket.basis or bool(bra.cartesian_basis) != bool(ket.cartesian_basis):
        raise InputError(f"overlaps need the same basis set at both geometries "
                         f"({bra.basis!r} vs {ket.basis!r})")
    return gto.intor_cross("int1e_ovlp", _build(bra), _build(ket))


def response_state_overlaps(bra: Evaluation, ket: Evaluation) -> dict[str, np.ndarray]:
    """Overlap matrices ``<bra_I | ket_J>`` per spin manifold ('S', 'T', '').

    Rows follow ``bra.manifold(m)``, columns ``ket.manifold(m)``; only manifolds present at
    both geometries are returned. Raises InputError when the evaluations carry no response
    wavefunction data or the stored states do not match the listed states.
    """
    wb, wk = bra.wavefunction, ket.wavefunction
    if not isinstance(wb, ResponseWavefunction) or not isinstance(wk, ResponseWavefunction):
        raise InputError("these evaluations carry no response wavefunction data, so states "
                         "cannot be compared between geometries")
    s_ao = cross_ao_overlap(wb, wk)
    out: dict[str, np.ndarray] = {}
    for name in wb.manifolds:
        if name not in wk.manifolds:
            continue
        matrix = manifold_overlaps(wb.manifolds[name], wk.manifolds[name], s_ao)
        rows, cols = len(bra.manifold(name)), len(ket.manifold(name))
        if matrix.shape != (rows, cols):
            raise InputError(f"manifold {name or 'open-shell'}: wavefunction data for "
                             f"{matrix.shape} states but {rows} x {cols} states listed")
        out[name] = matrix
    log.debug("overlaps computed for manifolds %s", ", ".join(repr(k) for k in out))
    return out
