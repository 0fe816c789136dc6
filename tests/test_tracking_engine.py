"""State tracking with the PySCF response engine (overlaps through the engine, the tracker).

Outside references:
* orthonormality of CIS/TDA eigenvectors (common practice): overlaps at one geometry are the
  identity;
* PySCF's FCI machinery (pyscf.ci.cisd.to_fcivec, pyscf.fci.addons.overlap) for the
  overlap of the engine's states between two geometries;
* point-group symmetry (PySCF's symmetry-adapted orbitals, pyscf.symm.label_orb_symm, and its
  irrep product table via irrep ids): a state's irreducible representation cannot change
  along a symmetry-preserving path, so a correctly followed state keeps its irrep.
"""

from __future__ import annotations

import numpy as np
import pytest
from pyscf import ci, fci, gto, symm

from surfcross.engine import MethodSpec, make_engine
from surfcross.engine.pyscf_overlap import cross_ao_overlap, response_state_overlaps
from surfcross.errors import StateTrackingError
from surfcross.geometry import Geometry
from surfcross.tracking import StateTracker, TrackingOptions
from surfcross.tracking.overlap import mo_overlap

pytestmark = pytest.mark.pyscf

R_OH = 0.96 / 0.529177210903  # bohr; water-like bond length (our scenario)


def water(theta_deg: float, r: float = R_OH, charge: int = 0, spin: int = 0) -> Geometry:
    """C2v water in PySCF's own symmetry frame (C2 axis z, molecule in the yz plane)."""
    t = np.radians(theta_deg / 2)
    xyz = [[0, 0, 0], [0, r * np.sin(t), r * np.cos(t)], [0, -r * np.sin(t), r * np.cos(t)]]
    return Geometry(("O", "H", "H"), xyz, charge, spin)


@pytest.fixture(scope="module")
def engine():
    eng = make_engine(MethodSpec(method="cis", basis="sto-3g", roots=4, triplet_roots=2))
    yield eng
    eng.close()


def state_irreps(geometry: Geometry, evaluation) -> list[str]:
    """Irrep of each excited singlet from its dominant orbital transition (PySCF tables)."""
    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(geometry.symbols, geometry.coords_bohr)],
                unit="Bohr", basis="sto-3g", symmetry=True, verbose=0)
    assert np.allclose(mol.atom_coords(), geometry.coords_bohr, atol=1e-8)  # same frame
    coeff = evaluation.wavefunction.manifolds["S"].reference.mo_coeff
    names = symm.label_orb_symm(mol, mol.irrep_name, mol.symm_orb, coeff)
    ids = [symm.irrep_name2id(mol.groupname, n) for n in names]
    out = []
    for st in evaluation.manifold("S")[1:]:
        t = max(st.transitions, key=lambda tr: tr.weight)
        out.append(symm.irrep_id2name(mol.groupname, ids[t.occupied] ^ ids[t.virtual]))
    return out


def test_identity_at_one_geometry_all_manifolds(engine):
    # orthonormal CIS states (common practice): |O| = 1 on the diagonal, 0 elsewhere
    ev = engine.states(water(104.5))
    o = engine.overlaps(ev, ev)
    assert set(o) == {"S", "T"}
    assert o["S"].shape == (len(ev.manifold("S")),) * 2
    for m in o.values():
        np.testing.assert_allclose(np.abs(m), np.eye(len(m)), atol=1e-6)
    cation = make_engine(MethodSpec(method="tda", basis="sto-3g", roots=3))
    ev = cation.states(water(104.5, charge=1, spin=1))
    n = len(ev.manifold(""))
    assert n >= 4  # reference + at least the 3 asked roots
    np.testing.assert_allclose(np.abs(cation.overlaps(ev, ev)[""]), np.eye(n), atol=1e-6)
    high = make_engine(MethodSpec(method="cis", basis="sto-3g", roots=1, triplet_roots=1,
                                  triplets="high-spin"))
    ev = high.states(water(104.5))
    assert response_state_overlaps(ev, ev)["T"] == pytest.approx(np.ones((1, 1)), abs=1e-8)


