"""Whole runs: lock, load, screen, write outputs atomically, record the run.

Everything the command line does is a function here: :func:`run`, :func:`demo`,
:func:`validate`, :func:`status`, :func:`history`, :func:`init_config`.
"""

from __future__ import annotations

import datetime as _dt
import glob
import json
import logging
import os
import shutil
import sys
import tempfile
import time
import traceback
import uuid
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import duckdb
import polars as pl

from . import __version__, cluster, config as cfgmod, interrupts, locking, memory, outputs, pipeline, published, sources
from .errors import ConfigError, InputError, LockedError, OutputError, ScreeningError, StoreError
from .errors import Interrupted
from .ingest import REJECT_SCHEMA
from .resources import sample_portfolio_dir
from .store import Store
from .window import quarter_label

log = logging.getLogger("ddscreen")


@dataclass
class RunResult:
    run_id: str
    label: str
    out_dir: Path
    db_path: str
    summary: dict
    top: list[dict] = field(default_factory=list)
    loads: list = field(default_factory=list)
    skipped: bool = False
    execution_id: str = ""  # the database's key of this execution (run log, runs table); users see run_id


# ---------------------------------------------------------------------------- helpers


def _expand(pattern: str, kind: str) -> list[str]:
    if not pattern:
        raise ConfigError(f"no {kind} file given: pass --{kind} FILE or set [inputs] {kind} in the config")
    if any(ch in pattern for ch in "*?[") and not Path(pattern).exists():  # "bills [2026].csv" is a name
        found = sorted(glob.glob(pattern))
        if not found:
            raise InputError(pattern, f"no {kind} file matches this pattern")
        return found
    return [pattern]


def _versions() -> dict:
    import numpy
    import weasyprint

    return {
        "ddscreen": __version__,
        "python": sys.version.split()[0],
        "polars": pl.__version__,
        "duckdb": duckdb.__version__,
        "numpy": numpy.__version__,
        "weasyprint": weasyprint.__version__,
    }


class _Lock:
    """An exclusive, non-blocking advisory lock on ``<db>.lock`` (released by the OS if we die)."""

    def __init__(self, path: str):
        self.path = path
        self.fh: TextIO | None = None

    def __enter__(self):
        Path(self.path).parent.mkdir(parents=True, exist_ok=True)
        try:
            self.fh = open(self.path, "a+")
        except OSError as exc:
            raise StoreError(f"{self.path}: cannot create the lock file ({exc.strerror or exc})") from None
        try:
            taken = locking.try_lock(self.fh)  # fcntl on POSIX, msvcrt on Windows (screening/locking.py)
        except OSError as exc:
            self.fh.close()
            raise StoreError(f"{self.path}: cannot lock ({exc})") from None
        if not taken:
            self.fh.seek(0)
            try:
                holder = self.fh.read().strip() or "another process"
            except OSError:  # Windows: the holder's locked byte cannot be read
                holder = "another process"
            self.fh.close()
            raise LockedError(
                f"another ddscreen run holds the lock {self.path} ({holder}); nothing was changed"
            ) from None
        self.fh.seek(0)
        self.fh.truncate()
        self.fh.write(f"pid {os.getpid()} since {_dt.datetime.now().isoformat(timespec='seconds')}")
        self.fh.flush()
        return self

    def __exit__(self, *exc):
        assert self.fh is not None  # opened by __enter__
        try:
            self.fh.seek(0)
            self.fh.truncate()
            locking.unlock(self.fh)
        finally:
            self.fh.close()


class _Progress:
    """A bar of the run's stages on a terminal (stderr); nothing under cron or with --quiet."""

    STAGES = ("load inputs", "screen", "write tables", "render sheets", "render ranking", "publish")

    def __init__(self, enabled: bool):
        self.bar = None
        if enabled and sys.stderr.isatty():
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            self.bar = Progress(
                TextColumn("{task.description}"),
                BarColumn(),
                TextColumn("{task.completed}/{task.total}"),
                TimeElapsedColumn(),
                console=Console(stderr=True),
                transient=True,
            )
            self.bar.start()
            self.task = self.bar.add_task("ddscreen", total=len(self.STAGES))

    def stage(self, name: str) -> None:
        if self.bar is not None:
            done = self.STAGES.index(name) if name in self.STAGES else 0
            self.bar.update(self.task, completed=done, description=f"ddscreen: {name}")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()
            self.bar = None


def _stage(name: str) -> None:
    """Test hooks: DDSCREEN_KILL_AT=<stage> makes the process kill itself at that stage;
    DDSCREEN_PAUSE_AT=<stage>:<seconds> makes it wait there (``interrupts.pause_point``).

    Stages: after_load, after_screen, after_sheets, before_publish (results recorded, folder
    not yet renamed), after_publish (renamed, not yet marked ok), after_record (marked ok,
    latest and pruning not yet done).
    """
    interrupts.pause_point(name)
    if os.environ.get("DDSCREEN_KILL_AT") == name:
        import signal

        os.kill(os.getpid(), signal.SIGKILL)


def _setup_file_log(path: Path) -> logging.Handler:
    h = logging.FileHandler(path, encoding="utf-8")
    h.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    h.setLevel(logging.DEBUG)
    log.addHandler(h)
    return h


def _change_table(prev_results: pl.DataFrame | None, results: pl.DataFrame) -> pl.DataFrame:
    """The change of each building since the latest successful run of an earlier quarter."""
    if prev_results is None:
        return pl.DataFrame()
    new = results.select("building_id", "rank", pl.col("flag_codes").list.join(";").alias("flags"))
    return diff_results(prev_results, new)


def diff_results(old: pl.DataFrame, new: pl.DataFrame) -> pl.DataFrame:
    """Per building: new, cleared and persisting flags and the rank move between two runs."""
    o = old.select("building_id", pl.col("rank").alias("previous_rank"), pl.col("flags").alias("_of"))
    n = new.select("building_id", "rank", pl.col("flags").alias("_nf"))
    j = n.join(o, on="building_id", how="full", coalesce=True)
    j = j.with_columns(
        pl.col("_of").fill_null("").str.split(";").list.eval(pl.element().filter(pl.element() != "")),
        pl.col("_nf").fill_null("").str.split(";").list.eval(pl.element().filter(pl.element() != "")),
    )
    j = j.with_columns(
        pl.col("_nf").list.set_difference("_of").list.sort().alias("new_flags"),
        pl.col("_of").list.set_difference("_nf").list.sort().alias("cleared_flags"),
        pl.col("_nf").list.set_intersection("_of").list.sort().alias("persisting_flags"),
    )
    j = j.with_columns(
        pl.when(pl.col("previous_rank").is_null())
        .then(pl.lit("new building"))
        .when(pl.col("rank").is_null())
        .then(pl.lit("dropped"))
        .otherwise(
            pl.concat_str(
                [
                    pl.when(pl.col("rank") < pl.col("previous_rank"))
                    .then(pl.lit("up ") + (pl.col("previous_rank") - pl.col("rank")).cast(pl.String))
                    .when(pl.col("rank") > pl.col("previous_rank"))
                    .then(pl.lit("down ") + (pl.col("rank") - pl.col("previous_rank")).cast(pl.String))
                    .otherwise(pl.lit("same rank")),
                    pl.when(pl.col("new_flags").list.len() > 0)
                    .then(pl.lit("; new: ") + pl.col("new_flags").list.join(","))
                    .otherwise(pl.lit("")),
                    pl.when(pl.col("cleared_flags").list.len() > 0)
                    .then(pl.lit("; cleared: ") + pl.col("cleared_flags").list.join(","))
                    .otherwise(pl.lit("")),
                ]
            )
        )
        .alias("change")
    )
    return j.select(
        "building_id", "rank", "previous_rank", "change", "new_flags", "cleared_flags", "persisting_flags"
    ).sort("building_id")


