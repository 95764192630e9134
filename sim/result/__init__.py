"""Result layer: the one Result type, its assembly from a solver's Evolution, fitted rates, and
the front door `run`."""

from .assemble import assemble, result_of, run
from .fits import fitted_excitation_rate, fitted_rate
from .result import Result

__all__ = ["Result", "assemble", "fitted_excitation_rate", "fitted_rate", "result_of", "run"]
