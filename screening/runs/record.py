"""What the database records of runs: a run's row, its results, status and failures; the summary
(summary.json and the run's counts); reading the records back (status, history, a year ago, the
previous quarter) and the change of each building between two runs."""

from __future__ import annotations

import datetime as _dt
import json
import sys
from collections.abc import Iterable, Iterator
from pathlib import Path

import duckdb
import polars as pl

from .. import __version__, config as cfgmod, outputs, pipeline, published
from ..errors import ConfigError, InputError, StoreError
from ..store import Store
from . import inputs, lock


def versions() -> dict:
    """The versions of the tool and of the libraries its results depend on (summary.json). WeasyPrint's
    comes from its installed metadata: importing it only for this took 0.7 s of a run that renders no
    PDF in this process (ranking.pdf renders on a child process)."""
    from importlib.metadata import version

    import numpy

    return {
        "ddscreen": __version__,
        "python": sys.version.split()[0],
        "polars": pl.__version__,
        "duckdb": duckdb.__version__,
        "numpy": numpy.__version__,
        "weasyprint": version("weasyprint"),
    }


def change_table(prev_results: pl.DataFrame | None, results: pl.DataFrame) -> pl.DataFrame:
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


def insert_run(
    store: Store, run_id: str, run_key: str, label: str, as_of, window, target: Path, config_hash: str
) -> None:
    """The run's row, status ``running``, before anything is loaded (``config_hash``: ``config.config_hash``)."""
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
            "config_hash": config_hash,
        },
    )


def store_results(store: Store, run_id: str, *, stage: Iterable[pl.DataFrame], rejects: pl.DataFrame) -> None:
    """Recording a run, first half: the run's results and rejects in one committed transaction, while the
    run is still ``running`` (the run does this while ranking.pdf renders, so the commit, which writes the
    records into the database file, overlaps it). :func:`finish_results` then records the files about to be
    published. Until then the rows are provisional: a failure or a stop removes them
    (:func:`abandon_results`), and a run that died still ``running`` loses them when the next run settles it
    (``published.settle_dead_runs``), so a run that did not reach publishing keeps none of them."""
    with store.transaction():
        store.execute("delete_results_of_run", {"run_id": run_id})
        for piece in stage:  # results_for_store's pieces, built one at a time
            store.execute("insert_results", stage_results=piece)
        store.execute("delete_rejects_of_run", {"run_id": run_id})
        store.execute("insert_rejects", {"run_id": run_id}, stage_rejects=rejects)


def finish_results(
    store: Store,
    run_id: str,
    *,
    loads: list,
    events_files: list[str],
    summary: dict,
    timings: dict,
    target: Path,
    files_written: dict,
) -> None:
    """Recording a run, second half: the files about to be published (status ``publishing``), once its
    results are stored (:func:`store_results`); ``published.settle_dead_runs`` reads them if the run dies
    after this."""
    store.execute(
        "record_publishing",
        {
            "run_id": run_id,
            "input_hashes": json.dumps(
                {f"{fl.kind}:{fl.path}": fl.sha256 for fl in loads} | events_hashes(events_files)
            ),
            "versions": json.dumps(summary["versions"]),
            "timings": json.dumps(timings),
            "counts": json.dumps(summary["counts"]),
            "out_dir": published.folder_key(target, store),
            "files": json.dumps(files_written, sort_keys=True),
        },
    )


def abandon_results(store: Store, run_id: str) -> None:
    """Remove what :func:`store_results` stored for a run that failed or was stopped before
    :func:`finish_results` (nothing of its results or rejects is kept). The database failing here leaves the
    rows to the next run's ``published.settle_dead_runs``."""
    try:
        with store.transaction():
            store.execute("delete_results_of_run", {"run_id": run_id})
            store.execute("delete_rejects_of_run", {"run_id": run_id})
    except (StoreError, duckdb.Error):
        pass


