"""Chunked screening (issue 20): the per-building work over chunks of buildings, then one portfolio pass,
gives the one-pass results (every frame equal, not close), on the demo portfolio and on a simulated one."""

from __future__ import annotations

import datetime as dt
import os

import polars as pl
import pytest

from screening import config as cfgmod
from screening import pipeline
from screening.ingest import ReadOptions
from screening.resources import sample_portfolio_dir
from screening.window import analysis_window
from tests.conftest import simulator as conftest_simulator


def _inputs(folder):
    opts = ReadOptions(units="IP")
    return [pipeline.read_file(k, str(folder / f"{k}.csv"), opts).df for k in ("buildings", "readings", "weather")]


def _same(a: pipeline.Screened, b: pipeline.Screened) -> None:
    assert a.results.equals(b.results)
    assert a.issues.sort("building_id", "code").equals(b.issues.sort("building_id", "code"))
    assert a.periods.equals(b.periods)
    assert a.envelope.equals(b.envelope)
    key = ["file", "line", "column", "reason"]
    assert a.rejects.unique().sort(key).equals(b.rejects.unique().sort(key))
    assert a.normal_years == b.normal_years


@pytest.mark.parametrize("chunk", [1])  # 20 chunks of one block of 10: every boundary a chunk can have
def test_demo_in_chunks_equals_one_pass(chunk):
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    # a chunk is a whole number of regression blocks: with blocks of 10 buildings, chunks of 10 here (20 chunks)
    one = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10)
    parts = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=chunk)
    assert one.results.height == 200 and one.issues.height > 10 and one.rejects.height > 0
    _same(one, parts)


def test_without_sheets_the_periods_are_dropped_and_nothing_else_changes():
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    kept = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=1)
    dropped = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=1, keep_periods=False)
    assert kept.periods.height > 200 * 10 and dropped.periods.height == 0
    assert dropped.periods.schema == kept.periods.schema
    _same(kept, pipeline.Screened(**{**dropped.__dict__, "periods": kept.periods}))


def test_readings_source_gives_each_chunk_only_its_readings():
    b, r, w = _inputs(sample_portfolio_dir())
    seen = []

    class Spy(pipeline.FrameReadings):
        def __call__(self, ids):
            out = super().__call__(ids)
            seen.append((ids.to_list(), sorted(set(out["building_id"]))))
            return out

    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    # an orphan reading (unknown building) is rejected once, as in one pass
    orphan = r.head(1).with_columns(pl.lit("NO-SUCH").alias("building_id"))
    rr = pl.concat([r, orphan])
    one = pipeline.screen_frames(b, rr, w, cfg, window=window, fit_block=25)
    parts = pipeline.screen_frames(b, Spy(rr), w, cfg, window=window, fit_block=25, chunk_buildings=50)
    _same(one, parts)
    assert len(seen) == 4
    for ids, got in seen:
        assert set(got) <= set(ids)
    assert parts.rejects.filter(pl.col("value") == "NO-SUCH").height == 1


def test_simulated_portfolio_in_chunks_equals_one_pass(tmp_path):
    simulator = conftest_simulator()
    frames = simulator.simulate_portfolio(300, seed=11, start=dt.date(2023, 10, 1), years=3, stations=5)
    simulator.write_portfolio(frames, tmp_path)
    b, r, w = _inputs(tmp_path)
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    one = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=32)
    parts = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=32, chunk_buildings=64)
    _same(one, parts)


