"""Seam exploration on an analytic surface with two known distinct crossings.

The surface (surfcross.testing.seams) is a test model of our own: its seam minima are known in
closed form (crossing A, C2v; crossing B, asymmetric, and its copy with the end atoms
exchanged). The permutation-aware RMSD is checked against scipy's rotation-alignment routine
(Rotation.align_vectors, reference library) on structures with a known exchange.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from surfcross.batch import ClusterSettings, MergeRule, StartPlan, explore_seam, permuted_rmsd
from surfcross.batch.seam import merge_crossings, mode_starts, plane_starts, random_starts
from surfcross.engine.base import MethodSpec
from surfcross.geometry import kabsch_align
from surfcross.testing.seams import (SYMBOLS, two_seam_crossings, two_seam_engine,
                                     two_seam_geometry)

MODEL = MethodSpec(method="cis", basis="analytic-model")
TURN = Rotation.from_euler("xyz", [30, 50, 10], degrees=True).as_matrix()


def _distances(coords):
    x = np.asarray(coords)
    return sorted([np.linalg.norm(x[0] - x[1]), np.linalg.norm(x[2] - x[1])]) + [
        np.linalg.norm(x[0] - x[2])]


# ------------------------------------------------------------------------------ alignment
def test_permuted_rmsd_finds_the_exchange_and_the_rotation():
    rng = np.random.default_rng(7)
    symbols = ["C", "H", "H", "H", "O", "H"]
    a = rng.normal(size=(6, 3))
    perm = np.array([0, 3, 1, 2, 4, 5])  # exchange hydrogens only
    b = a[perm] @ TURN.T + np.array([1.0, -2.0, 0.5])
    value, found = permuted_rmsd(symbols, a, b)
    assert value < 1e-8
    # reference library: scipy's optimal rotation of the exchanged structure onto b
    rot, rssd = Rotation.align_vectors(b - b.mean(0), a[found] - a[found].mean(0))
    assert rssd / np.sqrt(6) < 1e-6  # scipy computes it as a square root of a difference
    # without the exchange the same structures look different
    assert kabsch_align(a, b)[1] > 0.3
    # a carbon never trades places with a hydrogen
    assert found[0] == 0 and found[4] == 4


def test_mirror_images():
    rng = np.random.default_rng(3)
    symbols = ["C", "F", "Cl", "Br", "H"]  # a chiral centre: no exchange can undo a mirror
    a = rng.normal(size=(5, 3))
    b = a * np.array([1.0, 1.0, -1.0])
    assert permuted_rmsd(symbols, a, b, mirror=True)[0] < 1e-8
    assert permuted_rmsd(symbols, a, b, mirror=False)[0] > 0.05


# ------------------------------------------------------------------------------ starts
def test_start_generators_are_reproducible():
    centre = two_seam_geometry(2.05, 1.95, 2.9)
    one = random_starts(centre, 3, 0.15, seed=11)
    two = random_starts(centre, 3, 0.15, seed=11)
    assert all(np.array_equal(a.geometry.coords_bohr, b.geometry.coords_bohr) for a, b in zip(one, two))
    d = one[0].geometry.coords_bohr - centre.coords_bohr
    assert np.sqrt((d ** 2).sum(1).mean()) == pytest.approx(0.15)
    assert np.allclose(d.mean(0), 0.0)
    plane = np.zeros((2, 9))
    plane[0, 0], plane[1, 4] = 1.0, 1.0
    ring = plane_starts(centre, plane, 4, 0.3)
    shifts = [s.geometry.coords_bohr - centre.coords_bohr for s in ring]
    assert [round(float(np.linalg.norm(s)), 12) for s in shifts] == [0.3] * 4
    modes = mode_starts(centre, [np.eye(9)[2]], 0.2)
    assert [s.name for s in modes] == ["mode1p", "mode1m"]


# ------------------------------------------------------------------------------ exploration
@pytest.fixture(scope="module")
def explored(tmp_path_factory):
    out = tmp_path_factory.mktemp("seam")
    near_b = two_seam_geometry(2.4, 1.75, 3.1)
    # the same start with the end atoms exchanged, turned and moved: a permuted copy
    copy = two_seam_geometry(1.75, 2.4, 3.1, rotation=TURN, shift=(1.0, 2.0, 3.0))
    plan = StartPlan(plane=2, modes=1, random=1, extra=(near_b, copy))
    result = explore_seam(two_seam_geometry(2.05, 1.95, 2.9), "S1,S2", MODEL, out, plan=plan,
                          cluster=ClusterSettings(mode="serial"), engine_factory=two_seam_engine)
    return out, result


@pytest.mark.slow
def test_both_crossings_found_with_their_closed_form_energies(explored):
    _, result = explored
    known = two_seam_crossings()
    assert len(result.crossings) == 2
    low, high = result.crossings
    # closed-form seam minima of the model (see surfcross/testing/seams.py)
    assert low.energy_eh == pytest.approx(known["A"]["energy_eh"], abs=2e-6)
    assert high.energy_eh == pytest.approx(known["B"]["energy_eh"], abs=2e-6)
    assert np.allclose(_distances(low.geometry.coords_bohr), sorted(known["A"]["distances"][:2])
                       + [known["A"]["distances"][2]], atol=2e-3)
    assert np.allclose(_distances(high.geometry.coords_bohr), sorted(known["B"]["distances"][:2])
                       + [known["B"]["distances"][2]], atol=2e-3)
    assert low.character["kind"] == "conical" and high.character["kind"] == "conical"


def test_starts_reaching_one_crossing_are_merged_including_the_permuted_copy(explored):
    _, result = explored
    low, high = result.crossings
    assert {"given_01", "given_02"} <= set(high.starts)
    assert "centre" in low.starts
    every = [s["name"] for s in result.searches if s.get("converged")]
    assert sorted(low.starts + high.starts) == sorted(every)
    # the two given starts end at structures that differ by more than the merge threshold
    # unless atoms are exchanged
    rec = {s["name"]: s for s in result.searches}
    a, b = (np.asarray(rec[n]["coords_bohr"]) for n in ("given_01", "given_02"))
    assert kabsch_align(a, b)[1] > 0.3
    assert permuted_rmsd(SYMBOLS, a, b)[0] < 1e-2


def test_table_files(explored):
    out, result = explored
    doc = json.loads((out / "seam_crossings.json").read_text())
    assert [c["crossing"] for c in doc["crossings"]] == ["X1", "X2"]
    assert doc["crossings"][0]["vs_lowest_ev"] == 0.0
    assert doc["crossings"][1]["vs_lowest_ev"] == pytest.approx(
        (two_seam_crossings()["B"]["energy_eh"] - two_seam_crossings()["A"]["energy_eh"]) * 27.211386245988,
        abs=1e-4)
    assert "higher-level" in doc["caution"]
    lines = (out / "seam_crossings.csv").read_text().splitlines()
    assert lines[0].startswith("crossing,energy_eh") and len(lines) == 3
    assert (out / "seam_crossings.xyz").read_text().count("X") >= 2


def test_rerun_keeps_every_search(explored, monkeypatch):
    out, result = explored
    from surfcross.tasks import crossing

    def no_new_search(*args, **kwargs):
        raise AssertionError("a finished search was run again")

    monkeypatch.setattr(crossing, "find_crossing", no_new_search)
    import surfcross.tasks as tasks
    monkeypatch.setattr(tasks, "find_crossing", no_new_search)
    again = explore_seam(two_seam_geometry(2.05, 1.95, 2.9), "S1,S2", MODEL, out,
                         plan=StartPlan(plane=2, modes=1, random=1,
                                        extra=(two_seam_geometry(2.4, 1.75, 3.1),
                                               two_seam_geometry(1.75, 2.4, 3.1, rotation=TURN,
                                                                 shift=(1.0, 2.0, 3.0)))),
                         cluster=ClusterSettings(mode="serial"), engine_factory=two_seam_engine)
    assert [c.starts for c in again.crossings] == [c.starts for c in result.crossings]


def test_merge_thresholds():
    known = two_seam_crossings()
    a = two_seam_geometry(*known["A"]["distances"]).coords_bohr
    recs = [{"name": "p", "converged": True, "coords_bohr": a.tolist(), "symbols": list(SYMBOLS),
             "energy_eh": 0.2080, "folder": "o/starts/p"},
            {"name": "q", "converged": True, "coords_bohr": (a + 0.01).tolist(),
             "symbols": list(SYMBOLS), "energy_eh": 0.2089, "folder": "o/starts/q"}]
    # same place, energies 9e-4 Eh apart: two crossings with the default 5e-4 Eh, one with 1e-3
    assert len(merge_crossings(recs)) == 2
    assert len(merge_crossings(recs, MergeRule(energy_eh=1e-3))) == 1


@pytest.mark.slow
def test_on_a_local_cluster_equals_serial(explored, tmp_path):
    pytest.importorskip("distributed")
    _, serial = explored
    plan = StartPlan(plane=0, modes=0, random=0, extra=(two_seam_geometry(2.4, 1.75, 3.1),))
    result = explore_seam(two_seam_geometry(2.05, 1.95, 2.9), "S1,S2", MODEL, tmp_path / "c",
                          plan=plan, cluster=ClusterSettings(mode="local", workers=2),
                          engine_factory=two_seam_engine)
    assert [round(c.energy_eh, 5) for c in result.crossings] == [
        round(c.energy_eh, 5) for c in serial.crossings]


@pytest.mark.pyscf
def test_scan_points_become_starts(tmp_path):
    # a relaxed scan of the first end-atom bond (1-based atoms 1,2) on S1, two points
    plan = StartPlan(plane=0, modes=0, random=0, scan=((0, 1), (1.05, 1.12), "S1"))
    result = explore_seam(two_seam_geometry(2.05, 1.95, 2.9), "S1,S2", MODEL, tmp_path / "s",
                          plan=plan, cluster=ClusterSettings(mode="serial"),
                          engine_factory=two_seam_engine)
    names = [s["name"] for s in result.searches]
    assert names == ["centre", "scan_01", "scan_02"]
    start = json.loads((tmp_path / "s" / "scan" / "result.json").read_text())
    assert start["task"] == "scan" and start["converged"]
    # every start reaches one of the two known crossings (closed form, see the model)
    known = sorted(v["energy_eh"] for v in two_seam_crossings().values())
    for c in result.crossings:
        assert min(abs(c.energy_eh - e) for e in known) < 2e-6


@pytest.mark.pyscf
@pytest.mark.slow
def test_command_line_on_pyscf(tmp_path, capsys):
    from surfcross.cli.main import main

    # methylene: closed-shell singlet S0 and the high-spin triplet T1 (two SCF states)
    (tmp_path / "ch2.xyz").write_text("3\nmethylene\nC 0 0 0\nH 0 0.87 0.64\nH 0 -0.87 0.64\n")
    code = main(["-q", "seams", str(tmp_path / "ch2.xyz"), "--states", "S0,T1", "--method", "cis",
                 "--triplets", "high-spin", "--plane", "0", "--modes", "0", "--random", "1",
                 "--cluster", "serial", "--out", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert code == 0 and "1 distinct crossing(s)" in out and "caution:" in out
    doc = json.loads((tmp_path / "out" / "seam_crossings.json").read_text())
    x = doc["crossings"][0]
    assert sorted(x["starts"]) == ["centre", "random_01"]
    # reference library: PySCF RHF (singlet) and UHF (M_S = 1 triplet) at the crossing found
    from pyscf import gto, scf
    from surfcross.geometry import read_xyz_frames

    geom = read_xyz_frames(tmp_path / "out" / "seam_crossings.xyz")[0]
    atoms = [(s, xyz) for s, xyz in zip(geom.symbols, geom.coords_angstrom)]
    e_s = scf.RHF(gto.M(atom=atoms, basis="sto-3g", verbose=0)).run(conv_tol=1e-11).e_tot
    e_t = scf.UHF(gto.M(atom=atoms, basis="sto-3g", spin=2, verbose=0)).run(conv_tol=1e-11).e_tot
    assert abs(e_s - e_t) < 1e-3  # the default gap tolerance of crossing searches
    assert x["energy_eh"] == pytest.approx(0.5 * (e_s + e_t), abs=1e-6)


@pytest.mark.pyscf
def test_interrupted_search_continues_from_its_checkpoint(tmp_path, monkeypatch):
    from surfcross.io import run as run_module
    from surfcross.tasks.run import request_stop

    original = run_module.RunDirectory.observers

    def observers(self, *, progress=True):
        found = original(self, progress=progress)
        if self.path.name == "given_01":
            def stop_at_step_two(record):  # a Ctrl-C arriving during step 2
                if record.iteration == 2:
                    request_stop()
            found.append(stop_at_step_two)
        return found

    plan = StartPlan(plane=0, modes=0, random=0, extra=(two_seam_geometry(2.4, 1.75, 3.1),))
    args = (two_seam_geometry(2.05, 1.95, 2.9), "S1,S2", MODEL, tmp_path / "s")
    kwargs = dict(plan=plan, cluster=ClusterSettings(mode="serial"), engine_factory=two_seam_engine)
    monkeypatch.setattr(run_module.RunDirectory, "observers", observers)
    first = explore_seam(*args, **kwargs)
    assert first.interrupted
    assert (tmp_path / "s" / "starts" / "given_01" / "checkpoint.h5").exists()
    # an interrupted run leaves its record with status "interrupted" (and its checkpoint)
    assert json.loads((tmp_path / "s" / "starts" / "given_01" / "result.json").read_text())["status"] == "interrupted"
    monkeypatch.setattr(run_module.RunDirectory, "observers", original)
    again = explore_seam(*args, **kwargs)
    assert not again.interrupted
    assert not list((tmp_path / "s" / "starts").glob("*.unfinished*"))  # continued, not redone
    # closed-form energies of the model's two crossings
    known = two_seam_crossings()
    assert [round(c.energy_eh, 5) for c in again.crossings] == [
        round(known["A"]["energy_eh"], 5), round(known["B"]["energy_eh"], 5)]