def test_engine_overlaps_match_pyscf_fci_between_geometries(engine):
    # the engine's own MO coefficients and amplitudes turned into FCI vectors with PySCF's
    # CISD-to-FCI conversion; pyscf.fci.addons.overlap gives the reference values
    a, b = engine.states(water(104.5)), engine.states(water(110.0, R_OH * 1.03))
    got = engine.overlaps(a, b)["S"]
    wa, wb = a.wavefunction.manifolds["S"], b.wavefunction.manifolds["S"]
    norb, nocc = 7, 5
    zeros2 = np.zeros((nocc, nocc, norb - nocc, norb - nocc))

    def vectors(w):
        out = [ci.cisd.to_fcivec(ci.cisd.amplitudes_to_cisdvec(1.0, np.zeros((5, 2)), zeros2),
                                 norb, 10)]
        out += [ci.cisd.to_fcivec(ci.cisd.amplitudes_to_cisdvec(0.0, x, zeros2), norb, 10)
                for x in w.amplitudes]
        return out

    smo = mo_overlap(wa.reference.mo_coeff, cross_ao_overlap(a.wavefunction, b.wavefunction),
                     wb.reference.mo_coeff)
    ref = np.array([[fci.addons.overlap(x, y, norb, (5, 5), s=smo) for y in vectors(wb)]
                    for x in vectors(wa)])
    np.testing.assert_allclose(got, ref, atol=1e-10)


def test_triplet_overlaps_match_pyscf_fci_between_geometries(engine):
    # M_S = 0 triplets (beta amplitudes = -alpha): the engine's amplitudes written as FCI
    # vectors with PySCF's unrestricted CISD-to-FCI conversion, overlaps from
    # pyscf.fci.addons.overlap; also checks that the vectors are normalized (CIS norm)
    a, b = engine.states(water(104.5)), engine.states(water(110.0, R_OH * 1.03))
    got = engine.overlaps(a, b)["T"]
    wa, wb = a.wavefunction.manifolds["T"], b.wavefunction.manifolds["T"]
    norb = 7
    zeros2 = np.zeros((5, 5, 2, 2))

    def vector(x):
        x = np.asarray(x)
        v = ci.ucisd.amplitudes_to_cisdvec(0.0, (x, -x), (zeros2, zeros2, zeros2))
        return ci.ucisd.to_fcivec(v, norb, (5, 5))

    smo = mo_overlap(wa.reference.mo_coeff, cross_ao_overlap(a.wavefunction, b.wavefunction),
                     wb.reference.mo_coeff)
    ref = np.array([[fci.addons.overlap(vector(x), vector(y), norb, (5, 5), s=smo)
                     for y in wb.amplitudes] for x in wa.amplitudes])
    assert all(abs(np.linalg.norm(vector(x)) - 1.0) < 1e-10 for x in wa.amplitudes)
    np.testing.assert_allclose(got, ref, atol=1e-10)


def test_followed_states_keep_their_irreps_through_a_bend(engine):
    # symmetric bend 104.5 -> 135 degrees: the A2 state (S2 at the start) and the A1 state
    # (S3) swap adiabatic order (PySCF CIS/STO-3G; labels from PySCF's symmetry tables).
    # Followed by overlap, each keeps its irrep while its adiabatic index changes.
    start = engine.states(water(104.5))
    irreps0 = state_irreps(water(104.5), start)
    tracker = StateTracker(engine, ["S2", "S3"])
    tracker.start(start)
    targets = {"S2": irreps0[1], "S3": irreps0[2]}
    assert targets["S2"] != targets["S3"]
    for theta in np.linspace(104.5, 135.0, 8)[1:]:
        ev = engine.states(water(theta))
        record = tracker.assign(ev)
        assert not record.flags
        tracker.accept(ev, record)
        irreps = state_irreps(water(theta), ev)
        for target, root in record.info["assignment"].items():
            assert irreps[int(root[1:]) - 1] == targets[target]
    assert tracker.roots == {"S2": "S3", "S3": "S2"}  # they did swap
    assert tracker.reorderings == ["S2 moved from root S2 to root S3 at step 3",
                                   "S3 moved from root S3 to root S2 at step 3"]


