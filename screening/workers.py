"""The screening chunks on local worker processes (``[run] workers``): the machine's cores, no extra.

``pipeline.screen_frames`` screens a portfolio a chunk of buildings at a time; each chunk's rows depend
only on its own buildings, readings and the shared state (weather, degree-day cube, settings). With
``[run] workers = N`` (N ≥ 2) and more than one chunk, :class:`LocalWorkers` runs ``pipeline._screen_part``
of the chunks on N child processes: the shared state goes to each child once (when it starts), a chunk's
buildings and readings go to the child that screens it, and its result frames come back, taken in chunk
order, so the results are those of one process (``tests/test_workers.py``). The calling process reads
each chunk's readings from the store while the children work, and keeps at most N + 1 chunks in flight,
so memory grows with N chunks (``screening/memory.py``), never with the portfolio.

The children are forked from the fork server of the sheet renderer (``render.pdf._render_context``,
which preloads this package) and die with this process (``screening/lifeline.py``). A stop signal ends
them mid-chunk (``render.pdf._stop_workers``).
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from typing import Any

import polars as pl

from . import pipeline

#: the shared state of the screening (``common`` of :meth:`LocalWorkers.screen_parts`), set once per child
_COMMON: dict[str, Any] = {}


def from_config(workers: int, n_chunks: int) -> LocalWorkers | None:
    """The executor for ``[run] workers`` (None: this process), for a screening of ``n_chunks`` chunks."""
    n = min(workers, n_chunks)
    return LocalWorkers(n) if n >= 2 else None


class LocalWorkers(pipeline.ChunkExecutor):
    """``pipeline._screen_part`` of each chunk on one of ``n`` local child processes (module docstring)."""

    def __init__(self, n: int):
        self.n = n

    def screen_parts(self, chunks: Iterator[tuple[pl.DataFrame, pl.DataFrame]], common: dict) -> list:
        from .render.pdf import _WAIT_S, _main_not_reimported, _render_context, _stop_workers

        results: dict[int, Any] = {}
        in_flight: dict[Future, int] = {}
        # the children start on the first submits: __main__ stays hidden from them while the pool lives
        with _main_not_reimported():
            pool = ProcessPoolExecutor(
                max_workers=self.n, mp_context=_render_context(), initializer=_child_init, initargs=(common,)
            )
            try:
                k = 0
                pending = iter(chunks)
                more = True
                while more or in_flight:
                    while more and len(in_flight) <= self.n:  # one chunk waiting beside each child's
                        nxt = next(pending, None)
                        if nxt is None:
                            more = False
                            break
                        in_flight[pool.submit(_screen_chunk, *nxt)] = k
                        k += 1
                        del nxt
                    if not in_flight:
                        break
                    # short waits: a stop signal runs its handler in the main thread (render.pdf._WAIT_S)
                    done, _ = wait(in_flight, timeout=_WAIT_S, return_when=FIRST_COMPLETED)
                    for f in done:
                        results[in_flight.pop(f)] = f.result()
            except BaseException:
                _stop_workers(pool)
                raise
            pool.shutdown(wait=True)
        return [results[i] for i in range(len(results))]


def _child_init(common: dict) -> None:
    """A child's start: it dies with the run (``screening/lifeline.py``), leaves Ctrl-C to the run (which
    stops it), and keeps the shared state."""
    import signal

    from . import lifeline

    lifeline.die_with_parent()
    lifeline.watch_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _COMMON.clear()
    _COMMON.update(common)


def _screen_chunk(b: pl.DataFrame, r: pl.DataFrame) -> pipeline._Part:
    """The task: one chunk screened with the shared state (stage times are not kept in a child)."""
    return pipeline._screen_part(b, r, lap=_no_lap, **_COMMON)


def _no_lap(name: str) -> None:
    """Stage timing is not kept inside a child."""
