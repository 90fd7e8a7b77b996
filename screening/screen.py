"""Screening: metrics, flags, needs_review, expected recoverable cost, the audit order and tiers
(pure, over the portfolio).

The audit order (``rank``) sorts the buildings that can be judged by their expected recoverable
cost (the excess, weighted by how sure the evidence is, on a scale that blends the model's own band
with the spread of the peers); buildings whose data block a verdict come last. ``needs_review``
marks strong evidence of excess (the level against expectation and peers, or a step up on last
year). See docs/methods.md "How the audit list is chosen".

Notation: r = metered / expected (P50); the robust z-score of log r within the peer
group is z = (ln r − median ln r) / (1.4826 · MAD), Iglewicz & Hoaglin (1993), "How to
Detect and Handle Outliers", ASQC Basic References in Quality Control vol. 16, where
1.4826 makes the MAD consistent with σ for normal data.
"""

from __future__ import annotations


from collections.abc import Sequence
from typing import TYPE_CHECKING

import polars as pl

if TYPE_CHECKING:  # the type only: config.py is read by the orchestration, not imported here
    from .config import Plan, Thresholds

MAD_TO_SIGMA = 1.4826  # consistency constant of the MAD for normal data (Iglewicz & Hoaglin 1993)
P10_P90_SIGMAS = 2 * 1.2816  # a normal distribution's P10..P90 spans 2 × 1.2816 σ
PEER_SCALE_FROM = 0.75  # peer weight from which the evidence scale is called "peers" (n ≥ 3 × peer_prior)
LOGISTIC_PHI = 1.702  # Φ(x) ≈ 1 / (1 + exp(−1.702 x)), within 0.01 (Bowling et al. 2009, J. Ind. Eng. Manag. 2(1))
WATCH_SHARE = 0.1  # Watch: expected savings of at least this share of one visit's cost

# Tiers: plain groups along the audit order (rank), most urgent first. Names are our own.
TIERS = (
    ("Audit first", "this quarter's audit plan"),
    ("Audit soon", "worth a visit, after the plan"),
    ("Watch", "expected savings below a visit's cost"),
    ("No action", "nothing to recover to speak of"),
    ("Fix data first", "data problems block a verdict"),
)
#: the flags in the order of ``flag_codes`` (and of their texts)
FLAG_ORDER = (
    "above_band",
    "high_among_peers",
    "high_baseload",
    "high_balance_point",
    "poor_fit",
    "rising_use",
    "envelope_defaulted",
    "shifted_span",
    "base_at_grid_edge",
)
#: the working columns :func:`screen` keeps for the sentences (:func:`screening.wording.explain` drops them)
TEXT_INPUTS = (
    "_band_low",
    "_band_high",
    "_view",
    "_w_step",
    "_w_fstep",
    "_yoy_fuel",
    "_z_fuel",
    "_hold",
    *[f"_f_{k}" for k in FLAG_ORDER],
)
TIER_RANK = {name: i + 1 for i, (name, _) in enumerate(TIERS)}


def _with_shared(df: pl.DataFrame, *exprs: pl.Expr) -> pl.DataFrame:
    """``df.with_columns(*exprs)``, each subexpression the columns share (a peer group's median and
    spread, read by several of them) computed once: the lazy engine's common-subexpression elimination,
    which the eager ``with_columns`` does not do. The same values. Only the new columns go through the lazy
    engine, and each is put in one piece: its default engine hands back every column of the frame cut in
    pieces, which the sorts after this then copied once more (10^6 buildings: the portfolio pass's peak
    7.0 -> 8.0 GiB; its in-memory engine keeps them whole but takes 1.6 times the CPU)."""
    new = df.lazy().select(*exprs).collect().rechunk()
    return df.with_columns(new.get_columns())


def peer_groups(df: pl.DataFrame, *, min_group: int) -> pl.Series:
    """Peer group per building: ``use_type × era``, or ``use_type`` when that group is small.

    Only buildings with a usable intensity count toward the group size.
    """
    tmp = df.select("use_type", "era", pl.col("heating_intensity").is_not_null().alias("ok"))
    n_fine = tmp.group_by("use_type", "era").agg(pl.col("ok").sum().alias("n"))
    tmp = tmp.join(n_fine, on=["use_type", "era"], how="left", maintain_order="left")
    return tmp.select(
        pl.when(pl.col("n") >= min_group)
        .then(pl.col("use_type") + pl.lit(" · ") + pl.col("era"))
        .otherwise(pl.col("use_type") + pl.lit(" · all eras"))
        .alias("peer_group")
    )["peer_group"]


