"""Orchestration: load the inputs into the store, screen the portfolio, keep the results.

``screen_frames`` is the whole computation on in-memory frames (no files, no database);
``load_inputs`` puts checked files into the store; ``run`` does both and writes the
outputs (see :mod:`screening.outputs`).
"""

from __future__ import annotations

import datetime as _dt
from abc import ABC, abstractmethod
import hashlib
import json
import os
import threading
import time
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import Executor, Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

from . import degree_days as ddm
from . import envelope as env
from . import config, data_issues, metered, published, refdata, screen, streaming, units, wording, yoy

# the old names, re-exported for callers that read them here (outputs.py)
from .data_issues import DATA_ISSUE_CODES, ISSUE_TEXT, NO_BASIS_CODES, PIPELINE_ISSUE_CODES  # noqa: F401
from .degree_days import nearest_base
from .errors import ConfigError, InputError
from .schema import KBTU_TO_KWH
from .ingest import REJECT_SCHEMA, Loaded, ReadOptions, read_buildings, read_readings
from .csvread import split_sheet, unreadable
from .store import Store
from .weather import read_daily_weather

KINDS = ("buildings", "readings", "weather")


# ---------------------------------------------------------------------------- loading


@dataclass
class FileLoad:
    kind: str
    path: str
    sha256: str
    status: str  # "loaded" | "unchanged"
    rows: int
    rejected: int
    notices: list[str] = field(default_factory=list)


#: Digests of the files hashed by this process (:func:`file_sha256`), by path: ``(identity, digest)``.
_DIGESTS: dict[str, tuple[tuple[int, ...], str]] = {}
_DIGESTS_KEPT = 64
#: A digest is kept only for a file last changed this long before its hashing began [ns] (see file_sha256).
RACY_NS = 3_000_000_000


def _identity(st: os.stat_result) -> tuple[int, ...]:
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def file_sha256(path: str | Path) -> str:
    """The SHA-256 of a file's bytes (a workbook's for ``book.xlsx#Sheet``), hex.

    A run hashes each input file twice, for its key (``runs/record.run_key``) and for the load; the second
    is taken from the first when the file is the same (device, inode, size, modification and change times
    in ns, ``os.stat``). Only a file last changed ``RACY_NS`` before its hashing began is remembered, so
    that a write after the hashing shows in the change time even with coarse file times (as git treats
    "racily clean" index entries)."""
    src = str(split_sheet(path)[0])  # book.xlsx#Sheet: the workbook's bytes
    try:
        start = time.time_ns()
        before = _identity(os.stat(src))
        known = _DIGESTS.get(src)
        if known is not None and known[0] == before:
            return known[1]
        digest = published.file_sha256(Path(src))  # the bytes, as an output folder's files are hashed
        if max(before[3], before[4]) < start - RACY_NS and _identity(os.stat(src)) == before:
            _DIGESTS.pop(src, None)
            _DIGESTS[src] = (before, digest)
            while len(_DIGESTS) > _DIGESTS_KEPT:
                del _DIGESTS[next(iter(_DIGESTS))]
        return digest
    except OSError as exc:
        raise unreadable(str(path), exc) from None


def read_options(cfg: config.Settings | dict) -> ReadOptions:
    s = config.settings(cfg)
    r = s.reading
    return ReadOptions(
        units=s.analysis.units,
        decimal_comma=r.decimal_comma,
        date_order=r.date_order or None,
        delimiter=r.delimiter or None,
        encoding=r.encoding or None,
        columns=dict(s.inputs.columns or {}),
        thousands=r.thousands,
        chunk_bytes=s.run.ingest_chunk_mb << 20,
    )


def _options_hash(opts: ReadOptions) -> str:
    key = json.dumps(
        [opts.units, opts.decimal_comma, opts.date_order, opts.delimiter, opts.encoding]
        + ([opts.columns, opts.thousands] if opts.columns or opts.thousands else []),
        sort_keys=True,
    )
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def read_file(kind: str, path: str, opts: ReadOptions) -> Loaded:
    """Check one input file (no database): the accepted rows, the rejects, the notices."""
    if kind == "buildings":
        return read_buildings(path, opts)
    if kind == "readings":
        return read_readings(path, opts)
    weather, rejects, notices = _read_weather(path, opts)
    return Loaded(str(path), weather, rejects, notices)


def _read_weather(path: str, opts: ReadOptions):
    res = read_daily_weather(
        path,
        units=opts.units,
        decimal_comma=opts.decimal_comma,
        date_order=opts.date_order,
        delimiter=opts.delimiter,
        encoding=opts.encoding,
        columns=opts.columns.get("weather") or None,
    )
    weather, rejects = res
    return weather, rejects, list(getattr(res, "notices", []))


