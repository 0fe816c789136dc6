"""The single-state objective: minimize one followed state (surfcross.objectives.single).

Outside references:
* PySCF's analytic TDA nuclear gradients (pyscf.tdscf ... nuc_grad_method) for the gradient
  of the followed root;
* point-group symmetry labels from PySCF (pyscf.symm) for the character of a state;
* scipy.optimize.minimize_scalar on PySCF energies of the symmetry-selected state for the
  bond length of that state's minimum.

Scenario of our own: CO, CIS/STO-3G. At 1.10 angstrom the third excited singlet is the
Sigma- state (A2 in PySCF's C2v labels) above the degenerate Pi pair; the Sigma- state drops
below the Pi pair as the bond stretches, so its adiabatic index changes on the way to its
minimum.
"""

from __future__ import annotations

import numpy as np
import pytest
from pyscf import gto, scf, symm, tdscf
from scipy.optimize import minimize_scalar

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.engine import MethodSpec, make_engine
from surfcross.engine.model import conical_model, model_geometry
from surfcross.errors import StateTrackingError
from surfcross.geometry import Geometry
from surfcross.objectives.single import SingleStateObjective
from surfcross.optimize.loop import Optimizer
from surfcross.tracking import TrackingOptions
from surfcross.units import BOHR_IN_ANGSTROM

pytestmark = pytest.mark.pyscf

SPEC = MethodSpec(method="cis", basis="sto-3g", roots=5)


def co(r_angstrom: float) -> Geometry:
    return Geometry.from_angstrom(("C", "O"), [[0, 0, 0], [0, 0, r_angstrom]])


def pyscf_states(r_angstrom: float, nstates: int = 5):
    mol = gto.M(atom=f"C 0 0 0; O 0 0 {r_angstrom}", basis="sto-3g", symmetry=True,
                verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-10)
    td = tdscf.TDA(mf)
    td.nstates, td.conv_tol = nstates, 1e-9
    td.kernel()
    return mol, mf, td


def orbital_irrep_ids(mol, mo_coeff) -> list[int]:
    names = symm.label_orb_symm(mol, mol.irrep_name, mol.symm_orb, mo_coeff)
    return [symm.irrep_name2id(mol.groupname, n) for n in names]


def dominant_irrep(mol, ids, x) -> str:
    """Irrep carrying most of the weight of amplitudes x (occupied x virtual, symmetry-adapted
    orbitals), from PySCF's orbital irreps and product table (ids combine by XOR)."""
    nocc = x.shape[0]
    weight: dict[int, float] = {}
    for i in range(nocc):
        for a in range(x.shape[1]):
            key = ids[i] ^ ids[nocc + a]
            weight[key] = weight.get(key, 0.0) + x[i, a] ** 2
    return symm.irrep_id2name(mol.groupname, max(weight, key=weight.get))


def engine_irrep(evaluation, root: str) -> str:
    """Irrep of an engine state: its amplitudes rotated onto PySCF's symmetry-adapted orbitals
    of the same molecule (the engine's degenerate pi orbitals are arbitrary mixtures)."""
    g = evaluation.geometry
    r = g.distance(0, 1) * BOHR_IN_ANGSTROM
    mol, mf, _ = pyscf_states(r, nstates=1)
    mol_engine = gto.M(atom=[(s, tuple(c)) for s, c in zip(g.symbols, g.coords_bohr)],
                       unit="Bohr", basis="sto-3g", verbose=0)
    wf = evaluation.wavefunction.manifolds["S"]
    rot = mf.mo_coeff.T @ gto.intor_cross("int1e_ovlp", mol, mol_engine) @ wf.reference.mo_coeff
    x = wf.amplitudes[int(root[1:]) - 1]
    x_sym = rot[:7, :7] @ x @ rot[7:, 7:].T
    return dominant_irrep(mol, orbital_irrep_ids(mol, mf.mo_coeff), x_sym)


def sigma_minus_energy(r_angstrom: float) -> float:
    """Energy of the lowest A2 (Sigma-) CIS singlet, chosen by symmetry (PySCF)."""
    mol, mf, td = pyscf_states(r_angstrom)
    ids = orbital_irrep_ids(mol, mf.mo_coeff)
    for e, (x, _) in zip(td.e_tot, td.xy):
        if dominant_irrep(mol, ids, x) == "A2":
            return float(e)
    raise AssertionError("no A2 state among the computed roots")


