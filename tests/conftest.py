"""Test-suite rules that every test module shares.

Markers (registered in pyproject.toml):

* ``pyscf`` -- the test runs PySCF (directly, through an engine, or through the ``surfcross``
  program in a subprocess). ``python -m pytest -m "not pyscf"`` is the contributor's quick loop:
  the PySCF-free tests, in seconds.
* ``slow`` -- the test takes more than about ten seconds on one core.

The guard below keeps the ``pyscf`` marker honest: a test without it that builds a PySCF
molecule (every PySCF calculation starts with ``Mole.build``) or imports PySCF fails with a
message saying which marker to add. Calculations in subprocesses cannot be seen from here;
modules that start the program mark themselves.
"""

from __future__ import annotations

import sys

import pytest

_BUILDS = [0]
_PATCHED = [False]


def _patch_mole_build() -> None:
    """Count Mole.build calls once PySCF has been imported by someone (never import it here:
    the quick loop must not pay for it)."""
    if _PATCHED[0] or "pyscf.gto" not in sys.modules:
        return
    from pyscf import gto

    original = gto.Mole.build

    def counted(self, *args, **kwargs):
        _BUILDS[0] += 1
        return original(self, *args, **kwargs)

    gto.Mole.build = counted
    _PATCHED[0] = True


@pytest.fixture(autouse=True)
def _pyscf_marker_guard(request):
    _patch_mole_build()
    imported = "pyscf" in sys.modules
    builds = _BUILDS[0]
    yield
    marked = request.node.get_closest_marker("pyscf") is not None
    if marked:
        return
    if not imported and "pyscf" in sys.modules:
        pytest.fail("this test imports PySCF: mark it (or its module) with pytest.mark.pyscf",
                    pytrace=False)
    if _BUILDS[0] != builds:
        pytest.fail("this test runs PySCF: mark it (or its module) with pytest.mark.pyscf",
                    pytrace=False)
