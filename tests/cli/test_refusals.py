"""Refusals and warnings that name their cause: the dominant size key, the dry-run verdict, and
the key that actually helps when a rate cannot be fitted."""

from __future__ import annotations

import dataclasses
import re
import tracemalloc

import pytest

from sim.cli import main
from sim.config.schema import SCHEMA

#: a small fast 1D galilean run of a heavy detector (invented numbers)
SMALL = dict(title="refusal test", model="galilean", ground_mass=10.0, gap=0.5, dims=1,
             strength=0.1, width=20.0, momentum=0.1, method="exact", t_max=300.0, samples=51)

METHODS = ["exact", "fock", "perturbative", "markov"]


def method_keys(method: str) -> dict:
    """make_scenario keywords that make `method` accept SMALL."""
    return {"field__mass": 0.05, **({"bath__fock_modes": 4} if method == "fock" else {})}


def one_line(text: str) -> str:
    lines = text.strip().splitlines()
    assert len(lines) == 1, lines
    return lines[0]


def test_dry_run_says_it_would_run_and_exits_0(make_scenario, write_scenario, capsys):
    path = write_scenario(make_scenario(SMALL, **method_keys("exact")))
    assert main(["run", str(path), "--dry-run"]) == 0
    line = one_line(capsys.readouterr().out)
    assert "would run" in line and "size set mostly by" in line, line


def tiny_memory(monkeypatch, nbytes: float = 50e6) -> None:
    """Pretend only `nbytes` of memory are available: to the guard and to the dry run."""
    import sim.solvers.base
    import sim.workflows.run

    for module in (sim.solvers.base, sim.workflows.run):
        monkeypatch.setattr(module, "available_memory", lambda: nbytes)


def test_dry_run_of_too_many_samples_says_refused_naming_run_samples(make_scenario,
                                                                    write_scenario, capsys,
                                                                    monkeypatch):
    tiny_memory(monkeypatch)
    path = write_scenario(make_scenario(SMALL, samples=1_000_000, **method_keys("exact")))
    assert main(["run", str(path), "--dry-run"]) == 2
    line = one_line(capsys.readouterr().out)
    assert "would be refused: run.samples = 1000000" in line, line
    assert "size set mostly by run.samples" in line, line


def test_memory_refusal_names_run_samples_first_with_its_value(make_scenario, write_scenario,
                                                               tmp_path, capsys, monkeypatch):
    tiny_memory(monkeypatch)
    path = write_scenario(make_scenario(SMALL, samples=1_000_000, **method_keys("exact")))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    line = one_line(capsys.readouterr().err)
    assert line.startswith("recoilsim: run.samples = 1000000: method 'exact'"), line
    # what to lower it to, then the other keys
    target = re.search(r"lower run\.samples to at most ([\d,]+) \(or lower bath\.", line)
    assert target, line
    assert 2 <= int(target.group(1).replace(",", "")) < 1_000_000, line
    assert not (tmp_path / "out").exists()


def test_the_suggested_sample_count_is_accepted(make_scenario, write_scenario, tmp_path, capsys,
                                                 monkeypatch):
    # the value the refusal suggests passes the same guard (a dry run says "would run")
    tiny_memory(monkeypatch)
    raw = make_scenario(SMALL, samples=1_000_000, **method_keys("exact"))
    assert main(["run", str(write_scenario(raw)), "--dry-run"]) == 2
    line = one_line(capsys.readouterr().out)
    suggested = int(re.search(r"lower run\.samples to at most ([\d,]+)", line).group(1)
                    .replace(",", ""))
    raw["run"]["samples"] = suggested
    assert main(["run", str(write_scenario(raw, "t.toml")), "--dry-run"]) == 0
    assert "would run" in one_line(capsys.readouterr().out)


@pytest.mark.parametrize("method", METHODS)
def test_a_trillion_samples_is_refused_without_running_out_of_memory(make_scenario,
                                                                     write_scenario, tmp_path,
                                                                     capsys, method):
    path = write_scenario(make_scenario(SMALL, method=method, samples=10**12,
                                        **method_keys(method)))
    for argv in (["run", str(path), "--dry-run"], ["run", str(path), "--out", str(tmp_path / "o")]):
        assert main(argv) == 2
        captured = capsys.readouterr()
        assert "ran out of memory" not in captured.err
        # refused at load (an upper bound on run.samples) or by the memory guard
        assert "run.samples = 1000000000000" in captured.out + captured.err, captured


