"""Smoke test of the benchmark runner on the analytic model surfaces (a few seconds).

Keeps benchmarks/run.py from rotting: the runner must run end to end, write its JSON, print
the table, and the crossings it reports must be the known ones. No timing is asserted.
"""

import importlib
import importlib.util
import json
import sys
from pathlib import Path

import pytest

from surfcross.testing.crossings import conical_case, spin_case

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


@pytest.fixture(scope="module")
def outcome(tmp_path_factory):
    spec = importlib.util.spec_from_file_location("surfcross_benchmark_runner", BENCH / "run.py")
    runner = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(runner)  # puts benchmarks/ on sys.path for its helper modules
    out = tmp_path_factory.mktemp("bench") / "models.json"
    code = runner.main(["--models-only", "--silent", "--json", str(out)])
    return code, json.loads(out.read_text())


def _rows(data):
    return {row["case"].split()[1]: row for row in data["crossings"]}


def test_runner_writes_every_search_for_both_models(outcome):
    code, data = outcome
    assert code == 0 and data["mode"] == "models"
    rows = _rows(data)
    assert set(rows) == {"conical", "spin"}
    for row in rows.values():
        assert set(row["runs"]) == {"auto", "penalty", "projected", "plain", "slsqp"}
        for run in row["runs"].values():
            assert run["evaluations"] is None or run["evaluations"] >= 1


@pytest.mark.parametrize("name,known", [("conical", conical_case()), ("spin", spin_case())])
def test_default_search_and_scipy_slsqp_reach_the_known_crossing(outcome, name, known):
    # known: closed-form seam minimum of the model (surfcross.engine.model, itself checked
    # against scipy SLSQP in test_crossing_models.py); here scipy's SLSQP, run by the
    # benchmark on the same surface, is the outside reference for the default search
    runs = _rows(outcome[1])[name]["runs"]
    auto, slsqp = runs["auto"], runs["slsqp"]
    assert auto["converged"] and slsqp["converged"]
    assert auto["gap_eh"] <= 1e-3 and slsqp["gap_eh"] <= 1e-3
    assert auto["mean_energy_eh"] == pytest.approx(known.crossing_energy_eh, abs=2e-4)
    assert slsqp["mean_energy_eh"] == pytest.approx(auto["mean_energy_eh"], abs=2e-4)
    assert auto["rmsd_to_auto_bohr"] == pytest.approx(0.0, abs=1e-12)
    assert slsqp["rmsd_to_auto_bohr"] < 5e-3


def test_target_ratios_follow_from_the_reported_counts(outcome):
    data = outcome[1]
    targets = data["targets"]
    num = den = 0
    for row in data["crossings"]:
        runs = row["runs"]
        if runs["auto"]["converged"] and runs["penalty"]["converged"]:
            num += runs["auto"]["evaluations"]
            den += runs["penalty"]["evaluations"]
    assert den > 0
    assert targets["crossing_vs_penalty"]["measured"] == pytest.approx(num / den)
    expected = "MET" if num / den <= 0.5 else "MISSED"
    assert targets["crossing_vs_penalty"]["verdict"] == expected
    # sections that need PySCF are not run in this mode and must say so, not invent numbers
    for key in ("minima_vs_pyberny", "overhead", "warm_start", "tracking"):
        assert targets[key]["verdict"] == "n/a" and targets[key]["measured"] is None


def test_table_is_rendered(outcome):
    text = importlib.import_module("bench_summary").render(outcome[1])
    assert "Crossing searches" in text and "Targets" in text
    assert ("MET" in text) or ("MISSED" in text)
