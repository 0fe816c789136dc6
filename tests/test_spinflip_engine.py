"""The spin-flip TDA engine (method 'sf-tda', optional pyscf-forge extra).

Outside references:
* pyscf-forge run directly (UKS M_S = 1 reference, ``TDA_SF`` with extype = 1): energies and
  <S^2> of every state, both kernels;
* PySCF's FCI <S^2> (``pyscf.fci.spin_op.spin_square`` with the alpha and beta orbitals) of the
  same determinant expansion, an independent check of pyscf-forge's spin-flip <S^2>;
* central finite differences of the engine's own energies for the analytic gradients;
* singlet/triplet: S(S+1) = 0 and 2 (textbook); that the ground state of water is a singlet
  and that its lowest triplet lies several eV higher (common knowledge) fixes S0 as the lowest
  state.
Values are STO-3G numbers for tests, not chemistry; spin-flip TDA results need checking with a
spin-adapted multireference method before anyone relies on them.
"""

import sys

import numpy as np
import pytest

from surfcross.engine import MethodSpec, make_engine
from surfcross.engine.base import SPIN_FLIP_DEFAULT_XC, Transition
from surfcross.errors import InputError
from surfcross.geometry import Geometry

try:
    import pyscf.sftda  # noqa: F401
    HAVE_EXTRA = True
except ImportError:
    HAVE_EXTRA = False
needs_extra = pytest.mark.skipif(not HAVE_EXTRA, reason="needs the optional 'spinflip' extra "
                                 "(pyscf-forge; see README)")

# water with no symmetry, so that every gradient component is tested
WATER = Geometry.from_angstrom(["O", "H", "H"], np.array([[0.0, 0.0, 0.0], [0.05, -0.77, 0.59],
                                                          [-0.03, 0.74, 0.57]]))
SPEC = MethodSpec(method="sf-tda", basis="sto-3g", roots=2, response_conv_tol=1e-8)


def test_method_spec_defaults_and_checks():
    # no extra needed: the spec is plain data
    spec = MethodSpec(method="sf-tda")
    assert spec.xc == SPIN_FLIP_DEFAULT_XC == "bhandhlyp" and spec.spin_flip_kernel == "collinear"
    hf = MethodSpec(method="sf-tda", xc="none")
    assert hf.xc == "hf" and hf.with_updates(roots=5).xc == "hf" and hf.reference == "HF"
    assert MethodSpec(method="tda").xc is None
    with pytest.raises(InputError, match="spin-flip kernel"):
        MethodSpec(method="sf-tda", spin_flip_kernel="noncollinear")
    with pytest.raises(InputError, match="sf-tda only"):
        MethodSpec(method="tda", spin_flip_kernel="multicollinear")
    with pytest.raises(InputError, match="high-spin"):
        MethodSpec(method="sf-tda", triplets="high-spin")
    text = Transition(4, 5, 0.9, "ab").describe()
    assert text == "5(a) -> 6(b) (0.90)"
    # the limits the engine carries for users (contamination, reference, functional, advice)
    from surfcross.engine.spinflip_states import SPIN_FLIP_LIMITS

    for phrase in ("spin-contaminated", "reference", "functional", "multireference"):
        assert phrase in SPIN_FLIP_LIMITS


def test_missing_extra_is_a_one_line_input_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "pyscf.sftda", None)  # import of it now fails
    with pytest.raises(InputError, match=r"surfcross\[spinflip\].*BLAS"):
        make_engine(MethodSpec(method="sf-tda"))




def _direct(geometry, samples, nstates=10):
    from pyscf import dft, gto

    mol = gto.M(atom=[(s, tuple(c)) for s, c in zip(geometry.symbols, geometry.coords_bohr)],
                unit="Bohr", basis="sto-3g", spin=2, verbose=0)
    mf = dft.UKS(mol)
    mf.xc = "bhandhlyp"
    mf.conv_tol = 1e-12
    mf.kernel()
    td = mf.TDA_SF()
    td.extype, td.collinear_samples, td.nstates, td.conv_tol = 1, samples, nstates, 1e-9
    td.kernel()
    return mf, td


@pytest.fixture(scope="module")
def collinear():
    with make_engine(SPEC) as engine:
        yield engine, engine.states(WATER)


