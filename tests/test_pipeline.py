"""End-to-end checks of the screening computation on in-memory frames (no files).

Check values:
- a year at a constant 35 °F daily mean gives 30 × 365 = 10,950 °F·day at base 65 °F, and a building
  with UA given loses UA × 30 × 8,760 Btu over it (degree-day method Q = 24·UA·HDD, common practice);
- bills made exactly by Q = 24·UA·HDD65/η with no baseload are recovered: the regression finds τ = 65 °F,
  metered heating equals the expectation (ratio 1) and the bills' effective UA equals the given UA.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest

from screening import config as cfgmod
from screening.pipeline import screen_frames
from screening.window import add_months

UA = 5_000.0  # Btu/(h·°F), given


def _building(**kw) -> dict:
    row = {
        "building_id": "T1",
        "name": "Test One",
        "station_id": "S1",
        "use_type": "office",
        "floor_area_ft2": 20_000.0,
        "year_built": 1990,
        "stories": 2,
        "heating_fuel": "natural_gas",
        "heating_efficiency": 1.0,
        "ua_total_btu_h_f": UA,
        "balance_point_f": 65.0,
        "_line": 2,
    }
    row.update(kw)
    return row


def _buildings(rows: list[dict]) -> pl.DataFrame:
    from screening.ingest import BUILDING_COLUMNS

    cols = {canon: None for _, canon, *_ in BUILDING_COLUMNS}
    frame = pl.DataFrame([cols | r for r in rows], infer_schema_length=None)
    casts = {c: pl.Float64 for c in frame.columns if frame.schema[c] == pl.Null}
    casts.update({"address": pl.String, "city": pl.String})
    return frame.cast(casts).with_columns(
        pl.col("year_built").cast(pl.Int64), pl.col("stories").cast(pl.Int64), pl.col("_line").cast(pl.Int64)
    )


def _weather(t_mean_fn, start: dt.date, days: int) -> pl.DataFrame:
    dates = [start + dt.timedelta(days=i) for i in range(days)]
    t = np.array([t_mean_fn(i) for i in range(days)])
    return pl.DataFrame(
        {"station_id": ["S1"] * days, "date": dates, "t_min_f": t - 8.0, "t_max_f": t + 8.0, "t_mean_f": t}
    )


def _monthly_readings(weather: pl.DataFrame, start: dt.date, months: int, ua: float, eta: float) -> pl.DataFrame:
    rows = []
    tm = dict(zip(weather["date"].to_list(), weather["t_mean_f"].to_list()))
    for m in range(months):
        s = add_months(start, m)
        e = add_months(start, m + 1) - dt.timedelta(days=1)
        hdd = sum(max(0.0, 65.0 - tm[s + dt.timedelta(days=i)]) for i in range((e - s).days + 1))
        therm = 24.0 * ua * hdd / eta / 100_000.0
        rows.append(
            {
                "building_id": "T1",
                "fuel": "natural_gas",
                "period_start": s,
                "period_end": e,
                "quantity": therm,
                "unit": "therm",
                "estimated": False,
                "cost": None,
                "meter_id": "",
                "_line": m + 2,
            }
        )
    return pl.DataFrame(rows).with_columns(pl.col("cost").cast(pl.Float64), pl.col("_line").cast(pl.Int64))


def _cfg(**analysis) -> dict:
    return cfgmod.load(None, {"analysis": analysis} if analysis else None)


def test_constant_35F_year_gives_10950_hdd65_and_ua_x_30_x_8760():
    start = dt.date(2025, 1, 1)
    w = _weather(lambda i: 35.0, dt.date(2023, 1, 1), 365 * 3 + 2)
    b = _buildings([_building()])
    r = _monthly_readings(w, start, 12, UA, 1.0)
    res = screen_frames(b, r, w, _cfg(), window=(start, dt.date(2025, 12, 31))).results
    row = res.row(0, named=True)
    assert row["hdd65"] == pytest.approx(10_950.0)  # 30 °F·day × 365 days (common practice)
    assert row["hdd_balance"] == pytest.approx(10_950.0)  # given balance point 65 °F
    # Q = UA × 30 × 8,760 Btu, η = 1 (common practice): 5,000 × 30 × 8,760 / 1,000 kBtu
    assert row["expected_heating_kbtu"] == pytest.approx(UA * 30 * 8760 / 1000, rel=1e-9)
    assert row["expected_fixed_base_kbtu"] == pytest.approx(UA * 30 * 8760 / 1000, rel=1e-9)
    # every envelope input known: the band collapses onto the point
    assert row["expected_low_kbtu"] == pytest.approx(row["expected_high_kbtu"], rel=1e-9)


def test_bills_made_by_the_degree_day_method_are_recovered():
    # a seasonal climate (sinusoid, mean 50 °F, amplitude 25 °F) so the regression sees a range of HDD
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    b = _buildings([_building(heating_efficiency=0.8)])
    r = _monthly_readings(w, dt.date(2024, 10, 1), 24, UA, 0.8)
    res = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results
    row = res.row(0, named=True)
    assert row["fit_method"] == "regression"
    assert row["fitted_base_f"] == pytest.approx(65.0)
    assert row["ratio"] == pytest.approx(1.0, rel=1e-6)
    assert row["effective_ua_btu_h_f"] == pytest.approx(UA, rel=1e-6)  # β·η/24 (degree-day method inverted)
    assert row["needs_review"] is False
    assert row["data_issue_codes"] == []


def test_doubling_the_bills_is_flagged_above_the_band():
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    b = _buildings([_building(heating_efficiency=0.8)])
    r = _monthly_readings(w, dt.date(2024, 10, 1), 24, 2 * UA, 0.8)
    res = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results
    row = res.row(0, named=True)
    assert row["ratio"] == pytest.approx(2.0, rel=1e-6)
    assert "above_band" in row["flag_codes"]
    assert row["band_position"] == "above"


def test_unknown_station_is_rejected_with_its_line():
    w = _weather(lambda i: 35.0, dt.date(2025, 1, 1), 365)
    b = _buildings([_building(), _building(building_id="T2", station_id="NOWHERE", _line=3)])
    r = _monthly_readings(w, dt.date(2025, 1, 1), 12, UA, 1.0)
    out = screen_frames(
        b,
        r,
        w,
        _cfg(),
        window=(dt.date(2025, 1, 1), dt.date(2025, 12, 31)),
        paths={"buildings": "b.csv", "readings": "r.csv"},
    )
    rej = out.rejects.to_dicts()
    assert {
        "file": "b.csv",
        "line": 3,
        "column": "station_id",
        "value": "NOWHERE",
        "reason": "unknown station (not in the weather data)",
    } in rej
    assert out.results["building_id"].to_list() == ["T1"]


def test_weather_gap_longer_than_three_days_is_a_blocking_data_issue():
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    w = w.filter(~pl.col("date").is_between(dt.date(2026, 1, 10), dt.date(2026, 1, 20)))
    b = _buildings([_building(heating_efficiency=0.8)])
    full = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    r = _monthly_readings(full, dt.date(2024, 10, 1), 24, UA, 0.8)
    res = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results
    row = res.row(0, named=True)
    assert "weather_gap" in row["data_issue_codes"]
    assert row["tier"] == "Fix data first"
    assert row["needs_review"] is False


def test_heating_up_30_percent_on_last_year_is_flagged_rising():
    # the same seasonal climate every year; the second year's bills come from 1.3 × the UA, so the
    # degree-day-normalized heating rises by 30 % (by construction; tolerance for the fit's intercept)
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    b = _buildings([_building(heating_efficiency=0.8)])
    first = _monthly_readings(w, dt.date(2024, 10, 1), 12, UA, 0.8)
    second = _monthly_readings(w, dt.date(2025, 10, 1), 12, 1.3 * UA, 0.8).with_columns(pl.col("_line") + 12)
    res = screen_frames(
        b, pl.concat([first, second]), w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))
    ).results
    row = res.row(0, named=True)
    assert row["yoy_change"] == pytest.approx(0.30, abs=0.03)
    assert "rising_use" in row["flag_codes"]


def _portfolio_readings(w, ids, factors_year2, *, base_kbtu_day=None, noise=0.0, seed=7, level=None):
    """Two years of monthly bills per building: Q = 24·level·UA·HDD65/η + baseload (η 0.8), the
    second year's heating × factors_year2[id]; multiplicative noise (seeded) on every bill."""
    rng = np.random.default_rng(seed)
    level = level or {}
    base_kbtu_day = base_kbtu_day or {}
    frames = []
    for k, bid in enumerate(ids):
        ua = level.get(bid, 1.0) * UA
        f1 = _monthly_readings(w, dt.date(2024, 10, 1), 12, ua, 0.8)
        f2 = _monthly_readings(w, dt.date(2025, 10, 1), 12, factors_year2.get(bid, 1.0) * ua, 0.8)
        r = pl.concat([f1, f2])
        days = ((r["period_end"] - r["period_start"]).dt.total_days() + 1).to_numpy()
        q = r["quantity"].to_numpy() + base_kbtu_day.get(bid, 0.0) * days / 100.0  # kBtu -> therm
        q = q * np.exp(noise * rng.standard_normal(q.size))
        frames.append(
            r.with_columns(
                pl.lit(bid).alias("building_id"), pl.Series("quantity", q), (pl.col("_line") + 24 * k).alias("_line")
            )
        )
    return pl.concat(frames)