def mark_ok(store: Store, run_id: str) -> None:
    """The run's folder is in place: status ``ok``."""
    store.execute("set_run_status", {"run_id": run_id, "status": "ok", "message": ""})


def record_interrupted(
    store: Store | None, db_path, run_id: str, message: str, timings: dict, *, in_place: bool, publishing: bool
) -> None:
    """Record a run stopped by a signal (reopening the database if the run had closed it): ``ok`` when its
    folder was already in place (its record was complete before the rename), else ``interrupted``."""
    try:
        store = store or lock.open_store(db_path)
        if in_place:
            store.execute("set_run_status", {"run_id": run_id, "status": "ok", "message": ""})
        elif publishing:
            store.execute("set_run_status", {"run_id": run_id, "status": "interrupted", "message": message[:500]})
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
                    "message": message[:500],
                    "out_dir": "",
                },
            )
    except Exception:  # noqa: BLE001 - the database may be what was interrupted; the next run settles it
        pass
    finally:
        if store is not None:
            store.close()


def record_failure(
    store: Store | None, db_path, run_id: str, exc: BaseException, timings: dict, *, publishing: bool
) -> None:
    """Mark a failed run in the database (reopening it if the run had closed it)."""
    try:
        store = store or lock.open_store(db_path)
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


def run_key(label: str, config_hash: str, files: dict[str, list[str]]) -> str:
    """The run's identity: its quarter label and a hash of the input contents, settings
    (``config_hash``: ``config.config_hash`` of the checked config) and version."""
    import hashlib

    h = hashlib.sha256()
    h.update(config_hash.encode())
    h.update(__version__.encode())
    for kind in pipeline.KINDS:
        for p in files.get(kind, []):
            h.update(kind.encode())
            h.update(pipeline.file_sha256(p).encode())
    return f"{label}-{h.hexdigest()[:10]}"


def year_ago(store: Store, window) -> pl.DataFrame | None:
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


#: Buildings whose stored rows are built and inserted at a time: a record is every column of the building as
#: JSON, a few kB, and building them for 10^6 buildings at once took about 10 GB (issue 20).
RECORD_CHUNK = 16_384


def results_for_store(run_id: str, res: pl.DataFrame, rows: int = RECORD_CHUNK) -> Iterator[pl.DataFrame]:
    """The rows of the ``results`` table, ``rows`` buildings at a time (at least one frame, maybe empty):
    the columns the store queries, and ``record``, every column of the building as one JSON object (keys
    sorted), written by :func:`json_records` in the bytes a ``json.dumps(row, default=str, sort_keys=True)``
    per building wrote before (issue 20). A generator: each piece is built when it is inserted.

    The table keeps one row per run and building without a primary-key index (schema version 3): a
    building listed twice is a fault of this program, raised before anything is stored."""
    if res["building_id"].n_unique() != res.height:
        twice = res.filter(pl.col("building_id").is_duplicated())["building_id"].unique().sort()
        raise RuntimeError(f"internal error: building(s) listed twice in the results: {twice.head(3).to_list()}")
    for k in range(0, max(res.height, 1), rows):
        yield _results_rows(run_id, res.slice(k, rows))


def _results_rows(run_id: str, res: pl.DataFrame) -> pl.DataFrame:
    schema = res.schema  # (built anew on every access)
    rec_cols = [c for c in res.columns if schema[c] != pl.Object]
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
    ).with_columns(json_records(res.select(rec_cols)).alias("record"))


#: What ``json.dumps`` (``ensure_ascii``) writes as an escape: a backslash, a quote, anything outside ' '..'~'.
_ESCAPED = r'[\\"]|[^ -~]'
#: A tiny float as polars writes it (positional ``-0.0000123`` or ``1.23e-7``), taken apart.
_TINY_POSITIONAL = r"^(-?)0\.(0*)([1-9])(\d*)$"
_TINY_SCIENTIFIC = r"^(-?\d(?:\.\d+)?)e-(\d+)$"


