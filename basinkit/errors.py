"""Exception hierarchy.

Every error a user can cause derives from :class:`BasinkitError`; the command line prints its
message (no traceback) and exits non-zero. Anything else is a bug and is shown in full.
"""


class BasinkitError(Exception):
    """Base class for errors caused by input, options or the environment (not bugs)."""

    exit_code = 2


class InputError(BasinkitError):
    """An input file or value cannot be used as given."""


class OutputExistsError(BasinkitError):
    """An output path exists and ``overwrite`` was not requested."""


class MemoryBudgetError(BasinkitError):
    """The job would need more working memory than the machine has available."""


class OutletError(BasinkitError):
    """An outlet cannot be placed on the grid."""