# ---------------------------------------------------------------------------- run


def run(
    *,
    config_path: str | None = None,
    overrides: dict | None = None,
    out_dir: str | None = None,
    force: bool = False,
    quiet: bool = False,
    progress: bool = False,
) -> RunResult:
    """Load, screen and write one run.

    With ``out_dir`` the outputs go exactly there (replaced as a whole); without it they
    go to ``[output] root/<quarter label>/`` and ``root/latest`` points at it. Outputs are
    written into a temporary folder beside the target and renamed into place only when
    complete, so a failed run leaves earlier outputs untouched.
    """
    cfg = cfgmod.load(config_path, overrides)
    a = cfg["analysis"]
    as_of, window = cfgmod.run_window(cfg)  # ranges checked by cfgmod.load
    label = quarter_label(window[1]) if not a["window_from"] else f"{window[0]}_{window[1]}"
    files = {k: _expand(cfg["inputs"][k], k) for k in pipeline.KINDS}
    if cfg["inputs"]["events"]:  # optional (issue 17); read on every run, not stored
        files["events"] = _expand(cfg["inputs"]["events"], "events")
    db_path = cfg["store"]["database"]
    if out_dir is not None:
        target = Path(out_dir)
        root = None
    else:
        root = Path(cfg["output"]["root"])
        target = root / label
    if root is not None:
        published.check_latest_slot(root)
    if not Path(db_path).exists():
        published.check_target(None, target, label, force=force)  # no database: nothing here is ours
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{target.parent}: cannot create the output folder ({exc.strerror or exc})") from None
    if not os.access(target.parent, os.W_OK):
        raise OutputError(f"{target.parent}: output folder is not writable; earlier outputs are untouched")

    with interrupts.stop_on_signals(), _Lock(str(db_path) + ".lock"):  # SIGINT/SIGTERM -> Interrupted
        bar = _Progress(progress and not quiet)
        ex = cluster.from_config(cfg, db_path)  # [run] cluster: tasks on Dask (None: this process)
        try:
            return _run_locked(
                cfg,
                files,
                db_path,
                target,
                root,
                label,
                as_of,
                window,
                force=force,
                config_path=config_path,
                bar=bar,
                executor=ex,
            )
        finally:
            bar.close()
            if ex is not None:
                ex.close()


