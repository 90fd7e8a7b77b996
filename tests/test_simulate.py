"""Sanity tests of the independent portfolio simulator (sample_portfolio/simulate.py).

The simulator is loaded by path: it must not import ``screening`` (checked below), so that the
tool is measured against a model that is not its own.
"""

from __future__ import annotations

import ast
import importlib.util
import math
import sys
from datetime import date
from pathlib import Path

import numpy as np
import pint
import polars as pl
import pytest
from scipy.signal import lfilter

from .conftest import BUILDING_HEADER, READING_HEADER, WEATHER_HEADER

ROOT = Path(__file__).resolve().parents[1]
SP = ROOT / "sample_portfolio"


def _load(name: str, path: Path):
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    spec.loader.exec_module(mod)
    return mod


sim = _load("ddscreen_test_simulate", SP / "simulate.py")
ureg = pint.UnitRegistry()
Q = ureg.Quantity

# Input contract (issue 2, "Input contract"), columns exactly.
BUILDING_COLS = BUILDING_HEADER
READING_COLS = READING_HEADER
WEATHER_COLS = WEATHER_HEADER
USE_TYPES = {"office", "multifamily", "school", "retail", "warehouse", "lodging", "healthcare", "other"}
FUELS = {"natural_gas", "fuel_oil", "propane", "electricity", "district_steam", "district_hot_water"}
UNITS = {"therm", "ccf", "mcf", "m3", "kWh", "MWh", "kBtu", "MMBtu", "GJ", "gal", "L", "lb", "Mlb"}
START = date(2023, 10, 1)


@pytest.fixture(scope="module")
def frames():
    return sim.simulate_portfolio(300, seed=11, start=START, years=3)


# ------------------------------------------------------------------ independence, determinism
def test_simulator_does_not_import_the_tool():
    tree = ast.parse((SP / "simulate.py").read_text())
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            names.add((node.module or "").split(".")[0])
    assert "screening" not in names
    assert names <= {"__future__", "math", "datetime", "pathlib", "numpy", "polars"}


def test_same_seed_same_frames_other_seed_differs(frames):
    again = sim.simulate_portfolio(300, seed=11, start=START, years=3)
    for k in ("buildings", "readings", "weather", "truth"):
        assert frames[k].equals(again[k]), k
    other = sim.simulate_portfolio(300, seed=12, start=START, years=3)
    assert not frames["readings"].equals(other["readings"])
    assert not frames["weather"].equals(other["weather"])


def test_a_space_heat_cut_of_zero_changes_nothing_and_a_cut_changes_only_quantities():
    a = sim.simulate_portfolio(40, seed=5, start=START, years=2)
    zero = sim.simulate_portfolio(40, seed=5, start=START, years=2, space_heat_cut=(date(2024, 6, 1), np.zeros(40)))
    for k in ("buildings", "readings", "weather", "truth"):
        assert a[k].equals(zero[k]), k
    cuts = np.where(np.arange(40) < 20, 0.2, 0.0)
    cut = sim.simulate_portfolio(40, seed=5, start=START, years=2, space_heat_cut=(date(2024, 6, 1), cuts))
    key = ["building_id", "fuel", "period_start", "period_end"]
    assert cut["readings"].select(key).equals(a["readings"].select(key))
    j = a["readings"].with_columns(cut["readings"]["quantity"].alias("q_cut"))
    heat = j.join(a["buildings"].select("building_id", "heating_fuel"), on="building_id").filter(
        pl.col("fuel") == pl.col("heating_fuel")
    )
    before = heat.filter(pl.col("period_end") < date(2024, 6, 1))
    assert (before["quantity"] == before["q_cut"]).all()  # nothing changes before the day
    after = heat.filter((pl.col("period_start") >= date(2024, 10, 1)) & (pl.col("period_end") < date(2025, 4, 1)))
    ids = a["buildings"]["building_id"].to_list()
    cut_ids = ids[:20]
    got = after.group_by("building_id").agg((pl.col("q_cut").sum() / pl.col("quantity").sum()).alias("r"))
    r = dict(got.iter_rows())
    assert all(r[i] < 0.99 for i in cut_ids if i in r)  # winter fuel down with the cut
    assert all(r[i] == 1.0 for i in ids[20:] if i in r)  # untouched buildings the same
    with pytest.raises(ValueError, match="space_heat_cut"):
        sim.simulate_portfolio(4, seed=5, start=START, years=1, space_heat_cut=(date(2024, 6, 1), np.ones(4)))


