"""Rendering with WeasyPrint: one-page building sheets and the portfolio ranking report (PDF).

Layer 3 (orchestration): takes sheet records (:class:`~screening.render.record.SheetRecord`) and the
ranking report dict (DEVELOPERS.md "Ranking report dict"), turns them into display strings through
``sheet_view`` / ``ranking_view``, renders HTML with Jinja (autoescaped, ``StrictUndefined``) and lays it
out with WeasyPrint.

Speed: many sheets are laid out in one WeasyPrint document (a *chunk*), each sheet on
its own page; the page count is checked against the sheet count (each sheet's first page
carries an anchor ``sheet-<k>``, ``paging.sheet_starts``), and WeasyPrint's PDF objects are
written straight into one file per page (``pdfsplit``). A sheet that runs over one page
is re-rendered on its own at growing shrink levels (``paging.LIMITS``). Chunks are shared by this
process and a pool of ``workers - 1`` children; each renderer keeps one ``FontConfiguration``,
one Jinja environment and the parsed stylesheets for its whole life.

Safety: every fetch goes through :class:`AssetFetcher`, which serves only files inside
``templates_dir()`` and ``data:`` URIs and refuses everything else (no network, no other
file). Output files are named by :func:`~screening.render.filenames.assign_filenames` and written
atomically inside ``out_dir`` only.
"""

from __future__ import annotations

import atexit
import contextlib
import gc
import logging
import math
import mimetypes
import multiprocessing
import os
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any
from urllib.parse import unquote, urlsplit
from urllib.request import url2pathname

import jinja2

from .. import __version__, interrupts, lifeline
from ..errors import OutputError, RenderError
from ..resources import templates_dir
from .display import STANDARD_CAUTION
from .filenames import assign_filenames
from .paging import CONTENT_MM, COLUMN_CSS, MAX_LEVEL, PAPERS, SMALL_LEFT_PCT, sheet_starts
from .pdfsplit import atomic_write, write_split
from .ranking_view import ranking_view
from .record import SheetRecord
from .sheet_view import sheet_title, sheet_view

__all__ = [
    "RenderError",
    "AssetFetcher",
    "render_sheets",
    "render_sheets_one_by_one",
    "render_ranking",
]

LOGGER = logging.getLogger(__name__)


# --------------------------------------------------------------------------------------
# URL fetcher


def _fetcher_class():
    from weasyprint.urls import URLFetcher, URLFetcherResponse

    class _AssetFetcher(URLFetcher):
        """Serve only files inside ``root`` (the templates folder) and ``data:`` URIs.

        Everything else (http, https, ftp, file outside ``root``, devices) is refused
        before any I/O with ``ValueError``; with ``fatal=True`` (the default) WeasyPrint
        stops the render instead of drawing the page without the resource. Every URL asked
        for is recorded in ``self.requested`` and every refusal in ``self.refused``.
        """

        def __init__(self, root: Path | None = None, *, fatal: bool = True):
            super().__init__(timeout=2, allowed_protocols={"file", "data"}, allow_redirects=False, fail_on_errors=fatal)
            self.root = Path(root or templates_dir()).resolve()
            self.requested: list[str] = []
            self.refused: list[str] = []

        def fetch(self, url, headers=None):
            self.requested.append(url)
            scheme = url.split(":", 1)[0].lower() if ":" in url else ""
            if scheme == "data":
                return super().fetch(url, headers)
            if scheme == "file":
                parts = urlsplit(url)
                if parts.netloc in ("", "localhost"):
                    path = Path(url2pathname(unquote(parts.path))).resolve()
                    if path.is_relative_to(self.root) and path.is_file():
                        ctype = mimetypes.guess_type(path.name)[0] or "application/octet-stream"
                        return URLFetcherResponse(path.as_uri(), path.read_bytes(), {"Content-Type": ctype})
            self.refused.append(url)
            raise ValueError(f"refused to fetch {url[:200]!r}: only template assets and data: URIs are served")

    return _AssetFetcher


def AssetFetcher(root: Path | None = None, *, fatal: bool = True):  # noqa: N802 - used like a class
    """A :class:`weasyprint.urls.URLFetcher` serving only ``root`` (default templates_dir()) and ``data:``."""
    return _fetcher_class()(root, fatal=fatal)


# --------------------------------------------------------------------------------------
# per-process renderer state (one FontConfiguration, one Jinja env, parsed CSS once)

_STATE: dict[str, Any] = {}


def _drop_state() -> None:
    """Release the font configuration while the interpreter is still whole (at exit)."""
    _STATE.clear()


atexit.register(_drop_state)


