"""The events file (what was found and done at each building) and the savings after a measure.

Layer 3 (orchestration): reads the events file through the project's one reader (``csvread``
via ``ingest._read_typed``, so rows are accepted or rejected with file, line, column, value and
reason), and turns the bills, the degree-day cube and the normal year into one row of savings
per measure with the pure functions of ``screening/savings.py``.

The events file is read on every run (it is small) and not stored in the database.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np
import polars as pl

from . import metered, schema
from . import savings as sv
from .csvread import LINE_COL
from .ingest import (
    REJECT_SCHEMA,
    Loaded,
    ReadOptions,
    _combine,
    _read_typed,
    rejects_frame,
)

EVENT_KINDS = tuple(schema.EVENT_KINDS)
FINDINGS = tuple(schema.FINDINGS)

#: the events file's columns, declared in :data:`screening.schema.EVENTS`
EVENT_COLUMNS = schema.specs("events")


def read_events(path: str, opts: ReadOptions | None = None, building_ids: pl.Series | None = None) -> Loaded:
    """Read and check an events file.

    A row is rejected for a bad value (unknown kind or finding, a date that is not one, a bad id,
    a negative cost), for a ``finding`` on a row that is not an audit, for two measures of one
    building on the same day, and, given ``building_ids``, for a building not among the accepted
    buildings. Exact duplicate rows are kept once, with a notice.
    """
    opts = opts or ReadOptions()
    t, typed, prob = _read_typed(path, EVENT_COLUMNS, opts, "events")
    label = t.path
    wrong = typed.filter(pl.col("finding").is_not_null() & (pl.col("kind") != "audit")).select(
        pl.lit(label).alias("file"),
        pl.col(LINE_COL).alias("line"),
        pl.lit("finding").alias("column"),
        pl.col("finding").alias("value"),
        (pl.lit("a finding belongs to an audit row; this row's kind is ") + pl.col("kind")).alias("reason"),
    )
    prob = pl.concat([prob.cast(REJECT_SCHEMA), wrong.cast(REJECT_SCHEMA)])
    good, rej = _combine(typed, prob, t.rejects)
    notices = list(t.notices)
    data_cols = [c for c in good.columns if c != LINE_COL]
    n0 = good.height
    good = good.unique(subset=data_cols, keep="first", maintain_order=True)
    if good.height < n0:
        notices.append(f"{label}: {n0 - good.height} exact duplicate event row(s) kept once")
    key = ["building_id", "date", "kind"]
    twice = good.filter((pl.col("kind") == "measure") & pl.struct(key).is_duplicated())
    if twice.height:
        rej = pl.concat(
            [
                rej,
                twice.select(
                    pl.lit(label).alias("file"),
                    pl.col(LINE_COL).alias("line"),
                    pl.lit("date").alias("column"),
                    pl.col("date").cast(pl.String).alias("value"),
                    pl.lit("two different measures of one building on one day; give one row per measure and day").alias(
                        "reason"
                    ),
                ).cast(REJECT_SCHEMA),
            ]
        )
        good = good.filter(~((pl.col("kind") == "measure") & pl.struct(key).is_duplicated()))
    if building_ids is not None:
        unknown = good.filter(~pl.col("building_id").is_in(building_ids.implode()))
        rej = pl.concat(
            [
                rej,
                unknown.select(
                    pl.lit(label).alias("file"),
                    pl.col(LINE_COL).alias("line"),
                    pl.lit("building_id").alias("column"),
                    pl.col("building_id").alias("value"),
                    pl.lit("unknown building (not among the accepted buildings)").alias("reason"),
                ).cast(REJECT_SCHEMA),
            ]
        )
        good = good.filter(pl.col("building_id").is_in(building_ids.implode()))
    return Loaded(label, good.sort("building_id", "date", LINE_COL), rej.sort("line"), notices)


def read_all(
    paths: list[str], opts: ReadOptions, building_ids: pl.Series | None
) -> tuple[pl.DataFrame, pl.DataFrame, list[str]]:
    """Several events files: their rows (with ``_file``), their rejects and notices."""
    frames, rejs, notes = [], [], []
    for p in paths:
        ld = read_events(p, opts, building_ids)
        frames.append(ld.df.with_columns(pl.lit(ld.path).alias("_file")))
        rejs.append(ld.rejects.cast(REJECT_SCHEMA))
        notes += ld.notices
    df = pl.concat(frames) if frames else pl.DataFrame()
    return df, (pl.concat(rejs) if rejs else rejects_frame([])), notes


# --------------------------------------------------------------------------------------------
# savings after a measure
# --------------------------------------------------------------------------------------------

SAVINGS_SCHEMA = pl.Schema(
    {
        "building_id": pl.String,
        "event_date": pl.Date,
        "baseline_start": pl.Date,
        "baseline_end": pl.Date,
        "report_start": pl.Date,
        "report_end": pl.Date,
        "baseline_n": pl.Int64,
        "baseline_r2": pl.Float64,
        "baseline_cv_rmse": pl.Float64,
        "baseline_nmbe": pl.Float64,
        "baseline_base_f": pl.Float64,
        "autocorrelation": pl.Float64,
        "effective_n": pl.Float64,
        "report_periods": pl.Int64,
        "baseline_projected_kbtu": pl.Float64,
        "metered_kbtu": pl.Float64,
        "avoided_kbtu": pl.Float64,
        "avoided_u68_kbtu": pl.Float64,
        "avoided_u90_kbtu": pl.Float64,
        "normalized_savings_kbtu": pl.Float64,
        "meets_guideline14": pl.Boolean,
        "guideline14_note": pl.String,
        "usd_per_kbtu": pl.Float64,
        "kg_co2e_per_kbtu": pl.Float64,
    }
)


def _heating_bills(conv: pl.DataFrame) -> pl.DataFrame:
    r = conv.filter(pl.col("is_heating_fuel")) if "is_heating_fuel" in conv.columns else conv
    return (
        r.group_by("building_id", "period_start", "period_end")
        .agg(pl.col("energy_kbtu").sum())
        .with_columns(((pl.col("period_end") - pl.col("period_start")).dt.total_days() + 1).alias("days"))
    )


PERIOD_SCHEMA = pl.Schema(
    {
        "building_id": pl.String,
        "event_date": pl.Date,
        "period_start": pl.Date,
        "period_end": pl.Date,
        "baseline_kbtu": pl.Float64,
        "metered_kbtu": pl.Float64,
    }
)


def measure_savings(
    conv: pl.DataFrame,
    buildings: pl.DataFrame,
    cube,
    normals,
    grid: np.ndarray,
    events: pl.DataFrame,
    prices: pl.DataFrame,
    *,
    window_end: _dt.date,
    blackout_days: int,
    min_periods: int,
    cv_max: float,
    nmbe_max: float,
) -> pl.DataFrame:
    """One row per measure (``SAVINGS_SCHEMA``, energies in kBtu); see :func:`savings_with_periods`."""
    return savings_with_periods(
        conv,
        buildings,
        cube,
        normals,
        grid,
        events,
        prices,
        window_end=window_end,
        blackout_days=blackout_days,
        min_periods=min_periods,
        cv_max=cv_max,
        nmbe_max=nmbe_max,
    )[0]


def savings_with_periods(
    conv: pl.DataFrame,
    buildings: pl.DataFrame,
    cube,
    normals,
    grid: np.ndarray,
    events: pl.DataFrame,
    prices: pl.DataFrame,
    *,
    window_end: _dt.date,
    blackout_days: int,
    min_periods: int,
    cv_max: float,
    nmbe_max: float,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """One row per measure (``SAVINGS_SCHEMA``, energies in kBtu), and one row per reporting bill
    (``PERIOD_SCHEMA``: the baseline projected to the bill's weather, α·days + β·HDD(τ), and the
    metered energy [kBtu]; their differences add up to the measure's ``avoided_kbtu``).

    Baseline: the heating-fuel bills lying wholly in the 12 months before the measure date,
    fitted by ``metered.fit_variable_base`` (at least ``min_periods`` bills of ≤ 62 days with
    weather). Reporting period: from ``blackout_days`` after the measure to the day before the
    building's next measure or the window end; its whole bills with weather. Avoided energy =
    Σ (α·days + β·HDD(τ)) − metered over those bills; normalized savings = the baseline's and the
    reporting period's own fits, each on the normal year (365·α + β·HDD_normal(τ)), subtracted.
    """
    none = (pl.DataFrame(schema=SAVINGS_SCHEMA), pl.DataFrame(schema=PERIOD_SCHEMA))
    if events.height == 0 or "kind" not in events.columns:
        return none
    m = (
        events.filter((pl.col("kind") == "measure") & (pl.col("date") <= window_end))
        .select("building_id", pl.col("date").alias("event_date"))
        .unique()
        .sort("building_id", "event_date")
        .join(buildings.select("building_id", "station_id"), on="building_id", how="inner")
        .sort("building_id", "event_date")
    )
    if m.height == 0:
        return none
    m = (
        m.with_columns(
            pl.col("event_date").dt.offset_by("-12mo").alias("baseline_start"),
            (pl.col("event_date") - pl.duration(days=1)).alias("baseline_end"),
            (pl.col("event_date") + pl.duration(days=blackout_days)).alias("report_start"),
            pl.min_horizontal(
                pl.col("event_date").shift(-1).over("building_id") - pl.duration(days=1), pl.lit(window_end)
            ).alias("report_end"),
        )
        .with_row_index("_mi")
        .with_columns(pl.col("_mi").cast(pl.String).alias("_key"))
    )
    bills = _heating_bills(conv)
    both = bills.join(m, on="building_id", how="inner")
    base = both.filter(
        (pl.col("period_start") >= pl.col("baseline_start")) & (pl.col("period_end") <= pl.col("baseline_end"))
    )
    rep = both.filter(
        (pl.col("period_start") >= pl.col("report_start")) & (pl.col("period_end") <= pl.col("report_end"))
    )
    keys = m["_key"]

    def hdd(frame: pl.DataFrame) -> tuple[pl.DataFrame, np.ndarray]:
        frame = frame.sort("_mi", "period_start", "period_end")
        if frame.height == 0:
            return frame.with_columns(pl.lit(True).alias("usable")), np.zeros((0, grid.size))
        dd, _, missing = cube.period_totals(frame["station_id"].to_numpy(), frame["period_start"], frame["period_end"])
        dd = np.ascontiguousarray(dd)
        return frame.with_columns(pl.Series("_missing", missing)), dd

    def fit_bills(frame: pl.DataFrame, dd: np.ndarray) -> tuple[dict, dict]:
        """The variable-base fit of each measure's bills (monthly-length bills with whole weather)."""
        if frame.height:
            frame = frame.with_columns(((pl.col("days") <= 62) & (pl.col("_missing") == 0)).alias("usable"))
        padded = metered.pad_periods(
            frame.select(pl.col("_key").alias("building_id"), "days", "energy_kbtu", "usable"), dd, keys
        )
        return padded, metered.fit_variable_base(
            padded["use_per_day"], padded["days"], padded["hdd_per_day"], grid, padded["valid"], min_periods=min_periods
        )

    base, base_dd = hdd(base)
    pb, fit = fit_bills(base, base_dd)
    heating = fit["model"] == "heating"
    bi = np.maximum(fit["base_index"], 0)
    alpha = np.nan_to_num(fit["alpha"], nan=np.nan)
    beta = np.where(heating, fit["beta"], np.where(fit["model"] == "baseload_only", 0.0, np.nan))
    x_at = np.take_along_axis(pb["hdd_per_day"], bi[:, None, None], axis=2)[:, :, 0]
    valid = pb["valid"]
    e = sv.residuals(pb["use_per_day"], x_at, alpha, beta, valid)
    n_par = np.where(heating & ~fit["alpha_at_zero"], 2, 1)
    st = sv.fit_statistics(pb["use_per_day"] * pb["days"], pb["days"], e, valid, n_par)
    fitted = np.isfinite(alpha) & np.isfinite(beta)
    ok, why = sv.g14_check(st["cv_rmse"], st["nmbe"], cv_max=cv_max, nmbe_max=nmbe_max)
    why = [
        w
        if f
        else f"baseline not fitted: {int(n)} usable bills in the 12 months before (at least {min_periods} needed)"
        for w, f, n in zip(why, fitted, st["n"])
    ]
    ok = ok & fitted
    rho = sv.lag1_autocorrelation(e, valid)
    n_eff = sv.effective_n(st["n"], rho)

    # reporting period: projection and metered use over the same whole bills with weather
    rep, rep_dd = hdd(rep)
    n_m = m.height
    proj = np.zeros(n_m)
    met = np.zeros(n_m)
    cnt = np.zeros(n_m, dtype=np.int64)
    per = pl.DataFrame(schema=PERIOD_SCHEMA)
    if rep.height:
        have = rep["_missing"].to_numpy() == 0
        mi = rep["_mi"].to_numpy().astype(np.int64)
        h = rep_dd[np.arange(rep.height), bi[mi]]
        p_i = alpha[mi] * rep["days"].to_numpy() + beta[mi] * h
        np.add.at(proj, mi[have], p_i[have])
        np.add.at(met, mi[have], rep["energy_kbtu"].to_numpy()[have])
        np.add.at(cnt, mi[have], 1)
        per = rep.filter(pl.Series(have)).select(
            "building_id",
            "event_date",
            "period_start",
            "period_end",
            pl.Series("baseline_kbtu", p_i[have]),
            pl.col("energy_kbtu").alias("metered_kbtu"),
        )
        per = per.filter(pl.col("baseline_kbtu").is_finite()).cast(PERIOD_SCHEMA)
    with np.errstate(invalid="ignore"):
        avoided = np.where(cnt > 0, proj - met, np.nan)
    u68 = sv.savings_uncertainty(st["cv_rmse"], st["n"], n_eff, cnt, proj, n_par, 0.68)
    u90 = sv.savings_uncertainty(st["cv_rmse"], st["n"], n_eff, cnt, proj, n_par, 0.90)
    no_rep = cnt == 0
    why = [
        (w + "; " if w else "") + "no whole bill in the reporting period yet" if nr else w for w, nr in zip(why, no_rep)
    ]

    # normalized savings: both periods on the normal year
    pr, fr = fit_bills(rep, rep_dd)
    nh = normals.for_stations(m["station_id"].to_numpy())
    rows = np.arange(n_m)

    def normal(f):
        b_ = np.where(f["model"] == "heating", f["beta"], np.where(f["model"] == "baseload_only", 0.0, np.nan))
        return 365.0 * f["alpha"] + b_ * nh[rows, np.maximum(f["base_index"], 0)]

    norm_sav = normal(fit) - normal(fr)
    out = m.select(
        "building_id", "event_date", "baseline_start", "baseline_end", "report_start", "report_end", "_mi"
    ).with_columns(
        pl.Series("baseline_n", st["n"].astype(np.int64)),
        pl.Series("baseline_r2", fit["r2"]),
        pl.Series("baseline_cv_rmse", st["cv_rmse"]),
        pl.Series("baseline_nmbe", st["nmbe"]),
        pl.Series("baseline_base_f", fit["base_f"]),
        pl.Series("autocorrelation", rho),
        pl.Series("effective_n", n_eff),
        pl.Series("report_periods", cnt),
        pl.Series("baseline_projected_kbtu", np.where(cnt > 0, proj, np.nan)),
        pl.Series("metered_kbtu", np.where(cnt > 0, met, np.nan)),
        pl.Series("avoided_kbtu", avoided),
        pl.Series("avoided_u68_kbtu", u68),
        pl.Series("avoided_u90_kbtu", u90),
        pl.Series("normalized_savings_kbtu", norm_sav),
        pl.Series("meets_guideline14", ok & ~no_rep),
        pl.Series("guideline14_note", why, dtype=pl.String),
    )
    out = out.with_columns(
        [
            pl.when(pl.col(c).is_nan()).then(None).otherwise(pl.col(c)).alias(c)
            for c, t in SAVINGS_SCHEMA.items()
            if t == pl.Float64 and c in out.columns
        ]
    )
    out = out.join(prices.select("building_id", "usd_per_kbtu", "kg_co2e_per_kbtu"), on="building_id", how="left")
    return (
        out.select(list(SAVINGS_SCHEMA)).sort("building_id", "event_date"),
        per.sort("building_id", "event_date", "period_start"),
    )


def since_measure(
    s: pl.DataFrame, periods: pl.DataFrame, events: pl.DataFrame, *, si: bool, currency: str, kbtu_to_kwh: float
) -> dict[str, dict]:
    """The sheet's "since the measure" data, per building: its latest measure with a reporting period.

    ``{"event_date", "description", "periods": [{"start", "end", "baseline", "metered"}], "avoided_energy",
    "avoided_low_90", "avoided_high_90", "energy_unit", "cost", "currency"}``, energies in the run's unit
    (kBtu, or kWh under SI); ``cost`` the avoided energy at the building's price (None when unknown).
    The periods' baseline − metered add up to ``avoided_energy``.
    """
    f = kbtu_to_kwh if si else 1.0
    if s.height == 0:
        return {}
    latest = (
        s.filter(pl.col("avoided_kbtu").is_not_null())
        .sort("building_id", "event_date")
        .group_by("building_id", maintain_order=True)
        .last()
    )
    desc = (
        events.filter(pl.col("kind") == "measure")
        .select("building_id", pl.col("date").alias("event_date"), "description")
        .unique(subset=["building_id", "event_date"], keep="first")
    )
    latest = latest.join(desc, on=["building_id", "event_date"], how="left")
    per: dict[tuple, list[dict]] = {}
    for r in periods.iter_rows(named=True):
        per.setdefault((r["building_id"], r["event_date"]), []).append(
            {
                "start": str(r["period_start"]),
                "end": str(r["period_end"]),
                "baseline": r["baseline_kbtu"] * f,
                "metered": r["metered_kbtu"] * f,
            }
        )
    out = {}
    for r in latest.iter_rows(named=True):
        av, u = r["avoided_kbtu"], r["avoided_u90_kbtu"]
        price = r["usd_per_kbtu"]
        out[r["building_id"]] = {
            "event_date": str(r["event_date"]),
            "description": r["description"] or "",
            "periods": per.get((r["building_id"], r["event_date"]), []),
            "avoided_energy": av * f,
            "avoided_low_90": (av - u) * f if u is not None else None,
            "avoided_high_90": (av + u) * f if u is not None else None,
            "energy_unit": "kWh" if si else "kBtu",
            "cost": av * price if price is not None else None,
            "currency": currency,
        }
    return out


SAVINGS_COLUMNS = [
    "building_id",
    "event_date",
    "report_start",
    "report_end",
    "avoided_energy",
    "avoided_low_90",
    "avoided_high_90",
    "avoided_low_68",
    "avoided_high_68",
    "normalized_savings",
    "energy_unit",
    "baseline_start",
    "baseline_end",
    "baseline_n",
    "baseline_r2",
    "baseline_cv_rmse",
    "baseline_nmbe",
    "autocorrelation",
    "effective_n",
    "report_periods",
    "baseline_projected",
    "metered",
    "meets_guideline14",
    "guideline14_note",
    "avoided_cost",
    "avoided_co2e_kg",
    "currency",
]


def savings_table(s: pl.DataFrame, *, si: bool, currency: str, kbtu_to_kwh: float) -> pl.DataFrame:
    """savings.csv: one row per measure, energies in the run's unit (kBtu, or kWh under SI)."""
    f = kbtu_to_kwh if si else 1.0

    def e(c: str) -> pl.Expr:
        return (pl.col(c) * f).round(1)

    return s.select(
        "building_id",
        "event_date",
        "report_start",
        "report_end",
        e("avoided_kbtu").alias("avoided_energy"),
        ((pl.col("avoided_kbtu") - pl.col("avoided_u90_kbtu")) * f).round(1).alias("avoided_low_90"),
        ((pl.col("avoided_kbtu") + pl.col("avoided_u90_kbtu")) * f).round(1).alias("avoided_high_90"),
        ((pl.col("avoided_kbtu") - pl.col("avoided_u68_kbtu")) * f).round(1).alias("avoided_low_68"),
        ((pl.col("avoided_kbtu") + pl.col("avoided_u68_kbtu")) * f).round(1).alias("avoided_high_68"),
        e("normalized_savings_kbtu").alias("normalized_savings"),
        pl.lit("kWh" if si else "kBtu").alias("energy_unit"),
        "baseline_start",
        "baseline_end",
        "baseline_n",
        pl.col("baseline_r2").round(4),
        pl.col("baseline_cv_rmse").round(2),
        pl.col("baseline_nmbe").round(4),
        pl.col("autocorrelation").round(3),
        pl.col("effective_n").round(2),
        "report_periods",
        e("baseline_projected_kbtu").alias("baseline_projected"),
        e("metered_kbtu").alias("metered"),
        "meets_guideline14",
        "guideline14_note",
        (pl.col("avoided_kbtu") * pl.col("usd_per_kbtu")).round(2).alias("avoided_cost"),
        (pl.col("avoided_kbtu") * pl.col("kg_co2e_per_kbtu")).round(1).alias("avoided_co2e_kg"),
        pl.lit(currency).alias("currency"),
    )


def savings_totals(s: pl.DataFrame, *, si: bool, kbtu_to_kwh: float) -> dict:
    """Portfolio totals over the measures whose baseline meets the limits; uncertainties in
    quadrature (the buildings' errors taken as independent)."""
    f = kbtu_to_kwh if si else 1.0
    v = s.filter(pl.col("meets_guideline14") & pl.col("avoided_kbtu").is_not_null())
    av = float(v["avoided_kbtu"].sum()) if v.height else 0.0
    return {
        "measures": s.height,
        "measures_meeting_guideline14": v.height,
        "avoided_energy": round(av * f, 1),
        "avoided_u68": round(sv.quadrature(v["avoided_u68_kbtu"].to_numpy()) * f, 1),
        "avoided_u90": round(sv.quadrature(v["avoided_u90_kbtu"].to_numpy()) * f, 1),
        "normalized_savings": round(float(v["normalized_savings_kbtu"].fill_null(0).sum()) * f, 1),
        "avoided_cost": round(float((v["avoided_kbtu"] * v["usd_per_kbtu"]).fill_null(0).sum()), 2),
        "avoided_co2e_kg": round(float((v["avoided_kbtu"] * v["kg_co2e_per_kbtu"]).fill_null(0).sum()), 1),
        "energy_unit": "kWh" if si else "kBtu",
    }


# --------------------------------------------------------------------------------------------
# the plan and the events: audits that found nothing, confirmed findings not yet fixed, hit rate
# --------------------------------------------------------------------------------------------

THEN_SCHEMA = pl.Schema(
    {
        "building_id": pl.String,
        "audit_date": pl.Date,
        "in_plan": pl.Boolean,
        "cost_then": pl.Float64,
        "mechanism_then": pl.String,
    }
)


def audits_then(store, events: pl.DataFrame) -> pl.DataFrame:
    """For each audit of the events: what the latest stored successful run before its day said of the
    building (``in_plan``, ``cost_then`` = its expected recoverable cost, ``mechanism_then``)."""
    if events.height == 0:
        return pl.DataFrame(schema=THEN_SCHEMA)
    a = events.filter(pl.col("kind") == "audit").select("building_id", pl.col("date").alias("audit_date")).unique()
    if a.height == 0:
        return pl.DataFrame(schema=THEN_SCHEMA)
    rows = store.execute("plan_before_events", stage_audits=a)
    return pl.DataFrame(rows, schema=THEN_SCHEMA, orient="row")


def _quarter(col: str) -> pl.Expr:
    return pl.col(col).dt.year().cast(pl.String) + pl.lit("-Q") + pl.col(col).dt.quarter().cast(pl.String)


def plan_context(
    events: pl.DataFrame,
    then: pl.DataFrame,
    *,
    window_end: _dt.date,
    rest_quarters: int,
    regrow: float,
    blackout_days: int = 30,
    window_start: _dt.date | None = None,
    judge_min_days: int = 180,
) -> pl.DataFrame:
    """Per building with an audit finding or a measure: how the screening treats it (for ``screen.screen``
    and ``pipeline.screen_frames``).

    - ``_clean_audit_recent``: its latest audit (up to the window end) found nothing (``none_found``),
      less than ``rest_quarters`` quarters before the window end, and no measure since. The screening
      keeps it off the plan unless its expected recoverable cost now reaches ``regrow`` × what the
      list it was audited from gave (``_cost_at_audit``; unknown: it stays off);
    - ``_pin_plan``: its latest audit confirmed a finding and no measure is recorded on or after it;
    - ``_judge_from``: its latest measure plus ``blackout_days`` falls inside the window (after
      ``window_start``) and leaves at least ``judge_min_days`` days to the window's end: the building is
      judged on those post-measure days only (``pipeline.screen_frames`` cuts its span there, when its
      bills cover them, and fits only the bills from that day on);
    - ``_measure_recent``: the same, but fewer than ``judge_min_days`` days after the blackout are in the
      window: the building is not planned on the mixed 12 months (judged again once enough post-measure
      months are billed; its savings are in savings.csv);
    - ``_measure_in_years``: a measure within the 12 months before the window or in it: the year-on-year
      comparison would straddle it, so it is not made (the drop is reported as savings, not as a change);
    - ``_measure_date``: the latest measure's day (up to the window's end);
    - ``plan_note``: the sentence for summary.json's ``plan_notes`` (and the sheet's verdict).
    """
    schema = pl.Schema(
        {
            "building_id": pl.String,
            "_clean_audit_recent": pl.Boolean,
            "_cost_at_audit": pl.Float64,
            "_pin_plan": pl.Boolean,
            "_measure_recent": pl.Boolean,
            "_judge_from": pl.Date,
            "_measure_in_years": pl.Boolean,
            "_measure_date": pl.Date,
            "plan_note": pl.String,
        }
    )
    if events.height == 0:
        return pl.DataFrame(schema=schema)
    ev = events.filter(pl.col("date") <= window_end)
    w_start = (
        window_start
        if window_start is not None
        else _dt.date(window_end.year - 1, window_end.month, min(window_end.day, 28))
    )
    last_m = (
        ev.filter(pl.col("kind") == "measure")
        .group_by("building_id")
        .agg(pl.col("date").max().alias("_md"))
        .with_columns((pl.col("_md") + pl.duration(days=blackout_days)).alias("_rs"))
    )
    # a measure whose blackout ends inside the window: the window mixes use before and after it
    mixed = last_m.filter(pl.col("_rs") > pl.lit(w_start)).with_columns(
        ((pl.lit(window_end) - pl.col("_rs")).dt.total_days() + 1).alias("_post_days")
    )
    judged = pl.col("_post_days") >= judge_min_days
    recent_ctx = mixed.select(
        "building_id",
        pl.lit(False).alias("_clean_audit_recent"),
        pl.lit(None, dtype=pl.Float64).alias("_cost_at_audit"),
        pl.lit(False).alias("_pin_plan"),
        (~judged).alias("_measure_recent"),
        pl.when(judged).then(pl.col("_rs")).otherwise(None).alias("_judge_from"),
        pl.lit(True).alias("_measure_in_years"),
        pl.col("_md").alias("_measure_date"),
        pl.when(judged)
        .then(
            pl.lit("measure of ")
            + pl.col("_md").cast(pl.String)
            + pl.lit(": judged on the ")
            + pl.col("_post_days").cast(pl.String)
            + pl.lit(" days from ")
            + pl.col("_rs").cast(pl.String)
            + pl.lit(
                f" to {window_end} only (after the measure and {blackout_days} days for it to settle in); its drop is "
                "reported as savings (savings.csv), not as a change on last year"
            )
        )
        .otherwise(
            pl.lit("measure of ")
            + pl.col("_md").cast(pl.String)
            + pl.lit(
                ": the compared 12 months mix use before and "
                "after it, so it is not planned on them; judged on the bills from "
            )
            + pl.col("_rs").cast(pl.String)
            + pl.lit(f" once {judge_min_days} days of them are billed (its savings so far are in savings.csv)")
        )
        .alias("plan_note"),
    )
    # a measure in the 12 months before the window (or in it): no year-on-year comparison
    year_before = _dt.date(w_start.year - 1, w_start.month, min(w_start.day, 28))
    straddle = last_m.filter(
        (pl.col("_md") >= pl.lit(year_before)) & ~pl.col("building_id").is_in(mixed["building_id"].implode())
    ).select(
        "building_id",
        pl.lit(False).alias("_clean_audit_recent"),
        pl.lit(None, dtype=pl.Float64).alias("_cost_at_audit"),
        pl.lit(False).alias("_pin_plan"),
        pl.lit(False).alias("_measure_recent"),
        pl.lit(None, dtype=pl.Date).alias("_judge_from"),
        pl.lit(True).alias("_measure_in_years"),
        pl.col("_md").alias("_measure_date"),
        (
            pl.lit("measure of ")
            + pl.col("_md").cast(pl.String)
            + pl.lit(
                ": the compared 12 months are all after it; "
                "no change on last year is computed (the previous year is before the measure; its savings are in "
                "savings.csv)"
            )
        ).alias("plan_note"),
    )
    recent_ctx = pl.concat([recent_ctx.cast(schema), straddle.cast(schema)])
    aud = (
        ev.filter((pl.col("kind") == "audit") & pl.col("finding").is_not_null())
        .with_columns(
            pl.col("finding")
            .replace_strict({"confirmed": 0, "data_error": 1, "none_found": 2}, return_dtype=pl.Int64)
            .alias("_prio")
        )
        .sort("building_id", "date", "_prio")
        .group_by("building_id", maintain_order=True)
        .agg(pl.col("date").last().alias("audit_date"), pl.col("finding").last(), pl.col("mechanism").last())
    )
    if aud.height == 0:
        return recent_ctx.cast(schema).sort("building_id")
    meas = ev.filter(pl.col("kind") == "measure").group_by("building_id").agg(pl.col("date").max().alias("_m"))
    months = 3 * rest_quarters
    a = (
        aud.join(meas, on="building_id", how="left")
        .join(then.select("building_id", "audit_date", "cost_then"), on=["building_id", "audit_date"], how="left")
        .with_columns(pl.col("audit_date").dt.offset_by(f"{months}mo").alias("_until"))
    )
    fixed = pl.col("_m").is_not_null() & (pl.col("_m") >= pl.col("audit_date"))
    clean = (pl.col("finding") == "none_found") & (pl.col("_until") > pl.lit(window_end)) & ~fixed
    pin = (pl.col("finding") == "confirmed") & ~fixed
    a = a.select(
        "building_id",
        clean.alias("_clean_audit_recent"),
        pl.col("cost_then").alias("_cost_at_audit"),
        pin.alias("_pin_plan"),
        pl.when(pin)
        .then(
            pl.lit("audit of ")
            + pl.col("audit_date").cast(pl.String)
            + pl.lit(" confirmed a finding")
            + pl.when(pl.col("mechanism").is_not_null())
            .then(pl.lit(" (") + pl.col("mechanism") + pl.lit(")"))
            .otherwise(pl.lit(""))
            + pl.lit(" and no measure is recorded since: kept at the top of the plan")
        )
        .when(clean)
        .then(
            pl.lit("audit of ")
            + pl.col("audit_date").cast(pl.String)
            + pl.lit(" found nothing: kept off the plan until ")
            + pl.col("_until").cast(pl.String)
            + pl.lit(f" unless its expected savings reach {regrow:g}× ")
            + pl.when(pl.col("cost_then").is_not_null())
            .then(
                pl.lit("those of the list it was audited from (")
                + pl.col("cost_then")
                .round(0)
                .cast(pl.Int64)
                .map_elements(lambda v: f"{v:,}", return_dtype=pl.String)  # a few audited rows: thousands shown
                + pl.lit(" a year)")
            )
            .otherwise(pl.lit("those at the audit (not on record: kept off)"))
        )
        .otherwise(None)
        .alias("plan_note"),
        pl.lit(False).alias("_measure_recent"),
        pl.lit(None, dtype=pl.Date).alias("_judge_from"),
        pl.lit(False).alias("_measure_in_years"),
        pl.lit(None, dtype=pl.Date).alias("_measure_date"),
    )
    a = a.select(list(schema)).cast(schema)
    # a measure in the window takes precedence (a finding it fixed, or a clean audit before it, no longer
    # speaks); one in the year before only stops the year-on-year comparison
    a = a.filter(~pl.col("building_id").is_in(mixed["building_id"].implode()))
    a = a.join(straddle.select("building_id", pl.col("_measure_date").alias("_sd")), on="building_id", how="left")
    a = a.with_columns(
        pl.col("_sd").is_not_null().alias("_measure_in_years"),
        pl.col("_sd").alias("_measure_date"),
    ).drop("_sd")
    rest = recent_ctx.filter(~pl.col("building_id").is_in(a["building_id"].implode()))
    return pl.concat([rest, a.select(list(schema))]).sort("building_id")


def hit_rate(events: pl.DataFrame, then: pl.DataFrame) -> dict:
    """The list's own hit rate: of the audits of buildings the tool had put on the audit plan (in the
    latest run before the audit), how many confirmed a finding; by the mechanism the list named first
    and by the audit's quarter."""
    aud = events.filter((pl.col("kind") == "audit") & pl.col("finding").is_not_null()).select(
        "building_id", pl.col("date").alias("audit_date"), "finding"
    )
    j = aud.join(then, on=["building_id", "audit_date"], how="left")
    known = j.filter(pl.col("in_plan").is_not_null())
    planned = known.filter(pl.col("in_plan")).with_columns(
        pl.col("mechanism_then").fill_null("none named").alias("mechanism"),
        _quarter("audit_date").alias("quarter"),
        (pl.col("finding") == "confirmed").alias("hit"),
    )

    def groups(col: str) -> dict:
        g = planned.group_by(col).agg(pl.len().alias("audited"), pl.col("hit").sum().alias("confirmed")).sort(col)
        return {
            r[col]: {
                "audited": int(r["audited"]),
                "confirmed": int(r["confirmed"]),
                "rate": round(r["confirmed"] / r["audited"], 3),
            }
            for r in g.iter_rows(named=True)
        }

    n, k = planned.height, int(planned["hit"].sum()) if planned.height else 0
    return {
        "audits_with_a_finding": aud.height,
        "audits_without_an_earlier_run": j.height - known.height,
        "audited_from_plan": n,
        "confirmed": k,
        "rate": round(k / n, 3) if n else None,
        "audited_off_plan": known.height - n,
        "by_mechanism": groups("mechanism"),
        "by_quarter": groups("quarter"),
    }


def events_between(events: pl.DataFrame, after: _dt.date, upto: _dt.date) -> pl.DataFrame:
    """``building_id, events``: per building, its events dated after ``after`` and up to ``upto``, one text
    (``2026-05-19 audit: confirmed (controls) – valves stuck; 2026-06-02 measure: (controls) – new controls``),
    in date order."""
    if events.height == 0:
        return pl.DataFrame(schema={"building_id": pl.String, "events": pl.String})
    e = events.filter((pl.col("date") > after) & (pl.col("date") <= upto)).sort("building_id", "date", "kind")
    head = pl.concat_str(
        [pl.col("finding"), pl.lit("(") + pl.col("mechanism") + pl.lit(")")], separator=" ", ignore_nulls=True
    )
    head = pl.when(head.str.len_chars() > 0).then(head)
    detail = pl.concat_str([head, pl.col("description")], separator=" – ", ignore_nulls=True)
    text = (
        pl.col("date").cast(pl.String)
        + pl.lit(" ")
        + pl.col("kind")
        + pl.when(detail.str.len_chars() > 0).then(pl.lit(": ") + detail).otherwise(pl.lit(""))
    )
    return e.group_by("building_id", maintain_order=True).agg(text.str.join("; ").alias("events"))