def test_result_does_not_depend_on_chunk_size():
    a = sim.simulate_portfolio(90, seed=5, start=START, years=1, chunk=64)
    b = sim.simulate_portfolio(90, seed=5, start=START, years=1, chunk=7)
    assert a["readings"].equals(b["readings"])


def test_committed_demo_files_match_the_generator(tmp_path):
    gen = _load("ddscreen_test_generate", SP / "generate.py")
    assert gen.main(["--out", str(tmp_path)]) == 0
    for name in ("buildings", "readings", "weather", "truth", "events"):
        assert (tmp_path / f"{name}.csv").read_bytes() == (SP / f"{name}.csv").read_bytes(), name


# ------------------------------------------------------------------ contract
def test_columns_and_values_follow_the_input_contract(frames):
    b, r, w = frames["buildings"], frames["readings"], frames["weather"]
    assert b.columns == BUILDING_COLS
    assert r.columns == READING_COLS
    assert w.columns == WEATHER_COLS
    assert b["building_id"].is_unique().all()
    assert b["building_id"].str.contains(r"^[A-Za-z0-9_.\-]{1,64}$").all()
    assert set(b["use_type"]) == USE_TYPES  # every use type present
    assert set(b["heating_fuel"]) <= FUELS
    assert (b["floor_area"] > 0).all()
    assert b["year_built"].drop_nulls().is_between(1800, date.today().year).all()
    assert (b["stories"].drop_nulls() >= 1).all()
    assert b["heating_efficiency"].drop_nulls().is_between(0.3, 6.0).all()
    assert set(b["station_id"]) <= set(w["station_id"])
    # audit values are given for a few buildings only
    assert 0 < b["ua_total"].is_not_null().sum() < 0.2 * b.height
    assert r["period_start"].dtype == pl.Date and w["date"].dtype == pl.Date
    assert set(r["unit"]) <= UNITS and set(r["fuel"]) <= FUELS
    assert set(r["building_id"]) <= set(b["building_id"])
    assert (r["quantity"] >= 0).all()
    assert (r["period_end"] >= r["period_start"]).all()
    assert (w["t_max"] >= w["t_min"]).all()
    # weather: complete daily series per station, 3 years from START
    n_days = (date(2026, 9, 30) - START).days + 1
    assert w.group_by("station_id").len()["len"].to_list() == [n_days] * w["station_id"].n_unique()
    assert w["date"].min() == START and w["date"].max() == date(2026, 9, 30)


def test_gas_is_billed_in_gas_units_and_electricity_meters_exist(frames):
    r = frames["readings"]
    gas_units = set(r.filter(pl.col("fuel") == "natural_gas")["unit"])
    assert gas_units <= {"therm", "ccf"} and gas_units
    b = frames["buildings"]
    not_electric = b.filter(pl.col("heating_fuel") != "electricity")["building_id"]
    second_meter = r.filter(pl.col("fuel") == "electricity", pl.col("building_id").is_in(not_electric.implode()))
    assert second_meter["building_id"].n_unique() > 20