def _state() -> dict[str, Any]:
    if not _STATE:
        from weasyprint.text.fonts import FontConfiguration

        tdir = templates_dir()
        _STATE["tdir"] = tdir
        _STATE["font_config"] = FontConfiguration()
        _STATE["fetcher"] = AssetFetcher(tdir)
        _STATE["env"] = jinja2.Environment(
            loader=jinja2.FileSystemLoader(tdir),
            autoescape=jinja2.select_autoescape(
                enabled_extensions=("html", "j2", "xml"), default=True, default_for_string=True
            ),
            undefined=jinja2.StrictUndefined,
            trim_blocks=True,
            lstrip_blocks=True,
        )
        _STATE["css"] = {}
    return _STATE


def _stylesheets(name: str, paper: str) -> list:
    from weasyprint import CSS

    st = _state()
    key = (name, paper)
    if key not in st["css"]:
        if paper not in PAPERS:
            raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
        st["css"][key] = [
            CSS(
                filename=str(st["tdir"] / name),
                font_config=st["font_config"],
                url_fetcher=st["fetcher"],
                base_url=st["tdir"].as_uri() + "/",
            ),
            CSS(
                string=f"@page {{ size: {PAPERS[paper]}; }} .figs {{ tab-size: {CONTENT_MM[paper] / 4:.2f}mm; }}",
                font_config=st["font_config"],
            ),
        ]
    return st["css"][key]


def _render_html(html: str, css_name: str, paper: str):
    from weasyprint import HTML

    st = _state()
    doc = HTML(string=html, base_url=st["tdir"].as_uri() + "/", url_fetcher=st["fetcher"])
    return doc.render(stylesheets=_stylesheets(css_name, paper), font_config=st["font_config"])


def _sheets_html(views: list[dict[str, Any]], title: str) -> str:
    tpl = _state()["env"].get_template("sheet.html.j2")
    return tpl.render(sheets=views, doc_title=title, standard_caution=STANDARD_CAUTION, version=__version__)


@contextlib.contextmanager
def _gc_paused():
    """Switch Python's cyclic garbage collector off while WeasyPrint lays out and writes.

    Layout allocates hundreds of thousands of small objects that live until the chunk is
    written; each automatic collection walks all of them again. Sampling the render with
    py-spy showed ~28% of the time in ``gc_collect_main`` (DEVELOPERS.md "Rendering"). The pause
    is bounded by one chunk; reference counting still frees everything acyclic and the
    collector, switched back on, cleans up the rest.
    """
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


def _render_one(sheet: SheetRecord, target: Path, paper: str, start_level: int = 0) -> int:
    """Render one sheet alone, shrinking until it fits one page; returns the level used."""
    title = sheet_title(sheet)
    for level in range(start_level, MAX_LEVEL + 1):
        with _gc_paused():
            doc = _render_html(_sheets_html([sheet_view(sheet, level)], title), "sheet.css", paper)
            if len(doc.pages) == 1:
                write_split(doc, [(0, target, title)])
                return level
        LOGGER.info("sheet %r needs %d pages at shrink level %d", sheet.building_id, len(doc.pages), level)
    raise RenderError(
        f"sheet for building {sheet.building_id!r} does not fit on one page "
        f"even at the smallest layout (level {MAX_LEVEL})"
    )


def _render_chunk(sheets: list[SheetRecord], targets: list[str], paper: str) -> dict[str, Any]:
    """Render a chunk of sheets as one document and split it; returns stats."""
    targets_p = [Path(t) for t in targets]
    interrupts.pause_point("render_chunk")  # test hook (DEVELOPERS.md "Test hooks")
    interrupts.raise_if_stopped()  # this process was told to stop: render nothing more
    cpu = time.thread_time()
    try:
        with _gc_paused():
            result = _render_chunk_inner(sheets, targets_p, paper)
        result["cpu_s"] = time.thread_time() - cpu  # this thread's CPU time, for the benchmark
        return result
    except BaseException as exc:  # FatalURLFetchingError is a BaseException
        if isinstance(exc, (RenderError, KeyboardInterrupt, SystemExit)):
            raise
        ids = ", ".join(repr(s.building_id) for s in sheets[:3])
        raise RenderError(
            f"rendering sheets failed for the chunk starting with {ids}: {type(exc).__name__}: {exc}"
        ) from exc


