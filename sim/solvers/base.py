"""The small base class every solver derives from, its raw output, and the memory guard.

A solver turns a validated scenario into an :class:`Evolution`: its raw observables over the
sample times.  `Solver.run()` chooses the times, checks the memory estimate and times the
evolution; the Result with its summary is assembled one layer up (`sim.result.assemble`).
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field

import numpy as np

from ..config.schema import Scenario
from ..errors import ResourceError
from .common import sample_times

#: refuse a run whose estimated memory exceeds this share of the available memory
MEMORY_SHARE = 0.8


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
    """Raw output of one solver; arrays over the sample times (see Result for meanings).

    `times` (time units) and `wall_seconds` are filled in by `Solver.run`.
    """

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
    times: np.ndarray | None = None
    wall_seconds: float = float("nan")


class Solver:
    """Base class: subclasses set `name` and implement `evolve(times) -> Evolution`.

    `run()` is the front door of one method; `refined()` returns the same solver on a finer
    discretisation (for the convergence check), or None when there is nothing to refine;
    `estimate()` sizes the run before it starts (the memory guard and `--dry-run`).
    """

    name = ""

    def __init__(self, scenario: Scenario, *, progress: bool = False):
        self.scenario = scenario
        self.progress = progress

    def evolve(self, times: np.ndarray) -> Evolution:
        """Evolve the scenario's initial state to each of `times`.

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units, natural: 1 / energy unit).

        Returns
        -------
        Evolution
            Populations (dimensionless), momentum moments (momentum, momentum^2), densities
            (1 / momentum) over `times`.
        """
        raise NotImplementedError

    def refined(self) -> "Solver | None":
        """A solver with every discretisation parameter refined, or None if there is none."""
        return None

    def estimate(self) -> Estimate:
        """Size of the run (overridden by solvers with large discretisations)."""
        samples = self.scenario.run.samples
        return Estimate(states=samples, memory_bytes=64.0 * samples, work=1e3 * samples,
                        keys=("run.samples",))

    def run(self) -> Evolution:
        """Check the memory estimate, evolve over the scenario's sample times, time it.

        Returns
        -------
        Evolution
            With `times` (time units) and `wall_seconds` (s) set.
        """
        check_resources(self.estimate(), self.name)
        times = sample_times(self.scenario)
        started = time.perf_counter()
        evo = self.evolve(times)
        evo.times, evo.wall_seconds = times, time.perf_counter() - started
        return evo