def test_a_step_up_on_last_year_puts_a_building_on_the_audit_list():
    # path B of the audit rule (docs/methods.md "How the audit list is chosen"): ten steady buildings whose
    # bills carry 1 % noise and whose levels spread ×0.5–2 around the expectation, one at 0.8× whose
    # heating rises 60 % in the second year (by construction; 1.28× the expectation then, ordinary
    # among these peers), and one that rises 60 % but whose heating is a small part of its use
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    ids = [f"T{i}" for i in range(1, 13)]
    b = _buildings([_building(building_id=bid, heating_efficiency=0.8, _line=i + 2) for i, bid in enumerate(ids)])
    levels = dict(zip(ids, [0.5, 0.6, 0.75, 0.9, 1.0, 1.1, 1.3, 1.5, 1.75, 2.0, 0.8, 1.0]))
    r = _portfolio_readings(w, ids, {"T11": 1.6, "T12": 1.6}, base_kbtu_day={"T12": 20_000.0}, noise=0.01, level=levels)
    res = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results
    rows = {x["building_id"]: x for x in res.to_dicts()}
    up = rows["T11"]
    assert up["yoy_change"] == pytest.approx(0.60, abs=0.05)
    assert up["z_yoy"] >= 4.0 and up["needs_review"] is True and up["review_path"] == "step up"
    assert "rose" in up["verdict"] and "previous year" in up["verdict"]
    small = rows["T12"]
    assert small["actual_heating_kbtu"] / small["total_fuel_kbtu"] < 0.25  # heating under a quarter of the use
    assert small["needs_review"] is False
    assert not any(rows[bid]["needs_review"] for bid in ids[:10])
    assert all(rows[bid]["review_path"] is None for bid in ids[:10] + ["T12"])


