"""The benchmark suites: fixed starts, methods and states (all chosen here, not tuned per run).

Start geometries are built from the shipped example molecules (surfcross/data) or from simple
internal coordinates, plus a fixed small displacement where a symmetric start would hide the
symmetry-breaking directions. Minimal basis sets keep the runs short; they are for
benchmarking the optimizers, not for chemistry.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from surfcross.engine import MethodSpec, make_engine
from surfcross.geometry import Geometry
from surfcross.tasks import prepare_method
from surfcross.testing.crossings import conical_case, spin_case

from bench_common import displaced, fixed_shift, molecule, triatomic
from crossing_runs import CrossingCase
from engine_costs import PathCase
from minima_runs import MinimumCase
from tracking_runs import water_bend

S0_S1_CAVEAT = ("S0/S1 with linear response: wrong intersection dimension (the reference does "
                "not couple to the response states); the point is a rough landmark only")


def _factory(spec: MethodSpec, states) -> Callable[[], Any]:
    full = prepare_method(spec, list(states))
    return lambda: make_engine(full)


def twisted_ethylene(twist_deg: float) -> Geometry:
    """Ethylene (shipped structure) with one CH2 group turned about the C=C axis."""
    g = molecule("ethylene")
    c = g.coords_angstrom.copy()
    t = np.radians(twist_deg)
    rot = np.array([[np.cos(t), -np.sin(t), 0.0], [np.sin(t), np.cos(t), 0.0], [0.0, 0.0, 1.0]])
    c[4:6] = c[4:6] @ rot.T
    return Geometry.from_angstrom(g.symbols, c)


def stretched_formaldehyde(r_co: float, pyramid: float) -> Geometry:
    """Formaldehyde with the C-O bond set to ``r_co`` and both H moved out of plane (angstrom)."""
    g = molecule("formaldehyde")
    c = g.coords_angstrom.copy()
    c[1, 2] = r_co
    c[2:4, 0] += pyramid
    return Geometry.from_angstrom(g.symbols, c)


def model_crossings() -> list[CrossingCase]:
    out = []
    for known in (conical_case(), spin_case()):
        out.append(CrossingCase(
            name=f"model {known.name} {'/'.join(known.states)}", make_engine=known.make_engine,
            states=known.states, start=known.start, is_model=True,
            note=f"closed-form seam minimum at mean energy {known.crossing_energy_eh:.6f} Eh"))
    return out


def molecule_crossings() -> list[CrossingCase]:
    cis = MethodSpec(method="cis", basis="sto-3g")
    tda = MethodSpec(method="tda", basis="sto-3g")
    high_spin = MethodSpec(method="cis", basis="sto-3g", triplets="high-spin")
    water = displaced(triatomic(("O", "H", "H"), 0.9578, 105.0), fixed_shift(3, 0.02, 1))
    return [
        CrossingCase(name="methylene S0/T1 (RHF/UHF high-spin)",
                     make_engine=_factory(high_spin, ("S0", "T1")), states=("S0", "T1"),
                     start=triatomic(("C", "H", "H"), 1.09, 105.0),
                     note="closed-shell singlet / high-spin triplet SCF states"),
        CrossingCase(name="water S2/S3 CIS (A2/A1)", make_engine=_factory(cis, ("S2", "S3")),
                     states=("S2", "S3"), start=water,
                     note="states of different symmetry in a planar molecule: the crossing "
                          "is one-dimensional, not conical"),
        CrossingCase(name="ethylene S1/S2 CIS, 45 deg twist", quick=False,
                     make_engine=_factory(cis, ("S1", "S2")), states=("S1", "S2"),
                     start=displaced(twisted_ethylene(45.0), fixed_shift(6, 0.02, 3))),
        CrossingCase(name="ethylene S1/T2 TDA (response), 45 deg twist", quick=False,
                     make_engine=_factory(tda, ("S1", "T2")), states=("S1", "T2"),
                     start=displaced(twisted_ethylene(45.0), fixed_shift(6, 0.02, 3))),
        CrossingCase(name="formaldehyde S1/T1 TDA (response), stretched",
                     make_engine=_factory(tda, ("S1", "T1")), states=("S1", "T1"),
                     start=stretched_formaldehyde(1.35, 0.1)),
        CrossingCase(name="formaldehyde S0/S1 CIS, stretched",
                     make_engine=_factory(cis, ("S0", "S1")), states=("S0", "S1"),
                     start=stretched_formaldehyde(1.45, 0.15), note=S0_S1_CAVEAT),
    ]


def crossing_suite(mode: str) -> list[CrossingCase]:
    if mode == "models":
        return model_crossings()
    cases = model_crossings() + molecule_crossings()
    return cases if mode == "full" else [c for c in cases if c.quick]


def minimum_suite(mode: str) -> list[MinimumCase]:
    cis = MethodSpec(method="cis", basis="sto-3g")
    high_spin = MethodSpec(method="cis", basis="sto-3g", triplets="high-spin")
    dft = MethodSpec(method="tda", xc="pbe0", basis="sto-3g")
    pyramidal = displaced(molecule("formaldehyde"),
                          np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 0.0],
                                    [0.15, 0.0, 0.0], [0.15, 0.0, 0.0]]))
    rows = [
        ("water S0 (HF)", cis, "S0", triatomic(("O", "H", "H"), 1.0, 110.0), True),
        ("formaldehyde S0 (HF)", cis, "S0", molecule("formaldehyde"), True),
        ("formaldehyde S1 CIS, pyramidal start", cis, "S1", pyramidal, True),
        ("methylene T1 (UHF high-spin)", high_spin, "T1",
         triatomic(("C", "H", "H"), 1.09, 120.0), True),
        ("ethylene S0 (HF)", cis, "S0", displaced(molecule("ethylene"), fixed_shift(6, 0.05, 7)),
         False),
        ("formaldehyde S1 TDA-PBE0, pyramidal start", dft, "S1", pyramidal, False),
    ]
    cases = [MinimumCase(name=n, make_engine=_factory(m, (s,)), state=s, start=g, method=m,
                         quick=q) for n, m, s, g, q in rows]
    return cases if mode == "full" else [c for c in cases if c.quick]


def warm_suite(mode: str) -> list[PathCase]:
    pyramidal = displaced(molecule("formaldehyde"),
                          np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 0.0],
                                    [0.15, 0.0, 0.0], [0.15, 0.0, 0.0]]))
    cases = [PathCase(name="formaldehyde S1 CIS/STO-3G relax path", start=pyramidal, state="S1",
                      method=MethodSpec(method="cis", basis="sto-3g")),
             PathCase(name="formaldehyde S1 TDA/6-31G relax path", start=pyramidal, state="S1",
                      method=MethodSpec(method="tda", basis="6-31g"), quick=False)]
    return cases if mode == "full" else [c for c in cases if c.quick]


def tracking_suite(mode: str):
    paths = [water_bend("S2"), water_bend("S3")]
    return paths if mode == "full" else [p for p in paths if p.quick]
