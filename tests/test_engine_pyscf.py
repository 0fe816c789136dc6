"""The PySCF response engine against direct PySCF calculations (the reference library).

Every check compares what the engine reports with the same quantity computed here by calling
PySCF directly (RHF/RKS/UHF/UKS + tdscf), or with PySCF's FCI <S^2> routine for a state
written out in the determinant basis.
"""

from __future__ import annotations

import numpy as np
import pytest

from surfcross.engine import make_engine
from surfcross.engine.base import MethodSpec
from surfcross.engine.pyscf_response import PySCFResponseEngine
from surfcross.engine.pyscf_spin import cis_spin_square
from surfcross.errors import InputError, ResponseNotConvergedError, SCFNotConvergedError
from surfcross.geometry import Geometry
from surfcross.units import HARTREE_IN_EV

from pyscf_reference import solve_dense  # tests/pyscf_reference.py

pytestmark = pytest.mark.pyscf

# our own test geometries (angstrom)
WATER = Geometry.from_angstrom(["O", "H", "H"], [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692],
                                                 [0.0, -0.7572, -0.4692]])
NH2 = Geometry.from_angstrom(["N", "H", "H"], [[0.0, 0.0, 0.0], [0.0, 0.80, 0.62],
                                               [0.0, -0.82, 0.60]], spin=1)
CH2 = Geometry.from_angstrom(["C", "H", "H"], [[0.0, 0.0, 0.0], [0.0, 0.99, 0.55],
                                               [0.0, -0.98, 0.57]])


def _mol(geometry, spin=None):
    from pyscf import gto

    return gto.M(atom=[(s, tuple(x)) for s, x in zip(geometry.symbols, geometry.coords_bohr)],
                 unit="Bohr", basis="sto-3g", charge=geometry.charge,
                 spin=geometry.spin if spin is None else spin, verbose=0)


def _direct(geometry, xc, td_name, nstates, singlet=True, unrestricted=False, grid=3):
    """Reference: PySCF run by hand, tight SCF tolerance, response solved densely."""
    from pyscf import dft, scf, tdscf

    mol = _mol(geometry)
    if xc is None:
        mf = scf.UHF(mol) if unrestricted else scf.RHF(mol)
    else:
        mf = dft.UKS(mol) if unrestricted else dft.RKS(mol)
        mf.xc, mf.grids.level = xc, grid
    mf.conv_tol = 1e-12
    mf.kernel()
    module = {(False, False): tdscf.rhf, (True, False): tdscf.uhf,
              (False, True): tdscf.rks, (True, True): tdscf.uks}[(unrestricted, xc is not None)]
    td = getattr(module, td_name)(mf)
    if not unrestricted:
        td.singlet = singlet
    # PySCF's own response matrix, diagonalized densely: no Davidson convergence to depend on
    solve_dense(td, nstates)
    return mf, td


@pytest.fixture(scope="module")
def tddft_eval():
    spec = MethodSpec(method="tddft", xc="pbe0", roots=2, triplet_roots=2, grid_level=2)
    engine = make_engine(spec)
    yield engine.states(WATER)
    engine.close()


def test_restricted_singlets_and_triplets_match_pyscf(tddft_eval):
    # reference library: PySCF RKS + TDDFT (singlets and triplets) run directly
    mf, td_s = _direct(WATER, "pbe0", "TDDFT", 4, grid=2)
    _, td_t = _direct(WATER, "pbe0", "TDDFT", 4, singlet=False, grid=2)
    ev = tddft_eval
    assert ev.energy("S0") == pytest.approx(mf.e_tot, abs=1e-8)
    for k in (1, 2):
        assert ev.energy(f"S{k}") == pytest.approx(td_s.e_tot[k - 1], abs=1e-7)
        assert ev.energy(f"T{k}") == pytest.approx(td_t.e_tot[k - 1], abs=1e-7)
        assert ev.state(f"S{k}").oscillator_strength == pytest.approx(
            td_s.oscillator_strength()[k - 1], abs=1e-5)
        assert ev.state(f"T{k}").oscillator_strength is None
    assert ev.homo == 4  # water: 10 electrons, 5 doubly occupied MOs (common knowledge)


