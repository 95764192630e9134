"""The names a scenario may choose, each with where its implementation lives.

`run.method` and `detector.model` are validated against these maps, the `recoilsim new`
template describes them from here, and `compare` and the figures' colours follow their order.
A method or model is implemented in a higher layer and loaded by its "module:Class" path only
when first used (`sim.solvers.solver_class`, `sim.physics.models.MODELS`), so that reading a
scenario imports no physics and no solver.  Adding one is one line here plus its own file.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Entry:
    """One registered name: its implementation ("module:Class") and a one-line description.

    Parameters
    ----------
    target : str
        Import path "module:Class" of the implementation, loaded when first used.
    summary : str
        One-line description for help texts and the template.
    """

    target: str
    summary: str


#: run.method -> solver, in the order `compare` runs them
METHOD_ENTRIES: dict[str, Entry] = {
    "perturbative": Entry("sim.solvers.perturbative.solver:PerturbativeSolver",
                          "golden-rule rate equations"),
    "markov": Entry("sim.solvers.markov.solver:MarkovSolver", "Lindblad master equation"),
    "exact": Entry("sim.solvers.exact.solver:ExactSolver", "single-excitation star sectors"),
    "fock": Entry("sim.solvers.fock.solver:FockSolver", "small Fock space"),
}

#: detector.model -> centre-of-mass model class
MODEL_ENTRIES: dict[str, Entry] = {
    "galilean": Entry("sim.physics.models.galilean:Galilean", "P^2/2M"),
    "newton-wigner": Entry("sim.physics.models.newton_wigner:NewtonWigner", "sqrt(P^2+M^2)"),
    "one-particle": Entry("sim.physics.models.one_particle:OneParticle",
                          "sqrt(P^2+M^2) with the 1/sqrt(2E) vertex"),
}

#: method key -> "module:class" (the public `sim.METHODS`)
METHODS: dict[str, str] = {name: entry.target for name, entry in METHOD_ENTRIES.items()}
METHOD_NAMES: tuple[str, ...] = tuple(METHOD_ENTRIES)
#: `recoilsim compare --budget` default: the largest estimated wall time of one method (seconds)
COMPARE_BUDGET_SECONDS = 600.0
#: `recoilsim run --check --check-tolerance` default: the largest change of P_e and relative
#: change of the fitted rate on refinement called converged (dimensionless)
CHECK_TOLERANCE = 1e-3
#: figure file formats every drawing command accepts (`--format`), the default first
FIGURE_FORMATS = ("png", "pdf", "svg")
#: default resolution of saved figures (dots per inch; `--dpi`) and the range accepted
FIGURE_DPI, FIGURE_DPI_RANGE = 150, (50, 1200)
MODEL_NAMES: tuple[str, ...] = tuple(MODEL_ENTRIES)


def described(entries: dict[str, Entry]) -> str:
    """'name (summary), name (summary), ...' for help texts and the template.

    Parameters
    ----------
    entries : dict of str to Entry
        Registered names, in the order they are listed.

    Returns
    -------
    str
        The names with their summaries, comma-separated.
    """
    return ", ".join(f"{name} ({entry.summary})" for name, entry in entries.items())