@needs_extra
@pytest.mark.pyscf
def test_states_match_direct_pyscf_forge(collinear):
    _, ev = collinear
    mf, td = _direct(WATER, -1)
    energies = mf.e_tot + td.e
    s2 = td.spin_square(state=np.arange(1, len(td.e) + 1))
    singlets = [k for k in range(len(td.e)) if s2[k] < 1.0]
    triplets = [k for k in range(len(td.e)) if 1.0 <= s2[k] < 4.0]
    assert [str(s.label) for s in ev.manifold("S")][:3] == ["S0", "S1", "S2"]
    for label, k in zip([s.label for s in ev.manifold("S")], singlets):
        assert ev.energy(label) == pytest.approx(energies[k], abs=1e-7)
        assert ev.state(label).spin_square == pytest.approx(s2[k], abs=1e-6)
    for state, k in zip(ev.manifold("T"), triplets):
        assert state.energy_eh == pytest.approx(energies[k], abs=1e-7)
    # S0 is the lowest state, well below the triplets (water: closed-shell ground state)
    assert ev.energy("S0") == pytest.approx(energies.min(), abs=1e-7)
    assert ev.energy("T1") - ev.energy("S0") > 0.1
    assert all(s.spin_square is not None for s in ev.states)
    assert ev.state("S0").oscillator_strength is None
    assert all(s.oscillator_strength >= 0 for s in ev.states if str(s.label) != "S0")
    assert ev.state("S0").transitions[0].spin == "ab"


@needs_extra
@pytest.mark.pyscf
def test_spin_square_matches_pyscf_fci(collinear):
    from pyscf.fci import cistring, spin_op

    engine, ev = collinear
    wf = ev.wavefunction
    ca, cb = wf.mo_coeff
    na, nb = (int(n) for n in wf.mo_occ.sum(axis=1))
    assert np.all(wf.mo_occ[0][:na] == 1) and np.all(wf.mo_occ[1][:nb] == 1)
    norb = ca.shape[1]
    ref_a, ref_b = (1 << na) - 1, (1 << nb) - 1
    from pyscf import gto

    s_ao = gto.M(atom=[(s, tuple(c)) for s, c in zip(WATER.symbols, WATER.coords_bohr)],
                 unit="Bohr", basis="sto-3g", spin=2, verbose=0).intor("int1e_ovlp")
    for state in ev.states:
        x = wf.amplitudes[(wf.roots["S"] + wf.roots["T"])[ev.states.index(state)]]
        civec = np.zeros((cistring.num_strings(norb, na - 1), cistring.num_strings(norb, nb + 1)))
        for i, a in zip(*np.nonzero(x)):
            sa = ref_a ^ (1 << int(i))
            sb = ref_b | (1 << int(nb + a))
            sign = cistring.des_sign(int(i), ref_a) * cistring.cre_sign(int(nb + a), ref_b)
            civec[cistring.str2addr(norb, na - 1, sa), cistring.str2addr(norb, nb + 1, sb)] += \
                sign * x[i, a]
        expected = spin_op.spin_square(civec, norb, (na - 1, nb + 1), mo_coeff=(ca, cb),
                                       ovlp=s_ao)[0]
        assert state.spin_square == pytest.approx(expected, abs=1e-8), state.label


def _directional_check(engine, geometry, labels, directions, h=1e-3):
    ev = engine.gradients(engine.states(geometry), labels)
    for d in directions:
        d = d / np.linalg.norm(d)
        plus = engine.states(Geometry(geometry.symbols, geometry.coords_bohr + h * d))
        minus = engine.states(Geometry(geometry.symbols, geometry.coords_bohr - h * d))
        for label in labels:
            fd = (plus.energy(label) - minus.energy(label)) / (2 * h)
            analytic = float(np.sum(ev.gradient(label) * d))
            # observed differences ~2e-6 Eh/bohr (grid and Z-vector tolerances)
            assert analytic == pytest.approx(fd, abs=1e-5), (label, analytic, fd)
    return ev