def test_tddft_amplitudes_are_cis_normalized(tddft_eval):
    # convention stated in surfcross.engine.wavefunction: X+Y rescaled to sum = 1/2
    wf = tddft_eval.wavefunction
    s = wf.manifolds["S"]
    assert s.includes_reference and s.coupling == "singlet"
    assert len(s.amplitudes) == len(tddft_eval.manifold("S")) - 1
    for amp in s.amplitudes:
        assert amp.shape == (5, 2)
        assert (amp ** 2).sum() == pytest.approx(0.5, abs=1e-12)
    t = wf.manifolds["T"]
    assert not t.includes_reference and t.coupling == "triplet"
    assert len(t.amplitudes) == len(tddft_eval.manifold("T"))


def test_open_shell_tda_matches_pyscf_and_fci_spin_square():
    # reference library: PySCF UHF + TDA, and PySCF's FCI <S^2> of the same CIS vector
    from pyscf.fci import cistring, spin_op

    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=3))
    ev = engine.states(NH2)
    engine.close()
    mf, td = _direct(NH2, None, "TDA", 5, unrestricted=True)
    assert [str(s.label) for s in ev.states][:4] == ["0", "1", "2", "3"]
    assert ev.energy("0") == pytest.approx(mf.e_tot, abs=1e-8)
    assert ev.state("0").spin_square == pytest.approx(mf.spin_square()[0], abs=1e-8)
    s_ao = mf.mol.intor("int1e_ovlp")
    na, nb = mf.mol.nelec
    norb = mf.mo_coeff[0].shape[1]
    ref_a, ref_b = (1 << na) - 1, (1 << nb) - 1
    amps = ev.wavefunction.manifolds[""].amplitudes
    for k in (1, 2, 3):
        assert ev.energy(str(k)) == pytest.approx(td.e_tot[k - 1], abs=1e-7)
        xa, xb = amps[k - 1]
        assert (xa ** 2).sum() + (xb ** 2).sum() == pytest.approx(1.0, abs=1e-12)
        civec = np.zeros((cistring.num_strings(norb, na), cistring.num_strings(norb, nb)))
        for spin, (amp, ref, n) in enumerate(((xa, ref_a, na), (xb, ref_b, nb))):
            for i, a in zip(*np.nonzero(amp)):
                string = ref ^ (1 << int(i)) ^ (1 << int(n + a))
                sign = cistring.cre_des_sign(int(n + a), int(i), ref)
                addr = cistring.str2addr(norb, n, string)
                if spin == 0:
                    civec[addr, 0] += sign * amp[i, a]
                else:
                    civec[0, addr] += sign * amp[i, a]
        expected = spin_op.spin_square(civec, norb, (na, nb), mo_coeff=mf.mo_coeff, ovlp=s_ao)[0]
        assert ev.state(str(k)).spin_square == pytest.approx(expected, abs=1e-9)
        assert cis_spin_square(mf.mo_coeff, mf.mo_occ, s_ao, xa, xb) == pytest.approx(expected,
                                                                                     abs=1e-9)


def test_high_spin_triplet_is_the_uhf_triplet_scf():
    # reference library: PySCF UHF with M_S = 1 (2S = 2) run directly
    from pyscf import scf

    engine = make_engine(MethodSpec(method="cis", roots=1, triplet_roots=1, triplets="high-spin"))
    ev = engine.states(CH2)
    engine.close()
    mf = scf.UHF(_mol(CH2, spin=2))
    mf.conv_tol = 1e-12
    mf.kernel()
    t1 = ev.state("T1")
    assert t1.energy_eh == pytest.approx(mf.e_tot, abs=1e-8)
    assert t1.spin_square == pytest.approx(mf.spin_square()[0], abs=1e-8)
    wf = ev.wavefunction.manifolds["T"]
    assert wf.includes_reference and wf.reference.nocc == (5, 3) and wf.amplitudes == ()
    # CH2 ground state is the triplet (handbook fact; METHODS.md reference table row 7);
    # at this bent geometry UHF already puts T1 below the closed-shell S0
    assert t1.energy_eh < ev.energy("S0")


