"""A lock file that keeps two runs out of one output (DESIGN.md, the output contract).

The lock is a small JSON file beside the output (``.NAME.lock`` next to the folder or file
``NAME``) holding the owner's process id, host, process start time and the time it was
taken. It is created with ``O_CREAT | O_EXCL``, so of two runs starting together exactly
one gets it; the other is refused with one line (:class:`~basinkit.errors.OutputError`,
exit status 2). A lock whose owner is gone (killed, crashed) is taken over: on the same
host the owner is dead when no process has its id, or when the process with that id
started at another time than the one recorded (the id was reused). A lock taken on another
host (a shared disk) is never taken over, as we cannot tell whether its owner lives; the
message names the file to delete when the user knows it is stale.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
import time
from pathlib import Path

from ..errors import OutputError

__all__ = ["OutputLock", "lock_path", "short_name"]

# a lock file left empty (its owner killed between creating and filling it) is taken over
# after this many seconds
EMPTY_LOCK_GRACE_SECONDS = 10.0


def short_name(target) -> str:
    """The name used for the hidden files beside ``target`` (lock, staging, old copy):
    the target's own name, or a cut of it plus a hash when it is long, so that the hidden
    names stay within the file system's limit (255 bytes) whatever the target's length."""
    import hashlib

    name = Path(target).name
    if len(name.encode("utf-8")) <= 60:
        return name
    h = hashlib.sha256(name.encode("utf-8", "surrogateescape")).hexdigest()[:10]
    return f"{name.encode('utf-8', 'surrogateescape')[:40].decode('utf-8', 'ignore')}~{h}"


def lock_path(target) -> Path:
    """The lock file of an output folder or file: ``.NAME.lock`` beside it."""
    target = Path(target)
    return target.parent / f".{short_name(target)}.lock"


def _process_start(pid: int):
    """The start time of a process in clock ticks since boot (Linux), or None."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as f:
            stat = f.read().decode("ascii", "replace")
        return int(stat.rsplit(")", 1)[1].split()[19])
    except (OSError, ValueError, IndexError):
        return None


def _alive(owner: dict) -> bool:
    """Whether the owner of a lock may still be running (True when we cannot tell)."""
    if owner.get("host") != socket.gethostname():
        return True
    try:
        pid = int(owner["pid"])
    except (KeyError, TypeError, ValueError):
        return False
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # a process of another user: it exists
    start = owner.get("process_start")
    now = _process_start(pid)
    if start is not None and now is not None and int(start) != now:
        return False  # the id now belongs to another process
    return True


def _read(path: Path):
    """The owner recorded in a lock file, ``{}`` when it is empty or unreadable, None when
    it is gone."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except OSError:
        return {}
    try:
        owner = json.loads(text)
    except ValueError:
        return {}
    return owner if isinstance(owner, dict) else {}


class OutputLock:
    """The lock of one output (folder or file).

    Parameters
    ----------
    target : str or Path
        The output folder or file the lock guards.

    Attributes
    ----------
    path : Path
        The lock file.
    taken_over : dict or None
        The record of a dead owner whose lock was taken over.

    Examples
    --------
    >>> lock = OutputLock("results").acquire()
    >>> lock.path.name
    '.results.lock'
    >>> OutputLock("results").acquire()  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    basinkit.errors.OutputError: another basinkit run ...
    >>> lock.release()
    """

    def __init__(self, target):
        self.target = Path(target)
        self.path = lock_path(self.target)
        self.taken_over = None
        self._held = False

    def _record(self) -> dict:
        return {"pid": os.getpid(), "host": socket.gethostname(),
                "process_start": _process_start(os.getpid()),
                "started": time.strftime("%Y-%m-%d %H:%M:%S"),
                "output": str(self.target)}

    def acquire(self) -> "OutputLock":
        """Take the lock (taking over a dead owner's); refuse with
        :class:`~basinkit.errors.OutputError` when a live run holds it."""
        for _ in range(5):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                self._clear_stale()
                continue
            except OSError as exc:
                from ..errors import os_error_message

                raise OutputError(os_error_message(exc, self.path, "create the lock file")) \
                    from None
            try:
                with os.fdopen(fd, "w", encoding="utf-8") as f:
                    json.dump(self._record(), f)
            except OSError as exc:
                with contextlib.suppress(OSError):
                    os.unlink(self.path)
                from ..errors import os_error_message

                raise OutputError(os_error_message(exc, self.path, "write the lock file")) \
                    from None
            self._held = True
            return self
        raise OutputError(f"cannot take the lock {str(self.path)!r} (other runs keep "
                          "taking it); wait for them to finish or choose another output")

    def check(self) -> "OutputLock":
        """Refuse (without taking anything) when a live run holds the lock, so that a
        command can say so before doing any work."""
        owner = _read(self.path)
        if owner is not None and owner and _alive(owner):
            raise self._refusal(owner)
        return self

    def _clear_stale(self):
        """Remove the lock file when its owner is dead; refuse when it lives."""
        owner = _read(self.path)
        if owner is None:
            return  # just released: try again
        if not owner:
            try:
                age = time.time() - self.path.stat().st_mtime
            except FileNotFoundError:
                return
            if age < EMPTY_LOCK_GRACE_SECONDS:
                raise self._refusal({})
        elif _alive(owner):
            raise self._refusal(owner)
        # stale: move it aside under a name of our own, check that what we moved is the
        # stale lock (not one taken meanwhile by another run), then delete it
        aside = self.path.with_name(f"{self.path.name}.stale-{os.getpid()}")
        try:
            os.rename(self.path, aside)
        except FileNotFoundError:
            return
        moved = _read(aside) or {}
        if moved and moved != owner and _alive(moved):
            with contextlib.suppress(OSError):
                os.link(aside, self.path)  # put the live run's lock back
            with contextlib.suppress(OSError):
                os.unlink(aside)
            raise self._refusal(moved)
        with contextlib.suppress(OSError):
            os.unlink(aside)
        self.taken_over = owner

    def _refusal(self, owner: dict) -> OutputError:
        if owner:
            who = (f"pid {owner.get('pid')} on {owner.get('host')}, started "
                   f"{owner.get('started')}")
        else:
            who = "just starting"
        return OutputError(f"another basinkit run ({who}) is writing {str(self.target)!r}; "
                           "wait for it to finish or choose another output (if no such run "
                           f"exists, delete {str(self.path)!r})")

    def release(self):
        """Remove the lock file if this process holds it."""
        if not self._held:
            return
        self._held = False
        owner = _read(self.path)
        if owner and owner.get("pid") == os.getpid() and \
                owner.get("host") == socket.gethostname():
            with contextlib.suppress(OSError):
                os.unlink(self.path)

    def __enter__(self):
        return self.acquire()

    def __exit__(self, *exc):
        self.release()
        return False
