"""Read and check the three input files; return canonical frames and every rejected row.

Structural problems (unreadable file, missing column, no data rows) raise
``InputError`` before anything is written. Row-level problems reject the row with
file, line, column, value and reason; the rest go on. Nothing is guessed.
"""

from __future__ import annotations

import datetime as _dt
import re
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from . import refdata, schema
from .csvread import LINE_COL, read_table
from .errors import InputError
from .parse import (
    AmbiguousDates,
    detect_date_order,
    midnight_stamps,
    number_text,
    parse_bool,
    parse_choice,
    parse_date,
    parse_float,
    parse_int,
)
from .schema import ID_PATTERN, REJECT_SCHEMA, specs

USE_TYPES = tuple(schema.USE_TYPES)
FUELS = tuple(schema.FUELS)
_KIND_DTYPE = {
    "id": pl.String,
    "text": pl.String,
    "choice": pl.String,
    "float": pl.Float64,
    "int": pl.Int64,
    "bool": pl.Boolean,
    "date": pl.Date,
}

# Column specifications (csv column, canonical name, kind, required, options), from the declared schema
# (screening/schema.py: types, units, limits, meanings). kind: id | text | choice | float | int | bool | date;
# "si" names the SI->IP conversion (screening/data/si_conversions.csv) applied when the portfolio's units are SI.
BUILDING_COLUMNS = specs("buildings")
READING_COLUMNS = specs("readings")


@dataclass
class ReadOptions:
    """How to read the files: units of the portfolio and spreadsheet conventions."""

    units: str = "IP"
    decimal_comma: bool = False
    date_order: str | None = None
    delimiter: str | None = None
    encoding: str | None = None
    columns: dict[str, dict[str, str]] = field(default_factory=dict)  # [inputs.columns]: kind → {theirs: ours}
    thousands: str = ""  # [reading] thousands: the thousands separator written in numbers
    min_date: _dt.date = _dt.date(1900, 1, 1)
    max_date: _dt.date = field(default_factory=lambda: _dt.date.today() + _dt.timedelta(days=366))
    chunk_bytes: int | None = (
        None  # [run] ingest_chunk_mb: streaming ingest's chunk (None: its default; 0: whole files)
    )


@dataclass
class Loaded:
    """A checked input file: the good rows, the rejected ones, and notices."""

    path: str
    df: pl.DataFrame
    rejects: pl.DataFrame
    notices: list[str]


def empty_rejects() -> pl.DataFrame:
    return pl.DataFrame(schema=REJECT_SCHEMA)


def rejects_frame(rows: list[dict]) -> pl.DataFrame:
    if not rows:
        return empty_rejects()
    return (
        pl.DataFrame(rows, schema=REJECT_SCHEMA, orient="row")
        if isinstance(rows[0], (list, tuple))
        else pl.DataFrame([{k: r.get(k) for k in REJECT_SCHEMA} for r in rows], schema=REJECT_SCHEMA)
    )


def si_factors() -> dict[str, tuple[float, float]]:
    df = refdata.load("si_conversions")
    return {r["quantity"]: (float(r["factor"]), float(r["offset"])) for r in df.iter_rows(named=True)}


#: Amounts of money (a currency symbol is removed, with a notice) and shares (``85%`` is 0.85).
MONEY_COLUMNS = ("cost", "price")
SHARE_COLUMNS = ("heating_efficiency", "window_fraction", "heat_recovery")


def _number_formats(
    s: pl.Series, col: str, label: str, opts: ReadOptions, notices: list[str] | None, tally: dict | None = None
):
    """Currency symbols, percent signs and thousands separators (see :func:`parse.number_text`).

    With ``tally`` the counts are added up there (``(column, what) → n``, a file read in chunks;
    :func:`format_notices` words them at the end) instead of worded into ``notices``.
    """
    text, fmt_problem, counts = number_text(
        s,
        decimal_comma=opts.decimal_comma,
        thousands=opts.thousands,
        money=col in MONEY_COLUMNS,
        share=col in SHARE_COLUMNS,
    )
    if tally is not None:
        for k, n in counts.items():
            tally[(col, k)] = tally.get((col, k), 0) + n
    elif notices is not None:
        notices.extend(format_notices(label, opts, [col], {(col, k): n for k, n in counts.items()}))
    return text, fmt_problem


