"""Unattended quarterly runs (issue 8): config file, quarter folders, reruns, kills, the lock,
incremental loads, config errors, exit codes, status and history.

The portfolio is invented: ``sample_portfolio/simulate.py`` (12 buildings, seed 5, invented
climates, daily weather and bills from 2023-10-01 to 2026-09-30), written once per module and
copied into each test's ``tmp_path``. Every run writes CSV/JSON only (``[output] sheets =
false``) except the crontab-form test, which renders the per-building sheets of 4 of the buildings.

Quarter labels follow the window rule of the foundation issue: the 12 months ending on the
last day of the last complete calendar quarter before ``as_of`` (by hand from the calendar:
2026-10-15 → 2025-10-01..2026-09-30 = "2026-Q3"; 2026-07-15 → 2025-07-01..2026-06-30 = "2026-Q2").

Exit codes are the contract of ``screening/errors.py`` and README "Running every quarter from cron":
0 ok · 1 run failed · 2 bad input or config · 3 another run holds the lock.
"""

from __future__ import annotations

import datetime as dt
import fcntl
import hashlib
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import polars as pl
import pytest

from tests.conftest import simulator, tree_digest
from typer.testing import CliRunner

from screening.cli import app

REPO = Path(__file__).resolve().parents[1]
Q3_AS_OF, Q3 = "2026-10-15", "2026-Q3"  # by hand: window 2025-10-01..2026-09-30, calendar Q3 ends 30 Sep
Q2_AS_OF, Q2 = "2026-07-15", "2026-Q2"  # by hand: window 2025-07-01..2026-06-30
DETERMINISTIC_FILES = ("ranking.csv", "rejects.csv", "data_issues.csv", "summary.json", "index.html")
N_BUILDINGS = 12
N_KEPT = 4  # buildings of the crontab-form test (with sheets)


# ---------------------------------------------------------------------------- fixtures and helpers


@pytest.fixture(scope="module")
def simulated(tmp_path_factory) -> Path:
    """The simulated portfolio's CSV files, written once for the module."""
    sim = simulator()
    frames = sim.simulate_portfolio(N_BUILDINGS, seed=5, start=dt.date(2023, 10, 1), years=3)
    folder = tmp_path_factory.mktemp("portfolio")
    sim.write_portfolio(frames, folder)
    return folder


class Site:
    """One screening installation in a folder: inputs in ``in/``, ``screening.toml``, db, outputs."""

    def __init__(self, folder: Path, source: Path, *, sheets: bool = False, extra: str = ""):
        self.folder = folder
        (folder / "in").mkdir(parents=True)
        for kind in ("buildings", "readings", "weather"):
            shutil.copy(source / f"{kind}.csv", folder / "in" / f"{kind}.csv")
        self.config = folder / "screening.toml"
        self.db = folder / "screening.duckdb"
        self.root = folder / "out"
        # relative paths: the config module takes them from the config file's folder
        self.config.write_text(
            '[inputs]\nbuildings = "in/buildings.csv"\nreadings = "in/readings.csv"\nweather = "in/weather.csv"\n'
            '[store]\ndatabase = "screening.duckdb"\n'
            f'[output]\nroot = "out"\nsheets = {"true" if sheets else "false"}\n' + extra,
            encoding="utf-8",
        )

    def input(self, kind: str) -> Path:
        return self.folder / "in" / f"{kind}.csv"

    def run(self, *more: str):
        return cli(["run", "--config", str(self.config), *more])

    def query(self, sql: str) -> list[tuple]:
        con = duckdb.connect(str(self.db), read_only=True)
        try:
            return con.execute(sql).fetchall()
        finally:
            con.close()


def cli(args: list[str]):
    """The typer app in-process (stdout and stderr apart)."""
    return CliRunner().invoke(app, args, catch_exceptions=False)