def _render_chunk_inner(sheets: list[SheetRecord], targets_p: list[Path], paper: str) -> dict[str, Any]:
    """Lay out one chunk, split the one-page sheets off, re-render the others alone."""
    views = [sheet_view(s, 0) for s in sheets]
    doc = _render_html(_sheets_html(views, "ddscreen building sheets"), "sheet.css", paper)
    n = len(sheets)
    starts = sheet_starts(doc, n)
    refit: list[int] = []
    if len(doc.pages) == n and starts == list(range(n)):
        good = list(range(n))
    elif starts is not None:
        ends = starts[1:] + [len(doc.pages)]
        good = [k for k in range(n) if ends[k] - starts[k] == 1]
        refit = [k for k in range(n) if ends[k] - starts[k] != 1]
    else:  # cannot tell which page is whose: every sheet on its own
        starts, good, refit = [], [], list(range(n))
    interrupts.raise_if_stopped()  # told to stop during the layout: write nothing
    if good:
        write_split(doc, [(starts[k], targets_p[k], sheet_title(sheets[k])) for k in good])
    del doc
    levels = []
    for k in refit:
        interrupts.raise_if_stopped()
        levels.append(_render_one(sheets[k], targets_p[k], paper, 1))
    return {"batched": len(good), "refit": len(refit), "levels": levels}


def _run_chunks(chunks: list[tuple[list, list]], paper: str, workers: int) -> list[dict[str, Any]]:
    """Render chunks on ``workers`` processes: this one (in a thread) and ``workers - 1`` children.

    This process takes chunks from the back of the list and the children from the front, one
    chunk in flight per child, so the work balances itself when the machine is shared. The
    parent renders too instead of waiting: one child fewer to start (importing WeasyPrint and
    warming a renderer is ~1 s of CPU per process, measured in DEVELOPERS.md "Rendering").
    """
    if workers == 1 or len(chunks) == 1:
        return [_render_chunk(c, t, paper) for c, t in chunks]
    import threading
    from collections import deque
    from concurrent.futures import FIRST_COMPLETED, wait

    results: list[Any] = [None] * len(chunks)
    todo = deque(range(len(chunks)))
    lock = threading.Lock()
    failed: list[BaseException] = []

    def take(front: bool) -> int | None:
        with lock:
            if failed or not todo:
                return None
            return todo.popleft() if front else todo.pop()

    def here() -> None:
        try:
            while (k := take(False)) is not None:
                results[k] = _render_chunk(*chunks[k], paper)
        except BaseException as exc:  # handed to the calling thread below
            with lock:
                failed.append(exc)

    ctx = _render_context()
    n_children = min(workers - 1, len(chunks) - 1)
    with (
        _main_not_reimported(),
        ProcessPoolExecutor(
            max_workers=n_children, mp_context=ctx, initializer=_worker_init, max_tasks_per_child=100
        ) as pool,
    ):
        local = threading.Thread(target=here, name="ddscreen-render", daemon=True)
        local.start()
        in_flight: dict[Any, int] = {}
        try:
            while True:
                while len(in_flight) < n_children and (k := take(True)) is not None:
                    in_flight[pool.submit(_render_chunk, *chunks[k], paper)] = k
                if not in_flight:
                    break
                # short waits: a signal the kernel hands to another thread runs its handler here
                done, _ = wait(in_flight, timeout=_WAIT_S, return_when=FIRST_COMPLETED)
                for f in done:
                    results[in_flight.pop(f)] = f.result()
            while local.is_alive():
                local.join(_WAIT_S)
        except BaseException as exc:
            with lock:
                failed.append(exc)
            for f in in_flight:
                f.cancel()
            if isinstance(exc, KeyboardInterrupt):  # Ctrl-C or SIGTERM (errors.Interrupted)
                _stop_workers(pool)
        finally:
            local.join()
    if failed:
        raise failed[0]
    return results


# [s] how long the main thread blocks at a time while the renderers work. Python runs signal
# handlers in the main thread only, and a SIGINT/SIGTERM that the kernel delivers to another
# thread (the render thread, the pool's threads) does not wake a main thread blocked on a lock.
_WAIT_S = 0.2


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """End the pool's workers now, mid-chunk, and wait for them (the run was told to stop).

    Otherwise the pool's shutdown would wait for every chunk in flight, and a worker could
    still be writing into the run's temporary folder while the run removes it.
    """
    terminate = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    procs = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    if terminate is not None:
        terminate()
    for p in procs:
        try:
            p.terminate()
        except Exception:  # noqa: BLE001 - already gone, closed, or stopped while it was starting
            pass
    for p in procs:
        try:
            p.join(10)
        except Exception:  # noqa: BLE001
            pass


