"""The one exception type stelltemp raises for bad input."""


class StelltempError(ValueError):
    """Bad input: the message is one line that names the problem."""


class RenamedWarning(DeprecationWarning):
    """An old name (a passband key, an option) still works for one release; the message gives the new one."""
