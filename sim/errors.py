"""Every error recoilsim reports to a user, in one place (this module imports nothing of `sim`).

The command line turns each into one line on stderr per problem and exit status 2; from Python
they are ordinary exceptions whose message says the key, the value and what is allowed.
"""

from __future__ import annotations


class ScenarioError(ValueError):
    """A scenario that cannot be run; ``problems`` holds one line per problem."""

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


class ResourceError(ScenarioError):
    """A run that would not fit in memory; the message names the keys that control its size."""


class UsageError(Exception):
    """A command-line problem (an option or its value) to report in one line."""


class OutputExists(FileExistsError):
    """The output folder already holds a run and overwriting was not asked for."""
