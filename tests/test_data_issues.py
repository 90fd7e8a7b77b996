"""The data-issue detectors' quick paths give the issues of the plain ones (screening/data_issues.py).

chunk_issues hands each detector only the rows that can give an issue, and computes the unit-error and
bill-off-fit statistics over numpy arrays. Each check here compares a quick path with the plain one on an
invented portfolio of monthly bills with faults planted in it (overlaps, gaps, estimated runs, a second
meter, bills 0.001x to 1000x off): the rows out of order (every row looked at), the rows without
is_heating_fuel (the join with the buildings), or the polars-window code the quick path replaced.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest

from screening import data_issues, metered

WINDOW = (dt.date(2025, 10, 1), dt.date(2026, 9, 30))


def _portfolio(n: int = 240, seed: int = 5) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Readings (as units.convert_to_kbtu returns them, sorted) and buildings: 3 years of monthly bills of
    the heating fuel, every third building also electricity, with faults planted at random."""
    rng = np.random.default_rng(seed)
    rows = []
    line = 1
    for i in range(n):
        bid = f"B{i:04d}"
        fuels = ["natural_gas", "electricity"] if i % 3 == 0 else ["natural_gas"]
        meters = ["", "M2"] if i % 17 == 0 else [""]
        for fuel in fuels:
            for meter in meters:
                day = dt.date(2023, 10, 1) + dt.timedelta(days=int(rng.integers(0, 20)))
                while day < dt.date(2026, 10, 10):
                    days = int(rng.integers(27, 34))
                    end = day + dt.timedelta(days=days - 1)
                    m = day.month
                    use = 100.0 * (1.6 + np.cos(2 * np.pi * (m - 1) / 12)) * days
                    if fuel == "electricity":
                        use = 40.0 * days
                    u = rng.random()
                    if u < 0.02:
                        use *= rng.choice([0.001, 0.01, 10.0, 100.0, 1000.0])
                    elif u < 0.025:
                        use = 0.0
                    est = bool(rng.random() < (0.6 if i % 11 == 0 else 0.03))
                    rows.append((bid, fuel, meter, day, end, use, days, fuel == "natural_gas", est, line))
                    line += 1
                    if rng.random() < 0.01:  # a duplicate read
                        rows.append((bid, fuel, meter, day, end, use, days, fuel == "natural_gas", est, line))
                        line += 1
                    nxt = end + dt.timedelta(days=1)
                    r = rng.random()
                    if r < 0.02:
                        nxt += dt.timedelta(days=int(rng.integers(5, 60)))  # a gap
                    elif r < 0.04:
                        nxt -= dt.timedelta(days=int(rng.integers(1, 6)))  # an overlap
                    day = nxt
    conv = pl.DataFrame(
        rows,
        schema={
            "building_id": pl.String,
            "fuel": pl.String,
            "meter_id": pl.String,
            "period_start": pl.Date,
            "period_end": pl.Date,
            "energy_kbtu": pl.Float64,
            "days": pl.Int64,
            "is_heating_fuel": pl.Boolean,
            "estimated": pl.Boolean,
            "_line": pl.Int64,
        },
        orient="row",
    ).sort("building_id", "fuel", "meter_id", "period_start", "period_end", maintain_order=True)
    b = pl.DataFrame({"building_id": [f"B{i:04d}" for i in range(n)], "heating_fuel": ["natural_gas"] * n})
    return conv, b


@pytest.fixture(scope="module")
def portfolio():
    conv, b = _portfolio()
    spans = metered.choose_spans(conv, *WINDOW, building_ids=b["building_id"], fill_end_days=7)
    return conv, b, spans


def _shuffled(df: pl.DataFrame) -> pl.DataFrame:
    return df.sample(fraction=1.0, shuffle=True, seed=3)


def test_reading_issues_of_the_buildings_that_may_have_one_are_all_of_them(portfolio):
    conv, _, spans = portfolio
    kw = {"lookback_months": 24, "min_coverage": 0.9, "max_estimated_share": 0.5}
    may = data_issues._maybe_reading_issue(conv, spans, 0.5)
    assert may is not None and 0 < may.sum() < len(may)  # (the quick path is taken, and leaves rows out)
    got = data_issues.reading_issues(conv, spans, **kw)
    assert got.equals(metered.reading_issues(conv, spans, **kw))
    assert set(got["code"]) >= {"duplicate_reads", "overlapping_reads", "gap_in_reads", "many_estimated_reads"}
    assert data_issues._maybe_reading_issue(_shuffled(conv), spans, 0.5) is None  # (out of order: every row)


