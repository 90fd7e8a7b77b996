"""Unattended runs touch only what the tool wrote and screen exactly the files named now (issue 18,
items 1-4 and 12).

The portfolio is the project simulator's (``sample_portfolio/simulate.py``, invented climates), as in
tests/test_runs.py, whose ``Site`` (inputs in ``in/``, ``screening.toml``, database, ``out/``) is reused.
Quarter labels by hand from the window rule (the 12 months ending with the last complete calendar
quarter before as_of): 2026-01-15 → 2025-Q4, 2026-04-15 → 2026-Q1, 2026-07-15 → 2026-Q2,
2026-10-15 → 2026-Q3.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import polars as pl
import pytest

from screening import published, runner
from screening.runs import demo as demo_mod, stages
from screening.errors import ConfigError
from screening.store import SCHEMA_VERSION, Store
from tests.conftest import simulator, tree_digest
from tests.test_runs import Site, cli, run_rows, subprocess_run

QUARTERS = {"2025-Q4": "2026-01-15", "2026-Q1": "2026-04-15", "2026-Q2": "2026-07-15", "2026-Q3": "2026-10-15"}


def _simulate(n: int, seed: int, start: dt.date, years: int):
    sim = simulator()
    return sim, sim.simulate_portfolio(n, seed=seed, start=start, years=years)


@pytest.fixture(scope="module")
def simulated(tmp_path_factory) -> Path:
    """12 simulated buildings, 2023-10-01 to 2026-09-30 (as tests/test_runs.py)."""
    sim, frames = _simulate(12, 5, dt.date(2023, 10, 1), 3)
    folder = tmp_path_factory.mktemp("portfolio")
    sim.write_portfolio(frames, folder)
    return folder


def _split(path: Path, into: list[Path], *, by: str = "building_id") -> None:
    """Write the rows of one CSV into several files by alternating values of ``by``."""
    df = pl.read_csv(path, infer_schema=False)
    ids = sorted(df[by].unique().to_list())
    for i, dest in enumerate(into):
        df.filter(pl.col(by).is_in(ids[i :: len(into)])).write_csv(dest)


def _glob_site(tmp_path: Path, simulated: Path, *, extra: str = "") -> Site:
    """A site whose buildings come from ``in/bld_*.csv`` (two files, six buildings each)."""
    site = Site(tmp_path, simulated, extra=extra)
    _split(site.input("buildings"), [site.folder / "in" / "bld_1.csv", site.folder / "in" / "bld_2.csv"])
    site.input("buildings").unlink()
    text = site.config.read_text().replace('buildings = "in/buildings.csv"', 'buildings = "in/bld_*.csv"')
    site.config.write_text(text)
    return site


def _ranking(site: Site, label: str = "2026-Q3") -> pl.DataFrame:
    return pl.read_csv(site.root / label / "ranking.csv", infer_schema=False)


# ---------------------------------------------------------------------------- 1. pruning


def test_pruning_removes_only_the_tools_own_quarters_never_a_users_folder(simulated, tmp_path):
    site = Site(tmp_path, simulated, extra="keep = 2\n")
    for label in ("2025-Q4", "2026-Q1"):
        assert site.run("--as-of", QUARTERS[label]).exit_code == 0
    # the user's folders beside the quarters: a copy with notes, an old board pack, an archive that
    # sorts after every quarter by name; and notes inside one of the tool's own quarter folders
    board = site.root / "2026-Q1 sent to board"
    shutil.copytree(site.root / "2026-Q1", board)
    (board / "notes.txt").write_text("board asked about B0003\n")
    for name in ("2019-board-pack", "zz-archive"):
        (site.root / name).mkdir()
        (site.root / name / "summary.json").write_text('{"mine": true}\n')
    users = {name: tree_digest(site.root / name) for name in ("2026-Q1 sent to board", "2019-board-pack", "zz-archive")}

    assert site.run("--as-of", QUARTERS["2026-Q2"]).exit_code == 0
    names = sorted(p.name for p in site.root.iterdir())
    assert "2025-Q4" not in names and {"2026-Q1", "2026-Q2"} <= set(names)  # keep = 2 of the tool's own
    (site.root / "2026-Q1" / "notes.txt").write_text("audit booked\n")

    r = site.run("--as-of", QUARTERS["2026-Q3"])
    assert r.exit_code == 0, r.stderr
    # 2026-Q1 is past the two newest: its own files go, the user's notes and so the folder stay
    assert published.entries(site.root / "2026-Q1") == ["notes.txt"]
    assert (site.root / "2026-Q2" / "summary.json").is_file() and (site.root / "2026-Q3" / "summary.json").is_file()
    for name, digest in users.items():
        assert tree_digest(site.root / name) == digest, name
    assert os.readlink(site.root / "latest") == "2026-Q3"


def test_latest_never_moves_back_and_a_real_latest_folder_stops_the_run(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", QUARTERS["2026-Q3"]).exit_code == 0
    assert site.run("--as-of", QUARTERS["2026-Q2"]).exit_code == 0
    assert os.readlink(site.root / "latest") == "2026-Q3"

    other = Site(tmp_path / "b", simulated)
    (other.root / "latest").mkdir(parents=True)
    (other.root / "latest" / "mine.txt").write_text("x")
    before = tree_digest(other.folder)
    r = other.run("--as-of", QUARTERS["2026-Q3"])
    assert r.exit_code == 2
    assert "latest: is a folder that ddscreen did not write" in r.stderr and "nothing was changed" in r.stderr
    assert tree_digest(other.folder) == before


# ---------------------------------------------------------------------------- one rule for existing folders


def test_an_existing_output_folder_is_replaced_only_with_force_and_only_if_ddscreen_wrote_all_of_it(
    simulated, tmp_path
):
    site = Site(tmp_path, simulated)
    out = tmp_path / "adhoc"
    args = ["run", "--config", str(site.config), "--as-of", QUARTERS["2026-Q3"], "--out", str(out)]
    assert cli(args).exit_code == 0
    assert {p.name for p in out.iterdir()} <= set(demo_mod.OUTPUT_NAMES)  # the names the demo may replace
    first = tree_digest(out)
    again = cli(args)
    assert again.exit_code == 2 and "already holds the outputs" in again.stderr and "--force" in again.stderr
    assert tree_digest(out) == first
    assert cli(args + ["--force"]).exit_code == 0  # ours, whole: replaced

    (out / "notes.txt").write_text("mine\n")
    r = cli(args + ["--force"])
    assert r.exit_code == 2 and "notes.txt" in r.stderr and "did not write" in r.stderr
    assert (out / "notes.txt").read_text() == "mine\n"

    theirs = tmp_path / "documents"
    theirs.mkdir()
    (theirs / "a.txt").write_text("keep me\n")
    for more in ([], ["--force"]):
        r = cli(["run", "--config", str(site.config), "--as-of", QUARTERS["2026-Q3"], "--out", str(theirs), *more])
        assert r.exit_code == 2 and "did not write" in r.stderr, r.stderr
    assert [p.name for p in theirs.iterdir()] == ["a.txt"]

    empty = tmp_path / "empty"
    empty.mkdir()
    assert (
        cli(["run", "--config", str(site.config), "--as-of", QUARTERS["2026-Q3"], "--out", str(empty)]).exit_code == 0
    )


def test_the_demo_never_replaces_a_file_it_did_not_write(tmp_path):
    out = tmp_path / "demo"
    out.mkdir()
    (out / "ranking.csv").write_text("my own ranking\n")
    with pytest.raises(ConfigError, match="ranking.csv, which ddscreen demo did not write"):
        runner.demo(str(out), sheets=False)
    assert [p.name for p in out.iterdir()] == ["ranking.csv"]
    assert (out / "ranking.csv").read_text() == "my own ranking\n"


# ---------------------------------------------------------------------------- 2. the files named now


def test_a_removed_input_file_is_no_longer_screened(simulated, tmp_path):
    site = _glob_site(tmp_path, simulated)
    assert site.run("--as-of", QUARTERS["2026-Q3"]).exit_code == 0
    assert _ranking(site).height == 12
    bld2 = sorted(pl.read_csv(site.folder / "in" / "bld_2.csv", infer_schema=False)["building_id"].to_list())
    os.replace(site.folder / "in" / "bld_2.csv", tmp_path / "bld_2.csv")  # moved away

    r = site.run("--as-of", QUARTERS["2026-Q3"], "--force")
    assert r.exit_code == 0, r.stderr
    ranking = _ranking(site)
    assert ranking.height == 6 and not set(ranking["building_id"]) & set(bld2)
    summary = json.loads((site.root / "2026-Q3" / "summary.json").read_text())
    assert [Path(i["path"]).name for i in summary["inputs"] if i["kind"] == "buildings"] == ["bld_1.csv"]
    assert site.query("SELECT DISTINCT source_file FROM buildings") == [(str(site.folder / "in" / "bld_1.csv"),)]
    # their bills are now bills of unknown buildings: rejected with a reason, not screened
    rej = pl.read_csv(site.root / "2026-Q3" / "rejects.csv", infer_schema=False)
    assert set(rej.filter(pl.col("column") == "building_id")["value"]) == set(bld2)


def test_a_copied_site_reports_each_reject_once(simulated, tmp_path):
    site = _glob_site(tmp_path / "a", simulated)
    os.remove(site.folder / "in" / "bld_2.csv")  # their bills: rejects
    assert site.run("--as-of", QUARTERS["2026-Q3"]).exit_code == 0
    n = pl.read_csv(site.root / "2026-Q3" / "rejects.csv", infer_schema=False).height
    assert n > 0
    copy = tmp_path / "b"
    shutil.copytree(site.folder, copy, symlinks=True)  # database and outputs too
    r = cli(["run", "--config", str(copy / "screening.toml"), "--as-of", QUARTERS["2026-Q3"], "--force"])
    assert r.exit_code == 0, r.stderr
    rej = pl.read_csv(copy / "out" / "2026-Q3" / "rejects.csv", infer_schema=False)
    assert rej.height == n and rej["file"].str.starts_with(str(copy)).all()


# ---------------------------------------------------------------------------- 3. one key in two files


def test_a_building_in_two_files_with_different_data_is_rejected_in_both_whatever_changed_last(simulated, tmp_path):
    site = _glob_site(tmp_path, simulated)
    b1, b2 = site.folder / "in" / "bld_1.csv", site.folder / "in" / "bld_2.csv"
    one = pl.read_csv(b1, infer_schema=False)
    dup = one.head(1).with_columns(pl.lit("99999").alias("floor_area"))
    pl.concat([pl.read_csv(b2, infer_schema=False), dup]).write_csv(b2)
    bid = dup["building_id"][0]
    outputs = []
    for touched in (b1, b2):  # either file the newer one: the same outcome
        os.utime(touched, (time.time() + 10, time.time() + 10))
        r = site.run("--as-of", QUARTERS["2026-Q3"], "--force")
        assert r.exit_code == 0, r.stderr
        outputs.append({f: (site.root / "2026-Q3" / f).read_bytes() for f in ("ranking.csv", "rejects.csv")})
        assert bid not in _ranking(site)["building_id"].to_list()
        rej = pl.read_csv(site.root / "2026-Q3" / "rejects.csv", infer_schema=False).filter(pl.col("value") == bid)
        conflict = rej.filter(pl.col("reason").str.contains("different data in more than one input file"))
        assert sorted(Path(f).name for f in conflict["file"]) == ["bld_1.csv", "bld_2.csv"]
        assert "bld_1.csv line 2" in conflict["reason"][0] and "bld_2.csv line" in conflict["reason"][0]
    assert outputs[0] == outputs[1]


def test_a_building_given_identically_in_two_files_is_kept_once(simulated, tmp_path):
    site = _glob_site(tmp_path, simulated)
    b1, b2 = site.folder / "in" / "bld_1.csv", site.folder / "in" / "bld_2.csv"
    pl.concat([pl.read_csv(b2, infer_schema=False), pl.read_csv(b1, infer_schema=False).head(1)]).write_csv(b2)
    r = site.run("--as-of", QUARTERS["2026-Q3"])
    assert r.exit_code == 0, r.stderr
    assert _ranking(site).height == 12
    assert (
        "1 building row(s) given identically in more than one input file kept once"
        in (site.root / "2026-Q3" / "run.log").read_text()
    )


def test_a_reading_in_two_files_with_different_data_is_rejected_in_both(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    r1, r2 = site.folder / "in" / "r1.csv", site.folder / "in" / "r2.csv"
    df = pl.read_csv(site.input("readings"), infer_schema=False)
    df.write_csv(r1)
    other = df.head(1).with_columns((pl.col("quantity").cast(pl.Float64) * 2).cast(pl.String))
    other.write_csv(r2)
    site.input("readings").unlink()
    site.config.write_text(site.config.read_text().replace('"in/readings.csv"', '"in/r*.csv"'))
    r = site.run("--as-of", QUARTERS["2026-Q3"])
    assert r.exit_code == 0, r.stderr
    rej = pl.read_csv(site.root / "2026-Q3" / "rejects.csv", infer_schema=False)
    conflict = rej.filter(pl.col("reason").str.contains("same reading is given with different data"))
    assert sorted(Path(f).name for f in conflict["file"]) == ["r1.csv", "r2.csv"]


# ---------------------------------------------------------------------------- 4. killed while publishing


@pytest.mark.parametrize("stage", ["after_publish", "after_record"])
def test_a_run_killed_after_publishing_is_settled_as_published(simulated, tmp_path, stage):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", QUARTERS["2026-Q1"]).exit_code == 0
    p = subprocess_run(
        ["run", "--config", str(site.config), "--as-of", QUARTERS["2026-Q2"], "--quiet"],
        env_extra={"DDSCREEN_KILL_AT": stage},
    )
    assert p.returncode == -signal.SIGKILL, p.stderr
    assert (site.root / "2026-Q2" / "summary.json").is_file()  # the folder is in place
    # status shows what the next run will record, without writing anything
    seen = runner.status(str(site.db))
    assert seen.filter(pl.col("label") == "2026-Q2")["status"].to_list() == ["ok"]
    # a rerun of the killed quarter is refused, and the record is settled by it
    again = site.run("--as-of", QUARTERS["2026-Q2"])
    assert again.exit_code == 2 and "already holds the outputs of 2026-Q2" in again.stderr
    assert [s for _, label, s in run_rows(site) if label == "2026-Q2"] == ["ok"]
    # the next quarter compares with the killed one, and latest points at the newest
    assert site.run("--as-of", QUARTERS["2026-Q3"]).exit_code == 0
    q2 = _ranking(site, "2026-Q2").select("building_id", pl.col("rank").alias("q2"))
    q3 = _ranking(site, "2026-Q3").join(q2, on="building_id")
    assert q3["previous_rank"].to_list() == q3["q2"].to_list()
    s2 = json.loads((site.root / "2026-Q2" / "summary.json").read_text())
    assert json.loads((site.root / "2026-Q3" / "summary.json").read_text())["previous_run"] == s2["run_id"]
    assert os.readlink(site.root / "latest") == "2026-Q3"


# ---------------------------------------------------------------------------- 12. smaller things


def test_status_and_history_read_the_database_while_a_run_holds_the_lock(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", QUARTERS["2026-Q2"]).exit_code == 0
    env = dict(os.environ, DDSCREEN_PAUSE_AT="after_screen:6")
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "screening",
            "run",
            "--config",
            str(site.config),
            "--as-of",
            QUARTERS["2026-Q3"],
            "--quiet",
        ],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            runs = runner.status(str(site.db))
            if runs.height == 2:
                break
            time.sleep(0.02)  # polled often: the run must wait for these brief holds, not fail
        assert runs["status"].to_list() == ["running", "ok"]  # the lock is held: still running
        r = cli(["history", "--db", str(site.db)])
        assert r.exit_code == 0, r.stderr
    finally:
        out, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err


def test_workers_are_capped_to_the_machine():
    assert stages.workers(40) == (os.cpu_count() or 1)
    assert stages.workers(1) == 1


def test_an_input_name_with_brackets_is_read_as_a_name(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    named = site.folder / "in" / "bills [2026].csv"
    os.replace(site.input("readings"), named)
    site.config.write_text(site.config.read_text().replace('"in/readings.csv"', '"in/bills [2026].csv"'))
    r = site.run("--as-of", QUARTERS["2026-Q3"])
    assert r.exit_code == 0, r.stderr
    assert _ranking(site).height == 12


def test_a_version_1_database_is_brought_up_to_date(tmp_path):
    db = tmp_path / "old.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE buildings (building_id VARCHAR PRIMARY KEY, source_file VARCHAR, source_line BIGINT)")
    con.execute(
        "CREATE TABLE input_files (path VARCHAR, kind VARCHAR, sha256 VARCHAR, options_hash VARCHAR, "
        "rows_loaded BIGINT, rows_rejected BIGINT, loaded_at TIMESTAMP, PRIMARY KEY (kind, path))"
    )
    con.execute("INSERT INTO input_files VALUES ('b.csv', 'buildings', 'x', 'y', 1, 0, now()::TIMESTAMP)")
    con.execute(
        "CREATE TABLE runs (run_id VARCHAR PRIMARY KEY, run_key VARCHAR, label VARCHAR, as_of DATE, "
        "window_start DATE, window_end DATE, started_at TIMESTAMP, finished_at TIMESTAMP, status VARCHAR, "
        "out_dir VARCHAR, config_hash VARCHAR, input_hashes VARCHAR, versions VARCHAR, timings VARCHAR, "
        "counts VARCHAR, message VARCHAR)"
    )
    con.execute("INSERT INTO runs (run_id, status) VALUES ('2026-Q2-old', 'ok')")
    con.close()
    with Store(db) as store:
        assert store.rows("get_schema_version") == [(str(SCHEMA_VERSION),)]
        assert store.con.execute("SELECT count(*) FROM input_files").fetchall() == [(0,)]  # inputs read again
        assert store.con.execute("SELECT run_id, files FROM runs").fetchall() == [("2026-Q2-old", None)]
        cols = [r[0] for r in store.con.execute("DESCRIBE buildings").fetchall()]
        assert "floor_area_ft2" in cols  # the table of this version
    with Store(db) as store:  # a second open changes nothing
        assert store.rows("get_schema_version") == [(str(SCHEMA_VERSION),)]


def test_a_version_2_database_loses_the_results_index_and_keeps_its_rows(tmp_path):
    db = tmp_path / "v2.duckdb"
    with Store(db) as store:  # this version's tables, then made into version 2's results table
        store.con.execute("DROP TABLE results")
        store.con.execute(
            "CREATE TABLE results (run_id VARCHAR, building_id VARCHAR, rank INTEGER, tier VARCHAR, "
            "needs_review BOOLEAN, ratio DOUBLE, actual_heating_kbtu DOUBLE, expected_heating_kbtu DOUBLE, "
            "normal_heating_kbtu DOUBLE, excess_energy_kbtu DOUBLE, excess_cost DOUBLE, flags VARCHAR, "
            "data_issues VARCHAR, record VARCHAR, PRIMARY KEY (run_id, building_id))"
        )
        store.con.execute(
            "INSERT INTO results (run_id, building_id, rank, record) VALUES "
            "('r1', 'B2', 1, '{\"a\": 1}'), ('r1', 'B1', 2, '{}')"
        )
        store.con.execute("UPDATE meta SET value = '2' WHERE key = 'schema_version'")
        assert store.rows("results_primary_keys") == [(1,)]
    with Store(db) as store:
        assert store.rows("get_schema_version") == [(str(SCHEMA_VERSION),)]
        assert store.rows("results_primary_keys") == [(0,)]
        rows = store.con.execute("SELECT run_id, building_id, rank, record FROM results").fetchall()
        assert rows == [("r1", "B2", 1, '{"a": 1}'), ("r1", "B1", 2, "{}")]  # rows and their order kept
        cols = [r[0] for r in store.con.execute("DESCRIBE results").fetchall()]
        assert cols[0] == "run_id" and cols[-1] == "record" and len(cols) == 14
        store.con.execute("CHECKPOINT")
        kinds = store.con.execute(
            "SELECT DISTINCT compression FROM pragma_storage_info('results') WHERE column_name = 'record'"
        ).fetchall()
        assert ("ZSTD",) in kinds
    with Store(db) as store:  # a second open changes nothing
        assert store.con.execute("SELECT count(*) FROM results").fetchall() == [(2,)]


def test_results_listing_a_building_twice_are_not_recorded():
    from screening.runs import record

    res = pl.DataFrame({"building_id": ["B1", "B2", "B1"]})
    with pytest.raises(RuntimeError, match="listed twice.*B1"):
        next(record.results_for_store("r1", res))


# ---------------------------------------------------------------------------- the soak

KILL_STAGES = ("after_load", "after_screen", "before_publish", "after_publish", "after_record")


@pytest.mark.slow
def test_twelve_quarters_with_kills_edits_and_deletions_agree_at_the_end(tmp_path):
    """Quarters 2023-Q3 … 2026-Q2 on a portfolio that grows by a file every few quarters, with
    input edits and a deleted file, and a kill in a seeded random third of the quarters, at each
    named stage in turn (each killed quarter is run again, as an operator would). Afterwards the quarter
    folders, ``latest``, the database and ``history`` agree, and the user's files are untouched."""
    rng = random.Random(20261202)
    sim, frames = _simulate(12, 8, dt.date(2022, 7, 1), 4)
    src = tmp_path / "src"
    sim.write_portfolio(frames, src)
    site_dir = tmp_path / "site"
    (site_dir / "in").mkdir(parents=True)
    for kind in ("readings", "weather"):
        shutil.copy(src / f"{kind}.csv", site_dir / "in" / f"{kind}.csv")
    parts = [site_dir / "in" / f"bld_{i}.csv" for i in range(4)]
    staged = [tmp_path / f"bld_{i}.csv" for i in range(4)]
    _split(src / "buildings.csv", staged)
    shutil.copy(staged[0], parts[0])
    config = site_dir / "screening.toml"
    config.write_text(
        '[inputs]\nbuildings = "in/bld_*.csv"\nreadings = "in/readings.csv"\n'
        'weather = "in/weather.csv"\n[store]\ndatabase = "screening.duckdb"\n'
        '[output]\nroot = "out"\nsheets = false\nkeep = 4\n'
    )
    root = site_dir / "out"
    root.mkdir()
    (root / "board copy").mkdir()
    (root / "board copy" / "notes.txt").write_text("mine\n")
    (site_dir / "README-site.txt").write_text("operator notes\n")
    users = {p: p.read_bytes() for p in (root / "board copy" / "notes.txt", site_dir / "README-site.txt")}

    quarters = []
    d = dt.date(2023, 10, 15)
    for _ in range(12):
        quarters.append(d)
        d = dt.date(d.year + (d.month == 10), (d.month + 3 - 1) % 12 + 1, 15)
    killed = 0
    for i, as_of in enumerate(quarters):
        if i in (2, 5, 8):  # the portfolio grows
            shutil.copy(staged[i // 3 + 1], parts[i // 3 + 1])
        if i == 7:  # an input edited: one floor area
            b0 = pl.read_csv(parts[0], infer_schema=False)
            b0.with_columns(
                pl.when(pl.int_range(pl.len()) == 0)
                .then((pl.col("floor_area").cast(pl.Float64) * 1.1).round(0).cast(pl.String))
                .otherwise(pl.col("floor_area"))
                .alias("floor_area")
            ).write_csv(parts[0])
        if i == 10:  # a file deleted
            parts[1].unlink()
        args = ["run", "--config", str(config), "--as-of", as_of.isoformat(), "--quiet"]
        if rng.random() < 0.35:
            stage = KILL_STAGES[killed % len(KILL_STAGES)]  # every stage in turn
            p = subprocess_run(args, env_extra={"DDSCREEN_KILL_AT": stage})
            assert p.returncode == -signal.SIGKILL, (stage, p.stderr)
            killed += 1
        r = cli(args)
        assert r.exit_code in (0, 2), r.stderr
        if r.exit_code == 2:  # killed after publishing: already there
            assert "already holds the outputs" in r.stderr
    assert killed >= len(KILL_STAGES)

    con = duckdb.connect(str(site_dir / "screening.duckdb"), read_only=True)
    try:
        runs = con.execute("SELECT run_id, label, status, out_dir, files, window_end FROM runs").fetchall()
        db_rows = con.execute("SELECT count(*) FROM buildings").fetchall()[0][0]
    finally:
        con.close()
    assert {s for _, _, s, *_ in runs} <= {"ok", "interrupted", "failed"}
    labels = sorted({label for _, label, s, *_ in runs if s == "ok"})
    assert len(labels) == 12  # every quarter published once at least
    newest4 = labels[-4:]
    quarter_dirs = sorted(
        p.name for p in root.iterdir() if p.is_dir() and not p.is_symlink() and p.name != "board copy"
    )
    assert quarter_dirs == newest4  # keep = 4
    assert os.readlink(root / "latest") == labels[-1]
    for name in newest4:  # each folder is what its run recorded
        rec = [json.loads(f) for _, label, s, _o, f, _w in runs if label == name and s == "ok"]
        assert any(published.foreign(root / name, r) == [] for r in rec), name
    assert not [p for p in root.iterdir() if p.name.startswith(".")]
    for path, content in users.items():
        assert path.read_bytes() == content
    # the last quarter screened exactly the files named then: bld_0, bld_2, bld_3
    final = pl.read_csv(root / labels[-1] / "ranking.csv", infer_schema=False)
    expected = set()
    for f in (staged[0], staged[2], staged[3]):
        expected |= set(pl.read_csv(f, infer_schema=False)["building_id"])
    assert set(final["building_id"]) == expected and db_rows == len(expected)
    hist_runs, diff = runner.history(str(site_dir / "screening.duckdb"))
    assert diff is not None and set(hist_runs.filter(pl.col("status") == "ok")["label"]) == set(labels)
