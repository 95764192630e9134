"""The small base class every solver derives from, its raw output, and the memory guard.

A solver turns a validated scenario into an :class:`Evolution`: its raw observables over the
sample times.  `Solver.run()` chooses the times, checks the memory estimate and times the
evolution; the Result with its summary is assembled one layer up (`sim.result.assemble`).
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass, field

import numpy as np

from ..config.schema import Scenario
from ..errors import ResourceError
from .common import sample_times

#: refuse a run whose estimated memory exceeds this share of the available memory
MEMORY_SHARE = 0.8


#: bytes held per sample time whatever the method: the sample times, a dozen observable series
#: and the ODE solver's recorded output (Python lists of floats before they become arrays)
SAMPLE_BYTES = 256.0
#: wall time of one complex sparse (CSR) matrix-vector product per stored entry (seconds),
#: timed alone on the 2-core machine the cost models were measured on; shared by the markov
#: and fock cost models, whose right-hand sides are such products
CSR_ENTRY_SECONDS = 3.6e-9


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
    seconds : float, optional
        Estimated wall time of the evolution on this machine (seconds), from the method's
        measured cost model; nan where the method has none.
    keys : tuple of str, optional
        Scenario keys that set the size, the most effective first; named in a refusal
        (`check_resources`).
    breakdown : dict, optional
        Scenario key -> the part of `memory_bytes` it drives (bytes); a term that is a product
        of several sizes is credited to its largest factor.  Fixed overheads are left out.
    values : dict, optional
        Scenario key -> the value the run uses for it (the resolved value where the key was
        left to an automatic choice), for messages.
    scaling : dict, optional
        Scenario key -> the power q with which its `breakdown` part grows with its value
        (part ~ value^q, dimensionless); a key without one (its part grows faster than any
        power, or not at all in its value) gets no suggested value.  Used to say what to lower
        a key to (`lowered`).
    resize : callable, optional
        ``resize(samples) -> memory_bytes``: the same estimate for another run.samples, cheap
        and allocation-free; `lowered` bisects on it for run.samples (exact where the memory is
        not proportional to the samples).
    """

    states: int
    memory_bytes: float
    work: float
    seconds: float = math.nan
    keys: tuple[str, ...] = ()
    breakdown: dict = field(default_factory=dict, hash=False, compare=False)
    values: dict = field(default_factory=dict, hash=False, compare=False)
    scaling: dict = field(default_factory=dict, hash=False, compare=False)
    resize: object = field(default=None, hash=False, compare=False, repr=False)

    @property
    def dominant_key(self) -> str:
        """The scenario key that drives most of the memory.

        Returns
        -------
        str
            The largest entry of `breakdown`, else the first of `keys`, else "run.method".
        """
        if self.breakdown:
            return max(self.breakdown, key=lambda k: self.breakdown[k])
        return self.keys[0] if self.keys else "run.method"

    def ordered_keys(self) -> tuple[str, ...]:
        """The size keys with the dominant one first.

        Returns
        -------
        tuple of str
            `dominant_key`, then the other `keys` and `breakdown` keys in their order.
        """
        first = self.dominant_key
        rest = [k for k in (*self.keys, *self.breakdown) if k != first]
        return (first, *dict.fromkeys(rest))

    def named(self, key: str) -> str:
        """A key with the value the run uses for it, for messages.

        Parameters
        ----------
        key : str
            A scenario key ("table.name").

        Returns
        -------
        str
            "key = value" where the value is known (`values`), else the key alone.
        """
        if key not in self.values:
            return key
        value = self.values[key]
        text = f"{value:.4g}" if isinstance(value, float) else f"{value!r}"
        return f"{key} = {text}"

    def lowered(self, key: str, limit: float) -> float | int | None:
        """The largest value of `key` with which the estimate fits under `limit`.

        For run.samples with `resize`: the largest count n >= 2 with resize(n) <= limit
        (bisection).  Otherwise, with b the key's `breakdown` part, r = memory_bytes - b the rest
        and q its `scaling`, the run fits when b (v' / v)^q <= limit - r, so
        v' = v ((limit - r) / b)^(1/q), rounded down for an integer key.

        Parameters
        ----------
        key : str
            A key of `breakdown` with a numeric entry in `values`.
        limit : float
            The memory the run may use (bytes).

        Returns
        -------
        float, int or None
            v' (the key's units; an int for an integer key), or None when lowering the key
            alone cannot fit the run (the rest exceeds `limit`, or v' would round to 0), or when
            the part, the value or the scaling (`scaling`) is unknown.
        """
        part, value = self.breakdown.get(key, 0.0), self.values.get(key)
        if key == "run.samples" and self.resize is not None and isinstance(value, int):
            low, high = 2, value
            if self.resize(low) > limit:
                return None
            while high - low > 1:  # resize(low) fits, resize(high) does not
                middle = (low + high) // 2
                low, high = (middle, high) if self.resize(middle) <= limit else (low, middle)
            return low
        power = self.scaling.get(key)
        if not part > 0 or isinstance(value, bool) or not isinstance(value, (int, float)) \
                or power is None or not power > 0:
            return None
        room = limit - (self.memory_bytes - part)
        if not room > 0:
            return None
        target = value * (room / part) ** (1.0 / power)
        if isinstance(value, int):
            target = int(target)
            return target if target >= 1 else None
        return float(target)

    def describe(self) -> str:
        """The estimate in words, for messages and ``--dry-run``.

        Returns
        -------
        str
            "about N states, X GiB of memory, Y floating-point operations[, about Z s]"
            (1 GiB = 2^30 bytes; the time where `seconds` is known).
        """
        text = (f"about {self.states:,} states, {self.memory_bytes / 2**30:.3g} GiB of memory, "
                f"{self.work:.2g} floating-point operations")
        return text if math.isnan(self.seconds) else f"{text}, about {self.seconds:.2g} s"