def robust_z(values: pl.Expr, group: str) -> pl.Expr:
    """Robust z-score of ``values`` within ``group``: (x − median) / (1.4826·MAD) [-]."""
    med = values.median().over(group)
    mad = (values - med).abs().median().over(group)
    return pl.when(mad > 0).then((values - med) / (MAD_TO_SIGMA * mad)).otherwise(None)


def _robust_z_all(values: pl.Expr) -> pl.Expr:
    """Robust z-score of ``values`` over the whole portfolio (nulls ignored) [-]."""
    med = values.median()
    mad = (values - med).abs().median()
    return pl.when(mad > 0).then((values - med) / (MAD_TO_SIGMA * mad)).otherwise(None)


def percentile_within(values: pl.Expr, group: str) -> pl.Expr:
    """Mid-rank percentile (0–100) of ``values`` within ``group``; null values get null."""
    n = values.count().over(group)
    rank = values.rank("average").over(group)
    return pl.when(values.is_null()).then(None).otherwise(100.0 * (rank - 0.5) / n)


def _phi(x: pl.Expr) -> pl.Expr:
    """Standard normal CDF, logistic approximation (vectorized; max error 0.01) [-]."""
    return 1.0 / (1.0 + (-LOGISTIC_PHI * x.clip(-30.0, 30.0)).exp())


def _model_sd() -> pl.Expr:
    """The model's own scale of ln(metered / expected): its P10..P90 band (floored at ±band_floor) [-]."""
    return (
        pl.when((pl.col("_band_low") > 0) & (pl.col("_band_high") > pl.col("_band_low")))
        .then((pl.col("_band_high") / pl.col("_band_low")).log() / P10_P90_SIGMAS)
        .otherwise(None)
    )


def _peer_stats(values: pl.Expr, group: str) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """Median, robust sd (1.4826·MAD) and count of the non-null ``values`` within ``group``."""
    med = values.median().over(group)
    sd = MAD_TO_SIGMA * (values - med).abs().median().over(group)
    return med, sd, values.count().over(group)


def _blend_weight(values: pl.Expr, group: str, t: Thresholds) -> pl.Expr:
    """Peer weight λ = n / (n + peer_prior) for n ≥ 3 peers with a spread; 0 (the model alone) otherwise."""
    _, sd, n = _peer_stats(values, group)
    ok = (n >= 3) & (sd > 0)
    return (
        pl.when(ok).then(n.cast(pl.Float64) / (n + t.peer_prior)).otherwise(0.0)
        if t.peer_prior > 0
        else pl.when(ok).then(1.0).otherwise(0.0)
    )


def _blend_center(values: pl.Expr, group: str, t: Thresholds) -> pl.Expr:
    """The expected value of ``values`` among peers, shrunk towards 0 (the model) by the peer weight."""
    med, _, _ = _peer_stats(values, group)
    return _blend_weight(values, group, t) * med


def _blended_z(values: pl.Expr, group: str, model_sd: pl.Expr | float, t: Thresholds) -> pl.Expr:
    """(x − λ·peer median) / √(λ·peer sd² + (1 − λ)·model sd²): the evidence in units of its own scale.

    With many peers this is the robust z within the group (Iglewicz & Hoaglin 1993); with none, the
    distance from the model's expectation in units of the model's band; in between a shrinkage blend.
    """
    lam = _blend_weight(values, group, t)
    _, sd, _ = _peer_stats(values, group)
    msd = model_sd if isinstance(model_sd, pl.Expr) else pl.lit(float(model_sd))
    scale = (lam * sd.fill_null(0.0) ** 2 + (1 - lam) * msd**2).sqrt()
    return (
        pl.when(values.is_not_null() & (scale > 0))
        .then((values - lam * _peer_stats(values, group)[0]) / scale)
        .otherwise(None)
    )