def test_meter_reads_drift_and_straddle_months(frames):
    t = frames["truth"].filter(pl.col("truth_label") == "normal", pl.col("reading_frequency") == "monthly")
    r = frames["readings"].filter(pl.col("building_id").is_in(t["building_id"].implode()))
    days = (r["period_end"] - r["period_start"]).dt.total_days() + 1
    assert days.min() >= 27 and days.max() <= 35  # the brief: bills of 27-35 days
    assert (r["period_start"].dt.day() != 1).mean() > 0.9  # most bills straddle a month end
    # consecutive bills of one meter touch: next start = previous end + 1 day
    g = r.sort("building_id", "fuel", "period_start").with_columns(
        gap=(pl.col("period_start") - pl.col("period_end").shift(1)).dt.total_days().over("building_id", "fuel")
    )
    assert (g["gap"].drop_nulls() == 1).all()
    # read days drift: the day of month of one meter's reads is not constant
    spread = r.group_by("building_id", "fuel").agg(pl.col("period_end").dt.day().n_unique().alias("k"))
    assert spread["k"].median() >= 4


def test_annual_buildings_report_calendar_years(frames):
    t = frames["truth"]
    ann = t.filter(pl.col("reading_frequency") == "annual")["building_id"]
    assert ann.len() == round(0.1 * t.height)
    r = frames["readings"].filter(pl.col("building_id").is_in(ann.implode()))
    assert set(zip(r["period_start"].to_list(), r["period_end"].to_list())) == {
        (date(2024, 1, 1), date(2024, 12, 31)),
        (date(2025, 1, 1), date(2025, 12, 31)),
    }


# ------------------------------------------------------------------ planted faults
def test_fault_counts_follow_the_rates(frames):
    counts = dict(frames["truth"].group_by("truth_label").len().iter_rows())
    for k, rate in sim.DEFAULT_FAULT_RATES.items():
        assert counts[k] == round(rate * 300), k
    assert counts["normal"] > 0.5 * 300


def test_wasteful_factor_is_realized_against_the_same_buildings_without_waste():
    kw = dict(seed=21, start=START, years=2, annual_share=0.0)
    faulted = sim.simulate_portfolio(120, fault_rates={"wasteful": 0.25}, **kw)["truth"]
    clean = sim.simulate_portfolio(120, fault_rates={"wasteful": 0.0}, **kw)["truth"]
    w = faulted.filter(pl.col("truth_label") == "wasteful")
    assert w.height == 30
    assert w["waste_factor"].is_between(1.6, 2.5).all()
    assert set(w["waste_mechanism"]) == {"stuck_setpoint", "open_dampers", "failed_controls"}
    j = w.join(clean, on="building_id", suffix="_clean")
    ratio = j["annual_space_heat_delivered_kbtu"] / j["annual_space_heat_delivered_kbtu_clean"]
    # by construction the extra load is scaled to the drawn factor; tolerance from the 0.1 kBtu rounding
    np.testing.assert_allclose(ratio.to_numpy(), j["waste_factor"].to_numpy(), rtol=1e-3)
    # normal buildings are untouched by the waste setting
    n = faulted.filter(pl.col("truth_label") == "normal").join(clean, on="building_id", suffix="_clean")
    assert (n["annual_space_heat_delivered_kbtu"] == n["annual_space_heat_delivered_kbtu_clean"]).all()


def _heat_rows(frames, label):
    t = frames["truth"].filter(pl.col("truth_label") == label)
    b = frames["buildings"].select("building_id", "heating_fuel")
    r = frames["readings"].join(b, on="building_id").filter(pl.col("fuel") == pl.col("heating_fuel"))
    return t, r.filter(pl.col("building_id").is_in(t["building_id"].implode()))


