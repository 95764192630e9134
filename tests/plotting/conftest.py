"""Small fast runs shared by the figure tests (every number invented for the tests)."""

from __future__ import annotations

import pytest

from sim import run
from sim.physics.checks import load_scenario

#: a light detector decaying in a 1D field with a small mass: `make_scenario` keywords
NATURAL = dict(title="figure test", model="newton-wigner", ground_mass=1.0, gap=0.5,
               strength=0.1, width=20.0, momentum=0.3, internal="excited", t_max=40.0,
               samples=41, field__mass=0.1)
#: the same kind of run in laboratory units: a 52 u emitter at 640 nm, lifetime 30 ns
LAB = dict(title="lab-unit figure test", model="newton-wigner", ground_mass="52 u", gap="640 nm",
           field__mass="1600 nm", strength=None, coupling__lifetime="30 ns", width="60 nm",
           momentum="0 eV/c", internal="excited", t_max="60 ns", samples=31)
#: one run per kind of figure: name -> make_scenario keywords
RUNS = {
    "exact-1d": dict(NATURAL, method="exact", bath__box_length=80.0),
    "exact-3d": dict(NATURAL, dims=3, method="exact"),
    "perturbative-3d": dict(NATURAL, dims=3, method="perturbative"),
    "fock-1d-truncated": dict(NATURAL, method="fock", bath__fock_modes=6,
                              coupling__rotating_wave=False),
    "markov-1d-trajectories": dict(NATURAL, method="markov", run__trajectories=40, run__seed=2,
                                   t_max=60.0),
    "markov-1d-lab": dict(LAB, method="markov"),
}


@pytest.fixture(scope="session")
def results(make_scenario):
    """Name -> Result of every run of RUNS (each well under a second)."""
    return {name: run(load_scenario(make_scenario(options))) for name, options in RUNS.items()}


@pytest.fixture(scope="session")
def lab_scenario(make_scenario):
    """The LAB scenario, loaded (output units: ns, eV/c, nm)."""
    return load_scenario(make_scenario(LAB, method="perturbative"))


@pytest.fixture(autouse=True)
def close_figures():
    """Close every figure a test opened."""
    yield
    from sim.plotting.style import pyplot

    pyplot().close("all")