def load_inputs(
    store: Store,
    files: dict[str, list[str]],
    opts: ReadOptions,
    *,
    force: bool = False,
    log=None,
    chunk_bytes: int | None = None,
    workers: int = 1,
    threads: int = 1,
) -> list[FileLoad]:
    """Load new or changed input files into the store, all in one transaction.

    A structural error in any file leaves the database unchanged: the files read whole are read
    and checked before anything is written; a buildings or readings CSV larger than ``chunk_bytes``
    (default ``opts.chunk_bytes``, ``[run] ingest_chunk_mb``; 0 reads every file whole) is read, checked and
    written a chunk at a time inside the transaction (:mod:`screening.streaming`), which an error
    rolls back. The repeated keys of the files read in chunks are settled, and those files recorded, in a
    second transaction (:func:`streaming.settle_repeats`): the first one leaves them unrecorded, so a run
    stopped between the two reads them again. A file whose content hash and reading options match its last
    load is not read again.
    ``workers`` ≥ 2 (``[run] workers``) checks a streamed file's chunks on that many child processes.
    ``threads`` ≥ 2 (``[run] threads``) reads and checks the files read whole side by side on that many threads
    (:func:`_side_by_side`; polars works outside the GIL): the buildings and weather files beside the readings.
    The files' errors are raised in the files' order, as one read at a time would raise them.
    """
    log = log or (lambda msg: None)
    oh = _options_hash(opts)
    if chunk_bytes is None:
        chunk_bytes = streaming.STREAM_CHUNK_BYTES if opts.chunk_bytes is None else opts.chunk_bytes
    chunk = int(chunk_bytes)
    plan: list[tuple[str, str, str, Loaded | None]] = []
    whole: list[int] = []  # the plan's files read whole, read below
    for kind in KINDS:
        for path in files.get(kind, []):
            digest = file_sha256(path)
            prev = store.rows("get_input_file", {"kind": kind, "path": str(path)})
            if prev and prev[0][0] == digest and prev[0][1] == oh and not force:
                plan.append((kind, str(path), digest, None))
                continue
            if streaming.streamable(kind, str(path), chunk):
                plan.append((kind, str(path), digest, _STREAM))
                continue
            whole.append(len(plan))
            plan.append((kind, str(path), digest, _READ))
    for k in whole:
        log(f"reading {plan[k][0]} file {plan[k][1]}")
    items = ((plan[k][0], plan[k][1], opts) for k in whole)
    n_threads = min(threads, len(whole))
    got = _side_by_side(read_file, items, n_threads) if n_threads >= 2 else (read_file(*item) for item in items)
    for k, loaded in zip(whole, got, strict=True):
        plan[k] = (*plan[k][:3], loaded)
    out: list[FileLoad] = []
    streamed: list[tuple[FileLoad, streaming.Streamed]] = []  # repeated keys settled in a second transaction
    with store.transaction():
        for kind, path, digest, loaded in plan:
            if loaded is None:
                r = store.rows("get_input_file", {"kind": kind, "path": path})[0]
                out.append(FileLoad(kind, path, digest, "unchanged", int(r[2]), int(r[3])))
                continue
            if loaded is _STREAM:
                log(f"reading {kind} file {path} in chunks")
                try:
                    st = streaming.load_streamed(
                        store, kind, path, opts, chunk_bytes=chunk, workers=workers, threads=threads
                    )
                except streaming.WholeFile as why:
                    log(f"reading {kind} file {path} whole ({why})")
                    streaming.forget_file(store, kind, path)
                    loaded = read_file(kind, path, opts)
                else:
                    store.execute("forget_input_file", {"kind": kind, "path": path})  # recorded once settled
                    out.append(FileLoad(kind, path, digest, "loaded", st.rows, st.rejected, st.notices))
                    streamed.append((out[-1], st))
                    continue
            p = {"path": path}
            if kind == "buildings":
                store.execute("delete_buildings_from_file", p)
                store.execute("insert_buildings", p, stage_buildings=loaded.df)
            elif kind == "readings":
                store.execute("delete_readings_from_file", p)
                store.execute("insert_readings", p, stage_readings=loaded.df)
            else:
                store.execute("delete_weather_from_file", p)
                store.execute("insert_weather", p, stage_weather=loaded.df)
            store.execute("delete_load_rejects", {"kind": kind, "path": path})
            store.execute(
                "insert_load_rejects", {"kind": kind, "path": path}, stage_rejects=loaded.rejects.cast(REJECT_SCHEMA)
            )
            _record_input(store, kind, path, digest, oh, loaded.df.height, loaded.rejects.height)
            out.append(FileLoad(kind, path, digest, "loaded", loaded.df.height, loaded.rejects.height, loaded.notices))
        _forget_other_files(store, files)
    if streamed:
        with store.transaction():
            for fl, st in streamed:
                st = streaming.settle_repeats(store, fl.kind, fl.path, st)
                fl.rows, fl.rejected, fl.notices = st.rows, st.rejected, st.notices
                _record_input(store, fl.kind, fl.path, fl.sha256, oh, fl.rows, fl.rejected)
    return out


#: In a load plan: the file is read in chunks inside the transaction (screening.streaming).
_STREAM = Loaded("", pl.DataFrame(), pl.DataFrame(), [])
#: In a load plan being made: the file is read whole, before the transaction.
_READ = Loaded("", pl.DataFrame(), pl.DataFrame(), [])


def _record_input(store: Store, kind: str, path: str, digest: str, oh: str, rows: int, rejected: int) -> None:
    store.execute(
        "record_input_file",
        {
            "path": path,
            "kind": kind,
            "sha256": digest,
            "options_hash": oh,
            "rows_loaded": rows,
            "rows_rejected": rejected,
        },
    )


def _forget_other_files(store: Store, files: dict[str, list[str]]) -> None:
    """Drop the stored rows of files the run does not name (any more): what is screened is
    exactly the content of the files named now."""
    forget = {
        "buildings": "forget_buildings_of_other_files",
        "readings": "forget_readings_of_other_files",
        "weather": "forget_weather_of_other_files",
    }
    for kind in KINDS:
        paths = [str(p) for p in files.get(kind, [])]
        store.execute(forget[kind], {"paths": paths})
        store.execute("forget_load_rejects_of_other_files", {"kind": kind, "paths": paths})
        store.execute("forget_other_input_files", {"kind": kind, "paths": paths})


# ---------------------------------------------------------------------------- screening


@dataclass
class Screened:
    """Everything a run computed, before formatting."""

    results: pl.DataFrame  # one row per screened building, ranked
    rejects: pl.DataFrame  # cross-file rejects found while screening
    issues: pl.DataFrame  # building_id, code, detail, blocking
    periods: pl.DataFrame  # billing periods used for the charts
    envelope: pl.DataFrame
    window: tuple[_dt.date, _dt.date]
    timings: dict[str, float]
    normal_years: dict[str, list[int]]
    savings: pl.DataFrame | None = None  # one row per measure of the events file (events.measure_savings)
    savings_periods: pl.DataFrame | None = None  # one row per reporting bill of each measure (events.PERIOD_SCHEMA)
    learning: pl.DataFrame | None = None  # the defaults' bias per era x use type from audited values (learning.py)


def base_grid(cfg: config.Settings | dict) -> np.ndarray:
    a = config.settings(cfg).analysis
    n = int(round((a.base_max_f - a.base_min_f) / a.base_step_f)) + 1
    return np.round(a.base_min_f + a.base_step_f * np.arange(n), 6)


def _source(frame: pl.DataFrame, paths: dict, kind: str) -> pl.Expr:
    """The file a row came from: its ``_file`` column (several files of a kind) or the kind's one path."""
    return pl.col("_file") if "_file" in frame.columns else pl.lit(paths.get(kind, kind))


#: columns of the converted readings that the screening steps read (quantity, unit, cost are not)
_CONV_KEEP = (
    "building_id",
    "fuel",
    "meter_id",
    "period_start",
    "period_end",
    "energy_kbtu",
    "days",
    "is_heating_fuel",
    "estimated",
    "_line",
)


