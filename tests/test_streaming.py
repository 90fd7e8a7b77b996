"""Streaming ingest (screening/streaming.py): the same stored rows, rejects and notices as the whole-file path.

Chunks of a few hundred bytes split the files' duplicates and conflicting rows across chunk boundaries.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import polars as pl
import pytest

from screening import pipeline, streaming
from screening.errors import InputError
from screening.ingest import ReadOptions
from screening.store import Store

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "sample_portfolio"
SMALL = 300  # bytes a chunk: a few lines


def _tables(store: Store) -> dict[str, pl.DataFrame]:
    con = store.con
    return {
        "buildings": con.sql("SELECT * FROM buildings ORDER BY source_file, source_line").pl(),
        "readings": con.sql("SELECT * FROM readings ORDER BY source_file, source_line").pl(),
        "weather": con.sql("SELECT * FROM weather_daily ORDER BY source_file, source_line").pl(),
        "rejects": con.sql("SELECT * FROM load_rejects ORDER BY ALL").pl(),
        "files": con.sql("SELECT path, kind, rows_loaded, rows_rejected FROM input_files ORDER BY ALL").pl(),
    }


def _load(
    files: dict,
    opts: ReadOptions,
    chunk_bytes: int,
    logs: list[str] | None = None,
    workers: int = 1,
    threads: int = 1,
):
    store = Store(":memory:")
    loads = pipeline.load_inputs(
        store,
        files,
        opts,
        chunk_bytes=chunk_bytes,
        log=None if logs is None else logs.append,
        workers=workers,
        threads=threads,
    )
    return store, [(f.kind, f.path, f.rows, f.rejected, f.notices) for f in loads]


def _same(
    files: dict, opts: ReadOptions | None = None, chunk: int = SMALL, workers: int = 1, threads: int = 1
) -> list[str]:
    """Load ``files`` whole, one file at a time, and in chunks (checked on ``workers`` processes or
    ``threads`` threads); assert the same stores and loads; return the chunked run's log."""
    opts = opts or ReadOptions()
    whole, loads_w = _load(files, opts, 0)
    logs: list[str] = []
    part, loads_p = _load(files, opts, chunk, logs, workers, threads)
    assert loads_p == loads_w
    tw, tp = _tables(whole), _tables(part)
    for name in tw:
        assert tp[name].equals(tw[name]), name
    assert tw["readings"].height > 0
    return logs


def _write(path: Path, header: str, rows: list[str]) -> Path:
    path.write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return path


def _messy(tmp_path: Path) -> dict:
    """Demo buildings and the first readings with exact duplicates, conflicts and bad rows far apart."""
    b_lines = (DEMO / "buildings.csv").read_text().splitlines()
    b_rows = b_lines[1:31]
    b_rows += [b_rows[2], b_rows[5].replace("retail", "office").replace("lodging", "office"), "B9999,x,,retail,-5"]
    b_rows.insert(10, b_lines[0])  # a repeated header line
    buildings = _write(tmp_path / "buildings.csv", b_lines[0], b_rows)
    r_lines = (DEMO / "readings.csv").read_text().splitlines()
    ids = {r.split(",")[0] for r in b_lines[1:31]}
    r_rows = [r for r in r_lines[1:] if r.split(",")[0] in ids][:400]
    first, second = r_rows[3], r_rows[7]
    parts = second.split(",")
    parts[4] = str(float(parts[4]) + 1)  # same meter and period, another quantity
    r_rows += [first, ",".join(parts), "B0001,natural_gas,2024-02-30,2024-03-01,5,therm,false,", "B0001,gas"]
    r_rows[50] = r_rows[50].rsplit(",", 1)[0] + ",$1234.50"  # a currency symbol (a notice)
    r_rows.insert(120, r_rows[3])  # an exact duplicate in another chunk
    readings = _write(tmp_path / "readings.csv", r_lines[0], r_rows)
    return {"buildings": [str(buildings)], "readings": [str(readings)], "weather": [str(DEMO / "weather.csv")]}


