"""The run's stages: load the inputs (database open), screen (database closed), write every output
into the temporary folder. The order under the lock, publishing and recording are the callers'
(``phases``, ``publish``, ``record``)."""

from __future__ import annotations

import datetime as _dt
import logging
import os
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import polars as pl

from .. import cluster, outputs, pipeline
from ..config import Settings
from ..errors import InputError
from ..ingest import REJECT_SCHEMA
from ..store import Store
from . import inputs, record
from .progress import Progress, stage

log = logging.getLogger("ddscreen")


@dataclass
class Loaded:
    """What the load stage read from the store for the screening and the outputs."""

    loads: list[pipeline.FileLoad]
    in_chunks: bool  # each chunk's readings are pulled from the store (inputs.StoreReadings)
    stored: dict[str, pl.DataFrame]  # inputs.stored_inputs; "readings" is popped when screened
    load_rejects: pl.DataFrame
    previous: pl.DataFrame | None  # results of the run about a year earlier (record.year_ago)
    prev: list  # the latest successful run of an earlier quarter: [(run_id, run_key)] or []
    prev_results: pl.DataFrame | None
    events: pl.DataFrame | None = None  # issue 17: the events files, read on every run
    events_rejects: pl.DataFrame | None = None
    then: Any = None  # events.audits_then
    plan_context: Any = None  # events.plan_context


def load_inputs(
    store: Store, files: dict, cfg: Settings, db_path, run_id: str, window, *, force, timings: dict
) -> Loaded:
    """Load the named files into the store (new or changed ones only) and read what the screening needs."""
    opts = pipeline.read_options(cfg)
    t = time.perf_counter()
    loads = pipeline.load_inputs(
        store,
        files,
        opts,
        force=force,
        log=log.info,
        workers=workers(cfg.run.workers),
        threads=workers(cfg.run.threads, "threads"),
    )
    timings["ingest"] = round(time.perf_counter() - t, 4)
    for fl in loads:
        log.info("%s %s: %s (%d rows, %d rejected)", fl.kind, fl.path, fl.status, fl.rows, fl.rejected)
        for n in fl.notices:
            log.warning("%s", n)
    stage("after_load")
    in_chunks = inputs.readings_in_chunks(store, cfg, db_path, int(store.rows("count_buildings")[0][0]))
    stored = inputs.stored_inputs(store, readings=not in_chunks)
    b, w = stored["buildings"], stored["weather"]
    if w.height == 0:
        raise InputError(files["weather"][0], "no usable weather rows", expected="daily station data")
    load_rej = store.frame("select_load_rejects")
    previous = record.year_ago(store, window)
    prev = store.rows("previous_quarter_ok_run", {"run_id": run_id})
    prev_results = store.frame("results_of_run", {"run_id": prev[0][0]}) if prev else None
    ld = Loaded(loads, in_chunks, stored, load_rej, previous, prev, prev_results)
    if files.get("events"):  # issue 17: read on every run; what earlier runs said of the audited buildings
        from .. import events as evmod

        ld.events, ld.events_rejects, ev_notes = evmod.read_all(files["events"], opts, b["building_id"])
        for n in ev_notes:
            log.warning("%s", n)
        ld.then = evmod.audits_then(store, ld.events)
        ld.plan_context = evmod.plan_context(
            ld.events,
            ld.then,
            window_end=window[1],
            rest_quarters=cfg.plan.clean_audit_rest_quarters,
            regrow=cfg.plan.clean_audit_regrow,
            blackout_days=cfg.savings.blackout_days,
            window_start=window[0],
            judge_min_days=cfg.savings.post_measure_min_days,
        )
    return ld


