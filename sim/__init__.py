"""recoilsim: simulated emission of a two-level detector with a quantum centre of mass.

Python entry points:
    load_scenario(path_or_dict) -> Scenario
    template_rate(scenario, p), packet_rate(scenario)   golden-rule rates
    run(scenario) -> Result                            time evolution with scenario.run.method
"""

from .rates import packet_rate, rest_rate, template_rate
from .result import Result
from .scenario import Scenario, ScenarioError, load_scenario
from .solvers import METHODS, run

__all__ = ["METHODS", "Result", "Scenario", "ScenarioError", "load_scenario", "packet_rate",
           "rest_rate", "run", "template_rate"]
