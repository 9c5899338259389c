"""Recording into the ledger safely: an advisory lock, a merge with the file as it is now,
an atomic replace.

Writing is safe against concurrent recordings and kills: :func:`record` takes an
advisory lock beside the ledger (``.<name>.lock``), removes the temporary files a
killed writer left (``.<name>.<random>.tmp``), re-reads the file as it is now,
merges and replaces it atomically (:func:`write_atomic`). Symlinks are written
through: the link stays a link and its target gets the text. The file's layout
and reading are :mod:`pytest_ratefloor.ledger`'s. This module knows nothing of
pytest.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import stat
import tempfile
import time
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path
from types import ModuleType

from pytest_ratefloor.errors import LedgerError, UnreadableLedgerError
from pytest_ratefloor.ledger import UNREADABLE_SUFFIX, Environment, Ledger
from pytest_ratefloor.measurement import Measurement

_fcntl: ModuleType | None
try:
    import fcntl as _fcntl_module
except ImportError:  # pragma: no cover - Windows: O_EXCL lock files instead
    _fcntl = None
else:
    _fcntl = _fcntl_module

#: Longest :func:`record` waits for another process's lock on the same ledger (seconds).
LOCK_TIMEOUT = 60.0


def _resolved(path: Path) -> Path:
    """``path`` with every symlink resolved, so writes go through a link to its target."""
    return Path(os.path.realpath(path))


def write_atomic(path: Path, text: str) -> None:
    """Replace ``path`` with ``text`` so that a reader only ever sees old or new content.

    A symlink is written through: its target is replaced and the link stays.
    The text goes to a temporary file ``.<name>.<random>.tmp`` in the same folder, is
    flushed and fsynced, then ``os.replace`` renames it over ``path`` (atomic on POSIX
    and Windows); the folder is fsynced so the rename survives a power cut. If anything
    fails the temporary file is removed and ``path`` is untouched.
    """
    path = _resolved(Path(path))
    folder = path.parent
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    tmp = Path(tmp_name)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        # mkstemp creates 0600; a committed file keeps its mode or gets the umask default
        try:
            mode = stat.S_IMODE(path.stat().st_mode)
        except FileNotFoundError:
            umask = os.umask(0)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    _fsync_folder(folder)


def _fsync_folder(folder: Path) -> None:
    if os.name != "posix":  # pragma: no cover - Windows cannot open folders
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover - some file systems refuse
        pass
    finally:
        os.close(fd)


def lock_path(path: Path) -> Path:
    """The lock file of the ledger at ``path``: ``.<name>.lock`` beside its (resolved) target."""
    target = _resolved(Path(path))
    return target.with_name(f".{target.name}.lock")


def stale_temporaries(path: Path) -> list[Path]:
    """The temporary files ``.<name>.<random>.tmp`` of the ledger at ``path`` (sorted).

    Only a writer holding the ledger's lock has one open, so under the lock
    every one of them was left by a killed writer.
    """
    target = _resolved(Path(path))
    pattern = re.compile(rf"\.{re.escape(target.name)}\.[A-Za-z0-9_]+\.tmp")
    try:
        with os.scandir(target.parent) as entries:
            return sorted(Path(e.path) for e in entries
                          if pattern.fullmatch(e.name) and e.is_file(follow_symlinks=False))
    except OSError:
        return []


def _removed(paths: Iterable[Path]) -> list[Path]:
    """Remove ``paths``; the ones actually removed (a file that will not go is left)."""
    out = []
    for p in paths:
        with contextlib.suppress(OSError):
            p.unlink()
            out.append(p)
    return out


def _write_pid(fd: int) -> None:
    os.ftruncate(fd, 0)
    os.write(fd, f"{os.getpid()}\n".encode())


def _try_lock(lock: Path) -> int | None:
    """One attempt at the lock: the locked descriptor, or ``None`` if another holds it.

    With ``flock``: open (creating), lock, then check the path still names the
    locked file — a holder unlinks it before unlocking, so a lock taken on a
    removed file is worthless and is dropped. Without ``fcntl`` (Windows):
    create the file exclusively.
    """
    if _fcntl is None:  # pragma: no cover - exercised by monkeypatching in the tests
        try:
            fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        except FileExistsError:
            return None
        except PermissionError:  # Windows, while the holder deletes it
            if lock.exists():
                return None
            raise
    else:
        fd = os.open(lock, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o666)
        try:
            _fcntl.flock(fd, _fcntl.LOCK_EX | _fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            return None
        except BaseException:
            os.close(fd)
            raise
        held = os.fstat(fd)
        try:
            now: os.stat_result | None = os.stat(lock)
        except FileNotFoundError:
            now = None
        if now is None or (now.st_dev, now.st_ino) != (held.st_dev, held.st_ino):
            os.close(fd)
            return None
    try:
        _write_pid(fd)
    except BaseException:
        _release(lock, fd)
        raise
    return fd


def _release(lock: Path, fd: int) -> None:
    """Remove the lock file and unlock (with ``flock``: remove first, while still holding)."""
    if _fcntl is None:  # pragma: no cover - Windows cannot remove an open file
        os.close(fd)
        with contextlib.suppress(OSError):
            lock.unlink()
        return
    try:
        with contextlib.suppress(FileNotFoundError):
            lock.unlink()
    finally:
        os.close(fd)


def _holder(lock: Path) -> str:
    """Who holds ``lock``, from the process id its holder wrote into it."""
    with contextlib.suppress(OSError, ValueError):
        fd = os.open(lock, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        try:
            return f"process {int(os.read(fd, 32).decode('ascii').strip())}"
        finally:
            os.close(fd)
    return "another process"


@contextlib.contextmanager
def ledger_lock(path: Path, timeout: float = LOCK_TIMEOUT) -> Iterator[Path]:
    """Hold the advisory lock of the ledger at ``path``; yields the resolved target.

    Polls for up to ``timeout`` seconds. The lock file ``.<name>.lock`` holds the
    holder's process id and is removed on release.

    :raises LedgerError: the lock is still held after ``timeout`` (names the lock
        file and the holder's process id).
    """
    target = _resolved(Path(path))
    lock = lock_path(target)
    lock.parent.mkdir(parents=True, exist_ok=True)
    deadline = time.monotonic() + max(0.0, timeout)
    pause = 0.001
    while (fd := _try_lock(lock)) is None:
        if time.monotonic() >= deadline:
            raise LedgerError(
                f"{lock}: ledger {target.name} is locked by {_holder(lock)}; gave up after "
                f"{timeout:g} s (a lock file whose process is gone may be deleted)"
            )
        time.sleep(pause)
        pause = min(2 * pause, 0.05)
    try:
        yield target
    finally:
        _release(lock, fd)


@dataclass(frozen=True)
class Recording:
    """What :func:`record` wrote."""

    #: the ledger as written: the file's entries merged with this run's
    ledger: Ledger
    #: the file written: the given path with symlinks resolved
    target: Path
    #: where an unreadable file was copied before it was replaced, if it was
    unreadable_copy: Path | None = None
    #: temporary files of killed writers that were removed
    removed_temporaries: tuple[Path, ...] = ()


def record(path: Path, measurements: Iterable[Measurement], *,
           replace_unreadable: bool = False, environment: Environment | None = None,
           lock_timeout: float = LOCK_TIMEOUT) -> Recording:
    """Merge ``measurements`` into the ledger at ``path``, safely against other writers.

    Under the ledger's lock (:func:`ledger_lock`): removes stale temporary files,
    reads the file as it is now, keeps its entries except those this run measured,
    and replaces it atomically (:func:`write_atomic`; a symlink is written through).

    :param replace_unreadable: if the current file is a regular file that cannot be
        read as a ledger, keep a copy (:func:`keep_copy`) and write only these cases.
    :param environment: the ``recorded_with`` block (default: :meth:`Environment.current`).
    :raises UnreadableLedgerError: the current file cannot be read, and
        ``replace_unreadable`` is false or it is not a regular file.
    :raises NewerLedgerError: the current file has a newer schema (never replaced).
    :raises LedgerError: the lock was not obtained within ``lock_timeout`` seconds.
    :raises OSError: the file or its lock cannot be written.
    """
    cases = list(measurements)
    env = environment or Environment.current()
    with ledger_lock(path, lock_timeout) as target:
        removed = _removed(stale_temporaries(target))
        copy = None
        try:
            current = Ledger.load(target)
        except UnreadableLedgerError:
            if not replace_unreadable or not os.path.isfile(target):
                raise
            copy = keep_copy(target)
            current = Ledger(path=target)
        ledger = current.merged(cases, env)
        write_atomic(target, ledger.dumps())
    return Recording(ledger=replace(ledger, exists=True), target=target,
                     unreadable_copy=copy, removed_temporaries=tuple(removed))


def clean_stale_temporaries(path: Path) -> list[Path]:
    """Remove the temporary files killed writers left beside the ledger at ``path``.

    Takes the ledger's lock without waiting: if another process holds it (it may be
    writing one of them) nothing is removed. Never raises for an unwritable or
    missing folder. Returns the files removed.
    """
    target = _resolved(Path(path))
    if not stale_temporaries(target):
        return []
    lock = lock_path(target)
    try:
        fd = _try_lock(lock)
    except OSError:
        return []
    if fd is None:
        return []
    try:
        return _removed(stale_temporaries(target))
    finally:
        _release(lock, fd)


def keep_copy(path: Path) -> Path:
    """Copy an unreadable ledger to ``<name>.unreadable`` (numbered if taken); return the copy.

    Used before a recording replaces a ledger that could not be read, so the
    user's bytes survive for repair by hand.
    """
    target = path.with_name(path.name + UNREADABLE_SUFFIX)
    number = 1
    while target.exists():
        target = path.with_name(f"{path.name}{UNREADABLE_SUFFIX}.{number}")
        number += 1
    shutil.copy2(path, target)
    return target