def test_one_summer_bill_ten_times_too_high_is_a_data_issue():
    # a lost decimal point in one summer bill: 10 × what the building's own weather fit predicts
    # (by construction); the same-month check cannot see it because other summers are too small
    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    ids = [f"T{i}" for i in range(1, 4)]
    b = _buildings([_building(building_id=bid, heating_efficiency=0.8, _line=i + 2) for i, bid in enumerate(ids)])
    r = _portfolio_readings(w, ids, {}, base_kbtu_day={bid: 300.0 for bid in ids}, noise=0.02)
    july = (pl.col("building_id") == "T2") & (pl.col("period_start") == dt.date(2026, 7, 1))
    r = r.with_columns(pl.when(july).then(pl.col("quantity") * 10).otherwise(pl.col("quantity")).alias("quantity"))
    res = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results
    rows = {x["building_id"]: x for x in res.to_dicts()}
    assert "bill_off_fit" in rows["T2"]["data_issue_codes"]
    assert rows["T2"]["tier"] == "Fix data first" and rows["T2"]["needs_review"] is False
    assert rows["T1"]["data_issue_codes"] == [] and rows["T3"]["data_issue_codes"] == []


# ---------------------------------------------------------------------------- issue 14: fits, window end, missing bills


def _seasonal():
    return _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)


