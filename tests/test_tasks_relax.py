"""Minimizations through the task layer (engine + tracker + objective + optimizer + run record).

Outside references named at each check: NIST CCCBDB (HF/STO-3G water), PySCF's analytic
Hessian (reference library), experimental facts about formaldehyde's first excited singlet.
"""

import json

import numpy as np
import pytest
from pyscf import gto, scf
from pyscf.hessian import thermo

from surfcross import Geometry, MethodSpec, RunOptions, relax
from surfcross.data import example_geometry
from surfcross.io.run import RunDirectory
from surfcross.units import BOHR_IN_ANGSTROM

pytestmark = pytest.mark.pyscf

HF = MethodSpec(method="cis", basis="sto-3g", roots=2)


def _water(r=0.96, theta=104.0):
    t = np.radians(theta)
    return Geometry.from_angstrom(
        ["O", "H", "H"],
        [[0, 0, 0], [r * np.sin(t / 2), 0, r * np.cos(t / 2)], [-r * np.sin(t / 2), 0, r * np.cos(t / 2)]])


@pytest.mark.parametrize("coordinates", ["internal", "cartesian"])
def test_water_hf_sto3g_minimum(coordinates, tmp_path):
    run = RunDirectory.create(tmp_path / coordinates)
    res = relax(_water(), "S0", HF, options=RunOptions(coordinates=coordinates, convergence="tight"),
                run_dir=run, progress=False)
    assert res.converged
    g = res.geometry
    r1, r2 = g.distance(0, 1) * BOHR_IN_ANGSTROM, g.distance(0, 2) * BOHR_IN_ANGSTROM
    angle = g.angle(1, 0, 2)
    energy = res.energies_eh["S0"]
    # NIST CCCBDB calculated HF/STO-3G water: r(OH) 0.989 A, angle 100.0 deg, E -74.9659 Eh
    # (recalled from memory; matches the PySCF value 0.98941 A, 100.027 deg, -74.965901 Eh)
    assert abs(r1 - 0.989) < 1e-3 and abs(r2 - 0.989) < 1e-3
    assert abs(angle - 100.0) < 0.1
    assert abs(energy - (-74.9659)) < 1e-4
    # tighter against the PySCF-computed optimum of the same model chemistry
    assert abs(r1 - 0.98941) < 2e-4 and abs(angle - 100.027) < 0.05
    assert abs(energy - (-74.965901)) < 2e-6
    # run record: contract keys, trajectory, final geometry
    data = json.loads(run.result_json.read_text())
    for key in ("task", "converged", "iterations", "evaluations", "states", "energies_eh",
                "gap_ev", "final_xyz", "method", "search", "warnings"):
        assert key in data
    assert data["converged"] is True and data["states"] == ["S0"]
    assert run.final_xyz.exists() and run.trajectory_xyz.exists() and run.checkpoint_h5.exists()


def test_curvature_check_matches_pyscf_analytic_hessian():
    res = relax(_water(0.989, 100.0), "S0", HF,
                options=RunOptions(convergence="tight", curvature_check=True), progress=False)
    assert res.converged
    curv = res.data["curvature"]
    assert curv["is_minimum"] and len(curv["frequencies_cm"]) == 3
    g = res.geometry
    mol = gto.M(atom=[(s, c) for s, c in zip(g.symbols, g.coords_bohr)], unit="Bohr",
                basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-11)
    ref = np.sort(thermo.harmonic_analysis(mol, mf.Hessian().kernel())["freq_wavenumber"].real)
    # reference library: PySCF analytic RHF Hessian; a few cm^-1 for central differences
    assert np.allclose(np.sort(curv["frequencies_cm"]), ref, atol=4.0)


