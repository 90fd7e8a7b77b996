"""wording.py: the vectorized sentences equal the per-building ones they replaced, and fmt equals Python's format.

The reference below is the row-by-row code that ``screen._explain`` ran before the sentences were vectorized
(commit 5551e2c), kept here unchanged as the oracle; random frames reach every branch, including null, NaN,
infinite and negative values.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import polars as pl
import pytest

from screening import config, screen, wording
from screening.screen import MECHANISMS
from screening.wording import MECHANISM_CHECKS


def _fmt(x: float | None, digits: int = 0) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if digits == 0:
        return f"{x:,.0f}"
    return f"{x:,.{digits}f}"


def reference_row(r: dict, t: dict, *, energy_factor: float, energy_unit: str, currency: str = "$") -> tuple:
    """One building's flag codes and texts, verdict, kind of waste and mechanisms, as screen._explain made them."""
    si = energy_unit == "kWh"
    e = energy_factor
    codes, texts = [], []

    def add(code: str, text: str) -> None:
        codes.append(code)
        texts.append(text)

    if r["_f_above_band"]:
        add(
            "above_band",
            f"Metered heating {_fmt(r['actual_heating_kbtu'] * e)} {energy_unit} is "
            f"{_fmt(r['ratio'], 2)}× the expected {_fmt(r['expected_heating_kbtu'] * e)} {energy_unit}, "
            f"above the expected band {_fmt(r['_band_low'] * e)}–{_fmt(r['_band_high'] * e)}.",
        )
    if r["_f_high_among_peers"]:
        add(
            "high_among_peers",
            f"Heating intensity {_fmt(r['heating_intensity'], 2)} Btu/ft²·°F·day is at the "
            f"{_fmt(r['peer_percentile'])}th percentile of {r['peer_group']} (median "
            f"{_fmt(r['peer_median_intensity'], 2)}).",
        )
    if r["_f_high_baseload"]:
        add(
            "high_baseload",
            f"Non-heating use is {_fmt(100 * r['baseload_share'])} % of the heating fuel, against "
            f"about {_fmt(100 * r['baseload_share_default'])} % typical for the use type.",
        )
    if r["_f_high_balance_point"]:
        add(
            "high_balance_point",
            f"Heating starts below {_fmt(r['fitted_base_f'], 1)} °F outdoors "
            f"(fitted balance point; above {t['balance_point_high_f']:g} °F suggests high setpoints or "
            "controls that heat too early).",
        )
    if r["_f_poor_fit"]:
        add(
            "poor_fit",
            f"Use follows the weather poorly (R² {_fmt(r['r2'], 2)}, CV(RMSE) "
            f"{_fmt(r['cv_rmse'], 1)} %): irregular operation, controls or meter problems.",
        )
    if r["_f_rising_use"]:
        add("rising_use", f"Weather-normalized heating is up {_fmt(100 * r['yoy_change'])} % on the previous year.")
    if r["_f_envelope_defaulted"]:
        add(
            "envelope_defaulted",
            "Every envelope value is a default for the use type and era: the expected range is wide.",
        )
    if r["_f_shifted_span"]:
        add(
            "shifted_span",
            "Readings do not cover the analysis window; the latest covered 12 months were "
            "compared instead, with the degree days of the same days.",
        )
    if r["_f_base_at_grid_edge"]:
        add(
            "base_at_grid_edge",
            f"The bills fit best at a base of {_fmt(r['fitted_base_f'], 1)} °F, the edge of "
            "the bases searched: the building's balance point may lie beyond it, and its split of the fuel "
            "into heating and baseload is less certain.",
        )
    ms = _supported(r, t)
    kind = _waste_kind(r, ms, t, si=si)
    money = f"{currency}{_fmt(r['expected_recoverable_cost'])}" if r["expected_recoverable_cost"] else None
    plan = (
        " It is in this quarter's audit plan for its expected savings."
        if r["in_plan"] and not r["needs_review"]
        else " It is in this quarter's audit plan."
        if r["in_plan"]
        else " A recent measure, or an audit on record that found nothing, keeps it off the plan (plan_note)."
        if r["_hold"] and r["tier"] in ("Watch", "No action")
        else " Its expected savings are below the cost of a visit ([plan] audit_cost), so it is not planned."
        if r["needs_review"] and r["tier"] in ("Watch", "No action")
        else " Its expected savings are worth a visit after this quarter's plan."
        if r["tier"] == "Audit soon"
        else ""
    )
    if r["blocking"]:
        v = (
            "A data problem (" + ", ".join(r["data_issue_codes"] or []) + ") must be fixed before this "
            "building can be judged; it takes no audit slot until then."
        )
    elif r["review_path"] == "step up":
        v = (
            f"Weather-normalized heating rose {_fmt(100 * r['yoy_change'])} % on the previous year, far beyond "
            f"the portfolio's year-on-year spread (z {_fmt(r['z_yoy'], 1)} against {t['yoy_review_z']:g}); it is "
            f"now {_fmt(r['ratio'], 2)}× the expectation. Something changed: recommend an audit"
            + (f" (expected recoverable about {money} a year)." if money else ".")
            + plan
        )
    elif r["needs_review"]:
        v = (
            f"Heating is {_fmt(r['ratio'], 2)}× what this building should need and the evidence of excess "
            f"is strong (score {_fmt(r['evidence_score'], 1)} against {t['review_score']:g}: peers "
            f"{_fmt(r['z_score'], 1)}, balance point {_fmt(r['z_balance_point'], 1)}, intensity "
            f"{_fmt(r['z_intensity'], 1)}): recommend an audit"
            + (f" (expected recoverable about {money} a year)." if money else ".")
            + plan
        )
    elif r["ratio"] is None:
        v = "No verdict: metered or expected heating is missing."
    else:
        v = _not_listed(r, t, money, plan)
    return codes, texts, v, kind, ms


