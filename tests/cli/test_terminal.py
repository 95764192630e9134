"""A terminal that informs: the compare table, the --check verdict, quiet when piped."""

import json

import pytest

from sim.cli import main

#: invented numbers: a light 1D detector, weak coupling, a short exact run
SMALL = dict(title="terminal test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
             field__mass=0.1, strength=0.1, width=10.0, momentum=0.2, method="exact",
             t_max=100.0, samples=11)


def test_compare_prints_a_table_and_the_reason_of_each_skipped_method(make_scenario,
                                                                     write_scenario, tmp_path,
                                                                     capsys):
    path = write_scenario(make_scenario(SMALL))
    assert main(["compare", str(path), "--out", str(tmp_path / "c")]) == 0
    captured = capsys.readouterr()
    lines = captured.out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.split()[:1] == ["method"])
    assert "fitted rate" in lines[header] and "vs exact" in lines[header]
    summary = json.loads((tmp_path / "c" / "summary.json").read_text())
    table = {line.split()[0]: line for line in lines[header + 1:header + 1 + len(summary["methods"])]}
    assert list(table) == summary["methods"]
    for method in summary["methods"]:
        assert f"{summary['rate_fitted'][method]:.4g}" in table[method]
        if method != "exact":
            assert f"{summary['max_difference_from_exact'][method]:.3g}" in table[method]
    assert captured.err == ""  # piped: no status lines, no progress bars


def test_compare_budget_skips_with_the_estimate_on_the_terminal(make_scenario, write_scenario,
                                                               tmp_path, capsys, monkeypatch):
    import dataclasses

    import sim.workflows.compare as compare

    real = compare.solver_for

    def slow_fock(scenario, method=None, **options):  # a known estimate for one method
        solver = real(scenario, method, **options)
        if method == "fock":
            estimate = dataclasses.replace(solver.estimate(), seconds=1e4)
            solver.estimate = lambda: estimate
        return solver

    monkeypatch.setattr(compare, "solver_for", slow_fock)
    path = write_scenario(make_scenario(SMALL))
    assert main(["compare", str(path), "--out", str(tmp_path / "c"), "--budget", "60"]) == 0
    out = capsys.readouterr().out
    assert "fock         skipped: estimated 1e+04 s, over the budget of 60 s" in out


@pytest.mark.parametrize("tolerance, verdict", [
    ("0.5", "converged"),
    pytest.param("1e-12", "not converged", marks=pytest.mark.slow)])  # a second --check run
def test_check_prints_the_changes_and_a_verdict_against_the_tolerance(make_scenario,
                                                                     write_scenario, tmp_path,
                                                                     capsys, tolerance, verdict):
    path = write_scenario(make_scenario(SMALL))
    assert main(["run", str(path), "--out", str(tmp_path / "r"), "--check",
                 "--check-tolerance", tolerance]) == 0
    out = capsys.readouterr().out
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    check = summary["convergence"]
    assert check["verdict"] == verdict and check["tolerance"] == float(tolerance)
    assert f"largest change of P_e on refinement {check['max_change_excited']:.3g}" in out
    assert f": {verdict} (tolerance {float(tolerance):.3g})" in out


def test_bad_tolerance_and_budget_are_refused_in_one_line(make_scenario, write_scenario, tmp_path,
                                                          capsys):
    path = write_scenario(make_scenario(SMALL))
    for argv in (["run", str(path), "--out", str(tmp_path / "r"), "--check-tolerance", "-1"],
                 ["compare", str(path), "--out", str(tmp_path / "c"), "--budget", "nan"]):
        with pytest.raises(SystemExit) as info:
            main(argv)
        assert info.value.code == 2
        assert "expected a positive" in capsys.readouterr().err
    assert not (tmp_path / "r").exists() and not (tmp_path / "c").exists()


@pytest.mark.parametrize("argv", [["rates", "{path}"], ["run", "{path}", "--dry-run"],
                                  ["run", "{path}", "--out", "{out}"]])
def test_quiet_keeps_stderr_empty(make_scenario, write_scenario, tmp_path, capsys, argv):
    path = write_scenario(make_scenario(SMALL, method="perturbative"))
    argv = [a.format(path=path, out=tmp_path / "o") for a in argv] + ["--quiet"]
    assert main(argv) == 0
    assert capsys.readouterr().err == ""
