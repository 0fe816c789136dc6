"""Optimizer and convergence settings: defaults, presets, validation."""

import dataclasses

import pytest

from surfcross.errors import InputError
from surfcross.optimize import ConvergenceSettings, OptimizerSettings


def test_normal_preset_is_the_common_practice_set():
    # Widely used thresholds for minima (common practice, no single published source).
    c = ConvergenceSettings.preset("normal")
    assert (c.max_force, c.rms_force, c.max_step, c.rms_step, c.energy_change) == (
        4.5e-4, 3.0e-4, 1.8e-3, 1.2e-3, 1e-6)
    assert ConvergenceSettings() == c


def test_presets_are_ordered():
    loose, normal, tight = (ConvergenceSettings.preset(n) for n in ("loose", "normal", "tight"))
    for f in dataclasses.fields(ConvergenceSettings):
        assert getattr(loose, f.name) > getattr(normal, f.name) > getattr(tight, f.name)


def test_overrides_and_unknown_names():
    c = ConvergenceSettings.preset("normal").with_overrides(max_force=1e-5, energy_change=None)
    assert c.max_force == 1e-5 and c.energy_change is None and c.rms_force == 3.0e-4
    with pytest.raises(InputError, match="max_force, rms_force"):
        ConvergenceSettings.preset().with_overrides(max_gradient=1e-4)
    with pytest.raises(InputError, match="loose, normal, tight"):
        ConvergenceSettings.preset("sloppy")
    with pytest.raises(InputError, match="force threshold"):
        ConvergenceSettings(max_force=None, rms_force=None)
    with pytest.raises(InputError, match="> 0"):
        ConvergenceSettings(max_step=-1.0)


def test_optimizer_defaults():
    s = OptimizerSettings()
    assert (s.max_iterations, s.trust_radius, s.trust_min, s.trust_max) == (100, 0.3, 1e-3, 1.0)
    assert (s.hessian_update, s.curvature_policy, s.initial_hessian) == ("bfgs", "damp", "model")
    with pytest.raises(TypeError):
        OptimizerSettings(100)  # keyword-only
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.trust_radius = 0.5


@pytest.mark.parametrize("kwargs, message", [
    (dict(hessian_update="dfp"), "bfgs, sr1, psb, bofill"),
    (dict(curvature_policy="ignore"), "damp, skip"),
    (dict(initial_hessian="exact"), "model, diagonal"),
    (dict(trust_radius=2.0), "trust_min <= trust_radius <= trust_max"),
    (dict(trust_min=0.0), "> 0"),
    (dict(max_iterations=-1), "max_iterations"),
    (dict(max_iterations=2.5), "max_iterations"),
    (dict(min_curvature=1.0, max_curvature=0.5), "below max_curvature"),
    (dict(max_atom_step=0.0), "max_atom_step"),
    (dict(diagonal_curvature="soft"), "number"),
])
def test_bad_optimizer_settings(kwargs, message):
    with pytest.raises(InputError, match=message):
        OptimizerSettings(**kwargs)


def test_optimizer_overrides_validate():
    s = OptimizerSettings().with_overrides(hessian_update="SR1", trust_radius=0.1)
    assert s.hessian_update == "sr1" and s.trust_radius == 0.1
    with pytest.raises(InputError, match="valid options are"):
        OptimizerSettings().with_overrides(step_size=0.1)
