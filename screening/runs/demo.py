"""``ddscreen demo``: the packaged sample portfolio screened into a folder of the user's choosing,
replacing only what its previous run wrote."""

from __future__ import annotations

import datetime as _dt
import json
import os
import shutil
from pathlib import Path

import duckdb

from .. import config as cfgmod, published
from ..errors import ConfigError, StoreError
from ..resources import sample_portfolio_dir
from ..window import quarter_label
from .lock import read_store
from .phases import RunResult, run


def demo(
    out_dir: str = "ddscreen-demo", *, as_of: str = "2026-10-15", sheets: bool = True, progress: bool = False
) -> RunResult:
    """Screen the packaged sample portfolio into ``out_dir`` (its own database inside).

    The sample's events file (audits, measures) goes with it. The quarter two before is screened first,
    without sheets, into ``out_dir/<its quarter>/``: the audits of the events acted on its list, so the
    list's hit rate and ``ddscreen history`` have an earlier run to refer to.
    """
    src = sample_portfolio_dir()
    out = Path(out_dir)
    overrides = {
        "inputs": {
            "buildings": str(src / "buildings.csv"),
            "readings": str(src / "readings.csv"),
            "weather": str(src / "weather.csv"),
            "events": str(src / "events.csv"),
        },
        "store": {"database": str(out / "screening.duckdb")},
        "analysis": {"as_of": as_of},
        "output": {"sheets": sheets},
    }
    out.mkdir(parents=True, exist_ok=True)
    return _demo_run(overrides, out, progress=progress)


def _demo_earlier(overrides: dict, out: Path, *, progress: bool) -> None:
    """The demo's earlier run: two quarters before ``as_of``, no sheets, into ``out/<its quarter label>``."""
    as_of = _dt.date.fromisoformat(overrides["analysis"]["as_of"])
    m = as_of.month - 6
    earlier = _dt.date(as_of.year + (m - 1) // 12, (m - 1) % 12 + 1, min(as_of.day, 28))
    ov = {
        **overrides,
        "analysis": {**overrides["analysis"], "as_of": str(earlier)},
        "output": {**overrides["output"], "sheets": False},
    }
    _, window = cfgmod.run_window(cfgmod.load(None, ov))
    run(overrides=ov, out_dir=str(out / quarter_label(window[1])), force=True, quiet=True, progress=progress)


# Every top-level name a run writes into its output folder (tests/test_unattended.py checks
# that a run writes nothing else): the demo, which writes into a folder of its own choosing,
# replaces only these, and only when they are what its previous run wrote.
OUTPUT_NAMES = (
    "assumptions.csv",
    "audit_plan.csv",
    "data_issues.csv",
    "index.html",
    "ranking.csv",
    "ranking.pdf",
    "ranking.xlsx",
    "rejects.csv",
    "run.log",
    "savings.csv",
    "sheets",
    "sheets_index.csv",
    "summary.json",
)


def _demo_run(overrides: dict, out: Path, *, progress: bool = False) -> RunResult:
    """Run into ``out`` directly: files are replaced one by one after a complete run in a temp folder.

    An output name in ``out`` that the previous demo run did not write (or that was changed
    since) stops the demo before anything is written (exit 2).
    """
    tmp_out = out / ".run"
    foreign = _demo_foreign(out, Path(overrides["store"]["database"]), tmp_out)
    if foreign:
        raise ConfigError(
            f"{out}: holds {', '.join(foreign[:3])}{' and more' if len(foreign) > 3 else ''}, "
            "which ddscreen demo did not write (or which were changed since); nothing was changed "
            "(choose another --out folder)"
        )
    if tmp_out.exists():
        shutil.rmtree(tmp_out)  # what a killed demo left
    if overrides["inputs"].get("events"):
        _demo_earlier(overrides, out, progress=progress)
    res = run(overrides=overrides, out_dir=str(tmp_out), force=True, progress=progress)
    for p in tmp_out.iterdir():
        dest = out / p.name
        if dest.is_dir():
            shutil.rmtree(dest)
        elif dest.exists():
            dest.unlink()
        os.replace(p, dest)
    tmp_out.rmdir()
    res.out_dir = out
    return res


def _demo_foreign(out: Path, db: Path, tmp_out: Path) -> list[str]:
    """Output names in ``out`` that the previous demo run (recorded in ``db``) did not write."""
    files: dict[str, str] = {}
    if db.exists():
        with read_store(str(db)) as store:
            try:
                rows = store.rows("published_files_of_folder", {"out_dir": published.folder_key(tmp_out, store)})
            except (StoreError, duckdb.Error):  # a database of version 1 records no files
                rows = []
        if rows:
            files = json.loads(rows[0][1])
    bad: list[str] = []
    for name in OUTPUT_NAMES:
        p = out / name
        if not (p.exists() or p.is_symlink()):
            continue
        rels = [f"{name}/{r}" for r in published.entries(p)] if p.is_dir() and not p.is_symlink() else [name]
        bad += [r for r in rels if not published.matches(out, files, r)]
    return bad