def format_notices(label: str, opts: ReadOptions, cols: list[str], tally: dict) -> list[str]:
    """The notices of the number formats met in ``cols`` (in that order), from their counts."""
    what = {
        "currency": "currency symbol(s) removed",
        "percent": "percent value(s) read as shares (85% = 0.85)",
        "thousands": f"value(s) read with the thousands separator {opts.thousands!r}",
    }
    return [f"{label}: {col}: {tally[(col, k)]} {what[k]}" for col in cols for k in what if tally.get((col, k))]


def _typed_columns(
    raw: pl.DataFrame,
    spec,
    label: str,
    opts: ReadOptions,
    notices: list[str] | None = None,
    tally: dict | None = None,
    *,
    find_date_order: bool = True,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Parse every column of ``raw`` per ``spec``; return typed frame (all rows) and problems.

    ``tally``: add up the number-format counts there instead of wording notices (see
    :func:`_number_formats`). ``find_date_order`` False: the caller knows ``raw`` holds no slash date
    when ``opts.date_order`` is unset, so there is no day/month order to find (:func:`_file_date_order`)."""
    typed: dict[str, pl.Series] = {}
    problems = []
    factors = si_factors() if opts.units == "SI" else {}
    this_year = _dt.date.today().year
    date_order = opts.date_order or (
        _file_date_order(raw, [c for c, _, k, _, _ in spec if k == "date"]) if find_date_order else None
    )
    for col, canon, kind, required, o in spec:
        s = raw[col]
        if not required and s.null_count() == len(s):  # absent or empty optional column: nothing to check
            typed[canon] = pl.repeat(None, len(s), dtype=_KIND_DTYPE[kind], eager=True).rename(canon)
            continue
        if kind == "id":
            ok = s.str.contains(ID_PATTERN).fill_null(False)
            if bool(ok.all()):  # the usual column: every value a well-formed id
                v, p = s, pl.repeat(None, len(s), dtype=pl.String, eager=True)
            else:
                p = pl.select(
                    pl.when(s.is_not_null() & ~ok)
                    .then(pl.lit("expected 1-64 letters, digits, '-', '_' or '.'"))
                    .otherwise(None)
                ).to_series()
                v = pl.select(pl.when(ok).then(s).otherwise(None)).to_series()
        elif kind == "text":
            # display text loses control characters (never meaningful in a name); keys are kept as written
            v, p = (clean_text(s) if o.get("display") else s), pl.repeat(None, len(s), dtype=pl.String, eager=True)
        elif kind == "choice":
            v, p = parse_choice(s, o["choices"], what=o["what"])
        elif kind in ("float", "int"):
            lo = o.get("min")
            hi = this_year if o.get("max") == "this_year" else o.get("max")
            conv = factors.get(o["si"]) if o.get("si") else None
            if conv is not None:  # bounds are written in IP; check them in the file's own units
                f, off = conv
                lo = None if lo is None else (lo - off) / f
                hi = None if hi is None else (hi - off) / f
            fn = parse_int if kind == "int" else parse_float
            text, fmt_problem = _number_formats(s, col, label, opts, notices, tally)
            v, p = fn(
                text, decimal_comma=opts.decimal_comma, min_value=lo, max_value=hi, min_exclusive=o.get("excl", False)
            )
            if fmt_problem.null_count() < len(fmt_problem):
                p = pl.select(pl.when(fmt_problem.is_not_null()).then(fmt_problem).otherwise(p)).to_series()
                v = pl.select(pl.when(fmt_problem.is_not_null()).then(None).otherwise(v)).to_series()
            if conv is not None:
                v = v * conv[0] + conv[1]
        elif kind == "bool":
            v, p = parse_bool(s)
        elif kind == "date":
            try:
                v, p = parse_date(s, date_order=date_order, min_date=opts.min_date, max_date=opts.max_date)
            except AmbiguousDates as exc:
                slash = s.str.strip_chars().str.contains(r"^\d{1,2}[/.]\d{1,2}[/.]\d{2,4}$").fill_null(False)
                first = raw.filter(slash)[LINE_COL]
                raise InputError(
                    label,
                    str(exc),
                    column=col,
                    line=int(first[0]) if first.len() else None,
                    expected="YYYY-MM-DD dates, or [reading] date_order set",
                ) from None
        else:  # pragma: no cover - spec is static
            raise ValueError(kind)
        if required and s.null_count():
            p = pl.select(pl.when(s.is_null()).then(pl.lit("required value is empty")).otherwise(p)).to_series()
        typed[canon] = v.rename(canon)
        bad = p.is_not_null()
        if bool(bad.any()):  # only the rows with a problem (a frame per column of every row is ~8x the file)
            problems.append(
                pl.DataFrame(
                    {
                        "_line": raw[LINE_COL].filter(bad),
                        "value": s.filter(bad).rename("value"),
                        "reason": p.filter(bad).rename("reason"),
                    }
                ).select("_line", pl.lit(col, dtype=pl.String).alias("column"), "value", "reason")
            )
    typed[LINE_COL] = raw[LINE_COL]
    prob = (
        pl.concat(problems).filter(pl.col("reason").is_not_null())
        if problems
        else pl.DataFrame(schema={"_line": pl.Int64, "column": pl.String, "value": pl.String, "reason": pl.String})
    )
    prob = prob.select(pl.lit(label).alias("file"), pl.col("_line").alias("line"), "column", "value", "reason")
    return pl.DataFrame(typed), prob


def _file_date_order(raw: pl.DataFrame, cols: list[str]) -> str | None:
    """The day/month order shown by all date columns of a file together (None if undecided).

    A column of first-of-month starts (01/03/2024) cannot show the order by itself; the
    end dates of the same file usually do, and one file has one order.
    """
    if len(cols) < 2:
        return None
    return detect_date_order(pl.concat([raw[c] for c in cols]))


def _combine(df: pl.DataFrame, prob: pl.DataFrame, structural: list[dict]) -> tuple[pl.DataFrame, pl.DataFrame]:
    bad_lines = prob["line"].unique()
    good = df.filter(~pl.col(LINE_COL).is_in(bad_lines.implode()))
    rej = pl.concat([rejects_frame(structural), prob.cast(REJECT_SCHEMA)])
    return good, rej


def _read_typed(path: str | Path, spec, opts: ReadOptions, kind: str = "", columns: dict | None = None):
    """Read one file with its column spec: (raw table, typed frame, value problems).

    ``kind`` picks the file's column mapping from ``opts.columns``; the label of messages is
    the table's (``book.xlsx[Sheet]`` for a workbook).
    """
    required = [c for c, _, _, r, _ in spec if r]
    optional = [c for c, _, _, r, _ in spec if not r]
    mapping = dict(opts.columns.get(kind) or {}) | dict(columns or {})
    t = read_table(
        path,
        required=required,
        optional=optional,
        label=str(path),
        delimiter=opts.delimiter,
        encoding=opts.encoding,
        columns=mapping or None,
    )
    label = t.path
    typed, prob = _typed_columns(t.df, spec, label, opts, t.notices)
    return t, typed, prob


def read_buildings(path: str | Path, opts: ReadOptions | None = None) -> Loaded:
    """Read buildings.csv into the canonical buildings frame (IP units).

    Duplicate ``building_id`` rows with identical data are kept once (notice); with
    different data every such row is rejected, naming the lines.
    """
    opts = opts or ReadOptions()
    t, typed, prob = _read_typed(path, BUILDING_COLUMNS, opts, "buildings")
    t.df = t.df.clear()  # the text columns are typed now; free them before the duplicate checks
    label = t.path
    good, rej = _combine(typed, prob, t.rejects)
    notices = list(t.notices)
    good, extra, n_exact = building_duplicates(good, label)
    if extra.height:
        rej = pl.concat([rej, extra])
    if n_exact:
        notices.append(duplicate_notice("buildings", label, n_exact))
    return Loaded(label, good.sort("building_id"), rej.sort("line"), notices)


def duplicate_notice(kind: str, label: str, n: int) -> str:
    """The notice of exact duplicate rows kept once."""
    what = "building" if kind == "buildings" else "reading"
    return f"{label}: {n} exact duplicate {what} row(s) kept once"


def building_duplicates(good: pl.DataFrame, label: str) -> tuple[pl.DataFrame, pl.DataFrame, int]:
    """Rows of one buildings file (in line order) sharing a ``building_id``: identical data kept once,
    different data rejected on every such row. Returns (kept rows, rejects, exact duplicates dropped).

    Only rows whose ``building_id`` appears more than once are touched, so the rows of those ids alone
    (a file read in chunks: :mod:`screening.streaming`) give the same answer for them.
    """
    data_cols = [c for c in good.columns if c != LINE_COL]
    dup = good.filter(pl.col("building_id").is_duplicated())
    if not dup.height:
        return good, empty_rejects(), 0
    distinct = dup.unique(subset=data_cols, keep="first", maintain_order=True)
    conflicted = distinct.filter(pl.col("building_id").is_duplicated())["building_id"].unique()
    conflict_rows = good.filter(pl.col("building_id").is_in(conflicted.implode()))
    lines = conflict_rows.group_by("building_id").agg(pl.col(LINE_COL).sort())
    line_map = {r["building_id"]: r[LINE_COL] for r in lines.iter_rows(named=True)}
    extra = [
        {
            "file": label,
            "line": int(r[LINE_COL]),
            "column": "building_id",
            "value": r["building_id"],
            "reason": "building_id appears with different data on lines "
            + ", ".join(str(x) for x in line_map[r["building_id"]]),
        }
        for r in conflict_rows.sort(LINE_COL).iter_rows(named=True)
    ]
    good = good.filter(~pl.col("building_id").is_in(conflicted.implode()))
    n_before = good.height
    good = good.unique(subset=data_cols, keep="first", maintain_order=True)
    return good, rejects_frame(extra), n_before - good.height


READING_KEY = ["building_id", "fuel", "meter_id", "period_start", "period_end"]
READING_DATA = READING_KEY + ["quantity", "unit", "estimated", "cost"]


def read_readings(path: str | Path, opts: ReadOptions | None = None) -> Loaded:
    """Read readings.csv: one row per meter reading, ``period_end`` inclusive.

    Rows with an end before their start are rejected. Exact duplicate rows are kept
    once (notice); two rows for the same meter and period with different
    quantities are both rejected (they cannot both be right).
    """
    opts = opts or ReadOptions()
    t, typed, prob, read_col = _read_readings_typed(path, opts)
    label = t.path
    if read_col is None:
        typed, stamp_notes = _midnight_ends(t.df, typed, label)
    else:
        typed, prob, stamp_notes = periods_from_reads(typed, prob, label, read_col)
    t.df = t.df.clear()  # the text columns are typed and read now; free them before the duplicate checks
    good, rej = readings_checked(typed, prob, t.rejects, label)
    notices = list(t.notices) + stamp_notes
    good, extra, n_exact = reading_duplicates(good, label)
    if n_exact:
        notices.append(duplicate_notice("readings", label, n_exact))
    if extra.height:
        rej = pl.concat([rej, extra])
    return Loaded(label, good.sort(["building_id", "fuel", "meter_id", "period_start"]), rej.sort("line"), notices)


def readings_checked(
    typed: pl.DataFrame, prob: pl.DataFrame, structural: list[dict], label: str
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Typed readings rows → (good rows, rejects): the values' problems, an end before the start, the
    records' own rejects; each row alone (a chunk of a file gives the same rows as the whole file)."""
    order = typed.filter(pl.col("period_end") < pl.col("period_start")).select(
        pl.lit(label).alias("file"),
        pl.col(LINE_COL).alias("line"),
        pl.lit("period_end").alias("column"),
        pl.col("period_end").cast(pl.String).alias("value"),
        (pl.lit("period ends before it starts (") + pl.col("period_start").cast(pl.String) + pl.lit(")")).alias(
            "reason"
        ),
    )
    prob = pl.concat([prob, order.cast(REJECT_SCHEMA)])
    good, rej = _combine(typed, prob, structural)
    good = good.with_columns(
        pl.col("estimated").fill_null(False), pl.col("meter_id").fill_null(""), pl.col("unit").str.strip_chars()
    )
    return good, rej


def reading_duplicates(good: pl.DataFrame, label: str) -> tuple[pl.DataFrame, pl.DataFrame, int]:
    """Rows of one readings file (in line order) for the same meter and period: exact duplicates kept
    once, different data rejected on every such row. Returns (kept rows, rejects, exact duplicates
    dropped). Only rows whose key (:data:`READING_KEY`) appears more than once are touched."""
    twice = good.select(pl.struct(READING_KEY).is_duplicated()).to_series()
    if not twice.any():
        return good, empty_rejects(), 0
    # a row given twice has its key twice (the key is part of the data): only those rows are compared whole
    rows = good.with_row_index("_row").filter(twice)
    kept = rows.unique(subset=READING_DATA, keep="first", maintain_order=True)
    n_exact = rows.height - kept.height
    conflict = kept.filter(pl.struct(READING_KEY).is_duplicated())
    # the other rows' keys are once in the file: a key twice among the kept rows is twice among all of them
    keep = kept.filter(~pl.struct(READING_KEY).is_duplicated())["_row"]
    good = good.filter(~twice | pl.int_range(pl.len(), dtype=pl.UInt32).is_in(keep.implode()))
    conflict = conflict.drop("_row")
    if not conflict.height:
        return good, empty_rejects(), n_exact
    lines = conflict.group_by(READING_KEY).agg(pl.col(LINE_COL).sort().alias("lines"))
    conflict = conflict.join(lines, on=READING_KEY)
    extra = [
        {
            "file": label,
            "line": int(r[LINE_COL]),
            "column": "quantity",
            "value": str(r["quantity"]),
            "reason": f"same meter and period as line(s) {', '.join(str(x) for x in r['lines'] if x != r[LINE_COL])}"
            " with different data",
        }
        for r in conflict.sort(LINE_COL).iter_rows(named=True)
    ]
    return good, rejects_frame(extra), n_exact


#: A readings file with read dates and no start dates: ``read_date`` (or ``period_end`` alone) ends each period.
READ_DATE_COLUMNS = {
    col: [
        (c if c != "period_end" else col, canon, kind, (req and canon != "period_start"), o)
        for c, canon, kind, req, o in READING_COLUMNS
    ]
    for col in ("read_date", "period_end")
}


def _read_readings_typed(path, opts: ReadOptions):
    """The readings file typed: with ``period_start``, or else with read dates (``read_date`` or
    ``period_end`` alone). Returns (table, typed, problems, the read-date column or None)."""
    try:
        t, typed, prob = _read_typed(path, READING_COLUMNS, opts, "readings")
        return t, typed, prob, None
    except InputError as exc:
        if not (exc.problem == "missing required column" and exc.column == "period_start"):
            raise
        first = exc
    for col in ("read_date", "period_end"):
        try:
            t, typed, prob = _read_typed(path, READ_DATE_COLUMNS[col], opts, "readings")
            return t, typed, prob, col
        except InputError as exc:
            if not (exc.problem == "missing required column" and exc.column == col):
                raise
    raise first


def periods_from_reads(
    typed: pl.DataFrame, prob: pl.DataFrame, label: str, read_col: str
) -> tuple[pl.DataFrame, pl.DataFrame, list[str]]:
    """Bills with a read date only: per meter (building, fuel, meter_id), sorted by read date, each
    period starts the day after the meter's previous read and ends on its read date (inclusive).

    The first read of each meter only opens the record (the period it closes began before the file
    starts): it is rejected with that reason, and a notice gives the count. Rows with a problem in
    another column (a bad quantity) still mark the day of their read.
    """
    key = ["building_id", "fuel", "_m"]
    k = typed.with_columns(pl.col("meter_id").fill_null("").alias("_m"))
    dates = (
        k.filter(
            pl.col("building_id").is_not_null() & pl.col("fuel").is_not_null() & pl.col("period_end").is_not_null()
        )
        .select(*key, "period_end")
        .unique()
        .sort(*key, "period_end")
        .with_columns(pl.col("period_end").shift(1).over(key).alias("_prev"))
    )
    k = k.join(dates, on=key + ["period_end"], how="left", maintain_order="left")
    typed = typed.with_columns((k["_prev"] + pl.duration(days=1)).alias("period_start"))
    first = k.filter(
        pl.col("period_end").is_not_null()
        & pl.col("building_id").is_not_null()
        & pl.col("fuel").is_not_null()
        & pl.col("_prev").is_null()
    )
    opened = first.select(
        pl.lit(label).alias("file"),
        pl.col(LINE_COL).alias("line"),
        pl.lit(read_col).alias("column"),
        pl.col("period_end").cast(pl.String).alias("value"),
        pl.lit(
            "first read of this meter: it opens the record (the period it closes began "
            "before the file's first read); not counted"
        ).alias("reason"),
    )
    prob = pl.concat([prob, opened.cast(REJECT_SCHEMA)])
    notes = [
        f"{label}: read dates without start dates ({read_col}): each period runs from the day after the "
        f"meter's previous read to its read date; {first.height} first read(s) of a meter only open the "
        "record (listed in the rejects)"
    ]
    return typed, prob, notes


def _midnight_ends(raw: pl.DataFrame, typed: pl.DataFrame, label: str) -> tuple[pl.DataFrame, list[str]]:
    """Read midnight timestamps in the period columns explicitly, with a notice saying how.

    A start stamp at 00:00 is that day. An end stamp at 00:00 is either the end of the period as an
    instant (exclusive: the day before is the last day covered) or a spreadsheet's date-with-time
    export of the inclusive last day. The file tells which: when the stamped ends of the file equal
    the start of the same meter's next period more often than the day before it, they are exclusive
    and moved back one day; otherwise they are read as the last day covered.
    """
    notes: list[str] = []
    s_st, e_st = midnight_stamps(raw["period_start"]), midnight_stamps(raw["period_end"])
    n_s, n_e = int(s_st.sum()), int(e_st.sum())
    if n_s:
        notes.append(
            f"{label}: {n_s} period_start value(s) are timestamps at midnight (e.g. "
            f"{raw['period_start'].filter(s_st)[0].strip()!r}); read as that day"
        )
    if not n_e:
        return typed, notes
    on = ["building_id", "fuel", "meter_id"]
    k = typed.with_columns(pl.col("meter_id").fill_null(""), e_st.alias("_e_st"))
    starts = k.select(*on, pl.col("period_start").alias("_next"), pl.lit(True).alias("_hit")).drop_nulls().unique()
    k = k.join(
        starts.rename({"_hit": "_excl"}),
        left_on=on + ["period_end"],
        right_on=on + ["_next"],
        how="left",
        maintain_order="left",
    )
    k = k.with_columns((pl.col("period_end") + pl.duration(days=1)).alias("_d1")).join(
        starts.rename({"_hit": "_incl"}),
        left_on=on + ["_d1"],
        right_on=on + ["_next"],
        how="left",
        maintain_order="left",
    )
    k = k.with_columns(
        (pl.col("_e_st") & pl.col("_excl").fill_null(False)).alias("_excl"),
        (pl.col("_e_st") & pl.col("_incl").fill_null(False)).alias("_incl"),
    )
    # per meter: the relation its stamped ends show; a meter that shows neither follows the file
    per = k.group_by(on).agg(pl.col("_excl").sum().alias("_ne"), pl.col("_incl").sum().alias("_ni"))
    file_excl = int(per["_ne"].sum()) > int(per["_ni"].sum())
    per = per.with_columns(
        pl.when(pl.col("_ne") > pl.col("_ni"))
        .then(True)
        .when(pl.col("_ne") < pl.col("_ni"))
        .then(False)
        .otherwise(file_excl)
        .alias("_exclusive")
    )
    k = k.join(per.select(*on, "_exclusive"), on=on, how="left", maintain_order="left")
    move = (k["_e_st"] & k["_exclusive"]).fill_null(False)
    n_move, n_keep = int(move.sum()), n_e - int(move.sum())
    typed = typed.with_columns(
        pl.when(move)
        .then(pl.col("period_end") - pl.duration(days=1))
        .otherwise(pl.col("period_end"))
        .alias("period_end")
    )
    if n_move:
        n_eq = int((move & k["_excl"]).sum())
        notes.append(
            f"{label}: {n_move} period_end value(s) are timestamps at midnight (e.g. "
            f"{raw['period_end'].filter(move)[0].strip()!r}) on meters whose end stamp equals the start "
            f"of the next period ({n_eq} do): read as exclusive ends, so the day before is the last day "
            "covered"
        )
    if n_keep:
        keep = e_st & ~move
        notes.append(
            f"{label}: {n_keep} period_end value(s) are timestamps at midnight (e.g. "
            f"{raw['period_end'].filter(keep)[0].strip()!r}) not equal to the start of the meter's next "
            "period: read as the last day covered (inclusive); write plain dates YYYY-MM-DD to avoid "
            "this notice"
        )
    return typed, notes


_SAFE_TEXT = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def clean_text(s: pl.Series) -> pl.Series:
    """Remove control characters (never meaningful in a name) from display text."""
    return s.str.replace_all(_SAFE_TEXT.pattern, "")