def _recoverable(out: pl.DataFrame, t: Thresholds, heat_share: pl.Expr) -> pl.DataFrame:
    """Excess per mechanism, how sure each is, and the expected recoverable energy, cost and CO2e.

    Three views of a building's recoverable excess (see docs/methods.md "How the audit list is chosen"):

    * **level**: metered heating above the peers' (shrunk) expectation, E = metered − expected·e^c,
      sure by w = Φ(z − sure_offset) · ((1 − m) + m · S) with z the blended z of ln(metered/expected),
      S the sureness of the best-supported mechanism (½ without a monthly fit) and m = mechanism_weight;
    * **step up**: heating added since last year, E = metered · y / (1 + y) for a weather-normalized
      rise y, sure by Φ(z_yoy − step_sure_z), with path B's guards (a fit that explains the use, heating
      a fair share of the fuel);
    * **fuel step**: the heating fuel's whole use added since last year, E = total · y / (1 + y) for a
      rise y ≥ yoy_review of the total (not weather normalized), sure by Φ(z − step_sure_z) with z the
      robust z of ln(1 + y) among the buildings of the same weather station: heating in warm weather,
      a hot-water leak, or a fit that no longer follows the weather move the total, not the heating.

    The expected recoverable energy is the largest of w·E over the views (they measure the same
    excess). Three mechanisms, each from its own evidence in the monthly fit, say where the excess is:
    heat loss (effective UA from the slope against the envelope UA), controls (fitted against engineering
    balance point) and non-heating use of the heating fuel (baseload share against the use type's); each
    has an excess energy and a sureness on the same blended scale.
    """
    blk = pl.col("blocking")
    reg = pl.col("fit_method") == "regression"
    # a monthly fit that does not follow the weather is no basis for judging the level (as for needs_review)
    usable = (~blk) & pl.col("_logr").is_not_null() & (~reg | (pl.col("r2") >= t.r2_min)).fill_null(False)
    out = out.with_columns(
        pl.when(usable)
        .then(
            (pl.col("actual_heating_kbtu") - pl.col("expected_heating_kbtu") * pl.col("_center_logr").exp()).clip(
                lower_bound=0
            )
        )
        .otherwise(None)
        .alias("_e_level")
    )
    step_ok = (
        (~blk)
        & (pl.col("yoy_change") > 0)
        & (~reg | (pl.col("r2") >= t.yoy_review_r2_min))
        & (heat_share >= t.yoy_review_heating_share_min)
        & pl.col("z_yoy").is_not_null()
    )
    out = out.with_columns(
        pl.when(step_ok)
        .then(pl.col("actual_heating_kbtu") * pl.col("yoy_change") / (1 + pl.col("yoy_change")))
        .otherwise(None)
        .alias("_e_step"),
        pl.when(step_ok).then(_phi(pl.col("z_yoy") - t.step_sure_z)).otherwise(None).alias("_w_step"),
    )
    # the heating fuel's whole use against the 12 months before (not weather normalized: the robust z is taken
    # among the buildings of one weather station, which share the year's weather): heating in warm weather or a
    # leak moves the fuel's baseload, which the heating fit's step (yoy_change) cannot see
    fuel_y = pl.when((~blk) & (pl.col("_prev_fuel") > 0) & (pl.col("total_fuel_kbtu") > 0)).then(
        pl.col("total_fuel_kbtu") / pl.col("_prev_fuel")
    )
    out = out.with_columns(fuel_y.log().alias("_lfy"), (fuel_y - 1).alias("_yoy_fuel"))
    out = out.with_columns(robust_z(pl.col("_lfy"), "station_id").alias("_z_fuel"))
    # (not weather normalized, so it counts only from path B's rise, yoy_review)
    fstep_ok = (pl.col("_yoy_fuel") >= t.yoy_review) & pl.col("_z_fuel").is_not_null()
    out = out.with_columns(
        pl.when(fstep_ok)
        .then(pl.col("total_fuel_kbtu") * pl.col("_yoy_fuel") / (1 + pl.col("_yoy_fuel")))
        .otherwise(None)
        .alias("_e_fstep"),
        pl.when(fstep_ok).then(_phi(pl.col("_z_fuel") - t.step_sure_z)).otherwise(None).alias("_w_fstep"),
    )
    # mechanisms, from a monthly fit that follows the weather
    fit = (
        (~blk)
        & reg
        & (pl.col("r2") >= t.r2_min).fill_null(False)
        & (pl.col("heating_slope_kbtu_per_dd") > 0)
        & (pl.col("actual_heating_kbtu") > 0)
    )
    out = out.with_columns(
        pl.when(fit & (pl.col("effective_ua_btu_h_f") > 0) & (pl.col("ua_total") > 0))
        .then((pl.col("effective_ua_btu_h_f") / pl.col("ua_total")).log())
        .otherwise(None)
        .alias("_lu"),
        pl.when(fit & pl.col("fitted_base_f").is_not_null() & pl.col("balance_point_f").is_not_null())
        .then(pl.col("fitted_base_f") - pl.col("balance_point_f"))
        .otherwise(None)
        .alias("_db"),
        pl.when(fit & pl.col("baseload_share").is_not_null() & pl.col("baseload_share_default").is_not_null())
        .then(pl.col("baseload_share") - pl.col("baseload_share_default"))
        .otherwise(None)
        .alias("_dl"),
        # degree days at the fitted base over the span (metered heating = slope × HDD(fitted base))
        pl.when(fit).then(pl.col("actual_heating_kbtu") / pl.col("heating_slope_kbtu_per_dd")).alias("_hdd_fit"),
    )
    out = _with_shared(
        out,
        (pl.col("_lu") - _blend_center(pl.col("_lu"), "peer_group", t)).alias("_x_hl"),
        (pl.col("_db") - _blend_center(pl.col("_db"), "peer_group", t)).alias("_x_ct"),
        (pl.col("_dl") - _blend_center(pl.col("_dl"), "peer_group", t)).alias("_x_bl"),
        _blended_z(pl.col("_lu"), "peer_group", _model_sd(), t).alias("_z_hl"),
        _blended_z(pl.col("_db"), "peer_group", t.balance_point_sd_f, t).alias("_z_ct"),
        _blended_z(pl.col("_dl"), "peer_group", t.baseload_share_sd, t).alias("_z_bl"),
    )
    # heating-season days per °F of base: HDD(T_fit) / (T_fit − 35 °F), 35 °F a typical heating-season
    # mean outdoor temperature (our own rough figure, only to size the controls excess)
    days_per_f = pl.col("_hdd_fit") / (pl.col("fitted_base_f") - 35.0).clip(lower_bound=10.0)
    out = out.with_columns(
        (pl.col("actual_heating_kbtu") * (1 - (-pl.col("_x_hl")).exp()))
        .clip(lower_bound=0)
        .alias("excess_heat_loss_kbtu"),
        (pl.col("heating_slope_kbtu_per_dd") * pl.col("_x_ct") * days_per_f)
        .clip(lower_bound=0, upper_bound=pl.col("actual_heating_kbtu"))
        .alias("excess_controls_kbtu"),
        (pl.col("_x_bl") * pl.col("total_fuel_kbtu")).clip(lower_bound=0).alias("excess_baseload_kbtu"),
        _phi(pl.col("_z_hl") - t.sure_offset).alias("sure_heat_loss"),
        _phi(pl.col("_z_ct") - t.sure_offset).alias("sure_controls"),
        _phi(pl.col("_z_bl") - t.sure_offset).alias("sure_baseload"),
    )
    # the level view is as sure as its z, and more so where one mechanism's own evidence points the same way:
    # × ((1 − m) + m · the surest mechanism), m = mechanism_weight; with no monthly fit (no mechanism
    # evidence either way) the mechanisms count half sure
    mech = pl.max_horizontal(*[pl.col(f"sure_{m}") for m in MECHANISMS]).fill_null(0.5)
    out = out.with_columns(
        pl.when(usable)
        .then(_phi(pl.col("z_score") - t.sure_offset) * ((1 - t.mechanism_weight) + t.mechanism_weight * mech))
        .otherwise(None)
        .alias("_w_level")
    )
    level = (pl.col("_w_level") * pl.col("_e_level")).fill_null(0.0)
    step = (pl.col("_w_step") * pl.col("_e_step")).fill_null(0.0)
    fstep = (pl.col("_w_fstep") * pl.col("_e_fstep")).fill_null(0.0)
    out = out.with_columns(
        pl.when(blk | (pl.col("_e_level").is_null() & pl.col("_e_step").is_null() & pl.col("_e_fstep").is_null()))
        .then(None)
        .otherwise(pl.max_horizontal(level, step, fstep))
        .alias("expected_recoverable_kbtu"),
        pl.when((fstep > step) & (fstep > level))
        .then(pl.lit("fuel step"))
        .when(step > level)
        .then(pl.lit("step up"))
        .when(level > 0)
        .then(pl.lit("level"))
        .otherwise(None)
        .alias("_view"),
    )
    return out.with_columns(
        (pl.col("expected_recoverable_kbtu") * pl.col("usd_per_kbtu")).alias("expected_recoverable_cost"),
        (pl.col("expected_recoverable_kbtu") * pl.col("kg_co2e_per_kbtu")).alias("expected_recoverable_co2e_kg"),
        # each mechanism's excess in money and CO2e (the building's price and emission factor per kBtu)
        *[
            e
            for m in MECHANISMS
            for e in (
                (pl.col(f"excess_{m}_kbtu") * pl.col("usd_per_kbtu")).alias(f"excess_{m}_cost"),
                (pl.col(f"excess_{m}_kbtu") * pl.col("kg_co2e_per_kbtu")).alias(f"excess_{m}_co2e_kg"),
            )
        ],
    )


