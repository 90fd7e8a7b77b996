"""Turn screening results into the output files: ranking.csv, summary.json, rejects.csv,
sheets/<id>.pdf and ranking.pdf, in display units (kBtu/ft²/°F for IP, kWh/m²/°C for SI).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import IO, cast

import polars as pl

from . import screen, wording
from .pipeline import DATA_ISSUE_CODES
from .render import savings_page
from .render.record import AnnualBar, Assumption, DataIssue, Flag, Line, Period, SheetRecord, SinceMeasure, UaPart
from .schema import FLAGS, KBTU_TO_KWH, REJECT_SCHEMA

FT2_TO_M2 = 0.09290304  # exact
BTU_H_F_TO_W_K = 0.52752792631  # NIST SP 811: 1 Btu_IT/h = 0.29307107 W; × 1.8
INTENSITY_IP_TO_SI = 5.678263341  # Btu/(ft²·°F·day) → Wh/(m²·K·day) (docs/factors.md §8; pint check in tests)

CAUTIONS = [
    "Screening estimate for information only: not an energy audit, a design, or a code-compliance determination.",
    "Follow local codes and the legal minimum indoor temperatures when changing setpoints or schedules.",
    "Combustion-safety testing is required before and after any air sealing.",
    "Defer decisions to licensed professional engineers or certified energy auditors.",
]


class Display:
    """Display units of a run: conversion from the canonical IP values."""

    def __init__(self, units: str):
        self.si = units == "SI"
        self.energy_unit = "kWh" if self.si else "kBtu"
        self.area_unit = "m²" if self.si else "ft²"
        self.temp_unit = "°C" if self.si else "°F"
        self.dd_unit = "°C·day" if self.si else "°F·day"
        self.intensity_unit = "Wh/m²·K·day" if self.si else "Btu/ft²·°F·day"
        self.ua_unit = "W/K" if self.si else "Btu/h·°F"

    def energy(self, e: pl.Expr) -> pl.Expr:
        return e * KBTU_TO_KWH if self.si else e

    def area(self, e: pl.Expr) -> pl.Expr:
        return e * FT2_TO_M2 if self.si else e

    def temp(self, e: pl.Expr) -> pl.Expr:
        return (e - 32.0) / 1.8 if self.si else e

    def dd(self, e: pl.Expr) -> pl.Expr:
        return e / 1.8 if self.si else e

    def intensity(self, e: pl.Expr) -> pl.Expr:
        return e * INTENSITY_IP_TO_SI if self.si else e

    def ua(self, e: pl.Expr) -> pl.Expr:
        return e * BTU_H_F_TO_W_K if self.si else e

    def val(self, kind: str, x):
        """One value in display units (the scalar twin of the expression methods above)."""
        if x is None or (isinstance(x, float) and not math.isfinite(x)):
            return None
        x = float(x)
        if not self.si:
            return x
        if kind == "temp":
            return (x - 32.0) / 1.8
        return x * self._SCALAR[kind]

    _SCALAR = {
        "energy": KBTU_TO_KWH,
        "area": FT2_TO_M2,
        "dd": 1 / 1.8,
        "intensity": INTENSITY_IP_TO_SI,
        "ua": BTU_H_F_TO_W_K,
    }


# Readable names of the envelope assumptions (screening.envelope.PARAMETERS and given-only inputs)
ASSUMPTION_LABELS: dict[str | None, str] = {  # looked up by a record's name, which may be missing
    "stories": "stories",
    "aspect_ratio": "plan aspect ratio",
    "floor_to_floor_ft": "floor-to-floor height",
    "window_fraction": "window-to-wall ratio",
    "wall_u_btu_h_ft2_f": "wall U-factor",
    "window_u_btu_h_ft2_f": "window U-factor",
    "roof_u_btu_h_ft2_f": "roof U-factor",
    "ground_f_btu_h_ft_f": "ground loss per perimeter",
    "ach": "air changes (leakage)",
    "outdoor_air_cfm_ft2": "outdoor air",
    "heat_recovery": "heat recovery",
    "occupied_fraction": "ventilation hours share",
    "internal_gains_w_ft2": "internal gains",
    "solar_gains_w_ft2_window": "solar gains per window area",
    "setpoint_f": "heating setpoint",
    "setback_f": "setback depth",
    "setback_hours": "setback hours",
    "setback_realization": "setback reached",
    "efficiency": "seasonal efficiency",
    "wall_area_ft2": "wall area",
    "window_area_ft2": "window area",
    "roof_area_ft2": "roof area",
    "ua_total_btu_h_f": "overall UA",
    "balance_point_f": "balance point",
}
# (IP unit as the envelope writes it) -> (SI unit, factor, offset); NIST SP 811 factors
_ASSUMPTION_SI = {
    "Btu/(h*ft2*F)": ("W/(m²·K)", 5.678263341, 0.0),
    "ft": ("m", 0.3048, 0.0),
    "Btu/(h*ft*F)": ("W/(m·K)", 1.730734666, 0.0),
    "cfm/ft2": ("L/(s·m²)", 5.08, 0.0),
    "W/ft2": ("W/m²", 10.76391042, 0.0),
    "W per ft2 of window": ("W per m² of window", 10.76391042, 0.0),
    "ft2": ("m²", FT2_TO_M2, 0.0),
    "Btu/(h*F)": ("W/K", BTU_H_F_TO_W_K, 0.0),
}
_IP_UNIT_TEXT = {
    "Btu/(h*ft2*F)": "Btu/h·ft²·°F",
    "Btu/(h*ft*F)": "Btu/h·ft·°F",
    "ft2": "ft²",
    "cfm/ft2": "cfm/ft²",
    "W/ft2": "W/ft²",
    "W per ft2 of window": "W per ft² of window",
    "Btu/(h*F)": "Btu/h·°F",
}


def display_assumptions(items: list[dict] | None, disp: "Display") -> list[dict]:
    """Envelope assumptions with readable names, in the run's units (value, low and high)."""
    out = []
    for a in items or []:
        name, unit = a.get("name"), a.get("unit") or ""
        f, off = 1.0, 0.0
        if unit == "F":  # a temperature, or a temperature difference for the setback depth
            delta = name == "setback_f"
            if disp.si:
                f, off = 1 / 1.8, (0.0 if delta else -32.0 / 1.8)
                unit = "K" if delta else "°C"
            else:
                unit = "°F"
        elif disp.si and unit in _ASSUMPTION_SI:
            unit, f, off = _ASSUMPTION_SI[unit]
        else:
            unit = _IP_UNIT_TEXT.get(unit, unit)
        conv = {k: (None if a.get(k) is None else a[k] * f + off) for k in ("value", "low", "high")}
        out.append({**a, **conv, "name": ASSUMPTION_LABELS.get(name, str(name).replace("_", " ")), "unit": unit})
    return out


