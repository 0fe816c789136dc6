"""Interpolated pathways: alignment, interpolation, path length, curves, command line.

Sources of the expectations:

* elementary geometry: turning a CH2 group rigidly about the C=C axis keeps every C-H bond
  length, so an interpolation in internal coordinates must keep them, while the straight
  Cartesian line between the end points cuts the circle's chord and shortens them;
* the Kabsch algorithm removes any rigid rotation and translation (Kabsch, Acta Cryst. A
  1976, 32, 922), so a rotated and shifted end geometry gives the same pathway;
* the end points of the pathway are the given geometries, so their energies must equal the
  engine's energies computed directly at those geometries (PySCF, through the engine);
* energy order: at every point the adiabatic curves are sorted, and the overlap-connected
  curves are a re-labelling (a permutation) of the same energies.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from surfcross.data import example_geometry
from surfcross.engine import make_engine
from surfcross.engine.base import MethodSpec
from surfcross.errors import InputError
from surfcross.units import BOHR_IN_ANGSTROM, HARTREE_IN_EV
from surfcross.workflows import pathway
from surfcross.workflows.path import align_chain, interpolate_segment, path_length

pytestmark = pytest.mark.pyscf

METHOD = MethodSpec(method="cis", basis="sto-3g", roots=3)


def rotation(axis: str, degrees: float) -> np.ndarray:
    t = np.radians(degrees)
    c, s = np.cos(t), np.sin(t)
    return {"z": np.array([[c, -s, 0], [s, c, 0], [0, 0, 1]]),
            "x": np.array([[1, 0, 0], [0, c, -s], [0, s, c]])}[axis]


def twisted_ethylene(degrees: float):
    g = example_geometry("ethylene")  # C=C along z; atoms 5, 6 are the H of the second carbon
    xyz = g.coords_bohr.copy()
    xyz[[4, 5]] = xyz[[4, 5]] @ rotation("z", degrees).T
    return g, g.with_coords(xyz)


def distorted_formaldehyde():
    g = example_geometry("formaldehyde")
    xyz = g.coords_bohr.copy()
    xyz[0, 0] += 0.25  # carbon out of plane
    xyz[1, 2] += 0.15  # C=O longer
    return g, g.with_coords(xyz)


def test_internal_interpolation_keeps_bond_lengths_of_a_twist():
    planar, twisted = twisted_ethylene(90.0)
    r0 = planar.distance(1, 4)
    pts, used, note = interpolate_segment(planar.symbols, planar.coords_bohr,
                                          twisted.coords_bohr, 3)
    assert used == "internal" and note == ""
    mid = planar.with_coords(pts[2])
    assert all(abs(planar.with_coords(p).distance(1, 4) - r0) < 1e-4 for p in pts)
    assert abs(abs(mid.dihedral(2, 0, 1, 4)) - 45.0) < 0.5
    assert np.allclose(pts[0], planar.coords_bohr) and np.allclose(pts[-1], twisted.coords_bohr)
    cart, used, _ = interpolate_segment(planar.symbols, planar.coords_bohr,
                                        twisted.coords_bohr, 3, interpolation="cartesian")
    assert used == "cartesian"
    assert planar.with_coords(cart[2]).distance(1, 4) < r0 - 0.02  # the chord is shorter


def test_alignment_removes_rotation_and_translation():
    a, b = distorted_formaldehyde()
    moved = b.with_coords(b.coords_bohr @ rotation("x", 37.0).T + np.array([1.0, -2.0, 0.5]))
    chain = align_chain([a, moved])
    _, expected = align_chain([a, b])
    assert np.allclose(chain[1].coords_bohr, expected.coords_bohr, atol=1e-10)


def test_path_length_plain_and_mass_weighted():
    a, b = distorted_formaldehyde()
    d = (b.coords_bohr - a.coords_bohr) * BOHR_IN_ANGSTROM
    assert path_length([a.coords_bohr, b.coords_bohr])[-1] == pytest.approx(np.linalg.norm(d))
    mw = np.sqrt(np.sum(a.masses_amu[:, None] * d**2))
    assert path_length([a.coords_bohr, b.coords_bohr], a.masses_amu)[-1] == pytest.approx(mw)


def test_pathway_end_points_reproduce_engine_energies():
    a, b = distorted_formaldehyde()
    moved = b.with_coords(b.coords_bohr @ rotation("x", 25.0).T + 0.7)
    result = pathway([a, moved], METHOD, images=2)
    profile = result.data["profile"]
    assert len(profile["x"]) == 4 and np.all(np.diff(profile["x"]) > 0)
    with make_engine(METHOD) as engine:
        first, last = engine.states(a).energies(), engine.states(b).energies()
    base = first["S0"]
    for label in first:
        assert profile["adiabatic_ev"][label][0] == pytest.approx((first[label] - base) * HARTREE_IN_EV, abs=1e-5)
        assert profile["adiabatic_ev"][label][-1] == pytest.approx((last[label] - base) * HARTREE_IN_EV, abs=1e-5)
    singlets = [k for k in profile["adiabatic_ev"] if k.startswith("S")]
    for k in range(4):
        adiabatic = [profile["adiabatic_ev"][s][k] for s in singlets]
        connected = [profile["connected_ev"][s][k] for s in singlets]
        assert adiabatic == sorted(adiabatic)
        assert sorted(connected) == pytest.approx(adiabatic, abs=1e-12)
        roots = [profile["connected_roots"][s][k] for s in singlets]
        assert sorted(roots) == sorted(singlets)


def test_pathway_needs_matching_geometries():
    with pytest.raises(InputError, match="same atoms"):
        pathway([example_geometry("water"), example_geometry("formaldehyde")], METHOD)
    with pytest.raises(InputError, match="two geometries"):
        pathway([example_geometry("water")], METHOD)


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


def test_path_command_line(tmp_path):
    a, b = distorted_formaldehyde()
    (tmp_path / "a.xyz").write_text(a.to_xyz("start"))
    (tmp_path / "b.xyz").write_text(b.to_xyz("distorted"))
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run(program() + ["-q", "path", "a.xyz", "b.xyz", "a.xyz", "--images", "1",
                                       "--method", "cis", "--mass-weighted", "--out", "p"],
                          cwd=tmp_path, env=env, text=True, capture_output=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    data = json.loads((tmp_path / "p" / "result.json").read_text())
    assert data["task"] == "path" and data["converged"] is True
    profile = data["profile"]
    assert profile["given_points"] == [0, 2, 4] and profile["x_unit"] == "amu^1/2 angstrom"
    # back at the start geometry: the same energies as at the first point
    for curve in profile["adiabatic_ev"].values():
        assert curve[4] == pytest.approx(curve[0], abs=1e-6)
    frames = (tmp_path / "p" / "trajectory.xyz").read_text().count("step=")
    assert frames == 5
    assert (tmp_path / "p" / "final.xyz").is_file() and (tmp_path / "p" / "report.md").is_file()
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return
    assert (tmp_path / "p" / "profile.png").is_file()