@pytest.mark.parametrize("method", METHODS)
def test_estimate_allocates_nothing_in_proportion_to_the_samples(make_scenario, method):
    from sim.physics.checks import load_scenario
    from sim.solvers import solver_for
    from sim.solvers.base import refusal

    scenario = load_scenario(make_scenario(SMALL, method=method, **method_keys(method)))
    # past any load-time bound, as a caller from Python could build it
    scenario = dataclasses.replace(scenario, run=dataclasses.replace(scenario.run,
                                                                    samples=10**12))
    solver = solver_for(scenario)
    tracemalloc.start()
    try:
        estimate = solver.estimate()
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 200 * 2**20, peak
    assert estimate.dominant_key == "run.samples"
    reason = refusal(estimate, method, 16 * 2**30)
    assert reason is not None and reason.startswith("run.samples = 1000000000000"), reason


@pytest.mark.parametrize("method", METHODS)
def test_every_estimate_names_keys_of_the_schema(make_scenario, write_scenario, capsys, method):
    path = write_scenario(make_scenario(SMALL, method=method, **method_keys(method)))
    assert main(["run", str(path), "--dry-run"]) == 0
    line = one_line(capsys.readouterr().out)
    found = re.search(r"size keys: ([^)]*)\)", line)
    assert found, line
    for key in found.group(1).split(", "):
        table, _, name = key.partition(".")
        assert name in SCHEMA.get(table, {}), (key, line)


def test_markov_dry_run_grows_with_its_lattice(make_scenario, write_scenario, capsys,
                                              monkeypatch):
    tiny_memory(monkeypatch, 4 * 2**30)
    path = write_scenario(make_scenario(SMALL, method="markov", grid__points=20001))
    assert main(["run", str(path), "--dry-run"]) == 2
    line = one_line(capsys.readouterr().out)
    assert "size set mostly by grid.points = 20001" in line, line
    # the Liouvillian grows as points^2: the suggestion is about sqrt(limit / estimate) x 20001
    target = re.search(r"lower grid\.points to at most ([\d,]+)", line)
    assert target and 100 < int(target.group(1).replace(",", "")) < 20001, line


@pytest.mark.parametrize("method", ["perturbative", "exact", "markov"])
def test_zero_coupling_warning_points_to_coupling_strength(make_scenario, write_scenario,
                                                          tmp_path, capsys, method):
    # (the perturbative method also divided by the zero total rate here)
    path = write_scenario(make_scenario(SMALL, method=method, strength=0.0,
                                        **method_keys(method)))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    warnings = [w for w in capsys.readouterr().out.splitlines() if "rate_fitted" in w]
    assert warnings, "no rate_fitted warning"
    assert "coupling.strength" in warnings[0], warnings
    assert "raise run.t_max or run.samples" not in warnings[0], warnings


def test_short_run_warning_points_to_run_t_max(make_scenario, write_scenario, tmp_path, capsys):
    path = write_scenario(make_scenario(SMALL, method="perturbative", t_max=0.01))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    warnings = [w for w in capsys.readouterr().out.splitlines() if "rate_fitted" in w]
    assert warnings and "raise run.t_max" in warnings[0], warnings
    assert "run.samples" not in warnings[0], warnings


def test_scenario_notes_open_the_warnings(make_scenario):
    from sim.physics.checks import load_scenario
    from sim.result import run

    scenario = load_scenario(make_scenario(SMALL, method="perturbative"))
    notes = ("note: a load-time remark",)
    if any(f.name == "notes" for f in dataclasses.fields(scenario)):
        scenario = dataclasses.replace(scenario, notes=notes)
    else:  # the config layer has not grown the field yet
        object.__setattr__(scenario, "notes", notes)
    assert run(scenario).summary["warnings"][:1] == list(notes)


#: a zero-coupling 1D fock run whose ODE drifts past the norm tolerance (measured: 1.7e-6 at
#: t_max = 450, halving with t_max; raising bath.max_quanta leaves it unchanged)
DRIFTING_FOCK = dict(title="drift test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
                     strength=0.0, width=20.0, momentum=0.3, internal="excited", method="fock",
                     t_max=450.0, samples=101, field__mass=0.02)


def test_norm_drift_warning_points_to_the_key_that_reduces_it(make_scenario, write_scenario,
                                                               tmp_path, capsys):
    path = write_scenario(make_scenario(DRIFTING_FOCK))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    drift = [w for w in capsys.readouterr().out.splitlines() if "norm drift" in w]
    assert drift, "no norm-drift warning"
    assert "lower run.t_max" in drift[0], drift
    assert "raise bath.max_quanta" not in drift[0] and "refine the discretisation" not in drift[0]
