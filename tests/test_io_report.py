"""report.md content and the optional plots (with and without matplotlib).

Result dicts here are synthetic (our own scenario). PNG files are recognised by the 8-byte
signature fixed by the PNG standard (ISO/IEC 15948, section 5.2).
"""

import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from test_io_checkpoint import TASK, WATER, make_record  # noqa: E402

from surfcross.engine.base import MethodSpec  # noqa: E402
from surfcross.io import plots  # noqa: E402
from surfcross.io.report import CAUTION, method_limits, reference_label, render_report  # noqa: E402
from surfcross.io.run import RunDirectory  # noqa: E402
from surfcross.objectives.base import Criterion  # noqa: E402
from surfcross.units import HARTREE_IN_EV  # noqa: E402

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _result(**changes):
    out = {"task": "cross", "converged": False, "iterations": 12, "evaluations": 15,
           "states": ["S1", "S2"], "energies_eh": {"S1": -74.7, "S2": -74.69},
           "adiabatic_energies_eh": {"S0": -75.0, "S1": -74.7, "S2": -74.69},
           "followed_roots": {"S1": "S1", "S2": "S2"}, "gap_eh": 0.01,
           "gap_ev": 0.01 * HARTREE_IN_EV, "method": MethodSpec(method="tda").to_dict(),
           "search": "penalty", "warnings": ["low overlap at step 4"], "final_xyz": "final.xyz"}
    out.update(changes)
    return out


def test_report_sections():
    crit = [Criterion("max force", 2e-3, 4.5e-4, "Eh/bohr"), Criterion("gap", 5e-4, 1e-3, "Eh")]
    text = render_report(_result(), criteria=crit,
                         branching={"pitch": 0.051, "asymmetry": 0.3, "topography": "peaked"},
                         reorderings=["step 4: S1 now root S2 (was S1)"],
                         sections=[("Extra", "one more thing")])
    assert "**NOT converged**" in text
    # convergence table: value, threshold, pass/fail per criterion
    assert "| max force | 2.000e-03 | 4.500e-04 | Eh/bohr | no |" in text
    assert "| gap | 5.000e-04 | 1.000e-03 | Eh | yes |" in text
    # energies above S0 in eV: (E - E_S0) * Eh-in-eV (CODATA via scipy, see test_units)
    assert f"{0.3 * HARTREE_IN_EV:.4f}" in text and "| **S1** |" in text and "| S0 |" in text
    assert "| **S1** | -74.7000000000 |" in text
    assert f"{0.01 * HARTREE_IN_EV:.5f} eV" in text
    assert "| pitch | 0.051 |" in text and "| topography | peaked |" in text
    assert "step 4: S1 now root S2" in text and "low overlap at step 4" in text
    assert "## Extra" in text and "one more thing" in text
    assert "Crossing search: penalty" in text
    assert text.rstrip().endswith(CAUTION)
    assert "doubly excited" in text  # limits of linear response are stated


def test_report_names_the_followed_state_and_its_adiabatic_root():
    # our own scenario: S3 was followed and ends as the lowest singlet (adiabatic S1), with
    # another state (adiabatic S3 at the end) above it
    result = _result(task="relax", states=["S3"], energies_eh={"S3": -74.80},
                     adiabatic_energies_eh={"S0": -75.0, "S1": -74.80, "S2": -74.75,
                                            "S3": -74.70},
                     followed_roots={"S3": "S1"}, gap_eh=None, gap_ev=None)
    text = render_report(result)
    followed = f"| **S3** | -74.8000000000 | {0.2 * HARTREE_IN_EV:.4f} | S1 |"
    assert followed in text
    # the adiabatic table marks the root that carries S3, and the other S3 is not bold
    assert f"| **S1** | -74.8000000000 | {0.2 * HARTREE_IN_EV:.4f} | S3 |" in text
    assert f"| S3 | -74.7000000000 | {0.3 * HARTREE_IN_EV:.4f} | - |" in text
    assert "| **S3** | -74.7" not in text