def test_duplicates_overlaps_gaps_and_estimated_runs_are_in_the_readings(frames):
    t, r = _heat_rows(frames, "duplicate_readings")
    d = r.group_by("building_id", "period_start", "period_end").len().filter(pl.col("len") > 1)
    assert set(d["building_id"]) == set(t["building_id"])

    t, r = _heat_rows(frames, "overlapping_periods")
    g = r.sort("building_id", "period_start").with_columns(
        gap=(pl.col("period_start") - pl.col("period_end").shift(1)).dt.total_days().over("building_id")
    )
    assert set(g.filter(pl.col("gap") < 0)["building_id"]) == set(t["building_id"])

    t, r = _heat_rows(frames, "missing_months")
    g = r.sort("building_id", "period_start").with_columns(
        gap=(pl.col("period_start") - pl.col("period_end").shift(1)).dt.total_days().over("building_id")
    )
    assert set(g.filter(pl.col("gap") > 50)["building_id"]) == set(t["building_id"])

    t, r = _heat_rows(frames, "estimated_run")
    runs = r.sort("building_id", "period_start").with_columns(
        run=pl.col("estimated").cast(pl.Int32).rolling_sum(3).over("building_id")
    )
    assert set(runs.filter(pl.col("run") == 3)["building_id"]) == set(t["building_id"])

    # normal monthly buildings have no negative gap, no duplicate and no gap
    t, r = _heat_rows(frames, "normal")
    r = r.filter(
        pl.col("building_id").is_in(t.filter(pl.col("reading_frequency") == "monthly")["building_id"].implode())
    )
    g = r.sort("building_id", "period_start").with_columns(
        gap=(pl.col("period_start") - pl.col("period_end").shift(1)).dt.total_days().over("building_id")
    )
    assert (g["gap"].drop_nulls() == 1).all()


def test_unit_errors_scale_the_billed_numbers_by_the_recorded_factor():
    none = {k: 0.0 for k in sim.DEFAULT_FAULT_RATES}
    kw = dict(seed=3, start=START, years=2, annual_share=0.0)
    f = sim.simulate_portfolio(400, fault_rates={**none, "unit_error": 0.06}, **kw)
    clean = sim.simulate_portfolio(400, fault_rates=none, **kw)
    t, r = _heat_rows(f, "unit_error")
    _, r0 = _heat_rows(clean, "normal")
    assert t.height == 24
    assert set(t["unit_error_kind"]) == {"whole_history", "from_date", "single_reading"}
    assert set(t["unit_error_factor"]) <= {10.0, 100.0, 1000.0, 0.1, 0.01, 0.001}
    j = r.join(r0, on=["building_id", "fuel", "period_start", "period_end"], suffix="_clean").join(
        t.select("building_id", "unit_error_kind", "unit_error_factor"), on="building_id"
    )
    assert j.height == r.height  # the same bills, only the numbers differ
    # bills are rounded after scaling: |q - f*q0| <= half a printed digit x (1 + f)
    half = pl.col("unit").replace_strict(
        {u: 0.5 * 10.0**-d for u, d in sim.UNIT_DECIMALS.items()}, return_dtype=pl.Float64
    )
    j = j.with_columns(
        hit=(pl.col("quantity") - pl.col("unit_error_factor") * pl.col("quantity_clean")).abs()
        <= half * (1 + pl.col("unit_error_factor")) + 1e-9,
        same=(pl.col("quantity") - pl.col("quantity_clean")).abs() < 1e-9,
    )
    per = j.group_by("building_id", "unit_error_kind").agg(
        pl.col("hit").sum().alias("n_hit"),
        pl.col("same").sum().alias("n_same"),
        pl.len().alias("n"),
        (pl.col("hit") & ~pl.col("same")).sum().alias("n_changed"),
    )
    for row in per.iter_rows(named=True):
        if row["unit_error_kind"] == "whole_history":
            assert row["n_hit"] == row["n"], row
        elif row["unit_error_kind"] == "single_reading":
            assert row["n_changed"] == 1 and row["n_same"] == row["n"] - 1, row
        else:  # from a date: a tail of 2-11 bills scaled, the rest untouched
            assert 2 <= row["n_changed"] <= 11 and row["n_hit"] + row["n_same"] >= row["n"], row
    # costs follow the true quantity: with a whole history scaled, the price per billed unit is the
    # tariff divided by the factor (large bills only: the fixed charge, at most 60, is < 4 %)
    w = r.filter(pl.col("cost") > 1500).join(t.filter(pl.col("unit_error_kind") == "whole_history"), on="building_id")
    for (bid,), x in w.group_by(["building_id"]):
        lo, hi = sim.UNIT_PRICE[x["unit"][0]]
        ppu = (x["cost"] / x["quantity"] * x["unit_error_factor"]).median()
        assert lo * 0.95 <= ppu <= hi * 1.1, bid


