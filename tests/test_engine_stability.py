"""Stability of the SCF reference and of full linear response.

Reference library: PySCF's SCF with its own stability analysis, followed by hand, and its
response solvers. Cases:

* methylene's high-spin (M_S = 1) triplet at a strongly bent geometry (60 degrees), where a
  default-guess UHF converges to an excited SCF solution about 0.08 Eh above the stable one;
* H2/6-31G with an unrestricted reference stretched 0.74 -> 2.5 angstrom with warm starts:
  beyond the point where the restricted solution stops being the lowest UHF solution
  (about 1.2 angstrom; the Coulson-Fischer point, common knowledge) the warm start would stay
  on the restricted-like solution;
* ethylene twisted past 90 degrees with RHF: the warm-started closed-shell configuration
  becomes the excited one (twists by t and 180 - t give the same molecule, a symmetry fact);
* stretched H2 with full TDHF: its lowest triplet turns imaginary (RHF -> UHF instability).
"""

import numpy as np
import pytest
from pyscf import gto, scf

from surfcross import Geometry, MethodSpec, make_engine
from surfcross.data import example_geometry
from surfcross.workflows.coordinate import drive_coordinate

pytestmark = pytest.mark.pyscf


def _ch2(angle_deg=60.0, r=1.1):
    t = np.radians(angle_deg)
    return Geometry.from_angstrom(
        ["C", "H", "H"], [[0, 0, 0], [r * np.sin(t / 2), 0, r * np.cos(t / 2)],
                          [-r * np.sin(t / 2), 0, r * np.cos(t / 2)]])


def _stable_uhf_energy(geom):
    mol = gto.M(atom=[(s, c) for s, c in zip(geom.symbols, geom.coords_bohr)], unit="Bohr",
                basis="sto-3g", spin=2, verbose=0)
    first, stable, _ = _stable_energy(mol, True)
    return first, stable


def test_high_spin_reference_is_the_stable_solution():
    geom = _ch2()
    first, stable = _stable_uhf_energy(geom)
    assert stable < first - 1e-3  # the case really has an unstable default solution
    engine = make_engine(MethodSpec(method="cis", basis="sto-3g", roots=1, triplet_roots=1,
                                    triplets="high-spin"))
    energy = engine.states(geom).energy("T1")
    assert abs(energy - stable) < 1e-7


def _h2(r):
    return Geometry.from_angstrom(["H", "H"], [[0, 0, 0], [0, 0, r]])


def _stable_energy(mol, unrestricted):
    """PySCF SCF, then its internal stability analysis followed by hand until stable.

    The analysis is asked without point-group restrictions (with_symmetry=False, which also
    puts the lowest diagonal direction into its Davidson guess): with them its guess has no
    component along a symmetry-breaking mode, and finding one then depends on rounding.
    """
    from pyscf.scf.stability import rhf_internal, uhf_internal

    internal = uhf_internal if unrestricted else rhf_internal
    mf = (scf.UHF if unrestricted else scf.RHF)(mol).run(conv_tol=1e-10)
    first = mf.e_tot
    for _ in range(5):
        mo, stable = internal(mf, with_symmetry=False, return_status=True, tol=1e-6)
        if stable:
            break
        mf.kernel(mf.make_rdm1(mo, mf.mo_occ))
    return first, mf.e_tot, mf


STRETCH = (0.74, 1.0, 1.3, 1.6, 2.0, 2.5)


def test_h2_stretch_with_warm_starts_reports_the_instability():
    spec = MethodSpec(method="cis", basis="6-31g", roots=1, unrestricted=True)
    with make_engine(spec) as engine:
        evs = {r: engine.states(_h2(r)) for r in STRETCH}
    for r in STRETCH:
        mol = gto.M(atom=f"H 0 0 0; H 0 0 {r}", basis="6-31g", verbose=0)
        plain, stable, _ = _stable_energy(mol, True)
        flagged = any("(internal stability analysis)" in w and "--follow-instability" in w
                      for w in evs[r].warnings)
        # reported exactly where PySCF's own analysis finds a lower UHF solution, and the
        # run stays on the solution it followed (the restricted-like one)
        assert flagged == (stable < plain - 1e-6), r
        assert evs[r].energy("0") == pytest.approx(plain, abs=1e-7)
    assert not any("stability" in w for w in evs[1.0].warnings)
    assert all(any("stability" in w for w in evs[r].warnings) for r in (1.3, 1.6))


