"""The small base class every solver derives from, and the pieces of a run they share.

A solver turns a validated scenario into an :class:`Evolution` (its raw observables over time);
the base class adds what is common to all methods — sample times, the golden-rule reference,
the fitted rate, warnings, versions — and returns the one :class:`~sim.result.Result` type.
"""

from __future__ import annotations

import platform
import time
from dataclasses import dataclass, field

import numpy as np

from ..field import packet_for
from ..rates import packet_rate
from ..result import Result, fitted_excitation_rate, fitted_rate
from ..scenario import Scenario, ScenarioError

#: automatic t_max: this many golden-rule lifetimes
AUTO_LIFETIMES = 5.0
#: ground-state momentum snapshots written to momentum.csv
SNAPSHOTS = 5
#: warn when the excited + ground population drifts from 1 by more than this
NORM_TOLERANCE = 1e-6
#: warn when the perturbation parameter Gamma / Omega exceeds this
WEAK_COUPLING_LIMIT = 0.05
#: refuse a run whose estimated memory exceeds this share of the available memory
MEMORY_SHARE = 0.8


class ResourceError(ScenarioError):
    """A run that would not fit in memory; the message names the keys that control its size."""


@dataclass(frozen=True)
class Estimate:
    """Size of a run before it starts: largest state count, memory (bytes), work (flops)."""

    states: int
    memory_bytes: float
    work: float
    keys: tuple[str, ...] = ()

    def describe(self) -> str:
        return (f"about {self.states:,} states, {self.memory_bytes / 2**30:.3g} GiB of memory, "
                f"{self.work:.2g} floating-point operations")


def available_memory() -> float:
    """Memory available to a new allocation (bytes), from /proc/meminfo where it exists."""
    try:
        with open("/proc/meminfo") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024
    except OSError:
        pass
    import os

    return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))


def check_resources(estimate: Estimate, method: str) -> None:
    """Raise ResourceError if the estimated memory exceeds MEMORY_SHARE of what is available."""
    limit = MEMORY_SHARE * available_memory()
    if estimate.memory_bytes > limit:
        keys = ", ".join(estimate.keys) or "the discretisation keys"
        raise ResourceError(f"{(estimate.keys or ('run.method',))[0]}: method {method!r} would need "
                            f"{estimate.describe()}, more than the {limit / 2**30:.3g} GiB "
                            f"available; lower {keys}")


@dataclass
class Evolution:
    """Raw output of one solver; arrays over the sample times (see Result for meanings)."""

    excited: np.ndarray
    p_mean: np.ndarray
    p_var: np.ndarray
    momentum_grid: np.ndarray
    snapshot_times: np.ndarray
    momentum_density: np.ndarray
    initial_density: np.ndarray
    x_var: np.ndarray | None = None
    purity: np.ndarray | None = None
    norm: np.ndarray | None = None  # total probability, where the solver can check it
    lamb_shift: float = float("nan")
    tables: dict = field(default_factory=dict)
    final_state: object = None
    details: dict = field(default_factory=dict)  # solver-specific facts for summary.json
    warnings: list = field(default_factory=list)


def sample_times(scenario: Scenario) -> np.ndarray:
    """linspace(0, t_max, samples); t_max defaults to AUTO_LIFETIMES golden-rule lifetimes."""
    t_max = scenario.run.t_max
    if t_max is None:
        rate = packet_rate(scenario)
        if not rate > 0:
            raise ScenarioError("run.t_max: missing, and the golden-rule rate is zero so no "
                                "automatic choice exists; allowed: > 0")
        t_max = AUTO_LIFETIMES / rate
    return np.linspace(0.0, t_max, scenario.run.samples)


def snapshot_indices(samples: int, count: int = SNAPSHOTS) -> np.ndarray:
    """Indices of `count` evenly spread sample times, first and last included."""
    return np.unique(np.linspace(0, samples - 1, count).round().astype(int))