def _supported(r: dict, t: dict) -> list[str]:
    """Mechanisms whose own evidence is sure enough (≥ mechanism_support), largest expected excess first."""
    if r["blocking"]:
        return []
    cand = []
    for col in MECHANISMS:
        name = col.replace("_", " ")
        w, x = r[f"sure_{col}"], r[f"excess_{col}_kbtu"]
        if w is not None and x is not None and x > 0 and w >= t["mechanism_support"]:
            cand.append((w * x, name))
    return [n for _, n in sorted(cand, reverse=True)]


def _waste_kind(r: dict, ms: list[str], t: dict, *, si: bool) -> str:
    """One plain sentence: which mechanism(s) the bills support, and what to check (advice only for those)."""
    if r["blocking"]:
        return "Fix the data first; the bills cannot point to a kind of waste until then."
    parts = []
    for m in ms:
        if m == "heat loss":
            ratio = r["effective_ua_btu_h_f"] / r["ua_total"] if r["ua_total"] else None
            parts.append(
                f"heat loss (the heating slope implies {_fmt(ratio, 1)}× the envelope's heat-loss "
                f"coefficient): {MECHANISM_CHECKS[m]}"
            )
        elif m == "controls":
            d = r["fitted_base_f"] - r["balance_point_f"]
            tf = (r["fitted_base_f"] - 32) / 1.8 if si else r["fitted_base_f"]
            unit, du = ("°C", d / 1.8) if si else ("°F", d)
            rel = "above the engineering balance point" if du >= 0 else "below the engineering one, high for its peers"
            parts.append(
                f"controls (heating starts at {_fmt(tf, 1)} {unit} outdoors, {_fmt(abs(du), 1)} {unit} "
                f"{rel}): {MECHANISM_CHECKS[m]}"
            )
        else:
            parts.append(
                f"non-heating use of the heating fuel ({_fmt(100 * r['baseload_share'])} % of it, "
                f"about {_fmt(100 * r['baseload_share_default'])} % is typical): {MECHANISM_CHECKS[m]}"
            )
    step = (
        r["_view"] == "step up"
        and (r["_w_step"] or 0) >= t["mechanism_support"]
        and (r["yoy_change"] or 0) >= t["yoy_rise"]
    )
    fstep = (
        r["_view"] == "fuel step"
        and (r["_w_fstep"] or 0) >= t["mechanism_support"]
        and (r["_yoy_fuel"] or 0) >= t["yoy_rise"]
    )
    lead = (
        (
            f"Heating rose {_fmt(100 * r['yoy_change'])} % on last year: ask what changed (equipment, "
            "schedules, a failed component)"
        )
        if step
        else (
            f"Use of the heating fuel rose {_fmt(100 * r['_yoy_fuel'])} % on last year, more than its heating explains: "
            "ask what changed (heating in warm weather, hot water, a leak, a failed component)"
        )
        if fstep
        else ""
    )
    if parts and r["tier"] == "No action":
        return (
            "Expected savings too small for a visit; the bills point to "
            + "; and to ".join(parts)
            + ", at the next routine visit."
        )
    if parts:
        body = "Likely " + "; and ".join(parts)
        return (lead + ". " + body + ".") if lead else body + "."
    if lead:
        return lead + "; the bills do not show which part of the heating rose."
    if r["_f_poor_fit"] and (r["ratio"] or 0) > 1:
        return (
            f"Use does not follow the weather (R² {_fmt(r['r2'], 2)}): these bills cannot size an excess; "
            "check operation and meters first."
        )
    if r["tier"] not in ("No action",) and (r["expected_recoverable_kbtu"] or 0) > 0:
        if r["_view"] == "fuel step":
            return (
                f"Use of the heating fuel rose {_fmt(100 * r['_yoy_fuel'])} % on last year, more than its heating "
                "explains; the bills do not show where (heating in warm weather, hot water, a leak?)."
            )
        if r["fit_method"] != "regression":
            return "Heating above what its peers' bills suggest; annual bills cannot show which part is in excess."
        return "Heating above what its peers' bills suggest; no single mechanism stands out in the bills."
    return "No excess worth a visit."


