"""The run lock on ``<db>.lock`` and opening the database while other processes briefly hold it."""

from __future__ import annotations

import datetime as _dt
import os
import time
from contextlib import contextmanager
from pathlib import Path
from typing import TextIO

from .. import locking
from ..errors import LockedError, StoreError
from ..store import Store


class Lock:
    """An exclusive, non-blocking advisory lock on ``<db>.lock`` (released by the OS if we die)."""

    def __init__(self, path: str):
        self.path = path
        self.fh: TextIO | None = None

    def __enter__(self):
        Path(self.path).parent.mkdir(parents=True, exist_ok=True)
        try:
            self.fh = open(self.path, "a+")
        except OSError as exc:
            raise StoreError(f"{self.path}: cannot create the lock file ({exc.strerror or exc})") from None
        try:
            taken = locking.try_lock(self.fh)  # fcntl on POSIX, msvcrt on Windows (screening/locking.py)
        except OSError as exc:
            self.fh.close()
            raise StoreError(f"{self.path}: cannot lock ({exc})") from None
        if not taken:
            self.fh.seek(0)
            try:
                holder = self.fh.read().strip() or "another process"
            except OSError:  # Windows: the holder's locked byte cannot be read
                holder = "another process"
            self.fh.close()
            raise LockedError(
                f"another ddscreen run holds the lock {self.path} ({holder}); nothing was changed"
            ) from None
        self.fh.seek(0)
        self.fh.truncate()
        self.fh.write(f"pid {os.getpid()} since {_dt.datetime.now().isoformat(timespec='seconds')}")
        self.fh.flush()
        return self

    def __exit__(self, *exc):
        assert self.fh is not None  # opened by __enter__
        try:
            self.fh.seek(0)
            self.fh.truncate()
            locking.unlock(self.fh)
        finally:
            self.fh.close()


READ_WAIT_S = 20.0  # how long status/history wait for a run's brief hold on the database
WRITE_WAIT_S = 5.0  # how long a run waits for a reader's (status, history) brief hold on it


def open_store(db_path, *, read_only: bool = False, wait_s: float = WRITE_WAIT_S, memory_mb: int = 0) -> Store:
    """Open the database, waiting while another process holds it for a moment.

    DuckDB lets one process at a time open a database file; ``status`` and ``history``
    hold it for milliseconds, a run only while it loads and records. A holder that does not
    let go within ``wait_s`` is reported (StoreError: "in use by another program").
    """
    deadline = time.monotonic() + wait_s
    while True:
        try:
            return Store(db_path, read_only=read_only, memory_mb=memory_mb)
        except StoreError as exc:
            if "in use" not in str(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.1)


@contextmanager
def read_store(db_path: str):
    """The database opened read-only, waiting while a run holds it for a moment.

    A run holds the database only while it loads inputs and while it records its results
    (seconds); status and history wait for that, up to ``READ_WAIT_S``.
    """
    if not Path(db_path).exists():
        raise StoreError(f"{db_path}: no database here yet (run ddscreen run first)")
    store = open_store(db_path, read_only=True, wait_s=READ_WAIT_S)
    try:
        yield store
    finally:
        store.close()


def lock_held(path: str) -> bool:
    """Whether a run holds the lock file (tested without creating it)."""
    try:
        fh = open(path)
    except OSError:
        return False
    try:
        return not locking.try_lock(fh, shared=True)
    except OSError:  # no lock on this platform: nothing can hold one
        return False
    finally:
        fh.close()