def subprocess_run(args: list[str], *, env_extra: dict | None = None, timeout: float = 120):
    env = dict(os.environ, PYTHONIOENCODING="utf-8", **(env_extra or {}))
    return subprocess.run(
        [sys.executable, "-m", "screening", *args], capture_output=True, text=True, timeout=timeout, env=env
    )


def sha256_of(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib: FIPS 180-4 SHA-256


def run_rows(site: Site) -> list[tuple]:
    return site.query("SELECT run_id, label, status FROM runs ORDER BY started_at, run_id")


# ---------------------------------------------------------------------------- the config template


def test_init_template_runs_from_a_crontab_form_command(simulated, tmp_path):
    """``ddscreen init`` writes a template that a cron-style command accepts once the inputs are set.

    The command has the form of the README's crontab line, run by /bin/sh with cron's bare
    environment (PATH=/usr/bin:/bin, from another current folder) -- and this one test renders
    the per-building sheets (the template's default ``sheets = true``).
    """
    site_dir = tmp_path / "srv"
    site_dir.mkdir()
    r = cli(["init", str(site_dir / "screening.toml")])
    assert r.exit_code == 0, r.stderr
    text = (site_dir / "screening.toml").read_text(encoding="utf-8")
    assert "sheets = true" in text and 'root = "ddscreen-out"' in text  # the documented defaults
    # a second init refuses to overwrite (config error: exit 2) and names the file
    again = cli(["init", str(site_dir / "screening.toml")])
    assert again.exit_code == 2 and "exists; use --force" in again.stderr
    for kind in ("buildings", "readings", "weather"):
        shutil.copy(simulated / f"{kind}.csv", site_dir / f"{kind}.csv")
    # four buildings only (fewer sheets to render); the other buildings' bills become rejected rows,
    # a data problem that must not change the exit code
    lines = (site_dir / "buildings.csv").read_text().splitlines(keepends=True)
    (site_dir / "buildings.csv").write_text("".join(lines[: 1 + N_KEPT]))
    kept = [ln.split(",")[0] for ln in lines[1 : 1 + N_KEPT]]
    readings = pl.read_csv(site_dir / "readings.csv", infer_schema=False)
    n_orphan = readings.filter(~pl.col("building_id").is_in(kept)).height
    assert n_orphan > 0
    for kind in ("buildings", "readings", "weather"):
        text, n = re.subn(rf'^{kind} = ""', f'{kind} = "{kind}.csv"', text, count=1, flags=re.M)
        assert n == 1
    text, n = re.subn(r'^as_of = ""', f'as_of = "{Q3_AS_OF}"', text, count=1, flags=re.M)
    assert n == 1
    (site_dir / "screening.toml").write_text(text, encoding="utf-8")
    ddscreen = Path(sys.executable).with_name("ddscreen")
    line = f"cd {site_dir} && {ddscreen} run --config screening.toml --quiet"
    p = subprocess.run(
        ["/bin/sh", "-c", line],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
        env={"PATH": "/usr/bin:/bin", "HOME": str(tmp_path), "SHELL": "/bin/sh"},
    )
    assert p.returncode == 0, p.stderr
    assert p.stdout == "" and p.stderr == ""  # --quiet: nothing but errors
    out = site_dir / "ddscreen-out" / Q3
    assert os.readlink(site_dir / "ddscreen-out" / "latest") == Q3
    pdfs = sorted((out / "sheets").glob("*.pdf"))
    assert len(pdfs) == N_KEPT
    assert all(p.read_bytes()[:5] == b"%PDF-" for p in pdfs)  # ISO 32000-1 §7.5.2 file header
    index = pl.read_csv(out / "sheets_index.csv")
    assert sorted(index["building_id"]) == sorted(kept) and all((out / f).exists() for f in index["file"])
    rejects = pl.read_csv(out / "rejects.csv", infer_schema=False)
    orphan = rejects.filter(pl.col("reason").str.starts_with("unknown building"))
    assert orphan.height == n_orphan and set(orphan["value"]).isdisjoint(kept)
    assert json.loads((out / "summary.json").read_text())["counts"]["rejected_rows"] == rejects.height
    assert (site_dir / "screening.duckdb").exists()


# ---------------------------------------------------------------------------- quarter folders, reruns


def test_quarter_folder_latest_refusal_and_force(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    r = site.run("--as-of", Q3_AS_OF)
    assert r.exit_code == 0, r.stderr
    target = site.root / Q3
    assert target.is_dir() and os.readlink(site.root / "latest") == Q3
    for f in (*DETERMINISTIC_FILES, "ranking.pdf", "run.log"):
        assert (target / f).is_file(), f
    summary = json.loads((target / "summary.json").read_text())
    assert summary["label"] == Q3 and summary["window"] == ["2025-10-01", "2026-09-30"]  # by hand
    assert pl.read_csv(target / "ranking.csv").height == summary["counts"]["buildings"] == N_BUILDINGS
    before = tree_digest(site.root)
    runs_before = run_rows(site)

    again = site.run("--as-of", Q3_AS_OF)
    assert again.exit_code == 2
    assert f"already holds the outputs of {Q3}" in again.stderr and "--force" in again.stderr
    assert tree_digest(site.root) == before and run_rows(site) == runs_before  # touched nothing

    forced = site.run("--as-of", Q3_AS_OF, "--force")
    assert forced.exit_code == 0, forced.stderr
    runs = run_rows(site)
    assert [s for _, _, s in runs] == ["ok", "ok"] and runs[1][0] != runs[0][0]
    assert runs[1][0] in (target / "run.log").read_text()  # the folder now holds the new run
    assert os.readlink(site.root / "latest") == Q3
    assert sorted(p.name for p in site.root.iterdir()) == [Q3, "latest"]  # no temporary folder left


def test_two_runs_give_identical_outputs_and_compare_with_the_earlier_quarter(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", Q2_AS_OF).exit_code == 0
    assert site.run("--as-of", Q3_AS_OF).exit_code == 0
    first = {f: (site.root / Q3 / f).read_bytes() for f in DETERMINISTIC_FILES}
    r = site.run("--as-of", Q3_AS_OF, "--force")  # --force also reloads every input
    assert r.exit_code == 0, r.stderr
    for f in DETERMINISTIC_FILES:
        assert (site.root / Q3 / f).read_bytes() == first[f], f"{f} differs between two runs"
    # both runs of Q3 compare with Q2 (not with each other): previous_rank is Q2's rank
    q2 = pl.read_csv(site.root / Q2 / "ranking.csv").select("building_id", pl.col("rank").alias("q2_rank"))
    q3 = pl.read_csv(site.root / Q3 / "ranking.csv")
    j = q3.join(q2, on="building_id", how="left")
    assert j["previous_rank"].to_list() == j["q2_rank"].to_list()
    assert (pl.read_csv(site.root / Q2 / "ranking.csv")["change"] == "first run").all()
    s2 = json.loads((site.root / Q2 / "summary.json").read_text())
    s3 = json.loads((site.root / Q3 / "summary.json").read_text())
    # previous_run is the earlier quarter's identity (summary.json's run_id, its run_key), so a
    # --force rerun of that quarter on the same inputs leaves this summary unchanged
    q2_key = site.query(f"SELECT run_key FROM runs WHERE label = '{Q2}'")[0][0]
    assert s2["previous_run"] is None and s3["previous_run"] == q2_key == s2["run_id"]
    # the stored record of each building is the text json.dumps(row, sort_keys=True) writes (issue 20:
    # built by polars expressions, the bytes of the per-building json.dumps it replaced)
    stored = site.query("SELECT rank, record FROM results")
    assert len(stored) == 3 * N_BUILDINGS
    for rank, rec in stored:
        assert json.dumps(json.loads(rec), sort_keys=True) == rec
        assert json.loads(rec)["rank"] == rank


# ---------------------------------------------------------------------------- a run killed mid-way


@pytest.mark.parametrize("stage", ["after_load", "after_screen", "before_publish"])
def test_killed_run_leaves_previous_outputs_and_a_consistent_database(simulated, tmp_path, stage):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", Q3_AS_OF).exit_code == 0
    before = tree_digest(site.root)
    # the new run reloads every file (--force) and replaces the quarter: the hardest case
    p = subprocess_run(
        ["run", "--config", str(site.config), "--as-of", Q3_AS_OF, "--force", "--quiet"],
        env_extra={"DDSCREEN_KILL_AT": stage},
    )
    assert p.returncode == -signal.SIGKILL, (p.returncode, p.stderr)
    assert {k: v for k, v in tree_digest(site.root).items() if not k.startswith(".")} == before
    runs = run_rows(site)
    # the dead run's row, not yet marked (recorded as publishing just before the rename)
    assert [s for _, _, s in runs] == ["ok", "publishing" if stage == "before_publish" else "running"]
    killed = runs[1][0]

    r = site.run("--as-of", Q3_AS_OF, "--force")
    assert r.exit_code == 0, r.stderr
    runs = dict((rid, s) for rid, _, s in run_rows(site))
    assert runs[killed] == "interrupted" and list(runs.values()).count("ok") == 2
    assert "running" not in runs.values()
    # the database agrees with itself and with the files
    for kind, table in (("buildings", "buildings"), ("readings", "readings"), ("weather", "weather_daily")):
        ((rows_loaded, sha),) = site.query(f"SELECT rows_loaded, sha256 FROM input_files WHERE kind = '{kind}'")
        assert site.query(f"SELECT count(*) FROM {table}")[0][0] == rows_loaded, kind
        assert sha == sha256_of(site.input(kind)), kind
    assert site.query("SELECT count(*) FROM results WHERE run_id NOT IN (SELECT run_id FROM runs)")[0][0] == 0
    newest = max((rid for rid, s in runs.items() if s == "ok"))
    assert site.query(f"SELECT count(*) FROM results WHERE run_id = '{newest}'")[0][0] == N_BUILDINGS
    # the published folder is the new run's; the dead run's temporary folder is gone, its log kept
    assert newest in (site.root / Q3 / "run.log").read_text()
    names = sorted(p.name for p in site.root.iterdir())
    assert not [n for n in names if n.startswith(".")], names
    assert [n for n in names if n.startswith(f"{Q3}.interrupted-")], names


# ---------------------------------------------------------------------------- two runs at once


def test_second_run_while_the_lock_is_held_exits_3_touching_nothing(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", Q3_AS_OF).exit_code == 0
    before = tree_digest(site.root)
    db_before = (sha256_of(site.db), site.db.stat().st_mtime_ns)
    lock = open(str(site.db) + ".lock", "a+")
    try:
        fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)  # as a running ddscreen holds it
        lock.write("pid 4242 since 2026-10-02T06:15:00")
        lock.flush()
        for as_of in (Q3_AS_OF, Q2_AS_OF):  # a rerun and a new quarter alike
            t0 = time.perf_counter()
            r = site.run("--as-of", as_of, "--force")
            elapsed = time.perf_counter() - t0
            assert r.exit_code == 3, r.stderr
            assert "another ddscreen run holds the lock" in r.stderr and "pid 4242" in r.stderr
            assert "nothing was changed" in r.stderr
            assert elapsed < 2.0  # "at once": no wait for the lock
    finally:
        fcntl.flock(lock, fcntl.LOCK_UN)
        lock.close()
    assert tree_digest(site.root) == before
    assert (sha256_of(site.db), site.db.stat().st_mtime_ns) == db_before
    assert site.run("--as-of", Q2_AS_OF).exit_code == 0  # released: the next run goes ahead


# ---------------------------------------------------------------------------- incremental loads


def test_only_a_changed_input_file_is_reloaded(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", Q2_AS_OF).exit_code == 0
    log_q2 = (site.root / Q2 / "run.log").read_text()
    for kind in ("buildings", "readings", "weather"):
        assert re.search(rf"{kind} \S+{kind}\.csv: loaded", log_q2), kind
    loaded_at = dict(site.query("SELECT kind, loaded_at FROM input_files"))
    # the bills file is updated: one quantity changes (first data row)
    lines = site.input("readings").read_text().splitlines(keepends=True)
    header = lines[0].rstrip("\n").split(",")
    cells = lines[1].rstrip("\n").split(",")
    q = header.index("quantity")
    bid, fuel, start = (cells[header.index(c)] for c in ("building_id", "fuel", "period_start"))
    new_q = round(float(cells[q]) * 1.5, 2)
    cells[q] = repr(new_q)
    lines[1] = ",".join(cells) + "\n"
    site.input("readings").write_text("".join(lines))

    assert site.run("--as-of", Q3_AS_OF).exit_code == 0
    log_q3 = (site.root / Q3 / "run.log").read_text()
    assert re.search(r"readings \S+readings\.csv: loaded", log_q3)
    assert re.search(r"buildings \S+buildings\.csv: unchanged", log_q3)
    assert re.search(r"weather \S+weather\.csv: unchanged", log_q3)
    after = dict(site.query("SELECT kind, loaded_at FROM input_files"))
    assert after["buildings"] == loaded_at["buildings"] and after["weather"] == loaded_at["weather"]
    assert after["readings"] > loaded_at["readings"]
    got = site.query(
        f"SELECT quantity FROM readings WHERE building_id = '{bid}' AND fuel = '{fuel}' "
        f"AND period_start = DATE '{start}'"
    )
    assert [round(g[0], 2) for g in got] == [new_q]
    summary = json.loads((site.root / Q3 / "summary.json").read_text())
    hashes = {i["kind"]: i["sha256"] for i in summary["inputs"]}
    assert hashes == {k: sha256_of(site.input(k)) for k in ("buildings", "readings", "weather")}


# ---------------------------------------------------------------------------- config errors


@pytest.mark.parametrize(
    "extra, key, expected",
    [
        ('[thresholds]\nz_review = "high"\n', r"[thresholds] z_review", "expected a number"),
        ("[output]\nkeep = 2.5\n", r"[output] keep", "expected a whole number"),
        ('[analysis]\nas_of = "2026-13-01"\n', r"[analysis] as_of", "expected a date YYYY-MM-DD"),
        ('[analysis]\nunits = "metric"\n', r"[analysis] units", "expected IP or SI"),
        ("[thresholds]\nz_reveiw = 2.0\n", r"unknown key [thresholds] z_reveiw", "expected one of band_ratio"),
    ],
)
def test_config_error_names_the_key_and_what_is_expected(simulated, tmp_path, extra, key, expected):
    site = Site(tmp_path, simulated)
    text = site.config.read_text()
    if extra.startswith("[output]"):  # the file has an [output] table already
        text = text.replace("[output]\n", extra)
    else:
        text += extra
    site.config.write_text(text)
    r = site.run("--as-of", Q3_AS_OF) if "as_of" not in extra else site.run()
    assert r.exit_code == 2
    assert key in r.stderr and expected in r.stderr, r.stderr
    assert not site.db.exists() and not site.root.exists()  # nothing written


def test_missing_input_file_is_exit_2_and_names_it(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    site.input("weather").unlink()
    r = site.run("--as-of", Q3_AS_OF)
    assert r.exit_code == 2 and "weather.csv: file not found" in r.stderr


# ---------------------------------------------------------------------------- status and history


def test_status_and_history_list_the_runs_and_the_changes(simulated, tmp_path):
    site = Site(tmp_path, simulated, sheets=True, extra="workers = 1\n")
    assert site.run("--as-of", Q2_AS_OF).exit_code == 0
    r3 = site.run("--as-of", Q3_AS_OF)
    assert r3.exit_code == 0, r3.stderr
    st = cli(["status", "--config", str(site.config)])
    assert st.exit_code == 0, st.stderr
    lines = st.stdout.splitlines()
    assert len(lines) == 2
    assert Q3 in lines[0] and Q2 in lines[1]  # newest first
    assert all(" ok " in ln for ln in lines)
    assert str(site.root / Q3) in lines[0] and str(site.root / Q2) in lines[1]
    assert "window 2025-10-01..2026-09-30" in lines[0]  # by hand (Q3 window)

    h = cli(["history", "--db", str(site.db)])
    assert h.exit_code == 0, h.stderr
    # the changes, worked out independently from the two ranking.csv files
    old = pl.read_csv(site.root / Q2 / "ranking.csv", schema_overrides={"flags": pl.String})
    new = pl.read_csv(site.root / Q3 / "ranking.csv", schema_overrides={"flags": pl.String})
    j = new.join(old, on="building_id", how="full", coalesce=True, suffix="_old")

    def fl(x):
        return set((x or "").split(";")) - {""}

    changed = sorted(
        r["building_id"]
        for r in j.iter_rows(named=True)
        if r["rank"] != r["rank_old"] or fl(r["flags"]) != fl(r["flags_old"])
    )
    assert f"{len(changed)} building(s) changed rank or flags:" in h.stdout
    listed = sorted(re.findall(r"^  (\S+): ", h.stdout, flags=re.M))
    assert listed == changed
    for r in j.iter_rows(named=True):
        if r["rank"] is not None and r["rank_old"] is not None and r["rank"] < r["rank_old"]:
            assert f"  {r['building_id']}: up {r['rank_old'] - r['rank']}" in h.stdout

    # one run id: summary.json, a sheet, ranking.pdf, stderr, status and history all show the same
    # one, and history takes it (the execution id stays in the database and run.log)
    import pdfplumber

    ids = {q: json.loads((site.root / q / "summary.json").read_text())["run_id"] for q in (Q2, Q3)}
    assert ids[Q3].startswith(Q3 + "-") and ids[Q2].startswith(Q2 + "-")
    sheet = sorted((site.root / Q3 / "sheets").glob("*.pdf"))[0]
    with pdfplumber.open(sheet) as pdf:
        assert ids[Q3] in pdf.pages[0].extract_text()
    with pdfplumber.open(site.root / Q3 / "ranking.pdf") as pdf:
        assert ids[Q3] in pdf.pages[0].extract_text()
    assert ids[Q3] in r3.stderr
    assert lines[0].startswith(ids[Q3] + " ") and lines[1].startswith(ids[Q2] + " ")
    executions = [rid for rid, _, _ in run_rows(site)]
    assert not any(e in st.stdout or e in r3.stderr for e in executions)
    assert executions[1] in (site.root / Q3 / "run.log").read_text()
    h2 = cli(["history", "--db", str(site.db), "--older", ids[Q2], "--newer", ids[Q3]])
    assert h2.exit_code == 0, h2.stderr
    assert h2.stdout == h.stdout
    assert cli(["history", "--db", str(site.db), "--older", executions[0], "--newer", ids[Q3]]).stdout == h.stdout
    bad = cli(["history", "--db", str(site.db), "--older", "2026-Q1-0000000000", "--newer", ids[Q3]])
    assert bad.exit_code == 2 and "no run '2026-Q1-0000000000'" in bad.stderr


def test_status_without_a_database_says_so(tmp_path):
    r = cli(["status", "--db", str(tmp_path / "none.duckdb")])
    assert r.exit_code == 1 and "no database here yet" in r.stderr


def test_next_run_tidies_what_dead_runs_left_in_the_output_root(simulated, tmp_path):
    """A death between the two renames of publishing leaves ``.<label>.old-*`` and no ``<label>``:
    the next run (of any quarter) puts the earlier outputs back; a dead run's temporary folder is
    removed and its log kept."""
    site = Site(tmp_path, simulated)
    assert site.run("--as-of", Q3_AS_OF).exit_code == 0
    q3 = tree_digest(site.root / Q3)
    os.replace(site.root / Q3, site.root / f".{Q3}.old-dead00")  # as _publish leaves it mid-way
    stale = site.root / f".{Q2}.tmp-dead01"
    stale.mkdir()
    (stale / "run.log").write_text("2026-07-02 06:15:00,000 INFO run 2026-Q2-x: window ...\n")
    (stale / "ranking.csv").write_text("half-written\n")
    assert site.run("--as-of", Q2_AS_OF).exit_code == 0
    assert tree_digest(site.root / Q3) == q3  # earlier outputs restored
    names = sorted(p.name for p in site.root.iterdir())
    assert not [n for n in names if n.startswith(".")], names
    logs = [n for n in names if n.startswith(f"{Q2}.interrupted-")]
    assert len(logs) == 1 and "run 2026-Q2-x" in (site.root / logs[0]).read_text()
    assert os.readlink(site.root / "latest") == Q3  # the newest quarter, not the one run last


# ---------------------------------------------------------------------------- stored records (issue 20)


def _dumps_per_row(frame: pl.DataFrame) -> list[str]:
    """The reference: what the store held before, one json.dumps per building."""
    return [json.dumps(row, default=str, sort_keys=True) for row in frame.to_dicts()]


def test_json_records_are_the_bytes_of_json_dumps_for_every_kind_of_value():
    from screening.runs.record import json_records

    tiny = [1e-05, -2.5e-07, 1.5e-09, 1e-10, 5e-324, 9.99e-05, -1.0000000000000001e-05]
    frame = pl.DataFrame(
        {
            "z_float": [0.1, float("nan"), float("inf"), float("-inf"), -0.0, None, 1e16, 1.2345678901234568e17]
            + tiny
            + [0.0001, 1234567.0, 0.30000000000000004],
            "a_text": ['say "hi"', "back\\slash", "tab\tnew\nline\r", "\x01\x1f\x7f", "é × – °", "😀", None, ""]
            + ["plain"] * 10,
            "m_list": [["a", None], [], None, ["é", 'q"'], ["x"]] + [["y", "z"]] * 13,
            "b_bool": [True, False, None] + [True] * 15,
            "i_int": [0, -1, None, 2**62] + [7] * 14,
            "u_uint": pl.Series([1, 2, 3] + [4] * 15, dtype=pl.UInt32),
            "f_32": pl.Series([0.1, None] + [1.5] * 16, dtype=pl.Float32),
            "d_date": [dt.date(2026, 9, 30), None, dt.date(1, 1, 1)] + [dt.date(2025, 10, 1)] * 15,
            "t_stamp": [dt.datetime(2026, 1, 2, 3, 4, 5), None] + [dt.datetime(2026, 1, 1)] * 16,  # no rule: json.dumps
            "c_cat": pl.Series(["x", None] + ["y"] * 16, dtype=pl.Categorical),
            "e_empty": pl.Series([None] * 18, dtype=pl.Null),
            'k "key"': [1] * 18,
        }
    )
    assert json_records(frame).to_list() == _dumps_per_row(frame)


def test_json_records_write_floats_as_repr():
    """Python's repr (the shortest round-trip text, exponent at or below 1e-5 and from 1e16) for floats
    of every magnitude: what json.dumps writes."""
    import numpy as np

    from screening.runs.record import json_records

    rng = np.random.default_rng(20)  # seeded: the same values every run
    x = np.concatenate(
        [10.0 ** rng.uniform(-320, 308, 20000) * rng.choice([-1.0, 1.0], 20000), rng.standard_normal(2000)]
    )
    frame = pl.DataFrame({"x": x})
    assert json_records(frame).to_list() == _dumps_per_row(frame)
