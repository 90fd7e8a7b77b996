"""Data-issue detectors (pure): polars frames in, the issues frame ``building_id, code, detail, blocking`` out.

Every code, whether it blocks and its plain text are declared once in :data:`screening.schema.DATA_ISSUES`;
the per-reading detectors are in :mod:`screening.metered` (``reading_issues``), the others here.
:func:`chunk_issues` gathers a chunk's issues; :func:`far_from_expectation` adds the metered-against-expected
check once the per-building frame is assembled. No files, no database (orchestration: :mod:`screening.pipeline`).
"""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import numpy as np
import polars as pl

from . import metered
from .schema import issue_codes

if TYPE_CHECKING:
    from .config import Thresholds

#: Plain texts of the data issues found here (the per-reading ones are in :mod:`screening.metered`;
#: README "Data issues" lists every code).
ISSUE_TEXT = {
    "no_readings": "no usable readings for this building",
    "no_heating_fuel_readings": (
        "readings only in {fuels}, none in the building's heating fuel {heating_fuel}: "
        "check heating_fuel in the buildings file or the fuel column of the readings"
    ),
    "no_weather_at_station": (
        "station {station_id} has no weather on any day of the span {span_start} to "
        "{span_end} ({record}): add that station's weather for these dates, or correct "
        "the building's station_id"
    ),
    "missing_bills": (
        "no heating-fuel bill for {gaps} inside the analysis window {window_start} to {window_end}: "
        "obtain the missing bills (or readings) and rerun"
    ),
    "end_days_filled": (
        "no reading yet for the last {days} day(s) of the span, {fill_start} to {span_end}: filled "
        "from {source} ({share} % of the span's use)"
    ),
}
#: Every data-issue code found here, beside the per-reading ones of :data:`screening.metered.ISSUE_CODES`,
#: and whether it blocks a verdict. :data:`DATA_ISSUE_CODES` is the one list of data issues (README
#: "Data issues"); flags are :data:`screening.schema.FLAGS`. All declared in :data:`screening.schema.DATA_ISSUES`.
PIPELINE_ISSUE_CODES = issue_codes("pipeline")
DATA_ISSUE_CODES = {**metered.ISSUE_CODES, **PIPELINE_ISSUE_CODES}
#: Issues that leave no basis for a ratio: no likely_unit_error is claimed beside them.
NO_BASIS_CODES = ("no_readings", "no_heating_fuel_readings", "no_weather_at_station")
#: The issues frame every detector returns.
_ISSUE_SCHEMA = pl.Schema({"building_id": pl.String, "code": pl.String, "detail": pl.String, "blocking": pl.Boolean})


#: The unit mix-ups each heating fuel's bills are prone to, named in the likely_unit_error detail (our own
#: list, common practice in bill checking).
UNIT_MIXUPS: dict[str, str] = {
    "natural_gas": "therm against ccf or Mcf, kBtu against MMBtu",
    "electricity": "kWh against MWh or Wh",
    "fuel_oil": "gallons against litres",
    "propane": "gallons against litres or lb",
    "district_steam": "lb against Mlb",
    "district_hot_water": "kBtu against MMBtu",
}


def unit_error_issues(
    conv: pl.DataFrame, b: pl.DataFrame, factor: float, *, isolation: float = 1.0, block: int = 16384
) -> pl.DataFrame:
    """:func:`unit_error_issues_block` over blocks of ``block`` buildings (each issue is one building's;
    the blocks bound the memory of the window statistics over every reading)."""
    if b.height <= block:
        return unit_error_issues_block(conv, b, factor, isolation)
    ids = b["building_id"]
    parts = [
        unit_error_issues_block(
            conv.filter(pl.col("building_id").is_in(ids.slice(a, block).implode())),
            b.slice(a, block),
            factor,
            isolation,
        )
        for a in range(0, b.height, block)
    ]
    return pl.concat(parts).sort("building_id")


#: a bill this many times off (or 1/this of) what was expected of it is a data fault even when its neighbours are
#: off too: no operation multiplies a month's use by it (waste that began measured up to ×20 in a shoulder month
#: on the outside world, seeds 3 and 4), and it keeps ×100 and ×1000 errors in a run of bills (our own margin)
UNIT_ERROR_FACTOR_ANY = 50.0


def spike(q: pl.Expr, over: list[str], isolation: float) -> pl.Expr:
    """A bill off by ``q`` [-] (its use against what was expected of it) that its neighbouring bills do not share.

    ``q`` is compared with the previous and the next bill of the same series (``over``, in time order;
    a missing neighbour or one with no ``q`` counts as 1): the bill must stand ``isolation`` times apart
    from both, in its own direction, or be ``UNIT_ERROR_FACTOR_ANY`` times off on its own. A lost decimal
    point, a wrong unit on one bill or a catch-up after estimated reads is a spike; waste that began, or a
    building that changed, moves a run of bills together (a step), which this leaves to the comparisons of
    the whole span. The rows must be sorted by ``over`` and time (each series' bills together).
    """
    first = metered.group_starts(over)
    prev = pl.when(first).then(None).otherwise(q.shift(1)).fill_null(1.0)
    nxt = pl.when(first.shift(-1).fill_null(True)).then(None).otherwise(q.shift(-1)).fill_null(1.0)
    hi = (q >= isolation * prev) & (q >= isolation * nxt)
    lo = (q * isolation <= prev) & (q * isolation <= nxt)
    far = (q >= UNIT_ERROR_FACTOR_ANY) | (q * UNIT_ERROR_FACTOR_ANY <= 1)
    return (pl.when(q >= 1).then(hi).otherwise(lo) | far).fill_null(False)


