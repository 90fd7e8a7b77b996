"""Metered heating energy: comparison spans, calendarization, reading issues, and the
variable-base degree-day regression that splits the heating fuel into heating and baseload.

Layer 1: polars/numpy in, polars/numpy out; no I/O. Degree days come in as arrays computed by
the caller (``screening.degree_days``); nothing here depends on that module.

Pipeline order (the lead's wiring)::

    conv, rejects = units.convert_to_kbtu(readings, buildings)
    spans   = choose_spans(conv, window_start, window_end, building_ids=buildings["building_id"])
    issues  = reading_issues(conv, spans)
    periods = fit_periods(conv, spans)                      # the bills the regression may use
    period_hdd = <engine>.period_totals(stations, periods.period_start, periods.period_end, "hdd")
    result  = metered_heating(conv, spans, buildings, periods=periods, period_hdd=period_hdd,
                              span_hdd=..., normal_hdd=..., base_grid_f=..., efficiency=...,
                              engineering_base_f=...)

Conventions: dates are inclusive (``period_end`` is the last day covered); energies [kBtu];
degree days [°F·day]; temperatures [°F]. Readings of the building's heating fuel are those with
``is_heating_fuel`` true (added by :func:`screening.units.convert_to_kbtu`); when that column is
absent every reading given is taken as heating fuel. An optional ``meter_id`` column keeps the
reads of different meters apart when looking for overlaps.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Sequence
from datetime import date, timedelta
from typing import Any, cast

import numpy as np
import polars as pl
import polars.selectors as cs

from . import refdata
from .schema import issue_codes
from .window import add_months as _add_months

#: degree days of the billing periods at every base: the (periods × bases) array, or a callable
#: returning its rows for an index array (see :func:`metered_heating`); a callable with an ``out``
#: keyword (``f(rows, out=array)``, as ``pipeline._PeriodHdd``) fills a buffer the caller reuses
PeriodHdd = np.ndarray | Callable[..., np.ndarray]


def _fills_out(f: Callable) -> bool:
    """Whether the callable ``f`` takes an ``out`` keyword (see :data:`PeriodHdd`)."""
    try:
        return "out" in inspect.signature(f).parameters
    except (TypeError, ValueError):
        return False


#: issue codes and whether each blocks a verdict on the building
#: (declared with their plain text in :data:`screening.schema.DATA_ISSUES`)
ISSUE_CODES = issue_codes("metered")
# (a span other than the analysis window is a flag, ``shifted_span`` in schema.FLAGS, not a data issue)

_SPAN_SCHEMA = pl.Schema(
    {
        "building_id": pl.String,
        "span_start": pl.Date,
        "span_end": pl.Date,
        "span_kind": pl.String,
        "coverage": pl.Float64,
        "span_days": pl.Int64,
        "covered_days": pl.Int64,
        "filled_days": pl.Int64,
    }
)

_ISSUE_SCHEMA = pl.Schema({"building_id": pl.String, "code": pl.String, "detail": pl.String, "blocking": pl.Boolean})


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------


def _heat(readings: pl.DataFrame, *columns: str | pl.Expr) -> pl.DataFrame:
    """The heating-fuel readings (all without ``is_heating_fuel``); only ``columns`` (names or expressions)
    when given, chosen before the rows are filtered (the other columns are not copied)."""
    if "is_heating_fuel" not in readings.columns:
        return readings.select(*columns) if columns else readings
    if not columns:
        return readings.filter(pl.col("is_heating_fuel"))
    return readings.select(*columns).filter(readings["is_heating_fuel"])


def _id_series(building_ids: Sequence[str] | pl.Series) -> pl.Series:
    """``building_ids`` as a String series named building_id (a String series as it is, not via a list)."""
    if isinstance(building_ids, pl.Series) and building_ids.dtype == pl.String:
        return building_ids.alias("building_id")
    return pl.Series("building_id", list(building_ids), dtype=pl.String)


def _require(df: pl.DataFrame, name: str, cols: Sequence[str]) -> None:
    missing = [c for c in cols if c not in df.columns]
    if missing:
        raise ValueError(f"{name}: missing column(s) {missing}")


def _month_end(d: date) -> date:
    return date(d.year + (d.month == 12), d.month % 12 + 1, 1) - timedelta(days=1)


def _lookback_start(col: str, months: int) -> pl.Expr:
    """First day of the ``months`` calendar months ending on ``col`` (inclusive)."""
    return pl.col(col).dt.offset_by(f"-{int(months)}mo") + pl.duration(days=1)


def _ordinal(col: str) -> pl.Expr:
    return pl.col(col).cast(pl.Date).cast(pl.Int64)


def _group_rank(df: pl.DataFrame, by: Sequence[str]) -> np.ndarray:
    """Rank (0, 1, …) of each row's ``by`` group in a frame sorted by ``by``: a new rank where the keys change."""
    change = np.zeros(df.height, dtype=bool)
    for c in by:  # (each key's runs, a change in any: the runs of the keys together, nulls equal)
        rid = df[c].rle_id().to_numpy()
        change[1:] |= rid[1:] != rid[:-1]
    return np.cumsum(change, dtype=np.int64)


def _run_max(x: np.ndarray, grp: np.ndarray) -> np.ndarray:
    """Running maximum of integers ``x`` within each group (``grp`` non-decreasing ranks, rows sorted by
    group): the rank times a stride above any ``x`` is added, so one cumulative maximum over all rows
    never reaches back into the previous group."""
    if x.size == 0:
        return x.copy()
    lo = int(x.min())
    stride = int(x.max()) - lo + 2
    return np.maximum.accumulate(grp * stride + (x - lo)) - grp * stride + lo


def _prev_run_max(df: pl.DataFrame, by: Sequence[str], col: str) -> pl.Series:
    """``pl.col(col).cum_max().shift(1).over(by)`` of a frame sorted by ``by`` whose ``col`` (a date or
    integer): the maximum of the group's earlier rows, null on each group's first row (with nulls in
    ``col``, polars' own window)."""
    if df[col].null_count():
        return df.select(pl.col(col).cum_max().shift(1).over(list(by))).to_series()
    x = df[col].to_physical().cast(pl.Int64).to_numpy()
    grp = _group_rank(df, by)
    prev = np.empty(x.size, dtype=np.int64)
    first = np.ones(x.size, dtype=bool)
    if x.size:
        prev[1:] = _run_max(x, grp)[:-1]
        prev[0] = 0
        first[1:] = grp[1:] != grp[:-1]
    out = pl.Series(col, prev).cast(df.schema[col])
    return pl.select(pl.when(pl.lit(pl.Series(first))).then(None).otherwise(pl.lit(out))).to_series().alias(col)


def strictly_sorted(df: pl.DataFrame, keys: Sequence[str], *, ties: bool = False) -> bool:
    """Whether every row of ``df`` comes after the one before it in the order of ``keys`` (ascending, no
    nulls in them; ``ties``: or has the same keys): then ``df.sort(keys)`` is ``df`` itself (with
    ``ties``, up to the order of rows with the same keys), so a caller may skip the sort.

    One pass over the rows, no sort: numbers and dates are compared with the previous row; a text key
    only where it changes (its runs' first values compared with each other's: a few thousand building
    ids, not a comparison of text per row).
    """
    n = df.height
    if n < 2:
        return True
    if any(df[k].null_count() for k in keys) or not all(
        df.schema[k] in (pl.String, pl.Date, pl.Int64, pl.Int32, pl.UInt32, pl.Boolean) for k in keys
    ):
        return False
    after = np.zeros(n - 1, dtype=bool)  # row i+1 after row i on the keys so far
    same = np.ones(n - 1, dtype=bool)  # row i+1 with row i's keys so far
    for k in keys:
        col = df[k]
        if col.dtype == pl.String:
            rid = col.rle_id().to_numpy()
            eq = rid[1:] == rid[:-1]
            change = np.flatnonzero(~eq)
            first = col.gather(np.concatenate([[0], change + 1]))  # each run's value
            gt = np.zeros(n - 1, dtype=bool)
            gt[change] = (first.slice(1) > first.slice(0, first.len() - 1)).to_numpy()
        else:
            x = col.to_physical().to_numpy()
            gt, eq = x[1:] > x[:-1], x[1:] == x[:-1]
        after |= same & gt
        same &= eq
        if not same.any():
            break
    return bool((after | same).all() if ties else after.all())


def sort_rows(df: pl.DataFrame, keys: Sequence[str]) -> pl.DataFrame:
    """``df.sort(keys)``, without the sort when the rows are in that order already (:func:`strictly_sorted`):
    the frame then comes back as a sort leaves it, in one chunk, its first key flagged sorted (polars
    sums a float column over groups in an order that depends on both, so the results are the same to
    the bit)."""
    keys = list(keys)
    if strictly_sorted(df, keys):
        return df.rechunk().with_columns(pl.col(keys[0]).set_sorted())
    return df.sort(keys)


def _merged_intervals(r: pl.DataFrame, by: Sequence[str] = ("building_id",)) -> pl.DataFrame:
    """Each building's (each ``by`` group's) reading periods merged into disjoint day intervals
    ``_s.._e`` (ordinals), columns ``*by, _s, _e``.

    Periods that overlap or touch become one interval, so a day read twice is counted once. Rows
    sorted by ``by, _s, _e``; an interval starts where a group starts or where ``_s`` lies beyond
    one day after the running maximum of the group's earlier ends (a running maximum per group:
    the group's rank times a stride above any ordinal is added, so one cumulative maximum over all
    rows never reaches back into the previous group).
    """
    by = list(by)
    o = r.select(*by, _ordinal("period_start").alias("_s"), _ordinal("period_end").alias("_e")).filter(
        pl.col("_s") <= pl.col("_e")
    )
    if not strictly_sorted(o, [*by, "_s", "_e"], ties=True):  # (rows with the same keys are the same rows)
        o = o.sort([*by, "_s", "_e"])
    s = o["_s"].to_numpy()
    e = o["_e"].to_numpy()
    if s.size == 0:
        return o
    grp = _group_rank(o, by)
    run_max = _run_max(e, grp)  # cum max of _e within group
    new = np.empty(s.size, dtype=bool)
    new[0] = True
    new[1:] = (grp[1:] != grp[:-1]) | (s[1:] > run_max[:-1] + 1)
    starts = np.flatnonzero(new)
    return (
        o.select(by)
        .gather(starts)
        .with_columns(
            pl.Series("_s", s[starts], dtype=o.schema["_s"]),
            pl.Series("_e", np.maximum.reduceat(e, starts), dtype=o.schema["_e"]),
        )
    )


def _covered_days(
    g: np.ndarray, s: np.ndarray, e: np.ndarray, qg: np.ndarray, qs: np.ndarray, qe: np.ndarray
) -> np.ndarray:
    """Days of each query ``[qs, qe]`` (day ordinals, inclusive) inside the intervals of its group ``qg``.

    ``g, s, e``: disjoint intervals ``[s, e]`` sorted by group ``g`` (integers) and start. With
    ``C(t)`` the days of the group's intervals up to day ``t`` (the running total of whole interval
    lengths before the last interval starting on or before ``t``, plus that interval's days up to
    ``t``), the answer is ``C(qe) − C(qs − 1)``: the sum over the intervals of
    ``max(0, min(e, qe) − max(s, qs) + 1)``, in integers (exact), by one binary search per end.
    """
    out = np.zeros(qg.size, dtype=np.int64)
    if s.size == 0 or qg.size == 0:
        return out
    lo, hi = int(s.min()), int(e.max())
    stride = hi - lo + 3
    key = g * stride + (s - lo + 1)
    before = np.concatenate([[0], np.cumsum(e - s + 1)])  # days of the intervals before interval i
    first = np.searchsorted(g, qg, side="left")  # the query group's first interval (or where it would be)

    def upto(t: np.ndarray) -> np.ndarray:
        t = np.clip(t, lo - 1, hi)
        i = np.searchsorted(key, qg * stride + (t - lo + 1), side="right") - 1
        mine = i >= first  # an interval of the group starts on or before t
        ic = np.maximum(i, 0)
        return np.where(mine, before[ic] + np.minimum(t, e[ic]) - s[ic] + 1, before[first])

    out[:] = upto(qe) - upto(qs - 1)
    return out


