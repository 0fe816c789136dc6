"""Singlet-triplet couplings of response states: selection rules, invariance, the API.

Formaldehyde (C2v, C=O along z, molecular plane yz, as in surfcross/data/formaldehyde.xyz):
the HOMO is the oxygen lone pair n (b2), HOMO-1 the pi orbital (b1), the LUMO pi* (b1), so
n->pi* states are A2 and pi->pi* states A1. The spin-orbit operator transforms like the
rotations R_z (A2), R_x (B2), R_y (B1) (C2v character table; common practice):
* El-Sayed's rule: 1(n,pi*) - 3(n,pi*) vanishes (A2 x A2 = A1 holds no rotation), while
  1(n,pi*) - 3(pi,pi*) does not (A2 x A1 = A2 = R_z: the z component only);
* S0 (A1) - 3(pi,pi*) (A1) vanishes; S0 - 3(n,pi*) (A2) goes through z only.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import surfcross as sc
from surfcross.engine.pyscf_response import PySCFResponseEngine
from surfcross.engine.pyscf_soc import spin_orbit_at, spin_orbit_couplings
from surfcross.errors import InputError

pytest.importorskip("pyscf")

CIS = sc.MethodSpec(method="cis", basis="6-31g", roots=2, triplet_roots=2)
ZERO_CM = 0.05  # numerical zero: response roots converged to 1e-6 (allowed couplings ~50 cm^-1)


@pytest.fixture(scope="module")
def formaldehyde():
    from importlib import resources

    path = resources.files("surfcross.data") / "formaldehyde.xyz"
    return sc.read_xyz(str(path))


@pytest.fixture(scope="module")
def cis_couplings(formaldehyde):
    return spin_orbit_at(formaldehyde, CIS, "effective-charge")


def _orbitals(evaluation, label):
    t = evaluation.state(label).transitions[0]
    return t.occupied - evaluation.homo, t.virtual - evaluation.homo  # (0, 1) = HOMO->LUMO


def test_formaldehyde_states_are_the_expected_characters(cis_couplings):
    evaluation, _ = cis_couplings
    assert _orbitals(evaluation, "S1") == (0, 1)  # 1(n, pi*)
    assert _orbitals(evaluation, "T1") == (0, 1)  # 3(n, pi*)
    assert _orbitals(evaluation, "T2") == (-1, 1)  # 3(pi, pi*)


def test_el_sayed_rule_on_formaldehyde(cis_couplings):
    _, soc = cis_couplings
    assert soc.total_cm("S1", "T1") < ZERO_CM  # n,pi* - n,pi*: forbidden
    allowed = soc.pair("S1", "T2")  # n,pi* - pi,pi*: allowed, through R_z only
    assert allowed.total_cm > 10.0
    x, y, z = allowed.cartesian_cm
    assert abs(x) < ZERO_CM and abs(y) < ZERO_CM and abs(z) > 10.0
    # the z component couples to the M = 0 sublevel only
    m_minus, m_zero, m_plus = allowed.elements_cm
    assert abs(m_minus) < ZERO_CM and abs(m_plus) < ZERO_CM
    assert abs(abs(m_zero) - allowed.total_cm) < 1e-9


def test_ground_state_selection_rules(cis_couplings):
    _, soc = cis_couplings
    assert soc.total_cm("S0", "T2") < ZERO_CM  # A1 - A1
    x, y, z = soc.pair("S0", "T1").cartesian_cm  # A1 - A2: R_z
    assert abs(x) < ZERO_CM and abs(y) < ZERO_CM and abs(z) > 10.0


@pytest.mark.pyscf
def test_couplings_do_not_depend_on_orientation(formaldehyde, cis_couplings):
    _, soc = cis_couplings
    rot = Rotation.from_euler("zyx", [37.0, -61.0, 113.0], degrees=True).as_matrix()
    moved = formaldehyde.with_coords(formaldehyde.coords_bohr @ rot.T + np.array([0.7, -1.1, 2.3]))
    _, turned = spin_orbit_at(moved, CIS, "effective-charge")
    for before, after in zip(soc.pairs, turned.pairs):
        assert (before.singlet, before.triplet) == (after.singlet, after.triplet)
        assert abs(before.total_cm - after.total_cm) < 1e-3 * max(1.0, before.total_cm)
        # the Cartesian vector turns with the molecule (up to the arbitrary state signs)
        np.testing.assert_allclose(np.abs(rot @ np.array(before.cartesian_cm)),
                                   np.abs(after.cartesian_cm), atol=2e-3 * max(1.0, before.total_cm))


@pytest.mark.pyscf
def test_operators_agree_roughly_and_record_themselves(formaldehyde, cis_couplings):
    evaluation, effective = cis_couplings
    mean = spin_orbit_couplings(evaluation, "mean-field", method=CIS)
    bare = spin_orbit_couplings(evaluation, "bare-nuclear", method=CIS)
    assert (effective.operator, mean.operator, bare.operator) == (
        "effective-charge", "mean-field", "bare-nuclear")
    for pair in ("S0", "T1"), ("S1", "T2"):
        e, m, b = (r.total_cm(*pair) for r in (effective, mean, bare))
        assert abs(e - m) < 0.25 * m  # both screen the bare one-electron term
        assert b > 1.2 * max(e, m)
    auto = spin_orbit_couplings(evaluation, method=CIS)
    assert auto.operator == "effective-charge" and auto.amplitudes == "cis"
    assert any("first-order" in note for note in auto.notes)
    data = auto.to_dict()
    assert data["pairs"][0]["singlet"] == "S0" and set(data["pairs"][0]["sublevels"]) == {
        "-1", "0", "+1"}


@pytest.mark.pyscf
def test_selection_of_pairs(cis_couplings):
    evaluation, _ = cis_couplings
    soc = spin_orbit_couplings(evaluation, singlets=["S1"], triplets=["T2", "T1"])
    assert [(str(p.singlet), str(p.triplet)) for p in soc.pairs] == [("S1", "T2"), ("S1", "T1")]
    with pytest.raises(InputError, match="T9 was not computed"):
        spin_orbit_couplings(evaluation, triplets=["T9"])
    with pytest.raises(InputError, match="no spin-orbit coupling between S2 and T1"):
        soc.pair("S2", "T1")


@pytest.mark.pyscf
def test_full_response_tddft_keeps_the_selection_rules(formaldehyde):
    spec = sc.MethodSpec(method="tddft", xc="pbe0", basis="sto-3g", roots=1, triplet_roots=2)
    _, soc = spin_orbit_at(formaldehyde, spec)
    assert soc.amplitudes == "x+y"
    assert any("X + Y" in note for note in soc.notes)
    assert soc.total_cm("S1", "T1") < ZERO_CM
    assert soc.total_cm("S1", "T2") > 5.0


@pytest.mark.pyscf
def test_wrong_kinds_of_evaluation_are_refused(formaldehyde):
    no_triplets = sc.MethodSpec(method="cis", basis="sto-3g", roots=1)
    high_spin = no_triplets.with_updates(triplet_roots=1, triplets="high-spin")
    for spec in (no_triplets, high_spin):
        with PySCFResponseEngine(spec) as engine:
            evaluation = engine.states(formaldehyde)
        with pytest.raises(InputError, match="response triplets"):
            spin_orbit_couplings(evaluation)
    with PySCFResponseEngine(no_triplets) as engine:
        evaluation = engine.states(formaldehyde.with_charge_spin(1, 1))  # unrestricted cation
    with pytest.raises(InputError, match="restricted closed-shell"):
        spin_orbit_couplings(evaluation)
