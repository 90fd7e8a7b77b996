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

from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
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
        return list(in_order(_screen_chunk, chunks, self.n, common))


def in_order(fn: Callable[..., Any], items: Iterable[tuple], n: int, common: dict | None = None) -> Iterator[Any]:
    """``fn(*item)`` of every item on ``n`` child processes, the results yielded in the items' order.

    At most ``n + 1`` items are in flight (one waiting beside each child's), so the items are taken from
    ``items`` as the children need them and a caller consumes each result while the children go on (the
    streamed load stores a chunk while the next ones are checked). ``common`` is handed to every child
    once, when it starts (:data:`_COMMON`). An exception of ``fn`` is raised here, where its result would
    have been; an exception here (or the caller's, at a ``yield``) stops the children mid-item.
    """
    from .render.pdf import _main_not_reimported, _render_context, _stop_workers

    # the children start on the first submits: __main__ stays hidden from them while the pool lives
    with _main_not_reimported():
        pool = ProcessPoolExecutor(
            max_workers=n, mp_context=_render_context(), initializer=_child_init, initargs=(common or {},)
        )
        try:
            yield from pipeline.in_order(pool, fn, iter(items), n)
        except BaseException:
            _stop_workers(pool)
            raise
        pool.shutdown(wait=True)


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
