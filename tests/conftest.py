"""Test-suite rules that every test module shares.

Markers (registered in pyproject.toml):

* ``pyscf`` -- the test runs PySCF (directly, through an engine, or through the ``surfcross``
  program in a subprocess). ``python -m pytest -m "not pyscf"`` is the contributor's quick loop:
  the PySCF-free tests, in seconds.
* ``slow`` -- the test takes more than about ten seconds on one core.

The guard below keeps the ``pyscf`` marker honest: a test without it that builds a PySCF
molecule (every PySCF calculation starts with ``Mole.build``) fails with a message saying which
marker to add. Importing PySCF's plain data tables (element data) is not running PySCF.
Calculations in subprocesses cannot be seen from here; modules that start the program mark
themselves.
"""

from __future__ import annotations

import pytest

_BUILDS = [0]


def pytest_sessionstart(session):
    """Count every Mole.build of the session (PySCF is imported here for that)."""
    from pyscf import gto

    original = gto.Mole.build

    def counted(self, *args, **kwargs):
        _BUILDS[0] += 1
        return original(self, *args, **kwargs)

    gto.Mole.build = counted


@pytest.fixture(autouse=True)
def _pyscf_marker_guard(request):
    builds = _BUILDS[0]
    yield
    if request.node.get_closest_marker("pyscf") is None and _BUILDS[0] != builds:
        pytest.fail("this test runs PySCF: mark it (or its module) with pytest.mark.pyscf",
                    pytrace=False)
