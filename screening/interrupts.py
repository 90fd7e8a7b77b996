"""SIGINT and SIGTERM as an exception, so that a stopped run cleans up after itself.

``stop_on_signals()`` is a context manager. While it is active, the first SIGINT or SIGTERM
raises :class:`screening.errors.Interrupted` in the main thread (Python runs signal handlers
there only) and sets :data:`stop_event` for other threads (the sheet renderer's own thread
checks it). Every later SIGINT or SIGTERM is only counted: the clean-up that the exception
sets off (temporary folder removed, run recorded as interrupted) is not cut short by a second
Ctrl-C or a second ``kill``. On leaving, the handlers that were there before come back; with
``ignore_after=True`` (the command line, whose process exits right after) both signals are
ignored instead, so that one arriving while the interpreter shuts down cannot turn a finished
command into a silent death. Contexts nest: only the outermost one installs and
restores. Outside the main thread it does nothing (the caller's arrangement stands), and a
signal the process ignored when the context was entered (``nohup``, a background job) stays
ignored.

The exception maps to the exit code in one place (``Interrupted.exit_code``: 130 for SIGINT,
143 for SIGTERM, the shell's 128 + signal number); the CLI prints it as its one line.

``pause_point(name)`` is a test hook (DEVELOPERS.md "Test hooks"): with
``DDSCREEN_PAUSE_AT=<name>:<seconds>[,<name>:<seconds>...]`` the process waits there, so a test
can send a signal at a known point; ``DDSCREEN_PAUSE_MARK=<file>`` gets a line ``<name> <pid>``
when a pause starts.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator
from types import FrameType
from typing import Any

from .errors import Interrupted

SIGNALS = (signal.SIGINT, signal.SIGTERM)

stop_event = threading.Event()  # set at the first signal; for threads other than the main one
_stopped: int | None = None  # the first signal's number while a context is active
_again: list[int] = []  # signals received after the first (ignored during clean-up)
_depth = 0


def _handler(signum, frame) -> None:
    global _stopped
    if _stopped is not None:  # clean-up under way: note it, do not raise again
        _again.append(signum)
        return
    _stopped = signum
    stop_event.set()
    raise Interrupted(signum)


@contextlib.contextmanager
def stop_on_signals(*, ignore_after: bool = False) -> Iterator[None]:
    """Turn SIGINT and SIGTERM into :class:`Interrupted` for the duration of the block."""
    global _depth, _stopped
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    outer = _depth == 0
    old: dict[signal.Signals, Callable[[int, FrameType | None], Any] | int | None] = {}
    if outer:
        for s in SIGNALS:
            old[s] = signal.getsignal(s)
            if old[s] is not signal.SIG_IGN:
                signal.signal(s, _handler)
    _depth += 1
    try:
        yield
    finally:
        _depth -= 1
        if outer:
            for s, h in old.items():
                if ignore_after:
                    signal.signal(s, signal.SIG_IGN)
                else:
                    signal.signal(s, h if h is not None else signal.SIG_DFL)
            _stopped = None
            _again.clear()
            stop_event.clear()


def stopped() -> int | None:
    """The number of the signal that stopped the process (inside ``stop_on_signals``), else None."""
    return _stopped


def ignored_signals() -> int:
    """How many signals arrived after the first one (and were ignored)."""
    return len(_again)


def raise_if_stopped() -> None:
    """In any thread: raise :class:`Interrupted` when a stop signal has arrived."""
    if _stopped is not None:
        raise Interrupted(_stopped)


def as_interrupted(exc: BaseException) -> BaseException:
    """``exc`` as :class:`Interrupted` when it is one, a plain Ctrl-C, or anything raised after a
    stop signal (a library may turn the interruption into an error of its own); else ``exc``."""
    if isinstance(exc, Interrupted):
        return exc
    if _stopped is not None:
        return Interrupted(_stopped)
    if isinstance(exc, KeyboardInterrupt):
        return Interrupted(signal.SIGINT)
    return exc


def pause_point(name: str) -> None:
    """Test hook: wait here when ``DDSCREEN_PAUSE_AT`` names this point (see the module text).

    The main thread sleeps (a stop signal ends the sleep with :class:`Interrupted`, a signal that
    is only counted does not); another thread waits on :data:`stop_event` and returns when it is set.
    """
    points = dict(p.rpartition(":")[::2] for p in os.environ.get("DDSCREEN_PAUSE_AT", "").split(",") if p)
    if name not in points:
        return
    seconds = points[name]
    mark = os.environ.get("DDSCREEN_PAUSE_MARK")
    if mark:
        with open(mark, "a", encoding="utf-8") as fh:
            fh.write(f"{name} {os.getpid()}\n")
    end = time.monotonic() + float(seconds)
    while (left := end - time.monotonic()) > 0:
        if threading.current_thread() is threading.main_thread():
            time.sleep(min(left, 0.1))  # short sleeps: a signal delivered to another thread runs here
        elif stop_event.wait(min(left, 0.1)):
            return
