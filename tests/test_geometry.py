"""Geometry, XYZ input/output and alignment.

The XYZ layout (atom count, comment line, 'Symbol x y z' in angstrom) is the common
plain-text convention (common practice). Rotations come from scipy.spatial.transform
(reference library); the optimal superposition is compared with scipy's own solution
(Rotation.align_vectors).
"""

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from surfcross.data import example_geometry
from surfcross.errors import InputError
from surfcross.geometry import (Geometry, kabsch_align, parse_xyz, read_xyz, read_xyz_frames,
                                rmsd, write_xyz)
from surfcross.units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM

WATER = "3\nwater\nO 0.0 0.0 0.0\nH 0.0 0.7572 0.5865\nH 0.0 -0.7572 0.5865\n"


def test_parse_and_units():
    (g,) = parse_xyz(WATER)
    assert g.symbols == ("O", "H", "H") and g.title == "water"
    np.testing.assert_allclose(g.coords_angstrom[1], [0.0, 0.7572, 0.5865])
    np.testing.assert_allclose(g.coords_bohr, g.coords_angstrom * ANGSTROM_IN_BOHR)
    # water has 10 electrons (Z: O 8, H 1)
    assert g.nelectron == 10 and list(g.atomic_numbers) == [8, 1, 1]
    # lower-case symbols, atomic numbers and Fortran exponents are accepted
    (h, ) = parse_xyz("2\n\nh 0 0 0\n1 0 0 0.74d0\n")
    assert h.symbols == ("H", "H") and h.distance(0, 1) * BOHR_IN_ANGSTROM == pytest.approx(0.74)


def test_built_in_water_matches_its_source():
    # Hoy and Bunker 1979 equilibrium structure (via NIST CCCBDB): r 0.9578 A, 104.4776 deg
    g = example_geometry("water")
    assert g.distance(0, 1) * BOHR_IN_ANGSTROM == pytest.approx(0.9578, abs=1e-6)
    assert g.angle(1, 0, 2) == pytest.approx(104.4776, abs=1e-4)
    # formaldehyde (Gurvich via NIST CCCBDB): r(CO) 1.205 A, HCH 116.133 deg
    f = example_geometry("formaldehyde")
    assert f.distance(0, 1) * BOHR_IN_ANGSTROM == pytest.approx(1.205, abs=1e-6)
    assert f.angle(2, 0, 3) == pytest.approx(116.133, abs=1e-4)


def test_dihedral_sign():
    # torsion angle sign: positive when, viewed along j->k, the front bond turns clockwise
    # onto the back bond (IUPAC Gold Book definition, recalled from memory)
    phi = math.radians(60)
    g = Geometry.from_angstrom(["O", "C", "C", "O"],
                               [[1, 0, 0], [0, 0, 0], [0, 0, 1.5], [math.cos(phi), math.sin(phi), 1.5]])
    assert g.dihedral(0, 1, 2, 3) == pytest.approx(60.0)
    mirror = g.with_coords(g.coords_bohr * [1, -1, 1])
    assert mirror.dihedral(0, 1, 2, 3) == pytest.approx(-60.0)


