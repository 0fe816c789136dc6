"""Point groups and irreps of states, found in the input frame, against PySCF's own symmetry.

Outside reference: PySCF with ``symmetry=True`` (its point group and orbital irreps; the irrep
of a CIS state is that of its dominant excitation, occupied x virtual, exact for a state of
pure symmetry). The engine's own irreps never use PySCF's symmetry machinery: they come from
the geometry's symmetry operations and overlaps with the transformed wavefunction. Known
assignments used as a check of the check: water's lowest CIS singlet is HOMO (1b1) -> LUMO
(4a1), i.e. B1 (textbook, e.g. the photoelectron assignment of water's 1b1 lone pair).
"""

import numpy as np
import pytest

from surfcross.engine import MethodSpec, make_engine
from surfcross.engine.symmetry import (can_mix, find_point_group, symmetric_displacements,
                                       vibration_irreps)
from surfcross.geometry import Geometry, read_xyz
from pathlib import Path

pyscf = pytest.importorskip("pyscf")
from pyscf import gto, scf, symm, tdscf  # noqa: E402

DATA = Path(__file__).resolve().parents[1] / "surfcross" / "data"
WATER = Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0.117], [0, 0.757, -0.47],
                                                 [0, -0.757, -0.47]])


def pyscf_irreps(geometry, nroots, singlet=True):
    """Point group and irreps of the CIS roots from PySCF's symmetry-adapted calculation."""
    mol = gto.M(atom=[(s, tuple(x)) for s, x in zip(geometry.symbols, geometry.coords_angstrom)],
                basis="sto-3g", symmetry=True, verbose=0)
    mf = scf.RHF(mol).run()
    td = tdscf.TDA(mf)
    td.nstates, td.singlet = nroots, singlet
    td.kernel()
    orbsym = symm.label_orb_symm(mol, mol.irrep_id, mol.symm_orb, mf.mo_coeff)
    nocc = int((mf.mo_occ > 0).sum())
    out = []
    for x, _ in td.xy:
        i, a = np.unravel_index(np.argmax(np.abs(x)), x.shape)
        out.append(symm.irrep_id2name(mol.groupname, orbsym[i] ^ orbsym[nocc + a]))
    return mol.groupname, out


def our_irreps(geometry, roots=4, triplets=0):
    engine = make_engine(MethodSpec(method="cis", basis="sto-3g", roots=roots,
                                    triplet_roots=triplets))
    ev = engine.with_irreps(engine.states(geometry))
    return ev


def rotated(geometry, seed=3):
    rot = np.linalg.qr(np.random.default_rng(seed).standard_normal((3, 3)))[0]
    return geometry.with_coords(geometry.coords_bohr @ rot.T + np.array([0.3, -0.2, 0.5]))


@pytest.mark.pyscf
@pytest.mark.slow
@pytest.mark.parametrize("name", ["water", "water rotated", "formaldehyde", "ethylene"])
def test_irreps_match_pyscf(name):
    geometry = {"water": WATER, "water rotated": rotated(WATER)}.get(name)
    if geometry is None:
        geometry = read_xyz(DATA / f"{name}.xyz")
    ev = our_irreps(geometry, roots=4, triplets=3)
    group, singlets = pyscf_irreps(geometry, 4)
    _, triplets = pyscf_irreps(geometry, 3, singlet=False)
    assert ev.point_group == group
    assert [ev.state(f"S{k}").irrep for k in range(1, 5)] == singlets
    assert [ev.state(f"T{k}").irrep for k in range(1, 4)] == triplets
    assert ev.state("S0").irrep == {"C2v": "A1", "D2h": "Ag"}[group]
    if name.startswith("water"):
        assert ev.state("S1").irrep == "B1"  # HOMO 1b1 -> LUMO 4a1


@pytest.mark.pyscf
@pytest.mark.slow
def test_d2_states_grouped_as_pyscf_groups_them():
    # in D2 (a twisted ethylene) the names B1/B2/B3 depend on which two-fold axis is called z,
    # which no convention fixes for non-planar molecules; the grouping of states by symmetry
    # does not
    g = read_xyz(DATA / "ethylene.xyz")
    c = g.coords_angstrom.copy()
    t = np.radians(20.0)
    rot = np.array([[np.cos(t), -np.sin(t), 0], [np.sin(t), np.cos(t), 0], [0, 0, 1]])
    c[4:6] = c[4:6] @ rot.T
    twisted = Geometry.from_angstrom(g.symbols, c)
    ev = our_irreps(twisted, roots=5)
    group, ref = pyscf_irreps(twisted, 5)
    assert ev.point_group == group == "D2"
    ours = [ev.state(f"S{k}").irrep for k in range(1, 6)]
    same = lambda labels: [[labels[i] == labels[j] for j in range(5)] for i in range(5)]  # noqa
    assert same(ours) == same(ref)


def test_small_distortions_keep_the_group_and_large_ones_lower_it():
    rng = np.random.default_rng(11)
    jitter = WATER.with_coords(WATER.coords_bohr + 1e-3 / 0.529177 * rng.uniform(-1, 1, (3, 3)))
    assert find_point_group(jitter.symbols, jitter.coords_bohr).name == "C2v"
    stretched = WATER.coords_bohr.copy()
    stretched[1] *= 1.05  # one O-H bond 5 % longer: only the molecular plane is left
    assert find_point_group(WATER.symbols, stretched).name == "Cs"


@pytest.mark.pyscf
@pytest.mark.slow
def test_irreps_survive_a_jitter_of_a_thousandth_of_an_angstrom():
    rng = np.random.default_rng(12)
    jitter = WATER.with_coords(WATER.coords_bohr + 1e-3 / 0.529177 * rng.uniform(-1, 1, (3, 3)))
    a, b = our_irreps(WATER), our_irreps(jitter)
    assert a.irreps() == b.irreps()
    assert a.energies() != b.energies()  # the surface is evaluated where the atoms are


def test_vibrations_and_coupling_of_water_states():
    # water (C2v) has 2 A1 and 1 B2 vibrations (textbook normal-mode count); no product of
    # them has A2 symmetry, so an A1 and an A2 state never couple, while A1 and B2 states do
    group = find_point_group(WATER.symbols, WATER.coords_bohr)
    modes = vibration_irreps(group, WATER.coords_bohr)
    assert modes == {"A1": 2, "A2": 0, "B1": 0, "B2": 1}
    assert not can_mix(group, "A1", "A2", modes)
    assert can_mix(group, "A1", "B2", modes)
    assert can_mix(group, "A2", "A2", modes)
    # displacements that keep C2v: the two A1 modes plus the A1 rigid motion (z translation)
    assert symmetric_displacements(group, 3).shape[0] == 3


def test_ethylene_vibrations():
    # planar ethylene (D2h): 3N - 6 = 12 vibrations, three of them totally symmetric (ag; the
    # C=C stretch, the symmetric C-H stretch and the CH2 scissors: textbook)
    g = read_xyz(DATA / "ethylene.xyz")
    group = find_point_group(g.symbols, g.coords_bohr)
    modes = vibration_irreps(group, g.coords_bohr)
    assert group.name == "D2h" and sum(modes.values()) == 12
    assert modes["Ag"] == 3