def test_run_pulling_chunks_from_the_store_writes_the_one_pass_tables(tmp_path, monkeypatch):
    import json

    from screening import runner
    from screening.runs import inputs

    monkeypatch.setattr(pipeline, "FIT_BLOCK", 25)  # blocks of 25 buildings: the demo's 200 in chunks of 50
    calls = []
    pulled = inputs.StoreReadings.__call__

    def spy(self, ids):
        out = pulled(self, ids)
        calls.append((ids.len(), out.height))
        return out

    monkeypatch.setattr(inputs.StoreReadings, "__call__", spy)
    src = sample_portfolio_dir()
    # measures and audits in different chunks: savings after a measure are computed per chunk
    ev = tmp_path / "events.csv"
    ev.write_text(
        "building_id,date,kind,finding,mechanism,description,expected_savings,cost\n"
        "B0010,2025-04-01,measure,,controls,new controls,5000,12000\n"
        "B0120,2025-03-15,measure,,heat loss,air sealing,,\n"
        "B0180,2025-02-01,audit,confirmed,controls,schedule stuck,,\n",
        encoding="utf-8",
    )
    outs = {}
    for chunk in (0, 50):
        ov = {
            "inputs": {**{k: str(src / f"{k}.csv") for k in ("buildings", "readings", "weather")}, "events": str(ev)},
            "store": {"database": str(tmp_path / f"db{chunk}.duckdb")},
            "analysis": {"as_of": "2026-10-15"},
            "output": {"sheets": False},
            "run": {"chunk_buildings": chunk},
        }
        res = runner.run(overrides=ov, out_dir=str(tmp_path / f"out{chunk}"), force=True)
        outs[chunk] = tmp_path / f"out{chunk}"
        # [run] threads = 2 (the default): the 4 chunks two at a time, on a machine of 2 cores or more
        side_by_side = "chunks_side_by_side" in res.summary["timings_s"]
        assert side_by_side == (chunk == 50 and (os.cpu_count() or 1) >= 2)
    assert len(calls) == 4 and all(0 < n <= 50 and rows > 0 for n, rows in calls)
    ids = {c: json.loads((outs[c] / "summary.json").read_text())["run_id"] for c in outs}
    assert (outs[0] / "savings.csv").read_text().count("\n") == 3  # a header and the two measures
    for name in ("ranking.csv", "audit_plan.csv", "data_issues.csv", "rejects.csv", "assumptions.csv", "savings.csv"):
        assert (outs[0] / name).read_text().replace(ids[0], "") == (outs[50] / name).read_text().replace(ids[50], ""), (
            name
        )
    s0, s50 = (json.loads((outs[c] / "summary.json").read_text()) for c in (0, 50))
    s0.pop("run_id"), s50.pop("run_id")
    assert s0 == s50


@pytest.mark.parametrize("chunk", [10])
def test_demo_with_events_in_chunks_equals_one_pass(chunk):
    """The events' rules (post-measure spans, savings per measure, the measure's note in the verdict, the
    audit rules) give the same results a chunk at a time as in one pass."""
    from screening import events as evmod

    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    ev, _rej, _notes = evmod.read_all(
        [str(sample_portfolio_dir() / "events.csv")], ReadOptions(units="IP"), b["building_id"]
    )
    then = pl.DataFrame(schema=evmod.THEN_SCHEMA)
    ctx = evmod.plan_context(
        ev,
        then,
        window_end=window[1],
        rest_quarters=4,
        regrow=2.0,
        blackout_days=30,
        window_start=window[0],
        judge_min_days=180,
    )
    assert ctx["_judge_from"].is_not_null().sum() == 2  # the demo's two measures are judged on their days after
    kw = dict(window=window, fit_block=10, events=ev, plan_context=ctx)
    one = pipeline.screen_frames(b, r, w, cfg, **kw)
    parts = pipeline.screen_frames(b, r, w, cfg, chunk_buildings=chunk, **kw)
    _same(one, parts)
    assert one.savings is not None and parts.savings is not None and one.savings.height == 2
    assert one.savings.equals(parts.savings)
    assert one.savings_periods is not None and parts.savings_periods is not None
    assert one.savings_periods.equals(parts.savings_periods)
    assert one.results.filter(pl.col("verdict").str.contains("After the measure")).height == 2


@pytest.mark.parametrize("units", ["IP", "SI"])
def test_assumptions_csv_written_in_pieces_has_the_bytes_of_the_whole_table(tmp_path, units):
    from screening import outputs

    b, r, w = _inputs(sample_portfolio_dir())
    res = pipeline.screen_frames(b, r, w, cfgmod.load(None, None), window=analysis_window(dt.date(2026, 10, 15)))
    disp = outputs.Display(units)
    outputs.write_csv(outputs.assumptions_table(res.envelope, disp), tmp_path / "whole.csv")
    outputs.write_assumptions_csv(res.envelope, disp, tmp_path / "pieces.csv", rows=7)  # 29 pieces
    whole = (tmp_path / "whole.csv").read_bytes()
    assert whole.count(b"\n") > 200 * 10 and (tmp_path / "pieces.csv").read_bytes() == whole


