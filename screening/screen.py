"""Screening: metrics, flags, needs_review, tiers and the ranking (pure, over the portfolio).

A building goes on the audit list only when its metered heating stands out beyond the
model's own uncertainty band *and* beyond the spread of its peers, and no data
problem blocks a verdict. Buildings with blocking data problems form their own tier.

Notation: r = metered / expected (P50); the robust z-score of log r within the peer
group is z = (ln r − median ln r) / (1.4826 · MAD), Iglewicz & Hoaglin (1993), "How to
Detect and Handle Outliers", ASQC Basic References in Quality Control vol. 16, where
1.4826 makes the MAD consistent with σ for normal data.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl

MAD_TO_SIGMA = 1.4826  # consistency constant of the MAD for normal data (Iglewicz & Hoaglin 1993)

# Tiers, most urgent first. Names are our own.
TIERS = (
    ("Audit first", "strong evidence of excess heating and a large excess"),
    ("Audit soon", "strong evidence of excess heating"),
    ("Fix data first", "a data problem blocks a verdict"),
    ("Watch", "some signs worth watching, not enough for an audit"),
    ("No action", "heating in line with expectation and peers"),
)
TIER_RANK = {name: i + 1 for i, (name, _) in enumerate(TIERS)}

FLAG_TEXT = {
    "above_band": "heating above the expected range",
    "high_among_peers": "high heating intensity among peers",
    "high_baseload": "high non-heating use of the heating fuel",
    "high_balance_point": "heating starts at a high outdoor temperature",
    "poor_fit": "use does not follow the weather consistently",
    "rising_use": "weather-normalized heating rising against last year",
    "envelope_defaulted": "envelope entirely from defaults (lower confidence)",
    "shifted_span": "compared over the building's latest covered 12 months, not the window",
    "base_at_grid_edge": "fitted balance point on the edge of the bases searched",
}


def era_of(year_built: pl.Expr) -> pl.Expr:
    """Construction era label used for peer groups (same bins as the envelope defaults)."""
    return (pl.when(year_built.is_null()).then(pl.lit("unknown"))
            .when(year_built < 1950).then(pl.lit("pre-1950"))
            .when(year_built < 1980).then(pl.lit("1950-1979"))
            .when(year_built < 2000).then(pl.lit("1980-1999"))
            .when(year_built < 2012).then(pl.lit("2000-2011"))
            .otherwise(pl.lit("2012+")))


def peer_groups(df: pl.DataFrame, *, min_group: int) -> pl.Series:
    """Peer group per building: ``use_type × era``, or ``use_type`` when that group is small.

    Only buildings with a usable intensity count toward the group size.
    """
    tmp = df.select("use_type", "era", pl.col("heating_intensity").is_not_null().alias("ok"))
    n_fine = tmp.group_by("use_type", "era").agg(pl.col("ok").sum().alias("n"))
    tmp = tmp.join(n_fine, on=["use_type", "era"], how="left", maintain_order="left")
    return tmp.select(pl.when(pl.col("n") >= min_group)
                      .then(pl.col("use_type") + pl.lit(" · ") + pl.col("era"))
                      .otherwise(pl.col("use_type") + pl.lit(" · all eras")).alias("peer_group"))["peer_group"]


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


def screen(df: pl.DataFrame, thresholds: dict, *, energy_factor: float, energy_unit: str) -> pl.DataFrame:
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
    thresholds : the ``[thresholds]`` table of the config.
    energy_factor, energy_unit : display conversion from kBtu (1 for kBtu; 0.29307107 for kWh).

    Returns
    -------
    The frame with ``ratio, band_position, heating_intensity`` [Btu/(ft²·°F·day), HDD65
    basis, the EIA definition], ``peer_group, peer_median_intensity, peer_percentile,
    z_score, balance_point_excess_f`` [°F] (fitted − engineering balance point), ``z_balance_point,
    z_intensity, evidence_score`` (z_score + w_bp·z_balance_point + w_int·z_intensity, the
    needs_review test; see README "How the audit list is chosen"), ``excess_energy_kbtu`` (metered − the band's top, ≥ 0; the top is P90, at least P50 × (1 + band_floor)), ``excess_energy_central_kbtu``
    (metered − P50, ≥ 0), ``excess_cost, excess_co2e_kg, yoy_change, z_yoy`` (robust z of
    ln(1 + yoy_change) over the portfolio: needs_review's second path, a step up against the
    previous year), ``flag_codes, flag_texts, needs_review, review_path`` ("level", "step up",
    "level and step up" or null), ``tier, tier_rank, rank, verdict``.
    """
    t = thresholds
    # the band is never narrower than ±band_floor around P50: metering, weather and calendarization
    # carry that much uncertainty even when every envelope input is known
    df = df.with_columns(
        pl.max_horizontal(pl.col("expected_high_kbtu"),
                          pl.col("expected_heating_kbtu") * (1 + t["band_floor"])).alias("_band_high"),
        pl.min_horizontal(pl.col("expected_low_kbtu"),
                          pl.col("expected_heating_kbtu") * (1 - t["band_floor"])).alias("_band_low"))
    out = df.with_columns(
        # no ratio without a positive expectation and a metered figure (never inf or NaN in an output)
        pl.when((pl.col("expected_heating_kbtu") > 0) & pl.col("actual_heating_kbtu").is_finite())
        .then(pl.col("actual_heating_kbtu") / pl.col("expected_heating_kbtu")).otherwise(None).alias("ratio"),
        pl.when(pl.col("actual_heating_kbtu") > pl.col("_band_high") * t["band_ratio"]).then(pl.lit("above"))
        .when(pl.col("actual_heating_kbtu") < pl.col("_band_low")).then(pl.lit("below"))
        .when(pl.col("actual_heating_kbtu").is_not_null() & pl.col("expected_low_kbtu").is_not_null())
        .then(pl.lit("within")).otherwise(None).alias("band_position"),
        pl.when((pl.col("hdd65") > 0) & (pl.col("floor_area_ft2") > 0) & pl.col("actual_heating_kbtu").is_not_null())
        .then(pl.col("actual_heating_kbtu") * 1000.0 / (pl.col("floor_area_ft2") * pl.col("hdd65")))
        .otherwise(None).alias("heating_intensity"),
    )
    # peers use only buildings whose figures are not blocked by data problems
    usable = (~pl.col("blocking")) & pl.col("ratio").is_not_null() & (pl.col("ratio") > 0)
    out = out.with_columns(
        pl.when(usable).then(pl.col("heating_intensity")).otherwise(None).alias("_int_ok"),
        pl.when(usable).then(pl.col("ratio").log()).otherwise(None).alias("_logr"),
    )
    out = out.with_columns(peer_groups(out.with_columns(pl.col("_int_ok").alias("heating_intensity")),
                                       min_group=t["min_peer_group"]).alias("peer_group"))
    out = out.with_columns(
        pl.col("_int_ok").median().over("peer_group").alias("peer_median_intensity"),
        percentile_within(pl.col("_int_ok"), "peer_group").alias("peer_percentile"),
        robust_z(pl.col("_logr"), "peer_group").alias("z_score"),
        pl.col("_int_ok").count().over("peer_group").alias("peer_count"),
    )
    # a group too uniform for a MAD falls back to the whole portfolio's spread
    out = out.with_columns(
        pl.when(pl.col("z_score").is_null() & pl.col("_logr").is_not_null())
        .then(_robust_z_all(pl.col("_logr")))
        .otherwise(pl.col("z_score")).alias("z_score"))
    out = out.with_columns(
        # no excess is claimed where a data problem blocks the verdict: it would be the data's, not waste
        pl.when(~pl.col("blocking")).then(
            (pl.col("actual_heating_kbtu") - pl.col("_band_high")).clip(lower_bound=0)).alias("excess_energy_kbtu"),
        pl.when(~pl.col("blocking")).then(
            (pl.col("actual_heating_kbtu") - pl.col("expected_heating_kbtu")).clip(lower_bound=0))
        .alias("excess_energy_central_kbtu"),
        pl.coalesce(
            pl.col("yoy_change") if "yoy_change" in df.columns else pl.lit(None, dtype=pl.Float64),
            pl.when(pl.col("prev_normal_heating_kbtu") > 0)
            .then(pl.col("normal_heating_kbtu") / pl.col("prev_normal_heating_kbtu") - 1).otherwise(None))
        .alias("yoy_change"),
    )
    out = out.with_columns(
        (pl.col("excess_energy_kbtu") * pl.col("usd_per_kbtu")).alias("excess_cost"),
        (pl.col("excess_energy_kbtu") * pl.col("kg_co2e_per_kbtu")).alias("excess_co2e_kg"),
    )
    reg = pl.col("fit_method") == "regression"
    # evidence that does not lean on the envelope estimate: the building's own fitted balance
    # point against the engineering one (portfolio-wide robust z) and its intensity among peers
    fit_ok = reg & (pl.col("r2") >= t["r2_min"]).fill_null(False)
    out = out.with_columns(
        pl.when(usable & fit_ok & pl.col("fitted_base_f").is_not_null() & pl.col("balance_point_f").is_not_null())
        .then(pl.col("fitted_base_f") - pl.col("balance_point_f")).otherwise(None).alias("balance_point_excess_f"),
        pl.when(pl.col("_int_ok") > 0).then(pl.col("_int_ok").log()).otherwise(None).alias("_logi"),
    )
    out = out.with_columns(
        _robust_z_all(pl.col("balance_point_excess_f")).alias("z_balance_point"),
        robust_z(pl.col("_logi"), "peer_group").alias("z_intensity"),
        # the building against its own previous year: the weather-normalized change, as a robust z
        # over the portfolio (the spread of normal buildings' changes is weather-normalization and
        # meter noise, common to all)
        pl.when(usable & (pl.col("yoy_change") > -1))
        .then((1 + pl.col("yoy_change")).log()).otherwise(None).alias("_logyoy"),
    )
    out = out.with_columns(_robust_z_all(pl.col("_logyoy")).alias("z_yoy"))
    out = out.with_columns(
        (pl.col("z_score") + t["weight_balance_point"] * pl.col("z_balance_point").fill_null(0.0)
         + t["weight_intensity"] * pl.col("z_intensity").fill_null(0.0)).alias("evidence_score"))
    conds = {
        "above_band": pl.col("band_position") == "above",
        "high_among_peers": pl.col("peer_percentile") >= t["peer_percentile_high"],
        "high_baseload": reg & (pl.col("baseload_share") > t["baseload_share_high"] * pl.col("baseload_share_default"))
        & (pl.col("baseload_share") > 0.2),
        "high_balance_point": reg & (pl.col("fitted_base_f") > t["balance_point_high_f"]),
        "poor_fit": reg & ((pl.col("r2") < t["r2_min"]) | (pl.col("cv_rmse") > t["cv_rmse_max"])),
        "rising_use": pl.col("yoy_change") > t["yoy_rise"],
        "envelope_defaulted": pl.col("envelope_source") == "estimated",
        "shifted_span": pl.col("span_kind") == "shifted",
        "base_at_grid_edge": reg & pl.col("base_at_edge") if "base_at_edge" in out.columns else pl.lit(False),
    }
    out = out.with_columns([c.fill_null(False).alias(f"_f_{k}") for k, c in conds.items()])
    # a fit that does not follow the weather is no basis for a verdict (often a meter or entry problem)
    fit_usable = (~reg) | fit_ok
    strong = ((pl.col("evidence_score") >= t["review_score"]) & (pl.col("ratio") >= t["min_excess_ratio"])
              & fit_usable).fill_null(False)
    # or a step up against the building's own previous year, far beyond the portfolio's spread of
    # year-on-year changes (a fault that developed: the building is its own baseline)
    # (a fit that explains little of the use, e.g. a heat pump's few % of heating, gives no such step;
    # nor does heating that is a small part of the fuel's use, where a small change in the rest moves it)
    heat_share = pl.when(pl.col("total_fuel_kbtu") > 0).then(pl.col("actual_heating_kbtu") / pl.col("total_fuel_kbtu"))
    rise = ((pl.col("yoy_change") >= t["yoy_review"]) & (pl.col("z_yoy") >= t["yoy_review_z"])
            & (~reg | (pl.col("r2") >= t["yoy_review_r2_min"]))
            & (heat_share >= t["yoy_review_heating_share_min"])).fill_null(False)
    out = out.with_columns(
        ((strong | rise) & ~pl.col("blocking")).alias("needs_review"),
        # which way the building came onto the audit list (README "How the audit list is chosen")
        pl.when(pl.col("blocking")).then(None)
        .when(strong & rise).then(pl.lit("level and step up"))
        .when(strong).then(pl.lit("level"))
        .when(rise).then(pl.lit("step up"))
        .otherwise(None).alias("review_path"),
    )
    watch = (pl.col("_f_above_band") | pl.col("_f_high_among_peers") | pl.col("_f_poor_fit")
             | pl.col("_f_rising_use") | pl.col("_f_high_balance_point") | pl.col("_f_high_baseload")
             | (pl.col("z_score") >= t["z_review"]).fill_null(False))
    # the most urgent: a large excess over the expectation with strong evidence, on either path
    big = (pl.col("ratio") >= t["audit_first_ratio"]) & (
        (pl.col("evidence_score") >= t["audit_first_score"]) | rise)
    out = out.with_columns(
        pl.when(pl.col("blocking")).then(pl.lit("Fix data first"))
        .when(pl.col("needs_review") & big.fill_null(False)).then(pl.lit("Audit first"))
        .when(pl.col("needs_review")).then(pl.lit("Audit soon"))
        .when(watch).then(pl.lit("Watch"))
        .otherwise(pl.lit("No action")).alias("tier"))
    out = out.with_columns(pl.col("tier").replace_strict(TIER_RANK, return_dtype=pl.Int64).alias("tier_rank"))
    out = out.sort(["tier_rank", "excess_cost", "ratio", "building_id"],
                   descending=[False, True, True, False], nulls_last=True)
    out = out.with_row_index("rank", offset=1).with_columns(pl.col("rank").cast(pl.Int64))
    out = _explain(out, t, energy_factor=energy_factor, energy_unit=energy_unit)
    return out.drop([c for c in out.columns if c.startswith("_")])


