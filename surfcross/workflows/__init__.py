"""Workflows: short compositions of the tasks layer that answer photophysical questions.

* :func:`emission` -- absorption, excited-state minimum, emission, adiabatic energy, Stokes
  shift and (optionally) the zero-point corrected 0-0 energy;
* :func:`pathway` -- all states along an interpolated path through given geometries, with
  adiabatic and overlap-connected (character-keeping) curves;
* :func:`scan` -- relaxed, seam or rigid scans of one bond, angle or dihedral.

Each takes (geometry or geometries, method, options..., run_dir) and returns a
:class:`~surfcross.tasks.TaskResult`, so the job runner (:mod:`surfcross.jobs.runner`) calls
them like the other tasks. Each writes one run directory; emission and minimized scans put
their stages in child folders (``RunDirectory.child``).
"""

from .emission import emission
from .path import pathway
from .scan import scan, scan_values

__all__ = ["emission", "pathway", "scan", "scan_values"]
