"""Year-on-year change of weather-normalized heating (pure): polars frames and numpy in, a frame out."""

from __future__ import annotations

import numpy as np
import polars as pl

from . import metered
from .degree_days import nearest_base


def year_over_year(
    conv: pl.DataFrame, spans: pl.DataFrame, met: pl.DataFrame, cube, normals, grid: np.ndarray
) -> pl.DataFrame:
    """Weather-normalized heating of the span against the 12 months before it, from the readings.

    For buildings with a regression fit (baseload α per day, base τ) and readings covering both
    spans, each year's heating is normalized by the ratio of normal-year to actual degree days at τ
    (the degree-day normalization of ASHRAE Guideline 14 practice)::

        H_norm = (E − α·days) · HDD_normal(τ) / HDD_year(τ)
        yoy_change = H_norm(current) / H_norm(previous) − 1

    Buildings without a fit (annual totals; ``fit_method`` "default share") use the use type's
    non-heating share s and the engineering balance point as τ: ``H = (1 − s)·E``, the same
    normalization.

    Returns ``building_id, yoy_change`` for the buildings where it is defined, and
    ``prev_fuel_kbtu``: the heating fuel's whole use over the 12 months before the span (not weather
    normalized), where the readings cover them.
    """
    fit = met.filter(
        (
            ((pl.col("fit_method") == "regression") & pl.col("fitted_base_f").is_not_null())
            | ((pl.col("fit_method") == "default share") & pl.col("base_used_f").is_not_null())
        )
        & (pl.col("coverage") + pl.col("filled_days") / span_days() >= 0.99)
    ).select(
        "building_id",
        pl.coalesce("fitted_base_f", "base_used_f").alias("fitted_base_f"),
        pl.col("baseload_kbtu_per_day").fill_null(0.0),
        "actual_heating_kbtu",
        pl.when(pl.col("fit_method") == "default share")
        .then(pl.col("baseload_share"))
        .otherwise(0.0)
        .fill_null(0.0)
        .alias("_share"),
    )
    sp = spans.join(fit, on="building_id", how="inner").with_columns(
        pl.col("span_start").dt.offset_by("-1y").alias("prev_start"),
        (pl.col("span_start") - pl.duration(days=1)).alias("prev_end"),
    )
    if sp.height == 0:
        return pl.DataFrame(schema={"building_id": pl.String, "yoy_change": pl.Float64, "prev_fuel_kbtu": pl.Float64})
    prev = metered.calendarize(  # the heating fuels' rows only: the others are dropped below
        conv,
        sp.select("building_id", pl.col("prev_start").alias("span_start"), pl.col("prev_end").alias("span_end")),
        heating_only=True,
    )
    prev = (
        prev.filter(pl.col("is_heating_fuel"))
        .group_by("building_id")
        .agg(pl.col("energy_kbtu").sum().alias("e_prev"), pl.col("coverage").min().alias("cov_prev"))
    )
    sp = sp.join(prev, on="building_id", how="inner").filter(pl.col("cov_prev") >= 0.99)
    if sp.height == 0:
        return pl.DataFrame(schema={"building_id": pl.String, "yoy_change": pl.Float64, "prev_fuel_kbtu": pl.Float64})
    st = sp["station_id"].to_numpy()
    tau = sp["fitted_base_f"].to_numpy()
    hdd_cur = cube.at_base(st, sp["span_start"], sp["span_end"], tau)[0]
    hdd_prev, _, miss_prev = cube.at_base(st, sp["prev_start"], sp["prev_end"], tau)
    j = nearest_base(grid, tau)
    hdd_norm = normals.for_stations(st)[np.arange(st.size), j]
    days_prev = (sp["prev_end"] - sp["prev_start"]).dt.total_days().to_numpy() + 1
    heat_prev = np.maximum(
        sp["e_prev"].to_numpy() * (1.0 - sp["_share"].to_numpy()) - sp["baseload_kbtu_per_day"].to_numpy() * days_prev,
        0.0,
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        norm_prev = heat_prev * hdd_norm / hdd_prev
        norm_cur = sp["actual_heating_kbtu"].to_numpy() * hdd_norm / hdd_cur
        yoy = norm_cur / norm_prev - 1.0
    ok = np.isfinite(yoy) & (miss_prev == 0) & (norm_prev > 0)
    return pl.DataFrame(
        {"building_id": sp["building_id"], "yoy_change": np.where(ok, yoy, np.nan), "prev_fuel_kbtu": sp["e_prev"]}
    ).with_columns(pl.col("yoy_change").fill_nan(None))


def span_days() -> pl.Expr:
    return (pl.col("span_end") - pl.col("span_start")).dt.total_days() + 1
