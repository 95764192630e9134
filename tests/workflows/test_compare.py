"""`recoilsim compare`: every method on one scenario, written side by side."""

import csv
import json

import numpy as np
import pytest

from sim import load_scenario, run
from sim.workflows.compare import COMPARED, compare_to_folder
from sim.errors import OutputExists

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
    assert {"perturbative", "markov"} <= set(summary["methods"])
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
    if "exact" not in summary["methods"]:
        pytest.skip("exact solver not available")
    header, values = read_csv(folder / "compare.csv")
    exact = values[:, header.index("exact")]
    for method, diff in summary["max_difference_from_exact"].items():
        assert diff == pytest.approx(np.max(np.abs(values[:, header.index(method)] - exact)),
                                     abs=1e-9)


def test_compare_refuses_a_full_folder_without_force(folder, make_scenario):
    with pytest.raises(OutputExists, match="--force"):
        compare_to_folder(load_scenario(make_scenario(COMPARE)), folder)
