"""The optimizer: one quasi-Newton loop (RFO steps, trust radius, Hessian updates) with
pluggable pieces, and the records it produces. See :mod:`surfcross.optimize.loop` for the
step-acceptance rules."""

from .convergence import all_passed, evaluate_criteria
from .loop import Observer, Optimizer
from .records import OptimizationResult, Status, StepRecord
from .settings import ConvergenceSettings, OptimizerSettings
from .steps import StepProposal, quadratic_change, rfo_step, working_hessian
from .trust import judge_composed_step, judge_true_step, shrink_radius, trust_ratio
from .updates import (BFGSUpdate, BofillUpdate, HessianUpdate, PSBUpdate, SR1Update,
                      clamp_eigenvalues, make_update, powell_damped)

__all__ = [
    "Optimizer", "Observer", "OptimizationResult", "Status", "StepRecord",
    "OptimizerSettings", "ConvergenceSettings", "all_passed", "evaluate_criteria",
    "StepProposal", "rfo_step", "quadratic_change", "working_hessian",
    "judge_true_step", "judge_composed_step", "shrink_radius", "trust_ratio",
    "HessianUpdate", "BFGSUpdate", "SR1Update", "PSBUpdate", "BofillUpdate", "make_update",
    "powell_damped", "clamp_eigenvalues",
]
