"""Electronic-structure engines: the contract (:mod:`.base`) and the PySCF backends.

:func:`make_engine` picks the engine for a :class:`MethodSpec`: the state-averaged CASSCF
engine for method 'casscf', the spin-flip TDA engine for 'sf-tda' (needs the optional
'spinflip' extra, pyscf-forge), else the linear-response engine (CIS/TDA/TDHF/TDDFT).
PySCF itself is imported lazily, when an engine computes something.
"""

from __future__ import annotations

from typing import Any

from .base import (METHODS, SPIN_FLIP, TRIPLET_MODES, Engine, Evaluation, MethodSpec, StateInfo,
                   Transition)

__all__ = ["METHODS", "TRIPLET_MODES", "Engine", "Evaluation", "MethodSpec", "StateInfo",
           "Transition", "make_engine", "PySCFResponseEngine"]


def make_engine(spec: MethodSpec, **kwargs: Any) -> Engine:
    """The engine for ``spec``; keyword arguments go to the engine's constructor."""
    if spec.method == "casscf":
        from .casscf import CASSCFEngine

        return CASSCFEngine(spec, **kwargs)
    if spec.method == SPIN_FLIP:
        from .spinflip import SpinFlipEngine

        return SpinFlipEngine(spec, **kwargs)
    from .pyscf_response import PySCFResponseEngine

    return PySCFResponseEngine(spec, **kwargs)


def __getattr__(name: str) -> Any:
    # lazy export, so that importing surfcross.engine does not import PySCF
    if name == "PySCFResponseEngine":
        from .pyscf_response import PySCFResponseEngine

        return PySCFResponseEngine
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
