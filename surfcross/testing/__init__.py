"""Analytic model surfaces for tests and examples (no quantum chemistry needed)."""

from .surfaces import (SURFACES, AnalyticObjective, SpringNetwork, Surface, quadratic,
                       quartic_bowl, rosenbrock)

__all__ = ["SURFACES", "AnalyticObjective", "SpringNetwork", "Surface", "quadratic",
           "quartic_bowl", "rosenbrock"]
