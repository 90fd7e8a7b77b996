"""Screening chunks on local worker processes (``[run] workers``, screening/workers.py): the results are
those of one process, frame for frame, and a whole run writes the same tables byte for byte."""

from __future__ import annotations

import datetime as dt
import json
import time

import polars as pl
import pytest

from screening import config as cfgmod
from screening import pipeline, workers
from screening.resources import sample_portfolio_dir
from screening.window import analysis_window
from tests.test_chunks import _inputs, _same


def test_chunks_on_two_workers_equal_one_process():
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    one = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=25)
    # 200 buildings in chunks of 25: 8 chunks over 2 children, taken back in chunk order
    two = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=25, chunk_buildings=25, workers=2)
    assert "chunks_elsewhere" in two.timings and "regression" not in two.timings  # the chunks ran elsewhere
    _same(one, two)


def test_one_chunk_or_one_worker_stays_in_this_process():
    assert workers.from_config(1, 8) is None
    assert workers.from_config(4, 1) is None
    ex = workers.from_config(4, 3)
    assert isinstance(ex, workers.LocalWorkers) and ex.n == 3


def test_a_failing_chunk_fails_the_screening_with_its_error():
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    # a readings frame without its fuel column: the child's KeyError-like polars error comes back here
    broken = r.drop("fuel")
    try:
        pipeline.screen_frames(b, broken, w, cfg, window=window, fit_block=50, chunk_buildings=50, workers=2)
    except Exception as exc:  # noqa: BLE001 - the type is polars' own
        assert "fuel" in str(exc)
        assert type(exc.__cause__).__name__ == "_RemoteTraceback"  # raised in a child, handed back here
    else:
        raise AssertionError("a broken chunk must fail the screening")


def test_run_with_two_workers_writes_the_tables_of_one_process(tmp_path, monkeypatch):
    from screening import runner

    monkeypatch.setattr(pipeline, "FIT_BLOCK", 50)  # the demo's 200 buildings in 4 chunks of 50
    src = sample_portfolio_dir()
    outs = {}
    for n in (1, 2):
        ov = {
            "inputs": {k: str(src / f"{k}.csv") for k in ("buildings", "readings", "weather")},
            "store": {"database": str(tmp_path / f"db{n}.duckdb")},
            "analysis": {"as_of": "2026-10-15"},
            "output": {"sheets": False},
            "run": {"chunk_buildings": 50, "workers": n},
        }
        runner.run(overrides=ov, out_dir=str(tmp_path / f"out{n}"), force=True)
        outs[n] = tmp_path / f"out{n}"
    ids = {n: json.loads((outs[n] / "summary.json").read_text())["run_id"] for n in outs}
    for name in ("ranking.csv", "audit_plan.csv", "data_issues.csv", "rejects.csv", "assumptions.csv"):
        assert (outs[1] / name).read_text().replace(ids[1], "") == (outs[2] / name).read_text().replace(ids[2], "")
    assert pl.read_csv(outs[2] / "ranking.csv").height == 200


def _first_run(tmp_path):
    """The demo portfolio screened once into ``tmp_path/out1`` (no sheets): its database and overrides."""
    from screening import runner

    src = sample_portfolio_dir()
    db = tmp_path / "db.duckdb"
    ov = {
        "inputs": {k: str(src / f"{k}.csv") for k in ("buildings", "readings", "weather")},
        "store": {"database": str(db)},
        "analysis": {"as_of": "2026-10-15"},
        "output": {"sheets": False},
    }
    runner.run(overrides=ov, out_dir=str(tmp_path / "out1"))
    return db, ov


def test_a_failure_after_the_results_were_stored_keeps_none_of_them(tmp_path, monkeypatch):
    """The results are stored while ranking.pdf renders, provisionally until the files about to be published
    are recorded: a failure in between removes them."""
    import duckdb

    from screening import published, runner
    from screening.errors import OutputError

    db, ov = _first_run(tmp_path)

    def broken(folder):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(published, "manifest", broken)
    try:
        runner.run(overrides=ov, out_dir=str(tmp_path / "out2"))
    except OutputError as exc:
        assert "cannot write the outputs" in str(exc)
    else:
        raise AssertionError("the run must fail")
    con = duckdb.connect(str(db), read_only=True)
    runs = con.execute("SELECT run_id, status FROM runs ORDER BY started_at").fetchall()
    per_run = dict(con.execute("SELECT run_id, count(*) FROM results GROUP BY run_id").fetchall())
    con.close()
    assert [st for _, st in runs] == ["ok", "failed"]
    assert per_run == {runs[0][0]: 200}  # the failed run stored nothing; the earlier run's results are kept
    assert not (tmp_path / "out2").exists()