def test_h2_stretch_follows_the_instability_on_request():
    spec = MethodSpec(method="cis", basis="6-31g", roots=1, unrestricted=True)
    with make_engine(spec, stability="follow") as engine:
        evs = {r: engine.states(_h2(r)) for r in STRETCH}
    for r in (1.3, 1.6, 2.5):
        mol = gto.M(atom=f"H 0 0 0; H 0 0 {r}", basis="6-31g", verbose=0)
        plain, stable, mf = _stable_energy(mol, True)
        # the broken-symmetry solution: lower than the restricted-like one, spin-contaminated
        assert stable < plain - 1e-3
        assert evs[r].energy("0") == pytest.approx(stable, abs=1e-7)
        assert evs[r].state("0").spin_square == pytest.approx(mf.spin_square()[0], abs=1e-3)
    assert any("moved to the lower SCF solution" in w for w in evs[1.3].warnings)


@pytest.mark.parametrize("mode", ["report", "follow"])
def test_restricted_reference_twisted_past_90_degrees(mode):
    ethylene = example_geometry("ethylene")
    spec = MethodSpec(method="cis", basis="sto-3g", roots=1)
    geometries, current = {}, ethylene
    with make_engine(spec, stability=mode) as engine:
        evs = {}
        for angle in (0, 40, 80, 100, 140):
            current = drive_coordinate(current, (2, 0, 1, 4), float(angle), ())
            geometries[angle] = current
            evs[angle] = engine.states(current)
    assert not any("stability" in w for a in (0, 40, 80) for w in evs[a].warnings)
    assert any("(internal stability analysis)" in w for w in evs[140].warnings)
    g = geometries[140]
    mol = gto.M(atom=[(s, c) for s, c in zip(g.symbols, g.coords_bohr)], unit="Bohr",
                basis="sto-3g", verbose=0)
    _, stable, _ = _stable_energy(mol, False)
    if mode == "follow":
        # the lower closed-shell solution, which by symmetry equals the 40-degree one
        assert evs[140].energy("S0") == pytest.approx(stable, abs=1e-7)
        assert evs[140].energy("S0") == pytest.approx(evs[40].energy("S0"), abs=1e-6)
    else:
        assert evs[140].energy("S0") > stable + 0.1  # stayed on the excited configuration


def test_imaginary_tdhf_triplet_keeps_its_label_missing():
    from pyscf import tdscf

    spec = MethodSpec(method="tdhf", basis="6-31g", roots=1, triplet_roots=1)
    with make_engine(spec) as engine:
        ev = engine.states(_h2(2.5))
    mol = gto.M(atom="H 0 0 0; H 0 0 2.5", basis="6-31g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-10)
    # reference library: PySCF's external (RHF -> UHF) stability analysis finds the
    # triplet instability, and its TDA triplet root is negative there
    _, _, _, stable_external = mf.stability(internal=False, external=True, return_status=True)
    assert not stable_external
    tda = tdscf.TDA(mf)
    tda.singlet, tda.nstates, tda.positive_eig_threshold = False, 1, -1e3
    tda.kernel()
    assert tda.e[0] < 0
    labels = [str(s.label) for s in ev.manifold("T")]
    assert "T1" not in labels and labels[0] == "T2"
    td = tdscf.TDHF(mf)
    td.singlet, td.nstates, td.conv_tol = False, 2, 1e-9
    td.kernel()
    # PySCF's lowest real triplet root is our T2: the label of the imaginary one is not reused
    assert ev.energy("T2") == pytest.approx(td.e_tot[0], abs=1e-7)
    assert any("T1: imaginary excitation energy" in w for w in ev.warnings)