def _not_listed(r: dict, t: dict, money: str | None, plan: str) -> str:
    """The verdict of a building without strong evidence: where it stands, its expected savings and, when
    they are large, why it is not on the audit list (needs_review)."""
    ratio = r["ratio"]
    why = []
    if r["fit_method"] == "regression" and r["r2"] is not None and r["r2"] < t["r2_min"]:
        why.append(
            f"its use follows the weather poorly (R² {_fmt(r['r2'], 2)} against {t['r2_min']:g}), "
            "so its level is no basis for a verdict: check operation and meters"
        )
    elif r["_view"] == "step up":
        why.append(
            f"its rise on last year ({_fmt(100 * r['yoy_change'])} %, z {_fmt(r['z_yoy'], 1)}) is below "
            f"{_fmt(100 * t['yoy_review'])} % at z {t['yoy_review_z']:g}"
        )
    elif r["_view"] == "fuel step":
        why.append(
            f"the rise is in its whole use of the heating fuel ({_fmt(100 * r['_yoy_fuel'])} % on last year, "
            f"z {_fmt(r['_z_fuel'], 1)} among the buildings of its weather station), not in its weather-"
            "normalized heating"
        )
    elif ratio < t["min_excess_ratio"]:
        why.append(f"its heating is not above the model's central expectation ({_fmt(ratio, 2)}×)")
    else:
        why.append(
            f"buildings like it spread this widely (evidence score {_fmt(r['evidence_score'], 1)} "
            f"against {t['review_score']:g})"
        )
    if r["tier"] == "No action" or not money:
        if ratio < 1 and r["actual_heating_kbtu"] < r["_band_low"]:
            return f"Heating is below expectation ({_fmt(ratio, 2)}× expected): no sign of excess."
        if ratio < t["min_excess_ratio"] or not r["_f_above_band"] and not r["_f_poor_fit"]:
            if ratio < 1:  # inside the model's band, but 0.49× is not "in line with expectation"
                return (
                    f"Heating is {_fmt(ratio, 2)}× the central expectation, within the model's range and in line "
                    "with its peers; no excess worth a visit."
                )
            return (
                f"Heating is in line with expectation ({_fmt(ratio, 2)}× expected) and with its peers; "
                "no excess worth a visit."
            )
        return f"Heating is {_fmt(ratio, 2)}× the expectation, but no excess can be counted on: " + "; ".join(why) + "."
    basis = (
        f"; it rose {_fmt(100 * r['yoy_change'])} % on last year"
        if r["_view"] == "step up"
        else f"; its use of the heating fuel rose {_fmt(100 * r['_yoy_fuel'])} % on last year"
        if r["_view"] == "fuel step"
        else "; its peers' bills put it above what buildings like it use"
        if ratio < 1
        else ""
    )
    return (
        f"Heating is {_fmt(ratio, 2)}× the model's expectation{basis}: expected recoverable about {money} a "
        "year. The evidence is not strong enough for the audit list: " + "; ".join(why) + "." + plan
    )


# ------------------------------------------------------------------------------------------------ the tests


