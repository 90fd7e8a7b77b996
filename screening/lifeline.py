"""Helper processes die with the process that started them (the sheet renderer's pool, and the
``[run] workers`` that check and screen chunks, screening/workers.py).

The renderer (``render.pdf._run_chunks``) starts its workers through a multiprocessing fork
server: the main process starts the fork server, the fork server forks each worker. Killed
with SIGKILL, the main process runs no clean-up, and without this module the workers (about
220 MB each) would finish their chunks into the dead run's temporary folder and then wait for
work for ever. Two mechanisms, so that either suffices:

- **portable, workers:** :func:`watch_parent` starts a daemon thread that waits on the
  multiprocessing *parent sentinel*, a pipe whose other end only the main process holds; it
  reads end-of-file the moment the main process is gone (for whatever reason), and the
  thread ends the worker with ``os._exit``. The fork server then exits by itself: it stops
  when every holder of its "alive" pipe (the main process and the workers) has gone.
- **Linux, both:** :func:`die_with_parent` asks the kernel (``prctl(PR_SET_PDEATHSIG)``) to
  send SIGKILL when the parent dies. It fires on the death of the parent *thread* that forked,
  so it is armed in the fork server (parent: the main process's thread that started the pool)
  and in each worker (parent: the fork server, single-threaded). If that main-process thread
  ends while the process lives on, the fork server is killed and multiprocessing starts a
  new one on the next render (``ensure_running`` finds it dead).

This module is in the fork server's preload list: imported there (recognized by the fork
server's ``main`` on the call stack) it arms the parent-death signal of the fork server;
imported anywhere else it does nothing on import.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
from types import FrameType

PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def die_with_parent(sig: int = signal.SIGKILL) -> bool:
    """Linux: have the kernel send ``sig`` to this process when its parent dies. False elsewhere."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(PR_SET_PDEATHSIG, int(sig), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def watch_parent() -> bool:
    """In a multiprocessing child: end this process as soon as the process that started it is gone.

    Returns False when there is no parent sentinel to watch (not a multiprocessing child).
    """
    import multiprocessing
    from multiprocessing.connection import wait

    parent = multiprocessing.parent_process()
    sentinel = getattr(parent, "sentinel", None)
    if sentinel is None:
        return False

    def watch() -> None:
        wait([sentinel])
        os._exit(1)  # the main process is gone: nobody wants what this process makes

    threading.Thread(target=watch, name="ddscreen-lifeline", daemon=True).start()
    return True


def _in_fork_server() -> bool:
    from multiprocessing import forkserver

    code = forkserver.main.__code__
    f: FrameType | None = sys._getframe(1)
    while f is not None:
        if f.f_code is code:
            return True
        f = f.f_back
    return False


if "multiprocessing.forkserver" in sys.modules and _in_fork_server():
    die_with_parent()