# ------------------------------------------------------------------ physics of the hourly core
def _one_building(t_mean_f, dtr_f, *, ua=1000.0, sp=65.0, gains_w_ft2=0.0, days=10):
    """A single building in a single station with constant weather, no sun, no setback."""
    n_d, burn = days, 5
    W = {
        "t_mean": np.full((1, n_d + burn), t_mean_f),
        "range": np.full((1, n_d + burn), dtr_f),
        "clear": np.zeros((1, n_d + burn)),
        "burn": burn,
        "solar_dh": np.zeros((n_d, 24), np.float32),
    }
    B = {
        "station": np.array([0]),
        "tau_days": np.array([1.0]),
        "swing": np.array([1.0]),
        "occ_start": np.array([0]),
        "occ_end": np.array([24]),
        "sp_start": np.array([0]),
        "sp_end": np.array([24]),
        "weekend_open": np.array([True]),
        "is_school": np.array([False]),
        "area": np.array([10_000.0]),
        "gain_occ": np.array([gains_w_ft2]),
        "gain_unocc": np.array([gains_w_ft2]),
        "sol_area": np.array([0.0]),
        "ua_env": np.array([ua]),
        "cutoff": np.array([200.0]),
    }
    off = {"general": np.zeros(n_d, bool), "school": np.zeros(n_d, bool)}
    q, _ = sim._space_heat_chunk(np.array([0]), B, W, off, np.array([sp]), np.array([sp]), np.array([0.0]))
    return q[0]


def test_constant_35f_gives_ua_times_30_times_24_per_day():
    # issue 2 check value (common practice): constant 35 °F daily mean, base 65 °F ->
    # 30 °F·day per day; heat = UA × 30 × 24 Btu per day (UA × 30 × 8,760 per year)
    q = _one_building(35.0, 0.0, ua=1000.0)
    np.testing.assert_allclose(q, 1000.0 * 30 * 24, rtol=1e-6)  # float32 core: 1e-6


def test_internal_gains_lower_the_balance_point():
    # docs/factors.md §5 worked example [S13]: UA/A = 0.25 Btu/(h·ft²·°F) and 1 W/ft² give a balance
    # point of 70 − 3.412142/0.25 = 56.35 °F; at a constant 50 °F the heat is UA·(56.35 − 50)·24
    ua = 0.25 * 10_000
    q = _one_building(50.0, 0.0, ua=ua, sp=70.0, gains_w_ft2=1.0)
    np.testing.assert_allclose(q, ua * (70 - 3.412142 / 0.25 - 50.0) * 24, rtol=1e-5)


def test_partial_day_heating_through_the_diurnal_cycle():
    # by hand: with T_out = 60 + 10·cos(θ) and T_set = 65, the mean of max(0, 5 − 10 cos θ) over a
    # cycle is [a(π − α) + b sin α]/π with a = 5, b = 10, α = arccos(a/b); the daily-mean method
    # would give only 5 °F·day. 24 hourly midpoints: tolerance 1 %.
    a, b = 5.0, 10.0
    alpha = math.acos(a / b)
    mean = (a * (math.pi - alpha) + b * math.sin(alpha)) / math.pi
    q = _one_building(60.0, 20.0, ua=1000.0)
    np.testing.assert_allclose(q, 1000.0 * 24 * mean, rtol=0.01)
    assert q[0] > 1000.0 * 24 * 5.0 * 1.15  # 6.09 vs 5 °F·day


def test_ar1_scan_matches_scipy_lfilter():
    # reference: scipy.signal.lfilter solves y[n] = x[n] + phi*y[n-1] (direct form)
    rng = np.random.default_rng(0)
    eps = rng.standard_normal((3, 1000))
    for phi in (0.0, 0.5, 0.93):
        np.testing.assert_allclose(
            sim._ar1_scan(eps, phi), lfilter([1.0], [1.0, -phi], eps, axis=-1), rtol=1e-10, atol=1e-10
        )
    phis = np.array([[0.2], [0.6], [0.9]])
    ref = np.vstack([lfilter([1.0], [1.0, -p], e) for p, e in zip(phis[:, 0], eps)])
    np.testing.assert_allclose(sim._ar1_scan(eps, phis), ref, rtol=1e-10, atol=1e-10)


