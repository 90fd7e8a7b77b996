"""Faults around a run (issue 9 "Faults"): a full disk, a read-only output folder, a database
locked by another process or corrupt, an unexpected exception.

Each test first makes one successful run of the fixture portfolio (tests/conftest.py), then
provokes the fault on a second run and checks: the documented exit code (1, "run failed"), one
clear ``ddscreen:`` line on stderr and no traceback, and the earlier outputs byte for byte as
they were (no temporary folder left beside them). Tests run as root, so permissions cannot
stop writes: ENOSPC / EROFS / EACCES are raised by monkeypatched calls (errno values of
POSIX; Linux errno.h).
"""

from __future__ import annotations

import errno
import os
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

import polars as pl
import pytest


from screening import cli as climod
from screening import pipeline

from .conftest import cli, tree_digest, write_portfolio


def _no_space(*a, **k):
    """A write that finds the disk full ("No space left on device")."""
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


class Site:
    """The fixture portfolio, its output folder and database, after one good run."""

    def __init__(self, root: Path):
        self.root = root
        self.p = write_portfolio(root / "in")
        self.out = root / "out" / "q"
        self.db = root / "screening.duckdb"
        res = self.run()
        assert res.exit_code == 0, res.stderr
        self.before = tree_digest(self.out)
        assert {"ranking.csv", "rejects.csv", "summary.json", "ranking.pdf"} <= set(self.before)

    def run(self, *more):
        # --force: the faulty run replaces the earlier outputs (without it the run refuses first)
        return cli(self.p.args(self.out, self.db, "--no-sheets", "--force", *more))

    def assert_intact(self):
        assert tree_digest(self.out) == self.before
        left = [p.name for p in self.out.parent.iterdir() if p.name != "q" and not p.name.endswith(".log")]
        assert left == [], left


@pytest.fixture
def site(tmp_path):
    return Site(tmp_path)


def _one_error_line(res, pattern: str) -> str:
    text = res.stderr + res.stdout
    assert "Traceback" not in text
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("ddscreen: ")]
    errors = [ln for ln in lines if ln.startswith(("ddscreen: error: ", "ddscreen: internal error: "))]
    assert len(errors) == 1, res.stderr
    assert pattern in errors[0], errors[0]
    return errors[0]


# ----------------------------------------------------------------------------- full disk


def test_disk_full_while_writing_the_csv_files(site, monkeypatch):
    monkeypatch.setattr(pl.DataFrame, "write_csv", _no_space)
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, "No space left on device")
    site.assert_intact()


def test_disk_full_while_writing_summary_json(site, monkeypatch):
    real = Path.write_text

    def full(self, *a, **k):
        if self.name == "summary.json":
            _no_space()
        return real(self, *a, **k)

    monkeypatch.setattr(Path, "write_text", full)
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, "No space left on device")
    site.assert_intact()


def test_disk_full_is_reported_as_an_output_error_not_a_crash(site, monkeypatch):
    monkeypatch.setattr(pl.DataFrame, "write_csv", _no_space)
    res = site.run()
    line = _one_error_line(res, "No space left on device")
    assert line.startswith("ddscreen: error: ") and "internal error" not in line
    assert "earlier outputs" in line


# ----------------------------------------------------------------------------- read-only output folder


def test_output_folder_not_writable_access_check(site, monkeypatch):
    """``os.access`` says the folder is not writable (a read-only mount): exit 1 before any work."""
    real = os.access
    parent = str(site.out.parent)
    monkeypatch.setattr(os, "access", lambda p, mode, *a, **k: False if str(p) == parent else real(p, mode, *a, **k))
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, f"{parent}: output folder is not writable; earlier outputs are untouched")
    site.assert_intact()


def test_output_folder_refuses_the_temporary_folder(site, monkeypatch):
    """The folder passes ``os.access`` but creating the temporary folder fails (EACCES)."""

    def denied(*a, **k):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(tempfile, "mkdtemp", denied)
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, "cannot write there (Permission denied); earlier outputs untouched")
    site.assert_intact()