def _union_coverage(
    r: pl.DataFrame, spans: pl.DataFrame, keys: Sequence[str], by: Sequence[str] = ("building_id",)
) -> pl.DataFrame:
    """Days of each span covered by at least one reading (overlaps counted once).

    ``r``: ``by, period_start, period_end``; ``spans``: ``keys`` (including ``by``, by default
    building_id; one row per keys), ``span_start, span_end``. Returns ``keys, covered_days`` for every
    span row, in the spans' order.

    The readings are first merged into disjoint intervals per ``by`` group (usually one or a few);
    each span's days are then counted from the running total of its group's interval lengths
    (:func:`_covered_days`): no join of spans with intervals.
    """
    keys, by = list(keys), list(by)
    m = _merged_intervals(r, by)
    sp = spans.select(*keys, _ordinal("span_start").alias("_ss"), _ordinal("span_end").alias("_se"))
    if sp["_ss"].null_count() or sp["_se"].null_count():
        raise ValueError("spans: span_start and span_end must not be null")
    g = _group_rank(m, by)
    starts = np.flatnonzero(np.r_[True, g[1:] != g[:-1]]) if g.size else np.zeros(0, dtype=np.int64)
    firsts = m.select(by)[starts].with_columns(pl.Series("_g", g[starts]))  # each group's keys and rank
    qg = sp.select(by).join(firsts, on=by, how="left", maintain_order="left")["_g"].fill_null(-1).to_numpy()
    cov = _covered_days(
        g,
        m["_s"].to_numpy(),
        m["_e"].to_numpy(),
        qg,
        sp["_ss"].to_numpy(),
        sp["_se"].to_numpy(),
    )
    return sp.select(keys).with_columns(pl.Series("covered_days", cov, dtype=pl.Int64))


# --------------------------------------------------------------------------------------------
# spans
# --------------------------------------------------------------------------------------------


def _end_to_fill(
    r: pl.DataFrame,
    ids: pl.DataFrame,
    window_start: date,
    window_end: date,
    fill_end_days: int,
    merged: tuple[np.ndarray, np.ndarray, np.ndarray],
) -> np.ndarray:
    """Days to fill at the window's end [day] for each building of ``ids`` (``building_id, _i``, its
    position), 0 for none: buildings whose reads cover every day of the window up to their last read,
    which ends 1 to ``fill_end_days`` days before ``window_end``. ``merged``: the reads merged into
    intervals, ``(_i, _s, _e)`` arrays as :func:`_covered_days` takes them."""
    out = np.zeros(ids.height, dtype=np.int64)
    if fill_end_days <= 0:
        return out
    last = (
        r.filter(pl.col("period_start") <= window_end)
        .group_by("building_id")
        .agg(pl.col("period_end").max().alias("span_end"))
        .filter(
            (pl.col("span_end") >= window_start)
            & (pl.col("span_end") < window_end)
            & (pl.col("span_end") >= window_end - timedelta(days=fill_end_days))
        )
        .join(ids, on="building_id", how="inner")
    )
    epoch = date(1970, 1, 1)
    i = last["_i"].to_numpy().astype(np.int64)
    end = last.select(_ordinal("span_end")).to_series().to_numpy()
    start = np.full(i.size, (window_start - epoch).days, dtype=np.int64)
    whole = _covered_days(*merged, i, start, end) == end - start + 1
    out[i[whole]] = (window_end - epoch).days - end[whole]
    return out


def choose_spans(
    readings: pl.DataFrame,
    window_start: date,
    window_end: date,
    *,
    lookback_months: int = 24,
    min_coverage: float = 0.9,
    building_ids: Sequence[str] | pl.Series | None = None,
    fill_end_days: int = 0,
) -> pl.DataFrame:
    """Pick, per building, the 12 months over which metered and expected use are compared.

    Rule (foundation issue, "Analysis window"; issue 14 for the filled end), applied to the
    heating-fuel readings:

    1. ``window``: the analysis window ``[window_start, window_end]`` when the readings cover
       every day of it, or every day of it but the last ``filled_days`` (1 to ``fill_end_days``):
       bills read a few days before the window's end. Those days are filled later from the
       building's own weather fit (:func:`metered_heating`), so metered and expected use still
       cover the same days;
    2. ``shifted``: otherwise the latest span of 12 whole calendar months (365 or 366 days, from
       the 1st of a month to the last day of the month 11 months later) that the readings cover on
       every day, ending on or before ``window_end`` and starting on or after
       ``window_end − lookback_months + 1 day``;
    3. otherwise the candidate (window first, then latest first) with the highest coverage: kind
       ``window`` or ``shifted`` as above if that coverage ≥ ``min_coverage``, else the analysis
       window with kind ``uncovered``.

    Parameters
    ----------
    readings : pl.DataFrame
        ``building_id, period_start, period_end`` (and ``is_heating_fuel``, see module notes).
    window_start, window_end : date
        The analysis window, inclusive.
    lookback_months : int
        How far back before ``window_end`` a shifted span may start [months]; at least 12.
    min_coverage : float
        Lowest covered share of a span's days accepted when no span is fully covered, in (0, 1].
    building_ids : sequence of str, optional
        Every building to return a span for (those without readings get ``uncovered``, coverage 0);
        default the buildings present in ``readings``.
    fill_end_days : int
        Most days at the window's end that may lack a reading for rule 1 [day]; 0 = none.

    Returns
    -------
    pl.DataFrame
        ``building_id, span_start, span_end, span_kind, coverage, span_days, covered_days,
        filled_days``, one row per building, sorted by building_id. ``coverage`` = covered_days /
        span_days [-]; ``filled_days`` the days at the span's end to be filled (0 but for rule 1).
    """
    if window_end < window_start:
        raise ValueError(f"window_end={window_end} is before window_start={window_start}")
    if lookback_months < 12:
        raise ValueError(f"lookback_months={lookback_months!r} must be at least 12")
    if not (0.0 < min_coverage <= 1.0):
        raise ValueError(f"min_coverage={min_coverage!r} must be in (0, 1]")
    if fill_end_days < 0:
        raise ValueError(f"fill_end_days={fill_end_days!r} must be at least 0")
    _require(readings, "readings", ("building_id", "period_start", "period_end"))
    r = _heat(readings, "building_id", "period_start", "period_end")
    ids = _id_series(building_ids) if building_ids is not None else r["building_id"].unique()
    ids = ids.unique().sort()

    earliest = _add_months(window_end, -lookback_months) + timedelta(days=1)
    cands = [(0, window_start, window_end)]
    end = _month_end(window_end)
    k = 1
    while True:
        if end <= window_end:
            start = _add_months(end + timedelta(days=1), -12)
            if start < earliest:
                break
            if (start, end) != (window_start, window_end):
                cands.append((k, start, end))
                k += 1
        end = date(end.year, end.month, 1) - timedelta(days=1)
    # every building × candidate as (buildings, candidates) arrays: days covered (the merged reads'
    # running totals, _covered_days), days to fill (the window only), coverage
    epoch = date(1970, 1, 1)
    c_start = np.array([(c[1] - epoch).days for c in cands], dtype=np.int64)
    c_end = np.array([(c[2] - epoch).days for c in cands], dtype=np.int64)
    n_b, n_c = ids.len(), len(cands)
    pos = pl.DataFrame({"building_id": ids}).with_row_index("_i")
    m = _merged_intervals(r).join(pos, on="building_id", how="inner", maintain_order="left")
    merged = (m["_i"].to_numpy().astype(np.int64), m["_s"].to_numpy(), m["_e"].to_numpy())
    bi = np.repeat(np.arange(n_b, dtype=np.int64), n_c)
    covered = _covered_days(*merged, bi, np.tile(c_start, n_b), np.tile(c_end, n_b)).reshape(n_b, n_c)
    span_days = c_end - c_start + 1
    coverage = covered / span_days
    filled = np.zeros((n_b, n_c), dtype=np.int64)
    filled[:, 0] = _end_to_fill(r, pos, window_start, window_end, fill_end_days, merged)
    # the first fully covered candidate, else the best covered (the first of equals); a coverage under
    # min_coverage is the window, uncovered
    full = covered + filled == span_days
    rows = np.arange(n_b)
    has_full = full.any(axis=1)
    pick = np.where(has_full, np.argmax(full, axis=1), np.argmax(coverage, axis=1))
    ok = coverage[rows, pick] >= min_coverage
    kc = np.where(ok, pick, 0)
    kind = np.where(ok, np.where(pick == 0, "window", "shifted"), "uncovered")
    out = pl.DataFrame(
        {
            "building_id": ids,
            "span_start": pl.Series(c_start[kc], dtype=pl.Int32).cast(pl.Date),
            "span_end": pl.Series(c_end[kc], dtype=pl.Int32).cast(pl.Date),
            "span_kind": pl.Series(kind, dtype=pl.String),
            "coverage": coverage[rows, kc],
            "span_days": span_days[kc],
            "covered_days": covered[rows, kc],
            "filled_days": np.where(ok & has_full, filled[rows, kc], 0),
        }
    )
    return sort_rows(out.select(list(_SPAN_SCHEMA)).cast(_SPAN_SCHEMA), ["building_id"])


# --------------------------------------------------------------------------------------------
# calendarization
# --------------------------------------------------------------------------------------------


def _rows_in(keys: pl.Series, *tables: pl.Series) -> list[np.ndarray] | None:
    """For each element of ``keys``, the row of each of ``tables`` holding the same value, -1 for none (nor
    for a null); None when a table holds a looked-up value twice. Looked up once per run of equal keys
    (rows come grouped by building), not once per row; the runs' values matched by a join, as a join
    matches them, all tables in one query."""
    if keys.len() == 0:
        return [np.zeros(0, dtype=np.int64) for _ in tables]
    new = run_starts(keys.to_frame(), [keys.name])
    starts, rid = np.flatnonzero(new), np.cumsum(new) - 1
    name = keys.name
    q = keys.gather(starts).to_frame(name).lazy()
    for i, t in enumerate(tables):
        q = q.join(t.alias(name).to_frame().lazy().with_row_index(f"_k{i}"), on=name, how="left", maintain_order="left")
    runs = q.select(pl.col(f"_k{i}").cast(pl.Int64).fill_null(-1) for i in range(len(tables))).collect()
    if runs.height != starts.size:  # (a table with a value twice: a row per match)
        return None
    return [runs[f"_k{i}"].to_numpy()[rid] for i in range(len(tables))]


def _with_spans(r: pl.DataFrame, spans: pl.DataFrame, maintain_order: Any = "none") -> pl.DataFrame:
    """``r.join(spans, on="building_id", how="inner")`` where ``spans`` has one row per building: the rows of
    ``r`` whose building has a span, in ``r``'s order, with the span's other columns.

    The building of each run of equal ids in ``r`` (readings come grouped by building) is looked up
    once (:func:`_rows_in`), not once per row. A building's rows keep their order, as in the join, so
    sums over (building, fuel) groups are the same to the bit; ``spans`` with a building twice: the
    join itself (with ``maintain_order``).
    """
    found = _rows_in(r["building_id"], spans["building_id"])
    if found is None:
        return r.join(spans, on="building_id", how="inner", maintain_order=maintain_order)
    pos = found[0]
    keep = pos >= 0
    if not keep.all():
        r, pos = r.filter(pl.Series(keep)), pos[keep]
    return r.with_columns(spans[c].gather(pos) for c in spans.columns if c != "building_id")