def _run_locked(
    cfg,
    files,
    db_path,
    target: Path,
    root: Path | None,
    label,
    as_of,
    window,
    *,
    force,
    config_path,
    bar: "_Progress | None" = None,
    executor: "cluster.DaskChunks | None" = None,
):
    """The run under the lock, in three phases.

    1. With the database open: settle what dead runs left, check the output folder (a refusal
       changes nothing of the user's), record the run, load the inputs, read what the
       screening needs. 2. With the database closed (``status`` and ``history`` can read it):
       screen and write every output into a temporary folder. 3. With the database open again:
       record the results and the files about to be published, rename the folder into place,
       mark the run ``ok``, point ``latest`` and prune. A kill at any point leaves the folder
       and the record in a state the next run settles (``published.settle_dead_runs``).
    """
    bar = bar or _Progress(False)
    need = memory.check(files, cfg["run"]["chunk_buildings"])  # stops here, nothing changed, if it cannot fit
    t_start = time.perf_counter()
    # run_key is the one id a user sees (sheets, ranking.pdf, summary.json, stderr, status, history): the
    # same for a rerun of the same quarter, inputs and settings, so reruns stay byte-identical. run_id
    # names this execution in the database and the run log; lookups accept either (_resolve_run).
    run_id = f"{label}-{_dt.datetime.now().strftime('%Y%m%dT%H%M%S')}-{uuid.uuid4().hex[:6]}"  # one execution
    run_key = _run_key(
        label, cfg, files
    )  # the id users see: the same for a rerun of the same quarter, inputs, settings
    store: Store | None  # None while the database is closed for readers (the screening phase)
    store = _open_store(db_path)
    try:
        notes = _clean_stale_temp(target, None)
        notes += published.settle_dead_runs(store)  # we hold the lock: a run still open has died
        published.check_target(store, target, label, force=force)
    except BaseException:
        store.close()
        raise
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.tmp-", dir=target.parent))
    except OSError as exc:
        store.close()
        raise OutputError(
            f"{target.parent}: cannot write there ({exc.strerror or exc}); earlier outputs untouched"
        ) from None
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o777 & ~umask)  # mkdtemp makes it private; the published folder is for readers
    handler = _setup_file_log(tmp / "run.log")
    timings: dict[str, float] = {}
    publishing = False
    try:
        log.info("run %s: window %s to %s, database %s", run_key, window[0], window[1], db_path)
        log.debug("run %s: execution %s", run_key, run_id)
        for n in notes:
            log.warning("%s", n)
        store.execute(
            "insert_run",
            {
                "run_id": run_id,
                "run_key": run_key,
                "label": label,
                "as_of": as_of,
                "window_start": window[0],
                "window_end": window[1],
                "out_dir": published.folder_key(target, store),
                "config_hash": cfgmod.config_hash(cfg),
            },
        )
        opts = pipeline.read_options(cfg)
        t = time.perf_counter()
        bar.stage("load inputs")
        loads = pipeline.load_inputs(store, files, opts, force=force, log=log.info)
        timings["ingest"] = round(time.perf_counter() - t, 4)
        for fl in loads:
            log.info("%s %s: %s (%d rows, %d rejected)", fl.kind, fl.path, fl.status, fl.rows, fl.rejected)
            for n in fl.notices:
                log.warning("%s", n)
        _stage("after_load")
        in_chunks = _readings_in_chunks(store, cfg, db_path, int(store.rows("count_buildings")[0][0]))
        stored = _stored_inputs(store, readings=not in_chunks)
        b, w, cross_rej = stored["buildings"], stored["weather"], stored["rejects"]
        if w.height == 0:
            raise InputError(files["weather"][0], "no usable weather rows", expected="daily station data")
        load_rej = store.frame("select_load_rejects")
        previous = _year_ago(store, window)
        prev = store.rows("previous_quarter_ok_run", {"run_id": run_id})
        prev_results = store.frame("results_of_run", {"run_id": prev[0][0]}) if prev else None
        events, ev_rej, then, plan_ctx = None, None, None, None
        if files.get("events"):  # issue 17: read on every run; what earlier runs said of the audited buildings
            from . import events as evmod

            events, ev_rej, ev_notes = evmod.read_all(files["events"], opts, b["building_id"])
            for n in ev_notes:
                log.warning("%s", n)
            then = evmod.audits_then(store, events)
            plan_ctx = evmod.plan_context(
                events,
                then,
                window_end=window[1],
                rest_quarters=cfg["plan"]["clean_audit_rest_quarters"],
                regrow=cfg["plan"]["clean_audit_regrow"],
                blackout_days=cfg["savings"]["blackout_days"],
                window_start=window[0],
                judge_min_days=cfg["savings"]["post_measure_min_days"],
            )
        store.close()  # phase 2: the database stays free for readers
        store = None
        bar.stage("screen")
        paths = {"buildings": files["buildings"][0], "readings": files["readings"][0]}
        # the readings frame is passed, not kept here, so screening can free it once checked; or each
        # chunk's readings come from the store (many buildings, one readings file)
        src = StoreReadings(str(db_path)) if in_chunks else None
        try:
            res = pipeline.screen_frames(
                b,
                src if src is not None else stored.pop("readings"),
                w,
                cfg,
                window=window,
                paths=paths,
                previous=previous,
                events=events,
                plan_context=plan_ctx,
                chunk_buildings=cfg["run"]["chunk_buildings"],
                executor=executor,
            )
        finally:
            if src is not None:
                src.close()
        timings.update(res.timings)
        _stage("after_screen")
        bar.stage("write tables")
        rejects = outputs.rejects_table(
            pl.concat(
                [load_rej.cast(REJECT_SCHEMA), cross_rej.cast(REJECT_SCHEMA), res.rejects.cast(REJECT_SCHEMA)]
                + ([ev_rej.cast(REJECT_SCHEMA)] if ev_rej is not None else [])
            )
        )
        disp = outputs.Display(cfg["analysis"]["units"])
        change = _change_table(prev_results, res.results)
        ranking = outputs.ranking_table(res.results, disp, change)
        t = time.perf_counter()
        outputs.write_csv(ranking, tmp / "ranking.csv")
        plan = outputs.audit_plan_table(res.results, disp)
        outputs.write_csv(plan, tmp / "audit_plan.csv")
        outputs.write_csv(rejects, tmp / "rejects.csv")
        outputs.write_csv(res.issues.sort("building_id", "code"), tmp / "data_issues.csv")
        assumptions = outputs.assumptions_table(res.envelope, disp)
        outputs.write_csv(assumptions, tmp / "assumptions.csv")
        from .xlsxout import write_ranking_xlsx

        write_ranking_xlsx(
            tmp / "ranking.xlsx",
            ranking=ranking,
            issues=res.issues.sort("building_id", "code"),
            rejects=rejects,
            assumptions=assumptions,
            disp=disp,
            currency=cfg["prices"]["currency"],
            plan=plan,
        )
        summary = _summary(run_key, label, as_of, window, cfg, res, rejects, loads, prev[0][1] if prev else None)
        if res.learning is not None:  # learning from audits (issue 17): the defaults' bias per era x use type
            from . import learning

            summary["audit_bias"] = learning.bias_summary(res.learning, cfg["learning"]["min_audits"])
        savings_csv = None
        if res.savings is not None:  # savings after a measure (issue 17)
            from . import events as evmod

            savings_csv = evmod.savings_table(
                res.savings, si=disp.si, currency=cfg["prices"]["currency"], kbtu_to_kwh=outputs.KBTU_TO_KWH
            )
            outputs.write_csv(savings_csv, tmp / "savings.csv")
            summary["savings"] = evmod.savings_totals(res.savings, si=disp.si, kbtu_to_kwh=outputs.KBTU_TO_KWH)
            if events is not None and then is not None:
                summary["audit_hit_rate"] = evmod.hit_rate(events, then)
            notes_df = (
                res.results.filter(pl.col("plan_note").is_not_null())
                if "plan_note" in res.results.columns
                else res.results.clear()
            )
            summary["plan_notes"] = [
                {"building_id": r["building_id"], "rank": r["rank"], "tier": r["tier"], "note": r["plan_note"]}
                for r in notes_df.sort("rank").iter_rows(named=True)
            ]
        timings["csv"] = round(time.perf_counter() - t, 4)
        paper = cfg["output"]["paper"]
        paper = ("A4" if disp.si else "Letter") if paper == "auto" else paper
        from . import report

        sheet_files: dict[str, str] | None = None  # building_id -> its sheet, relative to the folder
        if cfg["output"]["sheets"]:
            bar.stage("render sheets")
            t = time.perf_counter()
            since = None
            if res.savings is not None and res.savings_periods is not None and events is not None:
                from . import events as evmod

                since = evmod.since_measure(
                    res.savings,
                    res.savings_periods,
                    events,
                    si=disp.si,
                    currency=cfg["prices"]["currency"],
                    kbtu_to_kwh=outputs.KBTU_TO_KWH,
                )
            sheets = outputs.sheet_records(
                res.results,
                res.envelope,
                res.periods,
                disp,
                run_id=run_key,
                run_date=str(_dt.date.today()),
                currency=cfg["prices"]["currency"],
                since_measure=since,
            )
            (tmp / "sheets").mkdir()
            names = report.assign_filenames([s["building_id"] for s in sheets])
            report.render_sheets(
                sheets,
                tmp / "sheets",
                paper=paper,
                workers=_workers(cfg["output"]["workers"]),
                chunk_runner=executor.render_chunks if executor is not None else None,
            )
            timings["sheets"] = round(time.perf_counter() - t, 4)
            sheet_files = {b: f"sheets/{v}.pdf" for b, v in names.items()}
            outputs.write_csv(
                pl.DataFrame({"building_id": list(sheet_files), "file": list(sheet_files.values())}),
                tmp / "sheets_index.csv",
            )
        _stage("after_sheets")
        bar.stage("render ranking")
        t = time.perf_counter()
        report.render_ranking(
            outputs.ranking_report(
                ranking,
                res.results,
                summary,
                disp,
                currency=cfg["prices"]["currency"],
                max_rows=cfg["output"]["ranking_pdf_rows"],
                savings=savings_csv,
            ),
            tmp / "ranking.pdf",
            paper=paper,
        )
        timings["ranking_pdf"] = round(time.perf_counter() - t, 4)
        from .webpage import write_index

        write_index(
            tmp / "index.html",
            ranking=ranking,
            results=res.results,
            plan=plan,
            summary=summary,
            disp=disp,
            currency=cfg["prices"]["currency"],
            sheet_files=sheet_files,
        )
        timings["total"] = round(time.perf_counter() - t_start, 4)
        summary["timings_s"] = timings
        outputs.write_json(_deterministic(summary), tmp / "summary.json")
        stage = _results_for_store(run_id, res.results)
        bar.stage("publish")
        log.info("run %s finished in %.1f s", run_key, timings["total"])
        log.removeHandler(handler)
        handler.close()
        # phase 3: record what is about to be published, publish, mark it done
        files_written = published.manifest(tmp)
        store = _open_store(db_path)
        with store.transaction():
            store.execute("delete_results_of_run", {"run_id": run_id})
            store.execute("insert_results", stage_results=stage)
            store.execute("delete_rejects_of_run", {"run_id": run_id})
            store.execute("insert_rejects", {"run_id": run_id}, stage_rejects=rejects)
            store.execute(
                "record_publishing",
                {
                    "run_id": run_id,
                    "input_hashes": json.dumps(
                        {f"{fl.kind}:{fl.path}": fl.sha256 for fl in loads} | _events_hashes(files.get("events") or [])
                    ),
                    "versions": json.dumps(summary["versions"]),
                    "timings": json.dumps(timings),
                    "counts": json.dumps(summary["counts"]),
                    "out_dir": published.folder_key(target, store),
                    "files": json.dumps(files_written, sort_keys=True),
                },
            )
        publishing = True
        _stage("before_publish")
        _publish(tmp, target)
        _stage("after_publish")
        store.execute("set_run_status", {"run_id": run_id, "status": "ok", "message": ""})
        _stage("after_record")
        if root is not None:
            _tidy_root(root, store, cfg["output"]["keep"], target)
        # the first visits of this quarter's audit plan, for the console
        top = (
            ranking.filter(pl.col("tier") == "Audit first")
            .head(5)
            .select(
                "rank",
                "building_id",
                "name",
                "tier",
                "ratio",
                "needs_review",
                "expected_recoverable_cost",
                pl.lit(cfg["prices"]["currency"]).alias("currency"),
            )
            .to_dicts()
        )
        return RunResult(run_key, label, target, str(db_path), summary, top, loads, execution_id=run_id)
    except BaseException as exc:
        stop = interrupts.as_interrupted(exc)
        if isinstance(stop, Interrupted):  # SIGINT/SIGTERM: see _interrupted
            raise _interrupted(
                stop, run_id, store, db_path, handler, tmp, target, timings, publishing=publishing
            ) from None
        mapped = isinstance(exc, (OSError, MemoryError))
        if isinstance(exc, MemoryError):
            exc = memory.ran_out(exc, need)
        elif isinstance(exc, OSError):  # e.g. a full disk while writing the outputs
            exc = OutputError(
                f"{target}: cannot write the outputs ({exc.strerror or exc}); earlier outputs are untouched"
            )
        # an expected error is printed once by the CLI; the run log keeps the detail
        expected = isinstance(exc, ScreeningError)
        (log.debug if expected else log.error)("run %s (execution %s) failed: %s", run_key, run_id, exc)
        log.debug("%s", traceback.format_exc())
        log.removeHandler(handler)
        handler.close()
        _record_failure(store, db_path, run_id, exc, timings, publishing=publishing)
        store = None
        _keep_failure_log(tmp, target, quiet=expected)
        if mapped:
            raise exc from None
        raise
    finally:
        if store is not None:
            store.close()