def test_weather_climates_are_distinct_and_plausible(frames):
    w = frames["weather"].with_columns(tm=(pl.col("t_min") + pl.col("t_max")) / 2)
    y = (
        w.filter(pl.col("date").dt.year() == 2025)
        .group_by("station_id")
        .agg(((65 - pl.col("tm")).clip(0)).sum().alias("hdd"), (pl.col("t_max") - pl.col("t_min")).mean().alias("dtr"))
    )
    # ranges from memory: US climates run from ~1,000 to ~10,000 HDD65; daily ranges 10-30 °F
    assert y["hdd"].is_between(1000, 10500).all()
    assert y["hdd"].max() / y["hdd"].min() > 3
    assert y["dtr"].is_between(8, 30).all()
    # winter is colder than summer everywhere
    jan = w.filter(pl.col("date").dt.month() == 1)["tm"].mean()
    jul = w.filter(pl.col("date").dt.month() == 7)["tm"].mean()
    assert jan < jul - 20


def test_intensities_are_in_the_commercial_range(frames):
    # docs/factors.md §7 (EIA heating intensity, (M) ranges): commercial space heating about 3-12
    # Btu/(ft²·°F·day); flag below 1 or above 20. Check the median per use type lands in 1-20.
    w = frames["weather"].with_columns(tm=(pl.col("t_min") + pl.col("t_max")) / 2)
    hdd = w.group_by("station_id").agg(((65 - pl.col("tm")).clip(0).sum() / 3.0).alias("hdd_yr"))
    j = (
        frames["truth"]
        .filter(pl.col("truth_label") == "normal")
        .join(frames["buildings"], on="building_id")
        .join(hdd, on="station_id")
        .with_columns(hi=pl.col("annual_space_heat_delivered_kbtu") * 1000 / pl.col("floor_area") / pl.col("hdd_yr"))
    )
    med = j.group_by("use_type").agg(pl.col("hi").median())
    assert med["hi"].is_between(1, 20).all()
    assert j["hi"].median() == pytest.approx(6.5, rel=0.6)


# ------------------------------------------------------------------ SI
def test_si_output_is_the_ip_portfolio_converted():
    ip = sim.simulate_portfolio(40, seed=8, start=START, years=1)
    si = sim.simulate_portfolio(40, seed=8, start=START, years=1, units="SI")
    # pint reference: ft² -> m², °F -> °C
    ft2_to_m2 = Q(1, "ft**2").to("m**2").magnitude
    np.testing.assert_allclose(si["buildings"]["floor_area"], ip["buildings"]["floor_area"] * ft2_to_m2, atol=0.06)
    c = Q(ip["weather"]["t_min"].to_numpy(), "degF").to("degC").magnitude
    np.testing.assert_allclose(si["weather"]["t_min"], c, atol=0.08)  # 0.1 rounding on both sides
    assert set(si["readings"]["unit"]) <= {"m3", "GJ", "L", "kWh"}

    # same energy whatever the unit: heating-fuel totals in Btu agree within meter rounding
    def btu(fr):
        tr = fr["truth"].select("building_id", "heat_content_btu_per_unit")
        b = fr["buildings"].select("building_id", "heating_fuel")
        r = fr["readings"].join(b, on="building_id").filter(pl.col("fuel") == pl.col("heating_fuel"))
        return (
            r.join(tr, on="building_id").select((pl.col("quantity") * pl.col("heat_content_btu_per_unit")).sum()).item()
        )

    assert btu(si) == pytest.approx(btu(ip), rel=2e-3)