RANKING_COLUMNS = [
    "rank",
    "building_id",
    "name",
    "address",
    "city",
    "use_type",
    "floor_area",
    "year_built",
    "station_id",
    "heating_fuel",
    "period_start",
    "period_end",
    "span_kind",
    "coverage",
    "filled_days",
    "hdd",
    "base_temperature",
    "hdd65",
    "actual_heating",
    "expected_heating",
    "expected_low",
    "expected_high",
    "expected_fixed_base",
    "expected_modified",
    "ratio",
    "band_position",
    "heating_intensity",
    "peer_group",
    "peer_median_intensity",
    "peer_percentile",
    "z_score",
    "z_balance_point",
    "z_intensity",
    "evidence_score",
    "normal_heating",
    "yoy_change",
    "z_yoy",
    "baseload",
    "heating_slope",
    "fitted_base",
    "r2",
    "cv_rmse",
    "nmbe",
    "n_periods",
    "fit_method",
    "effective_ua",
    "ua_walls",
    "ua_windows",
    "ua_roof",
    "ua_ground",
    "ua_infiltration",
    "ua_ventilation",
    "ua_total",
    "envelope_source",
    "excess_energy",
    "excess_cost",
    "excess_co2e",
    "expected_recoverable_energy",
    "expected_recoverable_cost",
    "expected_recoverable_co2e",
    *[c for m in screen.MECHANISMS for c in (f"excess_{m}", f"excess_{m}_cost", f"excess_{m}_co2e", f"sure_{m}")],
    "evidence_scale",
    "peer_weight",
    "waste_kind",
    "tier",
    "verdict",
    "plan_note",
    "needs_review",
    "review_path",
    "flags",
    "data_issues",
    "change",
    "previous_rank",
    "energy_unit",
    "billed_unit",
    "actual_heating_billed",
    "excess_billed",
    "expected_recoverable_billed",
]