def json_records(frame: pl.DataFrame) -> pl.Series:
    """One JSON object per row, byte for byte what ``json.dumps(row, default=str, sort_keys=True)`` writes
    for the row's dict (``frame.to_dicts()``), built column by column with polars expressions.

    Per type: strings escaped as ``ensure_ascii`` does (each distinct character that needs it replaced in one
    pass, ``str.replace_many``); floats as Python's ``repr`` (polars' text has the same shortest round-trip
    digits, but writes values below 1e-4 as ``0.000015`` or ``1.5e-7``: those few are rewritten to ``1.5e-05``;
    ``NaN``, ``Infinity``, ``-Infinity``); integers; ``true``/``false``; dates ``"YYYY-MM-DD"``; lists ``[a, b]``
    of those; null ``null``. A column of any other type, and any value whose text these rules cannot vouch for,
    goes through ``json.dumps`` itself.
    """
    cols = sorted(frame.columns)
    schema = frame.schema  # (built anew on every access)
    pats = _escape_table(frame)
    encs = {c: _json_text(pl.col(c), schema[c], pats) for c in cols}
    fast = [enc[0].fill_null("null").alias(c) for c, enc in encs.items() if enc is not None]
    doubts = [enc[1].fill_null(False).alias(f"doubt:{c}") for c, enc in encs.items() if enc and enc[1] is not None]
    out = frame.select(fast + doubts)  # every column at once
    # the columns with a value to check, found in one pass
    anyd = out.select(pl.col(f"doubt:{c}").any() for c in cols if f"doubt:{c}" in out.columns)
    doubtful = {d.removeprefix("doubt:") for d, a in zip(anyd.columns, anyd.row(0) if anyd.width else ()) if a}
    texts: dict[str, pl.Series] = {}
    for c in cols:
        if encs[c] is None:  # a type without a rule: Python's own encoder for the column
            texts[c] = pl.Series(c, [json.dumps(v, default=str, sort_keys=True) for v in frame[c].to_list()])
            continue
        t = out[c]
        if c in doubtful:  # (a few columns: the others have no value to check)
            idx = out[f"doubt:{c}"].arg_true()
            if idx.len():  # the few values the fast rule cannot write: their own rule, else json.dumps
                vals = frame[c].gather(idx)
                fixed = (
                    _tiny_float_text(vals) if vals.dtype.is_float() else pl.Series([None] * idx.len(), dtype=pl.String)
                )
                py = [json.dumps(v, default=str, sort_keys=True) for v in vals.filter(fixed.is_null()).to_list()]
                t = t.scatter(idx, _fill(fixed, py) if py else fixed)
        texts[c] = t
    parts: list[pl.Expr | str] = []
    for i, c in enumerate(cols):
        parts += [pl.lit(("{" if i == 0 else ", ") + json.dumps(c) + ": "), pl.col(c)]
    parts.append(pl.lit("}"))
    return pl.DataFrame(texts).select(pl.concat_str(parts).alias("record")).to_series()


def _fill(fixed: pl.Series, values: list[str]) -> pl.Series:
    """``fixed`` with its nulls replaced, in order, by ``values``."""
    it = iter(values)
    return pl.Series([v if v is not None else next(it) for v in fixed.to_list()], dtype=pl.String)


def _tiny_float_text(x: pl.Series) -> pl.Series:
    """Python's ``repr`` of floats below 1e-4 in magnitude (``1.5e-05``), from polars' text of them
    (``0.000015`` or ``1.5e-5``); null where that text has neither form."""
    text = x.cast(pl.Float64).cast(pl.String)
    pos = [text.str.extract(_TINY_POSITIONAL, i) for i in (1, 2, 3, 4)]
    df = pl.DataFrame({"sign": pos[0], "zeros": pos[1], "digit": pos[2], "rest": pos[3]})
    positional = df.select(
        pl.concat_str(
            [
                "sign",
                "digit",
                pl.when(pl.col("rest") != "").then(pl.lit(".") + pl.col("rest")).otherwise(pl.lit("")),
                pl.lit("e-"),
                (pl.col("zeros").str.len_chars() + 1).cast(pl.String).str.zfill(2),
            ]
        )
    ).to_series()
    scientific = text.str.extract(_TINY_SCIENTIFIC, 1) + "e-" + text.str.extract(_TINY_SCIENTIFIC, 2).str.zfill(2)
    return positional.fill_null(scientific)