def test_gradient_is_pyscf_analytic_gradient_of_the_followed_root():
    engine = make_engine(SPEC)
    objective = SingleStateObjective(engine, "S3")
    value = objective.evaluate(co(1.10))
    assert value.info["root"] == "S3" and value.exact_gradient and not value.reject_step
    mol, mf, td = pyscf_states(1.10)
    reference = td.nuc_grad_method().kernel(state=3)  # PySCF counts excited states from 1
    np.testing.assert_allclose(value.gradient, reference, atol=2e-5)
    # engine roots converged to its default response tolerance (1e-6), PySCF's here to 1e-9
    assert value.value == pytest.approx(td.e_tot[2], abs=1e-6)
    assert value.energies_eh == {"S3": value.value}


def test_minimization_ends_on_the_starting_character_only_with_tracking():
    results = {}
    for enabled in (True, False):
        objective = SingleStateObjective(make_engine(SPEC), "S3",
                                         tracking=TrackingOptions(enabled=enabled))
        result = Optimizer(objective, CartesianCoordinates(2)).run(co(1.10))
        assert result.converged
        results[enabled] = (result, objective)
    start_irrep = engine_irrep(results[True][0].history[0].value.evaluation, "S3")
    assert start_irrep == "A2"  # Sigma- at the start (PySCF symmetry labels)

    tracked, obj_on = results[True]
    root = tracked.value.info["root"]
    assert root == "S1" and engine_irrep(tracked.value.evaluation, root) == "A2"
    assert obj_on.reorderings and obj_on.reorderings[0].startswith("S3 moved from root S3")
    # the minimum of the Sigma- state from scipy on PySCF energies selected by symmetry
    r_ref = minimize_scalar(sigma_minus_energy, bounds=(1.25, 1.45), method="bounded",
                            options={"xatol": 1e-4}).x
    r_tracked = tracked.geometry.distance(0, 1) * BOHR_IN_ANGSTROM
    assert r_tracked == pytest.approx(r_ref, abs=2e-3)
    # same state as PySCF's symmetry-selected A2 root (engine response tolerance 1e-6)
    assert tracked.value.value == pytest.approx(sigma_minus_energy(r_tracked), abs=1e-6)

    adiabatic, obj_off = results[False]
    assert obj_off.reorderings == []
    r_adiabatic = adiabatic.geometry.distance(0, 1) * BOHR_IN_ANGSTROM
    assert engine_irrep(adiabatic.value.evaluation, "S3").startswith("E1")  # a Pi component
    assert abs(r_adiabatic - r_tracked) > 0.03  # ended elsewhere

    # resume: a fresh objective restarted at the final geometry keeps the saved root
    resumed = SingleStateObjective(make_engine(SPEC), "S3")
    resumed.load_state_dict(obj_on.state_dict())
    again = resumed.evaluate(tracked.geometry)
    assert again.info["root"] == "S1"
    assert again.value == pytest.approx(tracked.value.value, abs=1e-6)
    assert resumed.reorderings == obj_on.reorderings


class ScrambledOverlaps:
    """Wraps an engine; overlaps can be replaced by an equal mixture of all states (a test
    double for an abrupt change of character)."""

    def __init__(self, engine):
        self.engine, self.scramble = engine, False

    def __getattr__(self, name):
        return getattr(self.engine, name)

    def overlaps(self, bra, ket):
        out = self.engine.overlaps(bra, ket)
        if self.scramble:
            out = {k: np.full_like(v, 0.3) for k, v in out.items()}
        return out


def test_abrupt_change_rejects_the_step_or_raises_when_strict():
    engine = ScrambledOverlaps(conical_model())
    objective = SingleStateObjective(engine, "S1")
    start = objective.evaluate(model_geometry())
    objective.accept(start)
    engine.scramble = True
    trial = objective.evaluate(model_geometry(np.full(6, 0.01)))
    assert trial.reject_step and trial.tracking.flags
    assert objective.after_convergence(trial) is False
    engine.scramble = False
    assert not objective.evaluate(model_geometry(np.full(6, 0.01))).reject_step

    strict = SingleStateObjective(engine, "S1", tracking=TrackingOptions(strict=True))
    strict.accept(strict.evaluate(model_geometry()))
    engine.scramble = True
    with pytest.raises(StateTrackingError):
        strict.evaluate(model_geometry(np.full(6, 0.01)))