def test_conversion_constants_against_pint():
    # pint reference; the billing therm is 1e5 Btu_it (issue 2 / docs/factors.md §8)
    assert sim.BTU_PER_KWH == pytest.approx(Q(1, "kWh").to("Btu_it").magnitude, rel=1e-7)
    assert sim.BTU_PER_GJ == pytest.approx(Q(1, "GJ").to("Btu_it").magnitude, rel=1e-7)
    assert sim.FT3_PER_M3 == pytest.approx(Q(1, "m**3").to("ft**3").magnitude, rel=1e-9)
    assert sim.L_PER_GAL == pytest.approx(Q(1, "gallon").to("L").magnitude, rel=1e-9)
    assert sim.W_K_PER_BTU_H_F == pytest.approx(Q(1, "Btu_it/hour/delta_degF").to("W/K").magnitude, rel=1e-6)
    assert sim.BTU_H_PER_W == pytest.approx(Q(1, "W").to("Btu_it/hour").magnitude, rel=1e-6)


# ------------------------------------------------------------------ rejects, bad arguments
def test_add_reject_rows_plants_exactly_the_listed_bad_rows(frames):
    out, planted = sim.add_reject_rows(frames)
    assert len(planted) == 6
    assert out["readings"].height == frames["readings"].height + 5
    assert out["buildings"].height == frames["buildings"].height + 1
    extra = out["readings"].tail(5)
    assert (extra["quantity"] < 0).sum() == 1
    assert "bbl" in extra["unit"].to_list()
    assert extra.filter(pl.col("fuel") == "natural_gas", pl.col("unit") == "gal").height == 1
    assert "ZZ-404" in extra["building_id"].to_list()
    assert (extra["period_end"] < extra["period_start"]).sum() == 1
    assert out["buildings"].tail(1)["floor_area"].item() == 0
    assert frames["readings"].height == out["readings"].height - 5  # inputs unchanged


@pytest.mark.parametrize(
    "kw, msg",
    [
        (dict(n_buildings=0), r"n_buildings must be a positive integer, got 0"),
        (dict(units="metric"), r"units must be 'IP' or 'SI', got 'metric'"),
        (dict(years=0), r"years must be an integer from 1 to 20, got 0"),
        (dict(stations=9), r"stations must be an integer from 1 to 8, got 9"),
        (dict(annual_share=1.5), r"annual_share must be within \[0, 1\], got 1.5"),
        (dict(fault_rates={"leaky": 0.1}), r"fault_rates has unknown fault\(s\) \['leaky'\]"),
        (
            dict(fault_rates={"wasteful": 0.9, "unit_error": 0.2}),
            r"fault_rates sum to 1\.200; they must sum to at most 1",
        ),
    ],
)
def test_bad_arguments_are_refused_with_clear_messages(kw, msg):
    args = dict(n_buildings=10, seed=1, start=START, years=1)
    args.update(kw)
    n = args.pop("n_buildings")
    with pytest.raises(ValueError, match=msg):
        sim.simulate_portfolio(n, **args)


def test_excess_window_adds_the_true_excess_and_changes_nothing_else():
    kw = dict(seed=21, start=START, years=2, annual_share=0.0, fault_rates={"wasteful": 0.25})
    plain = sim.simulate_portfolio(40, **kw)
    win = (date(2024, 10, 1), date(2025, 9, 30))
    with_ex = sim.simulate_portfolio(40, excess_window=win, **kw)
    for k in plain:  # no extra random draws: every existing output is the same
        assert plain[k].equals(with_ex[k].select(plain[k].columns)), k
    t = with_ex["truth"]
    assert (t.filter(pl.col("truth_label") != "wasteful")["excess_kbtu"] == 0).all()
    w = t.filter(pl.col("truth_label") == "wasteful")
    # the fault adds (factor - 1)/factor of space heat; space heat is at most the fuel's whole use,
    # so the excess is positive and below that share of the year's heating fuel (by construction)
    share = w["excess_kbtu"] / w["annual_heating_fuel_kbtu"]
    assert (share > 0).all()
    assert (share <= (1 - 1 / w["waste_factor"]) * 1.05).all()
    with pytest.raises(ValueError):
        sim.simulate_portfolio(5, excess_window=(date(2020, 1, 1), date(2021, 1, 1)), **kw)