def screen(
    ld: Loaded, files: dict, cfg: Settings, db_path, window, *, executor: cluster.DaskChunks | None = None
) -> pipeline.Screened:
    """The whole computation on the loaded frames (``pipeline.screen_frames``), the database closed."""
    paths = {"buildings": files["buildings"][0], "readings": files["readings"][0]}
    # the readings frame is passed, not kept here, so screening can free it once checked; or each
    # chunk's readings come from the store (many buildings, one readings file)
    src = inputs.StoreReadings(str(db_path), cfg.run.store_memory_mb) if ld.in_chunks else None
    try:
        return pipeline.screen_frames(
            ld.stored["buildings"],
            src if src is not None else ld.stored.pop("readings"),
            ld.stored["weather"],
            cfg,
            window=window,
            paths=paths,
            previous=ld.previous,
            events=ld.events,
            plan_context=ld.plan_context,
            chunk_buildings=cfg.run.chunk_buildings,
            executor=executor,
            keep_periods=cfg.output.sheets,
            workers=workers(cfg.run.workers),
            threads=workers(cfg.run.threads, "threads"),
        )
    finally:
        if src is not None:
            src.close()


class Beside:
    """``fn(*args)`` on a thread of its own while this one goes on (the recording beside the output files).
    :meth:`result` waits for it in short steps, so a stop signal still reaches this (the main) thread, and
    returns its duration [s] or raises its exception; :meth:`settle` only waits, for the clean-up after a
    failure here: the caller must not use the thread's database connection before it ended."""

    def __init__(self, fn: Callable[..., None], *args: Any) -> None:
        self._error: BaseException | None = None
        self._seconds = 0.0

        def call() -> None:
            t = time.perf_counter()
            try:
                fn(*args)
            except BaseException as exc:  # handed to the main thread by result()
                self._error = exc
            self._seconds = time.perf_counter() - t

        self._thread = threading.Thread(target=call, name="ddscreen-record", daemon=True)
        self._thread.start()

    def settle(self) -> None:
        stop: BaseException | None = None
        while self._thread.is_alive():
            try:
                self._thread.join(0.05)
            except BaseException as exc:  # a stop signal: raised once the thread is done with the database
                stop = stop or exc
        if stop is not None:
            raise stop

    def result(self) -> float:
        self.settle()
        if self._error is not None:
            raise self._error
        return round(self._seconds, 4)


