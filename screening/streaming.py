"""Streaming ingest: a large buildings or readings CSV read, checked and stored a chunk at a time.

The whole-file path (:func:`screening.ingest.read_buildings` / ``read_readings``) holds a file's
decoded text and its frames at once. Here a text file is read ``chunk_bytes`` of whole lines at a
time; each chunk goes through the same record split (:mod:`screening.csvread`), the same typing and
checks (:mod:`screening.ingest`) and into the store inside the load's transaction, so only one
chunk's text and frames are in memory; a chunk is typed, checked and stored on a thread of its own
while the next one's records are split (:class:`_Writer`). Duplicates and conflicting rows can sit in
different chunks: they are found once the load is committed, in the store (the rows whose key occurs
more than once in the file,
``sql/load.sql``), and decided by the same functions as in the whole-file path
(:func:`ingest.reading_duplicates`, :func:`ingest.building_duplicates`) in a second transaction
(:func:`settle_repeats`). The stored rows, the rejects and the notices are those of the whole-file path
(``tests/test_streaming.py`` compares them).

What the whole-file path decides from the whole file, and which a chunk cannot tell, sends the file
to that path instead (:class:`WholeFile`): a workbook or Parquet file; no ``\\n`` line ends (CR-only);
NUL bytes in the first MB; a forced encoding that fails, or a file that is neither UTF-8 nor cp1252
(the whole-file path words the error); a readings file with read dates instead of start dates; period
stamps at midnight (whether they are exclusive ends is judged over the whole file); slash dates without
``[reading] date_order`` (the day/month order is read from the whole file). The encoding is decided by a
first pass over the file's bytes (UTF-8, else cp1252, with the notice of the first bad line), which also
tells whether the file has quote characters: without, every line is a record (``csvread._fast_chunk``);
with, one ``csv`` reader runs over the whole file, its records taken ``chunk_bytes / 64`` at a time.
"""

from __future__ import annotations

import csv
import io
import queue
import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from . import csvread, ingest
from .csvread import LINE_COL
from .errors import InputError
from .ingest import REJECT_SCHEMA, ReadOptions
from .parse import midnight_stamps
from .store import Store

#: Bytes of whole lines read, checked and stored at a time (a chunk peaks at several times this in memory).
STREAM_CHUNK_BYTES = 32 << 20
_SCAN_BYTES = 8 << 20
_SLASH_DATE = r"^\d{1,2}[/.]\d{1,2}[/.]\d{2,4}$"
STREAMED_KINDS = ("buildings", "readings")


#: The named statements (sql/load.sql) of each streamed kind.
_STATEMENTS = {
    "readings": {
        "insert": "insert_readings",
        "delete_file": "delete_readings_from_file",
        "delete_lines": "delete_readings_of_file_lines",
    },
    "buildings": {
        "insert": "insert_buildings",
        "delete_file": "delete_buildings_from_file",
        "delete_lines": "delete_buildings_of_file_lines",
    },
}


class WholeFile(Exception):
    """This file is read by the whole-file path (see the module's docstring); the reason in words."""


@dataclass
class Scan:
    """What a first pass over a file's bytes tells: its encoding, whether it has quotes, its lines."""

    encoding: str  # "utf-8" or "cp1252" (or the forced one)
    bom: bool  # a UTF-8 byte-order mark to drop (not with a forced encoding, as the whole-file path)
    quotes: bool
    n_lines: int  # as the whole-file reader counts them
    notices: list[str]


@dataclass
class Streamed:
    """A file stored by :func:`load_streamed`: rows kept, rows rejected, notices."""

    rows: int
    rejected: int
    notices: list[str]


def streamable(kind: str, path: str, chunk_bytes: int) -> bool:
    """Whether ``path`` is a text file of a streamed kind larger than one chunk."""
    if kind not in STREAMED_KINDS or not chunk_bytes or csvread.is_table_file(path):
        return False
    try:
        return Path(path).stat().st_size > chunk_bytes
    except OSError:
        return False