def test_fmt_equals_python_format():
    rng = np.random.default_rng(7)
    vals = np.concatenate(
        [
            rng.normal(0, 1, 20000),
            rng.normal(0, 1e6, 20000),
            np.exp(rng.uniform(-30, 40, 20000)) * rng.choice([-1, 1], 20000),
            np.round(rng.uniform(-1000, 1000, 20000), 1) + 0.05,  # near the ties of 2 decimals
            np.round(rng.uniform(-1000, 1000, 20000), 2) + 0.005,
            np.arange(-2000, 2000) / 8,  # exact ties (binary fractions)
            [0.0, -0.0, 0.5, 1.5, 2.5, -0.5, 0.125, 1.005, 2.675, 1e300, -1e300, 1e16, -0.4, 999.5, 999999.5],
            [np.inf, -np.inf, np.nan],
        ]
    )
    for d in (0, 1, 2):
        got = wording.fmt(pl.Series(vals), d).to_list()
        assert got == [_fmt(float(v), d) for v in vals]
    assert wording.fmt(pl.Series([None, 1234567.891], dtype=pl.Float64), 2).to_list() == ["n/a", "1,234,567.89"]
    assert wording.fmt(pl.Series([-0.4, 1e300]), 0).to_list() == ["-0", f"{1e300:,.0f}"]  # the sign; beyond 2**53


def _random_frame(n: int, seed: int) -> pl.DataFrame:
    rng = np.random.default_rng(seed)

    def num(scale=1.0, loc=0.0, p_null=0.1, p_odd=0.03):
        x = rng.normal(loc, scale, n)
        x = np.where(rng.random(n) < p_odd, rng.choice([np.nan, np.inf, -np.inf, 0.0, -0.0], n), x)
        return [None if m else v for m, v in zip(rng.random(n) < p_null, x.tolist())]  # NaN kept beside null

    def pick(options, p_null=0.0):
        v = [options[i] for i in rng.integers(0, len(options), n)]
        return [None if rng.random() < p_null else x for x in v]

    cols = {
        "building_id": [f"B{i:05d}" for i in range(n)],
        "actual_heating_kbtu": num(1e5, 2e5),
        "expected_heating_kbtu": num(1e5, 2e5),
        "_band_low": num(1e5, 1e5),
        "_band_high": num(1e5, 3e5),
        "ratio": [abs(x) if x is not None else None for x in num(0.6, 1.1)],
        "heating_intensity": num(3, 8),
        "peer_median_intensity": num(3, 8),
        "peer_percentile": num(30, 50),
        "peer_group": pick(["office 1946-1980", "school", "all buildings"], 0.1),
        "z_score": num(2),
        "baseload_share": num(0.2, 0.3),
        "baseload_share_default": num(0.1, 0.2),
        "fitted_base_f": num(8, 60),
        "balance_point_f": num(5, 55),
        "r2": num(0.3, 0.7),
        "cv_rmse": num(10, 20),
        "yoy_change": num(0.3, 0.05),
        "tier": pick([name for name, _ in screen.TIERS]),
        "needs_review": pick([True, False], 0.05),
        "blocking": pick([True, False, False, False]),
        "evidence_score": num(3),
        "z_balance_point": num(2),
        "z_intensity": num(2),
        "z_yoy": num(2),
        "review_path": pick([None, "level", "step up", "level and step up"]),
        "span_kind": pick(["window", "shifted"]),
        "data_issue_codes": pick([[], ["gap_in_reads"], ["likely_unit_error", "missing_bills"]], 0.05),
        "effective_ua_btu_h_f": num(2000, 5000),
        "ua_total": pick([0.0, None, 1000.0, 4321.5, np.nan]),
        "expected_recoverable_kbtu": num(1e4, 5e3),
        "expected_recoverable_cost": pick([None, 0.0, 12.5, 1234.49, 1234.5, 98765.4321, np.nan]),
        "_view": pick([None, "level", "step up", "fuel step"]),
        "_w_step": num(0.3, 0.5),
        "_w_fstep": num(0.3, 0.5),
        "_yoy_fuel": num(0.3, 0.1),
        "_z_fuel": num(2),
        "fit_method": pick(["regression", "regression", "default share", None]),
        "in_plan": pick([True, False], 0.05),
        "_hold": pick([True, False, False]),
        "recoverable_basis": pick([None, "level"]),
    }
    for m in MECHANISMS:
        cols[f"excess_{m}_kbtu"] = pick([None, 0.0, -5.0, 100.0, 2500.0, np.nan, np.inf])
        cols[f"sure_{m}"] = pick([None, 0.1, 0.5, 0.7, 0.9, np.nan])
    for k in screen.FLAG_ORDER:
        cols[f"_f_{k}"] = pick([True, False, False])
    return pl.DataFrame(cols, strict=False)