@pytest.mark.parametrize("text,message", [
    ("3\nw\nXx 0 0 0\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "unknown element 'Xx'"),
    ("3\nw\n200 0 0 0\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "atomic number '200'"),
    ("3\nw\nO 0 0\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "line 3: expected 'Symbol x y z'"),
    ("3\nw\nO 0 0 zero\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "line 3"),
    ("3\nw\nO 0 0 0\nH 0 0.76 0.59\n", "announces 3 atoms but only 2"),
    ("2\nw\nO 0 0 0\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "more atom lines than the 2 announced"),
    ("three\nw\nO 0 0 0\n", "expected the number of atoms"),
    ("0\nw\n", "must be positive"),
    ("\n\n", "empty"),
    ("3\nw\nO 0 0 nan\nH 0 0.76 0.59\nH 0 -0.76 0.59\n", "line 3"),
    ("3\nw\nO 0 0 0\nH 0 0 0.1\nH 0 -0.76 0.59\n", r"atoms 1 \(O\) and 2 \(H\) are only 0.100 angstrom apart"),
])
def test_xyz_errors(text, message):
    with pytest.raises(InputError, match=message):
        parse_xyz(text, source="mol.xyz")


def test_geometry_errors():
    good = np.zeros((1, 3))
    with pytest.raises(InputError, match="NaN or infinite"):
        Geometry(("H", "H"), [[0, 0, 0], [0, 0, np.nan]], 0, 0)
    with pytest.raises(InputError, match="atom 2 .*infinite"):
        Geometry(("H", "H"), [[0, 0, 0], [np.inf, 0, 0]], 0, 0)
    with pytest.raises(InputError, match="shape"):
        Geometry(("H", "H"), good, 0, 0)
    with pytest.raises(InputError, match="at least one atom"):
        Geometry((), np.zeros((0, 3)))
    with pytest.raises(InputError, match="unknown element"):
        Geometry(("Qq",), good)


def test_charge_and_spin_consistency():
    (w,) = parse_xyz(WATER)
    # 10 electrons: singlet or triplet; 9 electrons (cation): doublet
    assert w.with_charge_spin(0, 2).spin == 2 and w.with_charge_spin(1, 1).charge == 1
    with pytest.raises(InputError, match="10 electrons .* cannot have 2S = 1"):
        w.with_charge_spin(0, 1)
    with pytest.raises(InputError, match="cannot have 2S = 0"):
        w.with_charge_spin(1, 0)
    with pytest.raises(InputError, match="negative number of electrons"):
        w.with_charge_spin(11, 0)
    with pytest.raises(InputError, match="must be >= 0"):
        w.with_charge_spin(0, -2)
    with pytest.raises(InputError, match="exceeds"):
        w.with_charge_spin(8, 4)


def test_files(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_xyz(tmp_path / "none.xyz")
    with pytest.raises(InputError, match="is a directory"):
        read_xyz(tmp_path)
    (tmp_path / "bin.xyz").write_bytes(b"\xff\xfe\x00\x01")
    with pytest.raises(InputError, match="not a text XYZ"):
        read_xyz(tmp_path / "bin.xyz")
    (g,) = parse_xyz(WATER)
    path = tmp_path / "traj.xyz"
    write_xyz(path, g, ["first"])
    write_xyz(path, [g.with_coords(g.coords_bohr * 1.01)], ["second"], append=True)
    frames = read_xyz_frames(path)
    assert [f.title for f in frames] == ["first", "second"]
    np.testing.assert_allclose(frames[0].coords_bohr, g.coords_bohr, atol=1e-9)
    with pytest.raises(InputError, match="holds 2 frames"):
        read_xyz(path)
    assert read_xyz_frames(path, charge=1, spin=1)[1].charge == 1


def test_immutable():
    (g,) = parse_xyz(WATER)
    with pytest.raises(ValueError):
        g.coords_bohr[0, 0] = 1.0


def _molecule():
    # a non-planar, chiral arrangement (our own example)
    return np.array([[0.0, 0.0, 0.0], [1.5, 0.0, 0.0], [-0.4, 1.4, 0.0], [0.3, -0.5, 1.3],
                     [2.0, 0.9, -0.7]])


def test_kabsch_recovers_known_rotation():
    ref = _molecule()
    rot = Rotation.from_euler("zyx", [37.0, -71.0, 123.0], degrees=True)
    mobile = rot.apply(ref) + [3.0, -2.0, 5.0]
    aligned, value = kabsch_align(mobile, ref)
    np.testing.assert_allclose(aligned, ref, atol=1e-10)
    assert value == pytest.approx(0.0, abs=1e-10)
    assert rmsd(mobile, ref) == pytest.approx(0.0, abs=1e-10)
    # a mirror image cannot be superimposed by a proper rotation
    assert rmsd(ref * [1, 1, -1], ref) > 0.1


def test_kabsch_matches_scipy_on_noisy_data():
    rng = np.random.default_rng(7)
    ref = _molecule()
    mobile = Rotation.from_rotvec([0.3, -1.1, 0.4]).apply(ref) + rng.normal(0, 0.05, ref.shape)
    _, value = kabsch_align(mobile, ref)
    # scipy: rotation minimising sum |ref_i - R mobile_i|^2 of centred sets; rssd = sqrt(sum)
    a, b = ref - ref.mean(0), mobile - mobile.mean(0)
    _, rssd = Rotation.align_vectors(a, b)
    assert value == pytest.approx(rssd / math.sqrt(len(ref)), rel=1e-10)


def test_rmsd_without_alignment():
    a = np.zeros((2, 3))
    b = np.array([[3.0, 4.0, 0.0], [0.0, 0.0, 0.0]])
    # sqrt((25 + 0) / 2) by hand
    assert rmsd(a, b, align=False) == pytest.approx(math.sqrt(12.5))
    with pytest.raises(InputError, match="shapes"):
        kabsch_align(np.zeros((2, 3)), np.zeros((3, 3)))