def _blocks(f, size: int):
    """Blocks of whole lines of about ``size`` bytes (the last line of a block read to its end)."""
    while True:
        block = f.read(size)
        if not block:
            return
        if not block.endswith(b"\n"):
            block += f.readline()
        yield block


def scan(path: str, label: str, encoding: str | None) -> Scan:
    """The first pass: encoding, quotes and line count, without holding the file."""
    with open(path, "rb") as f:
        head = f.read(1_000_000)
        if b"\x00" in head:
            raise WholeFile("NUL bytes")
        f.seek(0)
        bom = head.startswith(b"\xef\xbb\xbf")
        enc = encoding or "utf-8"
        quotes = has_lf = False
        n_nl, last = 0, b""
        bad_line = None
        for i, block in enumerate(_blocks(f, _SCAN_BYTES)):
            quotes = quotes or b'"' in block
            has_lf = has_lf or b"\n" in block
            if bad_line is None and not (enc == "utf-8" and block.isascii()):  # ASCII is UTF-8 as it is
                try:
                    block.decode(("utf-8-sig" if i == 0 else "utf-8") if enc == "utf-8" else enc)
                except (UnicodeDecodeError, LookupError) as exc:
                    if encoding:
                        raise WholeFile("cannot decode") from None
                    start = exc.start if isinstance(exc, UnicodeDecodeError) else 0
                    bad_line = n_nl + block[:start].count(b"\n") + 1
            n_nl += block.count(b"\n")
            last = block[-1:]
    if not has_lf:
        raise WholeFile("no LF line ends")
    notices: list[str] = []
    if bad_line is not None:
        with open(path, "rb") as f:
            for i, block in enumerate(_blocks(f, _SCAN_BYTES)):
                try:
                    (block[3:] if i == 0 and bom else block).decode("cp1252")
                except UnicodeDecodeError:
                    raise WholeFile("neither UTF-8 nor cp1252") from None
        enc = "cp1252"
        notices.append(f"{label}: not valid UTF-8 (first at line {bad_line}); read as Latin-1/cp1252")
    return Scan(enc, bom and not encoding, quotes, n_nl + (0 if last == b"\n" else 1), notices)


def _text_blocks(path: str, sc: Scan, size: int):
    """The file's decoded text, whole lines of up to ``size`` bytes at a time (a longer line whole).

    The bytes are read into one buffer, kept from block to block, and decoded from it: a new object
    of ``size`` bytes for each block, then another for the line's rest, cost more than the copies
    (their memory is mapped afresh each time: 10^5 buildings, 9 blocks of 32 MB, 0.45 s of CPU
    against 0.13 s)."""
    buf = bytearray(max(1, size))
    view = memoryview(buf)
    held = 0  # bytes at the start of buf: the part of a line after the last block
    with open(path, "rb") as f:
        if sc.bom:
            f.read(3)
        while True:
            n = held + (f.readinto(view[held:]) or 0)
            if n == 0:
                return
            cut = buf.rfind(b"\n", 0, n) + 1 if n == len(buf) else n  # at the file's end: all of it
            if cut == 0:  # a line longer than the buffer: to its end
                yield (bytes(view[:n]) + f.readline()).decode(sc.encoding)
                held = 0
                continue
            yield str(view[:cut], sc.encoding)
            held = n - cut
            view[:held] = view[cut:n]


@dataclass(frozen=True)
class _Plan:
    """How every chunk of one file is read and checked (sent to the workers with each chunk)."""

    label: str
    kind: str
    spec: tuple
    opts: ReadOptions
    delim: str
    header_norm: list[str]
    idx: list[int]
    wanted: list[str]
    columns: list[str]  # every column of the spec, required first: a chunk's frame gains the absent ones


def _full(df: pl.DataFrame, columns: list[str]) -> pl.DataFrame:
    """The chunk's frame with every column of the spec (absent ones empty, as the whole-file reader)."""
    missing = [c for c in columns if c not in df.columns]
    return df.with_columns(pl.lit(None, dtype=pl.String).alias(c) for c in missing) if missing else df