@contextlib.contextmanager
def _main_not_reimported():
    """Keep the render workers from running the caller's ``__main__`` module again.

    A forkserver (or spawn) child imports the parent's main module, by path or by its
    ``python -m`` name, before its first task. The workers need nothing from it, and a
    caller's script without an ``if __name__ == "__main__":`` guard (or one read from
    stdin) would run again in every child: for :func:`screening.runner.run`, a second run
    that finds the lock taken and a broken pool. While the pool lives (workers are started
    on demand and replaced after ``max_tasks_per_child``), ``__main__`` shows the
    multiprocessing machinery neither a file nor a spec; both are put back afterwards.
    """
    import sys

    main = sys.modules.get("__main__")
    if main is None:
        yield
        return
    saved: dict[str, Any] = {k: main.__dict__[k] for k in ("__file__", "__spec__") if k in main.__dict__}
    main.__dict__.pop("__file__", None)
    if "__spec__" in saved:
        main.__spec__ = None
    try:
        yield
    finally:
        main.__dict__.update(saved)


def _worker_init() -> None:
    # a worker dies with the main process, whatever ends it (screening/lifeline.py), and leaves
    # Ctrl-C to the main process, which stops the workers itself (_stop_workers)
    import signal

    lifeline.die_with_parent()
    lifeline.watch_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _state()
    gc.freeze()  # the modules and renderer state live as long as the worker: keep them out of collections


def _render_context(screening: bool = True):
    """The multiprocessing context of every child process of a run (the renderers, and the screening's
    workers, ``screening/workers.py``): a fork server that imports the heavy modules once, each child
    forked from it (screening.lifeline first: there it makes the fork server die with this process).
    ``screening``: it also imports the screening (polars, NumPy, DuckDB: about 0.25 CPU-s more) for the
    ``[run] workers`` children; the renderers do not need it. The list counts only when the fork server
    starts (:func:`warm_up` in a run), so a later call does not change a running one's modules."""
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(
        ["screening.lifeline", "screening.render.pdf", "weasyprint", "pydyf"]
        + (["screening.pipeline"] if screening else [])
    )
    return ctx


def warm_up(*, screening: bool = True) -> None:
    """Start the children's fork server now (a run calls this first): it imports WeasyPrint and the package
    (about a CPU-second) while the run loads its inputs, instead of holding up the first child, ranking.pdf's
    or a ``[run] workers`` child. ``screening`` False (a run without ``[run] workers`` children) leaves the
    screening's modules out of it. Starting it takes milliseconds; nothing on a one-core machine."""
    if (os.cpu_count() or 1) < 2:
        return
    from multiprocessing import forkserver

    _render_context(screening)
    with _main_not_reimported():  # the fork server would run the caller's main module again
        forkserver.ensure_running()


