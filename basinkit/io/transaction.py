"""Outputs changed as transactions: a run is written beside its output and swapped in
when complete (DESIGN.md, the output contract).

A folder output ``OUT`` (:class:`FolderTransaction`):

1. takes the lock ``.OUT.lock`` beside it (:mod:`basinkit.io.lock`; a second run is
   refused, a dead owner's lock taken over);
2. finishes or undoes what a killed run left beside it (see *Recovery*);
3. writes every file into ``.OUT.staging-PID/OUT`` (the staging folder carries the output's
   own name, so that anything that looks at the folder's name sees the right one);
4. on commit, writes the manifest ``.basinkit-manifest.json`` ({name: SHA-256} of every
   file of the run) and *carries* into the staging folder every file of the old ``OUT``
   that is not a file the earlier run recorded with a hash that still matches: the user's
   own files and outputs edited since. They are hard-linked (copied where links are not
   possible), so the old folder is not touched; a carried file whose name the new run
   also wrote gets a ``.kept`` name (``catchments.kept.csv``). Then it swaps the staging
   folder and ``OUT`` in one atomic step (Linux ``renameat2`` with ``RENAME_EXCHANGE``;
   elsewhere two renames, ``OUT`` to ``.OUT.old-PID`` and the staging folder to ``OUT``,
   with a moment between them when ``OUT`` is missing), and deletes from the old copy
   only the files the earlier run recorded whose hash still matches, and the files carried
   (after checking that the new folder holds them unchanged). Whatever is left there (a
   file the user dropped in during the swap) is moved into ``OUT`` and named.

Why carry the user's files into the new folder rather than swap file by file: one rename
puts the new run in place, so a reader of ``OUT`` sees either the whole old run or the
whole new run, never a mixture; and the old folder stays untouched (links, not moves)
until the swap, so a kill or a full disk at any moment before it leaves the old run
exactly as it was. After the swap, only recorded unedited outputs and verified copies are
deleted: nothing of the user's is ever deleted.

A single-file output (``condition dem.tif -o x.tif``, :class:`FileTransaction`) is written
into the staging folder and renamed onto its name; an existing file there that the earlier
run's record (its JSON sidecar's ``files``) does not list with a matching hash is first
renamed to a ``.kept`` name and named in a warning.

*Recovery*: with the lock held, each staging folder of a dead run (marked by
``.basinkit-staging.json``, the journal) is looked at. When ``OUT``'s manifest is not the one
the journal says the run wrote, the run was never swapped in: the staging folder is deleted
(and an ``.OUT.old-PID`` is renamed back to ``OUT`` when ``OUT`` is missing, i.e. the run was
killed between the two renames). Otherwise the old copy is cleaned as in step 4 with the
journal's record. Temporary ``.part`` files that killed writers of older versions left
inside ``OUT`` (``.NAME.XXXXXXXX.part.EXT``) count as the earlier run's and are not carried. Temporary ``.part`` files of
killed writers inside ``OUT`` never reach it (they live in the staging folder).
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
from pathlib import Path

from ..errors import OutputError, OutputExistsError, os_error_message
from .lock import OutputLock, short_name

__all__ = ["FolderTransaction", "FileTransaction", "MANIFEST", "read_manifest",
           "rewrite_in_folder",
           "kept_name", "recover", "real_target", "check_folder", "abort_all"]

MANIFEST = ".basinkit-manifest.json"
JOURNAL = ".basinkit-staging.json"


# transactions begun and not yet committed or aborted in this process
ACTIVE: list = []


def _forget(tx):
    ACTIVE[:] = [t for t in ACTIVE if t is not tx]


def abort_all():
    """Abort every transaction still open in this process (the command line calls it after
    an error, so that no lock or staging folder outlives the command)."""
    while ACTIVE:
        ACTIVE[-1].abort()


def _hash(path) -> str:
    from .hashing import file_sha256

    return file_sha256(path)


def _containers(target: Path):
    """Staging folders of runs into ``target`` (this process's included), by pid."""
    prefix = f".{short_name(target)}.staging-"
    out = []
    with contextlib.suppress(OSError):
        for p in target.parent.iterdir():
            if p.name.startswith(prefix) and p.is_dir() and not p.is_symlink():
                pid = p.name[len(prefix):]
                if (p / JOURNAL).is_file():
                    out.append((pid, p))
    return out


def _aside(target: Path, pid) -> Path:
    return target.parent / f".{short_name(target)}.old-{pid}"


def _container(target: Path, pid) -> Path:
    return target.parent / f".{short_name(target)}.staging-{pid}"


def read_manifest(folder) -> dict:
    """``{name: SHA-256 or None}`` of the files a basinkit run recorded in ``folder``: its
    manifest; for folders written before manifests, ``provenance.json``'s ``files`` (with
    hashes) and the step records' ``files`` lists (names only: None, never deleted)."""
    folder = Path(folder)
    rec: dict = {}
    man = _read_json(folder / MANIFEST)
    if isinstance(man, dict) and isinstance(man.get("files"), dict):
        return {str(k): (str(v) if isinstance(v, str) else None)
                for k, v in man["files"].items()}
    for name in ("catchments.json", "channels.json", "profiles.json", "morphometry.json",
                 "flow.json", "flow/flow.json"):
        meta = _read_json(folder / name)
        if isinstance(meta, dict) and isinstance(meta.get("files"), (list, dict)):
            sub = str(Path(name).parent) if "/" in name else ""
            files = meta["files"].values() if isinstance(meta["files"], dict) \
                else meta["files"]
            for f in files:
                if isinstance(f, str):
                    rec.setdefault(f"{sub}/{f}" if sub else f, None)
    prov = _read_json(folder / "provenance.json")
    if isinstance(prov, dict) and prov.get("software") == "basinkit" and \
            isinstance(prov.get("files"), dict):
        rec.update({str(k): (str(v) if isinstance(v, str) else None)
                    for k, v in prov["files"].items()})
    return rec


@contextlib.contextmanager
def rewrite_in_folder(folder, name):
    """Rewrite one file of a committed output folder (``basinkit report RUN`` rewriting
    ``report.html``) under the folder's lock, and record its new SHA-256 in the folder's
    manifest, so that a later ``--overwrite`` still knows the file as basinkit's.

    Yields the path to write (the caller writes it atomically). A folder without a
    manifest (not written by a transaction) is left without one.
    """
    folder = Path(folder)
    lock = OutputLock(folder).acquire()
    try:
        yield folder / name
        man = _read_json(folder / MANIFEST)
        if isinstance(man, dict) and isinstance(man.get("files"), dict) and \
                (folder / name).is_file():
            man["files"][str(name)] = _hash(folder / name)
            man["files"] = dict(sorted(man["files"].items()))
            _write_json(folder / MANIFEST, man)
    finally:
        lock.release()


def _read_json(path):
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _is_basinkit_record(path) -> bool:
    """A JSON file that basinkit wrote (its own record, not worth keeping as the user's)."""
    meta = _read_json(path)
    return isinstance(meta, dict) and meta.get("software") == "basinkit"


def kept_name(rel: str, taken) -> str:
    """A free name for a kept file whose name the new run uses: ``a/b.kept.csv``,
    ``a/b.kept-2.csv``, ..."""
    p = Path(rel)
    stem, suffix = (p.stem, p.suffix) if p.suffix else (p.name, "")
    for i in range(1, 10000):
        tag = "kept" if i == 1 else f"kept-{i}"
        cand = (p.parent / f"{stem}.{tag}{suffix}").as_posix()
        if cand not in taken:
            return cand
    raise OutputError(f"cannot find a free name to keep {rel!r}")


def _walk(root: Path):
    """``(relative posix name, path)`` of every file (and symlink) under ``root``, and the
    folders, bottom-up."""
    files, dirs = [], []
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        d = Path(dirpath)
        for n in dirnames:
            if (d / n).is_symlink():
                filenames.append(n)
            else:
                dirs.append(d / n)
        for n in filenames:
            files.append(((d / n).relative_to(root).as_posix(), d / n))
    return sorted(files), sorted(dirs, key=lambda p: len(p.parts), reverse=True)


def _link_or_copy(src: Path, dst: Path):
    dst.parent.mkdir(parents=True, exist_ok=True)
    if src.is_symlink():
        os.symlink(os.readlink(src), dst)
        return
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def _same(a: Path, b: Path) -> bool:
    try:
        if a.is_symlink() or b.is_symlink():
            return a.is_symlink() and b.is_symlink() and os.readlink(a) == os.readlink(b)
        if os.path.samefile(a, b):
            return True
        return a.stat().st_size == b.stat().st_size and _hash(a) == _hash(b)
    except OSError:
        return False


def _stat_key(p: Path):
    st = p.lstat()
    return [st.st_size, st.st_mtime_ns]


def _remove_empty_dirs(root: Path):
    _, dirs = _walk(root)
    for d in dirs:
        with contextlib.suppress(OSError):
            d.rmdir()
    with contextlib.suppress(OSError):
        root.rmdir()


def _drop_staging(container: Path):
    """Delete a staging folder of ours (it holds the journal); nothing else is deleted."""
    if container.is_dir() and (container / JOURNAL).is_file():
        shutil.rmtree(container, ignore_errors=True)


def _finish_old(aside: Path, target: Path, journal: dict) -> list:
    """Delete from the old copy the recorded unedited outputs and the files carried into
    the new folder; move anything else into ``target``. Returns ``[(name, kept as)]`` of the
    files moved."""
    if not aside.is_dir():
        return []
    recorded = read_manifest(aside)
    drop = journal.get("drop") or {}
    carried = journal.get("carried") or {}
    moved = []
    files, _ = _walk(aside)
    for rel, p in files:
        if rel == MANIFEST:
            p.unlink()
            continue
        if rel in drop:
            if _stat_key(p) == drop[rel] or (recorded.get(rel) and _hash(p) == recorded[rel]):
                p.unlink()
                continue
        if rel in carried and _same(p, target / carried[rel]):
            p.unlink()
            continue
        # the user's (e.g. put there during the swap): into the new folder, never deleted
        taken = {r for r, _ in _walk(target)[0]}
        dest = rel if rel not in taken else kept_name(rel, taken)
        (target / dest).parent.mkdir(parents=True, exist_ok=True)
        os.rename(p, target / dest)
        moved.append((rel, dest))
    _remove_empty_dirs(aside)
    return moved


def recover(target) -> list:
    """Finish or undo what killed runs left beside ``target`` (call with the lock held).
    Returns lines describing what was done."""
    target = Path(target)
    done = []
    for pid, container in _containers(target):
        journal = _read_json(container / JOURNAL) or {}
        aside = _aside(target, pid)
        staged = container / target.name
        new = journal.get("new_manifest")
        swapped = bool(new) and (target / MANIFEST).is_file() and \
            _hash(target / MANIFEST) == new
        if not swapped:
            # the old run is in target or, killed between two renames, in the old copy
            if not target.exists() and aside.is_dir():
                os.rename(aside, target)
                done.append(f"restored {target} from an interrupted run")
            _drop_staging(container)
            done.append(f"removed the staging folder {container.name} of an interrupted run")
            continue
        old = staged if staged.is_dir() else aside  # exchanged, or renamed aside
        for rel, dest in _finish_old(old, target, journal):
            done.append(f"kept {rel} as {target / dest}")
        if not old.exists():
            _drop_staging(container)
            done.append(f"finished the swap of an interrupted run ({container.name})")
    return done


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one atomic step (Linux ``renameat2(RENAME_EXCHANGE)``); False
    where the system cannot."""
    import ctypes

    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return False
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p,
                   ctypes.c_uint]
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.EPERM):
        return False
    raise OSError(err, os.strerror(err), str(b))


class _Staged:
    """What the folder and file transactions share: begin under the lock, abort."""

    def _begin(self, prepare, doing):
        """Take the lock and run ``prepare``; on any failure abort (an OSError becomes one
        line saying what could not be done)."""
        self.lock.acquire()
        try:
            prepare()
        except OSError as exc:
            self.abort()
            if isinstance(exc, OutputError):
                raise
            raise OutputError(os_error_message(exc, exc.filename or self.container,
                                               doing)) from None
        except BaseException:
            self.abort()
            raise
        self.active = True
        ACTIVE.append(self)
        return self

    def abort(self):
        """Drop the staging folder and release the lock; the target is not touched."""
        self.active = False
        _forget(self)
        with contextlib.suppress(OSError):
            _drop_staging(self.container)
        self.lock.release()


class FolderTransaction(_Staged):
    """Write a folder beside its target and swap it in when complete.

    Parameters
    ----------
    target : str or Path
        The output folder.
    overwrite : bool
        Allow a target that holds files.

    Examples
    --------
    >>> tx = FolderTransaction("out", overwrite=False).begin()
    >>> _ = (tx.staging / "a.txt").write_text("new")
    >>> kept = tx.commit()
    >>> sorted(p.name for p in Path("out").iterdir())
    ['.basinkit-manifest.json', 'a.txt']
    """

    def __init__(self, target, overwrite: bool = False):
        self.target = real_target(target)
        self.overwrite = bool(overwrite)
        self.lock = OutputLock(self.target)
        self.container = _container(self.target, os.getpid())
        self.recovered: list = []
        self.kept: list = []
        self.active = False

    @property
    def staging(self) -> Path:
        """The folder the run writes into."""
        return self.container / self.target.name

    def begin(self) -> "FolderTransaction":
        """Take the lock, clean up after killed runs, check the target, create the staging
        folder."""
        _make_parent(self.target)
        return self._begin(self._prepare, "create the staging folder")

    def _prepare(self):
        self.recovered = recover(self.target)
        check_folder(self.target, self.overwrite)
        _drop_staging(self.container)
        self.container.mkdir()
        _write_json(self.container / JOURNAL, {"target": str(self.target),
                                               "pid": os.getpid(), "state": "writing"})
        self.staging.mkdir()

    def commit(self, manifest: dict | None = None) -> list:
        """Write the manifest, carry the kept files in, swap, clean the old copy.

        Parameters
        ----------
        manifest : dict, optional
            ``{name: SHA-256}`` of the run's files (hashed here when not given).

        Returns
        -------
        list of (name, kept as, reason)
            Files of the old folder kept (the user's own, outputs edited since).
        """
        if not self.active:
            raise RuntimeError("commit() without begin()")
        staging, target = self.staging, self.target
        try:
            if manifest is None:
                manifest = {rel: _hash(p) for rel, p in _walk(staging)[0]}
            _write_json(staging / MANIFEST, {
                "software": "basinkit",
                "about": "the files this basinkit run wrote, with their SHA-256; a later "
                         "run with --overwrite removes only these, and only while unchanged",
                "files": dict(sorted(manifest.items()))})
            journal = {"target": str(target), "pid": os.getpid(), "state": "writing",
                       "carried": {}, "drop": {}}
            if target.is_dir():
                journal.update(self._carry(target, staging))
            journal["state"] = "swapping"
            journal["new_manifest"] = _hash(staging / MANIFEST)
            _write_json(self.container / JOURNAL, journal)
        except BaseException as exc:
            self.abort()
            if isinstance(exc, OSError) and not isinstance(exc, OutputError):
                raise OutputError(os_error_message(exc, exc.filename or staging)) from None
            raise
        aside = _aside(target, os.getpid())
        try:
            if target.exists():
                if _exchange(staging, target):  # one atomic step (Linux renameat2)
                    aside = staging
                else:
                    os.rename(target, aside)
                    try:
                        os.rename(staging, target)
                    except BaseException:
                        os.rename(aside, target)
                        raise
            else:
                os.rename(staging, target)
        except BaseException as exc:
            self.abort()
            if isinstance(exc, OSError):
                raise OutputError(os_error_message(exc, target, "replace")) from None
            raise
        # the new run is in place; what follows only tidies up
        self.active = False
        _forget(self)
        try:
            moved = _finish_old(aside, target, journal)
            self.kept += [(rel, dest, "added during the run") for rel, dest in moved]
            if not aside.exists():
                _drop_staging(self.container)
        except OSError:
            pass  # the next run finishes it (recover)
        finally:
            self.lock.release()
        return self.kept

    def _carry(self, target: Path, staging: Path) -> dict:
        """Link the old folder's files that are not unedited recorded outputs into the
        staging folder; return the journal's ``carried`` and ``drop``."""
        recorded = read_manifest(target)
        written = {rel for rel, _ in _walk(staging)[0]}
        taken = set(written)
        carried, drop = {}, {}
        files, dirs = _walk(target)
        for rel, p in files:
            h = recorded.get(rel)
            ours = rel == MANIFEST or (h is not None and not p.is_symlink()
                                       and _hash(p) == h)
            if not ours and _is_part_file(rel):
                ours = True  # a temporary file of a writer killed by an older basinkit
            if not ours and h is None and (rel in recorded or rel == "provenance.json") \
                    and rel.endswith(".json") and _is_basinkit_record(p):
                ours = True  # an older basinkit's own record (it kept no hashes)
            if ours:
                drop[rel] = _stat_key(p)
                continue
            reason = ("edited since basinkit wrote it" if rel in recorded and h
                      else "recorded without a hash by an older basinkit" if rel in recorded
                      else "not written by basinkit")
            dest = rel
            if rel in taken or any(a in taken for a in _ancestors(rel)):
                dest = kept_name(rel, taken)
            taken.add(dest)
            _link_or_copy(p, staging / dest)
            carried[rel] = dest
            self.kept.append((rel, dest, reason))
        for d in dirs:  # the user's empty folders
            rel = d.relative_to(target).as_posix()
            if not (staging / rel).exists() and not any(d.iterdir()):
                (staging / rel).mkdir(parents=True, exist_ok=True)
        return {"carried": carried, "drop": drop}


def _is_part_file(rel: str) -> bool:
    """A temporary file of :func:`basinkit.io.writers.atomic_path` (``.NAME.XXXXXXXX.part``
    plus the suffix), left by a killed writer."""
    import re

    return re.fullmatch(r"\..+\.[a-z0-9_]{8}\.part(\.[A-Za-z0-9]+)?",
                        rel.rsplit("/", 1)[-1]) is not None


def _ancestors(rel: str):
    parts = rel.split("/")[:-1]
    return ["/".join(parts[:i + 1]) for i in range(len(parts))]


def _make_parent(target: Path):
    """Create the folder an output goes into (as the user named it)."""
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        if isinstance(exc, FileExistsError):  # a file where a folder is needed
            exc = NotADirectoryError(errno.ENOTDIR, "a file of that name exists",
                                     exc.filename)
        raise OutputError(os_error_message(exc, exc.filename or target.parent,
                                           "create the folder")) from None


def _write_json(path: Path, obj):
    from .writers import write_json

    write_json(path, obj)


def real_target(target) -> Path:
    """The target as an absolute path (a symlink to a folder followed), refused when it
    is the current folder or one above it (it cannot be swapped)."""
    p = Path(os.path.abspath(target))
    try:
        if p.is_symlink():
            p = Path(os.path.realpath(p))
    except OSError as exc:
        raise OutputError(os_error_message(exc, target, "use the output")) from None
    try:
        cwd, rp = Path.cwd().resolve(), p.resolve()
    except OSError:
        return p
    if rp == cwd or rp in cwd.parents:
        raise OutputError(f"the output {str(target)!r} is the current folder or holds it; "
                          "choose a new folder for the outputs (e.g. -o results)")
    return p


def check_folder(target: Path, overwrite: bool):
    """Refuse a file in the way, or a folder holding files unless ``overwrite``."""
    try:
        if target.exists() or target.is_symlink():
            if not target.is_dir():
                raise OutputExistsError(f"{str(target)!r} exists and is not a folder; "
                                        "choose another output")
            if os.path.ismount(target):
                raise OutputError(f"{str(target)!r} is a mount point, which cannot be "
                                  "swapped for a new run; choose a folder inside it")
            if not overwrite and any(target.iterdir()):
                raise OutputExistsError(f"the folder {str(target)!r} already holds files; "
                                        "choose another output or pass --overwrite to "
                                        "replace them")
    except (OutputExistsError, OutputError):
        raise
    except OSError as exc:
        raise OutputError(os_error_message(exc, target, "use the output folder")) from None


class FileTransaction(_Staged):
    """Write one or more output files beside their names and rename them into place.

    Parameters
    ----------
    targets : list of str or Path
        The output files (e.g. a raster and its JSON record).
    overwrite : bool
        Allow existing files (replaced; an existing file that ``record`` does not list
        with its current hash is kept under a ``.kept`` name).
    record : str, Path or True, optional
        The JSON record among the targets (True: the last one). At commit its ``files``
        gets ``{name: SHA-256}`` of the other targets; in an earlier run's record it says
        which files that run wrote.
    """

    def __init__(self, targets, overwrite: bool = False, record=None):
        self.given = [Path(t) for t in targets]
        self.targets = [Path(os.path.abspath(t)) for t in targets]
        self.overwrite = bool(overwrite)
        if record is True:
            record = self.targets[-1]
        self.record = Path(os.path.abspath(record)) if record is not None else None
        self.lock = OutputLock(self.targets[0])
        self.container = _container(self.targets[0], os.getpid())
        self.kept: list = []
        self.active = False

    def check(self, lock: bool = True) -> "FileTransaction":
        """Refuse a folder in the way, (unless ``overwrite``) an existing file, or (with
        ``lock``) a run writing the same output now."""
        if lock:
            self.lock.check()
        for t in self.targets:
            try:
                if t.is_dir():
                    raise OutputExistsError(f"{str(t)!r} is a folder; give a file name "
                                            "for the output")
                if t.exists() and not self.overwrite:
                    raise OutputExistsError(f"{str(t)!r} already exists; choose another "
                                            "output or pass --overwrite to replace it")
                if len(t.name.encode("utf-8", "surrogateescape")) > 255:
                    raise OutputError(f"cannot write {str(t)!r}: the name is too long; "
                                      "choose a shorter one")
            except OutputExistsError:
                raise
            except OSError as exc:
                if isinstance(exc, OutputError):
                    raise
                raise OutputError(os_error_message(exc, t)) from None
        return self

    def staged(self, target) -> Path:
        """Where to write ``target`` during the run."""
        return self.container / Path(target).name

    def staged_paths(self) -> list:
        """Where to write each target during the run (in the order given)."""
        return [self.staged(t) for t in self.targets]

    def begin(self) -> "FileTransaction":
        """Check the targets, take the lock, drop killed runs' staging folders, create
        this run's."""
        self.check()
        _make_parent(self.targets[0])
        return self._begin(self._prepare, "write")

    def _prepare(self):
        for pid, c in _containers(self.targets[0]):
            _drop_staging(c)
        self.check(lock=False)
        self.container.parent.mkdir(parents=True, exist_ok=True)
        self.container.mkdir()
        _write_json(self.container / JOURNAL, {"targets": [str(t) for t in self.targets],
                                               "pid": os.getpid()})

    def commit(self, reporter=None) -> list:
        """Rename the staged files onto their names (existing files not recorded by the
        earlier run are kept under ``.kept`` names first, listed in :attr:`kept` and told
        to ``reporter``). Returns the targets."""
        recorded = {}
        if self.record is not None and self.record.is_file():
            meta = _read_json(self.record)
            if isinstance(meta, dict) and isinstance(meta.get("files"), dict):
                recorded = meta["files"]
        try:
            if self.record is not None and self.staged(self.record).is_file():
                new = _read_json(self.staged(self.record))
                if isinstance(new, dict):
                    new["files"] = {t.name: _hash(self.staged(t)) for t in self.targets
                                    if t != self.record and self.staged(t).is_file()}
                    _write_json(self.staged(self.record), new)
            for t in self.targets:
                if not t.exists():
                    continue
                h = recorded.get(t.name)
                ours = (h is not None and _hash(t) == h) or (
                    t == self.record and _is_basinkit_record(t))
                if not ours:
                    taken = {p.name for p in t.parent.iterdir()}
                    dest = t.parent / kept_name(t.name, taken)
                    os.rename(t, dest)
                    self.kept.append((str(t), str(dest), "edited since basinkit wrote it"
                                      if h else "not written by basinkit"))
            for t in self.targets:
                os.replace(self.staged(t), t)
        except OSError as exc:
            self.abort()
            if isinstance(exc, OutputError):
                raise
            raise OutputError(os_error_message(exc, exc.filename)) from None
        self.abort()  # the staging folder is empty but for the journal; release the lock
        if reporter is not None:
            for name, kept, why in self.kept:
                reporter.warn(f"kept {name} as {kept} ({why})")
        return list(self.given)

    def __enter__(self):
        return self.begin()

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.commit()
        else:
            self.abort()
        return False
