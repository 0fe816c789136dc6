"""Primitive internal coordinates: values, B-matrix rows and the choice of the primitive set."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import pdist, squareform

from surfcross.coords.connectivity import build_primitives, covalent_bonds, fragment_links
from surfcross.coords.internal import RedundantInternals
from surfcross.coords.primitives import Primitive, b_matrix, row, value, values, wrap_angle
from test_coords_molecules import ALL, ethylene, formaldehyde, water_dimer


def _numerical_row(p: Primitive, xyz: np.ndarray, step: float = 1e-5) -> np.ndarray:
    """Central finite differences of the primitive value (wrapped for dihedrals)."""
    out = np.zeros_like(xyz)
    for atom in range(len(xyz)):
        for k in range(3):
            plus, minus = xyz.copy(), xyz.copy()
            plus[atom, k] += step
            minus[atom, k] -= step
            diff = value(p, plus) - value(p, minus)
            out[atom, k] = (wrap_angle(diff) if p.is_periodic else diff) / (2 * step)
    return out


@pytest.mark.parametrize("name", sorted(ALL))
def test_every_b_row_matches_central_differences(name):
    # reference: central finite differences of the primitive values (common practice for
    # checking analytic derivatives); error of the 1e-5 bohr step is O(1e-10)
    symbols, xyz = ALL[name]()
    prims, _ = build_primitives(symbols, xyz)
    # distort slightly so that no derivative is checked only at a symmetric point
    xyz = xyz + np.random.default_rng(7).normal(scale=0.02, size=xyz.shape)
    kinds = set()
    for p in prims:
        assert np.allclose(row(p, xyz), _numerical_row(p, xyz), atol=1e-7), p
        kinds.add(p.kind)
    expected = {"water": {"bond", "angle"}, "formaldehyde": {"bond", "angle", "out_of_plane"},
                "ethylene": {"bond", "angle", "dihedral", "out_of_plane"}, "hcn": {"bond", "linear_bend"},
                "co2": {"bond", "linear_bend"},
                "water_dimer": {"bond", "angle", "linear_bend", "dihedral", "out_of_plane"}}[name]
    assert kinds == expected


def test_linear_bend_rows_at_exactly_straight_geometry():
    # CO2 exactly linear: the linear bends must stay differentiable there (finite differences,
    # common practice), while the ordinary angle is not usable
    symbols, xyz = ALL["co2"]()
    bends = [p for p in build_primitives(symbols, xyz)[0] if p.kind == "linear_bend"]
    assert len(bends) == 2
    for p in bends:
        assert abs(value(p, xyz)) < 1e-12
        assert np.allclose(row(p, xyz), _numerical_row(p, xyz), atol=1e-7)


def test_bond_and_angle_values_match_independent_formulas():
    # references: scipy.spatial.distance.pdist for distances; the law of cosines for the angle
    symbols, xyz = formaldehyde()
    dist = squareform(pdist(xyz))
    assert np.isclose(value(Primitive("bond", (0, 2)), xyz), dist[0, 2])
    a, b, c = dist[0, 2], dist[0, 3], dist[2, 3]
    law_of_cosines = np.arccos((a**2 + b**2 - c**2) / (2 * a * b))
    assert np.isclose(value(Primitive("angle", (2, 0, 3)), xyz), law_of_cosines)
    assert np.isclose(np.degrees(law_of_cosines), 116.133)  # Gurvich via NIST CCCBDB


@pytest.mark.parametrize("phi_deg", [60.0, -60.0, 150.0, -179.0, 180.0])
def test_dihedral_sign_follows_iupac_convention(phi_deg):
    # IUPAC torsion-angle definition (recalled from memory): looking along b->c, the angle is
    # positive when the front bond a-b turns clockwise by less than 180 deg onto c-d. Worked
    # example: b at the origin, c on +z, a along +x; looking along +z a rotation from +x toward
    # +y appears clockwise, so d at azimuth +phi gives torsion +phi.
    phi = np.radians(phi_deg)
    xyz = np.array([[1.0, 0.0, -0.3], [0.0, 0.0, 0.0], [0.0, 0.0, 1.5], [np.cos(phi), np.sin(phi), 1.8]])
    got = value(Primitive("dihedral", (0, 1, 2, 3)), xyz)
    assert np.isclose(wrap_angle(got - phi), 0.0, atol=1e-12)
    assert -np.pi < got <= np.pi


def test_out_of_plane_value_of_pyramidal_centre():
    # reference: elementary geometry. A centre at the origin, a and b in the xy plane and d at
    # elevation 20 deg above that plane: the out-of-plane angle is 20 deg.
    elev = np.radians(20.0)
    xyz = np.array([[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [-0.5, 0.9, 0.0],
                    [-0.5 * np.cos(elev), -0.9 * np.cos(elev), np.sin(elev) * np.hypot(0.5, 0.9)]])
    oop = value(Primitive("out_of_plane", (0, 1, 2, 3)), xyz)
    assert np.isclose(abs(oop), elev)


def test_wrap_angle_range():
    # common practice: differences of periodic angles are reduced to (-pi, pi]
    wrapped = wrap_angle(np.array([np.pi, -np.pi, 3 * np.pi, 2 * np.pi + 0.1, -0.1 - 2 * np.pi]))
    assert np.allclose(wrapped, [np.pi, np.pi, np.pi, 0.1, -0.1])


def _external_basis(xyz: np.ndarray) -> np.ndarray:
    """Orthonormal rigid translations and rotations, (3N, 5 or 6)."""
    moves = [np.tile(np.eye(3)[k], len(xyz)) for k in range(3)]
    moves += [np.cross(np.eye(3)[k], xyz - xyz.mean(axis=0)).reshape(-1) for k in range(3)]
    u, s, _ = np.linalg.svd(np.array(moves).T, full_matrices=False)
    return u[:, s > 1e-8 * s[0]]


@pytest.mark.parametrize("name", sorted(ALL))
def test_primitive_set_spans_all_internal_motions(name):
    # textbook fact: a molecule of N atoms has 3N-6 internal motions (3N-5 if linear); the
    # B matrix restricted to the space orthogonal to rigid motions must have that rank
    symbols, xyz = ALL[name]()
    prims, _ = build_primitives(symbols, xyz)
    ext = _external_basis(xyz)
    internal_projector = np.eye(xyz.size) - ext @ ext.T
    expected = xyz.size - ext.shape[1]
    assert expected == 3 * len(symbols) - (5 if name == "co2" else 6)
    bmat = b_matrix(prims, xyz) @ internal_projector
    assert np.linalg.matrix_rank(bmat, tol=1e-6) == expected
    assert RedundantInternals(symbols, xyz).missing_motions(xyz) == 0


def test_b_rows_are_free_of_translation_and_rotation_for_true_internals():
    # common practice: bond, angle, dihedral and out-of-plane values do not change under rigid
    # translation or rotation, so every B row is orthogonal to those six directions
    symbols, xyz = ethylene()
    prims, _ = build_primitives(symbols, xyz)
    bmat = b_matrix(prims, xyz)
    moves = [np.tile(np.eye(3)[k], len(xyz)) for k in range(3)]
    moves += [np.cross(np.eye(3)[k], xyz).reshape(-1) for k in range(3)]
    for move in moves:
        assert np.allclose(bmat @ move, 0.0, atol=1e-12)


def test_water_dimer_is_joined_by_one_hydrogen_bond_link():
    # the water dimer builder places H3 of the donor 1.95 A from the acceptor O4 (see
    # test_coords_molecules); the shortest inter-fragment contact must become the link
    symbols, xyz = water_dimer()
    bonds = covalent_bonds(symbols, xyz)
    assert bonds == {(0, 1), (0, 2), (3, 4), (3, 5)}
    dist = squareform(pdist(xyz))
    links = fragment_links(xyz, bonds)
    assert links == [(2, 3)]
    inter = dist[:3, 3:]
    assert np.isclose(dist[2, 3], inter.min())


def test_three_fragments_need_two_links():
    # invented test arrangement: three helium atoms far apart on a line; joining three pieces
    # takes two links (graph theory: a spanning tree of three nodes has two edges)
    xyz = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 6.0], [0.0, 0.0, 15.0]])
    links = fragment_links(xyz, set())
    assert sorted(links) == [(0, 1), (1, 2)]


def test_torsion_through_straight_chain_is_kept():
    # 2-butyne-like chain C-C#C-C with one hydrogen on each end carbon (invented arrangement):
    # the twist of the end groups must be described across the straight middle
    xyz = np.array([[0, 0, -3.9], [0, 0, -1.14], [0, 0, 1.14], [0, 0, 3.9],
                    [1.9, 0, -4.6], [0, 1.9, 4.6]], float)
    symbols = ("C", "C", "C", "C", "H", "H")
    prims, _ = build_primitives(symbols, xyz)
    dihedrals = [p for p in prims if p.kind == "dihedral"]
    assert dihedrals and all(p.atoms in ((4, 0, 3, 5), (5, 3, 0, 4)) for p in dihedrals)
    assert np.isclose(abs(values(dihedrals, xyz)[0]), np.pi / 2)
    assert RedundantInternals(symbols, xyz).missing_motions(xyz) == 0