def base_per_period(periods: pl.DataFrame, met: pl.DataFrame, envelope: pl.DataFrame) -> np.ndarray:
    """The base [°F] of each billing period's degree days at the fit, rows in ``periods`` order: its
    building's fitted base (``met.fitted_base_f``, :func:`metered_heating`) where finite, else the
    building's engineering balance point (``envelope.balance_point_f``); NaN for a building in
    neither. ``met`` and ``envelope`` hold a building once (else their left joins, as before)."""
    found = _rows_in(periods["building_id"], met["building_id"], envelope["building_id"])
    if found is None:
        fb = periods.select("building_id").join(
            met.select("building_id", "fitted_base_f"), on="building_id", how="left", maintain_order="left"
        )
        fb = fb.join(
            envelope.select("building_id", "balance_point_f"), on="building_id", how="left", maintain_order="left"
        )
        fitted, bal = fb["fitted_base_f"].fill_null(np.nan).to_numpy(), fb["balance_point_f"].to_numpy()
    else:
        # each table's values with a NaN after them: row -1 (no such building) reads the NaN
        fitted = np.append(met["fitted_base_f"].fill_null(np.nan).to_numpy(), np.nan)[found[0]]
        bal = np.append(envelope["balance_point_f"].fill_null(np.nan).to_numpy(), np.nan)[found[1]]
    return np.where(np.isfinite(fitted), fitted, bal)


def _cum_lookup(weights: pl.DataFrame, q: pl.DataFrame, date_col: str, prefix: str) -> pl.DataFrame:
    """Cumulative weight and day count up to and including ``q[date_col]`` per building."""
    q = q.with_row_index("_qi").sort(date_col)
    j = q.join_asof(
        weights, left_on=date_col, right_on="date", by="building_id", strategy="backward", check_sortedness=False
    )  # sorted by date above
    return j.sort("_qi").select(
        pl.col("_cw").fill_null(0.0).alias(f"{prefix}_w"), pl.col("_cn").fill_null(0).alias(f"{prefix}_n")
    )


def calendarize(
    readings: pl.DataFrame,
    spans: pl.DataFrame,
    *,
    method: str = "days",
    daily_weights: pl.DataFrame | None = None,
    heating_only: bool = False,
) -> pl.DataFrame:
    """Prorate every reading to its building's span and sum per building and fuel.

    ``part = E × overlap_days / days`` (method ``"days"``), or
    ``part = E × Σ_overlap w_d / Σ_reading w_d`` (method ``"degree_days"``, w_d the day's heating
    degree days), the usual ways of assigning billing-period use to calendar periods
    (e.g. ASHRAE Guideline 14 annex on utility-bill data; degree-day weighting suits heating
    fuels because a period's use follows its degree days). A reading whose weights are missing
    for any of its days, or sum to zero (a summer bill), falls back to days.

    Parameters
    ----------
    readings : pl.DataFrame
        Converted readings: ``building_id, fuel, period_start, period_end, energy_kbtu`` [kBtu],
        ``days`` and optionally ``is_heating_fuel``.
    spans : pl.DataFrame
        ``building_id, span_start, span_end`` (see :func:`choose_spans`).
    method : {"days", "degree_days"}
    heating_only : bool
        Only the heating fuels' rows (``is_heating_fuel``): the others are not prorated (each row of the
        result depends on its own building and fuel only, so the heating rows are the same).
    daily_weights : pl.DataFrame, optional
        Required for ``"degree_days"``: ``building_id, date, weight`` with the day's heating degree
        days at the building's base [°F·day] (any non-negative daily weight works), one row per
        building and day, covering the days of the readings.

    Returns
    -------
    pl.DataFrame
        One row per building and fuel with a reading overlapping the span: ``building_id, fuel,
        is_heating_fuel, span_start, span_end, energy_kbtu`` [kBtu in the span], ``n_reads``,
        ``covered_days, span_days, coverage`` [-] (days covered by that fuel's reads, overlaps
        counted once) and ``dd_prorated_share`` [-] (energy share prorated by degree days; 0 for
        ``"days"``). Sorted by building_id, fuel. For full coverage the parts of every reading that
        lies inside the span sum to its energy (energy is conserved).
    """
    if method not in ("days", "degree_days"):
        raise ValueError(f"method={method!r} must be 'days' or 'degree_days'")
    _require(readings, "readings", ("building_id", "fuel", "period_start", "period_end", "energy_kbtu"))
    _require(spans, "spans", ("building_id", "span_start", "span_end"))
    r = readings
    if "days" not in r.columns:
        r = r.with_columns(((_ordinal("period_end") - _ordinal("period_start")) + 1).alias("days"))
    if "is_heating_fuel" not in r.columns:
        r = r.with_columns(pl.lit(True).alias("is_heating_fuel"))
    cols = ("building_id", "fuel", "is_heating_fuel", "period_start", "period_end", "energy_kbtu", "days")
    j = (
        _with_spans(
            _heat(r, *cols) if heating_only else r.select(*cols), spans.select("building_id", "span_start", "span_end")
        )
        .with_columns(
            pl.max_horizontal("period_start", "span_start").alias("_os"),
            pl.min_horizontal("period_end", "span_end").alias("_oe"),
        )
        .filter(pl.col("_os") <= pl.col("_oe"))
        .with_columns(((_ordinal("_oe") - _ordinal("_os")) + 1).alias("_od"))
    )
    part_days = pl.col("energy_kbtu") * pl.col("_od") / pl.col("days")
    if method == "days":
        j = j.with_columns(part_days.alias("_part"), pl.lit(False).alias("_by_dd"))
    else:
        if daily_weights is None:
            raise ValueError("method='degree_days' needs daily_weights (building_id, date, weight)")
        _require(daily_weights, "daily_weights", ("building_id", "date", "weight"))
        if daily_weights.filter(pl.col("weight") < 0).height:
            raise ValueError("daily_weights: weight must be non-negative")
        w = (
            daily_weights.select("building_id", pl.col("date").cast(pl.Date), pl.col("weight").cast(pl.Float64))
            .unique(["building_id", "date"], keep="first")
            .sort(["building_id", "date"])
            .with_columns(
                pl.col("weight").cum_sum().over("building_id").alias("_cw"),
                pl.int_range(1, pl.len() + 1).over("building_id").alias("_cn"),
            )
            .drop("weight")
            .sort("date")
        )
        q = j.select(
            "building_id",
            pl.col("period_end").alias("_d1"),
            (pl.col("period_start") - pl.duration(days=1)).alias("_d2"),
            pl.col("_oe").alias("_d3"),
            (pl.col("_os") - pl.duration(days=1)).alias("_d4"),
        )
        parts = [_cum_lookup(w, q.select("building_id", c), c, c) for c in ("_d1", "_d2", "_d3", "_d4")]
        j = pl.concat([j, *parts], how="horizontal").with_columns(
            (pl.col("_d1_w") - pl.col("_d2_w")).alias("_wr"),
            (pl.col("_d1_n") - pl.col("_d2_n")).alias("_nr"),
            (pl.col("_d3_w") - pl.col("_d4_w")).alias("_wo"),
        )
        use_dd = (pl.col("_nr") == pl.col("days")) & (pl.col("_wr") > 0)
        j = j.with_columns(
            pl.when(use_dd)
            .then(pl.col("energy_kbtu") * pl.col("_wo") / pl.col("_wr"))
            .otherwise(part_days)
            .alias("_part"),
            use_dd.alias("_by_dd"),
        )
    agg = j.group_by("building_id", "fuel").agg(
        pl.col("is_heating_fuel").first(),
        pl.col("span_start").first(),
        pl.col("span_end").first(),
        pl.col("_part").sum().alias("energy_kbtu"),
        pl.len().cast(pl.Int64).alias("n_reads"),
        (pl.col("_part").filter(pl.col("_by_dd")).sum() / pl.col("_part").sum())
        .fill_nan(0.0)
        .alias("dd_prorated_share"),
    )
    keyed = agg.select("building_id", "fuel", "span_start", "span_end")
    cov = _union_coverage(  # (the reads that overlap the span: the others add no day of it)
        j.select("building_id", "fuel", "period_start", "period_end"),
        keyed,
        ["building_id", "fuel"],
        by=["building_id", "fuel"],
    )
    out = (
        agg.join(cov, on=["building_id", "fuel"], how="left")
        .with_columns(((_ordinal("span_end") - _ordinal("span_start")) + 1).alias("span_days"))
        .with_columns((pl.col("covered_days") / pl.col("span_days")).alias("coverage"))
    )
    return out.select(
        "building_id",
        "fuel",
        "is_heating_fuel",
        "span_start",
        "span_end",
        "energy_kbtu",
        "n_reads",
        "covered_days",
        "span_days",
        "coverage",
        "dd_prorated_share",
    ).sort(["building_id", "fuel"])


# --------------------------------------------------------------------------------------------
# reading issues
# --------------------------------------------------------------------------------------------


def reading_issues(
    readings: pl.DataFrame,
    spans: pl.DataFrame,
    *,
    lookback_months: int = 24,
    min_coverage: float = 0.9,
    max_estimated_share: float = 1 / 3,
    block: int = 16384,
) -> pl.DataFrame:
    """Data issues of each building's readings (see :func:`_reading_issues`), ``block`` buildings at a time.

    Every issue concerns one building, so the blocks' results are those of one pass over all
    buildings; the blocks only bound the memory of the joins and sorts (5 million readings at once
    took about 1.5 GB).
    """
    _require(readings, "readings", ("building_id", "fuel", "period_start", "period_end"))
    _require(spans, "spans", ("building_id", "span_start", "span_end"))
    kw: dict[str, Any] = {
        "lookback_months": lookback_months,
        "min_coverage": min_coverage,
        "max_estimated_share": max_estimated_share,
    }
    if spans.height <= block:
        return _reading_issues(readings, spans, **kw)
    ids = spans["building_id"]
    parts = []
    for a in range(0, spans.height, block):
        sp = spans.slice(a, block)
        r = readings.filter(pl.col("building_id").is_in(ids.slice(a, block).implode()))
        parts.append(_reading_issues(r, sp, **kw))
    return pl.concat(parts).sort(["building_id", "code"])


def prev_max(value: pl.Expr, first: pl.Expr, *, inclusive: bool = False) -> pl.Expr:
    """The running maximum of ``value`` (an integer, such as a day ordinal, ``|value| < 2**31``) over the
    earlier rows of its group, null on the group's first row (``inclusive``: over the rows up to this one).

    The rows must be sorted by group, ``first`` true on each group's first row (row 0 included): the same
    as ``value.cum_max().shift(1).over(group)``, as one pass without a grouping (the group's running
    number lifts its values above every earlier group's).
    """
    lift = first.cast(pl.Int64).cum_sum() * 2**32 + 2**31
    run = value.cast(pl.Int64) + lift
    if inclusive:
        return run.cum_max() - lift
    return pl.when(~first).then(run.cum_max().shift(1) - lift)


def run_starts(df: pl.DataFrame, keys: Sequence[str], also: np.ndarray | None = None) -> np.ndarray:
    """True on each row whose ``keys`` differ from the previous row's (row 0 included; runs of equal values,
    nulls equal), or where ``also`` is true: :func:`group_starts` as a numpy mask, from polars' run ids."""
    new = np.zeros(df.height, dtype=bool) if also is None else also.copy()
    new[:1] = True
    for c in keys:
        rid = df[c].rle_id().to_numpy()
        new[1:] |= rid[1:] != rid[:-1]
    return new


def group_starts(cols: Sequence[str]) -> pl.Expr:
    """True on each row whose ``cols`` differ from the previous row's (row 0 included; nulls compare equal)."""
    return (pl.int_range(pl.len()) == 0) | pl.any_horizontal(*[pl.col(c).ne_missing(pl.col(c).shift(1)) for c in cols])