def _billed_col(res: pl.DataFrame, name: str) -> pl.Expr:
    """A billed-unit column of the results (pipeline joins ``units.billed_units``), null where absent."""
    dtype = pl.String if name == "billed_unit" else pl.Float64
    return pl.col(name) if name in res.columns else pl.lit(None, dtype=dtype).alias(name)


def ranking_table(res: pl.DataFrame, disp: Display, change: pl.DataFrame | None = None) -> pl.DataFrame:
    """The ranking.csv frame: one row per building, documented columns, display units."""
    d = disp
    per_unit = _billed_col(res, "kbtu_per_billed_unit")
    per_unit = pl.when(per_unit > 0).then(per_unit).otherwise(None)
    ua_cols = ["ua_walls", "ua_windows", "ua_roof", "ua_ground", "ua_infiltration", "ua_ventilation", "ua_total"]
    out = res.select(
        "rank",
        "building_id",
        "name",
        "address",
        "city",
        "use_type",
        d.area(pl.col("floor_area_ft2")).round(1).alias("floor_area"),
        "year_built",
        "station_id",
        "heating_fuel",
        pl.col("span_start").alias("period_start"),
        pl.col("span_end").alias("period_end"),
        "span_kind",
        pl.col("coverage").round(4),
        "filled_days",
        d.dd(pl.col("hdd_balance")).round(1).alias("hdd"),
        d.temp(pl.col("balance_point_f")).round(2).alias("base_temperature"),
        d.dd(pl.col("hdd65")).round(1).alias("hdd65"),
        *[d.energy(pl.col(f"{c}_kbtu")).round(1).alias(c) for c in ("actual_heating", "expected_heating")],
        d.energy(pl.col("expected_low_kbtu")).round(1).alias("expected_low"),
        d.energy(pl.col("expected_high_kbtu")).round(1).alias("expected_high"),
        d.energy(pl.col("expected_fixed_base_kbtu")).round(1).alias("expected_fixed_base"),
        d.energy(pl.col("expected_modified_kbtu")).round(1).alias("expected_modified"),
        pl.col("ratio").round(4),
        "band_position",
        d.intensity(pl.col("heating_intensity")).round(4).alias("heating_intensity"),
        "peer_group",
        d.intensity(pl.col("peer_median_intensity")).round(4).alias("peer_median_intensity"),
        pl.col("peer_percentile").round(1),
        pl.col("z_score").round(3),
        pl.col("z_balance_point").round(3),
        pl.col("z_intensity").round(3),
        pl.col("evidence_score").round(3),
        d.energy(pl.col("normal_heating_kbtu")).round(1).alias("normal_heating"),
        pl.col("yoy_change").round(4),
        pl.col("z_yoy").round(3),
        d.energy(pl.col("baseload_kbtu")).round(1).alias("baseload"),
        (d.energy(pl.col("heating_slope_kbtu_per_dd")) * (1.8 if d.si else 1.0)).round(4).alias("heating_slope"),
        d.temp(pl.col("fitted_base_f")).round(2).alias("fitted_base"),
        pl.col("r2").round(4),
        pl.col("cv_rmse").round(2),
        pl.col("nmbe").round(3),
        "n_periods",
        "fit_method",
        d.ua(pl.col("effective_ua_btu_h_f")).round(1).alias("effective_ua"),
        *[d.ua(pl.col(c)).round(1).alias(c) for c in ua_cols],
        "envelope_source",
        d.energy(pl.col("excess_energy_kbtu")).round(1).alias("excess_energy"),
        pl.col("excess_cost").round(2),
        pl.col("excess_co2e_kg").round(1).alias("excess_co2e"),
        d.energy(pl.col("expected_recoverable_kbtu")).round(1).alias("expected_recoverable_energy"),
        pl.col("expected_recoverable_cost").round(2),
        pl.col("expected_recoverable_co2e_kg").round(1).alias("expected_recoverable_co2e"),
        *[
            e
            for m in screen.MECHANISMS
            for e in (
                d.energy(pl.col(f"excess_{m}_kbtu")).round(1).alias(f"excess_{m}"),
                pl.col(f"excess_{m}_cost").round(2),
                pl.col(f"excess_{m}_co2e_kg").round(1).alias(f"excess_{m}_co2e"),
                pl.col(f"sure_{m}").round(3),
            )
        ],
        "evidence_scale",
        pl.col("peer_weight").round(3),
        "waste_kind",
        "tier",
        "verdict",
        (pl.col("plan_note") if "plan_note" in res.columns else pl.lit(None, dtype=pl.String)).alias("plan_note"),
        "needs_review",
        "review_path",
        pl.col("flag_codes").list.join(";").alias("flags"),
        pl.col("data_issue_codes").list.join(";").alias("data_issues"),
        pl.lit(d.energy_unit).alias("energy_unit"),
        # the same figures in the unit the building's heating bills state (therm, ccf, gal, Mlb, kWh ...)
        _billed_col(res, "billed_unit"),
        *[
            (pl.col(f"{c}_kbtu") / per_unit).round(1).alias(f"{n}_billed")
            for c, n in (
                ("actual_heating", "actual_heating"),
                ("excess_energy", "excess"),
                ("expected_recoverable", "expected_recoverable"),
            )
        ],
    )
    if change is not None and change.height:
        out = out.join(
            change.select("building_id", "change", "previous_rank"), on="building_id", how="left", maintain_order="left"
        )
    else:
        out = out.with_columns(pl.lit("first run").alias("change"), pl.lit(None, dtype=pl.Int64).alias("previous_rank"))
    return out.select(RANKING_COLUMNS)


