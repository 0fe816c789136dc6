"""Choosing a crossing search: names, defaults, and the factory.

Search names (our own plain words):

* ``'penalty'`` -- smoothed penalty function with sequential weight increase; no couplings
  needed; any pair of states (:mod:`.penalty`).
* ``'projected'`` -- composed gradient with a two-dimensional branching plane, from the
  coupling vector when the engine has it, else from the branching-plane update
  (:mod:`.projected`). For conical intersections (same spin).
* ``'spin'`` -- effective gradient with a one-dimensional branching space, for states of
  different spin or symmetry (:mod:`.spin`).
* ``'auto'`` -- 'projected' for a pair in the same spin manifold that can couple, 'spin'
  otherwise: for states of different spin, for the reference state with a linear-response
  state, and for states whose symmetry no nuclear motion can mix (``symmetry`` below).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any, Sequence

from ..engine.base import Engine
from ..errors import InputError
from ..states import StateLabel, parse_states
from .crossing import GAP_TOLERANCES
from .penalty import PenaltyObjective, PenaltySettings
from .projected import ProjectedObjective, ProjectedSettings
from .spin import SpinCrossingObjective, SpinSettings

__all__ = ["SEARCHES", "choose_search", "make_crossing_objective", "default_settings",
           "gap_tolerance", "optimizer_settings_for", "with_gap_tolerance"]

#: trust radius (bohr) to start crossing searches with (METHODS defaults: 0.1 bohr for
#: crossings against 0.3 bohr for minima; our choice)
CROSSING_TRUST_RADIUS = 0.1
#: largest Hessian eigenvalue the penalty search needs (Eh/bohr^2): the curvature of F in the
#: branching plane grows to ~2 sigma |x1|^2 / alpha, i.e. several hundred at sigma ~ 300
PENALTY_MAX_CURVATURE = 1e4
#: largest displacement of one atom in one step of a crossing search (bohr; common practice
#: for searches that must not lose the pair of states they follow)
CROSSING_MAX_ATOM_STEP = 0.3

SEARCHES = ("auto", "penalty", "projected", "spin")

_SETTINGS = {"penalty": PenaltySettings, "projected": ProjectedSettings, "spin": SpinSettings}
_OBJECTIVES = {"penalty": PenaltyObjective, "projected": ProjectedObjective,
               "spin": SpinCrossingObjective}


def gap_tolerance(preset: str = "default") -> float:
    """Gap tolerance (Eh) of a preset: 'default' 1e-3, 'tight' 1e-4."""
    try:
        return GAP_TOLERANCES[preset]
    except KeyError:
        raise InputError(f"unknown convergence preset {preset!r}: choose "
                         f"{', '.join(GAP_TOLERANCES)}") from None


def choose_search(states: Sequence[str | StateLabel], search: str = "auto",
                  method: Any = None, symmetry: Any = None) -> str:
    """The concrete search for a pair: resolves 'auto' by whether the pair can couple.

    States of one spin manifold form conical intersections ('projected'); states of different
    spin do not couple ('spin'). With a linear-response method (anything but 'casscf' in
    ``method``, a MethodSpec) the reference state does not couple to response states either,
    so an S0/Sn pair is a one-dimensional crossing there ('spin') -- the wrong topology, which
    the objective's warning explains. ``symmetry`` (a mapping with ``can_mix``, from the
    pair's irreps at the start, see ``tasks.crossing``) sends a same-spin pair that no nuclear
    motion can couple (e.g. A1 and A2 states of water, which has no A2 vibration) to 'spin'.
    """
    name = search.strip().lower()
    if name not in SEARCHES:
        raise InputError(f"unknown crossing search {search!r}: choose {', '.join(SEARCHES)}")
    if name != "auto":
        return name
    a, b = parse_states(list(states), count=2)
    if a.manifold != b.manifold:
        return "spin"
    response = method is not None and getattr(method, "method", "casscf") != "casscf"
    if response and (a.is_reference or b.is_reference):
        return "spin"
    if symmetry is not None and symmetry.get("can_mix") is False:
        return "spin"
    return "projected"


def default_settings(search: str, preset: str = "default") -> Any:
    """Settings dataclass of a concrete search with the preset's gap tolerance."""
    if search not in _SETTINGS:
        raise InputError(f"no settings for search {search!r}: choose {', '.join(_SETTINGS)}")
    return _SETTINGS[search](gap_tol_eh=gap_tolerance(preset))


def make_crossing_objective(engine: Engine, states: Sequence[str | StateLabel],
                            search: str = "auto", settings: Any = None, *,
                            preset: str = "default", tracker: Any = None,
                            tracking_options: Any = None, symmetry: Any = None):
    """Build the crossing objective for a pair of states.

    Parameters
    ----------
    engine
        Any engine (PySCF response engine, model engine, ...).
    states
        Two task labels, e.g. ``('S1', 'S2')`` or ``('S1', 'T1')``.
    search
        'auto', 'penalty', 'projected' or 'spin' (see the module docstring).
    settings
        The settings dataclass of the chosen search (``PenaltySettings``,
        ``ProjectedSettings``, ``SpinSettings``); defaults of the preset when None.
    preset
        'default' (gap 1e-3 Eh) or 'tight' (1e-4 Eh); used only when ``settings`` is None.
    tracker, tracking_options
        A ready pair tracker, or options for the default one.
    symmetry
        The pair's symmetry at the start (see :func:`choose_search`), or None.
    """
    name = choose_search(states, search, getattr(engine, "spec", None), symmetry)
    if settings is None:
        settings = default_settings(name, preset)
    elif not isinstance(settings, _SETTINGS[name]):
        raise InputError(f"the {name} search takes {_SETTINGS[name].__name__}, "
                         f"got {type(settings).__name__}")
    extra = {"symmetry": symmetry} if name == "spin" else {}
    return _OBJECTIVES[name](engine, states, settings, tracker=tracker,
                             tracking_options=tracking_options, **extra)


def optimizer_settings_for(search: str, base: Any = None) -> Any:
    """Optimizer settings suited to a crossing search (a copy of ``base`` with changes).

    All searches start with a 0.1 bohr trust radius (unless ``base`` sets a smaller one) and
    move no atom by more than 0.3 bohr in one step (``max_atom_step``). The
    penalty search also needs large Hessian eigenvalues to be allowed (``max_curvature``
    1e4 Eh/bohr^2): with the usual clamp of 100 the quasi-Newton model cannot follow the
    stiffness of F at large sigma and the search oscillates.
    """
    from ..optimize.settings import OptimizerSettings

    base = OptimizerSettings() if base is None else base
    changes: dict[str, Any] = {"trust_radius": min(base.trust_radius, CROSSING_TRUST_RADIUS)}
    changes["trust_min"] = min(base.trust_min, changes["trust_radius"])
    cap = base.max_atom_step
    changes["max_atom_step"] = CROSSING_MAX_ATOM_STEP if cap is None else \
        min(cap, CROSSING_MAX_ATOM_STEP)
    if search == "penalty":
        changes["max_curvature"] = max(base.max_curvature, PENALTY_MAX_CURVATURE)
    return replace(base, **changes)


def with_gap_tolerance(settings: Any, gap_tol_eh: float) -> Any:
    """A copy of any crossing settings dataclass with another gap tolerance."""
    return replace(settings, gap_tol_eh=gap_tol_eh)