def _escape_table(frame: pl.DataFrame) -> tuple[list[str], list[str]]:
    """Every distinct character of the frame's strings that JSON escapes, and its escape."""
    chars: set[str] = set()
    for c, dt in frame.schema.items():
        s = frame[c]
        if dt == pl.List(pl.String):
            s = s.explode()
        elif dt != pl.String:
            continue
        chars.update(x for x in s.str.extract_all(_ESCAPED).explode().drop_nulls().unique().to_list())
    found = sorted(chars)
    return found, [json.dumps(ch)[1:-1] for ch in found]


def _json_text(e: pl.Expr, dtype, pats: tuple[list[str], list[str]]) -> tuple[pl.Expr, pl.Expr | None] | None:
    """The JSON text of a column's values (null where null) and a mask of values to leave to
    ``json.dumps`` (None: none); None for a type without a rule."""
    if dtype == pl.String or isinstance(dtype, (pl.Categorical, pl.Enum)):
        s = e.cast(pl.String)
        if pats[0]:
            s = s.str.replace_many(pats[0], pats[1])
        return pl.concat_str([pl.lit('"'), s, pl.lit('"')]), None
    if dtype == pl.Boolean:
        return pl.when(e).then(pl.lit("true")).when(e.not_()).then(pl.lit("false")), None
    if dtype.is_integer():
        return e.cast(pl.String), None
    if dtype.is_float():
        x = e.cast(pl.Float64)
        out = (
            pl.when(x.is_nan())
            .then(pl.lit("NaN"))
            .when(x == float("inf"))
            .then(pl.lit("Infinity"))
            .when(x == float("-inf"))
            .then(pl.lit("-Infinity"))
            .otherwise(x.cast(pl.String))
        )
        return out, (x.abs() < 1e-4) & (x != 0)  # polars writes these unlike repr: _tiny_float_text
    if dtype == pl.Date:
        return pl.concat_str([pl.lit('"'), e.dt.strftime("%Y-%m-%d"), pl.lit('"')]), (e.dt.year() < 1) | (
            e.dt.year() > 9999
        )
    if isinstance(dtype, pl.List):
        inner = _json_text(pl.element(), dtype.inner, pats)
        if inner is None:
            return None
        text, doubt = inner
        body = e.list.eval(text.fill_null("null")).list.join(", ")
        return pl.concat_str([pl.lit("["), body, pl.lit("]")]), (
            e.list.eval(doubt).list.any() if doubt is not None else None
        )
    if dtype == pl.Null:
        return pl.lit(None, dtype=pl.String), None
    return None


def run_summary(run_id, label, as_of, window, cfg: cfgmod.Settings, res, rejects, loads, prev_id) -> dict:
    r = res.results
    per_tier = {k: int(v) for k, v in r.group_by("tier").len().iter_rows()}
    flags = r.select(pl.col("flag_codes").explode().drop_nulls()).to_series().value_counts(sort=True)
    issues = res.issues.group_by("code").len()
    disp = outputs.Display(cfg.analysis.units)
    ee = r["excess_energy_kbtu"].fill_null(0).sum()
    return {
        "run_id": run_id,
        "label": label,
        "as_of": str(as_of),
        "window": [str(window[0]), str(window[1])],
        "run_date": str(_dt.date.today()),
        "units": cfg.analysis.units,
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
        "versions": versions(),
    }