@pytest.mark.parametrize(("seed", "unit"), [(1, "kBtu"), (2, "kWh"), (3, "kBtu")])
def test_vectorized_sentences_equal_the_per_building_ones(seed, unit):
    t = config.Thresholds()
    t_dict = dataclasses.asdict(t)  # the per-row code read the settings as a dict
    e = 1.0 if unit == "kBtu" else 0.29307107
    df = _random_frame(3000, seed)
    df = df.with_columns(
        pl.concat_list([pl.when(pl.col(f"_f_{k}")).then(pl.lit(k)) for k in screen.FLAG_ORDER])
        .list.drop_nulls()
        .alias("flag_codes"),
        screen._mechanisms(df, t).alias("mechanisms"),
    )
    got = wording.explain(df, t, energy_factor=e, energy_unit=unit, currency="€")
    # worded in pieces of 700 rows (5 pieces, the last short): the same frame
    assert got.equals(wording.explain(df, t, energy_factor=e, energy_unit=unit, currency="€", rows=700))
    assert got.columns[-6:] == [*wording.TEXT_COLUMNS, "recoverable_basis"]
    assert not [c for c in got.columns if c.startswith("_")]
    compared = 0
    for i, r in enumerate(df.iter_rows(named=True)):
        try:
            want = reference_row(r, t_dict, energy_factor=e, energy_unit=unit, currency="€")
        except TypeError:  # the per-row code could not say anything for this row (it stopped on a None)
            continue
        g = got.row(i, named=True)
        assert (g["flag_codes"], g["flag_texts"], g["verdict"], g["waste_kind"], g["mechanisms"]) == want, r
        compared += 1
    assert compared > 1500


def _mechanisms_as_list_expressions(t) -> pl.Expr:
    """screen._mechanisms as it was written before its lists were looked up by code: a when/then per place."""
    names = [m.replace("_", " ") for m in screen.MECHANISMS]
    ok, key = {}, {}
    for col, name in zip(screen.MECHANISMS, names):
        w, x = pl.col(f"sure_{col}"), pl.col(f"excess_{col}_kbtu")
        ok[name] = (
            ~pl.col("blocking").fill_null(False)
            & (x > 0)
            & x.is_not_nan()
            & (w >= t.mechanism_support)
            & w.is_not_nan()
        ).fill_null(False)
        key[name] = w * x
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
    at = []
    for i in range(len(names)):
        e = pl.lit(None, dtype=pl.String)
        for n in reversed(names):
            e = pl.when(ok[n] & (place[n] == i)).then(pl.lit(n)).otherwise(e)
        at.append(e)
    return pl.concat_list(at).list.drop_nulls()


@pytest.mark.parametrize("seed", [4, 5])
def test_lists_by_code_equal_the_list_expressions(seed):
    """flag_codes and mechanisms, made once per distinct code and gathered, equal the when/then lists per row
    (ties, NaN, inf, nulls and blocked rows of the random frame)."""
    t = config.Thresholds()
    df = _random_frame(3000, seed).with_columns(
        pl.sum_horizontal([pl.col(f"_f_{k}").cast(pl.Int32) * (1 << i) for i, k in enumerate(screen.FLAG_ORDER)]).alias(
            "_f_code"
        )
    )
    want = df.select(
        pl.concat_list([pl.when(pl.col(f"_f_{k}")).then(pl.lit(k)) for k in screen.FLAG_ORDER])
        .list.drop_nulls()
        .alias("flag_codes"),
        _mechanisms_as_list_expressions(t).alias("mechanisms"),
    )
    got = pl.DataFrame(
        [
            screen._names_by_code(df["_f_code"], screen.FLAG_ORDER).alias("flag_codes"),
            screen._mechanisms(df, t).alias("mechanisms"),
        ]
    )
    assert got.equals(want)
    assert want["mechanisms"].list.len().max() == 3 and want["mechanisms"].list.len().min() == 0
    empty = df.clear()
    assert screen._mechanisms(empty, t).dtype == screen._names_by_code(empty["_f_code"], screen.FLAG_ORDER).dtype
    assert screen._mechanisms(empty, t).dtype == pl.List(pl.String) and screen._mechanisms(empty, t).len() == 0