def _record_failure(
    store: Store | None, db_path, run_id: str, exc: BaseException, timings: dict, *, publishing: bool
) -> None:
    """Mark a failed run in the database (reopening it if the run had closed it)."""
    try:
        store = store or _open_store(db_path)
    except Exception:  # the database itself may be the problem
        return
    try:
        if isinstance(exc, (InputError, ConfigError)) and "ingest" not in timings:
            # bad input stops the run before anything is written: leave no trace of it
            store.execute("delete_run", {"run_id": run_id})
        elif publishing:  # the rename failed and the earlier outputs were put back (see _publish)
            store.execute("set_run_status", {"run_id": run_id, "status": "failed", "message": str(exc)[:500]})
        else:
            store.execute(
                "finish_run",
                {
                    "run_id": run_id,
                    "status": "failed",
                    "input_hashes": "{}",
                    "versions": "{}",
                    "timings": json.dumps(timings),
                    "counts": "{}",
                    "message": str(exc)[:500],
                    "out_dir": "",
                },
            )
    except Exception:  # the database itself may be the problem
        pass
    finally:
        store.close()


def _tidy_root(root: Path, store: Store, keep: int, target: Path) -> None:
    """After a published run: ``latest`` to the newest quarter, old quarters pruned.

    The run is published and recorded by now, so a failure here is a warning, not a failed
    run; the next run does both again.
    """
    try:
        published.point_latest(root, store)
        for note in published.prune(root, keep, store, current=target):
            log.info("%s", note)
    except (OSError, ScreeningError) as exc:
        log.warning("the outputs are published, but tidying %s failed (%s); the next run tries again", root, exc)


def _workers(wanted: int) -> int:
    """Sheet renderers: as configured, at most one per core of this machine."""
    cores = os.cpu_count() or 1
    if wanted > cores:
        log.info("workers = %d capped to the %d core(s) of this machine", wanted, cores)
    return max(1, min(wanted, cores))


class StoreReadings(pipeline.ReadingsSource):
    """Each chunk's readings pulled from the store (named statements, the chunk's building ids bound),
    through a read-only connection held while the screening runs. For one readings file only: rows
    given by several files are resolved over all of them first (``sources.one_row_per_key``)."""

    def __init__(self, db_path: str):
        self.db_path = db_path
        self.store: Store | None = None

    def _frame(self, name: str, ids: pl.Series) -> pl.DataFrame:
        if self.store is None:
            self.store = Store(self.db_path, read_only=True)
        return self.store.frame(name, {"ids": ids.to_list()}).drop(sources.FILE_COL)

    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        return self._frame("select_readings_of_buildings", ids)

    def others(self, ids: pl.Series) -> pl.DataFrame:
        return self._frame("select_readings_of_other_buildings", ids)

    def close(self) -> None:
        if self.store is not None:
            self.store.close()
            self.store = None


def _readings_in_chunks(store: Store, cfg: dict, db_path: str, n_buildings: int) -> bool:
    """Whether the screening pulls each chunk's readings from the store: chunks configured and more
    buildings than one chunk, one readings file, a database file (not ``:memory:``)."""
    return (
        pipeline.chunk_size(cfg["run"]["chunk_buildings"], n_buildings) < n_buildings
        and str(db_path) != ":memory:"
        and int(store.rows("count_reading_files")[0][0]) <= 1
    )


def _stored_inputs(store: Store, *, readings: bool = True) -> dict[str, pl.DataFrame]:
    """The stored rows of the files the run names, one row per key across files (see ``sources``):
    ``buildings``, ``readings`` (unless ``readings`` is false: pulled a chunk at a time), ``weather``
    and the cross-file ``rejects``."""
    frames, rejects = [], []
    for name, spec in (
        ("select_buildings", sources.BUILDINGS),
        ("select_readings", sources.READINGS),
        ("select_weather", sources.WEATHER),
    ):
        if name == "select_readings" and not readings:
            frames.append(pl.DataFrame())
            continue
        df, rej, notices = sources.one_row_per_key(store.frame(name), spec)
        for n in notices:
            log.warning("%s", n)
        if df.height == 0 or df[sources.FILE_COL].n_unique() <= 1:
            df = df.drop(sources.FILE_COL)  # one file: the path is the kind's
        if name == "select_weather":
            df = df.drop(sources.LINE_COL, sources.FILE_COL, strict=False)
        frames.append(df)
        rejects.append(rej)
    return {"buildings": frames[0], "readings": frames[1], "weather": frames[2], "rejects": pl.concat(rejects)}


def _run_key(label: str, cfg: dict, files: dict[str, list[str]]) -> str:
    """The run's identity: its quarter label and a hash of the input contents, settings and version."""
    import hashlib

    h = hashlib.sha256()
    h.update(cfgmod.config_hash(cfg).encode())
    h.update(__version__.encode())
    for kind in pipeline.KINDS:
        for p in files.get(kind, []):
            h.update(kind.encode())
            h.update(pipeline.file_sha256(p).encode())
    return f"{label}-{h.hexdigest()[:10]}"