def test_disabled_tracking_follows_the_index_and_resume_keeps_roots(engine):
    a, b = engine.states(water(104.5)), engine.states(water(135.0))
    off = StateTracker(engine, ["S3"], options=TrackingOptions(enabled=False))
    off.start(a)
    assert off.assign(b).roots == ("S3",)  # adiabatic index: now the A2 state (test above)
    on = StateTracker(engine, ["S3"])
    on.start(a)
    record = on.assign(b)
    assert record.roots == ("S2",) and record.previous_roots == ("S3",) and record.reordered
    on.accept(record)  # the tracker remembers the evaluation of its own record
    saved = on.state_dict()
    resumed = StateTracker(engine, ["S3"])
    resumed.load_state_dict(saved)
    assert resumed.start(b).roots == ("S2",)
    assert resumed.reorderings == on.reorderings
    with pytest.raises(StateTrackingError):
        StateTracker(engine, ["S3"]).assign(b)  # no reference geometry yet


def test_pair_tracking_keeps_the_pair_when_a_third_state_moves_between(engine):
    # pair S1 (B1) / S2 (A2) through the same bend: the A1 state (S3 at the start) drops
    # between them, so the pair ends on roots S1 and S3; irreps from PySCF's tables
    start = engine.states(water(104.5))
    irreps0 = state_irreps(water(104.5), start)
    tracker = StateTracker(engine, ["S1", "S2"], pair=True)
    tracker.start(start)
    for theta in np.linspace(104.5, 135.0, 8)[1:]:
        ev = engine.states(water(theta))
        record = tracker.assign(ev)
        tracker.accept(ev, record)
        irreps = state_irreps(water(theta), ev)
        assert sorted(irreps[int(r[1:]) - 1] for r in record.roots) == sorted(irreps0[:2])
        energies = [ev.energy(r) for r in record.roots]
        assert energies == sorted(energies)  # lower, upper by energy
        assert min(record.confidence) > 0.9 and len(record.phases) == 2
    assert record.roots == ("S1", "S3")


def test_singlet_triplet_pair_is_followed_in_each_manifold(engine):
    a, b = engine.states(water(104.5)), engine.states(water(108.0))
    tracker = StateTracker(engine, ["T1", "S1"], pair=True)
    first = tracker.start(a)
    assert first.roots == ("T1", "S1")  # by energy: the triplet lies lower (PySCF CIS)
    record = tracker.assign(b)
    assert record.info["assignment"] == {"T1": "T1", "S1": "S1"}
    assert set(record.overlaps) >= {"S", "T"}


def test_full_response_overlaps_are_approximate_but_assign_correctly():
    # TDHF: X + Y of different roots are not orthogonal (the metric is X.X' - Y.Y'), so the
    # CIS-like overlaps at one geometry deviate from the identity (common practice: exact
    # only for CIS/TDA); the largest singular value scaling and the assignment still map
    # every root onto itself
    eng = make_engine(MethodSpec(method="tdhf", basis="sto-3g", roots=3))
    ev = eng.states(water(104.5))
    o = eng.overlaps(ev, ev)["S"]
    off = np.abs(o - np.diag(np.diag(o)))
    np.testing.assert_allclose(np.diag(o), 1.0, atol=1e-8)
    assert 1e-3 < off.max() < 0.2
    tracker = StateTracker(eng, ["S1", "S2", "S3"])
    tracker.start(ev)
    record = tracker.assign(ev)
    assert record.roots == ("S1", "S2", "S3")