def test_unknown_inputs_are_input_errors():
    # contract: surfcross.errors.InputError for what the user typed wrong
    with pytest.raises(InputError, match="functional"):
        PySCFResponseEngine(MethodSpec(method="tda", xc="no-such-functional"))
    with pytest.raises(InputError, match="one triplet"):
        PySCFResponseEngine(MethodSpec(method="cis", triplet_roots=2, triplets="high-spin"))
    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=1, triplet_roots=1))
    with pytest.raises(InputError, match="closed-shell"):
        engine.states(NH2)


def test_warm_start_needs_no_more_iterations_than_cold():
    # common practice (previous orbitals / previous vectors as guesses); counts, not wall time
    displaced = WATER.with_coords(WATER.coords_bohr + np.array([[0.0, 0.01, -0.02],
                                                                [0.0, 0.02, 0.01],
                                                                [0.01, -0.01, 0.0]]))
    counts = {}
    for warm in (True, False):
        engine = PySCFResponseEngine(MethodSpec(method="cis", roots=3, basis="6-31g"),
                                     warm_start=warm)
        engine.states(WATER)
        ev = engine.states(displaced)
        counts[warm] = (ev.scf_cycles, ev.response_iterations, ev.energy("S3"))
        engine.close()
    print("warm", counts[True][:2], "cold", counts[False][:2])
    assert counts[True][0] <= counts[False][0]
    # the symmetry-breaking admixture in every guess (spread_guess) made cold starts cheaper
    # too; warm starts must not cost more
    assert counts[True][1] <= counts[False][1]
    assert counts[True][2] == pytest.approx(counts[False][2], abs=1e-8)


def test_scf_fallbacks_and_failure(monkeypatch):
    # reference library: the energy after a fallback equals PySCF's plain RHF energy
    from surfcross.engine import pyscf_scf

    original = pyscf_scf._new_scf
    made = []

    def starved(mol, spec, unrestricted):
        mf = original(mol, spec, unrestricted)
        made.append(mf)
        if len(made) <= budget[0]:
            mf.max_cycle = cycles[0]  # too few cycles to converge
        return mf

    budget, cycles = [1], [2]
    monkeypatch.setattr(pyscf_scf, "_new_scf", starved)
    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=1), warm_start=False)
    ev = engine.states(WATER)
    mf, _ = _direct(WATER, None, "TDA", 1)
    assert ev.energy("S0") == pytest.approx(mf.e_tot, abs=1e-8)
    assert len(made) == 3  # DIIS failed, shift + damping worked, then the plain polish
    budget[0], cycles[0] = 10**6, 0
    made.clear()
    with pytest.raises(SCFNotConvergedError, match="did not converge"):
        engine.states(WATER)
    assert len(made) == 3  # DIIS, shift + damping, second-order


def test_response_failure_is_raised(monkeypatch):
    from surfcross.engine import pyscf_tdsolve

    monkeypatch.setattr(pyscf_tdsolve, "FIRST_MAX_CYCLE", 1)
    monkeypatch.setattr(pyscf_tdsolve, "RETRY_MAX_CYCLE", 1)
    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=3))
    with pytest.raises(ResponseNotConvergedError, match="did not converge"):
        engine.states(WATER)


def test_low_excitation_warning():
    # H2 stretched to 3 angstrom: the CIS triplet T1 falls below 0.1 eV (collapse of the
    # RHF reference at dissociation, textbook behaviour)
    h2 = Geometry.from_angstrom(["H", "H"], [[0, 0, 0], [0, 0, 3.0]])
    engine = make_engine(MethodSpec(method="cis", roots=1, triplet_roots=1))
    ev = engine.states(h2)
    t1 = (ev.energy("T1") - ev.energy("S0")) * HARTREE_IN_EV
    assert t1 < 0.1
    assert any(w.startswith("T1:") and "TDA" in w for w in ev.warnings)


