"""Signals and kills (issue 18, items 9 and 10): SIGINT and SIGTERM end a run with one line, the
documented exit code (130, 143), no temporary folder, earlier outputs byte for byte and the run
recorded as ``interrupted``; a second signal does not cut the clean-up short; no helper process
of the sheet renderer outlives the run, not even after SIGKILL.

Every case is a real ``python -m screening run`` subprocess in a session of its own (so its
process group holds the run and every helper it starts) and real signals sent with ``os.kill``.
The test hook ``DDSCREEN_PAUSE_AT=<point>:<seconds>`` (screening/interrupts.py) holds the run at a
named point and ``DDSCREEN_PAUSE_MARK`` names a file it writes to when it gets there, so each
signal arrives at a known point without guessing times: ``after_load`` (the inputs were just
loaded), ``after_screen`` (screened, nothing written yet), ``render_chunk`` (inside the sheet
renderer, once in the main process's render thread and once in a pool worker) and ``cleanup``
(the clean-up after the first signal). A pause that a signal cuts short costs nothing; the
30-second pauses only bound a run that would ignore the signal.

The portfolio is the simulator's (``sample_portfolio/simulate.py``, 12 buildings, seed 5, as in
test_runs.py); with the default 2 workers its 12 sheets are 2 chunks of 6, one rendered by a
pool worker started through the fork server. Waiting loops poll with a deadline that only
guards against a hang; nothing asserts how long anything took.
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import duckdb
import pytest

from typer.testing import CliRunner

from screening.cli import app
from tests.conftest import simulator, tree_digest

REPO = Path(__file__).resolve().parents[1]
Q3_AS_OF, Q3 = "2026-10-15", "2026-Q3"  # by hand: window 2025-10-01..2026-09-30 (see test_runs.py)
HANG_GUARD_S = 60.0  # a deadline against hanging, not a timing assertion
NOTHING_PUBLISHED = "nothing was published, earlier outputs are untouched"


@pytest.fixture(scope="module")
def simulated(tmp_path_factory) -> Path:
    sim = simulator()
    frames = sim.simulate_portfolio(12, seed=5, start=dt.date(2023, 10, 1), years=3)
    folder = tmp_path_factory.mktemp("portfolio")
    sim.write_portfolio(frames, folder)
    return folder


class Site:
    """A screening folder: inputs, ``screening.toml`` (sheets on), database, ``out/``; one
    successful run of Q3 without sheets already published (the earlier outputs)."""

    def __init__(self, folder: Path, source: Path):
        self.folder = folder
        (folder / "in").mkdir(parents=True)
        for kind in ("buildings", "readings", "weather"):
            shutil.copy(source / f"{kind}.csv", folder / "in" / f"{kind}.csv")
        self.config = folder / "screening.toml"
        self.db = folder / "screening.duckdb"
        self.root = folder / "out"
        self.mark = folder / "pause.mark"
        self.config.write_text(
            '[inputs]\nbuildings = "in/buildings.csv"\nreadings = "in/readings.csv"\nweather = "in/weather.csv"\n'
            '[store]\ndatabase = "screening.duckdb"\n[output]\nroot = "out"\nsheets = true\n',
            encoding="utf-8",
        )
        r = CliRunner().invoke(app, self.args("--no-sheets"), catch_exceptions=False)
        assert r.exit_code == 0, r.stderr
        self.before = tree_digest(self.root)

    def args(self, *more: str) -> list[str]:
        return ["run", "--config", str(self.config), "--as-of", Q3_AS_OF, "--force", "--quiet", *more]

    def start(self, pause: str) -> subprocess.Popen:
        """The run of Q3 again (--force: it would replace the published folder), held at ``pause``."""
        env = dict(os.environ, PYTHONIOENCODING="utf-8", DDSCREEN_PAUSE_AT=pause, DDSCREEN_PAUSE_MARK=str(self.mark))
        # output to files, not pipes: a helper process left alive would hold a pipe open
        self.out_f = open(self.folder / "stdout.txt", "w+", encoding="utf-8")
        self.err_f = open(self.folder / "stderr.txt", "w+", encoding="utf-8")
        return subprocess.Popen(
            [sys.executable, "-m", "screening", *self.args()],
            stdout=self.out_f,
            stderr=self.err_f,
            env=env,
            start_new_session=True,
        )

    def wait_mark(self, proc: subprocess.Popen, point: str, count: int = 1) -> list[int]:
        """Wait until ``count`` pauses at ``point`` have begun; returns the pausing pids."""
        deadline = time.monotonic() + HANG_GUARD_S
        while True:
            pids = [
                int(ln.split()[1])
                for ln in (self.mark.read_text().splitlines() if self.mark.exists() else [])
                if ln.split()[0] == point
            ]
            if len(pids) >= count:
                return pids
            assert proc.poll() is None, f"the run ended ({proc.returncode}) before reaching {point}"
            assert time.monotonic() < deadline, f"hang guard: {point} not reached"
            time.sleep(0.05)

    def finish(self, proc: subprocess.Popen) -> tuple[int, str, str]:
        rc = proc.wait(timeout=HANG_GUARD_S)
        self.out_f.seek(0)
        self.err_f.seek(0)
        return rc, self.out_f.read(), self.err_f.read()

    def runs(self) -> list[tuple]:
        con = duckdb.connect(str(self.db), read_only=True)
        try:
            return con.execute("SELECT run_id, status, message FROM runs ORDER BY started_at, run_id").fetchall()
        finally:
            con.close()


def live_group(pgid: int) -> dict[int, str]:
    """Processes of process group ``pgid`` that are not zombies (from /proc): pid -> command line."""
    out = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            stat = Path(f"/proc/{d}/stat").read_text()
            cmd = Path(f"/proc/{d}/cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
        except OSError:
            continue  # ended meanwhile
        fields = stat.rsplit(")", 1)[1].split()  # after "(comm)": state, ppid, pgrp, ...
        if int(fields[2]) == pgid and fields[0] != "Z":
            out[int(d)] = cmd[:120]
    return out


def wait_group_gone(pgid: int) -> dict[int, str]:
    """Wait (hang guard only) until no process of the group is alive; returns what is left."""
    deadline = time.monotonic() + 20.0
    while (left := live_group(pgid)) and time.monotonic() < deadline:
        time.sleep(0.1)
    return left


def files_under(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*")) if folder.exists() else []


def check_interrupted(site: Site, proc: subprocess.Popen, signum: int) -> None:
    """Everything a stopped run must leave behind (item 10)."""
    rc, out, err = site.finish(proc)
    name = {signal.SIGINT: "SIGINT", signal.SIGTERM: "SIGTERM"}[signum]
    assert rc == {signal.SIGINT: 130, signal.SIGTERM: 143}[signum], (rc, err)  # 128 + signal number
    assert err.splitlines() == [f"ddscreen: error: interrupted by {name}; {NOTHING_PUBLISHED}"], err
    assert out == ""
    assert wait_group_gone(proc.pid) == {}  # no helper process outlives the run
    names = sorted(p.name for p in site.root.iterdir())
    assert not [n for n in names if n.startswith(".")], names  # no temporary folder left
    logs = [n for n in names if n.startswith(f"{Q3}.interrupted-") and n.endswith(".log")]
    assert len(logs) == 1, names  # the stopped run's log, kept
    runs = site.runs()
    assert [s for _, s, _ in runs] == ["ok", "interrupted"]
    assert runs[1][2] == f"interrupted by {name}; {NOTHING_PUBLISHED}"
    assert runs[1][0] in (site.root / logs[0]).read_text()
    after = {k: v for k, v in tree_digest(site.root).items() if k not in logs}
    assert after == site.before  # earlier outputs byte for byte


# ---------------------------------------------------------------------------- one signal at a stage


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
@pytest.mark.parametrize("point", ["after_load", "after_screen"])
def test_signal_while_loading_or_screening(simulated, tmp_path, point, signum):
    site = Site(tmp_path, simulated)
    proc = site.start(f"{point}:30")
    site.wait_mark(proc, point)
    os.kill(proc.pid, signum)
    check_interrupted(site, proc, signum)


def test_sigterm_just_before_the_rename_publishes_nothing(simulated, tmp_path):
    """The results and the files are recorded ('publishing'), the folder is not yet in place."""
    site = Site(tmp_path, simulated)
    proc = site.start("before_publish:30")
    site.wait_mark(proc, "before_publish")
    os.kill(proc.pid, signal.SIGTERM)
    check_interrupted(site, proc, signal.SIGTERM)


def test_sigterm_just_after_the_rename_leaves_the_new_outputs_recorded_ok(simulated, tmp_path):
    """The folder is in place before it was marked ok: the run is ok, and the line says so."""
    site = Site(tmp_path, simulated)
    proc = site.start("after_publish:30")
    site.wait_mark(proc, "after_publish")
    os.kill(proc.pid, signal.SIGTERM)
    rc, out, err = site.finish(proc)
    assert rc == 143, err
    assert err.splitlines() == [
        f"ddscreen: error: interrupted by SIGTERM; the outputs were already moved into place ({site.root / Q3})"
    ], err
    runs = site.runs()
    assert [s for _, s, _ in runs] == ["ok", "ok"]
    assert runs[1][0] in (site.root / Q3 / "run.log").read_text()  # the new run's folder
    assert (site.root / Q3 / "sheets").is_dir()
    assert not [p.name for p in site.root.iterdir() if p.name.startswith(".")]
    assert wait_group_gone(proc.pid) == {}


@pytest.mark.slow
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_signal_while_rendering_sheets(simulated, tmp_path, signum):
    """Both renderers are inside a chunk (the main process's thread and a pool worker): the run
    stops them, removes its folder and no PDF appears afterwards."""
    site = Site(tmp_path, simulated)
    proc = site.start("render_chunk:30")
    pids = site.wait_mark(proc, "render_chunk", 2)
    assert proc.pid in pids and len(set(pids)) == 2  # one pause is in a worker process
    os.kill(proc.pid, signum)
    check_interrupted(site, proc, signum)
    assert not list(site.root.rglob("sheets"))  # no sheet anywhere (the earlier run had none)


@pytest.mark.slow
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_signal_to_the_whole_process_group_while_rendering(simulated, tmp_path, signum):
    """Ctrl-C in a terminal (and a service manager's stop) signals every process of the group:
    the fork server and the workers too. Still one line: no helper prints a traceback."""
    site = Site(tmp_path, simulated)
    proc = site.start("render_chunk:30")
    site.wait_mark(proc, "render_chunk", 2)
    os.killpg(proc.pid, signum)
    check_interrupted(site, proc, signum)
    assert not list(site.root.rglob("sheets"))


@pytest.mark.slow
def test_sigint_while_the_render_pool_starts(simulated, tmp_path):
    """SIGINT as soon as the main process's render thread begins, while the pool and its fork
    server are still starting up."""
    site = Site(tmp_path, simulated)
    proc = site.start("render_chunk:30")
    site.wait_mark(proc, "render_chunk", 1)
    os.kill(proc.pid, signal.SIGINT)
    check_interrupted(site, proc, signal.SIGINT)


# ---------------------------------------------------------------------------- a second signal


@pytest.mark.parametrize(
    "first, second",
    [(signal.SIGTERM, signal.SIGINT), (signal.SIGINT, signal.SIGTERM), (signal.SIGTERM, signal.SIGTERM)],
    ids=["TERM-then-INT", "INT-then-TERM", "TERM-then-TERM"],
)
def test_second_signal_during_clean_up_is_ignored(simulated, tmp_path, first, second):
    """The clean-up pauses 2 s (test hook); two more signals arrive during it. It still finishes:
    the first signal's line and exit code, no temporary folder, the run recorded as interrupted."""
    site = Site(tmp_path, simulated)
    proc = site.start("after_screen:30,cleanup:2")
    site.wait_mark(proc, "after_screen")
    os.kill(proc.pid, first)
    site.wait_mark(proc, "cleanup")
    os.kill(proc.pid, second)
    os.kill(proc.pid, second)
    check_interrupted(site, proc, first)


@pytest.mark.slow
def test_second_signal_while_the_renderers_are_stopped(simulated, tmp_path):
    site = Site(tmp_path, simulated)
    proc = site.start("render_chunk:30,cleanup:2")
    site.wait_mark(proc, "render_chunk", 2)
    os.kill(proc.pid, signal.SIGTERM)
    site.wait_mark(proc, "cleanup")
    os.kill(proc.pid, signal.SIGINT)
    check_interrupted(site, proc, signal.SIGTERM)
    assert not list(site.root.rglob("sheets"))  # no sheet anywhere (the earlier run had none)


# ---------------------------------------------------------------------------- SIGKILL: no orphans


@pytest.mark.slow
def test_sigkill_while_rendering_leaves_no_helper_process_and_no_late_file(simulated, tmp_path):
    """Item 9: killed outright while a pool worker is inside a chunk (held there 6 s by the hook;
    before the fix it then rendered its chunk into the dead run's folder and stayed alive). Every
    process of the run's group ends, and nothing is written into the temporary folder afterwards."""
    site = Site(tmp_path, simulated)
    proc = site.start("render_chunk:6")
    pids = site.wait_mark(proc, "render_chunk", 2)
    helpers = live_group(proc.pid)
    worker = next(p for p in pids if p != proc.pid)
    assert worker in helpers and len(helpers) >= 3, helpers  # main, fork server, worker (+ tracker)
    os.kill(proc.pid, signal.SIGKILL)
    rc, _, _ = site.finish(proc)
    assert rc == -signal.SIGKILL
    assert wait_group_gone(proc.pid) == {}
    tmp = [p for p in site.root.iterdir() if p.name.startswith(f".{Q3}.tmp-")]
    assert len(tmp) == 1  # the dead run's folder (the next run tidies it)
    listing = files_under(tmp[0])
    assert not [f for f in listing if f.endswith(".pdf")], listing
    # the worker's pause would have ended by now and its chunk taken a moment more to write
    time.sleep(6.5)
    assert files_under(tmp[0]) == listing
    assert {k: v for k, v in tree_digest(site.root).items() if not k.startswith(".")} == site.before


# ---------------------------------------------------------------------------- the library call


def test_library_run_raises_interrupted_and_restores_the_handlers(simulated, tmp_path, monkeypatch):
    """``runner.run`` in this process: SIGTERM raises ``errors.Interrupted`` (not SystemExit), the
    clean-up is done, and the caller's handlers are back afterwards."""
    from screening import runner
    from screening.errors import Interrupted

    site = Site(tmp_path, simulated)
    monkeypatch.setenv("DDSCREEN_PAUSE_AT", "after_screen:30")
    monkeypatch.setenv("DDSCREEN_PAUSE_MARK", str(site.mark))
    seen = []
    old_term = signal.signal(signal.SIGTERM, lambda s, f: seen.append(s))  # the caller's own handler
    old_int = signal.getsignal(signal.SIGINT)

    def sender():
        deadline = time.monotonic() + HANG_GUARD_S
        while not site.mark.exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        os.kill(os.getpid(), signal.SIGTERM)

    t = threading.Thread(target=sender, daemon=True)
    t.start()
    try:
        with pytest.raises(Interrupted) as info:
            runner.run(
                config_path=str(site.config),
                overrides={"analysis": {"as_of": Q3_AS_OF}, "output": {"sheets": False}},
                force=True,
                quiet=True,
            )
        t.join()
        assert info.value.exit_code == 143 and str(info.value) == f"interrupted by SIGTERM; {NOTHING_PUBLISHED}"
        assert signal.getsignal(signal.SIGINT) is old_int
        os.kill(os.getpid(), signal.SIGTERM)  # the caller's handler is back
        assert seen == [signal.SIGTERM]
    finally:
        signal.signal(signal.SIGTERM, old_term)
    assert [s for _, s, _ in site.runs()] == ["ok", "interrupted"]
    assert not [p.name for p in site.root.iterdir() if p.name.startswith(".")]


def test_signal_outside_a_commands_own_handling_is_one_line(monkeypatch, capsys):
    """``cli.main``: a signal that reaches typer outside a command's ``try`` (while the summary is
    printed, while options are parsed) is turned by typer into a silent exit 130; main() prints
    the one line and uses the signal's own code. Called in this process, main() restores the
    handlers afterwards (only the program itself ignores signals while it exits)."""
    import screening.cli as climod
    from screening import interrupts

    def app_like_typer():
        try:
            os.kill(os.getpid(), signal.SIGTERM)
            for _ in range(100):
                time.sleep(0.01)
        except KeyboardInterrupt:
            sys.exit(130)  # what typer does with a KeyboardInterrupt

    old = {s: signal.getsignal(s) for s in interrupts.SIGNALS}
    monkeypatch.setattr(climod, "app", app_like_typer)
    with pytest.raises(SystemExit) as info:
        climod.main()
    assert info.value.code == 143
    assert capsys.readouterr().err.splitlines() == ["ddscreen: error: interrupted by SIGTERM"]
    assert {s: signal.getsignal(s) for s in interrupts.SIGNALS} == old


def test_exit_codes_and_ignored_signals():
    """130 and 143 are 128 + the signal number; a signal ignored when the context is entered (a
    background job's SIGINT, nohup) stays ignored, and the old handlers come back on leaving."""
    from screening import interrupts
    from screening.errors import EXIT_SIGINT, EXIT_SIGTERM, Interrupted

    assert (EXIT_SIGINT, EXIT_SIGTERM) == (128 + signal.SIGINT, 128 + signal.SIGTERM) == (130, 143)
    assert Interrupted(signal.SIGINT).exit_code == 130 and Interrupted(signal.SIGTERM).exit_code == 143
    assert not isinstance(Interrupted(signal.SIGTERM), Exception)  # passes every `except Exception`
    old_int = signal.signal(signal.SIGINT, signal.SIG_IGN)
    old_term = signal.getsignal(signal.SIGTERM)
    try:
        with interrupts.stop_on_signals():
            assert signal.getsignal(signal.SIGINT) is signal.SIG_IGN
            assert signal.getsignal(signal.SIGTERM) is interrupts._handler
            with pytest.raises(Interrupted) as info:
                os.kill(os.getpid(), signal.SIGTERM)
                for _ in range(100):  # the handler runs between bytecodes
                    time.sleep(0.01)
            assert info.value.signum == signal.SIGTERM and interrupts.stopped() == signal.SIGTERM
            os.kill(os.getpid(), signal.SIGTERM)  # a second one: counted, not raised
            time.sleep(0.05)
            assert interrupts.ignored_signals() == 1
        assert signal.getsignal(signal.SIGINT) is signal.SIG_IGN
        assert signal.getsignal(signal.SIGTERM) is old_term
        assert interrupts.stopped() is None
    finally:
        signal.signal(signal.SIGINT, old_int)