def _reading_issues(
    readings: pl.DataFrame,
    spans: pl.DataFrame,
    *,
    lookback_months: int = 24,
    min_coverage: float = 0.9,
    max_estimated_share: float = 1 / 3,
) -> pl.DataFrame:
    """Data issues of each building's readings, each naming the dates concerned.

    Scopes: duplicates and overlaps are looked for among all fuels' reads that end within the
    ``lookback_months`` before the span end (the bills the regression may use); gaps, estimated
    reads and coverage among the heating-fuel reads overlapping the span. Codes and whether they
    block a verdict are in :data:`ISSUE_CODES`. ``max_estimated_share`` (default one third) is our
    own threshold.

    Returns
    -------
    pl.DataFrame
        ``building_id, code, detail, blocking``, one row per building and code, the dates of
        every occurrence joined with "; " in ``detail``; sorted by building_id, code.
    """
    _require(readings, "readings", ("building_id", "fuel", "period_start", "period_end"))
    _require(spans, "spans", ("building_id", "span_start", "span_end"))
    sp = spans.select(
        "building_id", "span_start", "span_end", *[c for c in ("span_kind", "coverage") if c in spans.columns]
    )
    sp = sp.with_columns(_lookback_start("span_end", lookback_months).alias("_lb"))
    line = "_line" if "_line" in readings.columns else ("line" if "line" in readings.columns else None)
    r = readings.select(
        "building_id",
        "fuel",
        "period_start",
        "period_end",
        (pl.col(line).cast(pl.Int64) if line else pl.lit(None, pl.Int64)).alias("_ln"),
        (pl.col("meter_id").cast(pl.String) if "meter_id" in readings.columns else pl.lit(""))
        .fill_null("")
        .alias("_meter"),
        (
            pl.col("estimated").cast(pl.Boolean).fill_null(False) if "estimated" in readings.columns else pl.lit(False)
        ).alias("_est"),
        (pl.col("is_heating_fuel") if "is_heating_fuel" in readings.columns else pl.lit(True)).alias("_heat"),
    )
    # (a left join, its unmatched rows dropped by the filters below: quicker than an inner join)
    r = r.join(
        sp.select("building_id", "span_start", "span_end", "_lb"), on="building_id", how="left", maintain_order="left"
    )
    rng = pl.format("{}..{}", "period_start", "period_end")
    parts: list[pl.DataFrame] = []

    # duplicates and overlaps: one sort by meter and dates puts a read's duplicates next to it
    keys = ["building_id", "fuel", "_meter"]
    same = [*keys, "period_start", "period_end"]
    hist = (
        r.filter((pl.col("period_end") >= pl.col("_lb")) & (pl.col("period_start") <= pl.col("span_end")))
        .select(*same, "_ln")
        .sort(same)
        .with_columns(group_starts(keys).alias("_k0"), ~group_starts(same).alias("_again"))
    )
    # only the reads that share their key get a line list (most keys occur once)
    dup = (
        hist.filter(pl.col("_again") | pl.col("_again").shift(-1).fill_null(False))
        .group_by(same)
        .agg(pl.len().alias("_n"), pl.col("_ln").sort().cast(pl.String).str.join(", ").alias("_lines"))
        .filter(pl.col("_n") > 1)
        .with_columns(pl.format("{} {} read {} times (lines {})", "fuel", rng, "_n", "_lines").alias("detail"))
        .select("building_id", pl.lit("duplicate_reads").alias("code"), "detail", "period_start")
    )
    parts.append(dup)
    ov = (
        hist.filter(~pl.col("_again"))
        .with_columns(prev_max(_ordinal("period_end"), pl.col("_k0")).alias("_prev_end"))
        .filter(pl.col("_prev_end") >= _ordinal("period_start"))
        .rechunk()  # (polars 2.1's format panics on columns chunked unlike each other)
        .with_columns(pl.col("_prev_end").cast(pl.Int32).cast(pl.Date))
        .with_columns(pl.format("{} {} overlaps a read ending {}", "fuel", rng, "_prev_end").alias("detail"))
        .select("building_id", pl.lit("overlapping_reads").alias("code"), "detail", "period_start")
    )
    parts.append(ov)
    del hist

    # the heating-fuel reads overlapping the span, clipped to it as _s.._e (day ordinals), in date order
    c = (
        r.filter(
            pl.col("_heat")
            & (pl.col("period_end") >= pl.col("span_start"))
            & (pl.col("period_start") <= pl.col("span_end"))
        )
        .select(
            "building_id",
            "period_start",
            "period_end",
            "_est",
            _ordinal("span_start").alias("_ss"),
            _ordinal("span_end").alias("_se"),
            pl.max_horizontal(_ordinal("period_start"), _ordinal("span_start")).alias("_s"),
            pl.min_horizontal(_ordinal("period_end"), _ordinal("span_end")).alias("_e"),
        )
        .sort(["building_id", "_s", "_e"])
        .with_columns(group_starts(["building_id"]).alias("_b0"))
        .with_columns(
            prev_max(pl.col("_e"), pl.col("_b0")).alias("_pe"),
            prev_max(pl.col("_e"), pl.col("_b0"), inclusive=True).alias("_emax"),
            pl.int_range(pl.len(), dtype=pl.Int64).alias("_i"),
            pl.col("_est").cast(pl.Int64).cum_sum().alias("_ecum"),
        )
    )
    del r
    # each building's last read: its reads counted from the running totals
    last = c.filter(pl.col("building_id").ne_missing(pl.col("building_id").shift(-1)).fill_null(True)).select(
        "building_id",
        "_ss",
        "_se",
        "_emax",
        (pl.col("_i") - pl.col("_i").shift(1).fill_null(-1)).alias("_n"),
        (pl.col("_ecum") - pl.col("_ecum").shift(1).fill_null(0)).alias("_ne"),
    )
    many = last.filter(pl.col("_ne") / pl.col("_n") > max_estimated_share).select("building_id", "_n", "_ne")
    if many.height:
        d = (
            c.join(many.select("building_id"), on="building_id", how="semi")
            .group_by("building_id")
            .agg(
                pl.format("{}..{}", "period_start", "period_end")
                .filter(pl.col("_est"))
                .sort()
                .str.join(", ")
                .alias("_d")
            )
        )
        est = (
            many.join(d, on="building_id", how="left")
            .rechunk()
            .with_columns(pl.format("{} of {} reads in the span estimated: {}", "_ne", "_n", "_d").alias("detail"))
            .select(
                "building_id",
                pl.lit("many_estimated_reads").alias("code"),
                "detail",
                pl.lit(None, pl.Date).alias("period_start"),
            )
        )
        parts.append(est)

    # gaps: stretches of the span with no heating-fuel read, as [gap_start, gap_end] (day ordinals)
    inner = c.filter(pl.col("_pe").is_not_null() & (pl.col("_s") > pl.col("_pe") + 1)).select(
        "building_id", (pl.col("_pe") + 1).alias("_gs"), (pl.col("_s") - 1).alias("_ge")
    )
    lead = c.filter(pl.col("_b0") & (pl.col("_s") > pl.col("_ss"))).select(
        "building_id", pl.col("_ss").alias("_gs"), (pl.col("_s") - 1).alias("_ge")
    )
    tail = last.filter(pl.col("_emax") < pl.col("_se")).select(
        "building_id", (pl.col("_emax") + 1).alias("_gs"), pl.col("_se").alias("_ge")
    )
    day = lambda e: e.cast(pl.Int32).cast(pl.Date)  # noqa: E731
    gaps = pl.concat([inner, lead, tail], rechunk=True).select(
        "building_id",
        pl.lit("gap_in_reads").alias("code"),
        pl.format(
            "no read {}..{} ({} days)", day(pl.col("_gs")), day(pl.col("_ge")), pl.col("_ge") - pl.col("_gs") + 1
        ).alias("detail"),
        day(pl.col("_gs")).alias("period_start"),
    )
    parts.append(gaps)

    if "coverage" in sp.columns:
        low = (
            sp.filter(pl.col("coverage") < min_coverage)
            .with_columns(
                pl.format(
                    "heating-fuel reads cover {} % of the span {}..{}",
                    (pl.col("coverage") * 100).round(1),
                    "span_start",
                    "span_end",
                ).alias("detail")
            )
            .select(
                "building_id",
                pl.lit("low_coverage").alias("code"),
                "detail",
                pl.lit(None, pl.Date).alias("period_start"),
            )
        )
        parts.append(low)

    allp = pl.concat([p.cast({"period_start": pl.Date}) for p in parts])
    out = (
        allp.sort(["building_id", "code", "period_start", "detail"], nulls_last=True)
        .group_by(["building_id", "code"], maintain_order=True)
        .agg(pl.col("detail").str.join("; "))
        .with_columns(pl.col("code").replace_strict(ISSUE_CODES, return_dtype=pl.Boolean).alias("blocking"))
    )
    return out.select(list(_ISSUE_SCHEMA)).cast(_ISSUE_SCHEMA).sort(["building_id", "code"])


#: runs of estimated reads, one row each (see :func:`estimated_runs`)
_RUN_SCHEMA = pl.Schema(
    {
        "building_id": pl.String,
        "meter_id": pl.String,
        "run_start": pl.Date,
        "run_end": pl.Date,
        "n_estimated": pl.Int64,
        "run_kbtu": pl.Float64,
        "run_days": pl.Int64,
        "catch_start": pl.Date,
        "catch_end": pl.Date,
        "catch_kbtu": pl.Float64,
        "catch_days": pl.Int64,
    }
)


def estimated_runs(readings: pl.DataFrame, *, min_run: int = 3, max_step_days: int = 3) -> pl.DataFrame:
    """Runs of at least ``min_run`` consecutive estimated heating-fuel reads of one meter, with their catch-up.

    A utility that cannot read a meter bills an estimate; the next true read ("catch-up" or
    "true-up") bills the difference between the meter's index and the estimates, so the run and its
    catch-up together hold the right energy while each bill's share of it is invented: a run at last
    winter's rate carried into summer, or at an autumn rate into winter, draws a weather response the
    building does not have. The catch-up is the meter's next read when it is not estimated and
    starts at most ``max_step_days`` days after the run's end (otherwise the run has no catch-up yet,
    its columns null). Sporadic single estimates (normal practice) are not runs: ``min_run`` is our
    own threshold (3: no normal building of the tuning portfolios has a run that long, see
    docs/methods.md).

    Parameters
    ----------
    readings : pl.DataFrame
        ``building_id, period_start, period_end, energy_kbtu`` [kBtu], optional ``estimated``,
        ``meter_id``, ``is_heating_fuel`` (only heating-fuel reads are looked at).

    Returns
    -------
    pl.DataFrame
        ``building_id, meter_id, run_start, run_end, n_estimated, run_kbtu`` [kBtu], ``run_days``
        [day], ``catch_start, catch_end, catch_kbtu`` [kBtu], ``catch_days`` [day]; sorted by
        building_id, run_start, meter_id.
    """
    _require(readings, "readings", ("building_id", "period_start", "period_end", "energy_kbtu"))
    if "estimated" not in readings.columns:
        return pl.DataFrame(schema=_RUN_SCHEMA)
    meter = (pl.col("meter_id").cast(pl.String) if "meter_id" in readings.columns else pl.lit("")).fill_null("")
    keys = ["building_id", "_meter"]
    r = (
        _heat(readings)
        .select(
            "building_id",
            meter.alias("_meter"),
            "period_start",
            "period_end",
            pl.col("energy_kbtu").cast(pl.Float64),
            pl.col("estimated").cast(pl.Boolean).fill_null(False).alias("_est"),
        )
        .sort([*keys, "period_start", "period_end"])
        .with_columns(((_ordinal("period_end") - _ordinal("period_start")) + 1).alias("_days"))
        # a new group wherever the read's kind changes or the meter's reads do not follow on
        .with_columns(
            (
                (pl.col("_est") != pl.col("_est").shift(1).over(keys))
                | ((_ordinal("period_start") - _ordinal("period_end").shift(1).over(keys)) > max_step_days)
            )
            .fill_null(True)
            .cum_sum()
            .over(keys)
            .alias("_g")
        )
        .with_columns(
            ((_ordinal("period_start") - _ordinal("period_end").shift(1).over(keys)) <= max_step_days)
            .fill_null(False)
            .alias("_follows")
        )
    )
    runs = (
        r.filter(pl.col("_est"))
        .group_by([*keys, "_g"])
        .agg(
            pl.col("period_start").min().alias("run_start"),
            pl.col("period_end").max().alias("run_end"),
            pl.len().cast(pl.Int64).alias("n_estimated"),
            pl.col("energy_kbtu").sum().alias("run_kbtu"),
            pl.col("_days").sum().cast(pl.Int64).alias("run_days"),
        )
        .filter(pl.col("n_estimated") >= min_run)
    )
    catch = (
        r.filter(~pl.col("_est") & pl.col("_follows"))
        .group_by([*keys, "_g"])
        .agg(
            pl.col("period_start").first().alias("catch_start"),
            pl.col("period_end").first().alias("catch_end"),
            pl.col("energy_kbtu").first().alias("catch_kbtu"),
            pl.col("_days").first().cast(pl.Int64).alias("catch_days"),
        )
        .with_columns(pl.col("_g") - 1)
    )
    out = runs.join(catch, on=[*keys, "_g"], how="left").rename({"_meter": "meter_id"})
    return out.select(list(_RUN_SCHEMA)).cast(_RUN_SCHEMA).sort(["building_id", "run_start", "meter_id"])