class _ByValue:
    """Rows of values ``x`` [any unit] (finite) in increasing order, for statistics over groups of them:
    ``order`` the rows in that order, ``rank`` each row's place in it, ``sorted`` the values in it, ``bits``
    the bits of a place."""

    def __init__(self, x: np.ndarray):
        self.order = np.argsort(x)
        self.bits = max(int(len(x)).bit_length(), 1)
        self.rank = np.empty(len(x), dtype=np.int64)
        self.rank[self.order] = np.arange(len(x))
        self.sorted = x[self.order]

    def stats(self, g: np.ndarray, size: int, within: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
        """Count, median and sum of the values over the rows of each group, per group: ``g`` the rows' group
        numbers (integers in ``[0, size)``; index the tables with them for each row's). With ``within`` (a
        mask, in the order of the values), also the same over the group's rows inside the mask (count 0,
        median NaN and sum 0 where there are none, as for a group without rows).

        The median is polars' own: the middle value, or ``lo + (hi − lo)·0.5`` between the two middle ones;
        the sum runs over the group's values in increasing order (exact for a group of two, the only sums
        used here). One sort of the integers ``g·2^bits + rank`` (no ties) puts the rows by group and value.
        """
        key = np.sort((g.astype(np.int64) << self.bits) | self.rank)
        place = key & ((1 << self.bits) - 1)
        gs, v = key >> self.bits, self.sorted[place]

        def tables(gs: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
            new = np.ones(len(gs), dtype=bool)
            new[1:] = gs[1:] != gs[:-1]
            st = np.flatnonzero(new)
            n = np.diff(np.append(st, len(gs)))
            lo, hi = v[st + (n - 1) // 2], v[st + n // 2]
            count, med, tot = np.zeros(size, dtype=np.int64), np.full(size, np.nan), np.zeros(size)
            count[gs[st]], med[gs[st]] = n, lo + (hi - lo) * 0.5
            if len(st):
                tot[gs[st]] = np.add.reduceat(v, st)
            return count, med, tot

        out = tables(gs, v)
        if within is None:
            return out
        w = within[place]  # (a subset of sorted rows is sorted)
        return (*out, *tables(gs[w], v[w]))


def _spike(q: np.ndarray, first: np.ndarray, isolation: float) -> np.ndarray:
    """:func:`spike` over arrays: ``q`` [-] (NaN where there is none), ``first`` true on each series' first
    row (rows sorted by series and time)."""
    prev, nxt = np.ones(len(q)), np.ones(len(q))
    prev[1:], nxt[:-1] = q[:-1], q[1:]
    last = np.ones(len(q), dtype=bool)
    last[:-1] = first[1:]
    prev = np.where(first | np.isnan(prev), 1.0, prev)
    nxt = np.where(last | np.isnan(nxt), 1.0, nxt)
    hi = (q >= isolation * prev) & (q >= isolation * nxt)
    lo = (q * isolation <= prev) & (q * isolation <= nxt)
    far = (q >= UNIT_ERROR_FACTOR_ANY) | (q * UNIT_ERROR_FACTOR_ANY <= 1)
    return np.where(q >= 1, hi, lo) | far


def _heating_bills(conv: pl.DataFrame, b: pl.DataFrame) -> pl.DataFrame:
    """The readings of each building's heating fuel that are monthly bills (20 to 62 days), in their order:
    by ``is_heating_fuel`` where the readings carry it (:func:`screening.units.convert_to_kbtu`: the fuel
    is the building's ``heating_fuel``), else by ``b.heating_fuel``."""
    cols = ["building_id", "meter_id", "period_start", "period_end", "days", "energy_kbtu"]
    monthly = (pl.col("days") <= 62) & (pl.col("days") >= 20)
    if "is_heating_fuel" in conv.columns:
        return conv.filter(pl.col("is_heating_fuel") & monthly).select(cols)
    return (
        conv.select(*cols, "fuel")
        .join(b.select("building_id", "heating_fuel"), on="building_id", how="left", maintain_order="left")
        .filter((pl.col("fuel") == pl.col("heating_fuel")) & monthly)
        .select(cols)
    )  # (a left join, its unmatched rows dropped by the filter: quicker than an inner join)


def _wide_meters(x: np.ndarray, meter: np.ndarray, grp: np.ndarray, factor: float) -> np.ndarray | None:
    """The rows (indices, in order) of the meters that may hold a bill ``factor`` off in
    :func:`unit_error_issues_block`: those with a calendar month (``grp``) whose largest use per day ``x``
    is ``factor`` × its smallest or more (1 % margin for rounding), or whose smallest is not positive.
    A bill's ratio to its month's median, or to the month's other bill, lies between the month's smallest
    and largest bill over each other, so no other month can give one; whole meters are kept, for the
    meter's median and a bill's neighbours. None (every row) for a factor outside (1, 10^6]."""
    if not 1.0 < factor <= 1e6:
        return None
    size = int(meter[-1]) * 16 + 16
    hi, lo = np.full(size, -np.inf), np.full(size, np.inf)
    np.maximum.at(hi, grp, x)
    np.minimum.at(lo, grp, x)
    wide = np.zeros(int(meter[-1]) + 1, dtype=bool)
    wide[np.flatnonzero((lo <= 0) | (hi >= lo * factor * 0.99)) // 16] = True
    return np.flatnonzero(wide[meter])


def unit_error_issues_block(conv: pl.DataFrame, b: pl.DataFrame, factor: float, isolation: float = 1.0) -> pl.DataFrame:
    """Readings that differ from the same calendar month of other years by ≥ ``factor``, as a spike.

    A factor of about 10, 100 or 1000 between years of one meter is the mark of a
    unit or entry error (therm vs ccf ×1.036 is too small to see; kBtu vs MMBtu is 1000).
    Such a reading must also stand ``isolation`` × apart from the meter's previous and next
    readings' own ratios (:func:`spike`): a run of months off together is a step (waste that
    began), which the ratio of the whole span to the expectation judges instead.
    """
    heat = _heating_bills(conv, b)
    if heat.height == 0:
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    heat = heat.rechunk()
    if not metered.strictly_sorted(heat, ["building_id", "meter_id", "period_start"]):
        heat = heat.sort("building_id", "meter_id", "period_start")  # (ties kept as this sort leaves them)
    meter = np.cumsum(metered.run_starts(heat, ["building_id", "meter_id"]))
    days = heat["days"].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        x = heat["energy_kbtu"].to_numpy() / days  # [kBtu/day]
    if any(heat[c].null_count() for c in ("period_start", "days", "energy_kbtu")) or not np.isfinite(x).all():
        # (the sort-based statistics need finite numbers)
        mid = pl.col("period_start") + pl.duration(days=(pl.col("days") // 2))
        heat = heat.with_columns(
            (pl.col("energy_kbtu") / pl.col("days")).alias("_upd"),
            mid.dt.month().alias("_m"),
            pl.Series("_gm", meter, dtype=pl.Int64),
        )
        return _unit_error_windows(heat, factor, isolation)
    mid = heat["period_start"].to_physical().to_numpy() + days // 2  # the middle day of the bill (day ordinal)
    lo = int(mid.min())
    months = np.arange(lo, int(mid.max()) + 1).astype("datetime64[D]").astype("datetime64[M]").astype(np.int64) % 12
    grp = meter * 16 + months[mid - lo] + 1  # the meter and calendar month (1 to 12)
    rows = _wide_meters(x, meter, grp, factor)
    if rows is not None:  # (the other meters' bills cannot be `factor` off)
        if not len(rows):
            return pl.DataFrame(schema=_ISSUE_SCHEMA)
        x, meter, grp = x[rows], meter[rows], grp[rows]
    by_x = _ByValue(x)
    # only months of substantial use: summer use of a heating fuel varies by large factors on its own
    mmed = by_x.stats(meter, int(meter[-1]) + 1)[1][meter]
    big = x >= 0.5 * mmed
    per_month = by_x.stats(grp, int(meter[-1]) * 16 + 16, within=big[by_x.order])
    n_all, med_all, tot_all, n, med, tot = (t[grp] for t in per_month)
    # (as _unit_error_odd; no statistic is null or NaN here but ``med`` of a month without substantial use)
    with np.errstate(divide="ignore", invalid="ignore"):
        own = np.where(n == 2, x / (tot - x), x / med)
        all_ = np.where(n_all == 2, x / (tot_all - x), x / med_all)
        use_own = big & (n >= 2) & (med > 0) & (x > 0)
        use_all = big & (n_all >= 2) & (med_all > 0) & (x > 0) & (all_ >= UNIT_ERROR_FACTOR_ANY) & (x >= factor * mmed)
        q = np.where(use_own, own, np.where(use_all, all_, np.nan))
        first = np.ones(len(meter), dtype=bool)
        first[1:] = meter[1:] != meter[:-1]
        odd = ((q >= factor) | (q * factor <= 1)) & _spike(q, first, isolation)
    if not odd.any():
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    at = np.flatnonzero(odd) if rows is None else rows[odd]
    return _odd_bills(
        heat[at].with_columns(pl.Series("_q", q[odd])),
        pl.col("_q"),
        "the same month's median",
        "likely_unit_error",
        "reading(s) about 10×, 100× or 1000× off the building's own history: ",
    )


def _unit_error_windows(heat: pl.DataFrame, factor: float, isolation: float) -> pl.DataFrame:
    """:func:`unit_error_issues_block`'s statistics as polars windows (where a use per day is missing or not finite)."""
    heat = heat.with_columns(pl.col("_upd").median().over("_gm").alias("_mmed"))
    heat = heat.with_columns((pl.col("_upd") >= 0.5 * pl.col("_mmed")).alias("_big"))
    big = pl.col("_upd").filter(pl.col("_big"))
    grp = ["_gm", "_m"]
    heat = heat.with_columns(
        big.median().over(grp).alias("_med"),
        big.count().over(grp).alias("_n"),
        big.sum().over(grp).alias("_sum"),
        pl.col("_upd").count().over(grp).alias("_n_all"),
        pl.col("_upd").sum().over(grp).alias("_sum_all"),
        pl.col("_upd").median().over(grp).alias("_med_all"),
    )
    return _unit_error_odd(heat, factor, isolation)


def _unit_error_odd(heat: pl.DataFrame, factor: float, isolation: float) -> pl.DataFrame:
    """The likely_unit_error issues of :func:`unit_error_issues_block` from its statistics per reading."""
    # the reading against the same month of the other years: their median; with two readings the
    # median sits between them, so each is compared with the other. A month of substantial use whose
    # other years were small (a summer bill ×100) is compared with all of them, and counts only from
    # UNIT_ERROR_FACTOR_ANY on and at `factor` × the meter's median month: summer use varies by large
    # factors on its own (heating in warm weather that began on a heating-only fuel: ×124 on the
    # simulator, seed 707), but never above the winter's bills
    own = (
        pl.when(pl.col("_n") == 2)
        .then(pl.col("_upd") / (pl.col("_sum") - pl.col("_upd")))
        .otherwise(pl.col("_upd") / pl.col("_med"))
    )
    all_ = (
        pl.when(pl.col("_n_all") == 2)
        .then(pl.col("_upd") / (pl.col("_sum_all") - pl.col("_upd")))
        .otherwise(pl.col("_upd") / pl.col("_med_all"))
    )
    q = (
        pl.when(pl.col("_big") & (pl.col("_n") >= 2) & (pl.col("_med") > 0) & (pl.col("_upd") > 0))
        .then(own)
        .when(
            pl.col("_big")
            & (pl.col("_n_all") >= 2)
            & (pl.col("_med_all") > 0)
            & (pl.col("_upd") > 0)
            & (all_ >= UNIT_ERROR_FACTOR_ANY)
            & (pl.col("_upd") >= factor * pl.col("_mmed"))
        )
        .then(all_)
    )
    heat = heat.with_columns(q.alias("_q"))  # (in meter and date order)
    heat = heat.with_columns(spike(pl.col("_q"), ["_gm"], isolation).alias("_spike"))
    odd = heat.filter(((pl.col("_q") >= factor) | (pl.col("_q") * factor <= 1)) & pl.col("_spike"))
    if odd.height == 0:
        return pl.DataFrame(
            schema={"building_id": pl.String, "code": pl.String, "detail": pl.String, "blocking": pl.Boolean}
        )
    return _odd_bills(
        odd,
        pl.col("_q"),
        "the same month's median",
        "likely_unit_error",
        "reading(s) about 10×, 100× or 1000× off the building's own history: ",
    )


def fit_outlier_issues(periods: pl.DataFrame, met: pl.DataFrame, factor: float, isolation: float = 1.0) -> pl.DataFrame:
    """Bills far off the building's own weather fit (code ``bill_off_fit``, blocking).

    Each fitted bill's use per day is compared with what the building's variable-base fit
    predicts for its degree days, ``α + β·HDD(τ)/day`` [kBtu/day]. A bill at ≥ ``factor`` × the
    prediction, or at ≤ 1/``factor`` of it, is flagged when the larger of the two is substantial
    (at least half the building's median bill per day): summer use varies by large factors on
    its own, winter-sized use in a summer bill does not. The same-month comparison across years
    (:func:`unit_error_issues`) misses a summer bill, whose other years are too small to count.
    The bill must also stand ``isolation`` × apart from its neighbours' own ratios to the fit
    (:func:`spike`): when waste begins inside the fitted months, the fit mixes before and after,
    and a whole run of bills sits off it together (a step, not a data fault).
    """
    if periods.height == 0 or "hdd_per_day_fit" not in periods.columns:
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    fit = met.filter(pl.col("fit_method") == "regression").select(
        "building_id",
        pl.col("baseload_kbtu_per_day").fill_null(0.0).alias("_a"),
        pl.col("heating_slope_kbtu_per_dd").fill_null(0.0).alias("_b"),
    )
    p = periods.filter(pl.col("usable")).select(
        "building_id", "period_start", "period_end", "days", "energy_kbtu", "hdd_per_day_fit"
    )
    fast = _fit_outlier_arrays(p, fit, factor, isolation)
    if fast is None:
        return _fit_outlier_frames(p, fit, factor, isolation)
    p, odd, ratio = fast
    if not odd.any():
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    return _odd_bills(
        p.filter(pl.Series(odd)).with_columns(pl.Series("_q", ratio[odd])),
        pl.col("_q"),
        "what the building's weather fit predicts",
        "bill_off_fit",
        _FIT_HEAD,
    )


#: the head of a bill_off_fit detail
_FIT_HEAD = (
    "bill(s) far off the building's own weather fit (a lost decimal point or unit, a catch-up "
    "after estimated reads, a meter change, or weeks the building stood empty): "
)


def _fit_outlier_arrays(
    p: pl.DataFrame, fit: pl.DataFrame, factor: float, isolation: float
) -> tuple[pl.DataFrame, np.ndarray, np.ndarray] | None:
    """:func:`fit_outlier_issues` over arrays: the fitted bills ``p`` (of buildings with a fit), whether each is
    odd and its use over the prediction [-]; None where the bills are not in building and date order
    without ties, a building has two fits, or a use or prediction is missing or not finite (then
    :func:`_fit_outlier_frames`)."""
    keys = ["building_id", "period_start", "period_end"]
    if not metered.strictly_sorted(p, keys) or fit["building_id"].n_unique() != fit.height:
        return None
    if any(p[c].null_count() for c in ("days", "energy_kbtu", "hdd_per_day_fit")):
        return None
    # each building's fit, looked up once per building (the bills are in building order)
    rid = p["building_id"].rle_id().to_numpy()
    st = np.flatnonzero(np.r_[True, rid[1:] != rid[:-1]]) if p.height else np.zeros(0, dtype=np.int64)
    per = p.select("building_id").gather(st).join(fit, on="building_id", how="left", maintain_order="left")
    has = np.repeat(per["_a"].is_not_null().to_numpy(), np.diff(np.append(st, p.height)))
    if not has.all():
        p = p.filter(pl.Series(has))
        per = per.filter(pl.col("_a").is_not_null())
        rid = p["building_id"].rle_id().to_numpy()
    if p.height == 0:
        return p, np.zeros(0, dtype=bool), np.zeros(0)
    first = np.r_[True, rid[1:] != rid[:-1]]
    bld = np.cumsum(first) - 1
    upd = p["energy_kbtu"].to_numpy() / p["days"].to_numpy()
    pred = per["_a"].to_numpy()[bld] + per["_b"].to_numpy()[bld] * p["hdd_per_day_fit"].to_numpy()
    if not (np.isfinite(upd).all() and np.isfinite(pred).all()):
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        on = (pred > 0) & (upd > 0)
        q = np.where(on, upd / pred, np.nan)
        far = on & ((upd >= factor * pred) | (upd * factor <= pred))
        # the median and the neighbours only for the buildings with a bill that far off (all their bills)
        st = np.flatnonzero(first)
        rows = np.flatnonzero(np.repeat(np.logical_or.reduceat(far, st), np.diff(np.append(st, len(upd)))))
        odd = np.zeros(len(upd), dtype=bool)
        if not len(rows):
            return p, odd, q
        upd, pred, bld, q_in = upd[rows], pred[rows], bld[rows], q[rows]
        bmed = _ByValue(upd).stats(bld, int(bld[-1]) + 1)[1][bld]
        odd[rows] = (
            far[rows]
            & _spike(q_in, first[rows], isolation)
            & (((upd >= factor * pred) & (upd >= 0.5 * bmed)) | ((upd * factor <= pred) & (pred >= 0.5 * bmed)))
        )
    return p, odd, q


def _fit_outlier_frames(p: pl.DataFrame, fit: pl.DataFrame, factor: float, isolation: float) -> pl.DataFrame:
    """:func:`fit_outlier_issues` as polars frames and windows (bills out of order, missing numbers)."""
    p = p.join(fit, on="building_id", how="inner").with_columns(
        (pl.col("energy_kbtu") / pl.col("days")).alias("_upd"),
        (pl.col("_a") + pl.col("_b") * pl.col("hdd_per_day_fit")).alias("_pred"),
    )
    p = p.sort("building_id", "period_start", "period_end").with_columns(
        pl.col("_upd").median().over("building_id").alias("_bmed"),
        pl.when((pl.col("_pred") > 0) & (pl.col("_upd") > 0)).then(pl.col("_upd") / pl.col("_pred")).alias("_q"),
    )
    p = p.with_columns(spike(pl.col("_q"), ["building_id"], isolation).alias("_spike"))
    odd = p.filter(
        (pl.col("_pred") > 0)
        & (pl.col("_upd") > 0)
        & pl.col("_spike")
        & (
            ((pl.col("_upd") >= factor * pl.col("_pred")) & (pl.col("_upd") >= 0.5 * pl.col("_bmed")))
            | ((pl.col("_upd") * factor <= pl.col("_pred")) & (pl.col("_pred") >= 0.5 * pl.col("_bmed")))
        )
    )
    if odd.height == 0:
        return pl.DataFrame(schema=_ISSUE_SCHEMA)
    return _odd_bills(
        odd,
        pl.col("_upd") / pl.col("_pred"),
        "what the building's weather fit predicts",
        "bill_off_fit",
        _FIT_HEAD,
    )


def _odd_bills(odd: pl.DataFrame, ratio: pl.Expr, against: str, code: str, head: str) -> pl.DataFrame:
    """One blocking ``code`` issue per building, ``head`` then its odd bills in date order, each as
    ``start–end (ratio× against)`` [-], joined by "; "."""
    odd = odd.sort("building_id", "period_start").with_columns(
        (
            pl.col("period_start").cast(pl.String)
            + pl.lit("–")
            + pl.col("period_end").cast(pl.String)
            + pl.lit(" (")
            + ratio.round(2).cast(pl.String)
            + pl.lit(f"× {against})")
        ).alias("_d")
    )
    return (
        odd.group_by("building_id")
        .agg(pl.col("_d").str.join("; ").alias("detail"))
        .select(
            "building_id",
            pl.lit(code).alias("code"),
            (pl.lit(head) + pl.col("detail")).alias("detail"),
            pl.lit(True).alias("blocking"),
        )
        .sort("building_id")
    )


def missing_bill_issues(conv: pl.DataFrame, spans: pl.DataFrame, window) -> pl.DataFrame:
    """Heating-fuel bills missing inside the analysis window, their dates named (``missing_bills``)."""
    ws, we = window
    if "is_heating_fuel" in conv.columns:  # (metered.missing_bills looks at no other reading)
        conv = conv.filter(pl.col("is_heating_fuel"))
    keep = _maybe_missing(conv, ws, we)
    g = metered.missing_bills(conv if keep is None else conv.filter(pl.Series(keep)), ws, we, spans=spans)
    g = g.with_columns(
        (
            pl.when(pl.col("meter_id").is_null())
            .then(pl.lit(""))
            .otherwise(pl.lit("meter ") + pl.col("meter_id") + pl.lit(" "))
        ).alias("_m")
    )
    g = g.with_columns(pl.format("{}{}..{} ({} days)", "_m", "gap_start", "gap_end", "days").alias("_d"))
    t = ISSUE_TEXT["missing_bills"].replace("{window_start}", str(ws)).replace("{window_end}", str(we))
    head, tail = t.split("{gaps}")
    return (
        g.group_by("building_id", maintain_order=True)
        .agg(pl.col("_d").str.join("; "))
        .select(
            "building_id",
            pl.lit("missing_bills").alias("code"),
            (pl.lit(head) + pl.col("_d") + pl.lit(tail)).alias("detail"),
            pl.lit(False).alias("blocking"),
        )
        .sort("building_id")
    )


def _maybe_missing(r: pl.DataFrame, ws: date, we: date) -> np.ndarray | None:
    """Which heating-fuel readings ``r`` (``building_id, period_start, period_end``, optional ``meter_id``) are
    of a building that may miss a bill in ``[ws, we]`` (:func:`screening.metered.missing_bills`, whose every
    result is one building's): all but those of the buildings with one meter whose reads leave no day of
    the window unread (then there is no gap before, between or after the reads inside the window, and a
    meter's gaps are the building's), of rows in date order and read forwards. None (every building) where
    a building's rows are not together, or a key is missing.

    One pass over the rows in their order: the running latest end of the building's earlier reads
    (day ordinals), a gap where a read starts more than a day after it.
    """
    cols = ["building_id", "period_start", "period_end"]
    if r.height == 0 or any(r[c].null_count() for c in cols):
        return None
    bid = r["building_id"].rle_id().to_numpy()
    first = np.r_[True, bid[1:] != bid[:-1]]
    st = np.flatnonzero(first)
    if r["building_id"].gather(st).n_unique() != len(st):  # (a building's rows apart)
        return None
    s = r["period_start"].to_physical().to_numpy().astype(np.int64)
    e = r["period_end"].to_physical().to_numpy().astype(np.int64)
    later = ~first[1:]
    grp = np.cumsum(first) - 1
    lo = int(e.min())
    lift = grp * (int(e.max()) - lo + 2)
    prev = np.maximum.accumulate(lift + (e - lo)) - lift + lo  # the latest end up to each row
    epoch = date(1970, 1, 1)
    w0, w1 = (ws - epoch).days, (we - epoch).days
    # a gap [prev + 1, s − 1] before a read that reaches into the window
    bad = np.r_[False, later & (s[1:] > prev[:-1] + 1) & (prev[:-1] + 1 <= w1) & (s[1:] - 1 >= w0)]
    bad |= e < s  # (a read backwards, or out of date order: the building is looked at)
    bad[1:] |= later & (s[1:] < s[:-1])
    if "meter_id" in r.columns:  # (a second meter: its own gaps, which other meters' reads may cover)
        mid = r["meter_id"].rle_id().to_numpy()
        bad[1:] |= later & (mid[1:] != mid[:-1])
    n = np.diff(np.append(st, len(s)))
    may = np.logical_or.reduceat(bad, st) | (s[st] > w0) | (np.maximum.reduceat(e, st) < w1)
    return np.repeat(may, n)


def reading_issues(
    conv: pl.DataFrame,
    spans: pl.DataFrame,
    *,
    lookback_months: int,
    min_coverage: float,
    max_estimated_share: float,
) -> pl.DataFrame:
    """:func:`screening.metered.reading_issues` (same arguments, same frame) over the readings of the buildings
    that may have one (:func:`_maybe_reading_issue`)."""
    may = _maybe_reading_issue(conv, spans, max_estimated_share)
    return metered.reading_issues(
        conv if may is None else conv.filter(pl.Series(may)),
        spans,
        lookback_months=lookback_months,
        min_coverage=min_coverage,
        max_estimated_share=max_estimated_share,
    )


def _maybe_reading_issue(r: pl.DataFrame, spans: pl.DataFrame, max_estimated_share: float) -> np.ndarray | None:
    """Which readings ``r`` are of a building that may have an issue of :func:`screening.metered.reading_issues`
    (whose every result is one building's; ``low_coverage`` comes from ``spans`` alone): all but those of
    the buildings whose reads of each fuel and meter never start before an earlier one ends (no duplicate,
    no overlap), whose heating-fuel reads in the span (``spans``: ``building_id, span_start, span_end``) are
    not more than ``max_estimated_share`` estimated, and that have one heating-fuel meter whose reads leave
    no day of the span unread (no gap). None (every
    building) where the rows are not in building, fuel, meter and date order, a key is missing, a read
    ends before it starts or ``is_heating_fuel`` differs within a fuel and meter.

    One pass over the rows in their order: the running latest end of the earlier reads of the same fuel
    and meter (day ordinals); a read that starts on or before it may overlap, one that starts more than a
    day after it leaves a gap.
    """
    cols = ["building_id", "fuel", "period_start", "period_end"]
    if r.height == 0 or max_estimated_share < 0 or any(r[c].null_count() for c in cols):
        return None
    if spans["building_id"].n_unique() != spans.height:
        return None
    keys = r.select(
        "building_id",
        "fuel",
        *([pl.col("meter_id").cast(pl.String).fill_null("")] if "meter_id" in r.columns else []),
        "period_start",
        "period_end",
    ).rechunk()
    s = keys["period_start"].to_physical().to_numpy().astype(np.int64)
    e = keys["period_end"].to_physical().to_numpy().astype(np.int64)
    if (e < s).any():
        return None
    new_b = metered.run_starts(keys, ["building_id"])
    new_g = metered.run_starts(keys, keys.columns[:-2], new_b)  # a new fuel and meter
    if not metered.strictly_sorted(keys, keys.columns, ties=True):
        return None
    later = ~new_g[1:]
    g = np.cumsum(new_g) - 1
    lo = int(e.min())
    lift = g * (int(e.max()) - lo + 2)
    run = np.maximum.accumulate(lift + (e - lo)) - lift + lo  # the latest end up to each row, by fuel and meter
    heat = r["is_heating_fuel"].fill_null(False).to_numpy() if "is_heating_fuel" in r.columns else np.ones(len(s), bool)
    if (later & (heat[1:] != heat[:-1])).any():  # (a fuel and meter's reads the heating fuel's and not)
        return None
    # the span of each building's rows
    st = np.flatnonzero(new_b)
    n = np.diff(np.append(st, len(s)))
    span = (
        keys.select("building_id")
        .gather(st)
        .join(
            spans.select("building_id", "span_start", "span_end"), on="building_id", how="left", maintain_order="left"
        )
    )
    no_span = (span["span_start"].is_null() | span["span_end"].is_null()).to_numpy()
    ss = np.repeat(span["span_start"].to_physical().fill_null(0).to_numpy().astype(np.int64), n)
    se = np.repeat(span["span_end"].to_physical().fill_null(0).to_numpy().astype(np.int64), n)
    bad = np.zeros(len(s), dtype=bool)
    bad[1:] = later & (s[1:] <= run[:-1])  # (a duplicate or an overlap)
    gap = later & (s[1:] > run[:-1] + 1) & (run[:-1] + 1 <= se[1:]) & (s[1:] - 1 >= ss[1:])
    bad[1:] |= heat[1:] & gap
    many = np.zeros(len(st), dtype=bool)
    if "estimated" in r.columns:  # (the share of estimated reads among the heating-fuel reads in the span)
        in_span = heat & (s <= se) & (e >= ss)
        n_est = np.add.reduceat(in_span & r["estimated"].cast(pl.Boolean).fill_null(False).to_numpy(), st)
        with np.errstate(divide="ignore", invalid="ignore"):
            many = (n_est > 0) & (n_est / np.add.reduceat(in_span, st) > max_estimated_share * (1 - 1e-9))
    big = np.iinfo(np.int64).max
    may = (
        np.logical_or.reduceat(bad, st)
        | many
        | no_span
        | (np.add.reduceat(heat & new_g, st) != 1)  # (no heating-fuel read, or reads of two meters)
        | (np.minimum.reduceat(np.where(heat, s, big), st) > ss[st])
        | (np.maximum.reduceat(np.where(heat, e, -big), st) < se[st])
    )
    return np.repeat(may, n)


def filled_end_issues(met: pl.DataFrame) -> pl.DataFrame:
    """Spans whose last days had no reading yet and were filled (``end_days_filled``)."""
    f = met.filter(pl.col("filled_days") > 0)
    src = (
        pl.when(pl.col("fit_method") == "regression")
        .then(pl.lit("the building's own weather fit"))
        .otherwise(pl.lit("the days and degree days of its read part (no weather fit)"))
    )
    share = (100 * pl.col("filled_kbtu") / pl.col("total_fuel_kbtu")).round(1).fill_nan(0.0).fill_null(0.0)
    t = ISSUE_TEXT["end_days_filled"]
    for k in ("{days}", "{fill_start}", "{span_end}", "{source}", "{share}"):
        t = t.replace(k, "{}")
    return f.select(
        "building_id",
        pl.lit("end_days_filled").alias("code"),
        pl.format(
            t,
            "filled_days",
            (pl.col("span_end") - pl.duration(days=pl.col("filled_days") - 1)).cast(pl.String),
            pl.col("span_end").cast(pl.String),
            src,
            share,
        ).alias("detail"),
        pl.lit(False).alias("blocking"),
    ).sort("building_id")


def other_fuel_only(conv: pl.DataFrame, b: pl.DataFrame) -> pl.DataFrame:
    """Buildings whose readings are all of fuels other than their heating fuel (``no_heating_fuel_readings``)."""
    # the buildings of the runs of rows (one building's rows in a row) without a heating-fuel reading: every
    # building without one (and, where a building's rows are not together, perhaps others: checked below)
    heat = conv["is_heating_fuel"].fill_null(False).to_numpy()
    rid = conv["building_id"].rle_id().to_numpy()
    st = np.flatnonzero(np.r_[True, rid[1:] != rid[:-1]]) if conv.height else np.zeros(0, dtype=np.int64)
    maybe = conv["building_id"].gather(st[~np.logical_or.reduceat(heat, st)] if len(st) else st)
    conv = conv.filter(pl.col("building_id").is_in(maybe.implode())) if maybe.len() else conv.clear()
    per = conv.group_by("building_id").agg(
        pl.col("is_heating_fuel").any().alias("_any"), pl.col("fuel").unique().sort().str.join(", ").alias("_fuels")
    )
    per = per.filter(~pl.col("_any")).join(b.select("building_id", "heating_fuel"), on="building_id")
    t = ISSUE_TEXT["no_heating_fuel_readings"]
    return per.select(
        "building_id",
        pl.lit("no_heating_fuel_readings").alias("code"),
        pl.format(
            t.replace("{fuels}", "{}").replace("{heating_fuel}", "{}"), pl.col("_fuels"), pl.col("heating_fuel")
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    ).sort("building_id")


def no_weather_issues(no_wx: pl.DataFrame, weather: pl.DataFrame) -> pl.DataFrame:
    """Buildings whose station has no weather on any day of the span (``no_weather_at_station``)."""
    rec = weather.group_by("station_id").agg(
        (
            pl.lit("its weather runs ")
            + pl.col("date").min().cast(pl.String)
            + pl.lit(" to ")
            + pl.col("date").max().cast(pl.String)
        ).alias("_rec")
    )
    j = no_wx.join(rec, on="station_id", how="left").with_columns(pl.col("_rec").fill_null("no weather at all"))
    t = ISSUE_TEXT["no_weather_at_station"]
    for k in ("{station_id}", "{span_start}", "{span_end}", "{record}"):
        t = t.replace(k, "{}")
    return j.select(
        "building_id",
        pl.lit("no_weather_at_station").alias("code"),
        pl.format(
            t, "station_id", pl.col("span_start").cast(pl.String), pl.col("span_end").cast(pl.String), "_rec"
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    ).sort("building_id")


def gap_details(gaps: pl.DataFrame, wgap: pl.DataFrame) -> pl.DataFrame:
    j = wgap.select("building_id", "station_id", "span_start", "span_end", "missing").join(
        gaps, on="station_id", how="left"
    )
    j = j.filter(
        pl.col("gap_start").is_null()
        | ((pl.col("gap_start") <= pl.col("span_end")) & (pl.col("gap_end") >= pl.col("span_start")))
    )
    j = j.with_columns(
        pl.when(pl.col("gap_start").is_null())
        .then(pl.lit("outside the station's record"))
        .otherwise(pl.col("gap_start").cast(pl.String) + pl.lit("–") + pl.col("gap_end").cast(pl.String))
        .alias("_d")
    )
    return (
        j.group_by("building_id")
        .agg(pl.col("missing").first(), pl.col("_d").unique().sort().str.join("; "))
        .select(
            "building_id",
            pl.lit("weather_gap").alias("code"),
            (
                pl.col("missing").cast(pl.String) + pl.lit(" day(s) of the span have no weather data: ") + pl.col("_d")
            ).alias("detail"),
            pl.lit(True).alias("blocking"),
        )
        .sort("building_id")
    )


def chunk_issues(
    conv: pl.DataFrame,
    spans: pl.DataFrame,
    span_missing: np.ndarray,
    met: pl.DataFrame,
    periods: pl.DataFrame,
    b: pl.DataFrame,
    gaps: pl.DataFrame,
    weather: pl.DataFrame,
    window,
    thr: Thresholds,
    *,
    lookback_months: int,
) -> pl.DataFrame:
    """Every data issue of a chunk of buildings but the one against the expectation (:func:`far_from_expectation`).

    ``conv`` as :func:`screening.units.convert_to_kbtu` returns it for ``b`` (its ``is_heating_fuel`` is the
    fuel against the building's ``heating_fuel``); ``spans`` carries ``station_id``; ``span_missing`` is the days without weather of each span (in ``spans``
    order); ``thr`` the ``[thresholds]`` settings (:class:`screening.config.Thresholds`). Returns ``building_id, code, detail, blocking`` sorted by
    building and code, ``blocking`` as declared in :data:`DATA_ISSUE_CODES`.
    """
    # (the days filled at a span's end are their own issue, end_days_filled, not a gap in the reads)
    read_spans = spans.drop("station_id").with_columns(
        (pl.col("span_end") - pl.duration(days=pl.col("filled_days"))).alias("span_end")
    )
    # the heating-fuel readings, taken once: the three detectors below look at no other (metered's take every
    # reading of a frame without is_heating_fuel for one of the heating fuel)
    heat = conv.filter(pl.col("is_heating_fuel")) if "is_heating_fuel" in conv.columns else conv
    issues = [
        reading_issues(
            conv,
            read_spans,
            lookback_months=lookback_months,
            min_coverage=thr.coverage_min,
            max_estimated_share=thr.estimated_share_max,
        ),
        metered.estimated_run_issues(
            heat.drop("is_heating_fuel", strict=False), read_spans, min_run=thr.estimated_run_min
        ),
        missing_bill_issues(heat.select("building_id", "meter_id", "period_start", "period_end"), spans, window),
        filled_end_issues(met),
        unit_error_issues(heat, b, thr.unit_error_factor, isolation=thr.unit_error_isolation),
        fit_outlier_issues(periods, met, thr.unit_error_factor_fit, thr.unit_error_isolation),
    ]
    wgap = spans.with_columns(pl.Series("missing", span_missing)).filter(pl.col("missing") > 0)
    # a station without a single day of weather in the span: its own issue, not a gap
    no_wx = wgap.filter(pl.col("missing") >= pl.col("span_days"))
    wgap = wgap.filter(pl.col("missing") < pl.col("span_days"))
    if wgap.height:
        gdetail = gap_details(gaps, wgap)
        issues.append(gdetail)
    if no_wx.height:
        issues.append(no_weather_issues(no_wx, weather))
    no_read = spans.join(conv.select("building_id").unique(), on="building_id", how="anti")
    if no_read.height:
        issues.append(
            no_read.select(
                "building_id",
                pl.lit("no_readings").alias("code"),
                pl.lit(ISSUE_TEXT["no_readings"]).alias("detail"),
                pl.lit(True).alias("blocking"),
            )
        )
    other_only = other_fuel_only(conv, b)
    if other_only.height:
        issues.append(other_only)
    issues_df = (
        pl.concat([i.select("building_id", "code", "detail", "blocking") for i in issues])
        .unique()
        .sort("building_id", "code")
    )
    # where the span is the window, missing_bills names the days a gap in the span would name again
    named = issues_df.filter(pl.col("code") == "missing_bills").join(
        spans.filter(pl.col("span_kind") != "shifted").select("building_id"), on="building_id"
    )["building_id"]
    issues_df = issues_df.filter(~((pl.col("code") == "gap_in_reads") & pl.col("building_id").is_in(named.implode())))
    issues_df = issues_df.with_columns(  # whether an issue blocks a verdict: declared once, DATA_ISSUE_CODES
        pl.col("code").replace_strict(DATA_ISSUE_CODES, return_dtype=pl.Boolean).alias("blocking")
    )
    if other_only.height:  # "0 % covered" says nothing more than "no reading in the heating fuel"
        issues_df = issues_df.filter(
            ~((pl.col("code") == "low_coverage") & pl.col("building_id").is_in(other_only["building_id"].implode()))
        )
    return issues_df


def far_from_expectation(frame: pl.DataFrame, issues_df: pl.DataFrame, thr: Thresholds) -> pl.DataFrame:
    """``issues_df`` with ``likely_unit_error`` added where metered heating is far off the expectation.

    A ratio ``actual_heating_kbtu / expected_heating_kbtu`` [-] at or above ``thr.unit_error_factor_expected``
    or at or below 1/``thr.unit_error_factor_expected_low`` is a data problem, not waste (only a finite ratio
    over a positive expectation; a missing fuel or missing weather has its own issue, :data:`NO_BASIS_CODES`).
    """
    uf = thr.unit_error_factor_expected
    ratio = pl.col("actual_heating_kbtu") / pl.col("expected_heating_kbtu")
    # (only a finite ratio over a positive expectation; a missing fuel or missing weather has its own issue)
    no_basis = issues_df.filter(pl.col("code").is_in(list(NO_BASIS_CODES)))["building_id"].implode()
    far = frame.filter(
        ((ratio >= uf) | (ratio <= 1 / thr.unit_error_factor_expected_low))
        & (pl.col("expected_heating_kbtu") > 0)
        & ratio.is_finite()
        & ~pl.col("building_id").is_in(no_basis)
    ).select(
        "building_id",
        pl.lit("likely_unit_error").alias("code"),
        (
            pl.lit("metered heating is ")
            + pl.when(ratio >= 10)
            .then(ratio.round(0).cast(pl.Int64).cast(pl.String))
            .otherwise(ratio.round_sig_figs(3).cast(pl.String))
            + pl.lit("× the expectation: check the units (")
            + pl.col("heating_fuel").replace_strict(UNIT_MIXUPS, default="the unit column against the bills")
            + pl.lit(") and the floor area")
            + pl.when((pl.col("heating_fuel") == "electricity") & (ratio < 1))
            .then(
                pl.lit(
                    "; for electric heat also a heat pump (give its seasonal COP as heating_efficiency) "
                    "or a meter whose lights, plugs and cooling leave little to heating"
                )
            )
            .otherwise(pl.lit(""))
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    )
    return pl.concat([issues_df, far]).unique(subset=["building_id", "code"], keep="first").sort("building_id", "code")