def _checked(
    raw: pl.DataFrame, structural: list[dict], plan: _Plan, whole_file_checked: bool = False
) -> tuple[pl.DataFrame | None, pl.DataFrame, dict]:
    """One chunk's records typed and checked: (rows to store or None, rejects, number-format counts).
    ``whole_file_checked``: :func:`_whole_file_checks` has passed ``raw`` already."""
    tally: dict = {}
    if not raw.height:
        return None, ingest.rejects_frame(structural), tally
    if not whole_file_checked:
        _whole_file_checks(plan.kind, raw, plan.opts)
    # past the whole-file checks, a readings chunk has no slash date without date_order
    typed, prob = ingest._typed_columns(
        raw, plan.spec, plan.label, plan.opts, None, tally, find_date_order=plan.kind != "readings"
    )
    del raw
    if plan.kind == "readings":
        good, rej = ingest.readings_checked(typed, prob, structural, plan.label)
    else:
        good, rej = ingest._combine(typed, prob, structural)
    return good, rej, tally


def _fast_checked(text: str, line: int, plan: _Plan) -> tuple[pl.DataFrame | None, pl.DataFrame, dict, int, int, int]:
    """A chunk of whole lines without quotes (``line``: the physical line of its first), split and checked:
    :func:`_checked`'s three, then the repeated header lines, the records and the record rejects."""
    df, rej, rep = csvread._fast_chunk(text, line, plan.label, plan.delim, plan.header_norm, plan.idx, plan.wanted)
    del text
    n_rows, n_rej = df.height, len(rej)
    return (*_checked(_full(df, plan.columns), rej, plan), rep, n_rows, n_rej)