def estimated_run_issues(readings: pl.DataFrame, spans: pl.DataFrame, *, min_run: int = 3) -> pl.DataFrame:
    """``estimated_run`` data issues: runs of estimated reads (:func:`estimated_runs`) that overlap the span.

    The detail names the run, its catch-up and both daily rates against the span's daily rate
    (the heating fuel's energy over the span's covered days). It blocks a verdict (declared in
    ``schema.DATA_ISSUES``): the span's total still holds the estimates' energy, but how much of it
    is heating, and how it follows the weather, are invented for months.

    Returns
    -------
    pl.DataFrame
        ``building_id, code, detail, blocking``, one row per building, runs joined with "; ".
    """
    _require(spans, "spans", ("building_id", "span_start", "span_end"))
    if "estimated" in readings.columns:  # only buildings with min_run estimated heating-fuel reads can have a run
        est = _heat(readings).filter(pl.col("estimated").cast(pl.Boolean).fill_null(False))
        ids = est.group_by("building_id").len().filter(pl.col("len") >= max(min_run, 1))["building_id"]
        readings = readings.filter(pl.col("building_id").is_in(ids.implode()))
    runs = estimated_runs(readings, min_run=min_run).join(
        spans.select("building_id", "span_start", "span_end"), on="building_id", how="inner"
    )
    runs = runs.filter((pl.col("run_end") >= pl.col("span_start")) & (pl.col("run_start") <= pl.col("span_end")))
    if not runs.height:
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    h = _heat(readings).join(runs.select("building_id", "span_start", "span_end").unique(), on="building_id")
    h = h.filter((pl.col("period_start") >= pl.col("span_start")) & (pl.col("period_end") <= pl.col("span_end")))
    rate = h.group_by("building_id").agg(
        (pl.col("energy_kbtu").sum() / ((_ordinal("period_end") - _ordinal("period_start")) + 1).sum()).alias("_rate")
    )
    runs = runs.join(rate, on="building_id", how="left")
    per_day = pl.col("_rate").fill_null(0.0)
    times = lambda e: pl.when(per_day > 0).then((e / per_day).round(2).cast(pl.String)).otherwise(pl.lit("?"))  # noqa: E731
    runs = runs.with_columns(
        pl.when(pl.col("catch_start").is_null())
        .then(
            pl.format(
                "{} estimated reads {}..{} at {}× the span's daily use, no true read after them yet",
                "n_estimated",
                "run_start",
                "run_end",
                times(pl.col("run_kbtu") / pl.col("run_days")),
            )
        )
        .otherwise(
            pl.format(
                "{} estimated reads {}..{} at {}× the span's daily use, then a true read {}..{} at {}×",
                "n_estimated",
                "run_start",
                "run_end",
                times(pl.col("run_kbtu") / pl.col("run_days")),
                "catch_start",
                "catch_end",
                times(pl.col("catch_kbtu") / pl.col("catch_days")),
            )
        )
        .alias("detail")
    )
    out = (
        runs.sort(["building_id", "run_start", "meter_id"])
        .group_by("building_id", maintain_order=True)
        .agg(pl.col("detail").str.join("; "))
        .with_columns(
            pl.lit("estimated_run").alias("code"),
            pl.lit(ISSUE_CODES["estimated_run"]).alias("blocking"),
        )
    )
    return out.select(list(_ISSUE_SCHEMA)).cast(_ISSUE_SCHEMA).sort("building_id")


def missing_bills(
    readings: pl.DataFrame, window_start: date, window_end: date, *, spans: pl.DataFrame | None = None
) -> pl.DataFrame:
    """Billing periods of the heating fuel missing inside the analysis window, with their dates.

    Two kinds, both clipped to ``[window_start, window_end]``:

    - days of the window that no heating-fuel read covers (``meter_id`` null): before the first
      read, between reads, and after the last read when that stretch is longer than the building's
      median billing period (an annual bill for the current year is not due yet) and is not the
      end that :func:`choose_spans` fills (``spans.filled_days``);
    - gaps between consecutive reads of one meter that other meters' reads cover (``meter_id``
      named): that meter's energy for those days is missing even though every day is read.

    Returns
    -------
    pl.DataFrame
        ``building_id, meter_id, gap_start, gap_end, days``, sorted by building_id, gap_start.
    """
    _require(readings, "readings", ("building_id", "period_start", "period_end"))
    out_schema = pl.Schema(
        {"building_id": pl.String, "meter_id": pl.String, "gap_start": pl.Date, "gap_end": pl.Date, "days": pl.Int64}
    )
    ws, we = pl.lit(window_start), pl.lit(window_end)
    one = pl.duration(days=1)
    meter = (pl.col("meter_id").cast(pl.String) if "meter_id" in readings.columns else pl.lit("")).fill_null("")
    r = _heat(readings, "building_id", meter.alias("meter_id"), "period_start", "period_end")
    # building level: stretches of the window without any read
    b = r.sort(["building_id", "period_start", "period_end"])
    b = b.with_columns(_prev_run_max(b, ["building_id"], "period_end").alias("_pe"))
    inner = b.filter(pl.col("_pe").is_not_null() & (pl.col("period_start") > pl.col("_pe") + one)).select(
        "building_id", (pl.col("_pe") + one).alias("gap_start"), (pl.col("period_start") - one).alias("gap_end")
    )
    per = r.group_by("building_id").agg(
        pl.col("period_start").min().alias("_s"),
        pl.col("period_end").max().alias("_e"),
        ((_ordinal("period_end") - _ordinal("period_start")) + 1).median().alias("_len"),
    )
    if spans is not None and "filled_days" in spans.columns:
        per = per.join(spans.select("building_id", "filled_days"), on="building_id", how="left")
    else:
        per = per.with_columns(pl.lit(0, pl.Int64).alias("filled_days"))
    lead = per.select("building_id", ws.alias("gap_start"), (pl.col("_s") - one).alias("gap_end"))
    tail = per.filter(
        (pl.col("filled_days").fill_null(0) == 0)
        & ((_ordinal("_e").cast(pl.Float64) + pl.col("_len")) < pl.lit(window_end).cast(pl.Date).cast(pl.Int64))
    ).select("building_id", (pl.col("_e") + one).alias("gap_start"), we.alias("gap_end"))
    whole = pl.concat([inner, lead, tail]).with_columns(pl.lit(None, pl.String).alias("meter_id"))
    # meter level: gaps between consecutive reads of one meter
    m = r.sort(["building_id", "meter_id", "period_start", "period_end"])
    m = m.with_columns(_prev_run_max(m, ["building_id", "meter_id"], "period_end").alias("_pe"))
    mg = m.filter(pl.col("_pe").is_not_null() & (pl.col("period_start") > pl.col("_pe") + one)).select(
        "building_id",
        "meter_id",
        (pl.col("_pe") + one).alias("gap_start"),
        (pl.col("period_start") - one).alias("gap_end"),
    )
    both = (
        pl.concat([whole.select(list(out_schema)[:4]), mg.select(list(out_schema)[:4])])
        .with_columns(
            pl.max_horizontal("gap_start", ws).alias("gap_start"), pl.min_horizontal("gap_end", we).alias("gap_end")
        )
        .filter(pl.col("gap_start") <= pl.col("gap_end"))
    )
    # a meter's gap that no read of the building covers is already named at the building level
    bl = both.filter(pl.col("meter_id").is_null())
    named = (
        both.filter(pl.col("meter_id").is_not_null())
        .with_row_index("_i")
        .join(
            bl.select("building_id", pl.col("gap_start").alias("_bs"), pl.col("gap_end").alias("_be")),
            on="building_id",
            how="inner",
        )
        .filter((pl.col("gap_start") >= pl.col("_bs")) & (pl.col("gap_end") <= pl.col("_be")))["_i"]
    )
    mg = (
        both.filter(pl.col("meter_id").is_not_null())
        .with_row_index("_i")
        .filter(~pl.col("_i").is_in(named.implode()))
        .drop("_i")
    )
    out = pl.concat([bl, mg]).with_columns(((_ordinal("gap_end") - _ordinal("gap_start")) + 1).alias("days"))
    return (
        out.select(list(out_schema)).cast(out_schema).sort(["building_id", "gap_start", "meter_id"], nulls_last=False)
    )


# --------------------------------------------------------------------------------------------
# regression inputs
# --------------------------------------------------------------------------------------------


