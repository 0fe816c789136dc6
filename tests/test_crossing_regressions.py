"""Regressions of crossing searches that stopped too early, shrank their steps for nothing,
lost their pair or ran on an unbalanced pair of states.

Scenarios of our own on the analytic model engines (``surfcross.engine.model``) and small
fakes; the expectations are the contracts of the optimizer and objectives documented in
their modules, plus common practice where named (the 0.3 bohr per-atom cap).
"""

from __future__ import annotations

import dataclasses
from types import SimpleNamespace

import numpy as np
import pytest

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.engine.base import MethodSpec
from surfcross.engine.model import conical_model, model_geometry, spin_model
from surfcross.errors import InputError
from surfcross.geometry import Geometry
from surfcross.objectives.base import ObjectiveValue, SubspaceModel
from surfcross.objectives.penalty import PenaltyObjective, PenaltySettings
from surfcross.objectives.searches import make_crossing_objective, optimizer_settings_for
from surfcross.objectives.spin import SpinCrossingObjective
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from surfcross.tracking.records import TrackingRecord


class _RaisedWeight:
    """A composed objective on one pseudo-atom: Ebar = (x - 1)^2 / 2, gap = 0.1 |x|, working
    gradient dEbar + 10 dgap; the merit weight mu goes from 1 to 10 when the start is
    accepted."""

    name = "raised weight"

    def __init__(self) -> None:
        self.mu, self.accepted = 1.0, 0

    def evaluate(self, geometry: Geometry) -> ObjectiveValue:
        x = float(geometry.coords_bohr[0, 0])
        ebar, gap = 0.5 * (x - 1.0) ** 2, 0.1 * abs(x)
        grad = np.zeros((1, 3))
        grad[0, 0] = (x - 1.0) + 10.0 * 0.1 * np.sign(x)
        return ObjectiveValue(value=ebar, gradient=grad, exact_gradient=False,
                              merit=ebar + self.mu * gap, gap_eh=gap,
                              subspace=SubspaceModel(directions=np.array([[0, 1.0, 0]]),
                                                     curvatures=np.array([1.0])),
                              info={"merit_gap_weight": self.mu})

    def merit(self, value: ObjectiveValue) -> float:
        return value.value + self.mu * value.gap_eh

    def accept(self, value: ObjectiveValue) -> None:
        self.accepted += 1
        self.mu = 10.0

    def after_convergence(self, value):
        return False

    def state_dict(self):
        return {}

    def load_state_dict(self, state):
        pass


def test_merit_is_compared_at_the_current_weight():
    # start x = 0.5 (gap 0.05): at mu = 1 its merit is 0.175, at the raised mu = 10 it is
    # 0.625. The step toward x = 0 (to 0.2) lowers the merit at mu = 10 (to 0.52) but not at
    # mu = 1: before, the start kept its stale merit and the step was rejected as a false
    # rise (mu_new - mu_old) dE
    obj = _RaisedWeight()
    start = Geometry(("H",), np.array([[0.5, 0.0, 0.0]]), spin=1)
    opt = Optimizer(obj, CartesianCoordinates(1, project_external=False),
                    settings=OptimizerSettings(max_iterations=1, trust_radius=0.3,
                                               initial_hessian="diagonal",
                                               diagonal_curvature=1.0))
    result = opt.run(start)
    first = [r for r in result.history if r.iteration == 1][0]
    x1 = float(first.geometry.coords_bohr[0, 0])
    assert x1 < 0.5
    assert obj.merit(first.value) < 0.625  # lower at the current weight
    assert first.accepted


class _LosingTracker:
    """Pair tracker whose every assignment after the start has a low overlap."""

    def start(self, evaluation):
        return TrackingRecord(targets=("S1", "S2"), roots=("S1", "S2"), confidence=(1.0, 1.0))

    def assign(self, evaluation):
        return TrackingRecord(targets=("S1", "S2"), roots=("S1", "S2"),
                              previous_roots=("S1", "S2"), confidence=(0.3, 0.3))

    def accept(self, evaluation, record=None):
        pass


@pytest.mark.parametrize("make", [
    lambda tr: SpinCrossingObjective(conical_model(), ("S1", "S2"), tracker=tr),
    lambda tr: PenaltyObjective(conical_model(), ("S1", "S2"), tracker=tr),
    lambda tr: make_crossing_objective(conical_model(), ("S1", "S2"), "projected", tracker=tr)])
def test_trial_that_loses_the_pair_is_rejected(make):
    obj = make(_LosingTracker())
    start = obj.evaluate(model_geometry(np.zeros(6)))
    assert not start.reject_step  # the start has nothing to lose
    obj.accept(start)
    trial = obj.evaluate(model_geometry(np.full(6, 0.05)))
    assert trial.reject_step


def test_crossing_steps_move_no_atom_more_than_0_3_bohr():
    # per-atom cap of crossing searches (common practice: 0.3 bohr) even with a large trust
    # radius and a start far from the seam
    settings = optimizer_settings_for("spin", OptimizerSettings(max_iterations=15,
                                                                initial_hessian="diagonal"))
    assert settings.max_atom_step == 0.3
    settings = dataclasses.replace(settings, trust_radius=1.0, trust_max=2.0)
    obj = SpinCrossingObjective(spin_model(), ("S1", "T1"))
    opt = Optimizer(obj, CartesianCoordinates(2, project_external=False), settings=settings,
                    convergence=ConvergenceSettings.preset("normal"))
    result = opt.run(model_geometry(np.full(6, 2.0)))
    moves = [np.linalg.norm(r.step_bohr.reshape(-1, 3), axis=1).max() for r in result.history]
    assert max(moves) <= 0.3 + 1e-9
    assert max(moves) > 0.29  # the cap, not the trust radius, limited some step


