"""Portable advisory file locks for ``<db>.lock`` (layer 3 helper; no third-party dependency).

POSIX: ``fcntl.flock`` (a whole-file lock the OS releases when the process dies). Windows:
``msvcrt.locking`` on the file's first byte (also released when the handle's process ends). With
neither (an exotic platform) the module still imports, and taking a lock raises ``OSError``, so
``screening.runner`` imports everywhere and only a run needs a lock.

The lock file's text (who holds it) is written by the holder; on Windows a byte-range lock keeps
other processes from reading the locked byte, so a refused run names "another process" there.
"""

from __future__ import annotations

import os
from typing import IO, Any

_fcntl: Any
_msvcrt: Any
try:
    import fcntl as _fcntl
except ImportError:  # Windows
    _fcntl = None
try:
    import msvcrt as _msvcrt
except ImportError:  # POSIX
    _msvcrt = None

BACKEND = "fcntl" if _fcntl is not None else "msvcrt" if _msvcrt is not None else "none"


def _no_backend() -> OSError:
    return OSError("file locking is not available on this platform (neither fcntl nor msvcrt)")


def try_lock(fh: IO, *, shared: bool = False) -> bool:
    """Take the lock on ``fh`` without waiting: True when taken, False when another process holds it.

    ``shared`` (POSIX) takes a shared lock, which only tests for an exclusive holder; Windows has
    exclusive byte locks only.
    """
    if _fcntl is not None:
        try:
            _fcntl.flock(fh, (_fcntl.LOCK_SH if shared else _fcntl.LOCK_EX) | _fcntl.LOCK_NB)
        except BlockingIOError:
            return False
        return True
    if _msvcrt is not None:
        pos = fh.tell()
        try:
            fh.seek(0)
            _msvcrt.locking(fh.fileno(), _msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        finally:
            fh.seek(pos, os.SEEK_SET)
        return True
    raise _no_backend()


def unlock(fh: IO) -> None:
    """Release a lock taken by :func:`try_lock` on ``fh``."""
    if _fcntl is not None:
        _fcntl.flock(fh, _fcntl.LOCK_UN)
        return
    if _msvcrt is not None:
        pos = fh.tell()
        try:
            fh.seek(0)
            _msvcrt.locking(fh.fileno(), _msvcrt.LK_UNLCK, 1)
        finally:
            fh.seek(pos, os.SEEK_SET)
        return
    raise _no_backend()
