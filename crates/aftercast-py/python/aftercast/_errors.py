"""The exceptions of aftercast. Every message is the command line's own, one line long, naming
the table, row or line, column and text where the input is at fault."""


class Error(Exception):
    """Anything aftercast raises."""


class DataError(Error, ValueError):
    """The input is at fault: a missing or misspelt column, a cell that is not a number, a
    start outside the data, an option value out of range. The command line exits with code 2
    for the same input."""


class OptionError(DataError):
    """An option's value is not valid (the command line's usage error)."""


class InternalError(Error, RuntimeError):
    """A failure that is not the input's doing (a bug, or a fit that could not be computed)."""