AUDIT_PLAN_COLUMNS = [
    "visit",
    "rank",
    "building_id",
    "name",
    "use_type",
    "expected_recoverable_cost",
    "expected_recoverable_energy",
    "waste_kind",
    "needs_review",
    "cumulative_share",
    "energy_unit",
]


def audit_plan_table(res: pl.DataFrame, disp: Display) -> pl.DataFrame:
    """audit_plan.csv: this quarter's visits in rank order ([plan] in the config), each with its expected
    savings per year, the kind of waste to look for, and the cumulative share of the portfolio's
    estimated recoverable cost that the visits so far hold."""
    total = res["expected_recoverable_cost"].fill_null(0).fill_nan(0).sum()
    plan = res.filter(pl.col("in_plan")).sort("rank")
    return plan.select(
        pl.int_range(1, plan.height + 1, dtype=pl.Int64).alias("visit"),
        "rank",
        "building_id",
        "name",
        "use_type",
        pl.col("expected_recoverable_cost").round(2),
        disp.energy(pl.col("expected_recoverable_kbtu")).round(1).alias("expected_recoverable_energy"),
        "waste_kind",
        "needs_review",
        (pl.col("expected_recoverable_cost").cum_sum() / total if total > 0 else pl.lit(None, dtype=pl.Float64))
        .round(4)
        .alias("cumulative_share"),
        pl.lit(disp.energy_unit).alias("energy_unit"),
    ).select(AUDIT_PLAN_COLUMNS)


def assumptions_table(envelope: pl.DataFrame, disp: "Display") -> pl.DataFrame:
    """assumptions.csv: every envelope assumption of every building, given or default, with its source.

    One vectorized pass: the per-building lists are exploded, then named and converted by unit.
    """
    long = (
        envelope.select("building_id", "assumptions")
        .explode("assumptions")
        .drop_nulls("assumptions")
        .unnest("assumptions")
        .sort("building_id", maintain_order=True)
    )
    labels = pl.col("name").replace_strict(ASSUMPTION_LABELS, default=pl.col("name").str.replace_all("_", " "))
    unit = pl.col("unit").fill_null("")
    if disp.si:
        table = {u: v for u, v in _ASSUMPTION_SI.items()}
        factor = (
            pl.when(unit == "F")
            .then(1 / 1.8)
            .otherwise(unit.replace_strict({u: v[1] for u, v in table.items()}, default=1.0, return_dtype=pl.Float64))
        )
        offset = pl.when((unit == "F") & (pl.col("name") != "setback_f")).then(-32.0 / 1.8).otherwise(0.0)
        shown = (
            pl.when(unit == "F")
            .then(pl.when(pl.col("name") == "setback_f").then(pl.lit("K")).otherwise(pl.lit("°C")))
            .otherwise(unit.replace_strict({u: v[0] for u, v in table.items()}, default=unit))
        )
    else:
        factor, offset = pl.lit(1.0), pl.lit(0.0)
        shown = pl.when(unit == "F").then(pl.lit("°F")).otherwise(unit.replace_strict(_IP_UNIT_TEXT, default=unit))
    return long.select(
        "building_id",
        labels.alias("name"),
        *[(pl.col(c).cast(pl.Float64) * factor + offset).alias(c) for c in ("value", "low", "high")],
        shown.alias("unit"),
        "origin",
        "source",
    )