def _fail_renames(monkeypatch, site, err: int, *, only_second: bool = False):
    """Renames in the output root fail with ``err`` (all of them, or only the new folder's move)."""
    real = os.replace

    def fake(src, dst, *a, **k):
        src = Path(src)
        if src.parent == site.out.parent and (src.name.startswith(".q.tmp-") or not only_second):
            raise OSError(err, os.strerror(err))
        return real(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", fake)


def test_read_only_file_system_when_publishing(site, monkeypatch):
    """EROFS on the final renames: the new outputs are not put in place; the old ones stay."""
    _fail_renames(monkeypatch, site, errno.EROFS)
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, "cannot move the outputs into place (Read-only file system)")
    site.assert_intact()


def test_failed_second_rename_puts_the_earlier_outputs_back(site, monkeypatch):
    _fail_renames(monkeypatch, site, errno.ENOSPC, only_second=True)
    res = site.run()
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, "cannot move the outputs into place")
    site.assert_intact()


# ----------------------------------------------------------------------------- the database

HOLDER = textwrap.dedent("""
    import sys, time, duckdb
    con = duckdb.connect(sys.argv[1])          # a writer holds DuckDB's own file lock
    con.execute("SELECT 1").fetchall()
    print("ready", flush=True)
    sys.stdin.readline()                       # until the test closes stdin
    con.close()
""")


def test_database_locked_by_another_process(site):
    proc = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(site.db)], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert proc.stdout.readline().strip() == "ready"
        res = site.run("--force")
        assert res.exit_code == 1, res.stderr
        _one_error_line(res, f"{site.db}: database is in use by another program")
        site.assert_intact()
    finally:
        proc.stdin.close()
        proc.wait(timeout=30)
    assert site.run("--force").exit_code == 0  # released: the next run goes ahead


@pytest.mark.parametrize("damage", ["random", "truncated", "zeroed_header"])
def test_corrupt_database_file(site, damage):
    raw = site.db.read_bytes()
    if damage == "random":
        data = os.urandom(len(raw) or 4096)  # random bytes are fine here: any content must be refused
    elif damage == "truncated":
        data = raw[: len(raw) // 3]
    else:
        data = bytes(8192) + raw[8192:]
    site.db.write_bytes(data)
    res = site.run("--force")
    assert res.exit_code == 1, res.stderr
    _one_error_line(res, f"{site.db}")
    assert "internal error" not in res.stderr, res.stderr
    site.assert_intact()
    assert site.db.read_bytes() == data  # the damaged file is left for the user to inspect


# ----------------------------------------------------------------------------- unexpected exceptions


def test_unexpected_exception_prints_one_line_and_logs_the_traceback(site, monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("planted failure in screen_frames")

    monkeypatch.setattr(pipeline, "screen_frames", boom)
    res = site.run("--force")
    assert res.exit_code == 1
    line = _one_error_line(res, "internal error: RuntimeError: planted failure in screen_frames; details in ")
    log = Path(line.split("; details in ", 1)[1])
    assert log.parent == Path(tempfile.gettempdir()) and log.name.startswith("ddscreen-crash-")
    text = log.read_text(encoding="utf-8")
    assert text.startswith("Traceback (most recent call last):")
    assert "in boom" in text and "RuntimeError: planted failure in screen_frames" in text
    log.unlink()
    site.assert_intact()


def test_main_catches_what_escapes_the_app(monkeypatch, capsys):
    """``cli.main`` is the last line of defence: even an exception outside a command is one line."""

    def broken_app():
        raise KeyError("outside any command")

    monkeypatch.setattr(climod, "app", broken_app)
    with pytest.raises(SystemExit) as ei:
        climod.main()
    assert ei.value.code == 1
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 1 and err[0].startswith(
        "ddscreen: internal error: KeyError: 'outside any command'; details in "
    ), err
    log = Path(err[0].split("; details in ", 1)[1])
    assert "KeyError: 'outside any command'" in log.read_text(encoding="utf-8")
    log.unlink()