def _year_ago(store: Store, window) -> pl.DataFrame | None:
    """Results of the latest successful run whose window ended about a year earlier."""
    runs = store.frame("list_runs", {"limit": 1000})
    if runs.height == 0:
        return None
    target = window[1] - _dt.timedelta(days=365)
    cand = runs.filter(
        (pl.col("status") == "ok") & ((pl.col("window_end") - pl.lit(target)).dt.total_days().abs() <= 45)
    )
    if cand.height == 0:
        return None
    return store.frame("results_of_run", {"run_id": cand["run_id"][0]})


def _results_for_store(run_id: str, res: pl.DataFrame) -> pl.DataFrame:
    rec_cols = sorted(c for c in res.columns if res.schema[c] != pl.Object)
    records = res.select(pl.struct(rec_cols).struct.json_encode())  # one JSON object per building, keys sorted
    return res.select(
        pl.lit(run_id).alias("run_id"),
        "building_id",
        pl.col("rank").cast(pl.Int32),
        "tier",
        "needs_review",
        "ratio",
        "actual_heating_kbtu",
        "expected_heating_kbtu",
        "normal_heating_kbtu",
        "excess_energy_kbtu",
        "excess_cost",
        pl.col("flag_codes").list.join(";").alias("flags"),
        pl.col("data_issue_codes").list.join(";").alias("data_issues"),
    ).with_columns(records.to_series().alias("record"))


def _summary(run_id, label, as_of, window, cfg, res, rejects, loads, prev_id) -> dict:
    r = res.results
    per_tier = {k: int(v) for k, v in r.group_by("tier").len().iter_rows()}
    flags = r.select(pl.col("flag_codes").explode().drop_nulls()).to_series().value_counts(sort=True)
    issues = res.issues.group_by("code").len()
    disp = outputs.Display(cfg["analysis"]["units"])
    ee = r["excess_energy_kbtu"].fill_null(0).sum()
    return {
        "run_id": run_id,
        "label": label,
        "as_of": str(as_of),
        "window": [str(window[0]), str(window[1])],
        "run_date": str(_dt.date.today()),
        "units": cfg["analysis"]["units"],
        "previous_run": prev_id,
        "counts": {
            "buildings": r.height,
            "needs_review": int(r["needs_review"].sum()),
            "with_data_issues": int((r["data_issue_codes"].list.len() > 0).sum()),
            "blocked_by_data": int(r["blocking"].sum()),
            "rejected_rows": rejects.height,
            "per_tier": dict(sorted(per_tier.items())),
            "needs_review_by_path": {
                k: int(v) for k, v in sorted(r.filter(pl.col("needs_review")).group_by("review_path").len().iter_rows())
            },
            "per_flag": {k: int(v) for k, v in sorted(flags.iter_rows())},
            # which scale judged each building's level: peers, the model's own band, or a blend
            "evidence_scale": {
                k: int(v)
                for k, v in sorted(
                    r.filter(pl.col("evidence_scale").is_not_null()).group_by("evidence_scale").len().iter_rows()
                )
            },
            "audit_plan": int(r["in_plan"].sum()),
            "per_data_issue": {k: int(v) for k, v in sorted(issues.iter_rows())},
        },
        # sums over buildings without blocking data problems (those carry no excess)
        "totals": {
            "excess_energy": round(float(ee * (outputs.KBTU_TO_KWH if disp.si else 1.0)), 1),
            "energy_unit": disp.energy_unit,
            "excess_cost": round(float(r["excess_cost"].fill_null(0).sum()), 2),
            "excess_co2e_kg": round(float(r["excess_co2e_kg"].fill_null(0).sum()), 1),
            "audit_list_excess_energy": round(
                float(
                    r.filter(pl.col("needs_review"))["excess_energy_kbtu"].fill_null(0).sum()
                    * (outputs.KBTU_TO_KWH if disp.si else 1.0)
                ),
                1,
            ),
            "audit_list_excess_cost": round(
                float(r.filter(pl.col("needs_review"))["excess_cost"].fill_null(0).sum()), 2
            ),
            "expected_recoverable_cost": round(float(r["expected_recoverable_cost"].fill_null(0).sum()), 2),
            "audit_plan_expected_recoverable_cost": round(
                float(r.filter(pl.col("in_plan"))["expected_recoverable_cost"].fill_null(0).sum()), 2
            ),
        },
        "inputs": [
            {
                "kind": fl.kind,
                "path": fl.path,
                "sha256": fl.sha256,
                "status": fl.status,
                "rows": fl.rows,
                "rejected": fl.rejected,
            }
            for fl in loads
        ],
        "normal_years": res.normal_years,
        "versions": _versions(),
    }


def _deterministic(summary: dict) -> dict:
    """summary.json without the fields that change on every run (kept in the database instead)."""
    s = dict(summary)
    s.pop("timings_s", None)
    s.pop("run_date", None)
    s["inputs"] = [{k: v for k, v in i.items() if k != "status"} for i in s["inputs"]]
    return s


def _publish(tmp: Path, target: Path) -> None:
    """Move the finished folder into place; on failure the earlier outputs are where they were."""
    old = None
    try:
        if target.exists() or target.is_symlink():
            old = target.with_name(f".{target.name}.old-{uuid.uuid4().hex[:6]}")
            os.replace(target, old)
        os.replace(tmp, target)
    except OSError as exc:
        if old is not None and old.exists() and not target.exists():
            try:
                os.replace(old, target)
            except OSError:
                pass  # the next run puts them back (see _clean_stale_temp)
        raise OutputError(
            f"{target}: cannot move the outputs into place ({exc.strerror or exc}); earlier outputs are untouched"
        ) from None
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _clean_stale_temp(target: Path, current: Path | None) -> list[str]:
    """Tidy what runs that died left in the output folder (called under the lock).

    A temporary folder ``.<label>.tmp-*`` is removed; its log is kept beside the target as
    ``<label>.interrupted-<time>.log``. A folder ``.<label>.old-*`` (earlier outputs set aside
    by :func:`_publish` just before the rename) is put back when ``<label>`` is missing,
    removed otherwise.
    """
    parent = target.parent
    notes: list[str] = []
    for p in sorted(parent.glob(".*.old-*")):
        if not p.is_dir() or p.is_symlink() or not (p / published.ANCHOR).is_file():
            continue  # a set-aside folder of ours always holds its summary
        home = parent / p.name[1:].rsplit(".old-", 1)[0]
        if not home.exists() and not home.is_symlink():
            os.replace(p, home)
            notes.append(f"restored {home}, set aside by an interrupted run")
        else:
            shutil.rmtree(p, ignore_errors=True)
    for p in sorted(parent.glob(".*.tmp-*")):
        if p == current or not p.is_dir() or p.is_symlink():
            continue
        if any(x.name != "run.log" for x in p.iterdir()) and not (p / "run.log").is_file():
            continue  # ours start with their run.log at once (or are still empty)
        name = p.name[1:].rsplit(".tmp-", 1)[0]
        logf = p / "run.log"
        try:
            if logf.exists():
                stamp = _dt.datetime.fromtimestamp(logf.stat().st_mtime).strftime("%Y%m%dT%H%M%S")
                shutil.move(str(logf), parent / f"{name}.interrupted-{stamp}.log")
        except OSError:
            pass
        shutil.rmtree(p, ignore_errors=True)
        notes.append(f"removed {p}, left by an interrupted run")
    return notes