def test_a_late_read_is_filled_and_missing_bills_are_named():
    w = _seasonal()
    ids = ["T1", "T2", "T3"]
    b = _buildings([_building(building_id=bid, heating_efficiency=0.8, _line=i + 2) for i, bid in enumerate(ids)])
    r = _portfolio_readings(w, ids, {}, base_kbtu_day={bid: 300.0 for bid in ids})
    last = (pl.col("building_id") == "T2") & (pl.col("period_start") == dt.date(2026, 9, 1))
    # T2's last bill is read on 2026-09-24 (its energy for 24 of the 30 days); T3 has no February 2026 bill
    r = r.with_columns(
        pl.when(last).then(pl.col("quantity") * 24 / 30).otherwise(pl.col("quantity")).alias("quantity"),
        pl.when(last).then(pl.lit(dt.date(2026, 9, 24))).otherwise(pl.col("period_end")).alias("period_end"),
    )
    r = r.filter(~((pl.col("building_id") == "T3") & (pl.col("period_start") == dt.date(2026, 2, 1))))
    sc = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30)))
    rows = {x["building_id"]: x for x in sc.results.to_dicts()}
    t1, t2, t3 = rows["T1"], rows["T2"], rows["T3"]
    assert (t1["span_kind"], t1["filled_days"], t1["data_issue_codes"]) == ("window", 0, [])
    # the window is kept: the 6 days are filled from T2's fit and stated, not a reason to shift
    assert (t2["span_kind"], t2["span_start"], t2["span_end"]) == ("window", dt.date(2025, 10, 1), dt.date(2026, 9, 30))
    assert t2["filled_days"] == 6 and t2["data_issue_codes"] == ["end_days_filled"]
    assert "last 6 day(s) of the span, 2026-09-25 to 2026-09-30" in t2["data_issue_texts"][0]
    assert "shifted_span" not in t2["flag_codes"] and not t2["blocking"]
    assert t2["actual_heating_kbtu"] == pytest.approx(t1["actual_heating_kbtu"], rel=0.01)  # same bills but 6 days
    # the missing bill is a non-blocking data issue with its dates; the shift is a flag, not a data issue
    assert t3["data_issue_codes"] == ["missing_bills"] and not t3["blocking"]
    assert "2026-02-01..2026-02-28 (28 days)" in t3["data_issue_texts"][0]
    assert t3["span_kind"] == "shifted" and "shifted_span" in t3["flag_codes"]
    from screening.pipeline import DATA_ISSUE_CODES

    assert all(DATA_ISSUE_CODES[x["code"]] == x["blocking"] for x in sc.issues.to_dicts())


def test_a_base_on_the_grid_edge_is_a_flag_and_the_baseload_is_never_negative():
    # bills of a building heated below 80 °F (above the 40-75 °F grid) with no baseload: the fit
    # lands on the 75 °F edge, says so, and does not buy a better fit with a negative baseload
    w = _seasonal()
    tm = dict(zip(w["date"].to_list(), w["t_mean_f"].to_list()))
    rows = []
    for m in range(24):
        s = add_months(dt.date(2024, 10, 1), m)
        e = add_months(dt.date(2024, 10, 1), m + 1) - dt.timedelta(days=1)
        hdd80 = sum(max(0.0, 80.0 - tm[s + dt.timedelta(days=i)]) for i in range((e - s).days + 1))
        rows.append(
            {
                "building_id": "T1",
                "fuel": "natural_gas",
                "period_start": s,
                "period_end": e,
                "quantity": 24.0 * UA * hdd80 / 0.8 / 100_000.0,
                "unit": "therm",
                "estimated": False,
                "cost": None,
                "meter_id": "",
                "_line": m + 2,
            }
        )
    r = pl.DataFrame(rows).with_columns(pl.col("cost").cast(pl.Float64), pl.col("_line").cast(pl.Int64))
    b = _buildings([_building(heating_efficiency=0.8)])
    row = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30))).results.row(0, named=True)
    assert row["fitted_base_f"] == 75.0 and row["base_at_edge"]
    assert "base_at_grid_edge" in row["flag_codes"]
    assert any("75.0 °F, the edge of the bases searched" in t for t in row["flag_texts"])
    assert row["baseload_kbtu_per_day"] >= 0.0 and row["baseload_kbtu"] >= 0.0