def screen(
    df: pl.DataFrame,
    thresholds: Thresholds,
    *,
    plan: Plan | None = None,
) -> pl.DataFrame:
    """Add metrics, flags, needs_review, tier and rank to the per-building frame.

    Parameters
    ----------
    df : one row per building with at least ``building_id, name, use_type, era,
        floor_area_ft2, actual_heating_kbtu, expected_heating_kbtu, expected_low_kbtu,
        expected_high_kbtu, hdd65, baseload_share, baseload_share_default, fit_method,
        fitted_base_f, r2, cv_rmse, normal_heating_kbtu, prev_normal_heating_kbtu,
        envelope_source, span_kind, usd_per_kbtu, kg_co2e_per_kbtu, blocking, total_fuel_kbtu,
        data_issue_codes (list[str]), data_issue_texts (list[str])``; ``yoy_change`` when
        the pipeline computed it from the readings (the previous run's normal-year heating
        stands in where it is missing).
    thresholds : the ``[thresholds]`` settings, :class:`screening.config.Thresholds` (frozen; built once by
        :func:`screening.config.thresholds`).

    Returns
    -------
    The frame with ``ratio, band_position, heating_intensity`` [Btu/(ft²·°F·day), HDD65
    basis, the EIA definition], ``peer_group, peer_median_intensity, peer_percentile,
    z_score, balance_point_excess_f`` [°F] (fitted − engineering balance point), ``z_balance_point,
    z_intensity, evidence_score`` (z_score + w_bp·z_balance_point + w_int·z_intensity, the
    needs_review test; see docs/methods.md "How the audit list is chosen"), ``excess_energy_kbtu`` (metered − the band's top, ≥ 0; the top is P90, at least P50 × (1 + band_floor)), ``excess_energy_central_kbtu``
    (metered − P50, ≥ 0), ``excess_cost, excess_co2e_kg, yoy_change, z_yoy`` (robust z of
    ln(1 + yoy_change) over the portfolio: needs_review's second path, a step up against the
    previous year), ``flag_codes, needs_review, review_path`` ("level", "step up",
    "level and step up" or null), ``peer_weight, evidence_scale`` (the blended evidence scale:
    "peers", "model band" or "blend"), ``expected_recoverable_kbtu, expected_recoverable_cost,
    expected_recoverable_co2e_kg`` (the largest of the level, step-up and fuel-step views, each weighted by how
    sure it is), ``excess_heat_loss_kbtu, excess_controls_kbtu, excess_baseload_kbtu, sure_heat_loss,
    sure_controls, sure_baseload`` (per mechanism), ``in_plan`` (this quarter's audit plan),
    ``tier, tier_rank, rank`` (the audit order; tiers are plain groups along it), ``mechanisms`` (the
    supported ones, surest first, for the sheet's checks) and ``recoverable_basis``; and the working columns
    the sentences are made of (:data:`TEXT_INPUTS`). The sentences (``flag_texts, verdict, waste_kind``) are
    :func:`screening.wording.explain`'s, which drops the working columns.
    plan : ``[plan]`` of the config (:class:`screening.config.Plan`: ``audits_per_quarter``, ``audit_cost``,
        ``clean_audit_regrow``); None = no limit, any savings.
    """
    t = thresholds
    # the band is never narrower than ±band_floor around P50: metering, weather and calendarization
    # carry that much uncertainty even when every envelope input is known
    df = df.with_columns(
        pl.max_horizontal(pl.col("expected_high_kbtu"), pl.col("expected_heating_kbtu") * (1 + t.band_floor)).alias(
            "_band_high"
        ),
        pl.min_horizontal(pl.col("expected_low_kbtu"), pl.col("expected_heating_kbtu") * (1 - t.band_floor)).alias(
            "_band_low"
        ),
    )
    out = df.with_columns(
        # no ratio without a positive expectation and a metered figure (never inf or NaN in an output)
        pl.when((pl.col("expected_heating_kbtu") > 0) & pl.col("actual_heating_kbtu").is_finite())
        .then(pl.col("actual_heating_kbtu") / pl.col("expected_heating_kbtu"))
        .otherwise(None)
        .alias("ratio"),
        pl.when(pl.col("actual_heating_kbtu") > pl.col("_band_high") * t.band_ratio)
        .then(pl.lit("above"))
        .when(pl.col("actual_heating_kbtu") < pl.col("_band_low"))
        .then(pl.lit("below"))
        .when(pl.col("actual_heating_kbtu").is_not_null() & pl.col("expected_low_kbtu").is_not_null())
        .then(pl.lit("within"))
        .otherwise(None)
        .alias("band_position"),
        pl.when((pl.col("hdd65") > 0) & (pl.col("floor_area_ft2") > 0) & pl.col("actual_heating_kbtu").is_not_null())
        .then(pl.col("actual_heating_kbtu") * 1000.0 / (pl.col("floor_area_ft2") * pl.col("hdd65")))
        .otherwise(None)
        .alias("heating_intensity"),
    )
    # peers use only buildings whose figures are not blocked by data problems
    usable = (~pl.col("blocking")) & pl.col("ratio").is_not_null() & (pl.col("ratio") > 0)
    out = out.with_columns(
        pl.when(usable).then(pl.col("heating_intensity")).otherwise(None).alias("_int_ok"),
        pl.when(usable).then(pl.col("ratio").log()).otherwise(None).alias("_logr"),
    )
    out = out.with_columns(
        peer_groups(out.with_columns(pl.col("_int_ok").alias("heating_intensity")), min_group=t.min_peer_group).alias(
            "peer_group"
        )
    )
    out = _with_shared(
        out,
        pl.col("_int_ok").median().over("peer_group").alias("peer_median_intensity"),
        percentile_within(pl.col("_int_ok"), "peer_group").alias("peer_percentile"),
        robust_z(pl.col("_logr"), "peer_group").alias("z_score"),
        pl.col("_int_ok").count().over("peer_group").alias("peer_count"),
    )
    # the evidence scale: the peers' median and spread where there are enough peers, the model's own band
    # where there are none, blended by the peer weight n / (n + peer_prior) in between (shrinkage)
    out = _with_shared(
        out,
        _blended_z(pl.col("_logr"), "peer_group", _model_sd(), t).alias("z_score"),
        _blend_weight(pl.col("_logr"), "peer_group", t).alias("peer_weight"),
        _blend_center(pl.col("_logr"), "peer_group", t).alias("_center_logr"),
    )
    out = out.with_columns(
        pl.when(pl.col("_logr").is_null())
        .then(None)
        .when(pl.col("peer_weight") == 0)
        .then(pl.lit("model band"))
        .when(pl.col("peer_weight") >= PEER_SCALE_FROM)
        .then(pl.lit("peers"))
        .otherwise(pl.lit("blend"))
        .alias("evidence_scale")
    )
    out = out.with_columns(
        # no excess is claimed where a data problem blocks the verdict: it would be the data's, not waste
        pl.when(~pl.col("blocking"))
        .then((pl.col("actual_heating_kbtu") - pl.col("_band_high")).clip(lower_bound=0))
        .alias("excess_energy_kbtu"),
        pl.when(~pl.col("blocking"))
        .then((pl.col("actual_heating_kbtu") - pl.col("expected_heating_kbtu")).clip(lower_bound=0))
        .alias("excess_energy_central_kbtu"),
        pl.coalesce(
            pl.col("yoy_change") if "yoy_change" in df.columns else pl.lit(None, dtype=pl.Float64),
            pl.when(pl.col("prev_normal_heating_kbtu") > 0)
            .then(pl.col("normal_heating_kbtu") / pl.col("prev_normal_heating_kbtu") - 1)
            .otherwise(None),
        ).alias("yoy_change"),
    )
    out = out.with_columns(
        (pl.col("excess_energy_kbtu") * pl.col("usd_per_kbtu")).alias("excess_cost"),
        (pl.col("excess_energy_kbtu") * pl.col("kg_co2e_per_kbtu")).alias("excess_co2e_kg"),
    )
    reg = pl.col("fit_method") == "regression"
    # evidence that does not lean on the envelope estimate: the building's own fitted balance
    # point against the engineering one (portfolio-wide robust z) and its intensity among peers
    fit_ok = reg & (pl.col("r2") >= t.r2_min).fill_null(False)
    out = out.with_columns(
        pl.when(usable & fit_ok & pl.col("fitted_base_f").is_not_null() & pl.col("balance_point_f").is_not_null())
        .then(pl.col("fitted_base_f") - pl.col("balance_point_f"))
        .otherwise(None)
        .alias("balance_point_excess_f"),
        pl.when(pl.col("_int_ok") > 0).then(pl.col("_int_ok").log()).otherwise(None).alias("_logi"),
    )
    out = out.with_columns(
        _robust_z_all(pl.col("balance_point_excess_f")).alias("z_balance_point"),
        robust_z(pl.col("_logi"), "peer_group").alias("z_intensity"),
        # the building against its own previous year: the weather-normalized change, as a robust z
        # over the portfolio (the spread of normal buildings' changes is weather-normalization and
        # meter noise, common to all)
        pl.when(usable & (pl.col("yoy_change") > -1))
        .then((1 + pl.col("yoy_change")).log())
        .otherwise(None)
        .alias("_logyoy"),
    )
    out = out.with_columns(_robust_z_all(pl.col("_logyoy")).alias("z_yoy"))
    out = out.with_columns(
        (
            pl.col("z_score")
            + t.weight_balance_point * pl.col("z_balance_point").fill_null(0.0)
            + t.weight_intensity * pl.col("z_intensity").fill_null(0.0)
        ).alias("evidence_score")
    )
    conds = {
        "above_band": pl.col("band_position") == "above",
        "high_among_peers": pl.col("peer_percentile") >= t.peer_percentile_high,
        "high_baseload": reg
        & (pl.col("baseload_share") > t.baseload_share_high * pl.col("baseload_share_default"))
        & (pl.col("baseload_share") > 0.2),
        "high_balance_point": reg & (pl.col("fitted_base_f") > t.balance_point_high_f),
        "poor_fit": reg & ((pl.col("r2") < t.r2_min) | (pl.col("cv_rmse") > t.cv_rmse_max)),
        "rising_use": pl.col("yoy_change") > t.yoy_rise,
        "envelope_defaulted": pl.col("envelope_source") == "estimated",
        "shifted_span": pl.col("span_kind") == "shifted",
        "base_at_grid_edge": reg & pl.col("base_at_edge") if "base_at_edge" in out.columns else pl.lit(False),
    }
    assert tuple(conds) == FLAG_ORDER
    out = out.with_columns([c.fill_null(False).alias(f"_f_{k}") for k, c in conds.items()])
    # the flags as one number (bit i: FLAG_ORDER[i]), for flag_codes
    out = out.with_columns(
        pl.sum_horizontal([pl.col(f"_f_{k}").cast(pl.Int32) * (1 << i) for i, k in enumerate(FLAG_ORDER)]).alias(
            "_f_code"
        )
    )
    # a fit that does not follow the weather is no basis for a verdict (often a meter or entry problem)
    fit_usable = (~reg) | fit_ok
    strong = (
        (pl.col("evidence_score") >= t.review_score) & (pl.col("ratio") >= t.min_excess_ratio) & fit_usable
    ).fill_null(False)
    # or a step up against the building's own previous year, far beyond the portfolio's spread of
    # year-on-year changes (a fault that developed: the building is its own baseline)
    # (a fit that explains little of the use, e.g. a heat pump's few % of heating, gives no such step;
    # nor does heating that is a small part of the fuel's use, where a small change in the rest moves it)
    heat_share = pl.when(pl.col("total_fuel_kbtu") > 0).then(pl.col("actual_heating_kbtu") / pl.col("total_fuel_kbtu"))
    rise = (
        (pl.col("yoy_change") >= t.yoy_review)
        & (pl.col("z_yoy") >= t.yoy_review_z)
        & (~reg | (pl.col("r2") >= t.yoy_review_r2_min))
        & (heat_share >= t.yoy_review_heating_share_min)
    ).fill_null(False)
    out = out.with_columns(
        ((strong | rise) & ~pl.col("blocking")).alias("needs_review"),
        # which way the building came onto the audit list (docs/methods.md "How the audit list is chosen")
        pl.when(pl.col("blocking"))
        .then(None)
        .when(strong & rise)
        .then(pl.lit("level and step up"))
        .when(strong)
        .then(pl.lit("level"))
        .when(rise)
        .then(pl.lit("step up"))
        .otherwise(None)
        .alias("review_path"),
    )
    out = out.with_columns(
        (pl.col("prev_fuel_kbtu") if "prev_fuel_kbtu" in out.columns else pl.lit(None, dtype=pl.Float64)).alias(
            "_prev_fuel"
        )
    )
    out = _recoverable(out, t, heat_share)
    # the audit order: buildings that can be judged by expected recoverable cost; then those whose data
    # must be fixed first, by the money at stake (their heating's cost), so a data problem never takes
    # an audit slot
    out = out.with_columns(
        pl.when(pl.col("blocking"))
        .then(pl.col("actual_heating_kbtu") * pl.col("usd_per_kbtu"))
        .otherwise(pl.col("expected_recoverable_cost"))
        .fill_null(0.0)
        .fill_nan(0.0)
        .alias("_order_money")
    )
    # the events (issue 17, events.plan_context): a confirmed finding not yet fixed is pinned to the top of
    # the plan; an audit that found nothing keeps the building off it unless its savings grew enough
    per_quarter, audit_cost, regrow = (
        (plan.audits_per_quarter, plan.audit_cost, plan.clean_audit_regrow) if plan is not None else (0, 0.0, 2.0)
    )
    cost = pl.col("expected_recoverable_cost").fill_null(0.0).fill_nan(0.0)
    if "_pin_plan" in out.columns:
        grown = (cost >= regrow * pl.col("_cost_at_audit")).fill_null(False)
        out = out.with_columns(
            (pl.col("_pin_plan").fill_null(False) & ~pl.col("blocking")).alias("_pin"),
            (
                (pl.col("_clean_audit_recent").fill_null(False) & ~grown) | pl.col("_measure_recent").fill_null(False)
            ).alias("_hold"),
        )
    else:
        out = out.with_columns(pl.lit(False).alias("_pin"), pl.lit(False).alias("_hold"))
    out = out.sort(
        ["blocking", "_pin", "_order_money", "ratio", "building_id"],
        descending=[False, True, True, True, False],
        nulls_last=True,
    )
    # tiers are plain groups along that order: this quarter's plan, the rest worth a visit, then less
    worth = ((~pl.col("blocking")) & (cost > 0) & (cost >= audit_cost) & ~pl.col("_hold")) | pl.col("_pin")
    nth = worth.cast(pl.Int64).cum_sum()
    in_plan = worth & ((nth <= per_quarter) if per_quarter > 0 else pl.lit(True))
    watch_from = WATCH_SHARE * audit_cost if audit_cost > 0 else 0.0
    out = out.with_columns(in_plan.alias("in_plan")).with_columns(
        pl.when(pl.col("blocking"))
        .then(pl.lit("Fix data first"))
        .when(pl.col("in_plan"))
        .then(pl.lit("Audit first"))
        .when(worth)
        .then(pl.lit("Audit soon"))
        .when((cost > watch_from) & (cost > 0))
        .then(pl.lit("Watch"))
        # above the band, but a fit that does not follow the weather cannot size the excess: watched
        .when(pl.col("_f_above_band") & pl.col("_f_poor_fit"))
        .then(pl.lit("Watch"))
        .otherwise(pl.lit("No action"))
        .alias("tier")
    )
    out = out.with_columns(pl.col("tier").replace_strict(TIER_RANK, return_dtype=pl.Int64).alias("tier_rank"))
    out = out.sort(
        ["tier_rank", "_pin", "_order_money", "ratio", "building_id"],
        descending=[False, True, True, True, False],
        nulls_last=True,
    )
    out = out.with_row_index("rank", offset=1).with_columns(pl.col("rank").cast(pl.Int64))
    out = out.with_columns(
        _names_by_code(out["_f_code"], FLAG_ORDER).alias("flag_codes"),
        _mechanisms(out, t).alias("mechanisms"),
        # which view sized the expected recoverable energy (level, step up, fuel step): the sheet says it in words
        pl.col("_view").alias("recoverable_basis"),
    )
    return out.drop([c for c in out.columns if c.startswith("_") and c not in TEXT_INPUTS])


