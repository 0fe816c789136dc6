"""State-averaged CASSCF engine: energies against direct PySCF, singlet enforcement, oscillator
strengths by symmetry, options and errors."""

import numpy as np
import pytest

from surfcross.engine import make_engine
from surfcross.engine.base import MethodSpec
from surfcross.engine.casscf import CASSCFEngine
from surfcross.engine.casscf_checks import property_warnings
from surfcross.errors import InputError
from surfcross.geometry import Geometry

pytestmark = pytest.mark.pyscf

pytest.importorskip("pyscf")

_SYMBOLS = ["C", "C", "H", "H", "H", "H"]
# planar ethylene, C=C along z (our own rounded geometry, angstrom)
_PLANAR = np.array([
    [0.0, 0.0, 0.669], [0.0, 0.0, -0.669],
    [0.0, 0.923, 1.238], [0.0, -0.923, 1.238],
    [0.0, 0.923, -1.238], [0.0, -0.923, -1.238],
])
# twisted by 80 degrees about C=C (the hydrogens of the second carbon rotated)
_TWIST = np.radians(80.0)
_TWISTED = _PLANAR.copy()
for _k in (4, 5):
    _y = _PLANAR[_k, 1]
    _TWISTED[_k, :2] = [-_y * np.sin(_TWIST), _y * np.cos(_TWIST)]


def _geom(xyz):
    return Geometry.from_angstrom(_SYMBOLS, xyz)


def _pyscf_sa_casscf(geometry, nstates, ncas, nelecas, fix_spin=True):
    """Direct PySCF SA-CASSCF from RHF orbitals (reference library)."""
    from pyscf import gto, mcscf, scf

    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(geometry.symbols, geometry.coords_bohr)],
                unit="Bohr", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    mc = mcscf.CASSCF(mf, ncas, nelecas)
    if fix_spin:
        mc.fix_spin_(ss=0)
    mc.state_average_([1.0 / nstates] * nstates)
    mc.conv_tol = 1e-11
    mc.conv_tol_grad = 1e-6
    mc.fcisolver.conv_tol = 1e-12
    mc.kernel()
    assert mc.converged or np.linalg.norm(mc.get_grad()) < 3e-6
    return mc


def _twisted(degrees):
    xyz = _PLANAR.copy()
    t = np.radians(degrees)
    for k in (4, 5):
        y = _PLANAR[k, 1]
        xyz[k, :2] = [-y * np.sin(t), y * np.cos(t)]
    return xyz


@pytest.mark.slow
def test_energies_agree_with_direct_pyscf_along_a_path():
    # Reference library: PySCF SA-2-CASSCF(2,2) run from RHF orbitals at each geometry; the
    # engine carries orbitals from the previous geometry (10 degree twist steps), which must
    # not change the solution.
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2))
    with CASSCFEngine(spec) as engine:
        for degrees in (0.0, 10.0, 20.0, 30.0):
            ev = engine.states(_geom(_twisted(degrees)))
            ref = _pyscf_sa_casscf(_geom(_twisted(degrees)), 2, 2, 2)
            np.testing.assert_allclose([s.energy_eh for s in ev.states], ref.e_states, atol=2e-6)


def test_a_large_jump_is_reported_when_the_active_orbitals_change():
    # SA-CASSCF has several solutions; jumping from planar to an 80 degree twist in one step,
    # the carried orbitals end in another active space than a fresh start (PySCF reference run
    # from RHF orbitals gives a higher average energy). The engine must say so.
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2))
    with CASSCFEngine(spec) as engine:
        engine.states(_geom(_PLANAR))
        ev = engine.states(_geom(_TWISTED))
    assert any("active orbitals changed character" in w for w in ev.warnings)


def test_singlets_only_where_a_plain_average_would_take_the_triplet():
    # Reference library: without a spin constraint PySCF's SA-2-CASSCF(2,2) of twisted ethylene
    # averages S0 with the nearly degenerate triplet (<S^2> = 2). The engine must give singlets.
    from pyscf.fci import spin_op

    geom = _geom(_TWISTED)
    plain = _pyscf_sa_casscf(geom, 2, 2, 2, fix_spin=False)
    ss_plain = [spin_op.spin_square0(c, 2, (1, 1))[0] for c in plain.ci]
    assert max(ss_plain) == pytest.approx(2.0, abs=1e-6)
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2))
    with CASSCFEngine(spec) as engine:
        ev = engine.states(geom)
    assert all(abs(s.spin_square) < 1e-6 for s in ev.states)