def _checked_chunks(
    path: str,
    label: str,
    spec,
    opts: ReadOptions,
    kind: str,
    sc: Scan,
    size: int,
    notices: list[str],
    tally: dict,
    workers: int = 1,
    threads: int = 1,
):
    """The file's records a chunk at a time, in the file's order: for each, a call that types and checks
    the chunk's records (split here) and returns ``(rows to store or None, rejects)``, to be made in the
    same order (on the thread that stores them: :class:`_Writer`); the header's notices into ``notices``,
    the number-format counts added into ``tally`` by the calls.

    Without quotes every line is a record, so the chunks are independent: with ``workers`` ≥ 2 they are
    split and checked on that many child processes (``screening.workers.in_order``) while this process
    stores the ones already checked; else, with ``threads`` ≥ 2, on that many threads of this process
    (``pipeline._side_by_side``; polars works outside the GIL). The pairs are those of one process, in the
    same order."""
    required = [c for c, _, _, r, _ in spec if r]
    optional = [c for c, _, _, r, _ in spec if not r]
    mapping = dict(opts.columns.get(kind) or {}) or None
    blocks = _text_blocks(path, sc, size)
    first = next(blocks, "")
    if not first.strip():
        raise WholeFile("empty first block")  # the whole-file path words it (empty, or blank lines first)
    first_nl = first.find("\n")
    first_line = first[:first_nl]
    delim = opts.delimiter or csvread._sniff_delimiter(first_line)
    if not sc.quotes:
        header = first_line.rstrip("\r").split(delim)
    else:

        def lines():
            yield from io.StringIO(first, newline="\n")
            for b in blocks:
                yield from io.StringIO(b, newline="\n")

        reader = csv.reader(lines(), delimiter=delim, strict=False)
        try:
            header = next(reader)
        except (StopIteration, csv.Error) as exc:
            raise InputError(label, f"cannot read the header line ({exc})", line=1) from None
    header_norm = [csvread._norm(h) for h in header]
    try:
        seen, wanted = csvread.header_plan(label, header, required, optional, mapping, notices)
    except InputError as exc:
        if kind == "readings" and exc.problem == "missing required column" and exc.column == "period_start":
            raise WholeFile("read dates") from None  # periods from read dates: per meter over the whole file
        raise
    plan = _Plan(
        label, kind, tuple(spec), opts, delim, header_norm, [seen[c] for c in wanted], wanted, required + optional
    )
    repeated = 0
    n_rows = n_rej = 0

    def add(counts: dict) -> None:
        for k, v in counts.items():
            tally[k] = tally.get(k, 0) + v

    def check(df: pl.DataFrame, rej: list[dict]) -> Callable[[], tuple[pl.DataFrame | None, pl.DataFrame]]:
        raw = _full(df, plan.columns)
        if raw.height:  # what only the whole file tells, found here: raised in the chunk's turn
            _whole_file_checks(plan.kind, raw, plan.opts)

        def typed() -> tuple[pl.DataFrame | None, pl.DataFrame]:
            good, rejects, counts = _checked(raw, rej, plan, whole_file_checked=True)
            add(counts)
            return good, rejects

        return typed

    if not sc.quotes:

        def pieces():  # (text, its first line) of every chunk after the header
            line, text = 2, first[first_nl + 1 :]
            while True:
                if text:
                    yield text, line, plan
                    line += text.count("\n")
                text = next(blocks, "")
                if not text:
                    break

        side = workers >= 2 or threads >= 2
        if side and Path(path).stat().st_size > 2 * size:
            if workers >= 2:
                from .workers import in_order

                done = in_order(_fast_checked, pieces(), workers)
            else:
                from .pipeline import _side_by_side

                done = _side_by_side(_fast_checked, pieces(), threads)
            for good, rej, counts, rep, rows, rejected in done:
                repeated += rep
                n_rows += rows
                n_rej += rejected
                add(counts)
                yield lambda good=good, rej=rej: (good, rej)
        else:
            for text, line, _ in pieces():
                df, rej, rep = csvread._fast_chunk(text, line, label, delim, header_norm, plan.idx, wanted)
                del text
                repeated += rep
                n_rows += df.height
                n_rej += len(rej)
                yield check(df, rej)  # typed and checked on the storing thread while the next chunk is split here
                del df, rej
    else:
        batches = csvread.slow_batches(
            reader,
            label,
            delim,
            header_norm,
            plan.idx,
            wanted,
            len(header),
            sc.n_lines,
            batch_records=max(1, size // 64),
        )
        for df, rej, rep in batches:
            repeated += rep
            n_rows += df.height
            n_rej += len(rej)
            yield check(df, rej)
            del df, rej
    if repeated:
        notices.append(f"{label}: skipped {repeated} repeated header line(s)")
    if not n_rows and not n_rej:
        raise InputError(label, "no data rows", line=2, expected="at least one data row after the header")


def _whole_file_checks(kind: str, raw: pl.DataFrame, opts: ReadOptions) -> None:
    """Raise :class:`WholeFile` when this chunk shows what only the whole file can decide."""
    if kind != "readings":
        return
    for col in ("period_start", "period_end"):
        s = raw[col]
        if bool(midnight_stamps(s).any()):
            raise WholeFile("midnight stamps")
        if (
            opts.date_order is None
            and bool(s.str.contains(r"[/.]").any())  # only narrows the look: a slash date holds '/' or '.'
            and bool(s.str.strip_chars().str.contains(_SLASH_DATE).fill_null(False).any())
        ):
            raise WholeFile("slash dates without date_order")


#: Rows of a DuckDB row group (the default of its database format, 122,880: DuckDB's guide "Tuning Workloads",
#: https://duckdb.org/docs/stable/guides/performance/how_to_tune_workloads): the rows of a streamed file are
#: inserted in whole multiples of it. Statements that each append a part of a row group left the commit to
#: write the parts again (measured, 10^5 buildings, 4.25 M readings in 9 inserts: the commit took 1.7-1.9 s of
#: CPU; in whole row groups 0.01-0.1 s; the rows and their order are the same).
ROW_GROUP_ROWS = 122_880


class _Writer:
    """Checks and stores the chunks of one file on a thread of its own, in order, while the caller splits the
    next one's records (:func:`_checked_chunks`; polars and DuckDB let go of the GIL while they work).

    One chunk at a time: :meth:`put` waits until the previous chunk is stored, so at most one chunk
    waits here besides the one being split. The rows to keep are inserted in whole row groups
    (:data:`ROW_GROUP_ROWS`), the rest carried into the next insert; the rejects as they come. The store's
    connection is used by this thread only between the first :meth:`put` and :meth:`close`, while the
    caller does not touch it (DuckDB connections are not for concurrent use). The first error raised
    here is raised again by the next :meth:`put` or by :meth:`close`; the chunks after it are not stored.
    """

    def __init__(self, store: Store, kind: str, label: str):
        self.store, self.kind, self.label = store, kind, label
        self.rows = self.rejected = 0
        self._carry: list[pl.DataFrame] = []  # rows to keep not inserted yet (less than a row group)
        self._error: BaseException | None = None
        self._todo: queue.Queue = queue.Queue(maxsize=1)
        self._thread = threading.Thread(target=self._run, name=f"store {kind}", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            item = self._todo.get()
            try:
                if item is None:
                    return
                if self._error is None:
                    self._store(*(item() if callable(item) else item))
            except BaseException as exc:  # raised again on the caller's thread
                self._error = exc
            finally:
                del item
                self._todo.task_done()

    def _insert(self, rows: pl.DataFrame) -> None:
        self.store.execute(_STATEMENTS[self.kind]["insert"], {"path": self.label}, **{f"stage_{self.kind}": rows})
        self.rows += rows.height

    def _store(self, good: pl.DataFrame | None, rej: pl.DataFrame | None) -> None:
        if good is not None and good.height:
            self._carry.append(good)
            n = sum(df.height for df in self._carry)
            whole = n - n % ROW_GROUP_ROWS
            if whole:
                rows = pl.concat(self._carry, rechunk=False) if len(self._carry) > 1 else self._carry[0]
                self._insert(rows.slice(0, whole))
                self._carry = [rows.slice(whole)] if whole < n else []
        elif good is None and rej is None and self._carry:  # the end of the file: the last part of a row group
            self._insert(pl.concat(self._carry, rechunk=False) if len(self._carry) > 1 else self._carry[0])
            self._carry = []
        if rej is not None and rej.height:
            self.store.execute(
                "insert_load_rejects", {"kind": self.kind, "path": self.label}, stage_rejects=rej.cast(REJECT_SCHEMA)
            )
            self.rejected += rej.height

    def _raise(self) -> None:
        if self._error is not None:
            err, self._error = self._error, None
            raise err

    def put(self, chunk: Callable[[], tuple[pl.DataFrame | None, pl.DataFrame]]) -> None:
        """Check (``chunk()``: rows to keep or None, rejects) and store one chunk after the ones before it."""
        self._todo.join()  # the previous chunk is stored
        self._raise()
        self._todo.put(chunk)

    def close(self, rest: bool = True) -> None:
        """Store what is left (``rest``; not after an error of the caller's), wait for the thread to end
        and raise its error, if any (an error of an earlier chunk than the caller's own)."""
        try:
            self._todo.join()
            if rest and self._error is None:
                self._todo.put((None, None))  # the rows carried over
                self._todo.join()
        finally:
            self._todo.put(None)
            stop: BaseException | None = None
            while self._thread.is_alive():  # the connection is the caller's again only once the thread has ended
                try:
                    self._thread.join()
                except BaseException as exc:  # a second stop signal while waiting: raised once the thread is done
                    stop = stop or exc
            if stop is not None:
                raise stop
        self._raise()


def load_streamed(
    store: Store,
    kind: str,
    path: str,
    opts: ReadOptions,
    *,
    chunk_bytes: int = STREAM_CHUNK_BYTES,
    workers: int = 1,
    threads: int = 1,
) -> Streamed:
    """Read, check and store one buildings or readings file a chunk at a time: every checked row, its
    repeated keys not settled yet (:func:`settle_repeats` does, in a transaction of its own).

    Runs inside the caller's transaction: the file's earlier rows and rejects are deleted first, and
    an ``InputError`` (or :class:`WholeFile`) part-way leaves the rollback to the caller. Raises
    :class:`WholeFile` before or while storing when the file needs the whole-file path; the caller then
    deletes this file's rows again (:func:`forget_file`) and reads it whole. ``workers`` ≥ 2 checks the
    chunks of a file without quotes on that many child processes (``[run] workers``; the same rows), else
    ``threads`` ≥ 2 on that many threads (``[run] threads``).
    """
    label = str(path)
    try:
        sc = scan(path, label, opts.encoding)
    except OSError as exc:
        raise csvread.unreadable(label, exc) from None
    spec = ingest.READING_COLUMNS if kind == "readings" else ingest.BUILDING_COLUMNS
    forget_file(store, kind, path)
    notices = list(sc.notices)
    tally: dict = {}
    writer = _Writer(store, kind, label)
    try:
        for chunk in _checked_chunks(path, label, spec, opts, kind, sc, chunk_bytes, notices, tally, workers, threads):
            writer.put(chunk)  # checked and stored on the writer's thread while the next chunk is split here
    except BaseException:
        writer.close(rest=False)  # the connection is this thread's again for the caller's rollback
        raise
    writer.close()
    notices += ingest.format_notices(label, opts, [c for c, *_ in spec], tally)
    return Streamed(writer.rows, writer.rejected, notices)


def settle_repeats(store: Store, kind: str, path: str, st: Streamed) -> Streamed:
    """Duplicates and conflicts across the chunks of a file stored by :func:`load_streamed`, decided by the
    functions of the whole-file path over the rows whose key occurs more than once in the file: the rows
    not kept deleted, the conflicts rejected. Returns ``st`` with its rows, rejects and notices settled.

    Runs in a transaction after the one of the load (the caller's): rows deleted in the transaction that
    inserted them make DuckDB's commit append all of that transaction's rows again instead of taking the
    row groups already written (DuckDB's ``LocalStorage::Flush``, src/storage/local_storage.cpp, takes them
    only without deletes; measured, 10^5 buildings, 4.25 M readings: 2.7 s of CPU at the commit; after the
    load's commit, deleting the same rows and committing takes 0.03 s).
    """
    label = str(path)
    p = {"path": label}
    n_rows, n_rej, notices = st.rows, st.rejected, list(st.notices)
    if kind == "readings":
        dup = store.frame("select_repeated_reading_keys_of_file", p)
        kept, extra, n_exact = ingest.reading_duplicates(dup, label) if dup.height else (dup, ingest.empty_rejects(), 0)
    else:
        dup = store.frame("select_repeated_buildings_of_file", p)
        kept, extra, n_exact = (
            ingest.building_duplicates(dup, label) if dup.height else (dup, ingest.empty_rejects(), 0)
        )
    if dup.height:
        drop = dup.select(pl.col(LINE_COL).alias("line")).filter(~pl.col("line").is_in(kept[LINE_COL].implode()))
        store.execute(_STATEMENTS[kind]["delete_lines"], {"path": label}, stage_lines=drop)
        n_rows -= drop.height
    if n_exact:
        notices.append(ingest.duplicate_notice(kind, label, n_exact))
    if extra.height:
        store.execute("insert_load_rejects", {"kind": kind, "path": label}, stage_rejects=extra.cast(REJECT_SCHEMA))
        n_rej += extra.height
    return Streamed(n_rows, n_rej, notices)


def forget_file(store: Store, kind: str, path: str) -> None:
    """Delete a file's stored rows and load rejects (inside the caller's transaction)."""
    store.execute(_STATEMENTS[kind]["delete_file"], {"path": str(path)})
    store.execute("delete_load_rejects", {"kind": kind, "path": str(path)})


__all__ = [
    "STREAM_CHUNK_BYTES",
    "Streamed",
    "WholeFile",
    "load_streamed",
    "settle_repeats",
    "streamable",
    "forget_file",
]