@needs_extra
@pytest.mark.pyscf
@pytest.mark.slow
def test_collinear_gradients_of_s0_and_s1_match_finite_differences():
    rng = np.random.default_rng(11)
    with make_engine(SPEC) as engine:
        ev = _directional_check(engine, WATER, ["S0", "S1"],
                                [rng.standard_normal((3, 3)) for _ in range(2)])
    assert np.abs(ev.gradient("S1")).max() > 1e-2  # not a stationary point: a real check


@needs_extra
@pytest.mark.pyscf
@pytest.mark.slow
def test_multicollinear_energies_and_gradient():
    spec = SPEC.with_updates(spin_flip_kernel="multicollinear")
    with make_engine(spec) as engine:
        ev = engine.states(WATER)
        mf, td = _direct(WATER, 20)
        assert ev.energy("S0") == pytest.approx(mf.e_tot + td.e.min(), abs=1e-7)
        # the M_S = 0 partner of the reference triplet lies close to the reference with the
        # multicollinear kernel (exact theory: degenerate), unlike with the collinear one
        assert abs(ev.energy("T1") - mf.e_tot) < abs(collinear_t1_gap())
        direction = np.random.default_rng(5).standard_normal((3, 3))
        _directional_check(engine, WATER, ["S1"], [direction])


def collinear_t1_gap():
    mf, td = _direct(WATER, -1)
    s2 = td.spin_square(state=np.arange(1, len(td.e) + 1))
    return td.e[np.flatnonzero((s2 > 1.5) & (s2 < 2.5))[0]]


@needs_extra
@pytest.mark.pyscf
def test_followed_contaminated_state_is_warned_about(collinear):
    engine, ev = collinear
    contaminated = [s for s in ev.manifold("T") if abs(s.spin_square - 2.0) > 0.3]
    assert contaminated  # spin-incomplete configurations have <S^2> near 1 (method's nature)
    target = contaminated[0].label
    out = engine.gradients(ev, [target])
    assert any(w.startswith(f"{target}: <S^2> =") for w in out.warnings)
    assert not any(w.startswith("S0:") for w in engine.gradients(ev, ["S0"]).warnings)


@needs_extra
@pytest.mark.pyscf
def test_spin_zero_required():
    with make_engine(SPEC) as engine:
        with pytest.raises(InputError, match="spin 0"):
            engine.states(Geometry(WATER.symbols, WATER.coords_bohr, charge=1, spin=1))


def test_change_of_spin_class_between_geometries_is_reported():
    # a constructed case (no extra needed): at the previous geometry root 1 is the followed
    # singlet S1; at the new one its best match is root 2, now triplet-like (T1)
    from surfcross.engine.base import Evaluation, StateInfo
    from surfcross.engine.spinflip import SpinFlipWavefunction, _class_changes
    from surfcross.states import StateLabel

    def evaluation(classes, s2, gradients=()):
        counters = {"S": 0, "T": 1}
        labels = []
        for c in classes:
            labels.append(StateLabel(c, counters[c]))
            counters[c] += 1
        roots = {m: tuple(k for k, c in enumerate(classes) if c == m) for m in "ST"}
        states = tuple(StateInfo(label=labels[k], energy_eh=-1.0 + 0.1 * k, spin_square=s2[k])
                       for m in "ST" for k in roots[m])
        wf = SpinFlipWavefunction(symbols=WATER.symbols, coords_bohr=WATER.coords_bohr,
                                  basis="sto-3g", mo_coeff=np.zeros((2, 1, 1)),
                                  mo_occ=np.zeros((2, 1)), amplitudes=np.zeros((3, 1, 1)),
                                  spin_squares=tuple(s2), roots=roots)
        grads = {StateLabel("S", 1): np.zeros((3, 3))} if gradients else {}
        return Evaluation(geometry=WATER, states=states, wavefunction=wf, gradients=grads)

    bra = evaluation("SST", [0.05, 0.6, 1.9], gradients=True)
    ket = evaluation("STS", [0.05, 1.2, 0.4])
    full = np.array([[0.99, 0.0, 0.05], [0.0, 0.97, 0.1], [0.05, 0.1, 0.96]])
    notes = _class_changes(bra, ket, full)
    assert "T1" in notes and notes["T1"].startswith("T1 here continues S1")
    assert "S1 (followed at the previous geometry" in notes[""]
    assert "continues here as T1" in notes[""]
    assert _class_changes(bra, bra, np.eye(3)) == {}