def _keep_failure_log(tmp: Path, target: Path, *, quiet: bool = False) -> None:
    logf = tmp / "run.log"
    try:
        if logf.exists():
            dest = target.parent / f"{target.name}.failed-{_dt.datetime.now().strftime('%Y%m%dT%H%M%S')}.log"
            shutil.move(str(logf), dest)
            (log.debug if quiet else log.error)("the log of the failed run is %s", dest)
    except OSError:
        pass
    shutil.rmtree(tmp, ignore_errors=True)


# ---------------------------------------------------------------------------- SIGINT and SIGTERM


def _interrupted(
    exc: Interrupted,
    run_id: str,
    store: Store | None,
    db_path,
    handler: logging.Handler,
    tmp: Path,
    target: Path,
    timings: dict,
    *,
    publishing: bool,
) -> Interrupted:
    """Clean up after a stop signal; returns the exception to raise (its message says what became
    of the outputs). Further SIGINT/SIGTERM are ignored meanwhile (screening/interrupts.py).

    The temporary folder is removed, its log kept beside the target as
    ``<label>.interrupted-<time>.log`` (as the next run does for a killed one) and the run is
    recorded as ``interrupted`` with the message. A signal between the two renames of
    :func:`_publish` finds the earlier outputs set aside: they are put back. A signal after the
    folder was moved into place leaves the folder, and the run is recorded ``ok`` (its record
    was complete before the rename); the message says where the outputs are.
    """
    interrupts.pause_point("cleanup")  # test hook: a second signal arrives here
    in_place = publishing and not tmp.exists() and target.exists()
    exc = Interrupted(
        exc.signum,
        f"the outputs were already moved into place ({target})"
        if in_place
        else "nothing was published, earlier outputs are untouched",
    )
    log.debug("run %s: %s", run_id, exc)
    log.removeHandler(handler)
    handler.close()
    try:
        store = store or _open_store(db_path)
        if in_place:
            store.execute("set_run_status", {"run_id": run_id, "status": "ok", "message": ""})
        elif publishing:
            store.execute("set_run_status", {"run_id": run_id, "status": "interrupted", "message": str(exc)[:500]})
        else:
            store.execute(
                "finish_run",
                {
                    "run_id": run_id,
                    "status": "interrupted",
                    "input_hashes": "{}",
                    "versions": "{}",
                    "timings": json.dumps(timings),
                    "counts": "{}",
                    "message": str(exc)[:500],
                    "out_dir": "",
                },
            )
    except Exception:  # noqa: BLE001 - the database may be what was interrupted; the next run settles it
        pass
    finally:
        if store is not None:
            store.close()
    logf = tmp / "run.log"
    try:
        if logf.exists():
            stamp = _dt.datetime.now().strftime("%Y%m%dT%H%M%S")
            shutil.move(str(logf), target.parent / f"{target.name}.interrupted-{stamp}.log")
    except OSError:
        pass
    shutil.rmtree(tmp, ignore_errors=True)
    if not target.exists() and not target.is_symlink() and any(target.parent.glob(f".{target.name}.old-*")):
        _clean_stale_temp(target, tmp)
    return exc


# ---------------------------------------------------------------------------- other commands


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
        with _read_store(str(db)) as store:
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


@dataclass
class Validation:
    problems: list[str]
    rows: dict[str, int]
    notices: list[str]
    suggestions: list[str] = field(default_factory=list)  # TOML column mappings to confirm, one per file

    @property
    def ok(self) -> bool:
        return not self.problems


def validate(
    buildings: str | None = None,
    readings: str | None = None,
    weather: str | None = None,
    *,
    config_path: str | None = None,
    overrides: dict | None = None,
    events: str | None = None,
) -> Validation:
    """Check the three kinds of file, and an events file when given; report every problem; load nothing.

    A kind not given here is taken from the config's ``[inputs]`` (a glob: every file it matches, each
    checked on its own; the checks across files, such as readings of unknown buildings, then run only
    when each kind is one file, and ``run`` makes them in any case). The events file, too, is the
    config's when not given.
    """
    cfg = cfgmod.load(config_path, overrides)
    opts = pipeline.read_options(cfg)
    given = {"buildings": buildings, "readings": readings, "weather": weather}
    paths = {k: ([v] if v else _expand(cfg["inputs"][k], k)) for k, v in given.items()}
    problems: list[str] = []
    notices: list[str] = []
    rows: dict[str, int] = {}
    loaded = {}
    suggestions: list[str] = []
    rejects: list[pl.DataFrame] = []
    for kind, kind_paths in paths.items():
        for path in kind_paths:
            try:
                ld = pipeline.read_file(kind, path, opts)
            except InputError as exc:
                problems.append(str(exc))
                if exc.problem == "missing required column":
                    suggestions.extend(_mapping_suggestion(kind, path, opts))
                continue
            if len(kind_paths) == 1:
                loaded[kind] = ld
            rows[kind] = rows.get(kind, 0) + ld.df.height
            notices.extend(ld.notices)
            rejects.append(ld.rejects.cast(REJECT_SCHEMA))
    if any(len(v) > 1 for v in paths.values()):
        notices.append(
            "several files of a kind: each was checked on its own; the checks across files "
            "(readings of unknown buildings, stations without weather) run with `ddscreen run`"
        )
    if len(loaded) == 3:
        buildings, readings = paths["buildings"][0], paths["readings"][0]
        from . import units

        stations = sorted(loaded["weather"].df["station_id"].unique().to_list())
        b, r, rej = pipeline._cross_check(
            loaded["buildings"].df, loaded["readings"].df, stations, {"buildings": buildings, "readings": readings}
        )
        rejects.append(rej.cast(REJECT_SCHEMA))
        _, conv_rej = units.convert_to_kbtu(
            r,
            b,
            gas_btu_per_ft3=cfg["analysis"]["gas_btu_per_ft3"],
            steam_btu_per_lb=cfg["analysis"]["steam_btu_per_lb"],
        )
        rejects.append(
            conv_rej.select(
                pl.lit(readings).alias("file"), "line", "column", pl.col("value").cast(pl.String), "reason"
            ).cast(REJECT_SCHEMA)
        )
    events = events or cfg["inputs"]["events"] or None
    ev_paths = _expand(events, "events") if events else []
    for path in ev_paths:  # issue 16/17: the events file, against the accepted buildings when they were read
        from . import events as evmod

        try:
            ld = evmod.read_events(path, opts, loaded["buildings"].df["building_id"] if "buildings" in loaded else None)
        except InputError as exc:
            problems.append(str(exc))
            if exc.problem == "missing required column":
                suggestions.extend(_mapping_suggestion("events", path, opts))
            continue
        rows["events"] = rows.get("events", 0) + ld.df.height
        notices.extend(ld.notices)
        rejects.append(ld.rejects.cast(REJECT_SCHEMA))
    order = {str(p): i for i, p in enumerate([*(p for v in paths.values() for p in v), *ev_paths])}
    if rejects:
        allrej = (
            pl.concat(rejects)
            .with_columns(pl.col("file").replace_strict(order, default=9).alias("_k"))
            .sort("_k", "line", "column")
        )
        for r in allrej.iter_rows(named=True):
            problems.append(
                f"{r['file']}, line {r['line']}, column {r['column']!r}: {r['reason']}"
                + (f" (got {r['value']!r})" if r["value"] is not None else "")
            )
    return Validation(problems, rows, notices, suggestions)