def deterministic(summary: dict) -> dict:
    """summary.json without the fields that change on every run (kept in the database instead)."""
    s = dict(summary)
    s.pop("timings_s", None)
    s.pop("run_date", None)
    s["inputs"] = [{k: v for k, v in i.items() if k != "status"} for i in s["inputs"]]
    return s


def status(db_path: str, limit: int = 10) -> pl.DataFrame:
    """The last runs recorded in the database, newest first.

    A run whose process died shows as ``interrupted`` (or ``ok`` when it died after its
    folder was in place) before the next run records it so; nothing is written here.
    """
    with lock.read_store(db_path) as store:
        return as_seen(store, db_path, store.frame("list_runs", {"limit": limit}))


def history(
    db_path: str, run_a: str | None = None, run_b: str | None = None, events: list[str] | None = None
) -> tuple[pl.DataFrame, pl.DataFrame | None]:
    """The list of runs, and the difference between two runs (default: the last two successful).

    The difference gains ``events``: per building, the events dated after the older run's window
    and up to the newer run's (issue 17), one text, from ``events`` (paths or globs) or else the
    events files the newer run recorded (when they are still there); null where none.
    """
    with lock.read_store(db_path) as store:
        runs = as_seen(store, db_path, store.frame("list_runs", {"limit": 1000}))
        ok = runs.filter(pl.col("status") == "ok")["run_id"].to_list()
        if run_a is None and run_b is None:
            if len(ok) < 2:
                return runs, None
            run_b, run_a = ok[0], ok[1]
        elif run_a is None or run_b is None:
            raise ConfigError("history: give two run ids (older and newer), or none")
        else:
            run_a, run_b = (resolve_run(store, db_path, rid) for rid in (run_a, run_b))
        old = store.frame("results_of_run", {"run_id": run_a})
        new = store.frame("results_of_run", {"run_id": run_b})
        ((_, end_a),) = store.rows("run_inputs", {"run_id": run_a})
        ((recorded, end_b),) = store.rows("run_inputs", {"run_id": run_b})
    diff = diff_results(old, new)
    paths = (
        [p for pat in events for p in inputs.expand(pat, "events")]
        if events
        else [k.split(":", 1)[1] for k in json.loads(recorded or "{}") if k.startswith("events:")]
    )
    paths = [p for p in paths if Path(p).is_file()]
    if not paths:
        return runs, diff.with_columns(pl.lit(None, dtype=pl.String).alias("events"))
    from .. import events as evmod

    ev, _rej, _notes = evmod.read_all(paths, pipeline.ReadOptions(), None)
    return runs, diff.join(evmod.events_between(ev, end_a, end_b), on="building_id", how="left")


def events_hashes(paths: list[str]) -> dict[str, str]:
    """The events files of a run for its record (``events:<path>`` → sha256), so history can find them."""
    return {f"events:{p}": pipeline.file_sha256(p) for p in paths if Path(p).is_file()}


def resolve_run(store: Store, db_path, rid: str) -> str:
    """The execution a user's run id names: the id shown on the outputs (the run key; its newest
    successful execution, else its newest) or an execution id from the database."""
    rows = store.rows("resolve_run", {"run": rid})
    if not rows:
        raise ConfigError(f"history: no run {rid!r} in {db_path}")
    return rows[0][0]


def as_seen(store: Store, db_path: str, runs: pl.DataFrame) -> pl.DataFrame:
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
    held = lock.lock_held(str(db_path) + ".lock")
    try:
        files = dict((rid, f) for rid, _out, f, _shown in store.rows("runs_publishing"))
    except (StoreError, duckdb.Error):  # a database of version 1 has no files column
        files = {}
    seen = [
        published.display_status(st, Path(od), files.get(rid), lock_held=held)
        for rid, st, od in runs.select("run_id", "status", "out_dir").iter_rows()
    ]
    return runs.with_columns(pl.Series("status", seen, dtype=pl.String))
