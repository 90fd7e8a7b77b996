"""Memory: the up-front estimate, a run under a memory limit, and the rewrites that saved memory.

A run that cannot fit stops with one line on stderr and exit 1, before it changes anything; a
MemoryError during a run is the same one line. The memory-saving rewrites give the same answers
as the direct formulas they replaced (checked here on small random cases).
"""

from __future__ import annotations

import datetime as dt
import resource
import subprocess
import sys

import numpy as np
import polars as pl
import pytest

from screening import data_issues, degree_days, memory, metered, pipeline
from screening.errors import OutOfMemoryError
from tests.conftest import cli, tree_digest


def test_count_rows_and_estimate(tmp_path):
    p = tmp_path / "r.csv"
    p.write_text("a,b\n1,2\n3,4\n")
    assert memory.count_rows(p) == 2
    p.write_text("a,b\n1,2\n3,4")  # no newline at the end
    assert memory.count_rows(p) == 2
    small, big = memory.estimate_peak(1000, 10, 1000), memory.estimate_peak(5_000_000, 118_000, 1000)
    assert memory.BASE_BYTES < small < big
    one_pass = max(
        memory.BYTES_PER_READING_READ * 5_000_000,
        memory.BYTES_PER_BUILDING * 118_000 + memory.BYTES_PER_CHUNK_READING * 5_000_000,
    )
    assert big == pytest.approx(memory.BASE_BYTES + memory.BYTES_PER_WEATHER_ROW * 1000 + one_pass)


def test_estimate_is_linear_in_the_chunk_size():
    # 1,000,000 buildings, 42 million readings; chunks of whole 4,096-building blocks
    est = [memory.screening_bytes(42_000_000, 1_000_000, k * 4096) for k in (4, 8, 12)]
    assert est[2] - est[1] == pytest.approx(est[1] - est[0]) and est[1] > est[0]
    assert est[1] - est[0] == pytest.approx(memory.BYTES_PER_CHUNK_READING * 42_000_000 * 4 * 4096 / 1_000_000)
    # chunk 0 (all at once) is the largest chunk; a size is rounded up to whole regression blocks
    assert memory.screening_bytes(42_000_000, 1_000_000, 0) > est[2]
    assert memory.screening_bytes(42_000_000, 1_000_000, 1) == memory.screening_bytes(42_000_000, 1_000_000, 4096)
    # the run's estimate is the larger of reading the files and screening
    assert memory.estimate_peak(42_000_000, 1_000_000, 0, 4096) == pytest.approx(
        memory.BASE_BYTES
        + max(memory.BYTES_PER_READING_READ * 42_000_000, memory.screening_bytes(42_000_000, 1_000_000, 4096))
    )


def test_each_worker_adds_a_chunk_and_a_child():
    r, b = 4_000_000, 100_000
    one = memory.screening_bytes(r, b, 16384)
    two = memory.screening_bytes(r, b, 16384, workers=2)
    chunk = memory.BYTES_PER_CHUNK_READING * r * pipeline.chunk_size(16384, b) / b
    assert two - one == pytest.approx(chunk + 2 * memory.CHILD_BASE_BYTES)
    # as many workers as chunks at most, and none for a portfolio screened in one chunk
    assert memory.screening_bytes(r, b, 16384, workers=64) == memory.screening_bytes(r, b, 16384, workers=7)
    assert memory.screening_bytes(r, b, 0, workers=4) == memory.screening_bytes(r, b, 0)


def test_each_thread_adds_a_chunk_and_no_child():
    r, b = 4_000_000, 100_000
    one = memory.screening_bytes(r, b, 16384)
    chunk = memory.BYTES_PER_CHUNK_READING * r * pipeline.chunk_size(16384, b) / b
    assert memory.screening_bytes(r, b, 16384, threads=2) - one == pytest.approx(chunk)
    assert memory.screening_bytes(r, b, 16384, threads=64) == memory.screening_bytes(r, b, 16384, threads=7)
    assert memory.screening_bytes(r, b, 0, threads=4) == memory.screening_bytes(r, b, 0)
    # worker processes take the chunks when there are two or more: threads then add nothing
    assert memory.screening_bytes(r, b, 16384, workers=2, threads=4) == memory.screening_bytes(r, b, 16384, workers=2)