def fit_periods(
    readings: pl.DataFrame, spans: pl.DataFrame, *, lookback_months: int = 24, max_period_days: int = 62
) -> pl.DataFrame:
    """The heating-fuel billing periods the regression may use, one row per building and period.

    Reads of the same period (several meters) are summed. A period is kept when it lies within
    the ``lookback_months`` ending on the building's span end; ``usable`` marks those of at most
    ``max_period_days`` days (longer ones, e.g. annual or tank-fill reads, are kept for the record
    but not fitted).

    Returns
    -------
    pl.DataFrame
        ``building_id, period_start, period_end, days, energy_kbtu, n_reads, any_estimated, usable``,
        sorted by building_id, period_start, period_end. The caller computes each row's heating
        degree days at every base of the grid (``period_hdd``, shape (rows, n_bases), [°F·day]).
    """
    _require(readings, "readings", ("building_id", "period_start", "period_end", "energy_kbtu"))
    sp = spans.select("building_id", "span_end").with_columns(_lookback_start("span_end", lookback_months).alias("_lb"))
    est = pl.col("estimated").cast(pl.Boolean).fill_null(False) if "estimated" in readings.columns else pl.lit(False)
    r = _heat(readings, "building_id", "period_start", "period_end", "energy_kbtu", est.alias("_est"))
    keys = ["building_id", "period_start", "period_end"]
    agg = (
        pl.col("energy_kbtu").sum(),
        pl.len().cast(pl.Int64).alias("n_reads"),
        pl.col("_est").any().alias("any_estimated"),
    )
    # (rows kept in the readings' order: converted readings are sorted, so the sort below finds its order)
    f = _with_spans(r, sp, "left").filter(
        (pl.col("period_start") >= pl.col("_lb")) & (pl.col("period_end") <= pl.col("span_end"))
    )
    if f.height and strictly_sorted(f, keys, ties=True) and not f["energy_kbtu"].null_count():
        # the reads of one period are neighbours: a period read once is its row; only the periods read
        # more than once (several meters) are grouped, and the rows put back in the periods' order
        change = np.zeros(f.height - 1, dtype=bool)
        rid = f["building_id"].rle_id().to_numpy()
        change |= rid[1:] != rid[:-1]
        for c in ("period_start", "period_end"):
            x = f[c].to_physical().to_numpy()
            change |= x[1:] != x[:-1]
        first = np.r_[True, change]
        once = first & np.r_[change, True]
        p = f.filter(pl.Series(once)).select(*keys, "energy_kbtu", pl.col("_est").alias("any_estimated"))
        p = p.insert_column(4, pl.Series("n_reads", np.ones(p.height, dtype=np.int64)))  # (no sorted flag)
        if not once.all():
            again = f.filter(pl.Series(~once)).group_by(keys, maintain_order=True).agg(*agg)
            at = np.cumsum(first) - 1  # each row's period number
            place = np.r_[at[once], at[first & ~once]]
            p = pl.concat([p, again]).gather(np.argsort(place, kind="stable"))
    else:
        p = f.group_by(keys, maintain_order=True).agg(*agg)
    p = p.with_columns(((_ordinal("period_end") - _ordinal("period_start")) + 1).alias("days"))
    p = p.with_columns((pl.col("days") <= max_period_days).alias("usable"))
    return sort_rows(
        p.select(
            "building_id", "period_start", "period_end", "days", "energy_kbtu", "n_reads", "any_estimated", "usable"
        ),
        ["building_id", "period_start", "period_end"],
    )


#: elements per step of :func:`pad_periods`' scatter (4 MB of float64: the temporaries stay below the
#: allocator's mapping threshold, so their memory is reused instead of faulted in afresh)
_PAD_STEP = 1 << 19