def test_overlaps_at_the_same_geometry_are_the_identity():
    # CIS/TDA states are orthonormal (the solver's eigenvectors of a symmetric matrix), so
    # the delegated overlap of an evaluation with itself is the identity (Engine contract)
    engine = make_engine(MethodSpec(method="cis", roots=2, triplet_roots=2))
    ev = engine.states(WATER)
    overlaps = engine.overlaps(ev, ev)
    engine.close()
    assert set(overlaps) == {"S", "T"}
    for manifold, matrix in overlaps.items():
        n = len(ev.manifold(manifold))
        assert matrix.shape == (n, n)
        np.testing.assert_allclose(np.abs(matrix), np.eye(n), atol=1e-8)


def test_pyscf_output_goes_to_the_log_file_only(tmp_path, capfd):
    # our rule: PySCF never writes to the terminal; with a log path it writes there
    log = tmp_path / "pyscf.log"
    engine = PySCFResponseEngine(MethodSpec(method="cis", roots=1), log_path=str(log))
    engine.evaluate(WATER, ["S1"])
    engine.close()
    quiet = PySCFResponseEngine(MethodSpec(method="cis", roots=1))
    quiet.evaluate(WATER, ["S1"])
    quiet.close()
    out, err = capfd.readouterr()
    assert out == "" and err == ""
    assert "converged SCF energy" in log.read_text()


def test_engine_used_after_close_stays_silent(tmp_path):
    # our rule as above; a separate process, because PySCF binds the terminal stream when it is
    # imported and in-process capture does not see what it writes there
    import subprocess
    import sys

    script = (
        "from surfcross.engine.base import MethodSpec\n"
        "from surfcross.engine.pyscf_response import PySCFResponseEngine\n"
        "from surfcross.geometry import Geometry\n"
        "g = Geometry.from_angstrom(['H', 'H'], [[0, 0, 0], [0, 0, 0.74]])\n"
        f"e = PySCFResponseEngine(MethodSpec(method='cis', roots=1), log_path={str(tmp_path / 'x.log')!r})\n"
        "e.evaluate(g, ['S1'])\n"
        "e.close()\n"
        "e.evaluate(g, ['S1'])\n")
    run = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         timeout=120)
    assert run.returncode == 0, run.stderr
    assert run.stdout == ""


def _stretched_water(r_angstrom):
    half = np.radians(52.0)
    y, z = r_angstrom * np.sin(half), r_angstrom * np.cos(half)
    return Geometry.from_angstrom(["O", "H", "H"], [[0.0, 0.0, 0.0], [0.0, y, z], [0.0, -y, z]])


@pytest.mark.parametrize("warm", [False, True])
def test_lowest_roots_are_found_at_a_symmetric_stretched_geometry(warm):
    # Reference: full diagonalization of PySCF's own TDA (CIS) matrix A (tdscf get_ab) with
    # numpy. Our scenario: C2v water with both O-H bonds at 1.7 angstrom, where the ordering of
    # orbital-energy differences is far from that of the excitation energies; a Davidson guess
    # that keeps the molecule's symmetry never reaches states of the missing irreducible
    # representations and reported higher roots as S1 (about 0.045 Eh too high).
    from pyscf import scf, tdscf

    geom = _stretched_water(1.7)
    spec = MethodSpec(method="cis", roots=3, basis="6-31g")
    engine = PySCFResponseEngine(spec, warm_start=warm)
    if warm:  # arrive along a stretch path
        for r in (1.3, 1.5):
            engine.states(_stretched_water(r))
    ev = engine.states(geom)
    engine.close()
    mol = _mol(geom)
    mol.basis = "6-31g"
    mol.build()
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    a, _ = tdscf.rhf.TDA(mf).get_ab()
    no, nv = a.shape[:2]
    exact = mf.e_tot + np.linalg.eigvalsh(a.reshape(no * nv, no * nv))[:3]
    got = [ev.energy(f"S{k}") for k in (1, 2, 3)]
    assert np.allclose(got, exact, atol=1e-7), (got, exact)