def test_check_refuses_a_run_larger_than_the_limit(tmp_path, monkeypatch):
    p = tmp_path / "readings.csv"
    p.write_text("h\n" + "x\n" * 1000)
    monkeypatch.setattr(memory, "available", lambda: (100e6, "the test limit"))
    need = memory.gb(memory.estimate_peak(1000, 0, 0))
    with pytest.raises(
        OutOfMemoryError,
        match=rf"1,000 readings of 0 buildings need about {need}, and the test limit "
        r"leaves 100 MB; nothing was changed",
    ):
        memory.check({"readings": [str(p)], "buildings": [], "weather": []})
    monkeypatch.setattr(memory, "available", lambda: (1e12, "the test limit"))
    assert memory.check({"readings": [str(p)], "buildings": [], "weather": []}) > 0


def _one_line(err: str) -> str:
    lines = [x for x in err.splitlines() if x.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def test_run_under_a_memory_limit_exits_1_with_one_line_and_changes_nothing(portfolio, tmp_path):
    out, db = tmp_path / "out", tmp_path / "s.duckdb"
    ok = cli(portfolio.args(out, db, "--no-sheets"))
    assert ok.exit_code == 0, ok.output
    before = tree_digest(out)
    db_before = db.read_bytes()
    # address space at the check: the interpreter with every library imported
    # (the settings are read first: their check reads units.csv with polars, which starts its threads)
    probe = subprocess.run(
        [
            sys.executable,
            "-c",
            "import screening.cli, screening.runner, screening.memory as m; "
            "from screening import config; config.load(None); "
            "print(m._status_kb('VmSize'))",
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    limit = int(probe.stdout) + 100_000_000  # 100 MB more: far below any run's estimate

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

    res = subprocess.run(
        [sys.executable, "-m", "screening", *portfolio.args(out, db, "--no-sheets", "--quiet")],
        capture_output=True,
        text=True,
        preexec_fn=cap,
        timeout=120,
    )
    assert res.returncode == 1, res.stderr
    line = _one_line(res.stderr)
    assert line.startswith(
        f"ddscreen: error: not enough memory: {portfolio.n_readings:,} readings of "
        f"{portfolio.n_buildings:,} buildings need about"
    ), line
    assert "the address-space limit (ulimit -v) leaves" in line and "nothing was changed" in line
    assert tree_digest(out) == before
    assert db.read_bytes() == db_before


def test_memory_error_during_a_run_is_one_line_exit_1(portfolio, tmp_path, monkeypatch):
    out, db = tmp_path / "out", tmp_path / "s.duckdb"
    assert cli(portfolio.args(out, db, "--no-sheets")).exit_code == 0
    before = tree_digest(out)

    def boom(*a, **k):
        raise MemoryError()

    monkeypatch.setattr(pipeline, "screen_frames", boom)
    res = cli(portfolio.args(out, db, "--no-sheets", "--quiet", "--force"))  # it would replace the outputs
    assert res.exit_code == 1
    line = _one_line(res.stderr)
    assert (
        line.startswith("ddscreen: error: ran out of memory; the estimate was ")
        and "earlier outputs are untouched" in line
    )
    assert tree_digest(out) == before
    import duckdb

    con = duckdb.connect(str(db), read_only=True)
    status, msg = con.execute("SELECT status, message FROM runs ORDER BY started_at DESC LIMIT 1").fetchone()
    con.close()
    assert status == "failed" and msg.startswith("ran out of memory")


# -------------------------------------------------------------- rewrites with the same answers


def test_nearest_base_is_the_argmin_of_the_distance():
    grid = np.round(40 + 0.5 * np.arange(71), 6)
    rng = np.random.default_rng(3)
    base = np.concatenate([rng.uniform(30, 85, 500), grid, grid[:-1] + 0.25, [np.nan, -1e9, 1e9, 40.0, 75.0]])
    want = np.abs(grid[None, :] - base[:, None]).argmin(axis=1)
    assert np.array_equal(degree_days.nearest_base(grid, base), want)  # ties (x.25 / x.75) take the lower base
    assert np.array_equal(degree_days.nearest_base(np.array([65.0]), base), np.zeros(base.size, dtype=int))


def test_union_coverage_counts_each_covered_day_once():
    rng = np.random.default_rng(5)
    d0 = dt.date(2024, 1, 1)
    rows, spans = [], []
    for b in range(40):
        for _ in range(rng.integers(0, 8)):
            s = int(rng.integers(0, 400))
            rows.append((f"B{b}", d0 + dt.timedelta(days=s), d0 + dt.timedelta(days=s + int(rng.integers(0, 90)))))
        for k in range(3):
            s = int(rng.integers(0, 300))
            spans.append((f"B{b}", k, d0 + dt.timedelta(days=s), d0 + dt.timedelta(days=s + 120)))
    r = pl.DataFrame(rows, schema=["building_id", "period_start", "period_end"], orient="row")
    sp = pl.DataFrame(spans, schema=["building_id", "_k", "span_start", "span_end"], orient="row")
    got = metered._union_coverage(r, sp, ["building_id", "_k"]).sort("building_id", "_k")
    want = []
    for b, _k, s, e in spans:
        days = set()
        for rb, ps, pe in rows:
            if rb == b:
                days |= {ps + dt.timedelta(days=i) for i in range((pe - ps).days + 1)}
        want.append(sum(1 for i in range((e - s).days + 1) if s + dt.timedelta(days=i) in days))
    order = sorted(range(len(spans)), key=lambda i: (spans[i][0], spans[i][1]))
    assert got["covered_days"].to_list() == [want[i] for i in order]


def test_reading_issues_in_blocks_equal_one_pass():
    # 30 buildings with random monthly reads: gaps, duplicates, overlaps, estimated reads, two meters
    rng = np.random.default_rng(11)
    rows = []
    for b in range(30):
        for m in range(24):
            if rng.random() < 0.08:
                continue  # a gap
            s = dt.date(2024 + (m >= 12), m % 12 + 1, 1)
            e = dt.date(2024 + (m >= 11), (m + 1) % 12 + 1, 1) - dt.timedelta(days=1)
            if rng.random() < 0.05:
                e += dt.timedelta(days=9)  # overlaps the next read
            for _ in range(1 + (rng.random() < 0.06)):  # sometimes read twice
                rows.append((f"B{b:02d}", "natural_gas", f"M{b % 2}", s, e, bool(rng.random() < 0.3), len(rows) + 2))
    r = pl.DataFrame(
        rows,
        schema=["building_id", "fuel", "meter_id", "period_start", "period_end", "estimated", "_line"],
        orient="row",
    )
    sp = metered.choose_spans(r, dt.date(2025, 1, 1), dt.date(2025, 12, 31), building_ids=r["building_id"].unique())
    one = metered.reading_issues(r, sp)
    assert set(one["code"]) >= {"duplicate_reads", "overlapping_reads", "gap_in_reads", "many_estimated_reads"}
    assert metered.reading_issues(r, sp, block=7).equals(one)


def test_unit_error_issues_in_blocks_equal_one_pass():
    # 12 buildings, 3 years of monthly gas bills; some bills 100x or 1000x off their month's other years
    rng = np.random.default_rng(17)
    rows = []
    for b in range(12):
        for m in range(36):
            s = dt.date(2023 + m // 12, m % 12 + 1, 1)
            e = dt.date(2023 + (m + 1) // 12, (m + 1) % 12 + 1, 1) - dt.timedelta(days=1)
            use = 100.0 * (1.5 + np.cos(2 * np.pi * (m % 12) / 12)) * (e - s).days
            if rng.random() < 0.04:
                use *= rng.choice([100.0, 1000.0])
            rows.append((f"B{b:02d}", "natural_gas", "", s, e, (e - s).days + 1, use))
    conv = pl.DataFrame(
        rows,
        schema=["building_id", "fuel", "meter_id", "period_start", "period_end", "days", "energy_kbtu"],
        orient="row",
    )
    b = pl.DataFrame({"building_id": [f"B{i:02d}" for i in range(12)], "heating_fuel": ["natural_gas"] * 12})
    one = data_issues.unit_error_issues(conv, b, 10.0)
    assert one.height >= 2
    assert data_issues.unit_error_issues(conv, b, 10.0, block=5).equals(one)


def test_fit_in_blocks_picks_what_the_is_in_filter_picked():
    # 25 buildings, 10 to 30 monthly periods each (some unusable), in building order as fit_periods gives;
    # the results depend on the block (its padding to the longest building's periods changes the float
    # sums' rounding), so each block size is compared with the former is_in pick at that block size
    rng = np.random.default_rng(23)
    grid = np.round(40 + 0.5 * np.arange(71), 6)
    rows, hdd = [], []
    for b in range(25):
        for m in range(int(rng.integers(10, 31))):
            days = int(rng.integers(28, 32))
            h = np.maximum(grid - rng.uniform(20, 60), 0.0) * days
            rows.append(
                (
                    f"B{b:02d}",
                    dt.date(2024, 1, 1) + dt.timedelta(days=31 * m),
                    days,
                    float(rng.uniform(50, 150) * days + 3.0 * h[50]),
                    bool(rng.random() > 0.05),
                )
            )
            hdd.append(h)
    periods = pl.DataFrame(rows, schema=["building_id", "period_start", "days", "energy_kbtu", "usable"], orient="row")
    hdd_arr = np.array(hdd)
    ids = pl.Series("building_id", [f"B{b:02d}" for b in range(27)])  # two buildings without periods
    rows_ix = periods.select("building_id").with_row_index("_r")
    for block in (1, 4, 7, 4096):
        got = metered._fit_in_blocks(periods, hdd_arr, ids, grid, block=block)
        want = []
        for a in range(0, ids.len(), block):
            bid = ids.slice(a, block)
            p = rows_ix.filter(pl.col("building_id").is_in(bid.implode()))["_r"].to_numpy()
            arr = metered.pad_periods(periods[p], hdd_arr[p], bid)
            want.append(
                metered.fit_variable_base(arr["use_per_day"], arr["days"], arr["hdd_per_day"], grid, arr["valid"])
            )
        assert got.keys() == want[0].keys()
        for k in got:
            np.testing.assert_array_equal(got[k], np.concatenate([w[k] for w in want]))


def test_a_streamed_load_is_bounded_by_the_chunk_and_the_database_limit():
    r = 42_000_000
    whole = memory.reading_bytes(r)
    assert whole == memory.BYTES_PER_READING_READ * r
    limited = memory.reading_bytes(r, ingest_chunk_mb=32, store_memory_mb=2048)
    assert limited == pytest.approx(memory.BYTES_PER_READING_READ * memory.READINGS_PER_MB * 32 + 2048e6)
    # the same for 10x the readings: the load no longer grows with the file
    assert memory.reading_bytes(10 * r, ingest_chunk_mb=32, store_memory_mb=2048) == limited
    # without a database limit DuckDB's share grows with the readings
    unlimited = memory.reading_bytes(r, ingest_chunk_mb=32)
    assert unlimited > limited and memory.reading_bytes(2 * r, ingest_chunk_mb=32) > unlimited
    # a small file: its rows, not a whole chunk's
    assert memory.reading_bytes(1000, ingest_chunk_mb=32, store_memory_mb=0) < 1e6
    # the run's estimate takes the settings
    est = memory.estimate_peak(r, 1_000_000, 0, 16384, ingest_chunk_mb=32, store_memory_mb=2048)
    assert est == pytest.approx(memory.BASE_BYTES + max(limited, memory.screening_bytes(r, 1_000_000, 16384)))