#: A whole cell that is a plain decimal number (``-412.0``, ``+3``, ``-2e5``, ``.5``): a spreadsheet reads it
#: as that number, never as a formula, so the guard leaves it alone (``-2+3`` or ``-1e`` are not numbers).
PLAIN_NUMBER = r"^[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$"


def neutralize_formulas(df: pl.DataFrame) -> pl.DataFrame:
    """Prefix text cells that a spreadsheet would run as a formula (= + - @ tab CR) with ``'``.

    The usual defence against CSV formula injection (OWASP "CSV Injection"). A text cell that is
    a plain number (``PLAIN_NUMBER``, e.g. a rejected value ``-412.0``) is left as it is.
    """
    names = [name for name, dtype in df.schema.items() if dtype == pl.String]
    if not names or df.height == 0:
        return df

    def starts(c: pl.Expr) -> pl.Expr:
        return c.str.contains(r"^[=+\-@\t\r]")

    def risky(c: pl.Expr) -> pl.Expr:
        return starts(c) & ~c.str.contains(PLAIN_NUMBER)

    # only the columns holding a risky cell are rewritten; most hold no cell even starting so (one cheap pass)
    found = df.select(starts(pl.col(n)).any().alias(n) for n in names).row(0)
    names = [n for n, hit in zip(names, found) if hit]
    found = df.select(risky(pl.col(n)).any().alias(n) for n in names).row(0) if names else ()
    exprs = [
        pl.when(risky(pl.col(n))).then(pl.lit("'") + pl.col(n)).otherwise(pl.col(n)).alias(n)
        for n, hit in zip(names, found)
        if hit
    ]
    return df.with_columns(exprs) if exprs else df


def write_csv(df: pl.DataFrame, path: Path | IO[bytes], *, include_header: bool = True) -> None:
    """A table as the tool writes every CSV (formulas neutralized, nulls empty, floats round-trip); ``path``
    may be an open binary file to append a piece to."""
    neutralize_formulas(df).write_csv(path, include_header=include_header, null_value="", float_precision=None)


#: Buildings of assumptions.csv formatted and written at a time (19 rows and about 3.4 kB a building as a
#: table: 3.4 GB at 10^6 buildings at once).
ASSUMPTION_CHUNK = 65_536


def write_assumptions_csv(envelope: pl.DataFrame, disp: "Display", path: Path, rows: int = ASSUMPTION_CHUNK) -> None:
    """assumptions.csv, :func:`assumptions_table` of ``rows`` buildings at a time appended to the file: the
    same bytes as the whole table (the envelope frame is in building order; if it is not, the whole table)."""
    if envelope.height <= rows or not envelope["building_id"].is_sorted():
        write_csv(assumptions_table(envelope, disp), path)
        return
    with open(path, "wb") as f:
        for k in range(0, envelope.height, rows):
            write_csv(assumptions_table(envelope.slice(k, rows), disp), f, include_header=k == 0)


def rejects_table(rejects: pl.DataFrame) -> pl.DataFrame:
    return rejects.cast(REJECT_SCHEMA).unique().sort("file", "line", "column", "reason")


