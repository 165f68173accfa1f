"""Exception hierarchy.

Every error a user can cause derives from :class:`BasinkitError` and also from the builtin
exception it resembles (``InputError`` is a ``ValueError``, ``OutputExistsError`` a
``FileExistsError``, ...), so callers may catch either. The command line prints the message
(no traceback) and exits with the class's ``exit_code`` (DESIGN.md, the output contract:
2 bad input or usage). Anything else is a bug.
"""


class BasinkitError(Exception):
    """Base class for errors caused by input, options or the environment (not bugs)."""

    exit_code = 2


class InputError(BasinkitError, ValueError):
    """An input file or value cannot be used as given."""


class JobFileError(InputError):
    """A job file cannot be read or holds a key, value or type that is not allowed."""


class OutputExistsError(BasinkitError, FileExistsError):
    """An output path exists and ``overwrite`` was not requested."""


class OutputError(BasinkitError, OSError):
    """An output cannot be written (permission, full disk, name too long, a folder in the
    way); the message names the path and what to do."""


class MemoryBudgetError(BasinkitError, MemoryError):
    """The job would need more working memory than the machine has available."""


class OutletError(BasinkitError, ValueError):
    """An outlet cannot be placed on the grid."""