def test_readme_lists_the_data_issues_and_the_flags_the_code_declares():
    # one declaration each (screening.schema): data issues (and whether they block) in DATA_ISSUES, seen by
    # the code as pipeline.DATA_ISSUE_CODES, flags in FLAGS; README's two tables list exactly those, and no code is both
    import re
    from pathlib import Path
    from screening.pipeline import DATA_ISSUE_CODES
    from screening.schema import FLAGS as FLAG_TEXT
    from screening.schema import issue_codes

    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")

    def table(heading):
        sec = text.split(heading, 1)[1].split("\n#", 1)[0]
        return {m.group(1): m.group(2).strip() for m in re.finditer(r"^\| `([a-z_]+)` \| ([^|]+)\|", sec, re.M)}

    issues = table("### Data issues\n")
    flags = table("### Flags\n")
    assert {c: v == "yes" for c, v in issues.items()} == DATA_ISSUE_CODES == issue_codes()
    assert set(flags) == set(FLAG_TEXT)
    assert not set(DATA_ISSUE_CODES) & set(FLAG_TEXT)


def test_filled_end_days_ask_for_no_data_correction():
    from screening.wording import next_steps

    steps = next_steps([], ["end_days_filled"], slope_vs_envelope=None)
    assert not any(s.startswith("Check the data first") for s in steps)
    assert any("filled from the building's weather fit" in s for s in steps)
    both = next_steps([], ["end_days_filled", "missing_bills"], slope_vs_envelope=None)
    assert "Check the data first: missing_bills — correct" in both[0]


def test_sheets_and_ranking_carry_the_bills_unit_and_peers_leave_out_a_blocked_building():
    """Bills in therms: the sheet records and ranking.csv give the heating in therms (1 therm = 100 kBtu, EIA);
    a building whose bills are 100x off (a unit error, blocking) is in no peer chart, its own included."""
    from screening import outputs

    w = _weather(lambda i: 50.0 - 25.0 * np.cos(2 * np.pi * (i - 15) / 365.25), dt.date(2023, 10, 1), 365 * 3 + 2)
    ids = ["T1", "T2", "T3", "T4"]
    b = _buildings([_building(building_id=k, heating_efficiency=0.8, _line=i + 2) for i, k in enumerate(ids)])
    parts = []
    for k, scale in zip(ids, (1.0, 1.1, 1.2, 100.0)):
        parts.append(
            _monthly_readings(w, dt.date(2024, 10, 1), 24, scale * UA, 0.8).with_columns(pl.lit(k).alias("building_id"))
        )
    r = pl.concat(parts).with_columns(pl.int_range(2, pl.len() + 2, dtype=pl.Int64).alias("_line"))
    sc = screen_frames(b, r, w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30)))
    res = sc.results
    disp = outputs.Display("IP")
    recs = {
        s.building_id: s
        for s in outputs.sheet_records(
            res, sc.envelope, sc.periods, disp, run_id="x", run_date="2026-10-15", currency="$"
        )
    }
    assert (
        recs["T4"].blocking and "likely_unit_error" in res.filter(pl.col("building_id") == "T4")["data_issue_codes"][0]
    )
    for k in ids:
        row = res.filter(pl.col("building_id") == k).row(0, named=True)
        assert recs[k].billed_unit == "therm"
        assert recs[k].actual_heating_billed == pytest.approx(row["actual_heating_kbtu"] / 100.0)
        assert max(recs[k].peers) < 10 * min(recs[k].peers)  # T4's 100x intensity is not among them
        assert len(recs[k].peers) == 3
    rk = outputs.ranking_table(res, disp)
    t1 = rk.filter(pl.col("building_id") == "T1").row(0, named=True)
    assert t1["billed_unit"] == "therm"
    assert t1["actual_heating_billed"] == pytest.approx(t1["actual_heating"] / 100.0, abs=0.1)