def _mapping_suggestion(kind: str, path: str, opts) -> list[str]:
    """A ``[inputs.columns.KIND]`` block for a file that lacks required columns (or nothing to suggest)."""
    from . import colmap
    from .csvread import read_header

    try:
        header = read_header(path, delimiter=opts.delimiter, encoding=opts.encoding)
    except InputError:
        return []
    given = dict(opts.columns.get(kind) or {})
    norm_given = {k.strip().lower() for k in given}
    free = [h for h in header if h.strip().lower() not in norm_given]
    taken = set(given.values())
    pairs = [(t, o, "") for t, o in given.items()] + [
        (t, o, w) for t, o, w in colmap.suggest(free, kind) if o not in taken
    ]
    if len(pairs) == len(given):
        return []
    missing = colmap.missing_after(header, kind, {t: o for t, o, _ in pairs})
    block = colmap.toml_block(kind, pairs)
    if missing:
        block += "\n# still missing: " + ", ".join(missing) + " (add a line for each)"
    return [f"# {path}\n{block}"]


def status(db_path: str, limit: int = 10) -> pl.DataFrame:
    """The last runs recorded in the database, newest first.

    A run whose process died shows as ``interrupted`` (or ``ok`` when it died after its
    folder was in place) before the next run records it so; nothing is written here.
    """
    with _read_store(db_path) as store:
        return _as_seen(store, db_path, store.frame("list_runs", {"limit": limit}))


def history(
    db_path: str, run_a: str | None = None, run_b: str | None = None, events: list[str] | None = None
) -> tuple[pl.DataFrame, pl.DataFrame | None]:
    """The list of runs, and the difference between two runs (default: the last two successful).

    The difference gains ``events``: per building, the events dated after the older run's window
    and up to the newer run's (issue 17), one text, from ``events`` (paths or globs) or else the
    events files the newer run recorded (when they are still there); null where none.
    """
    with _read_store(db_path) as store:
        runs = _as_seen(store, db_path, store.frame("list_runs", {"limit": 1000}))
        ok = runs.filter(pl.col("status") == "ok")["run_id"].to_list()
        if run_a is None and run_b is None:
            if len(ok) < 2:
                return runs, None
            run_b, run_a = ok[0], ok[1]
        elif run_a is None or run_b is None:
            raise ConfigError("history: give two run ids (older and newer), or none")
        else:
            run_a, run_b = (_resolve_run(store, db_path, rid) for rid in (run_a, run_b))
        old = store.frame("results_of_run", {"run_id": run_a})
        new = store.frame("results_of_run", {"run_id": run_b})
        ((_, end_a),) = store.rows("run_inputs", {"run_id": run_a})
        ((recorded, end_b),) = store.rows("run_inputs", {"run_id": run_b})
    diff = diff_results(old, new)
    paths = (
        [p for pat in events for p in _expand(pat, "events")]
        if events
        else [k.split(":", 1)[1] for k in json.loads(recorded or "{}") if k.startswith("events:")]
    )
    paths = [p for p in paths if Path(p).is_file()]
    if not paths:
        return runs, diff.with_columns(pl.lit(None, dtype=pl.String).alias("events"))
    from . import events as evmod

    ev, _rej, _notes = evmod.read_all(paths, pipeline.ReadOptions(), None)
    return runs, diff.join(evmod.events_between(ev, end_a, end_b), on="building_id", how="left")


def _events_hashes(paths: list[str]) -> dict[str, str]:
    """The events files of a run for its record (``events:<path>`` → sha256), so history can find them."""
    return {f"events:{p}": pipeline.file_sha256(p) for p in paths if Path(p).is_file()}


def _resolve_run(store: Store, db_path, rid: str) -> str:
    """The execution a user's run id names: the id shown on the outputs (the run key; its newest
    successful execution, else its newest) or an execution id from the database."""
    rows = store.rows("resolve_run", {"run": rid})
    if not rows:
        raise ConfigError(f"history: no run {rid!r} in {db_path}")
    return rows[0][0]


READ_WAIT_S = 20.0  # how long status/history wait for a run's brief hold on the database
WRITE_WAIT_S = 5.0  # how long a run waits for a reader's (status, history) brief hold on it


def _open_store(db_path, *, read_only: bool = False, wait_s: float = WRITE_WAIT_S) -> Store:
    """Open the database, waiting while another process holds it for a moment.

    DuckDB lets one process at a time open a database file; ``status`` and ``history``
    hold it for milliseconds, a run only while it loads and records. A holder that does not
    let go within ``wait_s`` is reported (StoreError: "in use by another program").
    """
    deadline = time.monotonic() + wait_s
    while True:
        try:
            return Store(db_path, read_only=read_only)
        except StoreError as exc:
            if "in use" not in str(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.1)


@contextmanager
def _read_store(db_path: str):
    """The database opened read-only, waiting while a run holds it for a moment.

    A run holds the database only while it loads inputs and while it records its results
    (seconds); status and history wait for that, up to ``READ_WAIT_S``.
    """
    if not Path(db_path).exists():
        raise StoreError(f"{db_path}: no database here yet (run ddscreen run first)")
    store = _open_store(db_path, read_only=True, wait_s=READ_WAIT_S)
    try:
        yield store
    finally:
        store.close()


def _lock_held(path: str) -> bool:
    """Whether a run holds the lock file (tested without creating it)."""
    try:
        fh = open(path)
    except OSError:
        return False
    try:
        return not locking.try_lock(fh, shared=True)
    except OSError:  # no lock on this platform: nothing can hold one
        return False
    finally:
        fh.close()


def _as_seen(store: Store, db_path: str, runs: pl.DataFrame) -> pl.DataFrame:
    """Runs as a reader should see them: output folders in full, and a dead run's open row with
    the status the next run will record."""
    runs = runs.with_columns(
        pl.Series(
            "out_dir", [str(published.folder_of(od, store)) if od else "" for od in runs["out_dir"]], dtype=pl.String
        )
    )
    open_rows = runs.filter(pl.col("status").is_in(["running", "publishing"]))
    if open_rows.height == 0:
        return runs
    held = _lock_held(str(db_path) + ".lock")
    try:
        files = dict((rid, f) for rid, _out, f, _shown in store.rows("runs_publishing"))
    except (StoreError, duckdb.Error):  # a database of version 1 has no files column
        files = {}
    seen = [
        published.display_status(st, Path(od), files.get(rid), lock_held=held)
        for rid, st, od in runs.select("run_id", "status", "out_dir").iter_rows()
    ]
    return runs.with_columns(pl.Series("status", seen, dtype=pl.String))