def write_outputs(
    tmp: Path,
    res: pipeline.Screened,
    ld: Loaded,
    cfg: Settings,
    *,
    run_key: str,
    label: str,
    as_of,
    window,
    timings: dict,
    bar: Progress,
    executor: cluster.DaskChunks | None = None,
    meanwhile: Callable[[pl.DataFrame], None] | None = None,
) -> tuple[list[dict], pl.DataFrame, dict]:
    """Every output file but summary.json into ``tmp``; returns the first visits of the audit plan
    (:func:`first_visits`), the rejects and the summary. ``meanwhile(rejects)`` (the run records its results)
    runs on a thread (:class:`Beside`) from the moment the rejects are known, beside the other files, and is
    waited for before ranking.pdf, which renders on its child process meanwhile; if this fails, it is waited
    for before the exception goes on."""
    rejects = outputs.rejects_table(
        pl.concat(
            [
                ld.load_rejects.cast(REJECT_SCHEMA),
                ld.stored["rejects"].cast(REJECT_SCHEMA),
                res.rejects.cast(REJECT_SCHEMA),
            ]
            + ([ld.events_rejects.cast(REJECT_SCHEMA)] if ld.events_rejects is not None else [])
        )
    )
    disp = outputs.Display(cfg.analysis.units)
    change = record.change_table(ld.prev_results, res.results)
    # the results are recorded on a thread beside the tables, the workbook, the sheets and the page (polars
    # and DuckDB work outside the GIL); joined before ranking.pdf is waited for
    recorder = Beside(meanwhile, rejects) if meanwhile is not None else None
    try:
        events, then = ld.events, ld.then
        ranking = outputs.ranking_table(res.results, disp, change)
        plan = outputs.audit_plan_table(res.results, disp)
        book_max = cfg.output.workbook_max_buildings
        with_book = 0 < ranking.height <= book_max
        prev = ld.prev
        summary = record.run_summary(
            run_key, label, as_of, window, cfg, res, rejects, ld.loads, prev[0][1] if prev else None
        )
        if res.learning is not None:  # learning from audits (issue 17): the defaults' bias per era x use type
            from .. import learning

            summary["audit_bias"] = learning.bias_summary(res.learning, cfg.learning.min_audits)
        savings_csv = None
        if res.savings is not None:  # savings after a measure (issue 17)
            from .. import events as evmod

            savings_csv = evmod.savings_table(
                res.savings, si=disp.si, currency=cfg.prices.currency, kbtu_to_kwh=outputs.KBTU_TO_KWH
            )
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
        if not with_book:
            why = workbook_left_out(ranking.height, book_max)
            summary["files_left_out"] = {"ranking.xlsx": why}
            log.warning("ranking.xlsx not written: %s", why)
        paper = cfg.output.paper
        paper = ("A4" if disp.si else "Letter") if paper == "auto" else paper
        from ..render import pdf

        # ranking.pdf renders on a child process from here, while this one writes the tables, the workbook,
        # the sheets and the page (and a thread stores the results)
        t_ranking = time.perf_counter()
        ranking_pdf = pdf.Background(
            pdf.render_ranking,
            outputs.ranking_report(
                ranking,
                res.results,
                summary,
                disp,
                currency=cfg.prices.currency,
                max_rows=cfg.output.ranking_pdf_rows,
                savings=savings_csv,
            ),
            tmp / "ranking.pdf",
            paper=paper,
        )
        try:
            t = time.perf_counter()
            outputs.write_csv(ranking, tmp / "ranking.csv")
            outputs.write_csv(plan, tmp / "audit_plan.csv")
            outputs.write_csv(rejects, tmp / "rejects.csv")
            outputs.write_csv(res.issues.sort("building_id", "code"), tmp / "data_issues.csv")
            assumptions = None  # the table is kept only for the workbook; else written a piece at a time
            if with_book:
                assumptions = outputs.assumptions_table(res.envelope, disp)
                outputs.write_csv(assumptions, tmp / "assumptions.csv")
            else:
                outputs.write_assumptions_csv(res.envelope, disp, tmp / "assumptions.csv")
            if not cfg.output.sheets:  # after assumptions.csv only the sheets read the envelope (3.9 kB a building)
                res.envelope = res.envelope.clear()
            if savings_csv is not None:
                outputs.write_csv(savings_csv, tmp / "savings.csv")
            timings["csv"] = round(time.perf_counter() - t, 4)
            if with_book and assumptions is not None:
                from ..xlsxout import write_ranking_xlsx

                t = time.perf_counter()
                write_ranking_xlsx(
                    tmp / "ranking.xlsx",
                    ranking=ranking,
                    issues=res.issues.sort("building_id", "code"),
                    rejects=rejects,
                    assumptions=assumptions,
                    disp=disp,
                    currency=cfg.prices.currency,
                    plan=plan,
                )
                timings["xlsx"] = round(time.perf_counter() - t, 4)
            sheet_files = _sheets(tmp, res, ld, cfg, disp, run_key, paper, timings, bar, executor)
            stage("after_sheets")
            from ..webpage import write_index

            t = time.perf_counter()
            write_index(
                tmp / "index.html",
                ranking=ranking,
                results=res.results,
                plan=plan,
                summary=summary,
                disp=disp,
                currency=cfg.prices.currency,
                sheet_files=sheet_files,
                max_rows=cfg.output.page_rows,
                workbook=with_book,
            )
            timings["index"] = round(time.perf_counter() - t, 4)
            top = first_visits(ranking, cfg.prices.currency)
            del ranking  # 1 kB a building (ranking.csv's frame), let go before the wait for the recording
            # the stored inputs (0.3-0.4 kB a building) and a previous run's results are not read again
            ld.stored.clear()
            ld.previous = ld.prev_results = None
            if recorder is not None:
                t = time.perf_counter()
                timings["record_meanwhile"] = recorder.result()
                timings["record_waited"] = round(time.perf_counter() - t, 4)
            bar.stage("render ranking")
            t = time.perf_counter()
            ranking_pdf.result()
        except BaseException:
            ranking_pdf.cancel()
            raise
        # [s] what ranking.pdf added after everything else, and how long it ran in all (it overlapped the rest)
        timings["ranking_pdf"] = round(time.perf_counter() - t, 4)
        timings["ranking_pdf_started_s"] = round(time.perf_counter() - t_ranking, 4)
        return top, rejects, summary
    except BaseException:
        if recorder is not None:
            recorder.settle()  # the caller then abandons what it stored, on this thread
        raise