def test_limits_depend_on_the_states():
    tda = MethodSpec(method="tda").to_dict()
    # the reference/response seam dimensionality problem (common knowledge of the field,
    # e.g. the CIS Brillouin-theorem argument): warned only when S0 is in the pair
    assert any("wrong dimensionality" in s for s in method_limits(tda, ["S0", "S1"]))
    assert not any("wrong dimensionality" in s for s in method_limits(tda, ["S1", "S2"]))
    assert any("minimal basis" in s for s in method_limits(tda, ["S1"]))
    assert not any("minimal basis" in s for s in method_limits({**tda, "basis": "6-31g*"}, ["S1"]))
    assert any("Tamm-Dancoff" in s for s in method_limits({"method": "tddft", "xc": "b3lyp"}, ["S1"]))
    assert reference_label({"S1": -1.0, "S0": -2.0}) == "S0"
    assert reference_label({"T1": -1.0, "S1": -0.5}) == "T1"


def test_report_without_optional_parts():
    text = render_report(_result(gap_ev=None, gap_eh=None, search=None, warnings=[],
                                 converged=True, states=["S1"]))
    assert "Branching" not in text and "Gap between" not in text
    assert "No convergence tests" in text and "No followed state changed" in text


def _history():
    recs = [make_record(i, shift=0.01 * i) for i in range(4)]
    return {
        "iteration": np.array([r.iteration for r in recs]), "accepted": np.ones(4, bool),
        "state_energies_eh": np.array([[*r.value.evaluation.energies().values()] for r in recs]),
        "gap_eh": np.array([0.02, 0.01, 0.005, 0.001]),
    }


@pytest.fixture
def no_matplotlib(monkeypatch):
    # make every 'import matplotlib...' fail, as on a machine without the extra
    for name in list(sys.modules):
        if name == "matplotlib" or name.startswith("matplotlib."):
            monkeypatch.delitem(sys.modules, name)
    for name in ("matplotlib", "matplotlib.figure", "matplotlib.backends",
                 "matplotlib.backends.backend_agg"):
        monkeypatch.setitem(sys.modules, name, None)


def test_plots_with_matplotlib(tmp_path):
    pytest.importorskip("matplotlib")
    made = plots.history_plots(tmp_path, _history(), ["S0", "S1", "S2"], ["S1"])
    assert sorted(p.name for p in made) == ["energies.png", "gap.png"]
    out = plots.plot_profile(tmp_path / "profile.png", [0, 1, 2], {"S0": [0, 1, 2], "S1": [3, 2, 3]},
                             xlabel="point")
    for path in made + [out]:
        assert path.read_bytes()[:8] == PNG_SIGNATURE and path.stat().st_size > 1000


def test_plots_without_matplotlib(tmp_path, no_matplotlib):
    assert not plots.have_matplotlib()
    assert plots.history_plots(tmp_path, _history(), ["S0", "S1", "S2"]) == []
    assert plots.plot_gap(tmp_path / "g.png", [0, 1], [0.1, 0.2]) is None
    assert plots.plot_profile(tmp_path / "p.png", [0], {"S0": [0.0]}) is None
    assert not list(tmp_path.iterdir())


def _finished_run(tmp_path, profile=None):
    run = RunDirectory.create(tmp_path / "r")
    run.save_task(TASK)
    for i in range(3):
        for obs in run.observers(progress=False):
            obs(make_record(i, shift=0.01 * i))
    run.finish(_result(task="relax", states=["S1"], gap_ev=None, gap_eh=None, search=None),
               WATER, profile=profile)
    return run


def test_finish_makes_plots(tmp_path):
    pytest.importorskip("matplotlib")
    run = _finished_run(tmp_path, profile={"x": [0, 1], "curves_ev": {"S1": [1.0, 2.0]}})
    assert (run.path / "energies.png").read_bytes()[:8] == PNG_SIGNATURE
    assert (run.path / "profile.png").exists() and not (run.path / "gap.png").exists()
    assert "![energies.png](energies.png)" in run.report_md.read_text()


def test_finish_without_matplotlib_notes_it(tmp_path, no_matplotlib):
    run = _finished_run(tmp_path)
    assert not list(run.path.glob("*.png"))
    assert plots.NO_PLOTS_NOTE in run.report_md.read_text()
    assert run.result_json.exists()
