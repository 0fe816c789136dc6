"""Wavefunction data a response engine stores in ``Evaluation.wavefunction`` for overlaps.

Plain numpy arrays only (no PySCF objects), so evaluations can be pickled, checkpointed and
compared across geometries.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

__all__ = ["ReferenceWavefunction", "ManifoldWavefunction", "ResponseWavefunction"]


@dataclass(frozen=True)
class ReferenceWavefunction:
    """One SCF determinant.

    mo_coeff: (nao, nmo) restricted, (2, nao, nmo) unrestricted. mo_occ: (nmo,) or (2, nmo).
    """

    mo_coeff: np.ndarray
    mo_occ: np.ndarray
    restricted: bool

    @property
    def nocc(self) -> tuple[int, int]:
        """(alpha, beta) occupied counts."""
        if self.restricted:
            n = int(np.count_nonzero(self.mo_occ > 0))
            return n, n
        return int(np.count_nonzero(self.mo_occ[0] > 0)), int(np.count_nonzero(self.mo_occ[1] > 0))


@dataclass(frozen=True)
class ManifoldWavefunction:
    """States of one spin manifold ('S', 'T' or '') in the order of ``Evaluation.manifold``.

    Attributes
    ----------
    reference
        The determinant the excitations are built on.
    includes_reference
        True when the manifold's first state is the reference determinant itself (S0, or 0 for
        open-shell references; the high-spin T1). False for response triplets.
    coupling
        'singlet' or 'triplet' (restricted amplitudes, PySCF normalization sum X^2 = 1/2 with
        beta = +alpha / -alpha), or 'unrestricted' ((Xa, Xb), sum Xa^2 + Xb^2 = 1).
    amplitudes
        One entry per excited root in energy order: X (nocc, nvir) restricted, or a tuple
        (Xa (nocc_a, nvir_a), Xb (nocc_b, nvir_b)). For TDHF/TDDFT, X + Y renormalized to the
        CIS norm (an approximation; see tracking.overlap).
    """

    reference: ReferenceWavefunction
    includes_reference: bool
    coupling: str
    amplitudes: tuple = ()


@dataclass(frozen=True)
class ResponseWavefunction:
    """Everything needed to compute overlaps with another geometry."""

    symbols: tuple[str, ...]
    coords_bohr: np.ndarray
    basis: str
    manifolds: Mapping[str, ManifoldWavefunction] = field(default_factory=dict)
    cartesian_basis: bool = False