def test_chunks_store_what_the_whole_file_path_stores(tmp_path):
    files = _messy(tmp_path)
    logs = _same(files)
    assert any("in chunks" in m for m in logs) and not any(" whole (" in m for m in logs)
    # the file really holds what the test is about: duplicates and conflicts more than a chunk apart
    whole, loads = _load(files, ReadOptions(), 0)
    notes = [n for *_, ns in loads for n in ns]
    assert any("exact duplicate reading row(s) kept once" in n for n in notes)
    assert any("exact duplicate building row(s) kept once" in n for n in notes)
    assert any("repeated header" in n for n in notes)
    assert any("currency symbol(s) removed" in n for n in notes)
    reasons = whole.con.sql("SELECT reason FROM load_rejects").pl()["reason"].to_list()
    assert any("same meter and period as line(s)" in r for r in reasons)
    assert any("building_id appears with different data" in r for r in reasons)
    lines = (
        whole.con.sql("SELECT line FROM load_rejects WHERE reason LIKE 'same meter and period%' ORDER BY line")
        .pl()["line"]
        .to_list()
    )
    assert lines[-1] - lines[0] > 100  # far more than a 300-byte chunk apart
    # and the chunked load really went through more than one chunk
    assert Path(files["readings"][0]).stat().st_size > 20 * SMALL


def test_chunks_checked_on_two_workers_store_what_the_whole_file_path_stores(tmp_path):
    files = _messy(tmp_path)
    logs = _same(files, workers=2)  # dozens of 300-byte chunks, two at a time on child processes
    assert any("in chunks" in m for m in logs) and not any(" whole (" in m for m in logs)


def _counting_side_by_side(monkeypatch) -> list[int]:
    """Count the items ``pipeline._side_by_side`` is given (it still does the work)."""
    seen: list[int] = []
    real = pipeline._side_by_side

    def counting(fn, items, n):
        def counted():
            for item in items:
                seen.append(n)
                yield item

        return real(fn, counted(), n)

    monkeypatch.setattr(pipeline, "_side_by_side", counting)
    return seen


def test_chunks_checked_on_two_threads_store_what_the_whole_file_path_stores(tmp_path, monkeypatch):
    files = _messy(tmp_path)
    seen = _counting_side_by_side(monkeypatch)
    logs = _same(files, threads=2)  # dozens of 300-byte chunks, two at a time on threads of this process
    assert any("in chunks" in m for m in logs) and not any(" whole (" in m for m in logs)
    assert len(seen) > 20 and set(seen) == {2}  # the chunks went through the threads (the weather read alone)


def test_files_read_whole_on_two_threads_store_what_one_at_a_time_stores(tmp_path, monkeypatch):
    files = _messy(tmp_path)
    one, loads_1 = _load(files, ReadOptions(), 0)
    seen = _counting_side_by_side(monkeypatch)
    two, loads_2 = _load(files, ReadOptions(), 0, threads=2)  # buildings, readings, weather side by side
    assert seen == [2, 2, 2]
    assert loads_2 == loads_1
    t1, t2 = _tables(one), _tables(two)
    for name in t1:
        assert t2[name].equals(t1[name]), name


def test_files_read_whole_on_two_threads_raise_the_first_files_error(tmp_path):
    files = _messy(tmp_path)
    b, r = Path(files["buildings"][0]), Path(files["readings"][0])
    b.write_text("name,floor_area\nx,5\n", encoding="utf-8")  # no building_id column
    r.write_text("building_id,fuel\nB0001,gas\n", encoding="utf-8")  # no period columns either
    errors = []
    for threads in (1, 2):
        with pytest.raises(InputError) as exc:
            _load(files, ReadOptions(), 0, threads=threads)
        errors.append(str(exc.value))
    assert errors[0] == errors[1] and "buildings.csv" in errors[0]


@pytest.mark.parametrize("workers,threads", [(2, 1), (1, 2)])
def test_what_a_worker_finds_only_the_whole_file_tells_sends_the_file_whole(tmp_path, workers, threads):
    files = _messy(tmp_path)
    rd = Path(files["readings"][0])
    rows = rd.read_text().splitlines()
    i = next(k for k in range(200, len(rows)) if int(rows[k].split(",")[2][-2:]) > 12)
    f = rows[i].split(",")
    y, m, d = f[2].split("-")
    f[2] = f"{d}/{m}/{y}"  # a day/month date far into the file (the day tells), without [reading] date_order
    rows[i] = ",".join(f)
    rd.write_text("\n".join(rows) + "\n", encoding="utf-8")
    logs = _same(files, workers=workers, threads=threads)  # the chunk's WholeFile reaches the load: read whole
    assert any("readings.csv whole (slash dates" in m for m in logs)


def test_quoted_and_latin1_files_in_chunks(tmp_path):
    files = _messy(tmp_path)
    rd = Path(files["readings"][0])
    rows = rd.read_text().splitlines()
    # quoted fields, one with a line break inside, in the middle of the file
    rows[40] = ",".join(f'"{v}"' for v in rows[40].split(","))
    rows[41] = rows[41].replace(",false,", ',"fal\nse",')
    rd.write_text("\n".join(rows) + "\n", encoding="utf-8")
    _same(files)
    bd = Path(files["buildings"][0])
    text = bd.read_text().replace("Ashcombe", "Ashcombé")
    bd.write_bytes(text.encode("cp1252"))
    logs = _same(files)
    assert not any(" whole (" in m for m in logs)