def test_a_failure_while_the_results_are_being_stored_waits_for_them_and_keeps_none(tmp_path, monkeypatch):
    """The results are stored on a thread beside the output files: a file that cannot be written while that
    thread is still storing fails the run only once the thread is done, and nothing of its results stays."""
    import threading

    import duckdb

    from screening import runner, webpage
    from screening.errors import OutputError
    from screening.runs import record

    db, ov = _first_run(tmp_path)
    started, stored = threading.Event(), threading.Event()
    real = record.store_results

    def slow(*a, **k):  # still storing when index.html fails
        started.set()
        time.sleep(1.0)
        real(*a, **k)
        stored.set()

    def broken(*a, **k):
        assert started.wait(10)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(record, "store_results", slow)
    monkeypatch.setattr(webpage, "write_index", broken)
    with pytest.raises(OutputError, match="cannot write the outputs"):
        runner.run(overrides=ov, out_dir=str(tmp_path / "out2"))
    assert stored.is_set()  # the failure waited for the thread
    con = duckdb.connect(str(db), read_only=True)
    runs = con.execute("SELECT run_id, status FROM runs ORDER BY started_at").fetchall()
    per_run = dict(con.execute("SELECT run_id, count(*) FROM results GROUP BY run_id").fetchall())
    con.close()
    assert [st for _, st in runs] == ["ok", "failed"]
    assert per_run == {runs[0][0]: 200}


def test_a_recording_that_fails_on_its_thread_fails_the_run_with_its_error(tmp_path, monkeypatch):
    from screening import runner
    from screening.errors import StoreError
    from screening.runs import record

    db, ov = _first_run(tmp_path)

    def broken(*a, **k):
        raise StoreError("the database refused the results")

    monkeypatch.setattr(record, "store_results", broken)
    with pytest.raises(StoreError, match="refused the results"):
        runner.run(overrides=ov, out_dir=str(tmp_path / "out2"))
    assert not (tmp_path / "out2").exists()


def test_a_run_that_died_after_storing_its_results_loses_them_when_settled(tmp_path):
    """A run killed after its results were stored but before it recorded its files (still ``running``): the
    next run's settling marks it interrupted and deletes its results and rejects, and keeps an ok run's."""
    import datetime as dt

    import duckdb

    from screening import published
    from screening.runs import record
    from screening.store import Store

    db, ov = _first_run(tmp_path)
    store = Store(db)
    window = (dt.date(2025, 10, 1), dt.date(2026, 9, 30))
    record.insert_run(store, "dead-1", "dead", "2026Q3", dt.date(2026, 10, 15), window, tmp_path / "out2", "h")
    stored = store.con.sql("SELECT 'dead-1' AS run_id, * EXCLUDE (run_id) FROM results LIMIT 2").pl()
    rejects = pl.DataFrame(
        {"file": ["r.csv"], "line": [3], "column": ["kwh"], "value": ["x"], "reason": ["not a number"]},
        schema={"file": pl.String, "line": pl.Int64, "column": pl.String, "value": pl.String, "reason": pl.String},
    )
    record.store_results(store, "dead-1", stage=[stored], rejects=rejects)
    count = "SELECT count(*) FROM {} WHERE run_id = 'dead-1'"
    assert store.con.execute(count.format("results")).fetchall() == [(2,)]
    published.settle_dead_runs(store)
    assert store.con.execute(count.format("results")).fetchall() == [(0,)]
    assert store.con.execute(count.format("rejects")).fetchall() == [(0,)]
    status = dict(store.con.execute("SELECT run_id, status FROM runs").fetchall())
    store.close()
    assert status["dead-1"] == "interrupted"
    con = duckdb.connect(str(db), read_only=True)
    kept = con.execute("SELECT count(*) FROM results").fetchall()
    con.close()
    assert kept == [(200,)]  # the ok run's
