"""State labels. The S_n / T_n naming (S0 ground singlet, S1 lowest excited singlet, T1
lowest triplet) is the usual notation of photochemistry (Jablonski diagrams; common practice)."""

import pytest

from surfcross.errors import InputError
from surfcross.states import INDEXED, SINGLET, TRIPLET, StateLabel, parse_state, parse_states


@pytest.mark.parametrize("text,manifold,index", [
    ("S0", SINGLET, 0), ("s1", SINGLET, 1), (" T3 ", TRIPLET, 3), ("0", INDEXED, 0),
    ("12", INDEXED, 12), ("S10", SINGLET, 10),
])
def test_parse(text, manifold, index):
    label = parse_state(text)
    assert (label.manifold, label.index) == (manifold, index)
    assert parse_state(str(label)) == label
    assert parse_state(label) is label


@pytest.mark.parametrize("text", ["X1", "S", "S-1", "S1.5", "", "T 1 2", "singlet"])
def test_bad_labels(text):
    with pytest.raises(InputError, match="unknown state label"):
        parse_state(text)


def test_no_t0_and_bad_manifold():
    with pytest.raises(InputError, match="no T0"):
        parse_state("T0")
    with pytest.raises(InputError, match="manifold"):
        StateLabel("Q", 1)
    with pytest.raises(InputError, match=">= 0"):
        StateLabel("S", -1)


def test_properties():
    assert parse_state("S0").is_reference and parse_state("0").is_reference
    assert not parse_state("S1").is_reference and not parse_state("T1").is_reference
    # spin multiplicity 2S+1: singlet 1, triplet 3 (definition)
    assert parse_state("S2").multiplicity == 1 and parse_state("T1").multiplicity == 3
    assert parse_state("2").multiplicity is None
    assert sorted(parse_states("T1,S2,S0")) == [parse_state("S0"), parse_state("S2"), parse_state("T1")]


def test_parse_states():
    assert parse_states("S1, S2") == (parse_state("S1"), parse_state("S2"))
    assert parse_states(["S1", "T1"], count=2) == (parse_state("S1"), parse_state("T1"))
    assert parse_states("S1,,S2") == (parse_state("S1"), parse_state("S2"))
    with pytest.raises(InputError, match="twice"):
        parse_states("S1,s1")
    with pytest.raises(InputError, match="expected 2 state label"):
        parse_states("S1", count=2)
