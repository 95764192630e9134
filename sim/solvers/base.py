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
    """Size of a run before it starts: largest state count, memory (bytes), work (flops).

    Parameters
    ----------
    states : int
        Largest number of states (basis states, lattice states or modes + 1) of one sector
        (dimensionless count).
    memory_bytes : float
        Estimated peak memory of the run (bytes).
    work : float
        Estimated number of floating-point operations (dimensionless count).
    keys : tuple of str, optional
        Scenario keys that set the size, the most effective first; named in a refusal
        (`check_resources`).
    """

    states: int
    memory_bytes: float
    work: float
    keys: tuple[str, ...] = ()

    def describe(self) -> str:
        """The estimate in words, for messages and ``--dry-run``.

        Returns
        -------
        str
            "about N states, X GiB of memory, Y floating-point operations" (1 GiB = 2^30 bytes).
        """
        return (f"about {self.states:,} states, {self.memory_bytes / 2**30:.3g} GiB of memory, "
                f"{self.work:.2g} floating-point operations")


def available_memory() -> float:
    """Memory available to a new allocation (bytes), from /proc/meminfo where it exists.

    Returns
    -------
    float
        ``MemAvailable`` of /proc/meminfo (kiB x 1024), or, where that file cannot be read, the
        available physical pages times the page size from `os.sysconf` (bytes).
    """
    try:
        with open("/proc/meminfo") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024
    except OSError:
        pass
    return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))


def check_resources(estimate: Estimate, method: str) -> None:
    """Refuse a run whose estimated memory exceeds MEMORY_SHARE of what is available.

    Parameters
    ----------
    estimate : Estimate
        The run's size (`Solver.estimate`).
    method : str
        The method's name, for the message.

    Returns
    -------
    None

    Raises
    ------
    ResourceError
        If ``estimate.memory_bytes > MEMORY_SHARE * available_memory()``; the message names the
        first of `estimate.keys` (or "run.method") and the keys to lower.
    """
    limit = MEMORY_SHARE * available_memory()
    if estimate.memory_bytes > limit:
        keys = ", ".join(estimate.keys) or "the discretisation keys"
        raise ResourceError(f"{(estimate.keys or ('run.method',))[0]}: method {method!r} would need "
                            f"{estimate.describe()}, more than the {limit / 2**30:.3g} GiB "
                            f"available; lower {keys}")


@dataclass
class Evolution:
    """Raw output of one solver: the observables over the sample times.

    The meanings are those of `sim.result.Result`, which is assembled from it one layer up.
    T is the number of sample times, G the number of momentum grid points, S the number of
    snapshot times.  `times` and `wall_seconds` are filled in by `Solver.run`.

    Parameters
    ----------
    excited : ndarray, shape (T,)
        Excited-state population P_e(t) (dimensionless).
    p_mean : ndarray, shape (T,)
        COM momentum mean <p> along the packet axis (momentum units); nan where not computed.
    p_var : ndarray, shape (T,)
        COM momentum variance along the packet axis (momentum^2); nan where not computed.
    momentum_grid : ndarray, shape (G,)
        Axis momenta of the densities (momentum units).
    snapshot_times : ndarray, shape (S,)
        Times of the density snapshots (time units).
    momentum_density : ndarray, shape (G, S)
        Ground-state COM momentum density along the axis at each snapshot (1 / momentum units).
    initial_density : ndarray, shape (G,)
        The packet's axis momentum density at t = 0 (1 / momentum units).
    x_var : ndarray or None
        Position variance of the reduced COM state along the axis (length^2, i.e.
        1 / momentum^2 units); None where the method does not compute it.
    purity : ndarray or None
        Tr rho_COM^2 of the reduced COM state (dimensionless); None where not computed.
    norm : ndarray or None
        Total probability (dimensionless), where the solver can check it; None otherwise.
    lamb_shift : float
        Shift of the transition energy (energy units); nan where not computed.
    tables : dict
        Method-specific tables: name -> column -> array.
    final_state : object
        The final reduced COM state (a `qutip.Qobj`) where the solver has it, else None.
    details : dict
        Solver-specific facts for summary.json.
    warnings : list of str
        Warnings of the run.
    times : ndarray or None
        The sample times (time units), set by `Solver.run`.
    wall_seconds : float
        Wall-clock duration of `evolve` (seconds), set by `Solver.run`.
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

    Parameters
    ----------
    scenario : Scenario
        A validated scenario (natural units, hbar = c = 1).
    progress : bool, optional
        Show a progress bar where the solver has one (default False).

    Attributes
    ----------
    name : str
        The method's key in `METHODS` (its `run.method` value).
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
            Populations (dimensionless), momentum moments (momentum units, momentum^2), densities
            (1 / momentum units) over `times`.

        Raises
        ------
        NotImplementedError
            In the base class; every solver overrides it.
        """
        raise NotImplementedError

    def refined(self) -> "Solver | None":
        """A solver with every discretisation parameter refined, or None if there is none.

        Returns
        -------
        Solver or None
            None in the base class (nothing to refine).
        """
        return None

    def estimate(self) -> Estimate:
        """Size of the run (overridden by solvers with large discretisations).

        Returns
        -------
        Estimate
            The base guess: run.samples states, 64 bytes and 1e3 floating-point operations per
            sample time, sized by the key "run.samples".
        """
        samples = self.scenario.run.samples
        return Estimate(states=samples, memory_bytes=64.0 * samples, work=1e3 * samples,
                        keys=("run.samples",))

    def run(self) -> Evolution:
        """Check the memory estimate, evolve over the scenario's sample times, time it.

        Returns
        -------
        Evolution
            With `times` (time units, `sample_times`) and `wall_seconds` (seconds) set.

        Raises
        ------
        ResourceError
            If the estimated memory exceeds MEMORY_SHARE of the available memory
            (`check_resources`).
        ScenarioError
            If run.t_max is missing and the golden-rule rate is zero (`sample_times`), or the
            solver cannot honour the scenario.
        """
        check_resources(self.estimate(), self.name)
        times = sample_times(self.scenario)
        started = time.perf_counter()
        evo = self.evolve(times)
        evo.times, evo.wall_seconds = times, time.perf_counter() - started
        return evo