def _fmt(x: float | None, digits: int = 0) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if digits == 0:
        return f"{x:,.0f}"
    return f"{x:,.{digits}f}"


def _explain(out: pl.DataFrame, t: dict, *, energy_factor: float, energy_unit: str) -> pl.DataFrame:
    """Flag codes and one-line explanations that carry the numbers; the verdict sentence."""
    rows = out.select(
        "actual_heating_kbtu", "expected_heating_kbtu", "_band_low", "_band_high", "ratio",
        "heating_intensity", "peer_median_intensity", "peer_percentile", "peer_group", "z_score",
        "baseload_share", "baseload_share_default", "fitted_base_f", "r2", "cv_rmse", "yoy_change",
        "tier", "needs_review", "blocking", "excess_energy_kbtu", "evidence_score", "z_balance_point", "z_intensity",
        "z_yoy", "review_path", "span_kind", "data_issue_codes",
        *[c for c in out.columns if c.startswith("_f_")])
    e = energy_factor
    codes_all, texts_all, verdicts = [], [], []
    for r in rows.iter_rows(named=True):  # one row's dict at a time, not all of them at once
        codes, texts = [], []

        def add(code: str, text: str) -> None:
            codes.append(code)
            texts.append(text)
        if r["_f_above_band"]:
            add("above_band", f"Metered heating {_fmt(r['actual_heating_kbtu'] * e)} {energy_unit} is "
                f"{_fmt(r['ratio'], 2)}× the expected {_fmt(r['expected_heating_kbtu'] * e)} {energy_unit}, "
                f"above the likely range {_fmt(r['_band_low'] * e)}–{_fmt(r['_band_high'] * e)}.")
        if r["_f_high_among_peers"]:
            add("high_among_peers", f"Heating intensity {_fmt(r['heating_intensity'], 2)} Btu/ft²·°F·day is at the "
                f"{_fmt(r['peer_percentile'])}th percentile of {r['peer_group']} (median "
                f"{_fmt(r['peer_median_intensity'], 2)}).")
        if r["_f_high_baseload"]:
            add("high_baseload", f"Non-heating use is {_fmt(100 * r['baseload_share'])} % of the heating fuel, against "
                f"about {_fmt(100 * r['baseload_share_default'])} % typical for the use type.")
        if r["_f_high_balance_point"]:
            add("high_balance_point", f"Heating starts below {_fmt(r['fitted_base_f'], 1)} °F outdoors "
                f"(fitted balance point; above {t['balance_point_high_f']:g} °F suggests high setpoints or "
                "controls that heat too early).")
        if r["_f_poor_fit"]:
            add("poor_fit", f"Use follows the weather poorly (R² {_fmt(r['r2'], 2)}, CV(RMSE) "
                f"{_fmt(r['cv_rmse'], 1)} %): irregular operation, controls or meter problems.")
        if r["_f_rising_use"]:
            add("rising_use", f"Weather-normalized heating is up {_fmt(100 * r['yoy_change'])} % on the previous year.")
        if r["_f_envelope_defaulted"]:
            add("envelope_defaulted", "Every envelope value is a default for the use type and era: the expected "
                "range is wide.")
        if r["_f_shifted_span"]:
            add("shifted_span", "Readings do not cover the analysis window; the latest covered 12 months were "
                "compared instead, with the degree days of the same days.")
        if r["_f_base_at_grid_edge"]:
            add("base_at_grid_edge", f"The bills fit best at a base of {_fmt(r['fitted_base_f'], 1)} °F, the edge of "
                "the bases searched: the building's balance point may lie beyond it, and its split of the fuel "
                "into heating and baseload is less certain.")
        codes_all.append(codes)
        texts_all.append(texts)
        if r["blocking"]:
            v = ("A data problem (" + ", ".join(r["data_issue_codes"] or []) + ") must be fixed before this "
                 "building can be judged.")
        elif r["review_path"] == "step up":
            v = (f"Weather-normalized heating rose {_fmt(100 * r['yoy_change'])} % on the previous year, far beyond "
                 f"the portfolio's year-on-year spread (z {_fmt(r['z_yoy'], 1)} against {t['yoy_review_z']:g}); it is "
                 f"now {_fmt(r['ratio'], 2)}× the expectation. Something changed: recommend an audit.")
        elif r["needs_review"]:
            v = (f"Heating is {_fmt(r['ratio'], 1)}× what this building should need and the evidence of excess "
                 f"is strong (score {_fmt(r['evidence_score'], 1)} against {t['review_score']:g}: peers "
                 f"{_fmt(r['z_score'], 1)}, balance point {_fmt(r['z_balance_point'], 1)}, intensity "
                 f"{_fmt(r['z_intensity'], 1)}): recommend an audit.")
        elif r["tier"] == "Watch":
            v = "Some signs of excess heating, not yet strong enough for an audit; watch next quarter."
        elif r["ratio"] is None:
            v = "No verdict: metered or expected heating is missing."
        else:
            v = f"Heating is in line with expectation ({_fmt(r['ratio'], 2)}× expected) and with its peers."
        verdicts.append(v)
    return out.with_columns(
        pl.Series("flag_codes", codes_all, dtype=pl.List(pl.String)),
        pl.Series("flag_texts", texts_all, dtype=pl.List(pl.String)),
        pl.Series("verdict", verdicts, dtype=pl.String),
    )


