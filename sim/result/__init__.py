"""Result layer: the one Result type, its assembly from a solver's Evolution, fitted rates with
the verdict whether a curve has one, and the front door `run`."""

from .assemble import assemble, result_of, run
from .fits import RateFit, fit_decay, fit_excitation, trapped_population
from .result import Result, truncation_verdict

__all__ = ["RateFit", "Result", "assemble", "fit_decay", "fit_excitation", "result_of", "run",
           "trapped_population", "truncation_verdict"]
