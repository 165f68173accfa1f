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


# what to do about an operating-system error, by errno (common practice, no source)
_OS_ADVICE = {
    "EACCES": "check the permissions, or choose another place",
    "EPERM": "check the permissions, or choose another place",
    "ENOSPC": "the disk is full: free some space or choose another disk",
    "EDQUOT": "the disk quota is used up: free some space or choose another disk",
    "ENAMETOOLONG": "the name is too long: choose a shorter one",
    "EISDIR": "a folder is in the way: choose a file name",
    "ENOTDIR": "a file is in the way where a folder is needed: choose another path",
    "EROFS": "the file system is read-only: choose another place",
    "EEXIST": "something is in the way: choose another name",
    "ENOENT": "check the path",
    "EIO": "the disk or network share reported an input/output error: check it",
}


def os_error_message(exc: OSError, path=None, doing: str = "write") -> str:
    """One line for an :class:`OSError`: what could not be done to which path, why, and
    what to do (e.g. ``cannot write 'out/x.tif': No space left on device; the disk is
    full: free some space or choose another disk``).

    Examples
    --------
    >>> import errno
    >>> msg = os_error_message(OSError(errno.ENOSPC, "No space left on device"), "out/a.tif")
    >>> msg.split("; ")
    ["cannot write 'out/a.tif': No space left on device", 'the disk is full: free some \
space or choose another disk']
    """
    import errno as _errno

    name = _errno.errorcode.get(getattr(exc, "errno", None) or -1)
    path = path if path is not None else (getattr(exc, "filename", None) or "")
    why = getattr(exc, "strerror", None) or " ".join(str(exc).split()) or type(exc).__name__
    text = str(exc)
    if name is None:  # e.g. GDAL's errors (RasterioIOError): guess from the message
        low = text.lower()
        for key, needle in (("ENOSPC", "space"), ("EACCES", "permission denied"),
                            ("ENAMETOOLONG", "name too long"), ("EROFS", "read-only")):
            if needle in low:
                name = key
                break
    advice = _OS_ADVICE.get(name, "check the path, the permissions and the free space")
    where = f" {str(path)!r}" if path else ""
    line = f"cannot {doing}{where}: {why.rstrip('.')}; {advice}"
    return " ".join(line.split())