class Background:
    """One rendering call on a child process while the caller goes on (ranking.pdf beside the other
    outputs, issue 20): forked from the sheets' fork server, so it starts warm, and it dies with
    this process (:func:`_worker_init`). :meth:`result` waits in short steps (signals reach the main
    thread) and hands back the call's value or raises its exception; :meth:`cancel` stops the child
    mid-call. On a one-core machine nothing is started and :meth:`result` makes the call here.
    """

    def __init__(self, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> None:
        self._call = (fn, args, kwargs)
        self._pool: ProcessPoolExecutor | None = None
        self._future: Any = None
        if (os.cpu_count() or 1) < 2:
            return
        ctx = _render_context()
        with _main_not_reimported():  # the child starts in submit
            self._pool = ProcessPoolExecutor(max_workers=1, mp_context=ctx, initializer=_worker_init)
            self._future = self._pool.submit(fn, *args, **kwargs)

    def result(self) -> Any:
        if self._pool is None:
            fn, args, kwargs = self._call
            return fn(*args, **kwargs)
        from concurrent.futures import wait

        try:
            while not wait([self._future], timeout=_WAIT_S).done:
                pass
            return self._future.result()
        except BaseException:
            self.cancel()
            raise
        finally:
            if self._pool is not None:
                self._pool.shutdown(wait=True)
                self._pool = None

    def cancel(self) -> None:
        """Stop the child now (the run failed or was told to stop); nothing is waited for but its end."""
        if self._pool is not None:
            _stop_workers(self._pool)
            self._pool = None


# --------------------------------------------------------------------------------------
# public API


def render_sheets(
    sheets: list[SheetRecord],
    out_dir: Path,
    *,
    paper: str = "Letter",
    workers: int = 2,
    chunk_size: int = 50,
    stats: dict[str, Any] | None = None,
    chunk_runner: Callable[[list[tuple[list, list]], str], list[dict[str, Any]]] | None = None,
) -> list[Path]:
    """Write one single-page PDF per sheet into ``out_dir`` (``<safe name>.pdf``).

    Parameters
    ----------
    sheets : sheet records (:class:`~screening.render.record.SheetRecord`).
    out_dir : an existing or creatable folder; nothing is written outside it.
    paper : "Letter" or "A4".
    workers : processes to use; 1 renders in this process.
    chunk_size : sheets per WeasyPrint document.
    stats : optional dict filled with counts (chunks, batched, refit, levels) and ``cpu_s``,
        the CPU time the renderers spent on the chunks (all processes; not their start-up).
    chunk_runner : renders the chunks elsewhere instead of ``workers`` processes here
        (``cluster.DaskChunks.render_chunks``: ``(chunks, paper)`` → each chunk's stats, in order).

    Returns
    -------
    The written paths, in the order of ``sheets``.
    """
    if paper not in PAPERS:
        raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
    if not isinstance(workers, int) or workers < 1:
        raise ValueError(f"workers must be an int >= 1, got {workers!r}")
    if not isinstance(chunk_size, int) or chunk_size < 1:
        raise ValueError(f"chunk_size must be an int >= 1, got {chunk_size!r}")
    for k, s in enumerate(sheets):
        if not isinstance(s, SheetRecord) or not isinstance(s.building_id, str):
            raise ValueError(f"sheets[{k}] must be a SheetRecord with a str building_id, got {type(s).__name__}")
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the sheets folder {str(out_dir)!r}: {exc.strerror or exc}") from exc
    root = out_dir.resolve()
    names = assign_filenames([s.building_id for s in sheets])
    targets = []
    for s in sheets:
        t = root / f"{names[s.building_id]}.pdf"
        if t.parent != root:  # pragma: no cover - safe_filename never yields a separator
            raise RenderError(f"file name for building {s.building_id!r} leaves the output folder")
        targets.append(str(t))
    if not sheets:
        return []
    n = len(sheets)
    # an even split: a multiple of `workers` chunks of at most chunk_size sheets each, so no
    # worker is left with a short tail (100 sheets on 2 workers: 2 x 50; 120: 4 x 30)
    n_chunks = min(n, workers * math.ceil(n / (workers * chunk_size)))
    size = math.ceil(n / n_chunks)
    chunks = [(sheets[i : i + size], targets[i : i + size]) for i in range(0, n, size)]
    results = chunk_runner(chunks, paper) if chunk_runner is not None else _run_chunks(chunks, paper, workers)
    if stats is not None:
        stats.update(
            chunks=len(chunks),
            chunk_size=size,
            batched=sum(r["batched"] for r in results),
            refit=sum(r["refit"] for r in results),
            levels=[lv for r in results for lv in r["levels"]],
            cpu_s=sum(r["cpu_s"] for r in results),
        )
    return [Path(t) for t in targets]


def render_sheets_one_by_one(sheets: list[SheetRecord], out_dir: Path, *, paper: str = "Letter") -> list[Path]:
    """One WeasyPrint document per sheet, in this process: the slow baseline the
    benchmark compares against, and the fallback path for a single sheet."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    names = assign_filenames([s.building_id for s in sheets])
    paths = []
    for s in sheets:
        t = out_dir.resolve() / f"{names[s.building_id]}.pdf"
        _render_one(s, t, paper, 0)
        paths.append(t)
    return paths


def render_ranking(report: dict[str, Any], out_path: Path, *, paper: str = "Letter") -> Path:
    """Write the portfolio report (summary page, ranked table, data issues) to ``out_path``."""
    if paper not in PAPERS:
        raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
    if not isinstance(report, dict):
        raise ValueError(f"report must be a dict, got {type(report).__name__}")
    out_path = Path(out_path)
    view = ranking_view(report, paper)
    from .savings_page import savings_view  # the savings page (issue 17), when the report has "savings"

    view["savings"] = savings_view(report)
    title = f"Heating screening ranking, run {view['run']['run_id']}"
    html = (
        _state()["env"]
        .get_template("ranking.html.j2")
        .render(
            v=view,
            doc_title=title,
            standard_caution=STANDARD_CAUTION,
            version=__version__,
            columns=COLUMN_CSS,
            small_left=f"{SMALL_LEFT_PCT:.4f}",
        )
    )
    try:
        with _gc_paused():
            pdf = _render_html(html, "ranking.css", paper).write_pdf()
    except BaseException as exc:
        if isinstance(exc, (KeyboardInterrupt, SystemExit)):
            raise
        raise RenderError(f"rendering {str(out_path)!r} failed: {type(exc).__name__}: {exc}") from exc
    try:
        out_path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(pdf, out_path)
    except OSError as exc:
        raise OutputError(f"cannot write {str(out_path)!r}: {exc.strerror or exc}") from exc
    return out_path
