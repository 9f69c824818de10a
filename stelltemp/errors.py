"""The one exception type stelltemp raises for bad input."""


class StelltempError(ValueError):
    """Bad input: the message is one line that names the problem."""