def _monthly_gas(factors: dict[int, float]) -> pl.DataFrame:
    """Three years of monthly gas bills of one building (by hand: 100 kBtu/day × (1.5 + cos) per month),
    month index m (0 = 2023-01) multiplied by factors[m]."""
    rows = []
    for m in range(36):
        s = dt.date(2023 + m // 12, m % 12 + 1, 1)
        e = dt.date(2023 + (m + 1) // 12, (m + 1) % 12 + 1, 1) - dt.timedelta(days=1)
        use = 100.0 * (1.5 + np.cos(2 * np.pi * (m % 12) / 12)) * ((e - s).days + 1) * factors.get(m, 1.0)
        rows.append(("B1", "natural_gas", "", s, e, (e - s).days + 1, use))
    return pl.DataFrame(
        rows,
        schema=["building_id", "fuel", "meter_id", "period_start", "period_end", "days", "energy_kbtu"],
        orient="row",
    )


def test_a_unit_error_is_a_spike_and_waste_that_began_is_a_step():
    # one winter bill ×10 (a lost decimal point): its neighbours are not off with it -> likely_unit_error
    from screening import data_issues

    b = pl.DataFrame({"building_id": ["B1"], "heating_fuel": ["natural_gas"]})
    one = data_issues.unit_error_issues(_monthly_gas({25: 10.0}), b, 8.0, isolation=2.0)
    assert one["building_id"].to_list() == ["B1"] and "2025-02-01" in one["detail"][0]
    # the last winter ×10 on every month from 2025-10 (waste that began, e.g. a damper stuck open):
    # a run of bills off together is a step, left to the ratio of the whole span to the expectation
    step = {m: 10.0 for m in range(33, 36)} | {m: 10.0 for m in range(24, 28)}
    assert data_issues.unit_error_issues(_monthly_gas(step), b, 8.0, isolation=2.0).height == 0
    # ... unless the run is beyond any operation (×100: kBtu read as therms), caught even as a step
    far = {m: 100.0 for m in range(24, 28)}
    assert data_issues.unit_error_issues(_monthly_gas(far), b, 8.0, isolation=2.0).height == 1
    # without the isolation rule (1.0: every bill off its month is a spike) the step is taken for an error
    assert data_issues.unit_error_issues(_monthly_gas(step), b, 8.0, isolation=1.0).height == 1


def test_a_bill_off_the_fit_blocks_only_when_its_neighbours_are_not_off_with_it():
    from screening import data_issues

    days = [31, 28, 31, 30, 31, 30]
    hdd = [30.0, 25.0, 15.0, 8.0, 2.0, 0.0]  # degree days per day at the fitted base (by hand)
    use = [10.0 + 2.0 * h for h in hdd]  # α = 10 kBtu/day, β = 2 kBtu/°F·day
    met = pl.DataFrame(
        {
            "building_id": ["B1"],
            "fit_method": ["regression"],
            "baseload_kbtu_per_day": [10.0],
            "heating_slope_kbtu_per_dd": [2.0],
        }
    )

    def periods(scale):
        return pl.DataFrame(
            {
                "building_id": ["B1"] * 6,
                "period_start": [dt.date(2026, m + 1, 1) for m in range(6)],
                "period_end": [dt.date(2026, m + 1, d) for m, d in enumerate(days)],
                "days": days,
                "energy_kbtu": [u * d * k for u, d, k in zip(use, days, scale, strict=True)],
                "usable": [True] * 6,
                "hdd_per_day_fit": hdd,
            }
        )

    one = data_issues.fit_outlier_issues(periods([1, 10, 1, 1, 1, 1]), met, 4.0, 2.0)  # one bill ×10
    assert one.height == 1 and "2026-02-01" in one["detail"][0]
    run = data_issues.fit_outlier_issues(periods([1, 5, 5, 5, 1, 1]), met, 4.0, 2.0)  # three bills ×5 together
    assert run.height == 0
    assert data_issues.fit_outlier_issues(periods([1, 5, 5, 5, 1, 1]), met, 4.0, 1.0).height == 1


def test_a_summer_bill_a_hundred_times_its_other_summers_is_a_unit_error():
    # two adjacent summer bills ×100 (kBtu read as therms): each is the other's neighbour and their
    # month's other years are too small to count as substantial; against all of them they are 100× off
    from screening import data_issues

    b = pl.DataFrame({"building_id": ["B1"], "heating_fuel": ["natural_gas"]})
    got = data_issues.unit_error_issues(_monthly_gas({30: 100.0, 31: 100.0}), b, 8.0, isolation=2.0)
    assert got.height == 1 and "2025-07-01" in got["detail"][0] and "2025-08-01" in got["detail"][0]
    # the same months ×5 (heating in warm weather that began) are not
    assert data_issues.unit_error_issues(_monthly_gas({30: 5.0, 31: 5.0}), b, 8.0, isolation=2.0).height == 0
    # heating in warm weather that began on a heating-only fuel: last summer's bills next to nothing, this
    # summer's at a spring month's use: far above their own month, but not above the building's winters
    warm = {m: 0.01 for m in (5, 6, 7, 17, 18, 19)} | {m: 3.0 for m in (29, 30, 31)}
    assert data_issues.unit_error_issues(_monthly_gas(warm), b, 8.0, isolation=2.0).height == 0


def test_thresholds_are_one_frozen_typed_value():
    # the [thresholds] table becomes config.Thresholds once; the screening steps read attributes, not keys
    import dataclasses

    cfg = cfgmod.load(None, {"thresholds": {"r2_min": 0.6}})
    thr = cfgmod.thresholds(cfg)
    assert isinstance(thr, cfgmod.Thresholds) and thr.r2_min == 0.6 and thr.band_floor == 0.1
    with pytest.raises(dataclasses.FrozenInstanceError):
        thr.r2_min = 0.5  # type: ignore[misc]
    assert dataclasses.asdict(thr) == cfg["thresholds"]


def test_the_orchestration_reads_the_typed_settings():
    # issue 19: the run builds config.Settings once; screen_frames takes it or a config dict (converted once,
    # by config.settings) with the same results; the orchestration never looks a setting up by key
    import dataclasses
    import re
    from pathlib import Path

    cfg = cfgmod.load(None, {"analysis": {"lookback_months": 36}, "plan": {"audits_per_quarter": 1}})
    s = cfgmod.settings(cfg)
    assert cfgmod.settings(s) is s and s.analysis.lookback_months == 36 and s.plan.audits_per_quarter == 1
    assert dataclasses.asdict(s) == cfg and cfgmod.config_hash(dataclasses.asdict(s)) == cfgmod.config_hash(cfg)
    start = dt.date(2025, 1, 1)
    w = _weather(lambda i: 35.0 + 20.0 * np.sin(i / 58.0), dt.date(2023, 1, 1), 365 * 3 + 2)
    b = _buildings([_building(), _building(building_id="T2", name="Test Two")])
    r = pl.concat(
        [
            _monthly_readings(w, start, 12, UA, 1.0),
            _monthly_readings(w, start, 12, 2 * UA, 1.0).with_columns(pl.lit("T2").alias("building_id")),
        ]
    )
    window = (start, dt.date(2025, 12, 31))
    by_dict = screen_frames(b, r, w, cfg, window=window).results
    by_settings = screen_frames(b, r, w, s, window=window).results
    assert by_dict.equals(by_settings) and by_settings["in_plan"].sum() <= 1
    root = Path(__file__).parents[1] / "screening"
    for f in [root / "pipeline.py", root / "cluster.py", *sorted((root / "runs").glob("*.py"))]:
        assert not re.search(r"\bcfg(\[|\.get\()", f.read_text(encoding="utf-8")), f