def pad_periods(
    periods: pl.DataFrame,
    period_hdd: PeriodHdd,
    building_ids: Sequence[str] | pl.Series,
    *,
    out: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Pad flat periods into the (n_buildings, max_periods[, n_bases]) arrays of the fit.

    Parameters
    ----------
    periods : pl.DataFrame
        From :func:`fit_periods` (rows sorted by building_id, period_start).
    period_hdd : np.ndarray, shape (len(periods), n_bases), or a callable returning its rows for an index array
        Heating degree days of each period at each base of the grid [°F·day] (totals, not per day). A
        callable is asked a step of rows at a time (≤ 4 MB), so the block's whole array never exists.
    building_ids : sequence of str
        Row order of the output (e.g. ``spans["building_id"]``); buildings without periods get
        all-invalid rows.
    out : np.ndarray, optional
        A float64 buffer for ``hdd_per_day`` (its first n_buildings × max_periods × n_bases elements, used
        when it holds that many): a caller padding block after block reuses one buffer instead of
        faulting in fresh memory each time. Default a new array.

    Returns
    -------
    dict
        ``use_per_day`` [kBtu/day], ``days`` [day], ``hdd_per_day`` [°F·day/day], ``valid`` (bool),
        with ``valid`` = period present and ``usable``, ``hdd_finite`` (bool: the period's ``hdd_per_day``
        all finite; true for empty slots).
    """
    if callable(period_hdd):
        rows_of, hdd = period_hdd, None
        n_k = int(np.shape(rows_of(np.zeros(0, dtype=np.int64)))[1])
    else:
        hdd = np.asarray(period_hdd, dtype=float)
        if hdd.ndim != 2 or hdd.shape[0] != periods.height:
            raise ValueError(f"period_hdd has shape {hdd.shape}; expected ({periods.height}, n_bases)")
        n_k = hdd.shape[1]
    ids = pl.DataFrame({"building_id": pl.Series(list(building_ids), dtype=pl.String)}).with_row_index("_bi")
    p = periods.with_row_index("_row").join(ids, on="building_id", how="inner").sort("_row")
    p = p.with_columns(pl.int_range(pl.len()).over("_bi").alias("_pi"))
    return _pad(
        p["_bi"].to_numpy(),
        p["_pi"].to_numpy(),
        p["_row"].to_numpy(),
        p["days"].to_numpy(),
        p["energy_kbtu"].to_numpy(),
        p["usable"].to_numpy(),
        rows_of if hdd is None else hdd,
        ids.height,
        n_k,
        out,
    )


def _pad(
    bi: np.ndarray,
    pi: np.ndarray,
    row: np.ndarray,
    days_p: np.ndarray,
    energy: np.ndarray,
    usable: np.ndarray,
    period_hdd: PeriodHdd,
    n_b: int,
    n_k: int,
    out: np.ndarray | None,
) -> dict[str, np.ndarray]:
    """:func:`pad_periods` from arrays: period i goes to building row ``bi[i]``, period slot ``pi[i]``;
    its degree days are row ``row[i]`` of ``period_hdd`` (an array, or a callable returning rows)."""
    n_p = max(int(pi.max()) + 1 if pi.size else 0, 1)
    days = np.zeros((n_b, n_p))
    use = np.zeros((n_b, n_p))
    valid = np.zeros((n_b, n_p), dtype=bool)
    d = days_p.astype(float)
    days[bi, pi] = d
    use[bi, pi] = energy / d
    flat = bi * n_p + pi  # one row index: a plain row scatter
    size = n_b * n_p * n_k
    if out is not None and out.dtype == np.float64 and out.size >= size:
        x = out.ravel()[:size].reshape(n_b, n_p, n_k)
        empty = np.ones(n_b * n_p, dtype=bool)
        empty[flat] = False
        x.reshape(n_b * n_p, n_k)[empty] = 0.0  # the slots no period fills (the others are written below)
    else:
        x = np.zeros((n_b, n_p, n_k))
    x2 = x.reshape(n_b * n_p, n_k)
    hdd = None if callable(period_hdd) else period_hdd
    same = hdd is not None and row.size == hdd.shape[0] and np.array_equal(row, np.arange(row.size))
    step = max(1, _PAD_STEP // max(n_k, 1))  # temporaries of ≤ 4 MB: reused memory, no page faults
    fills = hdd is None and _fills_out(cast(Callable, period_hdd))
    fin = np.ones(row.size, dtype=bool)
    src_buf = np.empty((min(step, row.size), n_k)) if fills else None
    for a in range(0, row.size, step):  # steps only bound the temporaries; each row is one division
        if hdd is None:
            m = min(step, row.size - a)
            f = cast(Callable, period_hdd)
            src = f(row[a : a + step], out=src_buf[:m]) if src_buf is not None else f(row[a : a + step])
            src = np.asarray(src, dtype=float)
            if src.shape != (m, n_k):
                raise ValueError(f"period_hdd returned shape {src.shape}; expected ({m}, {n_k})")
            q = np.divide(src, d[a : a + step, None], out=src)
        else:
            src = hdd[a : a + step] if same else hdd[row[a : a + step]]
            q = src / d[a : a + step, None]
        x2[flat[a : a + step]] = q
        fin[a : a + step] = np.isfinite(q).all(axis=1)  # (the step is in cache: the fit need not look again)
    valid[bi, pi] = usable
    finite = np.ones((n_b, n_p), dtype=bool)
    finite[bi, pi] = fin
    return {"use_per_day": use, "days": days, "hdd_per_day": x, "valid": valid, "hdd_finite": finite}


# --------------------------------------------------------------------------------------------
# the regression
# --------------------------------------------------------------------------------------------


def fit_variable_base(
    use_per_day: np.ndarray,
    days: np.ndarray,
    hdd_per_day: np.ndarray,
    base_grid_f: np.ndarray,
    valid: np.ndarray,
    *,
    min_periods: int = 9,
    max_period_days: int = 62,
    chunk: int = 256,
    x_finite: np.ndarray | None = None,
    x_scratch: bool = False,
) -> dict[str, np.ndarray]:
    """Variable-base degree-day regression of bills (Fels 1986, PRISM), all buildings at once,
    with a baseload that is never negative.

    Model per building b and period i (n_i days, weight n_i)::

        F_i = α + β · H_i(τ),    F_i = use_i / n_i [kBtu/day],  H_i(τ) = HDD_i(τ) / n_i [°F]
        subject to α ≥ 0, β ≥ 0

    the heating change-point model of PRISM (Fels 1986, "PRISM: an introduction", Energy and
    Buildings 9:5-18) and of ASHRAE Guideline 14 (the three-parameter heating change-point
    model, α the baseload, β the slope, τ the change point). A negative α would be a negative
    non-heating use; it comes from a base too high for the bills or from noise, and is not
    physical, so α and β are found by non-negative least squares at every base:

    1. the closed-form weighted least-squares estimates (weights n_i):
       β = Σw(H−H̄)(F−F̄) / Σw(H−H̄)², α = F̄ − β·H̄ (weighted means). If α ≥ 0 and β > 0 this is
       the constrained optimum too;
    2. otherwise the optimum lies on a bound (the problem is a convex quadratic with two bounds):
       either α = 0 and β = ΣwHF / ΣwH² (a slope through the origin), or β = 0 and α = F̄
       (baseload only), whichever has the smaller weighted SSE. The base is a heating candidate
       when that optimum has β > 0.

    τ is the heating candidate with the least weighted SSE, every base judged on the same
    criterion (the SSE of its constrained fit). If no base is a candidate the model is baseload
    only: α = weighted mean of F, β = 0. A τ on the first or last grid value is marked
    (``base_at_edge``): the best base may lie beyond the grid. ``alpha_at_zero`` marks a fit whose
    baseload sits on its bound 0 (a slope through the origin).

    Statistics at the chosen base (p = number of estimated parameters: 2 for the heating model,
    1 for a slope through the origin or baseload only):

    - R² = 1 − Σw e² / Σw (F − F̄)² (weighted, centred, as statsmodels WLS ``rsquared`` with a
      constant; the same centred form for a slope through the origin, so R² compares across
      buildings); 0 for baseload only;
    - SE(α), SE(β) from s² (X'WX)⁻¹, s² = Σw e² / (n − p) (as statsmodels WLS ``bse``); SE(α) is
      NaN when α is fixed at 0 (not estimated), SE(β) = sqrt(s² / ΣwH²) then;
    - CV(RMSE) = 100 · sqrt(Σ e² / (n − p)) / ȳ and NMBE = 100 · Σ e / ((n − p) · ȳ) [%] with
      e = F − F̂ per period (per-day use, unweighted, ȳ its plain mean), the ASHRAE Guideline 14
      definitions.

    Parameters
    ----------
    use_per_day : (n_b, p) [kBtu/day]
    days : (n_b, p) [day]
    hdd_per_day : (n_b, p, n_bases) [°F·day/day]
    base_grid_f : (n_bases,) [°F], increasing
    valid : (n_b, p) bool; further restricted to 0 < days ≤ ``max_period_days``.
    min_periods : buildings with fewer valid periods are ``not_fitted`` (Fels: at least 9 bills of
        ≤ 62 days in the last 24 months, per the spec).
    chunk : buildings per block (memory bound; blocks, not buildings, are looped over; 256 keeps a
        block's (buildings × periods × bases) temporaries near 4 MB, in cache; results do not depend on it).
    x_finite : (n_b, p) bool, optional: whether each period's ``hdd_per_day`` values are all finite, when the
        caller knows it (:func:`pad_periods` returns it as ``hdd_finite``); default found here.
    x_scratch : ``hdd_per_day`` may be overwritten (its unused periods set to 0): no copy of it is made.

    Returns
    -------
    dict of np.ndarray, each (n_b,)
        ``alpha`` [kBtu/day] (≥ 0 unless the mean use is negative), ``beta`` [kBtu/(°F·day)],
        ``base_f`` [°F] (NaN unless heating model), ``base_index`` (−1 unless heating model),
        ``r2``, ``cv_rmse`` [%], ``nmbe`` [%], ``n`` (periods used), ``se_alpha``, ``se_beta``,
        ``sse_w`` (weighted SSE), ``model`` ("heating" | "baseload_only" | "not_fitted"),
        ``base_at_edge`` (bool), ``alpha_at_zero`` (bool). NaN where not defined.
    """
    y = np.asarray(use_per_day, dtype=float)
    n_days = np.asarray(days, dtype=float)
    x = np.asarray(hdd_per_day, dtype=float)
    grid = np.asarray(base_grid_f, dtype=float)
    v = np.asarray(valid, dtype=bool)
    if y.ndim != 2 or n_days.shape != y.shape or v.shape != y.shape:
        raise ValueError(
            f"use_per_day {y.shape}, days {n_days.shape} and valid {v.shape} must share "
            "one (n_buildings, n_periods) shape"
        )
    if x.shape != y.shape + grid.shape or grid.ndim != 1:
        raise ValueError(
            f"hdd_per_day has shape {x.shape}; expected {y.shape + grid.shape} "
            "(n_buildings, n_periods, len(base_grid_f))"
        )
    if grid.size > 1 and np.any(np.diff(grid) <= 0):
        raise ValueError("base_grid_f must be strictly increasing")
    # a period whose degree days are all finite: its sum over the bases is finite (a NaN or an infinity
    # makes it NaN or infinite); only where the sum is not (or overflows) are the values looked at
    if x_finite is not None and np.shape(x_finite) == y.shape:
        x_ok = np.asarray(x_finite, dtype=bool)
    else:
        with np.errstate(over="ignore", invalid="ignore"):
            x_ok = np.isfinite(x.sum(axis=2))
        if not x_ok.all():
            x_ok[~x_ok] = np.isfinite(x[~x_ok]).all(axis=1)
    v = v & (n_days > 0) & (n_days <= max_period_days) & np.isfinite(y) & x_ok
    w = np.where(v, n_days, 0.0)
    y0 = np.where(v, y, 0.0)
    n = v.sum(axis=1)
    s0 = w.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ybar = (w * y0).sum(axis=1) / s0
    yc = np.where(v, y0 - ybar[:, None], 0.0)
    syy = (w * yc * yc).sum(axis=1)

    n_b, n_k = y.shape[0], grid.size
    best = np.full(n_b, -1, dtype=np.int64)
    origin = np.zeros(n_b, dtype=bool)
    # (the two (chunk × periods × bases) temporaries in two buffers, reused from chunk to chunk)
    xs_buf = None if x_scratch else np.empty((min(chunk, n_b),) + x.shape[1:])
    wx_buf = np.empty((min(chunk, n_b),) + x.shape[1:])
    for a in range(0, n_b, chunk):
        sl = slice(a, a + chunk)
        if xs_buf is None:  # (x_scratch)
            xs = x[sl]
        else:
            xs = xs_buf[: x[sl].shape[0]]
            np.copyto(xs, x[sl])
        xs[~v[sl]] = 0.0  # the periods not used count as zero
        wx = np.multiply(w[sl, :, None], xs, out=wx_buf[: xs.shape[0]])
        sx = wx.sum(axis=1)  # (c, k)
        sxx = np.einsum("cpk,cpk->ck", wx, xs)
        sxy = np.einsum("cpk,cp->ck", wx, yc[sl])  # y centred: Σw(x)(y−ȳ) = Σw(x−x̄)(y−ȳ)
        with np.errstate(invalid="ignore", divide="ignore"):
            # 1. unconstrained weighted least squares at every base
            sxx_c = sxx - sx * sx / s0[sl, None]
            ok = sxx_c > 1e-12 * np.maximum(sxx, 1e-300)
            beta_k = np.where(ok, sxy / np.where(ok, sxx_c, 1.0), 0.0)
            alpha_k = ybar[sl, None] - beta_k * sx / s0[sl, None]
            sse_u = syy[sl, None] - beta_k * sxy
            # 2. on the bound α = 0: β = ΣwHF / ΣwH², SSE = ΣwF² − (ΣwHF)² / ΣwH²
            sxy_raw = sxy + ybar[sl, None] * sx
            has_x = sxx > 0
            beta_o = np.where(has_x, sxy_raw / np.where(has_x, sxx, 1.0), 0.0)
            syy_raw = syy[sl] + s0[sl] * ybar[sl] ** 2
            sse_o = np.maximum(syy_raw[:, None] - beta_o * sxy_raw, 0.0)
            free = ok & (beta_k > 0) & (alpha_k >= 0)
            bound = ~free & has_x & (beta_o > 0) & (sse_o < syy[sl, None])
            sse_k = np.where(free, sse_u, np.where(bound, sse_o, np.inf))
        has = np.isfinite(sse_k).any(axis=1)
        pick = np.where(has, np.argmin(np.where(np.isnan(sse_k), np.inf, sse_k), axis=1), -1)
        best[sl] = pick
        origin[sl] = has & np.take_along_axis(bound, np.maximum(pick, 0)[:, None], axis=1)[:, 0]

    fitted = n >= min_periods
    heating = fitted & (best >= 0)
    base_only = fitted & ~heating
    origin = origin & heating
    free_fit = heating & ~origin
    bidx = np.where(heating, best, 0)
    xb = np.take_along_axis(x, bidx[:, None, None], axis=2)[:, :, 0]
    xb = np.where(v & heating[:, None], xb, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        xbar = (w * xb).sum(axis=1) / s0
        xcb = np.where(v, xb - xbar[:, None], 0.0)
        sxx_c = (w * xcb * xcb).sum(axis=1)
        sxx_raw = (w * xb * xb).sum(axis=1)
        beta_free = (w * xcb * yc).sum(axis=1) / np.where(free_fit, sxx_c, 1.0)
        beta_orig = (w * xb * y0).sum(axis=1) / np.where(origin, sxx_raw, 1.0)
        beta = np.where(free_fit, beta_free, np.where(origin, beta_orig, 0.0))
        alpha = np.where(origin, 0.0, ybar - beta * xbar)
        yhat = alpha[:, None] + beta[:, None] * xb
        e = np.where(v, y0 - yhat, 0.0)
        sse_w = (w * e * e).sum(axis=1)
        k_par = np.where(free_fit, 2, 1)
        dof = n - k_par
        s2 = sse_w / dof
        r2 = np.where(heating, 1.0 - sse_w / syy, 0.0)
        se_beta = np.where(free_fit, np.sqrt(s2 / sxx_c), np.where(origin, np.sqrt(s2 / sxx_raw), np.nan))
        se_alpha = np.where(
            free_fit, np.sqrt(s2 * (1.0 / s0 + xbar**2 / sxx_c)), np.where(origin, np.nan, np.sqrt(s2 / s0))
        )
        ymean = np.where(v, y0, 0.0).sum(axis=1) / n
        cv = 100.0 * np.sqrt((e * e).sum(axis=1) / dof) / ymean
        nmbe = 100.0 * e.sum(axis=1) / (dof * ymean)
    nan = np.nan
    model = np.where(heating, "heating", np.where(base_only, "baseload_only", "not_fitted"))
    return {
        "alpha": np.where(fitted, alpha, nan),
        "beta": np.where(fitted, beta, nan),
        "base_f": np.where(heating, grid[bidx], nan),
        "base_index": np.where(heating, best, -1),
        "r2": np.where(fitted, r2, nan),
        "cv_rmse": np.where(fitted, cv, nan),
        "nmbe": np.where(fitted, nmbe, nan),
        "n": n.astype(np.int64),
        "se_alpha": np.where(fitted, se_alpha, nan),
        "se_beta": np.where(heating, se_beta, nan),
        "sse_w": np.where(fitted, sse_w, nan),
        "model": model,
        "base_at_edge": heating & ((best == 0) | (best == n_k - 1)),
        "alpha_at_zero": origin,
    }


# --------------------------------------------------------------------------------------------
# combination
# --------------------------------------------------------------------------------------------


def _at_base(dd: np.ndarray, grid: np.ndarray, base: np.ndarray) -> np.ndarray:
    """Linear interpolation of each row of ``dd`` (n, n_bases) at its own base [°F]."""
    j = (
        np.clip(np.searchsorted(grid, base, side="right") - 1, 0, grid.size - 2)
        if grid.size > 1
        else np.zeros(base.shape, dtype=int)
    )
    if grid.size == 1:
        return np.where(base == grid[0], dd[:, 0], np.nan)
    g0, g1 = grid[j], grid[j + 1]
    t = (base - g0) / (g1 - g0)
    rows = np.arange(dd.shape[0])
    out = dd[rows, j] * (1 - t) + dd[rows, j + 1] * t
    return np.where((base >= grid[0]) & (base <= grid[-1]), out, np.nan)


def _fit_in_blocks(
    periods: pl.DataFrame,
    period_hdd: PeriodHdd,
    building_ids: pl.Series,
    grid: np.ndarray,
    *,
    block: int = 4096,
    **fit_kw,
) -> dict[str, np.ndarray]:
    """:func:`pad_periods` + :func:`fit_variable_base` over blocks of buildings.

    The padded (buildings × periods × bases) array is what bounds memory (10,000 buildings × 48
    periods × 71 bases is 270 MB in float64), so it is built one block of buildings at a time;
    the results are the same as one call over all buildings.
    """
    ids = _id_series(building_ids)
    # each period row's block (by its building's position in ``ids``), rows grouped by block in their
    # order: one sort, not an is_in over every period row per block (quadratic in the portfolio)
    pos = pl.DataFrame({"building_id": ids, "_k": np.arange(ids.len(), dtype=np.int64)}).unique(
        "building_id", keep="first", maintain_order=True
    )
    # (looked up once per run of a building's rows: periods come grouped by building)
    rid = periods["building_id"].rle_id().to_numpy()
    runs = np.flatnonzero(np.r_[True, rid[1:] != rid[:-1]]) if rid.size else np.zeros(0, dtype=np.int64)
    run_pos = (
        periods.select("building_id")[runs]
        .join(pos, on="building_id", how="left", maintain_order="left")["_k"]
        .fill_null(-1)
        .to_numpy()
    )
    blk_pos = run_pos[rid]
    blk = blk_pos // block
    order = np.argsort(blk, kind="stable")
    # one buffer for every block's padded degree days, sized for the fullest block (fresh memory for
    # each block would be faulted in page by page)
    per_building = np.bincount(blk_pos[blk_pos >= 0], minlength=1) if blk_pos.size else np.zeros(1, np.int64)
    n_k = np.asarray(grid).size
    days_all, energy_all = periods["days"].to_numpy(), periods["energy_kbtu"].to_numpy()
    usable_all = periods["usable"].to_numpy()
    buf = np.empty(min(block, max(ids.len(), 1)) * max(int(per_building.max()), 1) * n_k)
    parts: list[dict[str, np.ndarray]] = []
    for start in range(0, max(ids.len(), 1), block):
        bid = ids.slice(start, block)
        k = start // block
        pick = order[
            np.searchsorted(blk, k, side="left", sorter=order) : np.searchsorted(blk, k, side="right", sorter=order)
        ]
        if callable(period_hdd) and _fills_out(period_hdd):  # asked a step of rows at a time inside _pad
            hdd: PeriodHdd = lambda rows, out=None, _pick=pick: period_hdd(_pick[rows], out=out)  # noqa: E731
        elif callable(period_hdd):
            hdd = lambda rows, _pick=pick: period_hdd(_pick[rows])  # noqa: E731
        else:
            hdd = np.asarray(period_hdd)[pick]
        # each period's building row in the block and its slot (its rank among the building's periods in
        # row order), as pad_periods finds them, from the positions above
        bi = blk_pos[pick] - start
        by_b = np.argsort(bi, kind="stable")
        sb = bi[by_b]
        run = np.flatnonzero(np.r_[True, sb[1:] != sb[:-1]]) if sb.size else np.zeros(0, dtype=np.int64)
        pi = np.empty_like(bi)
        pi[by_b] = np.arange(sb.size) - np.repeat(run, np.diff(np.r_[run, sb.size]))
        arr = _pad(
            bi, pi, np.arange(pick.size), days_all[pick], energy_all[pick], usable_all[pick], hdd, bid.len(), n_k, buf
        )
        x = arr["hdd_per_day"]  # (the buffer: the fit may zero its unused periods in place)
        parts.append(
            fit_variable_base(
                arr["use_per_day"],
                arr["days"],
                x,
                grid,
                arr["valid"],
                x_finite=arr["hdd_finite"],
                x_scratch=True,
                **fit_kw,
            )
        )
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def metered_heating(
    readings: pl.DataFrame,
    spans: pl.DataFrame,
    buildings: pl.DataFrame,
    *,
    periods: pl.DataFrame,
    period_hdd: PeriodHdd,
    span_hdd: np.ndarray,
    normal_hdd: np.ndarray,
    base_grid_f: np.ndarray,
    efficiency: np.ndarray,
    engineering_base_f: np.ndarray,
    baseload_shares: pl.DataFrame | None = None,
    method: str = "days",
    daily_weights: pl.DataFrame | None = None,
    min_periods: int = 9,
    max_period_days: int = 62,
    fill_hdd: np.ndarray | None = None,
    fit_block: int = 4096,
) -> pl.DataFrame:
    """Per building: the heating part of the heating fuel over its span, normalized to a normal year.

    With a regression fit (:func:`fit_variable_base`, ``fit_method`` "regression")::

        baseload = α · (covered_days + filled_days),  actual_heating = max(total_fuel − baseload, 0)
        normal_heating = β · HDD_normal(τ)               (Fels 1986: NAC = 365·α + β·H₀(τ))

    Days at the span's end without a reading yet (``filled_days`` of :func:`choose_spans`) are
    filled so that metered and expected use cover the same days: from the building's own fit,
    ``filled = α · filled_days + β · HDD_filled(τ)``; without a fit, by the days and degree days
    of the read part, ``filled = E_read · (s · filled_days / covered_days + (1 − s) · HDD_filled(T_eng)
    / HDD_read(T_eng))`` (by days alone when the read part has no degree days). ``total_fuel``
    includes the filled energy.

    Otherwise (``fit_method`` "default share", lower confidence) with the documented share s of the
    use type (``baseload_shares.csv``, CBECS 2003 water-heating shares)::

        baseload = s · total_fuel,  actual_heating = (1 − s) · total_fuel
        β = actual_heating / HDD_span(T_eng),  normal_heating = β · HDD_normal(T_eng)

    Effective UA from the bills (degree-day method Q = 24 · UA · HDD / η inverted)::

        effective_ua_btu_h_f = β [kBtu/(°F·day)] × 1000 [Btu/kBtu] × η / 24 [h/day]  → [Btu/(h·°F)]

    Parameters
    ----------
    readings : converted readings (:func:`screening.units.convert_to_kbtu`).
    spans : from :func:`choose_spans`; **row i of every array argument belongs to row i of spans**.
    buildings : ``building_id, use_type, heating_fuel``.
    periods, period_hdd : from :func:`fit_periods` and the degree-day engine, see :func:`pad_periods`;
        ``period_hdd`` may also be a callable returning the rows of that array for an index array
        (it is then asked one block of buildings at a time, so the whole array never exists).
    span_hdd : (n_b, n_bases) HDD of each building's span at each base [°F·day].
    normal_hdd : (n_b, n_bases) normal-year HDD at each base [°F·day].
    base_grid_f : (n_bases,) [°F].
    efficiency : (n_b,) seasonal efficiency η [-] (COP for heat pumps).
    engineering_base_f : (n_b,) balance point used where there is no heating fit [°F].
    baseload_shares : default ``refdata.load("baseload_shares")``.
    method, daily_weights : passed to :func:`calendarize`.
    fill_hdd : (n_b, n_bases) HDD of each span's filled days at each base [°F·day]; needed when
        ``spans`` has ``filled_days`` > 0 (zeros elsewhere).

    Returns
    -------
    pl.DataFrame
        ``building_id, span_start, span_end, span_kind, coverage, total_fuel_kbtu, baseload_kbtu,
        actual_heating_kbtu, normal_heating_kbtu, heating_slope_kbtu_per_dd, fitted_base_f,
        base_used_f, baseload_kbtu_per_day, r2, cv_rmse, nmbe, n_periods, se_alpha, se_beta,
        fit_method, fit_model, base_at_edge, baseload_at_zero, baseload_share, filled_days, filled_kbtu, confidence, effective_ua_btu_h_f``,
        in the row order of ``spans``.
    """
    _require(buildings, "buildings", ("building_id", "use_type", "heating_fuel"))
    grid = np.asarray(base_grid_f, dtype=float)
    if "filled_days" not in spans.columns:
        spans = spans.with_columns(pl.lit(0, pl.Int64).alias("filled_days"))
    sp = spans.select("building_id", "span_start", "span_end", "span_kind", "coverage", "covered_days", "filled_days")
    n_b = sp.height
    filled_days = sp["filled_days"].fill_null(0).to_numpy().astype(float)
    if fill_hdd is None:
        if np.any(filled_days > 0):
            raise ValueError("spans has filled_days > 0 but no fill_hdd was given")
        fill_hdd = np.zeros((n_b, grid.size))
    for name, arr, shape in (
        ("span_hdd", span_hdd, (n_b, grid.size)),
        ("normal_hdd", normal_hdd, (n_b, grid.size)),
        ("efficiency", efficiency, (n_b,)),
        ("engineering_base_f", engineering_base_f, (n_b,)),
        ("fill_hdd", fill_hdd, (n_b, grid.size)),
    ):
        if np.shape(arr) != shape:
            raise ValueError(f"{name} has shape {np.shape(arr)}; expected {shape} (rows in spans order)")
    span_hdd = np.asarray(span_hdd, float)
    normal_hdd = np.asarray(normal_hdd, float)
    fill_hdd = np.asarray(fill_hdd, float)
    eta = np.asarray(efficiency, float)
    t_eng = np.asarray(engineering_base_f, float)

    cal = calendarize(readings, spans, method=method, daily_weights=daily_weights, heating_only=True)
    cal = (
        cal.filter(pl.col("is_heating_fuel"))
        .group_by("building_id")
        .agg(pl.col("energy_kbtu").sum().alias("total_fuel_kbtu"))
    )
    shares = baseload_shares if baseload_shares is not None else refdata.load("baseload_shares")
    b = buildings.select("building_id", "use_type", "heating_fuel").with_columns(
        pl.when(pl.col("heating_fuel") == "electricity")
        .then(pl.lit("electricity"))
        .otherwise(pl.lit("combustion"))
        .alias("fuel_class")
    )
    b = b.join(
        shares.select("use_type", "fuel_class", pl.col("nonheating_share").cast(pl.Float64)),
        on=["use_type", "fuel_class"],
        how="left",
    )
    frame = sp.join(cal, on="building_id", how="left", maintain_order="left").join(
        b, on="building_id", how="left", maintain_order="left"
    )
    if frame.filter(pl.col("use_type").is_null()).height:
        bad = frame.filter(pl.col("use_type").is_null())["building_id"][0]
        raise ValueError(f"buildings: no row (or no use_type) for building_id={bad!r} of spans")
    if frame.filter(pl.col("nonheating_share").is_null()).height:
        bad = frame.filter(pl.col("nonheating_share").is_null()).row(0, named=True)
        raise ValueError(f"baseload_shares: no share for use_type={bad['use_type']!r} fuel_class={bad['fuel_class']!r}")

    fit = _fit_in_blocks(
        periods,
        period_hdd,
        sp["building_id"],
        grid,
        min_periods=min_periods,
        max_period_days=max_period_days,
        block=fit_block,
    )
    read = frame["total_fuel_kbtu"].fill_null(0.0).to_numpy()
    covered = frame["covered_days"].to_numpy().astype(float)
    share = frame["nonheating_share"].to_numpy()
    reg = fit["model"] != "not_fitted"
    heat = fit["model"] == "heating"
    kidx = np.where(heat, fit["base_index"], 0)
    rows = np.arange(n_b)
    with np.errstate(invalid="ignore", divide="ignore"):
        # the filled days at the span's end: from the fit, or by days and degree days of the read part
        fill_eng = _at_base(fill_hdd, grid, t_eng)
        read_eng = _at_base(span_hdd, grid, t_eng) - fill_eng
        dd_ok = np.isfinite(read_eng) & np.isfinite(fill_eng) & (read_eng > 0)
        heat_part = np.where(dd_ok, fill_eng / np.where(dd_ok, read_eng, 1.0), filled_days / covered)
        fill_default = read * (share * filled_days / covered + (1 - share) * heat_part)
        fill_fit = fit["alpha"] * filled_days + np.where(heat, fit["beta"] * fill_hdd[rows, kidx], 0.0)
        filled = np.where(filled_days > 0, np.where(reg, fill_fit, fill_default), 0.0)
        filled = np.where(np.isfinite(filled), filled, 0.0)
        total = read + filled
        base_reg = np.where(reg, fit["alpha"] * (covered + filled_days), share * total)
        baseload = np.where(reg, base_reg, share * total)
        actual = np.where(reg, np.maximum(total - baseload, 0.0), (1 - share) * total)
        hdd_eng_span = _at_base(span_hdd, grid, t_eng)
        hdd_eng_norm = _at_base(normal_hdd, grid, t_eng)
        slope_default = np.where(hdd_eng_span > 0, actual / hdd_eng_span, np.nan)
        slope = np.where(reg, fit["beta"], slope_default)
        normal = np.where(heat, fit["beta"] * normal_hdd[rows, kidx], np.where(reg, 0.0, slope_default * hdd_eng_norm))
        base_used = np.where(heat, fit["base_f"], np.where(reg, np.nan, t_eng))
        ua = slope * 1000.0 * eta / 24.0
    fit_method = np.where(reg, "regression", "default share")
    out = frame.select("building_id", "span_start", "span_end", "span_kind", "coverage").with_columns(
        pl.Series("total_fuel_kbtu", total),
        pl.Series("baseload_kbtu", baseload),
        pl.Series("actual_heating_kbtu", actual),
        pl.Series("normal_heating_kbtu", normal),
        pl.Series("heating_slope_kbtu_per_dd", slope),
        pl.Series("fitted_base_f", fit["base_f"]),
        pl.Series("base_used_f", base_used),
        pl.Series("baseload_kbtu_per_day", fit["alpha"]),
        pl.Series("r2", fit["r2"]),
        pl.Series("cv_rmse", fit["cv_rmse"]),
        pl.Series("nmbe", fit["nmbe"]),
        pl.Series("n_periods", fit["n"]),
        pl.Series("se_alpha", fit["se_alpha"]),
        pl.Series("se_beta", fit["se_beta"]),
        pl.Series("fit_method", fit_method),
        pl.Series("fit_model", fit["model"]),
        pl.Series("base_at_edge", fit["base_at_edge"]),
        pl.Series("baseload_at_zero", fit["alpha_at_zero"]),
        pl.Series("baseload_share", np.where(reg, np.nan, share)),
        pl.Series("filled_days", sp["filled_days"].fill_null(0)),
        pl.Series("filled_kbtu", filled),
        pl.Series("confidence", np.where(reg, "regression", "low")),
        pl.Series("effective_ua_btu_h_f", ua),
    )
    return out.with_columns(cs.float().fill_nan(None))
