"""``surfcross states --soc``: the coupling table and its JSON, run as a user would.

The numbers are those of the library call on the same evaluation (tested against outside
references in the other test_soc_* files); here: that the command shows them, in cm^-1, with
the caveats, and refuses what it cannot do with one line and exit code 2.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from importlib import resources

import pytest

import surfcross as sc

pytest.importorskip("pyscf")

FORMALDEHYDE = str(resources.files("surfcross.data") / "formaldehyde.xyz")


def _run(*args: str) -> subprocess.CompletedProcess:
    exe = shutil.which("surfcross")
    program = [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]
    env = dict(os.environ, OMP_NUM_THREADS="1")
    return subprocess.run(program + ["states", FORMALDEHYDE, "--method", "cis", *args],
                          env=env, text=True, capture_output=True, timeout=120)


@pytest.mark.pyscf
def test_table_shows_the_couplings_with_their_caveat():
    out = _run("--roots", "1", "--soc")
    assert out.returncode == 0, out.stderr
    lines = out.stdout.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("spin-orbit couplings / cm^-1"))
    assert "effective-charge" in lines[head]
    columns = lines[head + 1].split()
    assert columns[:2] == ["T1", "T2"]  # as many triplets as singlet roots (+2 extra)
    rows = {line.split()[0]: [float(v) for v in line.split()[1:]]
            for line in lines[head + 2:head + 5]}
    _, soc = sc.spin_orbit_at(sc.read_xyz(FORMALDEHYDE),
                              sc.MethodSpec(method="cis", roots=1, triplet_roots=1))
    for singlet in ("S0", "S1"):
        for k, triplet in enumerate(columns):
            assert rows[singlet][k] == pytest.approx(soc.total_cm(singlet, triplet), abs=0.011)
    assert rows["S1"][0] < 0.01  # El-Sayed: 1(n,pi*) - 3(n,pi*)
    assert any(line.startswith("note: Spin-orbit couplings are first-order") for line in lines)


def test_json_holds_every_sublevel():
    out = _run("--roots", "1", "--soc", "mean-field", "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)["spin_orbit"]
    assert data["operator"] == "mean-field" and data["amplitudes"] == "cis"
    pair = next(p for p in data["pairs"] if (p["singlet"], p["triplet"]) == ("S0", "T1"))
    levels = pair["sublevels"]
    assert set(levels) == {"-1", "0", "+1"}
    total = sum(v["abs_cm"] ** 2 for v in levels.values()) ** 0.5
    assert total == pytest.approx(pair["total_cm"], rel=1e-12) and total > 10.0
    assert data["notes"]


def test_unsupported_references_are_refused_in_one_line():
    for extra in (["--unrestricted"], ["--triplets", "high-spin"]):
        out = _run("--soc", *extra)
        assert out.returncode == 2
        assert out.stderr.strip().count("\n") == 0 and "--soc needs" in out.stderr