def next_steps(flag_codes: list[str], data_issue_codes: list[str], *, slope_vs_envelope: float | None) -> list[str]:
    """Plain-language checks tied to the flags (printed on the sheet)."""
    steps = []
    # the last days of the window filled from the fit need no correction, only the next bill
    fix = sorted(set(data_issue_codes) - {"end_days_filled"})
    if fix:
        steps.append("Check the data first: " + ", ".join(fix)
                     + " — correct the readings or the building record and rerun.")
    if "end_days_filled" in data_issue_codes:
        steps.append("The last days of the window had no reading yet and were filled from the building's "
                     "weather fit: the next run uses the bill once it is read.")
    if "high_balance_point" in flag_codes:
        steps.append("Check controls and setpoints: heating schedules, night and weekend setbacks, "
                     "thermostat settings, simultaneous heating and cooling.")
    if slope_vs_envelope is not None and slope_vs_envelope > 1.5 or "above_band" in flag_codes:
        steps.append("Check the envelope and air leakage: a heating slope well above what the envelope "
                     "explains points to air leaks, open dampers or missing insulation "
                     "(combustion-safety testing before any air sealing).")
    if "high_baseload" in flag_codes:
        steps.append("Check hot water and process loads: recirculation, leaks, reheat, kitchen or laundry use.")
    if "poor_fit" in flag_codes:
        steps.append("Check operation and meters: irregular occupancy, manual controls, estimated or "
                     "mis-assigned readings.")
    if "rising_use" in flag_codes:
        steps.append("Ask what changed since last year: equipment, occupancy, schedules, a failed component.")
    if not steps:
        steps.append("No check needed now; keep the readings coming and review next quarter.")
    return steps


def np_safe(x) -> float | None:
    """A float or None for missing/NaN (for JSON and the sheets)."""
    if x is None:
        return None
    x = float(x)
    return x if np.isfinite(x) else None
