"""The one error type that user-facing code raises for bad input.

Every check of a user input (scenario key, flow file, command-line option) raises
:class:`InputError` with a message that names the place (file, key or variable), says what was
wrong and how to fix it. The command line turns it into a clean message and exit code 2; anything
else escaping is a defect of the tool, reported with exit code 1.
"""


class WalkersError(Exception):
    """Base class of the errors walkers raises on purpose."""

    exit_code = 1


class InputError(WalkersError, ValueError):
    """Bad input: a scenario key, flow file, variable or option that cannot be used as given."""

    exit_code = 2


class RunFailure(WalkersError):
    """A run that started from valid input but could not finish (e.g. NaN velocity met)."""

    exit_code = 1