def test_oscillator_strengths_follow_the_d2h_selection_rules():
    # Group theory (common practice): in planar ethylene (D2h) the CAS(2,2) singlets are the
    # ground state (Ag), the pi->pi* "V" state (B1u, dipole allowed, polarized along C=C) and
    # the doubly excited "Z" state (Ag, forbidden from Ag). Exactly one of S1, S2 is bright.
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=2, active_space=(2, 2))
    with CASSCFEngine(spec) as engine:
        ev = engine.states(_geom(_PLANAR))
    f = [s.oscillator_strength for s in ev.states]
    assert f[0] is None
    bright, dark = max(f[1:]), min(f[1:])
    assert bright > 0.1
    assert dark < 1e-8


def test_chosen_active_orbitals_match_pyscf_sort_mo():
    # Reference library: PySCF's sort_mo with 1-based MO numbers. Ethylene STO-3G has 8 doubly
    # occupied MOs; choosing MOs 7 and 9 (HOMO-1 and LUMO) gives another active space than the
    # default (8, 9), and the engine must reproduce PySCF's result for that choice.
    from pyscf import gto, mcscf, scf

    geom = _geom(_PLANAR)
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2),
                      active_orbitals=(7, 9))
    with CASSCFEngine(spec) as engine:
        ev = engine.states(geom)
    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(geom.symbols, geom.coords_bohr)],
                unit="Bohr", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    mc = mcscf.CASSCF(mf, 2, 2).fix_spin_(ss=0).state_average_([0.5, 0.5])
    mc.conv_tol = 1e-11
    mc.kernel(mc.sort_mo([7, 9], base=1))
    np.testing.assert_allclose([s.energy_eh for s in ev.states], mc.e_states, atol=1e-7)


def test_factory_weights_log_and_input_errors(tmp_path):
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2),
                      state_weights=(3.0, 1.0))
    log = tmp_path / "pyscf.log"
    engine = make_engine(spec, log_path=str(log))
    assert isinstance(engine, CASSCFEngine)
    ev = engine.states(_geom(_PLANAR))
    engine.close()
    assert ev.wavefunction.weights == pytest.approx((0.75, 0.25))
    assert "CASSCF" in log.read_text()
    assert any("higher-level method" in w for w in ev.warnings)
    with pytest.raises(InputError, match="one weight per state"):
        CASSCFEngine(spec.with_updates(state_weights=(1.0, 1.0, 1.0)))
    with pytest.raises(InputError, match="odd"):
        CASSCFEngine(spec.with_updates(active_space=(3, 2), state_weights=None))
    with CASSCFEngine(spec.with_updates(state_weights=None)) as engine:
        with pytest.raises(InputError, match="singlet"):
            engine.states(_geom(_PLANAR).with_charge_spin(0, 2))
        with pytest.raises(InputError, match="too few"):
            CASSCFEngine(spec.with_updates(active_space=(2, 20), state_weights=None)).states(
                _geom(_PLANAR))


def test_property_warnings_flag_spin_contamination_and_inert_orbitals():
    props = {"spin_square": [0.0, 0.4], "natural_occupations": [1.999, 1.2, 0.8, 0.001]}
    notes = property_warnings(props)
    assert any("S1 has <S^2> = 0.400" in n for n in notes)
    assert any("1.999" in n and "0.001" in n for n in notes)
    assert property_warnings({"spin_square": [0.0], "natural_occupations": [1.5, 0.5]}) == []


def test_command_line_options_reach_the_engine():
    import argparse

    from surfcross.cli.options import add_method_options, method_from_args

    parser = argparse.ArgumentParser()
    add_method_options(parser)
    args = parser.parse_args(["--method", "casscf", "--active-space", "2,2",
                              "--active-orbitals", "7,9", "--roots", "1"])
    spec = method_from_args(args)
    assert spec.active_space == (2, 2) and spec.active_orbitals == (7, 9)
    with pytest.raises(InputError, match="exactly 2"):
        CASSCFEngine(spec.with_updates(active_orbitals=(7, 8, 9)))
    with pytest.raises(InputError, match="start at 1"):
        method_from_args(parser.parse_args(["--method", "casscf", "--active-space", "2,2",
                                            "--active-orbitals", "0,1"]))
