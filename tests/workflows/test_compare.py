"""`recoilsim compare`: every method on one scenario, written side by side."""

import csv
import json

import numpy as np
import pytest

from sim import load_scenario, run
from sim.workflows.compare import COMPARED, compare_to_folder
from sim.errors import OutputExists, ScenarioError

#: the compared scenario as `make_scenario` keywords (invented numbers)
COMPARE = dict(title=None, model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
               field__mass=0.1, strength=0.1, width=10.0, momentum=0.2, method="markov",
               t_max=300.0, samples=31)


@pytest.fixture(scope="module")
def folder(tmp_path_factory, make_scenario):
    out = tmp_path_factory.mktemp("cmp") / "out"
    compare_to_folder(load_scenario(make_scenario(COMPARE)), out)
    return out


def read_csv(path):
    with open(path, newline="") as handle:
        rows = list(csv.reader(handle))
    return rows[0], np.array(rows[1:], dtype=float)


def test_compare_writes_one_column_per_method_run(folder):
    header, values = read_csv(folder / "compare.csv")
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["simulated"] is True
    assert header == ["t", *summary["methods"]]
    assert set(summary["methods"]) | set(summary["skipped"]) == set(COMPARED)
    assert (folder / "compare.png").stat().st_size > 0
    assert values[0, 1:] == pytest.approx(1.0)  # every method starts excited


def test_compare_columns_are_the_methods_own_runs(folder, make_scenario):
    header, values = read_csv(folder / "compare.csv")
    direct = run(load_scenario(make_scenario(COMPARE)), method="markov")
    column = values[:, header.index("markov")]
    assert np.max(np.abs(column - direct.excited)) < 1e-10  # csv keeps 12 significant digits
    assert values[:, 0] == pytest.approx(direct.times)


def test_compare_differences_are_taken_from_exact(folder):
    summary = json.loads((folder / "summary.json").read_text())
    assert "exact" in summary["methods"], summary["skipped"]  # exact never refuses this scenario
    header, values = read_csv(folder / "compare.csv")
    exact = values[:, header.index("exact")]
    for method, diff in summary["max_difference_from_exact"].items():
        assert diff == pytest.approx(np.max(np.abs(values[:, header.index(method)] - exact)),
                                     abs=1e-9)


def test_no_method_is_skipped_on_a_scenario_every_method_takes(folder):
    # a 1D vacuum scenario within fock's truncation limits: all four methods must run, so a
    # refusal of any of them (fock included) fails here instead of being reported as skipped
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["skipped"] == {}
    assert summary["methods"] == list(COMPARED)


@pytest.mark.parametrize("method", COMPARED)
def test_a_refusing_method_is_skipped_with_its_reason_and_the_rest_run(make_scenario, tmp_path,
                                                                       monkeypatch, method):
    # a refusal (ScenarioError) injected into one method's set-up: that method is skipped with
    # the refusal's own words, before anything runs, and every other method runs
    import sim.workflows.compare as compare

    real_solver_for, refused = compare.solver_for, method

    def refusing_solver_for(scenario, method=None, **options):
        if method == refused:
            raise ScenarioError(f"{method} refuses this scenario (injected)")
        return real_solver_for(scenario, method, **options)

    monkeypatch.setattr(compare, "solver_for", refusing_solver_for)
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))  # a shorter run
    compare_to_folder(s, tmp_path / "out")
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["skipped"] == {method: "does not accept this scenario: "
                                          f"{method} refuses this scenario (injected)"}
    assert summary["methods"] == [m for m in COMPARED if m != method]
    assert summary["failed"] == {}


@pytest.mark.parametrize("method", COMPARED)
def test_a_method_failing_while_running_is_that_methods_failure(make_scenario, tmp_path,
                                                                monkeypatch, method):
    # an integrator-style error injected into one method's run: reported under "failed" with
    # its type and message; the other methods' curves are still written
    import sim.workflows.compare as compare

    real_result_of, failing = compare.result_of, method

    def failing_result_of(solver, *args):
        if solver.name == failing:
            raise RuntimeError("integrator gave up (injected)")
        return real_result_of(solver, *args)

    monkeypatch.setattr(compare, "result_of", failing_result_of)
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))
    comparison = compare_to_folder(s, tmp_path / "out")
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["failed"] == {method: "failed: RuntimeError: integrator gave up (injected)"}
    assert summary["methods"] == [m for m in COMPARED if m != method] == list(comparison.results)
    header, _ = read_csv(tmp_path / "out" / "compare.csv")
    assert header == ["t", *summary["methods"]]


def test_a_method_over_the_time_budget_is_skipped_before_it_runs(make_scenario, tmp_path,
                                                                 monkeypatch):
    # every estimate is given a known wall time: the methods above the budget are skipped with
    # their estimate and the key to lower, and never run
    import dataclasses

    import sim.workflows.compare as compare

    seconds = {"perturbative": 0.1, "markov": 50.0, "exact": 1.0, "fock": 5000.0}
    real_plan = compare.solver_for
    ran = []

    def sized_solver_for(scenario, method=None, **options):
        solver = real_plan(scenario, method, **options)
        estimate = dataclasses.replace(solver.estimate(), seconds=seconds[method])
        solver.estimate = lambda: estimate
        real_run = solver.run
        solver.run = lambda: (ran.append(method), real_run())[1]
        return solver

    monkeypatch.setattr(compare, "solver_for", sized_solver_for)
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))
    compare_to_folder(s, tmp_path / "out", budget=10.0)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert set(summary["skipped"]) == {"markov", "fock"} and not {"markov", "fock"} & set(ran)
    assert summary["skipped"]["fock"].startswith("estimated 5e+03 s, over the budget of 10 s")
    assert "raise --budget" in summary["skipped"]["markov"]
    assert summary["estimates"]["fock"]["seconds"] == 5000.0
    assert summary["methods"] == ran == ["perturbative", "exact"]


def test_compare_fails_only_when_no_method_gives_a_result(make_scenario, tmp_path, monkeypatch):
    import sim.workflows.compare as compare

    def refusing(scenario, method=None, **options):
        raise ScenarioError(f"{method} refuses (injected)")

    monkeypatch.setattr(compare, "solver_for", refusing)
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))
    with pytest.raises(ScenarioError, match="exact refuses") as info:
        compare_to_folder(s, tmp_path / "out")
    assert len(info.value.problems) == len(COMPARED)
    assert not (tmp_path / "out").exists()


def test_compare_refuses_a_full_folder_without_force(folder, make_scenario):
    with pytest.raises(OutputExists, match="--force"):
        compare_to_folder(load_scenario(make_scenario(COMPARE)), folder)


def test_compare_checks_the_fock_truncation_and_records_the_verdict(make_scenario, tmp_path):
    # fock keeps fewer modes than its box holds: compare runs its convergence check (more modes)
    # within the budget and records the verdict; the figure and the table follow it
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))
    compare_to_folder(s, tmp_path / "out")
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    record = summary["truncation"]["fock"]
    assert record["kept"] < record["of"] and record["key"] == "bath.fock_modes"
    checks = {c["key"]: c for c in record["convergence"]["checks"]}
    assert checks["bath.fock_modes"]["values"][1] > checks["bath.fock_modes"]["values"][0]
    assert record["converged"] is (record["convergence"]["verdict"] == "converged")
    assert "exact" not in summary["truncation"]
