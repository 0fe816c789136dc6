"""The 'auto' crossing search follows the topology the method gives the pair.

Outside facts: states of different spin do not couple under a spin-free Hamiltonian (one-
dimensional branching space; textbook); in linear-response CIS/TDA/TDDFT the reference does not
couple to response states, so reference/response crossings are one-dimensional (Li, Marenich,
Xu, Truhlar, J. Phys. Chem. Lett. 2014, 5, 322, abstract); SA-CASSCF states of one spin form
conical intersections.
"""

import pytest

from surfcross import MethodSpec
from surfcross.objectives.searches import choose_search

CIS = MethodSpec(method="cis")
CAS = MethodSpec(method="casscf", active_space=(2, 2), roots=1)


@pytest.mark.parametrize("states, method, expected", [
    (("S1", "S2"), CIS, "projected"),
    (("S1", "T1"), CIS, "spin"),
    (("S0", "T1"), CIS, "spin"),
    (("S0", "S1"), CIS, "spin"),
    (("S0", "S1"), CAS, "projected"),
    (("S0", "S1"), None, "projected"),  # no method known: by spin only
])
def test_auto_choice(states, method, expected):
    assert choose_search(states, "auto", method) == expected


def test_explicit_choice_is_kept():
    assert choose_search(("S0", "S1"), "projected", CIS) == "projected"


def test_spin_search_on_a_reference_pair_gives_no_contradicting_advice():
    # the auto choice picks the one-dimensional search for S0/S1 with CIS; the objective must
    # not then advise the projected search (it did before)
    from surfcross.objectives.searches import make_crossing_objective

    class _Engine:
        spec = CIS
        has_couplings = False

    objective = make_crossing_objective(_Engine(), ("S0", "S1"), "auto")
    assert objective.search == "spin"
    assert not any("use the projected search" in w for w in objective.warnings)