CONFIG_TEMPLATE_HEADER = """# ddscreen configuration (TOML). Every key is optional; defaults are shown.
# Relative paths are taken from this file's folder. Run:  ddscreen run --config {name}
"""


#: Keys the template shows as a commented example while they keep their default (the file then also
#: loads in versions before the key existed).
TEMPLATE_EXAMPLES = {("reading", "thousands"): '","'}


def init_config(
    path: str, *, overwrite: bool = False, sources: list[str] | None = None, report: list[str] | None = None
) -> Path:
    """Write a commented configuration template with every key and its default.

    With ``sources`` (files, or ``KIND=FILE``) the inputs point at those files, each file's kind
    is taken from its header where not given, and the column mapping that could be inferred is
    written as ``[inputs.columns.KIND]`` tables, every line commented with how it was found, for
    the user to confirm. ``report`` receives one line per file (what was found, what is missing).
    """
    p = Path(path)
    if p.exists() and not overwrite:
        raise ConfigError(f"{p} exists; use --force to overwrite it")
    from .config import DEFAULTS, template_comments

    report = report if report is not None else []
    inputs, blocks = _infer_inputs(sources or [], p, report)
    reading, why = _infer_number_format(sources or [], report)
    lines = [CONFIG_TEMPLATE_HEADER.format(name=p.name)]
    for section, values in DEFAULTS.items():
        lines.append(f"[{section}]")
        for key, value in values.items():
            comment = template_comments().get((section, key), "")
            if section == "inputs" and key in inputs:
                value = inputs[key]
            if section == "reading" and key in reading:
                lines.append(f"{key} = {_toml_value(reading[key])}  # {why}: check it")
                continue
            if isinstance(value, dict):
                lines.append(f"# {key}: your column names → ours, one table per file kind, e.g.")
                lines.append("#   [inputs.columns.readings]")
                lines.append(
                    '#   "Usage" = "quantity"'
                    + ("   (the tables inferred from your files are at the end)" if blocks else "")
                )
                continue
            if value is None:
                lines.append(f"# {key} = 0.37" + (f"  # {comment}" if comment else ""))
                continue
            if (section, key) in TEMPLATE_EXAMPLES and value == DEFAULTS[section][key]:
                lines.append(f"# {key} = {TEMPLATE_EXAMPLES[(section, key)]}" + (f"  # {comment}" if comment else ""))
                continue
            lines.append(f"{key} = {_toml_value(value)}" + (f"  # {comment}" if comment else ""))
        lines.append("")
    if blocks:
        lines.append("# Column mappings inferred from your files' headers: check every line (a run uses them as")
        lines.append("# written and guesses nothing itself), then run:  ddscreen validate --config " + p.name + " ...")
        lines += blocks
    try:
        p.write_text("\n".join(lines), encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"{p}: cannot write ({exc.strerror or exc})") from None
    return p


def _infer_inputs(sources: list[str], cfg_path: Path, report: list[str]) -> tuple[dict[str, str], list[str]]:
    """For ``init --from``: each file's kind and inferred column mapping (TOML blocks)."""
    from . import colmap
    from .config import column_names
    from .csvread import read_header, split_sheet

    inputs: dict[str, str] = {}
    blocks: list[str] = []
    for src in sources:
        kind, sep, file = src.partition("=")
        if not sep or kind.strip().lower() not in column_names():
            kind, file = "", src
        kind = kind.strip().lower()
        if not Path(split_sheet(file)[0]).is_file():
            raise InputError(file, "file not found")
        header = read_header(file)
        if kind:
            sug = colmap.suggest(header, kind)
            missing = colmap.missing_after(header, kind, {t: o for t, o, _ in sug})
        else:
            kind, sug, missing = colmap.best_kind(header)
        if kind in inputs:
            raise ConfigError(
                f"init --from: {inputs[kind]} and {file} both look like {kind} files; give one file "
                "per kind (KIND=FILE to say which), and put a glob in the config for several"
            )
        try:
            book, sheet = split_sheet(file)
            rel = os.path.relpath(Path(book).resolve(), cfg_path.resolve().parent)
            shown = rel + (("#" + sheet) if sheet else "")
        except ValueError:
            shown = str(Path(file).resolve())
        inputs[kind] = shown
        if sug:
            block = colmap.toml_block(kind, sug)
            if missing:
                block += "\n# still missing: " + ", ".join(missing) + " (add a line for each)"
            blocks += [f"# from {file}", block, ""]
        ours = {colmap._key(c) for c in column_names()[kind]}
        mapped = {t for t, _, _ in sug}
        unused = [h for h in header if h.strip() and h not in mapped and colmap._key(h) not in ours]
        report.append(
            f"{file}: read as {kind}; {len(sug)} column(s) mapped"
            + (f"; still missing {', '.join(missing)}" if missing else "")
            + (
                f"; not used (no column of ours matches; add a line if one should be): {', '.join(unused)}"
                if unused
                else ""
            )
        )
    return inputs, blocks


def _infer_number_format(sources: list[str], report: list[str]) -> tuple[dict, str]:
    """For ``init --from``: ``[reading]`` number settings shown by the files' values, with the reason.

    ``1,855.76`` (a comma group before a decimal point) → ``thousands = ","``; ``1.855,76`` →
    ``decimal_comma = true`` and ``thousands = "."``. Values that fit both (``1,485``) decide nothing.
    """
    import polars as pl
    from .csvread import _norm, read_header, read_table

    us = r"^[-+]?[$€£¥]?\s*\d{1,3}(,\d{3})+\.\d+\s*[$€£¥]?$"
    eu = r"^[-+]?[$€£¥]?\s*\d{1,3}(\.\d{3})*\.\d{3},\d+\s*[$€£¥]?$|^[-+]?[$€£¥]?\s*\d+,\d{1,2}\s*[$€£¥]?$"
    seen: dict[str, tuple[Any, str, str] | None] = {"us": None, "eu": None}
    for src in sources:
        file = (
            src.partition("=")[2]
            if "=" in src and src.partition("=")[0].strip().lower() in ("buildings", "readings", "weather")
            else src
        )
        try:
            names = [_norm(h) for h in read_header(file) if _norm(h)]
            t = read_table(file, required=[], optional=list(dict.fromkeys(names)))
        except (InputError, ValueError):
            continue
        for c in t.df.columns:
            if c == "_line" or t.df[c].dtype != pl.String:
                continue
            col = t.df[c].head(5000).drop_nulls()
            for kind, pat in (("us", us), ("eu", eu)):
                hit = col.filter(col.str.contains(pat))
                if hit.len() and seen[kind] is None:
                    seen[kind] = (hit[0], c, file)
    if seen["us"] and not seen["eu"]:
        v, c, f = seen["us"]
        why = f"inferred from values like {v!r} in {c} of {f}"
        report.append(f'[reading] thousands = "," ({why})')
        return {"thousands": ","}, why
    if seen["eu"] and not seen["us"]:
        v, c, f = seen["eu"]
        why = f"inferred from values like {v!r} in {c} of {f}"
        report.append(f'[reading] decimal_comma = true, thousands = "." ({why})')
        return {"decimal_comma": True, "thousands": "."}, why
    return {}, ""


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(v)
