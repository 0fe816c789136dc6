"""Trust-radius control and step acceptance. Pure functions returning new values.

True objectives (the gradient is the derivative of the value)
    ratio = actual change / predicted change, where the prediction is the quadratic model
    g.s + s.H.s/2 of the step actually taken (standard trust-region logic; e.g. Nocedal &
    Wright, Numerical Optimization, ch. 4, recalled from memory):

    * ratio < 0.25: tau <- max(min(tau, |s|) / 4, tau_min)
    * ratio > 0.75 and |s| >= 0.9 tau: tau <- min(2 tau, tau_max)
    * otherwise tau is kept.

    A trial is rejected (and retried from the old point with the shrunk radius) when the value
    rose by more than ``energy_rise_tolerance`` (ratio < 0 up to that tolerance) or when the
    objective asked for it (``reject_step``). Shrinking from min(tau, |s|) rather than tau makes
    sure the retried step is really shorter when the rejected step lay inside the region.

Composed objectives (no scalar whose gradient is the working gradient)
    No ratio exists. A trial is rejected when its merit rose by more than
    ``merit_rise_tolerance`` or the objective asked for it; then
    tau <- max(min(tau, |s|) / 4, tau_min). After ``grow_after`` consecutive accepted steps
    at the boundary (|s| >= 0.9 tau) tau doubles (up to tau_max).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["TrustDecision", "trust_ratio", "judge_true_step", "judge_composed_step",
           "shrink_radius"]

SHRINK_BELOW = 0.25
GROW_ABOVE = 0.75
BOUNDARY = 0.9


@dataclass(frozen=True, kw_only=True)
class TrustDecision:
    """Outcome of judging one trial step."""

    accept: bool
    trust_radius: float
    good_streak: int
    reason: str


def trust_ratio(actual: float, predicted: float) -> float:
    """actual / predicted change (a vanishing prediction counts as 1 unless the value rose)."""
    if predicted == 0.0:
        return 1.0 if abs(actual) < 1e-14 else (-1.0 if actual > 0 else 1.0)
    return actual / predicted


def shrink_radius(radius: float, step_length: float, trust_min: float) -> float:
    """max(min(radius, |s|) / 4, trust_min)."""
    return max(min(radius, step_length) / 4.0, trust_min)


def judge_true_step(*, actual: float, predicted: float, step_length: float, radius: float,
                    trust_min: float, trust_max: float, rise_tolerance: float,
                    objective_rejects: bool = False) -> TrustDecision:
    """Accept/reject and the new radius for an objective with an exact gradient."""
    ratio = trust_ratio(actual, predicted)
    if objective_rejects:
        return TrustDecision(accept=False, trust_radius=shrink_radius(radius, step_length, trust_min),
                             good_streak=0, reason="objective rejected the trial geometry")
    if actual > rise_tolerance:
        return TrustDecision(accept=False, trust_radius=shrink_radius(radius, step_length, trust_min),
                             good_streak=0,
                             reason=f"value rose by {actual:.3e} Eh (ratio {ratio:.2f})")
    new = radius
    if ratio < SHRINK_BELOW:
        new = shrink_radius(radius, step_length, trust_min)
    elif ratio > GROW_ABOVE and step_length >= BOUNDARY * radius:
        new = min(2.0 * radius, trust_max)
    return TrustDecision(accept=True, trust_radius=new, good_streak=0, reason=f"ratio {ratio:.2f}")


def judge_composed_step(*, merit_change: float, step_length: float, radius: float,
                        good_streak: int, grow_after: int, trust_min: float, trust_max: float,
                        rise_tolerance: float, objective_rejects: bool = False) -> TrustDecision:
    """Accept/reject and the new radius for a composed (non-gradient) objective."""
    if objective_rejects or merit_change > rise_tolerance:
        reason = ("objective rejected the trial geometry" if objective_rejects
                  else f"merit rose by {merit_change:.3e} Eh")
        return TrustDecision(accept=False, trust_radius=shrink_radius(radius, step_length, trust_min),
                             good_streak=0, reason=reason)
    streak = good_streak + 1 if step_length >= BOUNDARY * radius else 0
    new = radius
    if streak >= grow_after:
        new = min(2.0 * radius, trust_max)
        streak = 0
    return TrustDecision(accept=True, trust_radius=new, good_streak=streak,
                         reason=f"merit change {merit_change:.3e} Eh")