def credit(breakdown: dict, nbytes: float, factors: dict) -> None:
    """Add a memory term to a breakdown, credited to its largest factor.

    Parameters
    ----------
    breakdown : dict
        Scenario key -> bytes (`Estimate.breakdown`), updated in place.
    nbytes : float
        The term (bytes).
    factors : dict
        Scenario key -> the count it contributes to the term (dimensionless); the term goes to
        the key with the largest count (the first one on a tie).

    Returns
    -------
    None
    """
    if not factors:
        return
    key = max(factors, key=lambda k: factors[k])
    breakdown[key] = breakdown.get(key, 0.0) + float(nbytes)


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


def refusal(estimate: Estimate, method: str, available: float | None = None) -> str | None:
    """Why the memory guard would refuse a run, or None when it would go ahead.

    Parameters
    ----------
    estimate : Estimate
        The run's size (`Solver.estimate`).
    method : str
        The method's name, for the message.
    available : float, optional
        Memory available (bytes); default `available_memory()`.

    Returns
    -------
    str or None
        None when ``estimate.memory_bytes <= MEMORY_SHARE * available``; else one line that
        starts with the dominant key and its value (`Estimate.dominant_key`), gives the estimate,
        the dominant key's share and the limit, says what to lower that key to
        (`Estimate.lowered`) or that lowering it alone is not enough, and lists the other keys.
    """
    available = available_memory() if available is None else available
    limit = MEMORY_SHARE * available
    if estimate.memory_bytes <= limit:
        return None
    first, *others = estimate.ordered_keys()
    share = estimate.breakdown.get(first)
    head = (f"{estimate.named(first)}: method {method!r} would need {estimate.describe()}"
            + (f" ({first} accounts for {share / 2**30:.3g} GiB)" if share else "")
            + f", more than the {limit / 2**30:.3g} GiB it may use ({MEMORY_SHARE:.0%} of the "
            f"{available / 2**30:.3g} GiB available)")
    target = estimate.lowered(first, limit)
    if target is not None:
        text = f"{target:,}" if isinstance(target, int) else f"{target:.3g}"
        advice = f"lower {first} to at most {text}"
        if others:
            advice += f" (or lower {', '.join(others)})"
    elif share and others and (first in estimate.scaling or (first == "run.samples"
                                                            and estimate.resize is not None)):
        rest = estimate.memory_bytes - share
        advice = (f"lowering {first} alone is not enough"
                  + (f" (the rest needs {rest / 2**30:.3g} GiB)" if rest >= limit else "")
                  + f"; lower {first} and {', '.join(others)}")
    else:
        advice = f"lower {', '.join((first, *others))}"
    return f"{head}; {advice}"


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
        If ``estimate.memory_bytes > MEMORY_SHARE * available_memory()`` (`refusal`); the
        message starts with the dominant key and its value and lists the keys to lower.
    """
    reason = refusal(estimate, method)
    if reason is not None:
        raise ResourceError(reason)


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
    x_var_transverse : ndarray or None
        3D: position variance along one axis transverse to the packet axis (length^2); None in
        1D or where the method does not compute it.
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
    coherence : ndarray of complex, shape (T,), or None
        chi(t) = Tr(rho_COM(t) exp(i P d)) at every sample time (dimensionless; nan where not
        computed), for d from `sim.physics.coherence.coherence_distance`, levels traced out;
        None where the scenario asks for no coherence or the method does not compute it.
    """

    excited: np.ndarray
    p_mean: np.ndarray
    p_var: np.ndarray
    momentum_grid: np.ndarray
    snapshot_times: np.ndarray
    momentum_density: np.ndarray
    initial_density: np.ndarray
    x_var: np.ndarray | None = None
    x_var_transverse: np.ndarray | None = None
    purity: np.ndarray | None = None
    norm: np.ndarray | None = None  # total probability, where the solver can check it
    lamb_shift: float = float("nan")
    tables: dict = field(default_factory=dict)
    final_state: object = None
    details: dict = field(default_factory=dict)  # solver-specific facts for summary.json
    warnings: list = field(default_factory=list)
    times: np.ndarray | None = None
    wall_seconds: float = float("nan")
    coherence: np.ndarray | None = None  # chi(t) = Tr(rho_COM(t) exp(i P d)), complex


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

    def convergence(self, times, evolution: "Evolution | None" = None,
                    tolerance: float = 1e-3) -> dict | None:
        """Change of the results on refining the method's own truncation, or None if it has none.

        Overridden by methods whose truncation is checked by finer runs of their own (fock:
        one more quantum, more modes, more directions); such a method also records the verdict
        in ``evolution.details["convergence"]`` and ``details["truncation"]["converged"]``.

        Parameters
        ----------
        times : ndarray
            Sample times (time units).
        evolution : Evolution, optional
            This solver's run over `times`.
        tolerance : float, optional
            Largest change of P_e (absolute) and of a rate (relative) called converged.

        Returns
        -------
        dict or None
            None in the base class (nothing to check).
        """
        return None

    def estimate(self) -> Estimate:
        """Size of the run (overridden by solvers with large discretisations).

        Returns
        -------
        Estimate
            The base guess: run.samples states, SAMPLE_BYTES bytes and 1e3 floating-point
            operations per sample time, sized by the key "run.samples".
        """
        samples = self.scenario.run.samples
        return Estimate(states=samples, memory_bytes=SAMPLE_BYTES * samples, work=1e3 * samples,
                        keys=("run.samples",), breakdown={"run.samples": SAMPLE_BYTES * samples},
                        values={"run.samples": samples}, scaling={"run.samples": 1.0})

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
