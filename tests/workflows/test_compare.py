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
def test_only_a_fock_refusal_is_reported_as_skipped(make_scenario, tmp_path, monkeypatch,
                                                   method):
    # a refusal (ScenarioError) injected into one method's run: fock is then skipped with the
    # refusal's own reason while every other method runs; a refusal by any other method must
    # reach the caller, with no folder written.  (Every real fock refusal, a thermal field, is
    # refused by exact too, and a rotating-wave scenario keeps fock's Fock space small, so the
    # refusal is injected.)
    import sim.workflows.compare as compare

    real_run, refused = compare.run, method

    def refusing_run(scenario, method=None, **options):
        if method == refused:
            raise ScenarioError(f"{method} refuses this scenario (injected)")
        return real_run(scenario, method=method, **options)

    monkeypatch.setattr(compare, "run", refusing_run)
    s = load_scenario(make_scenario(COMPARE, t_max=100.0, samples=11))  # a shorter run
    if method == "fock":
        summary = json.loads((compare_to_folder(s, tmp_path / "out") / "summary.json").read_text())
        assert summary["skipped"] == {"fock": "does not accept this scenario: fock refuses this "
                                              "scenario (injected)"}
        assert summary["methods"] == [m for m in COMPARED if m != "fock"]
    else:
        with pytest.raises(ScenarioError, match="injected"):
            compare_to_folder(s, tmp_path / "out")
        assert not (tmp_path / "out").exists()


def test_compare_refuses_a_full_folder_without_force(folder, make_scenario):
    with pytest.raises(OutputExists, match="--force"):
        compare_to_folder(load_scenario(make_scenario(COMPARE)), folder)