class _PeriodHdd:
    """Degree days of each billing period at every grid base, computed for the rows asked for.

    The whole (periods × bases) array is 71 × 8 bytes per period (gigabytes for millions of
    periods), so callers take it a block of rows at a time: ``self(rows)`` is
    ``cube.period_totals(...)[0][rows]``, ``missing()`` the days without weather of every row,
    ``at(j)`` row i's value at base index ``j[i]`` (these two need no more than one base per row,
    so they take every row at once). The stations are looked up once, here.
    """

    def __init__(self, cube, periods: pl.DataFrame):
        self.cube = cube
        self.fa, self.fb, self.days = cube.flat_ranges(
            periods["station_id"], periods["period_start"], periods["period_end"]
        )
        self.n = periods.height

    def __call__(self, rows: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        return self.cube.range_rows(self.fa[rows], self.fb[rows], out=out)

    def missing(self) -> np.ndarray:
        return self.cube.range_missing(self.fa, self.fb, self.days)

    def at(self, j: np.ndarray) -> np.ndarray:
        return self.cube.range_at(self.fa, self.fb, j)


#: Buildings per regression block (:func:`screening.metered._fit_in_blocks`); a chunk of the two-pass
#: screening is a whole number of blocks, so chunked and one-pass results are the same to the bit
FIT_BLOCK = 4096
REJECTS_EMPTY = pl.DataFrame(schema=REJECT_SCHEMA)


def _read_ahead(items: Iterator[Any]) -> Iterator[Any]:
    """``items`` in their order, each next one made on a thread while the caller works on the one before:
    a chunk's readings pulled from the store (DuckDB works outside the GIL; 0.2-0.6 s a chunk of 16,384
    buildings) overlap the screening of the chunk before. At most one item is held ahead. An error making
    an item is raised where the caller asks for it; a caller that stops early waits for the item in hand."""
    from concurrent.futures import ThreadPoolExecutor

    end = object()
    it = iter(items)
    with ThreadPoolExecutor(1, thread_name_prefix="read-ahead") as pool:
        nxt = pool.submit(next, it, end)
        while (item := nxt.result()) is not end:
            nxt = pool.submit(next, it, end)
            yield item
            del item


def in_order(pool: Executor, fn: Callable[..., Any], items: Iterator[tuple], n: int) -> Iterator[Any]:
    """``fn(*item)`` of every item submitted to ``pool`` (``n`` workers), the results yielded in the items'
    order. Items are taken from ``items`` in the calling thread as the workers need them, at most ``n + 1``
    in flight (one waiting beside each worker's), so the caller consumes each result while the workers go
    on. The waits are short (``render.pdf._WAIT_S``): a stop signal still reaches the main thread. An
    exception of ``fn`` is raised here, where its result would have been; stopping the pool on an exception
    is the caller's (``workers.in_order``: child processes; :func:`_side_by_side`: threads)."""
    from .render.pdf import _WAIT_S

    flight: deque[Future] = deque()
    more = True
    while more or flight:
        while more and len(flight) <= n:
            item = next(items, None)
            if item is None:
                more = False
                break
            flight.append(pool.submit(fn, *item))
            del item
        if not flight:
            break
        while not flight[0].done():
            wait([flight[0]], timeout=_WAIT_S)
        yield flight.popleft().result()


def _side_by_side(fn: Callable[..., Any], items: Iterator[tuple], n: int) -> Iterator[Any]:
    """``fn(*item)`` of every item on ``n`` threads of this process, in the items' order (:func:`in_order`).

    A chunk's work is mostly polars and numpy, which run outside the GIL, so two chunks on two threads keep
    both cores busier than one chunk at a time (issue 20). On any exception the items not started are
    dropped, and a thread mid-item finishes it in the background (a chunk's work touches no file and not
    the store)."""
    pool = ThreadPoolExecutor(n, thread_name_prefix="chunk")
    try:
        yield from in_order(pool, fn, items, n)
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)


def _summing_lap(timings: dict[str, float], lock: threading.Lock) -> Callable[[str], None]:
    """A ``lap`` for one chunk on a thread of its own: each stage's seconds added to ``timings`` under
    ``lock`` (summed over the chunks; chunks side by side overlap, so the sum exceeds the wall time)."""
    t0 = time.perf_counter()

    def lap(name: str) -> None:
        nonlocal t0
        now = time.perf_counter()
        with lock:
            timings[name] = round(timings.get(name, 0.0) + now - t0, 4)
        t0 = now

    return lap