def test_missing_bills_of_the_buildings_not_fully_read_are_all_of_them(portfolio):
    conv, _, spans = portfolio
    heat = conv.filter(pl.col("is_heating_fuel"))
    keep = data_issues._maybe_missing(heat, *WINDOW)
    assert keep is not None and 0 < keep.sum() < len(keep)
    got = data_issues.missing_bill_issues(conv, spans, WINDOW)
    assert got.height > 0
    assert got.equals(data_issues.missing_bill_issues(_shuffled(conv), spans, WINDOW))  # (every row)
    assert data_issues._maybe_missing(_shuffled(heat), *WINDOW) is None


@pytest.mark.parametrize("factor", [1.5, 8.0, 100.0])
def test_unit_errors_over_arrays_are_those_of_the_polars_windows(portfolio, factor):
    conv, b, _ = portfolio
    got = data_issues.unit_error_issues(conv, b, factor, isolation=2.0)
    assert got.height > 0
    # without is_heating_fuel (the join with the buildings), out of order (sorted first): the same
    assert got.equals(data_issues.unit_error_issues(conv.drop("is_heating_fuel"), b, factor, isolation=2.0))
    assert got.equals(data_issues.unit_error_issues(_shuffled(conv), b, factor, isolation=2.0))
    # the polars-window statistics over every bill
    heat = data_issues._heating_bills(conv, b).sort("building_id", "meter_id", "period_start")
    mid = pl.col("period_start") + pl.duration(days=pl.col("days") // 2)
    heat = heat.with_columns(
        (pl.col("energy_kbtu") / pl.col("days")).alias("_upd"),
        mid.dt.month().alias("_m"),
        metered.group_starts(["building_id", "meter_id"]).cum_sum().cast(pl.Int64).alias("_gm"),
    )
    assert got.equals(data_issues._unit_error_windows(heat, factor, 2.0))


@pytest.mark.parametrize("factor", [1.5, 4.0])
def test_bills_off_the_fit_over_arrays_are_those_of_the_polars_windows(portfolio, factor):
    conv, _, spans = portfolio
    periods = metered.fit_periods(conv, spans).filter(pl.col("usable"))
    rng = np.random.default_rng(9)
    ids = spans["building_id"]
    met = pl.DataFrame(
        {
            "building_id": ids,
            "fit_method": np.where(rng.random(ids.len()) < 0.9, "regression", "none"),
            "baseload_kbtu_per_day": rng.uniform(20.0, 60.0, ids.len()),
            "heating_slope_kbtu_per_dd": rng.uniform(2.0, 6.0, ids.len()),
        }
    )
    periods = periods.with_columns(pl.Series("hdd_per_day_fit", rng.uniform(0.0, 30.0, periods.height)))
    got = data_issues.fit_outlier_issues(periods, met, factor, 2.0)
    assert got.height > 0
    fit = met.filter(pl.col("fit_method") == "regression").select(
        "building_id",
        pl.col("baseload_kbtu_per_day").alias("_a"),
        pl.col("heating_slope_kbtu_per_dd").alias("_b"),
    )
    p = periods.select("building_id", "period_start", "period_end", "days", "energy_kbtu", "hdd_per_day_fit")
    assert data_issues._fit_outlier_arrays(p, fit, factor, 2.0) is not None  # (the quick path is taken)
    assert got.equals(data_issues._fit_outlier_frames(p, fit, factor, 2.0))
    assert got.equals(data_issues.fit_outlier_issues(_shuffled(periods), met, factor, 2.0))


def test_other_fuel_only_by_runs_finds_the_buildings_without_a_heating_fuel_reading(portfolio):
    conv, b, _ = portfolio
    gone = ["B0003", "B0006"]  # (buildings with electricity too: left with electricity only)
    c = conv.filter(~(pl.col("building_id").is_in(gone) & pl.col("is_heating_fuel")))
    got = data_issues.other_fuel_only(c, b)
    assert got["building_id"].to_list() == gone
    assert got.equals(data_issues.other_fuel_only(_shuffled(c), b))