@pytest.mark.parametrize(
    "change, why",
    [
        (lambda d: d + " 00:00", "midnight stamps"),
        (lambda d: f"{d[5:7]}/{d[8:10]}/{d[:4]}", "slash dates without date_order"),
    ],
)
def test_what_only_the_whole_file_tells_is_read_whole(tmp_path, change, why):
    files = _messy(tmp_path)
    rd = Path(files["readings"][0])
    rows = rd.read_text().splitlines()
    f = rows[-60].split(",")  # late in the file: chunks were stored before the chunk that tells
    f[2] = change(f[2])
    rows[-60] = ",".join(f)
    rd.write_text("\n".join(rows) + "\n")
    logs = _same(files)
    assert any(f"whole ({why})" in m for m in logs)


def test_structural_error_in_a_late_chunk_changes_nothing(tmp_path):
    files = _messy(tmp_path)
    store = Store(str(tmp_path / "s.duckdb"))
    pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL)
    before = _tables(store)
    rd = Path(files["readings"][0])
    rd.write_text(rd.read_text() + 'B0001,natural_gas,2024-01-01,2024-01-31,"5\n6\n', encoding="utf-8")
    with pytest.raises(InputError, match="never closed"):
        pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL)
    after = _tables(store)
    for name in before:
        assert after[name].equals(before[name]), name


def test_small_files_and_workbooks_are_read_whole(tmp_path):
    shutil.copy(DEMO / "weather.csv", tmp_path / "w.csv")
    assert not streaming.streamable("weather", str(tmp_path / "w.csv"), 10)
    assert not streaming.streamable("readings", str(DEMO / "readings.csv"), 1 << 30)
    assert streaming.streamable("readings", str(DEMO / "readings.csv"), 1000)
    assert not streaming.streamable("readings", str(tmp_path / "r.parquet"), 10)


def test_rows_inserted_in_whole_row_groups_carry_the_rest_in_file_order(tmp_path, monkeypatch):
    monkeypatch.setattr(streaming, "ROW_GROUP_ROWS", 7)  # a few rows of every chunk wait for the next one
    inserts: list[int] = []
    execute = Store.execute

    def counting(self, name, params=None, **frames):
        if name == "insert_readings" and "stage_readings" in frames:
            inserts.append(frames["stage_readings"].height)
        return execute(self, name, params, **frames)

    monkeypatch.setattr(Store, "execute", counting)
    _same(_messy(tmp_path))
    streamed = inserts[1:]  # the first insert is the whole-file load's
    assert len(streamed) > 5 and all(n % 7 == 0 for n in streamed[:-1])


def test_a_store_error_on_the_writer_thread_is_raised_and_changes_nothing(tmp_path, monkeypatch):
    from screening.errors import StoreError

    files = _messy(tmp_path)
    store = Store(str(tmp_path / "s.duckdb"))
    pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL)
    before = _tables(store)
    execute = Store.execute
    calls = []

    def failing(self, name, params=None, **frames):
        if name == "insert_load_rejects":
            calls.append(name)
            raise StoreError("disk full (test)")
        return execute(self, name, params, **frames)

    monkeypatch.setattr(Store, "execute", failing)
    with pytest.raises(StoreError, match="disk full"):
        pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL, force=True)
    assert len(calls) == 1  # the chunks after the failing one are not stored
    monkeypatch.setattr(Store, "execute", execute)
    after = _tables(store)
    for name in before:
        assert after[name].equals(before[name]), name


def test_a_stop_before_the_repeats_are_settled_leaves_the_file_to_be_read_again(tmp_path, monkeypatch):
    files = _messy(tmp_path)
    store = Store(str(tmp_path / "s.duckdb"))

    def stop(*args, **kw):
        raise KeyboardInterrupt

    with monkeypatch.context() as m:
        m.setattr(streaming, "settle_repeats", stop)
        with pytest.raises(KeyboardInterrupt):
            pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL)
    kinds = store.con.sql("SELECT kind FROM input_files ORDER BY kind").pl()["kind"].to_list()
    assert kinds == ["weather"]  # the files read in chunks are not recorded: the next load reads them again
    loads = pipeline.load_inputs(store, files, ReadOptions(), chunk_bytes=SMALL)
    assert [f.status for f in loads] == ["loaded", "loaded", "unchanged"]
    whole, _ = _load(files, ReadOptions(), 0)
    tw, tp = _tables(whole), _tables(store)
    for name in tw:
        assert tp[name].equals(tw[name]), name
