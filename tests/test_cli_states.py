"""``surfcross states`` run as a user would: the installed program in a subprocess.

The numbers are checked against a direct PySCF calculation (reference library) and the
wavelengths against E * lambda = hc/e from scipy.constants (CODATA).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import pytest
from scipy import constants
from pyscf_reference import solve_dense  # tests/pyscf_reference.py

pytestmark = pytest.mark.pyscf

# water near its experimental structure (our own test input), angstrom
WATER_XYZ = """3
water
O 0.0000 0.0000 0.1173
H 0.0000 0.7572 -0.4692
H 0.0000 -0.7572 -0.4692
"""


def _program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


def _run(*args: str, cwd) -> subprocess.CompletedProcess:
    env = dict(os.environ, OMP_NUM_THREADS="1")
    return subprocess.run(_program() + ["states", *args], cwd=cwd, env=env, text=True,
                          capture_output=True, timeout=120)


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    path = tmp_path_factory.mktemp("states")
    (path / "water.xyz").write_text(WATER_XYZ)
    return path


@pytest.fixture(scope="module")
def reference():
    """CIS (TDA on RHF) water/STO-3G computed directly with PySCF."""
    from pyscf import gto, scf, tdscf

    mol = gto.M(atom=WATER_XYZ.split("\n", 2)[2], basis="sto-3g", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    td = tdscf.rhf.TDA(mf)
    solve_dense(td, 3)  # PySCF's response matrix, diagonalized densely
    return mf.e_tot, td.e * constants.physical_constants["Hartree energy in eV"][0], \
        td.oscillator_strength()


def test_table(workdir, reference):
    proc = _run("water.xyz", "--method", "cis", "--roots", "3", cwd=workdir)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    rows = {ln.split()[0]: ln.split() for ln in lines if ln[:2] in ("S0", "S1", "S2", "S3")}
    assert set(rows) >= {"S0", "S1", "S2", "S3"}
    e0, exc_ev, _ = reference
    assert float(rows["S0"][3]) == pytest.approx(e0, abs=1e-7)
    for k in (1, 2, 3):
        assert float(rows[f"S{k}"][1]) == pytest.approx(exc_ev[k - 1], abs=1e-3)
    # water S1 is HOMO (1b1, lone pair) -> LUMO (4a1) at CIS/STO-3G (textbook assignment)
    assert "HOMO -> LUMO" in " ".join(rows["S1"])
    assert any(ln.startswith("note:") and "higher-level method" in ln for ln in lines)


def test_json(workdir, reference):
    proc = _run("water.xyz", "--method", "cis", "--roots", "3", "--triplet-count", "1",
                "--json", cwd=workdir)
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    e0, exc_ev, osc = reference
    states = {s["label"]: s for s in data["states"]}
    assert states["S0"]["energy_eh"] == pytest.approx(e0, abs=1e-8)
    hc_over_e_nm = constants.h * constants.c / constants.e * 1e9  # CODATA via scipy
    for k in (1, 2, 3):
        s = states[f"S{k}"]
        assert s["excitation_ev"] == pytest.approx(exc_ev[k - 1], abs=1e-6)
        assert s["oscillator_strength"] == pytest.approx(osc[k - 1], abs=1e-6)
        assert s["wavelength_nm"] == pytest.approx(hc_over_e_nm / s["excitation_ev"], rel=1e-9)
    assert "T1" in states and states["T1"]["oscillator_strength"] is None
    assert data["method"]["method"] == "cis" and data["method"]["triplet_roots"] == 1
    assert data["scf_cycles"] > 0 and data["response_iterations"] > 0
    assert "higher-level" in data["note"]


@pytest.mark.parametrize("args, words", [
    (["missing.xyz"], "does not exist"),
    (["water.xyz", "--method", "ccsd"], "invalid choice"),
    (["water.xyz", "--method", "tddft"], "needs a functional"),
    (["water.xyz", "--xc", "no-such-functional"], "functional"),
    (["water.xyz", "--spin", "1"], "cannot have 2S = 1"),
])
def test_bad_input_is_one_line_and_exit_2(workdir, args, words):
    proc = _run(*args, cwd=workdir)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    assert words in proc.stderr
    assert proc.stdout == ""
