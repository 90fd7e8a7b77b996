"""Learning from audits: the bias of the default expectations per era × use type (issue 17; pure functions).

Buildings whose buildings-file row carries audited values (``ua_total``, ``heating_efficiency``,
``balance_point``) already use them instead of the defaults. Across the portfolio, the same values say
how far the defaults are off for buildings like them: per era × use type and quantity,

- UA and efficiency: the median of ln(audited / default), its spread and the number of audits;
- balance point: the median of audited − default [°F], its spread and the number of audits.

The spread is the robust standard deviation 1.4826 · MAD (median absolute deviation about the median;
the factor makes it the standard deviation for normal data: Rousseeuw & Croux 1993; common practice).

``expectation_factors`` turns a group's bias into a factor on the expected heating of the buildings of
that group whose own value was not given, only where the group has at least ``min_audits`` audits
(``[learning] min_audits``; fewer: nothing applied). In the degree-day model the expected heating is
UA · DD(T_bal) · 24 / η [Btu] (ASHRAE Handbook—Fundamentals, degree-day method), so a UA bias ``f`` scales
it by ``f`` and an efficiency bias ``g`` by ``1/g`` — to first order: the balance point a larger UA
implies (T_set − gains/UA) is not moved, and the balance-point bias is reported, not applied.
"""

from __future__ import annotations

import numpy as np
import polars as pl

#: quantity → (given column of the buildings frame, default column of the envelope frame, how compared)
QUANTITIES = {
    "ua_total": ("ua_total_btu_h_f", "ua_total", "log ratio"),
    "heating_efficiency": ("heating_efficiency", "efficiency", "log ratio"),
    "balance_point": ("balance_point_f", "balance_point_f", "difference [°F]"),
}
MAD_TO_SD = 1.4826  # 1 / Φ⁻¹(3/4): a normal sample's MAD times this estimates its standard deviation

BIAS_SCHEMA = pl.Schema(
    {
        "quantity": pl.String,
        "era": pl.String,
        "use_type": pl.String,
        "compared": pl.String,
        "n_audits": pl.Int64,
        "bias": pl.Float64,
        "spread": pl.Float64,
        "factor": pl.Float64,
        "applied": pl.Boolean,
    }
)


def audit_bias(given: pl.DataFrame, default: pl.DataFrame, *, min_audits: int) -> pl.DataFrame:
    """The defaults' bias per quantity × era × use type (``BIAS_SCHEMA``), sorted.

    Parameters
    ----------
    given : ``building_id, era, use_type`` and the given columns of ``QUANTITIES`` (null = not audited).
    default : ``building_id`` and the default columns of ``QUANTITIES``: each building's expectation
        from the defaults alone (its audited values left out), [Btu/(h·°F)], [-], [°F].
    min_audits : groups with at least this many audits are ``applied``.

    Returns
    -------
    ``bias`` = median of ln(given/default) (UA, efficiency) or of given − default [°F] (balance point);
    ``spread`` = 1.4826 · median |x − bias| (0 for one audit); ``factor`` = exp(bias) for the log ratios
    (null for the balance point); ``applied`` = ``n_audits`` ≥ ``min_audits`` and a factor exists.
    """
    j = given.join(
        default.select("building_id", *{d for _, d, _ in QUANTITIES.values()}).rename(
            {d: f"_def_{d}" for d in {d for _, d, _ in QUANTITIES.values()}}
        ),
        on="building_id",
        how="inner",
    )
    parts = []
    for q, (gcol, dcol, how) in QUANTITIES.items():
        g, d = pl.col(gcol).cast(pl.Float64), pl.col(f"_def_{dcol}").cast(pl.Float64)
        x = (g / d).log() if how == "log ratio" else g - d
        ok = g.is_not_null() & d.is_not_null() & d.is_finite() & ((d > 0) & (g > 0) if how == "log ratio" else True)
        parts.append(
            j.filter(ok).select(
                pl.lit(q).alias("quantity"), "era", "use_type", pl.lit(how).alias("compared"), x.alias("x")
            )
        )
    long = pl.concat(parts) if parts else pl.DataFrame()
    if long.height == 0:
        return pl.DataFrame(schema=BIAS_SCHEMA)
    out = (
        long.group_by("quantity", "era", "use_type", "compared")
        .agg(pl.len().cast(pl.Int64).alias("n_audits"), pl.col("x").median().alias("bias"), pl.col("x").alias("_x"))
        .with_columns(
            (MAD_TO_SD * (pl.col("_x") - pl.col("bias")).list.eval(pl.element().abs()).list.median()).alias("spread")
        )
        .with_columns(pl.when(pl.col("compared") == "log ratio").then(pl.col("bias").exp()).alias("factor"))
        .with_columns(((pl.col("n_audits") >= min_audits) & pl.col("factor").is_not_null()).alias("applied"))
        .drop("_x")
    )
    return out.select(list(BIAS_SCHEMA)).cast(BIAS_SCHEMA).sort("quantity", "era", "use_type")


def expectation_factors(frame: pl.DataFrame, bias: pl.DataFrame) -> pl.DataFrame:
    """``building_id, learned_factor``: the factor on each building's expected heating from the applied biases.

    ``frame`` holds ``building_id, era, use_type`` and ``ua_given, efficiency_given`` (booleans: the
    building's own audited value is used, so no bias applies to it). factor = f_UA / g_η, each 1 where its
    group's bias is not applied (see the module notes for the equation and its limits).
    """
    ap = bias.filter(pl.col("applied"))

    def f(q: str) -> pl.DataFrame:
        return ap.filter(pl.col("quantity") == q).select("era", "use_type", pl.col("factor").alias(f"_f_{q}"))

    j = frame.join(f("ua_total"), on=["era", "use_type"], how="left", maintain_order="left").join(
        f("heating_efficiency"), on=["era", "use_type"], how="left", maintain_order="left"
    )
    fu = pl.when(pl.col("ua_given")).then(1.0).otherwise(pl.col("_f_ua_total").fill_null(1.0))
    fe = pl.when(pl.col("efficiency_given")).then(1.0).otherwise(pl.col("_f_heating_efficiency").fill_null(1.0))
    return j.select("building_id", (fu / fe).alias("learned_factor"))


def bias_summary(bias: pl.DataFrame, min_audits: int) -> dict:
    """summary.json's ``audit_bias``: the threshold and one entry per group (rounded)."""
    rows = [
        {
            "quantity": r["quantity"],
            "era": r["era"],
            "use_type": r["use_type"],
            "compared": r["compared"],
            "n_audits": r["n_audits"],
            "bias": _round(r["bias"], 4),
            "spread": _round(r["spread"], 4),
            "factor": _round(r["factor"], 4),
            "applied": r["applied"],
        }
        for r in bias.iter_rows(named=True)
    ]
    return {
        "min_audits": min_audits,
        "groups_applied": int(bias["applied"].sum()) if bias.height else 0,
        "groups": rows,
    }


def _round(x: float | None, k: int) -> float | None:
    return None if x is None or not np.isfinite(x) else round(float(x), k)
