"""A whole run: its three phases under the lock, in order, and what a failure or a stop signal leaves.

The stages themselves are ``stages``, the folder moves ``publish``, the database records ``record``,
the lock ``lock``, the stage bar and test hooks ``progress``.
"""

from __future__ import annotations

import datetime as _dt
import logging
import time
import traceback
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from .. import cluster, config as cfgmod, interrupts, memory, outputs, published
from ..errors import Interrupted, OutputError, ScreeningError
from ..store import Store
from ..window import quarter_label
from . import inputs, publish, record, stages
from .lock import Lock, open_store
from .progress import Progress, stage

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


def setup_file_log(path: Path) -> logging.Handler:
    h = logging.FileHandler(path, encoding="utf-8")
    h.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    h.setLevel(logging.DEBUG)
    log.addHandler(h)
    return h


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
    # the typed settings, built once from the checked dict: every stage below reads these; the dict itself
    # only gives the settings' hash (the run key and the runs table)
    s = cfgmod.settings(cfg)
    config_hash = cfgmod.config_hash(cfg)
    as_of, window = cfgmod.run_window(s)  # ranges checked by cfgmod.load
    label = quarter_label(window[1]) if not s.analysis.window_from else f"{window[0]}_{window[1]}"
    files = {k: inputs.expand(v, k) for k, v in s.inputs.by_kind().items()}
    if s.inputs.events:  # optional (issue 17); read on every run, not stored
        files["events"] = inputs.expand(s.inputs.events, "events")
    db_path = s.store.database
    if out_dir is not None:
        target = Path(out_dir)
        root = None
    else:
        root = Path(s.output.root)
        target = root / label
    publish.check_output_folder(target, root, label, db_path, force=force)

    with interrupts.stop_on_signals(), Lock(str(db_path) + ".lock"):  # SIGINT/SIGTERM -> Interrupted
        bar = Progress(progress and not quiet)
        ex = cluster.from_config(s, db_path)  # [run] cluster: tasks on Dask (None: this process)
        try:
            return _run_locked(
                s,
                config_hash,
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
    cfg: cfgmod.Settings,
    config_hash: str,
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
    bar: Progress | None = None,
    executor: cluster.DaskChunks | None = None,
):
    """The run under the lock, in three phases.

    1. With the database open: settle what dead runs left, check the output folder (a refusal
       changes nothing of the user's), record the run, load the inputs, read what the
       screening needs. 2. With the database closed (``status`` and ``history`` can read it):
       screen and write every output into a temporary folder. 3. With the database open again
       (from the moment the other outputs are written, while ranking.pdf still renders): store the
       results (provisional until the files are recorded), then the files about to be published; rename the folder into place,
       mark the run ``ok``, point ``latest`` and prune. A kill at any point leaves the folder
       and the record in a state the next run settles (``published.settle_dead_runs``).
    """
    bar = bar or Progress(False)
    need = memory.check(
        files,
        cfg.run.chunk_buildings,
        ingest_chunk_mb=cfg.run.ingest_chunk_mb,
        store_memory_mb=cfg.run.store_memory_mb,
        workers=cfg.run.workers,
        threads=cfg.run.threads,
    )  # stops here, nothing changed, if it cannot fit
    t_start = time.perf_counter()
    from ..render import pdf

    # the children's fork server imports its modules while the inputs load (the screening's only for workers)
    pdf.warm_up(screening=cfg.run.workers >= 2)
    # run_key is the one id a user sees (sheets, ranking.pdf, summary.json, stderr, status, history): the
    # same for a rerun of the same quarter, inputs and settings, so reruns stay byte-identical. run_id
    # names this execution in the database and the run log; lookups accept either (record.resolve_run).
    run_id = f"{label}-{_dt.datetime.now().strftime('%Y%m%dT%H%M%S')}-{uuid.uuid4().hex[:6]}"  # one execution
    run_key = record.run_key(label, config_hash, files)  # the id users see
    store: Store | None  # None while the database is closed for readers (the screening phase)
    store = open_store(db_path, memory_mb=cfg.run.store_memory_mb)
    try:
        notes = publish.clean_stale_temp(target, None)
        notes += published.settle_dead_runs(store)  # we hold the lock: a run still open has died
        published.check_target(store, target, label, force=force)
        tmp = publish.make_temp(target)
    except BaseException:
        store.close()
        raise
    handler = setup_file_log(tmp / "run.log")
    timings: dict[str, float] = {}
    publishing = False
    recording: list[Store] = []  # the database, reopened while ranking.pdf renders (phase 3's start)
    try:
        log.info("run %s: window %s to %s, database %s", run_key, window[0], window[1], db_path)
        log.debug("run %s: execution %s", run_key, run_id)
        for n in notes:
            log.warning("%s", n)
        # phase 1: load
        record.insert_run(store, run_id, run_key, label, as_of, window, target, config_hash)
        bar.stage("load inputs")
        ld = stages.load_inputs(store, files, cfg, db_path, run_id, window, force=force, timings=timings)
        store.close()  # phase 2: the database stays free for readers
        store = None
        bar.stage("screen")
        res = stages.screen(ld, files, cfg, db_path, window, executor=executor)
        timings.update(res.timings)
        stage("after_screen")
        bar.stage("write tables")

        def record_meanwhile(rejects: pl.DataFrame) -> None:
            # phase 3 begins: the results and rejects are stored (committed, the run still 'running') on a
            # thread while the output files are written and ranking.pdf renders on its child process
            recording.append(open_store(db_path, memory_mb=cfg.run.store_memory_mb))
            record.store_results(
                recording[0], run_id, stage=record.results_for_store(run_id, res.results), rejects=rejects
            )

        try:
            top, rejects, summary = stages.write_outputs(
                tmp,
                res,
                ld,
                cfg,
                run_key=run_key,
                label=label,
                as_of=as_of,
                window=window,
                timings=timings,
                bar=bar,
                executor=executor,
                meanwhile=record_meanwhile,
            )
        finally:
            store = recording[0] if recording else None  # closed, or its transaction rolled back, on failure
        timings["total"] = round(time.perf_counter() - t_start, 4)
        summary["timings_s"] = timings
        outputs.write_json(record.deterministic(summary), tmp / "summary.json")
        bar.stage("publish")
        log.info("run %s finished in %.1f s", run_key, timings["total"])
        log.removeHandler(handler)
        handler.close()
        # phase 3: record the files about to be published (the results are stored), publish, mark it done
        files_written = published.manifest(tmp)
        assert store is not None  # write_outputs ran record_meanwhile
        record.finish_results(
            store,
            run_id,
            loads=ld.loads,
            events_files=files.get("events") or [],
            summary=summary,
            timings=timings,
            target=target,
            files_written=files_written,
        )
        recording.clear()  # recorded: the results are no longer provisional
        publishing = True
        stage("before_publish")
        publish.publish(tmp, target)
        stage("after_publish")
        record.mark_ok(store, run_id)
        stage("after_record")
        if root is not None:
            publish.tidy_root(root, store, cfg.output.keep, target)
        return RunResult(run_key, label, target, str(db_path), summary, top, ld.loads, execution_id=run_id)
    except BaseException as exc:
        if recording:  # the results were being recorded: nothing of them is kept
            record.abandon_results(recording[0], run_id)
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
        record.record_failure(store, db_path, run_id, exc, timings, publishing=publishing)
        store = None
        publish.keep_failure_log(tmp, target, quiet=expected)
        if mapped:
            raise exc from None
        raise
    finally:
        if store is not None:
            store.close()


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
    :func:`publish.publish` finds the earlier outputs set aside: they are put back. A signal after the
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
    record.record_interrupted(store, db_path, run_id, str(exc), timings, in_place=in_place, publishing=publishing)
    publish.discard_interrupted(tmp, target)
    return exc