def _num(x):
    if x is None:
        return None
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def sheet_records(
    res: pl.DataFrame,
    envelope: pl.DataFrame,
    periods: pl.DataFrame,
    disp: Display,
    *,
    run_id: str,
    run_date: str,
    currency: str,
    since_measure: dict[str, dict] | None = None,
) -> list[SheetRecord]:
    """The sheet records, one per building (``screening.render.record.SheetRecord``; rendered by
    ``screening.render.pdf.render_sheets``).

    ``since_measure`` (``events.since_measure``, issue 17): per building with a measure, the data of the
    sheet's "since the measure" box; the record's ``since_measure`` is that dict or None.
    """
    d = disp
    ef = 1.8 if d.si else 1.0  # per °F → per K
    env_rows = {r["building_id"]: r for r in envelope.select("building_id", "assumptions").iter_rows(named=True)}
    per: dict[str, list[dict]] = {}
    if periods.height:
        cols = ["building_id", "period_start", "period_end", "days", "upd"] + (
            ["hdd_per_day_fit"] if "hdd_per_day_fit" in periods.columns else []
        )
        pp = (
            periods.filter(pl.col("usable"))
            .with_columns((pl.col("energy_kbtu") / pl.col("days")).alias("upd"))
            .select(cols)
        )
        for p in pp.iter_rows(named=True):
            per.setdefault(p["building_id"], []).append(p)
    # peer charts show the buildings the peer statistics use: one whose data problem blocks a verdict
    # (a unit error puts it at 100x its peers) would squash every other building to the axis
    peers = (
        res.filter(~pl.col("blocking").fill_null(False))
        .group_by("peer_group")
        .agg(pl.col("heating_intensity").drop_nulls())
    )
    peer_map = {
        r["peer_group"]: [d.val("intensity", x) for x in r["heating_intensity"]] for r in peers.iter_rows(named=True)
    }
    out: list[SheetRecord] = []
    for r in res.iter_rows(named=True):
        bid = r["building_id"]
        grp = per.get(bid)
        bal = r["balance_point_f"]
        periods_list: list[Period] = []
        fit_line: Line | None = None
        exp_line: Line | None = None
        if grp is not None and r["fit_method"] == "regression":
            periods_list = [
                {
                    "start": str(p["period_start"]),
                    "end": str(p["period_end"]),
                    "days": p["days"],
                    "use_per_day": d.val("energy", p["upd"]),
                    "dd_per_day": d.val("dd", p.get("hdd_per_day_fit")),
                }
                for p in grp
            ]
            beta = r["heating_slope_kbtu_per_dd"]
            alpha = r.get("baseload_kbtu_per_day")
            if beta is not None and alpha is not None:
                fit_line = {
                    "intercept": d.val("energy", alpha),
                    "slope": d.val("energy", beta) * ef if beta is not None else None,
                }
            ua, eff = r["ua_total"], r["efficiency"]
            if ua and eff:
                exp_line = {
                    "intercept": d.val("energy", alpha) if alpha is not None else 0.0,
                    "slope": d.val("energy", 24.0 * ua / eff / 1000.0) * ef,
                }
        annual: list[AnnualBar] = []
        if not periods_list:
            annual = [
                {
                    "year_label": f"{r['span_start']} – {r['span_end']}",
                    "metered": d.val("energy", r["actual_heating_kbtu"]),
                    "expected": d.val("energy", r["expected_heating_kbtu"]),
                }
            ]
        ua_parts: list[UaPart] = [
            {"part": p, "value": d.val("ua", r.get(f"ua_{p}"))}
            for p in ("walls", "windows", "roof", "ground", "infiltration", "ventilation")
        ]
        assumptions = cast(list[Assumption], display_assumptions(env_rows.get(bid, {}).get("assumptions"), d))
        # the envelope-defaulted flag is on most buildings: it goes into the confidence line, not the flags
        flags: list[Flag] = [
            {"code": c, "label": FLAGS.get(c, c.replace("_", " ")), "explanation": t}
            for c, t in zip(r["flag_codes"], r["flag_texts"])
            if c != "envelope_defaulted"
        ]
        issues: list[DataIssue] = [
            {"code": c, "explanation": t, "blocking": bool(DATA_ISSUE_CODES.get(c, False))}
            for c, t in zip(r["data_issue_codes"], r["data_issue_texts"])
        ]
        pu = _num(r.get("kbtu_per_billed_unit"))
        per_unit: float | None = pu if pu is not None and pu > 0 else None
        price = _num(r.get("usd_per_kbtu"))

        def billed(kbtu, per_unit=per_unit):
            return None if per_unit is None or _num(kbtu) is None else kbtu / per_unit

        slope_ratio = None
        if r["effective_ua_btu_h_f"] and r["ua_total"]:
            slope_ratio = r["effective_ua_btu_h_f"] / r["ua_total"]
        out.append(
            SheetRecord(
                building_id=bid,
                name=r["name"],
                address=r.get("address"),
                city=r.get("city"),
                use_type=r["use_type"],
                floor_area=d.val("area", r["floor_area_ft2"]),
                area_unit=d.area_unit,
                year_built=r["year_built"],
                station_id=r["station_id"],
                period_start=str(r["span_start"]),
                period_end=str(r["span_end"]),
                span_kind=r["span_kind"],
                run_date=run_date,
                run_id=run_id,
                energy_unit=d.energy_unit,
                temp_unit=d.temp_unit,
                dd_unit=d.dd_unit,
                intensity_unit=d.intensity_unit,
                verdict=r["verdict"],
                tier=r["tier"],
                tier_rank=r["tier_rank"],
                rank=r.get("rank"),
                n_buildings=res.height,
                recoverable_basis=r.get("recoverable_basis"),
                plan_note=r.get("plan_note"),
                needs_review=r["needs_review"],
                actual_heating=d.val("energy", r["actual_heating_kbtu"]),
                expected_heating=d.val("energy", r["expected_heating_kbtu"]),
                expected_low=d.val("energy", r["expected_low_kbtu"]),
                expected_high=d.val("energy", r["expected_high_kbtu"]),
                expected_fixed_base=d.val("energy", r["expected_fixed_base_kbtu"]),
                expected_modified=d.val("energy", r["expected_modified_kbtu"]),
                ratio=_num(r["ratio"]),
                band_position=r["band_position"],
                heating_intensity=d.val("intensity", r["heating_intensity"]),
                peer_median_intensity=d.val("intensity", r["peer_median_intensity"]),
                peer_percentile=_num(r["peer_percentile"]),
                peer_group=r["peer_group"],
                normal_heating=d.val("energy", r["normal_heating_kbtu"]),
                baseload=d.val("energy", r["baseload_kbtu"]),
                excess_energy=d.val("energy", r["excess_energy_kbtu"]),
                excess_cost=_num(r["excess_cost"]),
                currency=currency,
                excess_co2e_kg=_num(r["excess_co2e_kg"]),
                expected_recoverable_energy=d.val("energy", r["expected_recoverable_kbtu"]),
                expected_recoverable_cost=_num(r["expected_recoverable_cost"]),
                expected_recoverable_co2e_kg=_num(r["expected_recoverable_co2e_kg"]),
                waste_kind=r["waste_kind"],
                evidence_scale=r["evidence_scale"],
                peer_weight=_num(r["peer_weight"]),
                hdd=d.val("dd", r["hdd_balance"]),
                base_temperature=d.val("temp", bal),
                fit={
                    "method": r["fit_method"],
                    "r2": _num(r["r2"]),
                    # the sheet shows fractions as percentages; the fit reports percent
                    "cv_rmse": None if _num(r["cv_rmse"]) is None else r["cv_rmse"] / 100.0,
                    "nmbe": None if _num(r["nmbe"]) is None else r["nmbe"] / 100.0,
                    "n_periods": r["n_periods"],
                    "fitted_base": d.val("temp", r["fitted_base_f"]),
                    "slope": (d.val("energy", r["heating_slope_kbtu_per_dd"]) or 0) * ef
                    if r["heating_slope_kbtu_per_dd"] is not None
                    else None,
                    "baseload_per_day": d.val("energy", r.get("baseload_kbtu_per_day")),
                },
                effective_ua=d.val("ua", r["effective_ua_btu_h_f"]),
                ua_unit=d.ua_unit,
                ua_parts=ua_parts,
                ua_total=d.val("ua", r["ua_total"]),
                assumptions=assumptions,
                periods=periods_list,
                fit_line=fit_line,
                expected_line=exp_line,
                annual=annual,
                peers=peer_map.get(r["peer_group"], []),
                flags=flags,
                data_issues=issues,
                next_steps=wording.next_steps(
                    r["flag_codes"],
                    r["data_issue_codes"],
                    slope_vs_envelope=slope_ratio,
                    mechanisms=r["mechanisms"],
                    blocking=r["blocking"],
                ),
                cautions=[],  # the sheet template prints the standard cautions on every sheet
                since_measure=cast(SinceMeasure | None, (since_measure or {}).get(bid)),
                # the owner's half: the bills' own unit, money, the plain kind of waste, how sure
                heating_fuel=r.get("heating_fuel"),
                efficiency=_num(r.get("efficiency")),
                blocking=bool(r.get("blocking")),
                envelope_defaulted="envelope_defaulted" in r["flag_codes"],
                flag_codes=list(r["flag_codes"]),
                mechanisms=list(r["mechanisms"] or []),
                screen_verdict=r["verdict"],
                in_plan=bool(r.get("in_plan")),
                billed_unit=r.get("billed_unit") if per_unit is not None else None,
                actual_heating_billed=billed(r["actual_heating_kbtu"]),
                expected_heating_billed=billed(r["expected_heating_kbtu"]),
                expected_low_billed=billed(r["expected_low_kbtu"]),
                expected_high_billed=billed(r["expected_high_kbtu"]),
                excess_billed=billed(r["excess_energy_kbtu"]),
                expected_recoverable_billed=billed(r["expected_recoverable_kbtu"]),
                heating_cost=None
                if price is None or _num(r["actual_heating_kbtu"]) is None
                else r["actual_heating_kbtu"] * price,
                scores={
                    "evidence_score": _num(r.get("evidence_score")),
                    "z_score": _num(r.get("z_score")),
                    "z_balance_point": _num(r.get("z_balance_point")),
                    "z_intensity": _num(r.get("z_intensity")),
                    "z_yoy": _num(r.get("z_yoy")),
                    "yoy_change": _num(r.get("yoy_change")),
                },
            )
        )
    return out