def test_penalty_weight_growth_rescales_the_curvature_along_the_gap_direction():
    # the curvature of F along x1 is about sigma G''(dE) |x1|^2: after sigma grows by a factor
    # f, H keeps everything but that curvature, which grows by f (before: a reset to the
    # model Hessian, and the first step after it was rejected)
    obj = PenaltyObjective(conical_model(), ("S1", "S2"), PenaltySettings(gap_tol_eh=1e-4))
    value = obj.evaluate(model_geometry(np.array([0.05, -0.1, 0.2, 0.03, -0.07, 0.11])))
    obj.accept(value)
    old_sigma = obj.sigma
    assert obj.after_convergence(value)  # gap above the tolerance: sigma grows
    factor = obj.sigma / old_sigma
    rng = np.random.default_rng(4)
    A = rng.standard_normal((6, 6))
    H = A @ A.T + 6 * np.eye(6)
    H2 = obj.adjust_hessian(H, lambda v: np.asarray(v).ravel())
    u = obj.accepted_pair.x1 / np.linalg.norm(obj.accepted_pair.x1)
    assert u @ H2 @ u == pytest.approx(factor * (u @ H @ u), rel=1e-10)
    w = rng.standard_normal(6)
    w -= (w @ u) * u
    assert w @ H2 @ w == pytest.approx(w @ H @ w, rel=1e-10)


def test_high_spin_triplet_pairs_only_with_the_ground_state():
    # a response singlet S_n against a separately optimized high-spin determinant compares
    # states with orbital relaxation on one side only; S0/T1 (both SCF states) is fine
    import surfcross as sc
    from surfcross.tasks.crossing import check_high_spin_pair
    from surfcross.states import parse_states

    spec = MethodSpec(method="cis", basis="sto-3g", triplets="high-spin")
    check_high_spin_pair(parse_states("S0,T1"), spec)
    with pytest.raises(InputError, match="--triplets response"):
        sc.find_crossing(Geometry.from_angstrom(["H", "H"], [[0, 0, 0], [0, 0, 0.74]]),
                         "S1,T1", spec, progress=False)
    check_high_spin_pair(parse_states("S1,T1"), MethodSpec(method="cis", basis="sto-3g"))


def test_scan_never_continues_from_a_failed_point(monkeypatch):
    import importlib

    from surfcross.data import example_geometry

    scan_module = importlib.import_module("surfcross.workflows.scan")

    water = example_geometry("water")
    starts, labels_seen = [], []

    def fake_point(mode, guess, labels, spec, options, run_dir, progress, engine):
        starts.append(guess)
        labels_seen.append([str(x) for x in labels])
        ok = len(starts) != 2  # the second point fails
        bent = guess.coords_bohr.copy()
        bent[1] *= 1.0 if ok else 1.8  # the failed point ends with one bond much too long
        final = guess.with_coords(bent)
        ev = SimpleNamespace(energies=lambda: {"S0": -1.0, "S2": -0.5, "S3": -0.5},
                             energy=lambda r: -0.5, geometry=final)
        value = SimpleNamespace(info={"roots": ["S2", "S3"] if ok else ["S3", "S4"]})
        return SimpleNamespace(converged=ok, geometry=final, evaluation=ev, iterations=3,
                               evaluations=4, message="" if ok else "failed",
                               optimization=SimpleNamespace(value=value), run_dir=None,
                               warnings=(), status="converged" if ok else "failed",
                               energies_eh={}, gap_ev=None, data={})

    monkeypatch.setattr(scan_module, "_point", fake_point)
    monkeypatch.setattr(scan_module, "_handed_on", lambda e, p, labels, g: (labels, None))
    engine = SimpleNamespace(forgotten=0)
    engine.forget_guess = lambda: setattr(engine, "forgotten", engine.forgotten + 1)
    rows, _ = scan_module._minimized("seam", water, [], MethodSpec(method="cis"), (1, 0, 2),
                                     [100.0, 105.0, 110.0],
                                     scan_module.RunOptions(), None, False, engine, ())
    # the third point starts near the first point's result, not the failed second one
    third, first = starts[2], starts[0]
    assert np.abs(third.distance_matrix_bohr() - first.distance_matrix_bohr()).max() < 0.2
    assert rows[2]["started_from"] == "point 1"
    assert labels_seen[2] == ["S2", "S3"]
    assert engine.forgotten == 1


def test_command_line_refuses_a_high_spin_triplet_with_an_excited_singlet(tmp_path):
    import shutil
    import subprocess

    exe = shutil.which("surfcross")
    if exe is None:
        pytest.skip("surfcross command not installed")
    (tmp_path / "h2co.xyz").write_text("4\nformaldehyde\nC 0 0 0\nO 0 0 1.205\n"
                                       "H 0 0.94 -0.59\nH 0 -0.94 -0.59\n")
    out = subprocess.run([exe, "cross", "h2co.xyz", "--states", "S1,T1", "--triplets",
                          "high-spin", "--out", "run"], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120)
    assert out.returncode == 2  # bad input (README: exit codes)
    assert "--triplets response" in out.stderr and len(out.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "run").exists()  # no run folder for bad input