def first_visits(ranking: pl.DataFrame, currency: str, n: int = 5) -> list[dict]:
    """The first ``n`` visits of this quarter's audit plan, for the console."""
    return (
        ranking.filter(pl.col("tier") == "Audit first")
        .head(n)
        .select(
            "rank",
            "building_id",
            "name",
            "tier",
            "ratio",
            "needs_review",
            "expected_recoverable_cost",
            pl.lit(currency).alias("currency"),
        )
        .to_dicts()
    )


def workbook_left_out(buildings: int, limit: int) -> str:
    """Why ranking.xlsx was not written (run.log and summary.json ``files_left_out``)."""
    if limit == 0:
        return "[output] workbook_max_buildings = 0; the CSV files hold every table"
    return (
        f"{buildings:,} buildings is more than [output] workbook_max_buildings = {limit:,} "
        "(a workbook this large is slow to write and to open); the CSV files hold every table"
    )


def _sheets(tmp, res, ld, cfg: Settings, disp, run_key, paper, timings, bar, executor) -> dict[str, str] | None:
    """One PDF sheet per building into ``tmp/sheets`` and sheets_index.csv, when ``[output] sheets``;
    returns building_id -> its sheet relative to the folder, or None."""
    from ..render import filenames, pdf

    if not cfg.output.sheets:
        return None
    events = ld.events
    bar.stage("render sheets")
    t = time.perf_counter()
    since = None
    if res.savings is not None and res.savings_periods is not None and events is not None:
        from .. import events as evmod

        since = evmod.since_measure(
            res.savings,
            res.savings_periods,
            events,
            si=disp.si,
            currency=cfg.prices.currency,
            kbtu_to_kwh=outputs.KBTU_TO_KWH,
        )
    sheets = outputs.sheet_records(
        res.results,
        res.envelope,
        res.periods,
        disp,
        run_id=run_key,
        run_date=str(_dt.date.today()),
        currency=cfg.prices.currency,
        since_measure=since,
    )
    (tmp / "sheets").mkdir()
    names = filenames.assign_filenames([s.building_id for s in sheets])
    pdf.render_sheets(
        sheets,
        tmp / "sheets",
        paper=paper,
        workers=workers(cfg.output.workers),
        chunk_runner=executor.render_chunks if executor is not None else None,
    )
    timings["sheets"] = round(time.perf_counter() - t, 4)
    sheet_files = {b: f"sheets/{v}.pdf" for b, v in names.items()}
    outputs.write_csv(
        pl.DataFrame({"building_id": list(sheet_files), "file": list(sheet_files.values())}),
        tmp / "sheets_index.csv",
    )
    return sheet_files


def workers(wanted: int, name: str = "workers") -> int:
    """Processes (``[output] workers``: sheet renderers; ``[run] workers``: chunks checked and screened side by
    side) or threads (``[run] threads``: chunks screened side by side): as configured, at most one per core
    of this machine."""
    cores = os.cpu_count() or 1
    if wanted > cores:
        log.info("%s = %d capped to the %d core(s) of this machine", name, wanted, cores)
    return max(1, min(wanted, cores))