def ranking_report(
    ranking: pl.DataFrame,
    res: pl.DataFrame,
    summary: dict,
    disp: Display,
    *,
    currency: str,
    max_rows: int = 0,
    savings: pl.DataFrame | None = None,
) -> dict:
    """The dict that ranking.pdf renders (see screening.render.pdf.render_ranking).

    ``max_rows`` > 0 keeps the PDF's table to the first rows of the ranking (the full list is
    ranking.csv); ``rows_total`` and ``rows_omitted`` say how many there are and were left out.
    ``data_issues`` are those of the table's buildings in rank order (at most ``max_rows`` of them);
    ``data_issues_total`` counts every building's, ``data_issues_omitted`` those not listed.
    """
    table = ranking if max_rows <= 0 else ranking.head(max_rows)
    rows = table.select(
        "rank",
        "building_id",
        "name",
        "use_type",
        "tier",
        "ratio",
        "heating_intensity",
        "excess_energy",
        "excess_cost",
        "expected_recoverable_cost",
        "flags",
        "data_issues",
        "needs_review",
    ).to_dicts()
    # the data issues of the table's buildings, in the table's order (rank, then code): those a visit in
    # audit order meets first; data_issues.csv has every building's
    has_issue = pl.col("data_issue_codes").list.len() > 0
    n_issues = int(res.select(pl.col("data_issue_codes").list.len().sum()).item() or 0)
    long = (
        res.filter(has_issue & pl.col("building_id").is_in(table["building_id"].implode()))
        .select(
            "rank",
            "building_id",
            "name",
            pl.col("data_issue_codes").alias("code"),
            pl.col("data_issue_texts").alias("explanation"),
        )
        .explode("code", "explanation")
        .sort("rank", "code", nulls_last=True, maintain_order=True)
    )
    if max_rows > 0:
        long = long.head(max_rows)
    issues = long.to_dicts()
    tiers = [
        {"tier": name, "count": summary["counts"]["per_tier"].get(name, 0), "meaning": meaning}
        for name, meaning in screen.TIERS
    ]
    plan = (
        audit_plan_table(res, disp)
        .with_columns(res.filter(pl.col("in_plan")).sort("rank")["mechanisms"].list.join(", ").alias("mechanisms"))
        .to_dicts()
    )
    return {
        "run": {
            "run_id": summary["run_id"],
            "as_of": summary["as_of"],
            "window_start": summary["window"][0],
            "window_end": summary["window"][1],
            "run_date": summary["run_date"],
            "version": summary["versions"]["ddscreen"],
            "units": summary["units"],
        },
        "counts": summary["counts"],
        "tiers": tiers,
        "totals": summary["totals"],
        "rows": rows,
        "rows_total": ranking.height,
        "plan": plan,
        "rows_omitted": ranking.height - len(rows),
        "ratios": [x for x in res["ratio"].to_list() if x is not None and math.isfinite(x)],
        "data_issues": issues,
        "data_issues_total": n_issues,
        "data_issues_omitted": n_issues - len(issues),
        "energy_unit": disp.energy_unit,
        "intensity_unit": disp.intensity_unit,
        "currency": currency,
        "cautions": CAUTIONS,
        # the savings page (issue 17; savings.csv's frame): only with an events file
        "savings": savings_page.savings_report(savings, res, summary),
    }


def write_json(obj, path: Path) -> None:
    path.write_text(json.dumps(obj, indent=2, sort_keys=True, default=str) + "\n", encoding="utf-8")