def versions() -> dict:
    """Versions of recoilsim and the libraries a result depends on."""
    from importlib import metadata

    out = {"python": platform.python_version()}
    for name in ("recoilsim", "numpy", "scipy", "qutip"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


class Solver:
    """Base class: subclasses set `name` and implement `evolve(times) -> Evolution`.

    `run()` is the front door; `refined()` returns the same solver on a finer discretisation
    (for the convergence check), by default the solver itself when it has nothing to refine.
    """

    name = ""

    def __init__(self, scenario: Scenario, *, progress: bool = False):
        self.scenario = scenario
        self.progress = progress

    def evolve(self, times: np.ndarray) -> Evolution:
        raise NotImplementedError

    def refined(self) -> "Solver | None":
        """A solver with every discretisation parameter refined, or None if there is none."""
        return None

    def estimate(self) -> Estimate:
        """Size of the run (overridden by solvers with large discretisations)."""
        samples = self.scenario.run.samples
        return Estimate(states=samples, memory_bytes=64.0 * samples, work=1e3 * samples,
                        keys=("run.samples",))

    def run(self) -> Result:
        """Evolve the scenario and assemble the Result with its summary."""
        check_resources(self.estimate(), self.name)
        times = sample_times(self.scenario)
        started = time.perf_counter()
        evo = self.evolve(times)
        elapsed = time.perf_counter() - started
        return assemble(self.name, self.scenario, times, evo, elapsed)


def assemble(method: str, scenario: Scenario, times: np.ndarray, evo: Evolution,
             elapsed: float) -> Result:
    """Result with summary: golden-rule rate, fitted rate, Lamb shift, warnings, versions."""
    nan = np.full_like(times, np.nan)
    golden = packet_rate(scenario)
    excited_start = scenario.packet.internal == "excited"
    fitted = (fitted_rate(times, evo.excited) if excited_start
              else fitted_excitation_rate(times, evo.excited))
    warnings = list(evo.warnings) + physics_warnings(scenario, golden)
    if evo.norm is not None:
        drift = float(np.max(np.abs(evo.norm - 1.0)))
        if drift > NORM_TOLERANCE:
            warnings.append(f"norm drift: total probability departs from 1 by {drift:.2e} "
                            f"(tolerance {NORM_TOLERANCE:g}); refine the discretisation")
    if excited_start and not np.isfinite(fitted):
        warnings.append("rate_fitted: the decay curve has too few samples between "
                        f"P_e = {0.9} and {0.02} for an exponential fit; raise run.t_max or "
                        "run.samples")
    summary = {
        "title": scenario.title,
        "method": method,
        "simulated": True,
        "note": "simulated data from recoilsim, not a measurement",
        "rate_golden_rule": golden,
        "rate_fitted": fitted,
        "lamb_shift": evo.lamb_shift,
        "t_max": float(times[-1]),
        "samples": int(len(times)),
        "final_excited": float(evo.excited[-1]),
        "warnings": warnings,
        "scenario": dict(scenario.source),
        "resolved": resolved_parameters(scenario),
        "versions": versions(),
        "stats": {"wall_seconds": round(elapsed, 4), **evo.details},
    }
    return Result(method=method, scenario=scenario, times=times, excited=evo.excited,
                  p_mean=evo.p_mean, p_var=evo.p_var,
                  x_var=evo.x_var if evo.x_var is not None else nan,
                  purity=evo.purity if evo.purity is not None else nan,
                  momentum_grid=evo.momentum_grid, snapshot_times=evo.snapshot_times,
                  momentum_density=evo.momentum_density, initial_density=evo.initial_density,
                  summary=summary, tables=evo.tables, final_state=evo.final_state)


def physics_warnings(scenario: Scenario, rate: float) -> list[str]:
    """Warnings every method shares: a large perturbation parameter, RWA where it fails."""
    out = []
    gap = scenario.detector.gap
    if rate / gap > WEAK_COUPLING_LIMIT:
        out.append(f"perturbation parameter Gamma/Omega = {rate / gap:.3g} is large (above "
                   f"{WEAK_COUPLING_LIMIT:g}): golden-rule and Markov predictions are unreliable here")
    packet = packet_for(scenario)
    fastest = (packet.mean_speed + 3 * packet.momentum_std) / scenario.detector.ground_mass
    if (scenario.detector.model == "galilean" and scenario.coupling.rotating_wave
            and fastest > 1):
        out.append(f"rotating-wave approximation with a galilean detector reaching |v| = "
                   f"{fastest:.3g} > 1: counter-rotating terms are resonant there (anomalous Doppler "
                   "emission) and are dropped; use method = \"fock\" with rotating_wave = false")
    return out


def resolved_parameters(scenario: Scenario) -> dict:
    """The numbers a run actually used (natural units), for the record."""
    packet = packet_for(scenario)
    c = scenario.coupling
    return {"strength": c.strength, "momentum_std": packet.momentum_std,
            "mean_momentum": scenario.mean_momentum,
            "matching": c.matching, "rotating_wave": c.rotating_wave}