def chunk_size(chunk_buildings: int, n_buildings: int, fit_block: int | None = None) -> int:
    """Buildings per chunk: ``chunk_buildings`` rounded up to whole regression blocks, all of them for 0."""
    fb = fit_block or FIT_BLOCK
    return n_buildings if chunk_buildings <= 0 else min(-(-chunk_buildings // fb) * fb, max(n_buildings, 1))


class ReadingsSource(ABC):
    """Where a screening gets the readings of a chunk of buildings (the readings rows of the canonical
    frame, one row per key): an interface, implemented by :class:`FrameReadings` (a frame in memory) and
    ``runs.inputs.StoreReadings`` (the store)."""

    @abstractmethod
    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        """The readings of the buildings ``ids``."""

    @abstractmethod
    def others(self, ids: pl.Series) -> pl.DataFrame:
        """The readings of every other building (rejected as unknown buildings)."""


class ChunkExecutor(ABC):
    """Runs the per-chunk work of :func:`screen_frames` elsewhere (``screening.cluster.DaskChunks``: tasks on
    Dask); without one, the chunks run one after the other in this process."""

    @abstractmethod
    def screen_parts(self, chunks: Iterator[tuple[pl.DataFrame, pl.DataFrame]], common: dict) -> list[_Part]:
        """``_screen_part(buildings, readings, lap=…, **common)`` of every chunk, in the chunks' order."""


class FrameReadings(ReadingsSource):
    """Readings held in memory as one frame."""

    def __init__(self, readings: pl.DataFrame):
        self.r = readings

    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        return self.r.filter(pl.col("building_id").is_in(ids.implode()))

    def others(self, ids: pl.Series) -> pl.DataFrame:
        return self.r.filter(~pl.col("building_id").is_in(ids.implode()))


def _cross_check_buildings(b: pl.DataFrame, stations: list[str], paths: dict) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Buildings whose station has weather, and the rejects of the others."""
    st = pl.Series(stations, dtype=pl.String).implode()
    bad_b = b.filter(~pl.col("station_id").is_in(st))
    rej = bad_b.select(
        _source(b, paths, "buildings").alias("file"),
        pl.col("_line").alias("line"),
        pl.lit("station_id").alias("column"),
        pl.col("station_id").alias("value"),
        pl.lit("unknown station (not in the weather data)").alias("reason"),
    )
    return b.filter(pl.col("station_id").is_in(st)), rej.cast(REJECT_SCHEMA)


def _cross_check(b: pl.DataFrame, r: pl.DataFrame, stations: list[str], paths: dict) -> tuple:
    """Buildings with a known station, their readings, and the rejects of the rest (both files)."""
    b, rej = _cross_check_buildings(b, stations, paths)
    ids = b["building_id"].implode()
    bad_r = r.filter(~pl.col("building_id").is_in(ids))
    return b, r.filter(pl.col("building_id").is_in(ids)), pl.concat([rej, _unknown_building_rejects(bad_r, paths)])


def _unknown_building_rejects(bad_r: pl.DataFrame, paths: dict) -> pl.DataFrame:
    """Rejects of readings whose building is not among the accepted buildings."""
    return bad_r.select(
        _source(bad_r, paths, "readings").alias("file"),
        pl.col("_line").alias("line"),
        pl.lit("building_id").alias("column"),
        pl.col("building_id").alias("value"),
        pl.lit("unknown building (not among the accepted buildings)").alias("reason"),
    ).cast(REJECT_SCHEMA)


def screen_frames(
    buildings: pl.DataFrame,
    readings: pl.DataFrame | ReadingsSource,
    weather: pl.DataFrame,
    cfg: config.Settings | dict,
    *,
    window: tuple[_dt.date, _dt.date],
    paths: dict | None = None,
    previous: pl.DataFrame | None = None,
    events: pl.DataFrame | None = None,
    plan_context: pl.DataFrame | None = None,
    chunk_buildings: int = 0,
    fit_block: int | None = None,
    executor: ChunkExecutor | None = None,
    keep_periods: bool = True,
    workers: int = 1,
    threads: int = 1,
) -> Screened:
    """Screen a portfolio (canonical IP frames, see DEVELOPERS.md).

    ``previous`` is an earlier run's results (``building_id, normal_heating_kbtu``) for
    the year-over-year comparison. ``events`` (from ``events.read_all``) adds the savings after
    each measure (``Screened.savings``).

    Two passes: the per-building work (spans, periods, fits, envelope, Monte Carlo, excess, data
    issues, savings) runs over chunks of ``chunk_buildings`` buildings in building_id order (0 = all
    at once), each chunk with only its own readings (``readings`` is a frame, or a
    :class:`ReadingsSource` that gives a chunk's readings, e.g. from the store); the portfolio
    statistics (peer medians and spreads, year-on-year z, the ranking: :func:`screen.screen`) run
    once over all results. A chunk is a whole number of regression blocks of ``fit_block``
    buildings (default :data:`FIT_BLOCK`; :func:`chunk_size`), so the results are those of one pass.
    ``executor`` runs the chunks elsewhere (:class:`ChunkExecutor`, e.g. ``cluster.DaskChunks``); without
    one, ``workers`` ≥ 2 screens up to that many chunks side by side on local child processes
    (``screening.workers.LocalWorkers``), else ``threads`` ≥ 2 up to that many on threads of this process
    (:func:`_side_by_side`; the chunk stages' timings are then summed over the threads, and
    ``chunks_side_by_side`` is the phase's wall time).
    ``keep_periods`` False leaves ``Screened.periods`` empty (its columns kept): only the sheets read
    every building's billing periods, about 36 rows a building (gigabytes at 10^6 buildings), so a run
    without sheets drops each chunk's periods as soon as the chunk is screened.
    """
    fit_block = fit_block or FIT_BLOCK
    paths = paths or {}
    s = config.settings(cfg)  # the typed settings (a config dict from a caller converted once, here)
    a = s.analysis
    thr = s.thresholds  # the [thresholds] settings, typed and frozen, for every step below
    t0 = time.perf_counter()
    timings: dict[str, float] = {}

    def lap(name: str) -> None:  # summed over the chunks
        nonlocal t0
        now = time.perf_counter()
        timings[name] = round(timings.get(name, 0.0) + now - t0, 4)
        t0 = now

    grid = base_grid(s)
    stations = sorted(weather["station_id"].unique().to_list())
    source = readings if isinstance(readings, ReadingsSource) else FrameReadings(readings)
    del readings  # the source holds the frame (a caller passing the store's frame frees it with the source)
    b, rejects = _cross_check_buildings(buildings, stations, paths)
    rejects = pl.concat([rejects, _unknown_building_rejects(source.others(b["building_id"]), paths)])
    b = b.drop("_file", strict=False).sort("building_id")
    if b.height == 0:
        raise InputError(
            paths.get("buildings", "buildings"),
            "no building could be screened",
            expected="at least one accepted building with a known weather station",
        )
    ws, we = window

    # weather: short gaps filled, long ones reported; the degree-day cube for every base
    filled, gaps = ddm.fill_short_gaps(weather)
    cube = ddm.DegreeDayCube.from_daily(filled, grid, method=a.degree_day_method)
    years = range(a.normal_years[0], a.normal_years[1] + 1) if a.normal_years else None
    normals = ddm.normal_year(cube, grid, years=years)
    if years is not None:
        _check_normal_years(normals, b, weather, a.normal_years)
    lap("degree_days")

    # the defaults' bias learned from audited buildings: a portfolio statistic, before the chunks (issue 17)
    learned = _audit_bias(b, s.learning.min_audits)
    lap("envelope")

    # per-building work, a chunk of buildings at a time (each building's rows depend only on its own)
    size = chunk_size(chunk_buildings, b.height, fit_block)
    chunked = size < b.height
    common: dict[str, Any] = dict(
        weather=weather,
        cfg=s,
        cube=cube,
        normals=normals,
        gaps=gaps,
        grid=grid,
        window=window,
        paths=paths,
        previous=previous,
        plan_context=plan_context,
        events=events,
        chunked=chunked,
        fit_block=fit_block,
        learned=learned,
        thresholds=thr,
    )
    chunks = ((bc, source(bc["building_id"])) for bc in (b.slice(c0, size) for c0 in range(0, b.height, max(size, 1))))
    n_chunks = -(-b.height // max(size, 1))
    if executor is None and workers >= 2:
        from . import workers as local

        executor = local.from_config(workers, n_chunks)
    if executor is None and threads >= 2 and n_chunks >= 2:  # chunks side by side on threads of this process
        lock = threading.Lock()

        def on_thread(bc: pl.DataFrame, rc: pl.DataFrame) -> _Part:
            return _periods_kept(_screen_part(bc, rc, lap=_summing_lap(timings, lock), **common), keep_periods)

        parts = list(_side_by_side(on_thread, chunks, min(threads, n_chunks)))
        lap("chunks_side_by_side")
    elif executor is None:
        ahead = _read_ahead(chunks) if chunked else chunks  # the next chunk's readings read during this one's work
        parts = [_periods_kept(_screen_part(bc, rc, lap=lap, **common), keep_periods) for bc, rc in ahead]
    else:  # elsewhere (screening.cluster): the per-chunk stages are timed together
        parts = [_periods_kept(p, keep_periods) for p in executor.screen_parts(chunks, common)]
        lap("chunks_elsewhere")
    del source, chunks
    if chunked and not any(p.covered for p in parts):
        firsts = [p.first for p in parts if p.first is not None]
        lasts = [p.last for p in parts if p.last is not None]
        _no_building_screenable_counts(
            sum(p.n_conv for p in parts),
            sum(p.n_readings for p in parts),
            min(firsts) if firsts else None,
            max(lasts) if lasts else None,
            window,
            paths,
        )
    frame = pl.concat([p.frame for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].frame
    rejects = pl.concat([rejects, *[p.rejects for p in parts]])
    issues_df = pl.concat([p.issues for p in parts]) if len(parts) > 1 else parts[0].issues
    periods = pl.concat([p.periods for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].periods
    envelope = pl.concat([p.envelope for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].envelope
    saved, saved_periods = None, None
    if events is not None:
        saved = pl.concat([p.savings for p in parts if p.savings is not None], how="vertical_relaxed")
        saved_periods = pl.concat(
            [p.savings_periods for p in parts if p.savings_periods is not None], how="vertical_relaxed"
        )
    ctx_parts = [p.plan_context for p in parts if p.plan_context is not None]
    measure_ctx = pl.concat(ctx_parts, how="vertical_relaxed") if ctx_parts else None
    del parts

    # the portfolio pass: peer statistics, year-on-year z, the ranking
    units_ip = a.units == "IP"
    results = wording.explain(  # the sentences, once over the portfolio (screening/wording.py)
        screen.screen(frame, thr, plan=s.plan),
        thr,
        currency=s.prices.currency,
        energy_factor=1.0 if units_ip else KBTU_TO_KWH,
        energy_unit="kBtu" if units_ip else "kWh",
    )
    if measure_ctx is not None and "_measure_date" in measure_ctx.columns:  # the measure's note in the verdict
        said = measure_ctx.filter(pl.col("_measure_date").is_not_null()).select(
            "building_id", pl.col("plan_note").alias("_mnote")
        )
        results = (
            results.join(said, on="building_id", how="left", maintain_order="left")
            .with_columns(
                pl.when(pl.col("_mnote").is_not_null())
                .then(pl.col("verdict") + pl.lit(" After the ") + pl.col("_mnote") + pl.lit("."))
                .otherwise(pl.col("verdict"))
                .alias("verdict")
            )
            .drop("_mnote")
        )
    lap("screening")
    return Screened(
        results=results,
        rejects=rejects,
        issues=issues_df,
        periods=periods.drop("station_id"),
        envelope=envelope,
        window=window,
        timings=timings,
        normal_years=normals.years_used,
        savings=saved,
        savings_periods=saved_periods,
        learning=learned,
    )


@dataclass
class _Part:
    """One chunk's per-building results (before the portfolio pass)."""

    frame: pl.DataFrame = field(default_factory=pl.DataFrame)
    issues: pl.DataFrame = field(default_factory=pl.DataFrame)
    periods: pl.DataFrame = field(default_factory=pl.DataFrame)
    envelope: pl.DataFrame = field(default_factory=pl.DataFrame)
    rejects: pl.DataFrame = field(default_factory=pl.DataFrame)
    savings: pl.DataFrame | None = None
    savings_periods: pl.DataFrame | None = None
    plan_context: pl.DataFrame | None = None  # the chunk's rows of the plan context, as the measure rules left them
    covered: bool = False
    first: _dt.date | None = None
    last: _dt.date | None = None
    n_conv: int = 0
    n_readings: int = 0


def _periods_kept(part: _Part, keep: bool) -> _Part:
    """The chunk's result, its billing periods emptied (columns kept) unless ``keep``."""
    if not keep:
        part.periods = part.periods.clear()
    return part


def _screen_part(
    b: pl.DataFrame,
    r: pl.DataFrame,
    weather: pl.DataFrame,
    cfg: config.Settings,
    *,
    cube,
    normals,
    gaps: pl.DataFrame,
    grid: np.ndarray,
    window: tuple[_dt.date, _dt.date],
    paths: dict,
    previous: pl.DataFrame | None,
    plan_context: pl.DataFrame | None,
    events: pl.DataFrame | None,
    chunked: bool,
    fit_block: int,
    lap,
    learned: pl.DataFrame | None = None,
    thresholds: config.Thresholds | None = None,
) -> _Part:
    """The per-building work for the buildings ``b`` (sorted) and their checked readings ``r``."""
    a = cfg.analysis
    ws, we = window
    part = _Part()
    # metered side
    conv, conv_rej = units.convert_to_kbtu(r, b, gas_btu_per_ft3=a.gas_btu_per_ft3, steam_btu_per_lb=a.steam_btu_per_lb)
    n_readings = r.height
    del r
    billed = units.billed_units(conv)  # the bills' own unit per building (sheets and ranking.csv)
    conv = conv.select([c for c in _CONV_KEEP if c in conv.columns])  # what the later steps read (not _file)
    rejects = REJECTS_EMPTY
    if conv_rej.height:
        rejects = pl.concat(
            [
                rejects,
                conv_rej.select(
                    _source(conv_rej, paths, "readings").alias("file"),
                    "line",
                    "column",
                    pl.col("value").cast(pl.String),
                    "reason",
                ).cast(REJECT_SCHEMA),
            ]
        )
    thr = thresholds or cfg.thresholds
    spans = metered.choose_spans(
        conv,
        ws,
        we,
        lookback_months=a.lookback_months,
        min_coverage=thr.coverage_min,
        building_ids=b["building_id"],
        fill_end_days=a.fill_end_days,
    )
    if plan_context is not None:
        plan_context = plan_context.filter(pl.col("building_id").is_in(b["building_id"].implode()))
    if plan_context is not None and plan_context.height and "_judge_from" in plan_context.columns:
        # issue 17: a building with a measure in the window is judged on the days after it (events.plan_context)
        spans, plan_context = _post_measure_spans(
            conv,
            spans,
            plan_context,
            we,
            lookback_months=a.lookback_months,
            min_coverage=thr.coverage_min,
            fill_end_days=a.fill_end_days,
        )
    part.plan_context = plan_context
    part.covered = bool((spans["coverage"].fill_null(0.0) > 0).any())
    if conv.height:
        part.first, part.last = conv["period_start"].min(), conv["period_end"].max()  # type: ignore[assignment]
    part.n_conv, part.n_readings = conv.height, n_readings
    if not part.covered and not chunked:
        _no_building_screenable(conv, n_readings, window, a.lookback_months, paths)
    spans = spans.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    st = spans["station_id"].to_numpy()
    span_hdd, span_days, span_missing = cube.period_totals(st, spans["span_start"], spans["span_end"])
    fill_hdd = _fill_hdd(cube, spans, grid)
    periods = metered.fit_periods(conv, spans, lookback_months=a.lookback_months)
    if plan_context is not None and "_judge_from" in plan_context.columns:  # post-measure bills only (issue 17)
        jf = plan_context.filter(pl.col("_judge_from").is_not_null()).select("building_id", "_judge_from")
        periods = (
            periods.join(jf, on="building_id", how="left", maintain_order="left")
            .filter(pl.col("_judge_from").is_null() | (pl.col("period_start") >= pl.col("_judge_from")))
            .drop("_judge_from")
        )
    periods = periods.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    period_hdd: _PeriodHdd | np.ndarray
    if periods.height:
        period_hdd = _PeriodHdd(cube, periods)  # rows computed a block at a time, never all at once
        periods = periods.with_columns((pl.col("usable") & pl.Series(period_hdd.missing() == 0)).alias("usable"))
    else:
        period_hdd = np.zeros((0, grid.size))
    normal_hdd = normals.for_stations(st)
    lap("metered_prep")

    envelope = env.estimate_envelope(b)
    lap("envelope")
    eff = envelope["efficiency"].to_numpy()
    met = metered.metered_heating(
        conv,
        spans.drop("station_id"),
        b,
        periods=periods.drop("station_id"),
        period_hdd=period_hdd,
        span_hdd=span_hdd,
        normal_hdd=normal_hdd,
        base_grid_f=grid,
        efficiency=eff,
        engineering_base_f=envelope["balance_point_f"].to_numpy(),
        method=a.calendarization,
        fill_hdd=fill_hdd,
        daily_weights=_daily_weights(cube, spans, conv, envelope) if a.calendarization == "degree_days" else None,
        fit_block=fit_block,
    )
    lap("regression")
    if periods.height:
        base = metered.base_per_period(periods, met, envelope)
        assert isinstance(period_hdd, _PeriodHdd)  # set so above whenever there are periods
        periods = periods.with_columns(
            pl.Series("hdd_per_day_fit", period_hdd.at(nearest_base(grid, base)) / periods["days"].to_numpy())
        )
    hdd65 = cube.at_base(st, spans["span_start"], spans["span_end"], np.full(len(st), 65.0))[0]
    exp = env.expected_heating(envelope, grid, span_hdd, hdd_fixed_base=hdd65, n_draws=a.draws, seed=a.seed)
    if learned is not None and bool(learned["applied"].any()):  # issue 17: the defaults corrected by the audits
        exp = _apply_bias(exp, b, envelope, learned)
    lap("expected")
    hdd_bal = cube.at_base(st, spans["span_start"], spans["span_end"], envelope["balance_point_f"].to_numpy())[0]

    # data issues
    issues_df = data_issues.chunk_issues(
        conv,
        spans,
        span_missing,
        met,
        periods,
        b,
        gaps,
        weather,
        window,
        thr,
        lookback_months=a.lookback_months,
    )

    # assemble and screen
    shares = refdata.load("baseload_shares")
    frame = (
        b.select(
            "building_id",
            "name",
            "station_id",
            "use_type",
            "floor_area_ft2",
            "year_built",
            "heating_fuel",
            "price",
            "address",
            "city",
        )
        .join(met, on="building_id", how="left", maintain_order="left")
        .join(exp, on="building_id", how="left", maintain_order="left")
        .join(
            envelope.select(
                "building_id",
                "era",
                "envelope_source",
                "balance_point_f",
                "efficiency",
                *[c for c in envelope.columns if c.startswith("ua_")],
            ),
            on="building_id",
            how="left",
            maintain_order="left",
        )
    )
    frame = frame.with_columns(pl.Series("hdd65", hdd65), pl.Series("hdd_balance", hdd_bal))
    frame = frame.with_columns(
        pl.when(pl.col("heating_fuel") == "electricity")
        .then(pl.lit("electricity"))
        .otherwise(pl.lit("combustion"))
        .alias("_fc")
    )
    frame = frame.join(
        shares.select(
            pl.col("use_type"),
            pl.col("fuel_class").alias("_fc"),
            pl.col("nonheating_share").cast(pl.Float64).alias("baseload_share_default"),
        ),
        on=["use_type", "_fc"],
        how="left",
        maintain_order="left",
    ).drop("_fc")
    frame = frame.with_columns(
        pl.when(pl.col("total_fuel_kbtu") > 0)
        .then(pl.col("baseload_kbtu") / pl.col("total_fuel_kbtu"))
        .otherwise(None)
        .alias("baseload_share")
    )
    frame = frame.join(_prices(b, cfg), on="building_id", how="left", maintain_order="left")
    frame = frame.join(billed, on="building_id", how="left", maintain_order="left")
    frame = frame.join(
        yoy.year_over_year(conv, spans, met, cube, normals, grid), on="building_id", how="left", maintain_order="left"
    )
    if previous is not None and previous.height:
        frame = frame.join(
            previous.select("building_id", pl.col("normal_heating_kbtu").alias("prev_normal_heating_kbtu")),
            on="building_id",
            how="left",
            maintain_order="left",
        )
    else:
        frame = frame.with_columns(pl.lit(None, dtype=pl.Float64).alias("prev_normal_heating_kbtu"))
    issues_df = data_issues.far_from_expectation(frame, issues_df, thr)  # a data problem, not waste
    agg = issues_df.group_by("building_id").agg(
        pl.col("blocking").any().alias("blocking"),
        pl.col("code").sort().alias("data_issue_codes"),
        pl.col("detail").sort_by("code").alias("data_issue_texts"),
    )
    frame = frame.join(agg, on="building_id", how="left", maintain_order="left").with_columns(
        pl.col("blocking").fill_null(False),
        pl.col("data_issue_codes").fill_null(pl.lit([], dtype=pl.List(pl.String))),
        pl.col("data_issue_texts").fill_null(pl.lit([], dtype=pl.List(pl.String))),
    )
    # no metered heating without heating-fuel readings, no expectation without weather: shown as n/a
    no_fuel = (
        pl.col("data_issue_codes").list.set_intersection(["no_readings", "no_heating_fuel_readings"]).list.len() > 0
    )
    no_weather = pl.col("data_issue_codes").list.contains("no_weather_at_station")
    frame = frame.with_columns(
        pl.when(no_fuel).then(None).otherwise(pl.col("actual_heating_kbtu")).alias("actual_heating_kbtu"),
        *[
            pl.when(no_weather).then(None).otherwise(pl.col(c)).alias(c)
            for c in ("expected_heating_kbtu", "expected_low_kbtu", "expected_high_kbtu")
        ],
    )
    if plan_context is not None:  # issue 17: events.plan_context (audits that found nothing, confirmed findings)
        frame = frame.join(plan_context, on="building_id", how="left", maintain_order="left")
        if "_measure_in_years" in frame.columns:  # the drop after a measure is savings, not a change on last year
            no_yoy = pl.col("_measure_in_years").fill_null(False)
            frame = frame.with_columns(
                [
                    pl.when(no_yoy).then(None).otherwise(pl.col(c)).alias(c)
                    for c in ("yoy_change", "prev_normal_heating_kbtu")
                    if c in frame.columns
                ]
            )
    lap("screening")  # the data issues and the frame: counted with the screening, as in one pass
    part.savings = None
    if events is not None:  # savings after a measure (issue 17): screening/events.py, screening/savings.py
        from . import events as ev

        sc = cfg.savings
        part.savings, part.savings_periods = ev.savings_with_periods(
            conv,
            b,
            cube,
            normals,
            grid,
            events.filter(pl.col("building_id").is_in(b["building_id"].implode())),
            _prices(b, cfg),
            window_end=we,
            blackout_days=sc.blackout_days,
            min_periods=sc.baseline_min_periods,
            cv_max=sc.cv_rmse_max,
            nmbe_max=sc.nmbe_max,
        )
        lap("savings")
    part.frame, part.issues, part.periods, part.envelope, part.rejects = frame, issues_df, periods, envelope, rejects
    return part


_AUDITED = ("ua_total_btu_h_f", "heating_efficiency", "balance_point_f")


def _audit_bias(b: pl.DataFrame, min_audits: int) -> pl.DataFrame | None:
    """The defaults' bias per era x use type from the buildings' audited values (``learning.audit_bias``);
    None when no building has one. The defaults are the envelope estimate with the audited values left out."""
    from . import learning

    cols = [c for c in _AUDITED if c in b.columns]
    if not cols:
        return None
    # only audited buildings count (learning.audit_bias keeps the rows with a given value), and a building's
    # envelope estimate depends on its own row only: two estimates of every building took 10 GB at 10^6
    b = b.filter(pl.any_horizontal([pl.col(c).is_not_null() for c in cols]))
    if b.height == 0:
        return None
    envelope = env.estimate_envelope(b)
    dflt = env.estimate_envelope(b.with_columns([pl.lit(None, dtype=pl.Float64).alias(c) for c in cols]))
    given = b.select(
        "building_id",
        *[pl.col(c).cast(pl.Float64) if c in cols else pl.lit(None, dtype=pl.Float64).alias(c) for c in _AUDITED],
    ).join(envelope.select("building_id", "era", "use_type"), on="building_id", how="inner")
    return learning.audit_bias(given, dflt, min_audits=min_audits)


def _apply_bias(exp: pl.DataFrame, b: pl.DataFrame, envelope: pl.DataFrame, learned: pl.DataFrame) -> pl.DataFrame:
    """The expected heating of buildings without their own audited UA or efficiency, times the learned factor."""
    from . import learning

    eff_given = (
        b.select("building_id", pl.col("heating_efficiency").is_not_null().alias("efficiency_given"))
        if "heating_efficiency" in b.columns
        else b.select("building_id", pl.lit(False).alias("efficiency_given"))
    )
    fr = (
        envelope.select("building_id", "era", "use_type", pl.col("ua_parts_scaled").alias("ua_given"))
        .join(eff_given, on="building_id", how="left", maintain_order="left")
        .with_columns(pl.col("efficiency_given").fill_null(False))
    )
    f = learning.expectation_factors(fr, learned)["learned_factor"]
    cols = [
        c
        for c in (
            "expected_heating_kbtu",
            "expected_low_kbtu",
            "expected_high_kbtu",
            "expected_point_kbtu",
            "expected_fixed_base_kbtu",
            "expected_modified_kbtu",
        )
        if c in exp.columns
    ]
    return exp.with_columns([pl.col(c) * f for c in cols])


def _post_measure_spans(
    conv: pl.DataFrame,
    spans: pl.DataFrame,
    ctx: pl.DataFrame,
    window_end: _dt.date,
    *,
    lookback_months: int,
    min_coverage: float,
    fill_end_days: int,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """The spans of buildings judged on their post-measure days (``events.plan_context`` ``_judge_from``).

    Each such span becomes ``[_judge_from, window_end]`` when the bills cover it (rule 1 of
    ``metered.choose_spans`` on that window, the filled end included). A building whose bills do not
    keeps its 12-month span and is held off the plan (``_measure_recent``), its note saying why.
    """
    jf = ctx.filter(pl.col("_judge_from").is_not_null()).select("building_id", "_judge_from")
    if jf.height == 0:
        return spans, ctx
    new = []
    for (day,), grp in jf.group_by("_judge_from", maintain_order=True):  # one call per measure day, not per building
        ids = grp["building_id"]
        s = metered.choose_spans(
            conv.filter(pl.col("building_id").is_in(ids.implode())),
            day,
            window_end,
            lookback_months=lookback_months,
            min_coverage=min_coverage,
            building_ids=ids,
            fill_end_days=fill_end_days,
        )
        new.append(s.filter(pl.col("span_kind") == "window").select(spans.columns))
    cut = pl.concat(new).cast(spans.schema)
    ok = cut["building_id"].implode()
    spans = pl.concat([spans.filter(~pl.col("building_id").is_in(ok)), cut]).sort("building_id")
    failed = pl.col("_judge_from").is_not_null() & ~pl.col("building_id").is_in(ok)
    ctx = ctx.with_columns(
        pl.when(failed).then(pl.lit(True)).otherwise(pl.col("_measure_recent")).alias("_measure_recent"),
        pl.when(failed)
        .then(
            pl.lit("measure of ")
            + pl.col("_measure_date").cast(pl.String)
            + pl.lit(": the bills do not cover every day from ")
            + pl.col("_judge_from").cast(pl.String)
            + pl.lit(
                f" to {window_end}, so it is not judged on its post-measure days and not planned "
                "on the mixed 12 months (its savings are in savings.csv)"
            )
        )
        .otherwise(pl.col("plan_note"))
        .alias("plan_note"),
    ).with_columns(pl.when(failed).then(None).otherwise(pl.col("_judge_from")).alias("_judge_from"))
    return spans, ctx


def _check_normal_years(normals, b: pl.DataFrame, weather: pl.DataFrame, ny: list[int]) -> None:
    """Configured normal years must be complete years of every station that serves a building.

    Otherwise every normal-year figure of those buildings would be empty and the year-over-year
    path of the audit list silently off.
    """
    used = sorted(set(b["station_id"].to_list()))
    missing = [s for s in used if not normals.years_used.get(s)]
    if not missing:
        return
    rng = (
        weather.filter(pl.col("station_id").is_in(missing))
        .group_by("station_id")
        .agg(pl.col("date").min().alias("a"), pl.col("date").max().alias("b"))
        .sort("station_id")
    )
    have = "; ".join(f"{r['station_id']} has weather {r['a']} to {r['b']}" for r in rng.head(3).iter_rows(named=True))
    more = f" and {len(missing) - 3} more" if len(missing) > 3 else ""
    raise ConfigError(
        f"config key [analysis] normal_years: got {ny!r}; no complete year of weather in "
        f"{ny[0]}–{ny[1]} at station(s) {', '.join(missing[:3])}{more} ({have}); "
        "expected years the weather files cover (or leave it empty for every complete year)"
    )


def _no_building_screenable(conv: pl.DataFrame, n_readings: int, window, lookback: int, paths: dict) -> None:
    """No building has a heating-fuel reading on any day of its span: nothing can be screened."""
    first = conv["period_start"].min() if conv.height else None
    last = conv["period_end"].max() if conv.height else None
    _no_building_screenable_counts(conv.height, n_readings, first, last, window, paths)


def _no_building_screenable_counts(n_conv: int, n_readings: int, first, last, window, paths: dict) -> None:
    """:func:`_no_building_screenable` from the counts and the readings' first and last dates."""
    ws, we = window
    if n_conv:
        span = f"readings run from {first!s} to {last!s}"
    elif n_readings:
        span = "no reading converts to energy (see rejects)"
    else:
        span = "no reading was accepted"
    raise InputError(
        paths.get("readings", "readings"),
        f"no building can be screened: no heating-fuel reading covers any day of the analysis "
        f"window {ws} to {we} ({span})",
        expected="readings for the window (check --as-of / --from / --to)",
    )


def _fill_hdd(cube, spans: pl.DataFrame, grid: np.ndarray) -> np.ndarray:
    """HDD at every grid base over each span's filled days at its end (zeros where none) [°F·day]."""
    out = np.zeros((spans.height, grid.size))
    idx = np.flatnonzero(spans["filled_days"].fill_null(0).to_numpy() > 0)
    if idx.size:
        sub = spans[idx]
        start = sub.select(pl.col("span_end") - pl.duration(days=pl.col("filled_days")) + pl.duration(days=1))
        out[idx] = cube.period_totals(sub["station_id"].to_numpy(), start.to_series(), sub["span_end"])[0]
    return out


def _daily_weights(cube, spans: pl.DataFrame, conv: pl.DataFrame, envelope: pl.DataFrame) -> pl.DataFrame:
    """Daily HDD at each building's balance point (nearest grid base) over its readings' days.

    The weights of the degree-day proration option of :func:`screening.metered.calendarize`.
    """
    rng = conv.group_by("building_id").agg(
        pl.col("period_start").min().alias("s"), pl.col("period_end").max().alias("e")
    )
    rng = (
        spans.select("building_id", "station_id")
        .join(rng, on="building_id", how="inner")
        .join(envelope.select("building_id", "balance_point_f"), on="building_id")
        .sort("building_id")
    )
    d = cube.daily(rng["station_id"].to_numpy(), rng["s"], rng["e"])
    j = nearest_base(cube.bases_f, rng["balance_point_f"].to_numpy())
    w = d.dd[np.arange(d.row.size), j[d.row]]
    return pl.DataFrame(
        {
            "building_id": rng["building_id"].to_numpy()[d.row],
            "date": d.date.astype("datetime64[D]"),
            "weight": np.where(d.missing, np.nan, w),
        }
    ).with_columns(pl.col("weight").fill_nan(None))


def _prices(b: pl.DataFrame, cfg: config.Settings) -> pl.DataFrame:
    """$ and kg CO2e per kBtu of fuel input for each building."""
    pu = refdata.load("price_units")
    ef = refdata.load("emission_factors")
    rows = []
    for r in pu.iter_rows(named=True):
        fuel, unit = r["fuel"], r["price_unit"]
        kbtu_per_unit = (
            units.btu_per_unit(
                unit,
                fuel,
                heat_contents={
                    "natural_gas": cfg.analysis.gas_btu_per_ft3,
                    "district_steam": cfg.analysis.steam_btu_per_lb,
                },
            )
            / 1000.0
        )
        kg = float(ef.filter(pl.col("fuel") == fuel)["kg_co2e_per_mmbtu"][0]) / 1000.0
        if fuel == "electricity" and cfg.emissions.electricity_kg_co2e_per_kwh is not None:
            kg = cfg.emissions.electricity_kg_co2e_per_kwh / units.btu_per_unit("kWh", fuel) * 1000.0
        rows.append(
            {
                "heating_fuel": fuel,
                "_kbtu_per_unit": kbtu_per_unit,
                "_price": float(getattr(cfg.prices, fuel)),
                "kg_co2e_per_kbtu": kg,
            }
        )
    table = pl.DataFrame(rows)
    return (
        b.select("building_id", "heating_fuel", "price")
        .join(table, on="heating_fuel", how="left")
        .select(
            "building_id",
            (pl.coalesce(pl.col("price"), pl.col("_price")) / pl.col("_kbtu_per_unit")).alias("usd_per_kbtu"),
            "kg_co2e_per_kbtu",
        )
    )