@pytest.mark.slow
def test_formaldehyde_s1_is_pyramidal_with_longer_co():
    # Fact of the trade (experimental): the S1 (n -> pi*) state of formaldehyde is non-planar,
    # pyramidal at carbon, with a longer C=O bond (Henderson & Muramoto 1965; Jensen & Bunker
    # 1982: r(CO) ~1.32 A, out-of-plane ~34 deg, recalled in our reference notes).
    start = example_geometry("formaldehyde")
    x = start.coords_angstrom.copy()
    x[2:, 0] += 0.06  # both H slightly out of plane: a planar start stays on the planar saddle
    start = Geometry.from_angstrom(start.symbols, x)
    s0 = relax(start, "S0", HF, progress=False)
    s1 = relax(start, "S1", HF, progress=False)
    assert s0.converged and s1.converged
    co0 = s0.geometry.distance(0, 1) * BOHR_IN_ANGSTROM
    co1 = s1.geometry.distance(0, 1) * BOHR_IN_ANGSTROM
    assert co1 - co0 > 0.05
    # pyramidal: the O-C-H-H improper dihedral departs from planarity (180 deg)
    improper = abs(s1.geometry.dihedral(1, 0, 2, 3))
    assert improper < 170.0
    assert abs(abs(s0.geometry.dihedral(1, 0, 2, 3)) - 180.0) < 2.0


def test_freezing_every_atom_is_refused():
    from surfcross import Constraint, InputError

    frozen = tuple(Constraint("atom", (i,)) for i in range(3))
    with pytest.raises(InputError, match="every atom is frozen"):
        relax(_water(), "S0", HF, options=RunOptions(constraints=frozen), progress=False)


def _sigma_minus_energy(geometry: Geometry) -> float:
    """CIS/6-31G energy of the lowest 1Sigma- state of CO, by PySCF with symmetry.

    PySCF works in the C2v subgroup of C-infinity-v: a Sigma- state is an A2 root without a
    degenerate A1 partner (the A2 components of Delta states have one).
    """
    from pyscf import tdscf

    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(geometry.symbols, geometry.coords_bohr)],
                unit="Bohr", basis="6-31g", symmetry=True, verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-11)
    roots = {}
    for irrep in ("A1", "A2"):
        td = tdscf.TDA(mf)
        td.wfnsym, td.nstates, td.conv_tol = irrep, 4, 1e-9
        td.kernel()
        assert all(td.converged)
        roots[irrep] = np.asarray(td.e_tot)
    lone = [e for e in roots["A2"] if np.min(np.abs(roots["A1"] - e)) > 1e-6]
    return float(lone[0])


def test_followed_state_keeps_its_label_in_every_record(tmp_path):
    # CO at its HF/6-31G bond length (1.1135 angstrom, PySCF optimum to 1e-4): adiabatic S3
    # is the 1Sigma- state; stretching the bond brings it below the 1Pi pair, so at the
    # minimum of that state it is adiabatic S1 (PySCF with symmetry, reference library)
    co = Geometry.from_angstrom(["C", "O"], [[0, 0, 0], [0, 0, 1.1135]])
    start = _sigma_minus_energy(co)
    run = RunDirectory.create(tmp_path / "co")
    res = relax(co, "S3", MethodSpec(method="cis", basis="6-31g", roots=6), run_dir=run,
                progress=False)
    assert res.converged
    expected = _sigma_minus_energy(res.geometry)
    assert expected < start - 0.01  # the state was minimized, not just relabelled
    data = json.loads(run.result_json.read_text())
    assert data["states"] == ["S3"]
    assert data["energies_eh"]["S3"] == pytest.approx(expected, abs=1e-6)
    assert data["followed_roots"]["S3"] != "S3"
    root = data["followed_roots"]["S3"]
    assert data["adiabatic_energies_eh"][root] == pytest.approx(expected, abs=1e-6)
    assert data["adiabatic_energies_eh"]["S3"] != pytest.approx(expected, abs=1e-4)
    # the report's followed row and the first field of the final.xyz comment say the same
    row = next(line for line in run.report_md.read_text().splitlines()
               if line.startswith("| **S3** |"))
    assert float(row.split("|")[2]) == pytest.approx(expected, abs=1e-9)
    comment = run.final_xyz.read_text().splitlines()[1]
    assert float(comment.split("E_S3=")[1].split()[0]) == pytest.approx(expected, abs=1e-9)
    assert res.energies_eh["S3"] == pytest.approx(expected, abs=1e-6)