def test_store_readings_of_a_chunk_leave_out_the_buildings_between_its_ids(tmp_path):
    """A chunk's readings come from the store by the range of its ids; the rows of other buildings whose ids
    fall in that range (unknown buildings, or another chunk's) are left out, in any table order."""
    from datetime import date

    from screening.runs import inputs
    from screening.store import Store

    ids = ["B2", "B1", "B10", "B3", "B20", "B1"]  # B10 and B20 lie between B1 and B3 as text
    stage = pl.DataFrame(
        {
            "building_id": ids,
            "fuel": "natural_gas",
            "meter_id": None,
            "period_start": [date(2025, 1, 1 + k) for k in range(len(ids))],
            "period_end": [date(2025, 1, 2 + k) for k in range(len(ids))],
            "quantity": [float(k) for k in range(len(ids))],
            "unit": "therm",
            "estimated": False,
            "cost": None,
            "_line": list(range(2, 2 + len(ids))),
        },
        schema_overrides={"meter_id": pl.String, "cost": pl.Float64},
    )
    db = tmp_path / "s.duckdb"
    with Store(db) as st:
        st.execute("insert_readings", {"path": "readings.csv"}, stage_readings=stage)
    src = inputs.StoreReadings(str(db))
    try:
        got = src(pl.Series("building_id", ["B1", "B2", "B3"]))
        assert sorted(got["building_id"].to_list()) == ["B1", "B1", "B2", "B3"]
        assert sorted(got["_line"].to_list()) == [2, 3, 5, 7]
        assert "_file" not in got.columns
        assert src(pl.Series("building_id", [], dtype=pl.String)).height == 0
        assert sorted(src.others(pl.Series("building_id", ["B1", "B2", "B3"]))["building_id"].to_list()) == [
            "B10",
            "B20",
        ]
    finally:
        src.close()


def test_read_ahead_keeps_the_order_holds_one_item_ahead_and_raises_where_asked():
    """pipeline._read_ahead: the next chunk is made on a thread while the caller works on the one before;
    the items come in their order, at most one is made ahead of the caller, and an error making an item
    reaches the caller when it asks for that item (the items before it were handed over)."""
    import threading

    made: list[int] = []
    gate = threading.Event()

    def items():
        for k in range(5):
            if k == 3:
                raise ValueError("item 3 is broken")
            made.append(k)
            yield k

    got = []
    with pytest.raises(ValueError, match="item 3 is broken"):
        for x in pipeline._read_ahead(items()):
            gate.wait(0.05)  # the caller's work on x: the next item is made meanwhile, not the one after
            assert made[-1] <= x + 1
            got.append(x)
    assert got == [0, 1, 2]
    # a caller that stops early: nothing more is made once the item in hand is done
    made.clear()

    def counted():
        for k in range(10):
            made.append(k)
            yield k

    ahead = pipeline._read_ahead(counted())
    for x in ahead:
        if x == 1:
            break
    ahead.close()  # (the for loop's end): waits for the item in hand
    assert made == [0, 1, 2]
    assert list(pipeline._read_ahead(iter([]))) == []


def test_demo_in_chunks_on_two_threads_equals_one_pass():
    """[run] threads: the chunks screened side by side on two threads give the one-pass frames, and the
    chunk stages' timings are summed over the threads beside the phase's wall time."""
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    one = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10)
    two = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=1, threads=2)
    assert "chunks_side_by_side" in two.timings and "chunks_side_by_side" not in one.timings
    assert two.timings["regression"] > 0  # summed over the 20 chunks
    _same(one, two)


def test_side_by_side_runs_two_at_once_in_order_with_a_bounded_flight():
    """pipeline._side_by_side: two items are worked on at the same time (a barrier of two parties would
    time out one at a time), the results come in the items' order, at most n + 1 items are taken ahead of
    the results handed over, an item's error is raised where its result would be, and the items not
    started after it are dropped."""
    import threading

    both = threading.Barrier(2, timeout=10)
    taken: list[int] = []

    def items(k_bad=None, n=8):
        for k in range(n):
            taken.append(k)
            yield (k, k == k_bad)

    def work(k, bad):
        if k < 2:
            both.wait()  # items 0 and 1 must be in work together
        if bad:
            raise ValueError(f"item {k} is broken")
        return k * 10

    got = []
    for x in pipeline._side_by_side(work, items(), 2):
        assert len(taken) <= len(got) + 3  # in flight: at most n + 1 = 3 beyond what was handed over
        got.append(x)
    assert got == [0, 10, 20, 30, 40, 50, 60, 70]

    taken.clear()
    both.reset()
    got = []
    with pytest.raises(ValueError, match="item 4 is broken"):
        for x in pipeline._side_by_side(work, items(k_bad=4, n=100), 2):
            got.append(x)
    assert got == [0, 10, 20, 30]
    assert len(taken) <= 4 + 3  # the items after the broken one were not taken


def test_a_failing_chunk_on_a_thread_fails_the_screening_with_its_own_error():
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    broken = r.drop("fuel")  # every chunk's readings without their fuel column: polars' own error, raised here
    with pytest.raises(Exception, match="fuel") as caught:
        pipeline.screen_frames(b, broken, w, cfg, window=window, fit_block=50, chunk_buildings=50, threads=2)
    assert caught.value.__traceback__ is not None and "_RemoteTraceback" not in repr(caught.value.__cause__)