#: the mechanisms the bills can show, as column stems (``excess_<m>_kbtu``, ``sure_<m>``, ...)
MECHANISMS = ("heat_loss", "controls", "baseload")


def _names_by_code(code: pl.Series, names: Sequence[str]) -> pl.Series:
    """Per row the list of ``names[i]`` whose bit i is set in ``code`` (in the order of ``names``), made once
    per distinct code and gathered: ``concat_list(when(bit i).then(names[i])).list.drop_nulls()``."""
    u = code.unique().sort()
    lists = pl.Series(
        [[n for i, n in enumerate(names) if int(m) >> i & 1] for m in u.to_list()], dtype=pl.List(pl.String)
    )
    return lists.gather(u.search_sorted(code))


def _mechanisms(out: pl.DataFrame, t: Thresholds) -> pl.Series:
    """Mechanisms whose own evidence is sure enough (``sure_<m>`` ≥ mechanism_support and an excess > 0),
    largest expected excess ``sure_<m> · excess_<m>_kbtu`` first (equal ones: the name in reverse
    alphabetical order); none while a data problem blocks the verdict. NaN counts as not sure."""
    names = [m.replace("_", " ") for m in MECHANISMS]
    ok, key = {}, {}
    for col, name in zip(MECHANISMS, names):
        w, x = pl.col(f"sure_{col}"), pl.col(f"excess_{col}_kbtu")
        ok[name] = (
            ~pl.col("blocking").fill_null(False)
            & (x > 0)
            & x.is_not_nan()
            & (w >= t.mechanism_support)
            & w.is_not_nan()
        ).fill_null(False)
        key[name] = w * x
    # each one's place: how many supported others come before it
    place = {
        n: pl.sum_horizontal(
            *[
                (ok[o] & ((key[o] > key[n]) | ((key[o] == key[n]) & pl.lit(o > n)))).fill_null(False).cast(pl.Int32)
                for o in names
                if o != n
            ]
        )
        for n in names
    }
    # the name at each place (the first of the names there, len(names) for none), as one base-4 number
    code = pl.lit(0, dtype=pl.Int32)
    for i in range(len(names)):
        e = pl.lit(len(names), dtype=pl.Int32)
        for k in reversed(range(len(names))):
            e = pl.when(ok[names[k]] & (place[names[k]] == i)).then(pl.lit(k, dtype=pl.Int32)).otherwise(e)
        code = code + e * 4**i
    c = out.select(code.alias("c"))["c"]
    u = c.unique().sort()
    lists = pl.Series(
        [[names[d] for i in range(len(names)) if (d := int(m) // 4**i % 4) < len(names)] for m in u.to_list()],
        dtype=pl.List(pl.String),
    )
    return lists.gather(u.search_sorted(c))
