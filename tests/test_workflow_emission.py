"""Emission workflow: absorption, relaxed S1, emission, adiabatic energy, Stokes shift.

One run of the installed ``surfcross emission`` program (subprocess, as a user would) on
formaldehyde with CIS/STO-3G, started with the carbon pushed 0.1 bohr out of the molecular
plane (a planar start stays on the planar S1 saddle point), with zero-point corrections.
The checks:

* published fact: the first excited singlet of formaldehyde (n -> pi*) is pyramidal at
  carbon with a longer C=O bond (Henderson & Muramoto 1965, double-minimum inversion
  potential; Jensen & Bunker, J. Mol. Spectrosc. 1982, 94, 114: r(CO) ~ 1.32 A and an
  out-of-plane angle ~ 34 deg, values recalled from memory), and its emission lies below its
  absorption (Clouthier & Ramsay, Annu. Rev. Phys. Chem. 1983, 34, 31);
* physics that holds for any molecule with two true minima: emission <= adiabatic <=
  absorption (each vertical gap adds the other state's relaxation energy), Stokes shift =
  absorption - emission, and the wavelength/wavenumber conversions of scipy.constants;
* the S1 vibrational frequencies of formaldehyde are lower than those of S0 (C=O stretch
  1183 vs 1746 cm^-1, Clouthier & Ramsay 1983, recalled from memory), so the zero-point
  corrected 0-0 energy lies below the adiabatic energy;
* the emission energy reproduces the engine's own energies at the written final geometry.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from surfcross.data import example_geometry
from surfcross.engine import make_engine
from surfcross.engine.base import MethodSpec
from surfcross.errors import InputError
from surfcross.geometry import read_xyz
from surfcross.tasks import RunOptions
from surfcross.units import HARTREE_IN_EV
from surfcross.workflows import emission
from surfcross.workflows.emission import start_is_minimum

pytestmark = [pytest.mark.pyscf, pytest.mark.slow]

EV_NM = constants.h * constants.c / constants.e * 1e9  # photon energy x wavelength, eV nm
EV_CM = constants.e / (constants.h * constants.c * 100.0)  # cm^-1 per eV


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


def pyramidal_start() -> str:
    g = example_geometry("formaldehyde")
    xyz = g.coords_bohr.copy()
    xyz[0, 0] += 0.1  # carbon 0.1 bohr out of the molecular (yz) plane
    return g.with_coords(xyz).to_xyz("formaldehyde, carbon 0.1 bohr out of plane")


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    work = tmp_path_factory.mktemp("emission")
    (work / "h2co.xyz").write_text(pyramidal_start())
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run(program() + ["-q", "emission", "h2co.xyz", "--state", "S1",
                                       "--method", "cis", "--basis", "sto-3g", "--zero-point",
                                       "--out", "em"],
                          cwd=work, env=env, text=True, capture_output=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert "Stokes shift" in proc.stdout
    return work / "em"


@pytest.fixture(scope="module")
def result(run: Path) -> dict:
    return json.loads((run / "result.json").read_text())


def _out_of_plane_deg(path: Path) -> tuple[float, float]:
    c, o, h1, h2 = read_xyz(path).coords_angstrom
    normal = np.cross(h1 - c, h2 - c)
    normal /= np.linalg.norm(normal)
    co = o - c
    return float(np.linalg.norm(co)), float(np.degrees(np.arcsin(abs(co @ normal) / np.linalg.norm(co))))


def test_result_keys_and_stage_folders(run, result):
    for key in ("absorption_ev", "absorption_nm", "emission_ev", "emission_nm",
                "emission_oscillator_strength", "adiabatic_ev", "stokes_shift_ev",
                "stokes_shift_cm", "zero_zero_ev", "task", "converged", "final_xyz"):
        assert key in result, key
    assert result["task"] == "emission" and result["converged"] is True
    for stage in ("start", "ground", "excited"):
        assert (run / stage / "result.json").is_file(), stage
    report = (run / "report.md").read_text()
    assert "gas phase" in report and "0-0" in report and "band" in report


def test_formaldehyde_s1_minimum_is_pyramidal_with_longer_co(run, result):
    # Henderson & Muramoto 1965; Jensen & Bunker 1982 (r(CO) ~ 1.32 A, ~34 deg; recalled)
    r_co, oop = _out_of_plane_deg(run / "final.xyz")
    r_co_ground, oop_ground = _out_of_plane_deg(run / "ground" / "final.xyz")
    assert oop > 15.0, f"S1 minimum out-of-plane angle {oop:.1f} deg: not pyramidal"
    assert oop_ground < 1.0  # the S0 minimum is planar (C2v)
    assert 1.28 < r_co < 1.34
    assert r_co - r_co_ground > 0.05  # C=O elongated by roughly 0.1 A on n -> pi*
    excited = next(s for s in result["stages"] if s["stage"] == "excited")
    assert excited["converged"]  # (how many steps it took is a benchmark, not a test)


def test_energy_ordering_and_conversions(result):
    a, e, ad = result["absorption_ev"], result["emission_ev"], result["adiabatic_ev"]
    # emission below absorption (Clouthier & Ramsay 1983); e <= adiabatic <= a for true minima
    assert 0.0 < e < ad < a
    assert result["stokes_shift_ev"] == pytest.approx(a - e, abs=1e-12)
    assert result["stokes_shift_cm"] == pytest.approx((a - e) * EV_CM, rel=1e-9)
    assert result["absorption_nm"] == pytest.approx(EV_NM / a, rel=1e-9)
    assert result["emission_nm"] == pytest.approx(EV_NM / e, rel=1e-9)
    # n -> pi* is nearly forbidden; the pyramidal minimum gives it a little intensity
    assert 0.0 <= result["emission_oscillator_strength"] < 0.01


def test_zero_point_corrected_origin(result):
    zpe_g = result["curvature_ground"]["zero_point_ev"]
    zpe_e = result["curvature_excited"]["zero_point_ev"]
    assert result["curvature_ground"]["is_minimum"] and result["curvature_excited"]["is_minimum"]
    assert result["zero_zero_ev"] == pytest.approx(result["adiabatic_ev"] + zpe_e - zpe_g, abs=1e-12)
    # S1 frequencies are lower than S0's (Clouthier & Ramsay 1983, recalled from memory)
    assert result["zero_zero_ev"] < result["adiabatic_ev"]


def test_emission_matches_engine_at_final_geometry(run, result):
    geometry = read_xyz(run / "final.xyz")
    with make_engine(MethodSpec(method="cis", basis="sto-3g", roots=3)) as engine:
        ev = engine.states(geometry)
    gap = (ev.energy("S1") - ev.energy("S0")) * HARTREE_IN_EV
    assert result["emission_root"] == "S1"
    assert gap == pytest.approx(result["emission_ev"], abs=1e-5)


def test_start_minimum_decision_uses_force_threshold():
    # thresholds: the 'normal' and 'loose' presets (common-practice set, 4.5e-4 Eh/bohr)
    small = np.full((3, 3), 1e-4)
    assert start_is_minimum(small, RunOptions())[0]
    assert not start_is_minimum(small * 10, RunOptions())[0]
    assert start_is_minimum(small * 10, RunOptions(convergence="loose"))[0]


def test_emission_from_ground_state_is_refused():
    with pytest.raises(InputError, match="ground"):
        emission(example_geometry("water"), MethodSpec(method="cis"), state="S0")
