"""Analytic model surfaces for tests and examples (no quantum chemistry needed)."""

from .surfaces import (SURFACES, AnalyticObjective, SpringNetwork, Surface, quadratic,
                       quartic_bowl, rosenbrock)
from . import crossings  # model crossings with known answers (see crossings.py)

__all__ = ["SURFACES", "AnalyticObjective", "SpringNetwork", "Surface", "quadratic",
           "quartic_bowl", "rosenbrock"]
