"""Nonsense is never accepted quietly (issue 18, items 5-8).

* settings out of range stop the run when the config is read (exit 2, one line naming the key,
  its value and the allowed range);
* a run in which no building can be screened exits 2;
* weather in the wrong unit (°C read as °F and the reverse) stops with the likely mix-up named;
* dates with trailing text are rejected row by row; timestamps are read explicitly with a notice;
* a building without readings in its heating fuel, or whose station has no weather in the span,
  gets its own blocking data issue, never ``likely_unit_error``, and no ratio is ever inf or NaN.

docs/reliability.md "Reliability" counts these cases (table "Nonsense in settings and data").
"""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path

import polars as pl
import pytest

from screening import config as cfgmod
from screening.errors import ConfigError

from .conftest import READING_HEADER, cli, write_rows

# ----------------------------------------------------------------------------- item 6: settings

# (section, key, value, pattern the one-line message must match): every key of the issue's list
BAD_SETTINGS = [
    (
        "analysis",
        "normal_years",
        [2040, 2045],
        r"\[analysis\] normal_years: got \[2040, 2045\]; expected complete "
        r"years from 1950 to \d{4}",
    ),
    ("analysis", "gas_btu_per_ft3", 0.0, r"\[analysis\] gas_btu_per_ft3: got 0\.0; expected .* from 800 to 1,200"),
    ("analysis", "gas_btu_per_ft3", -5.0, r"\[analysis\] gas_btu_per_ft3: got -5\.0; expected .* from 800 to 1,200"),
    ("thresholds", "coverage_min", 5.0, r"\[thresholds\] coverage_min: got 5\.0; expected a share from 0\.5 to 1"),
    ("analysis", "lookback_months", 0, r"\[analysis\] lookback_months: got 0; expected .* from 12 to 120"),
    ("analysis", "seed", -1, r"\[analysis\] seed: got -1; expected a whole number from 0 to 4,294,967,295"),
    ("thresholds", "z_review", math.nan, r"\[thresholds\] z_review: got nan; expected .*not NaN or infinite"),
    ("prices", "natural_gas", math.inf, r"\[prices\] natural_gas: got inf; expected a price .*not NaN or infinite"),
    ("prices", "fuel_oil", -1.0, r"\[prices\] fuel_oil: got -1\.0; expected a price per unit from 0 to"),
    ("analysis", "as_of", "2030-01-15", r"\[analysis\] as_of: got '2030-01-15'; expected a date from 1950-01-01 to"),
    ("analysis", "as_of", "1949-12-31", r"\[analysis\] as_of: got '1949-12-31'; expected a date from 1950-01-01"),
    ("analysis", "as_of", "2025-10-01xyz", r"\[analysis\] as_of: got '2025-10-01xyz'; expected a date YYYY-MM-DD"),
    ("analysis", "as_of", "20251001", r"\[analysis\] as_of: got '20251001'; expected a date YYYY-MM-DD"),
    ("reading", "encoding", "klingon", r"\[reading\] encoding: got 'klingon'; expected an encoding name"),
    ("output", "workers", 0, r"\[output\] workers: got 0; expected a whole number from 1 to 64"),
    ("emissions", "electricity_kg_co2e_per_kwh", 40.0, r"electricity_kg_co2e_per_kwh: got 40\.0; expected .* 0 to 2"),
    ("analysis", "base_step_f", 0.0, r"\[analysis\] base_step_f: got 0\.0; expected a step in °F from 0\.1 to 5"),
    ("store", "database", " ", r"\[store\] database: got ' '; expected a path \(not empty\)"),
]


@pytest.mark.parametrize(
    "section,key,value,pattern", BAD_SETTINGS, ids=[f"{s}.{k}={v!r}" for s, k, v, _ in BAD_SETTINGS]
)
def test_a_setting_out_of_range_is_refused_naming_key_value_and_range(section, key, value, pattern):
    with pytest.raises(ConfigError, match=pattern) as exc:
        cfgmod.load(None, {section: {key: value}})
    assert "\n" not in str(exc.value)


def test_every_numeric_setting_has_a_range_and_the_defaults_pass():
    cfgmod.load(None)  # the defaults are in range
    numeric = {
        (s, k)
        for s, kv in cfgmod.DEFAULTS.items()
        for k, v in kv.items()
        if v is None or (isinstance(v, (int, float)) and not isinstance(v, bool))
    }
    heat = {("analysis", "gas_btu_per_ft3"), ("analysis", "steam_btu_per_lb")}  # range from units.csv
    prices = {("prices", k) for k in cfgmod.DEFAULTS["prices"] if k != "currency"}  # 0 to PRICE_MAX
    assert numeric - set(cfgmod.RANGES) - heat - prices == set()
    for section, key in numeric:  # NaN is refused for every one of them
        if isinstance(cfgmod.DEFAULTS[section][key], int) and not isinstance(cfgmod.DEFAULTS[section][key], bool):
            continue  # a whole-number key refuses a float by type
        with pytest.raises(ConfigError, match=rf"\[{section}\] {key}: got nan"):
            cfgmod.load(None, {section: {key: math.nan}})


def test_a_config_file_with_an_impossible_value_exits_2_with_one_line(portfolio, tmp_path):
    conf = tmp_path / "bad.toml"
    conf.write_text("[analysis]\nseed = -1\n", encoding="utf-8")
    res = cli(portfolio.args(tmp_path / "out", None, "--config", str(conf), "--no-sheets"))
    assert res.exit_code == 2
    lines = [x for x in res.stderr.splitlines() if x.strip()]
    assert lines == [
        "ddscreen: error: config key [analysis] seed: got -1; expected a whole number from 0 to 4,294,967,295"
    ], res.stderr
    assert "ValueError" not in res.stderr and not (tmp_path / "out").exists()


def test_a_one_day_window_is_refused(portfolio, tmp_path):
    res = cli(portfolio.args(tmp_path / "out", None, "--from", "2024-06-01", "--to", "2024-06-01", "--no-sheets"))
    assert res.exit_code == 2
    assert (
        "window_from/window_to (--from/--to): got 2024-06-01 to 2024-06-01 (1 days); expected a window of 365 "
        "to 3660 days" in res.stderr
    )


def test_normal_years_without_weather_stop_the_run(portfolio, tmp_path):
    conf = tmp_path / "ny.toml"
    conf.write_text("[analysis]\nnormal_years = [2001, 2004]\n", encoding="utf-8")
    res = cli(portfolio.args(tmp_path / "out", None, "--config", str(conf), "--no-sheets"))
    assert res.exit_code == 2
    assert (
        "config key [analysis] normal_years: got [2001, 2004]; no complete year of weather in 2001–2004 at "
        "station(s) alder-flats, brisk-point (alder-flats has weather 2022-10-01 to 2024-12-31"
    ) in res.stderr


@pytest.mark.parametrize("as_of", ["1999-05-01", "2019-01-10"])
def test_no_building_can_be_screened_exits_2(portfolio, tmp_path, as_of):
    portfolio.as_of = as_of
    res = cli(portfolio.args(tmp_path / "out", None, "--no-sheets"))
    assert res.exit_code == 2, res.stderr
    assert (
        "no building can be screened: no heating-fuel reading covers any day of the analysis window" in res.stderr
        and "(readings run from 2022-11-01 to 2024-12-31)" in res.stderr
    )
    assert not (tmp_path / "out").exists()


def test_a_price_that_is_huge_but_finite_keeps_summary_json_valid(portfolio, tmp_path):
    conf = tmp_path / "p.toml"
    conf.write_text("[prices]\nnatural_gas = 1000000.0\n", encoding="utf-8")
    res = cli(portfolio.args(tmp_path / "out", None, "--config", str(conf), "--no-sheets", "--quiet"))
    assert res.exit_code == 0, res.stderr
    text = (tmp_path / "out" / "summary.json").read_text(encoding="utf-8")
    json.loads(text, parse_constant=lambda c: pytest.fail(f"bare {c} in summary.json"))


# ----------------------------------------------------------------------------- item 8: diagnosis


def _non_finite_cells(csv_text: str) -> list[str]:
    """Cells of a CSV text that spell a non-finite number (inf, -inf, NaN in any case)."""
    import re

    return re.findall(r"(?i)(?:^|,)([+-]?(?:inf(?:inity)?|nan))(?=,|$)", csv_text, flags=re.M)


def _run(portfolio, tmp_path, *more) -> tuple[pl.DataFrame, pl.DataFrame, str]:
    out = tmp_path / "out"
    tmp_path.mkdir(parents=True, exist_ok=True)
    res = cli(portfolio.args(out, tmp_path / "s.duckdb", "--no-sheets", "--quiet", *more))
    assert res.exit_code == 0, res.stderr
    ranking_text = (out / "ranking.csv").read_text(encoding="utf-8")
    return (pl.read_csv(out / "ranking.csv", infer_schema_length=0), pl.read_csv(out / "data_issues.csv"), ranking_text)


def test_readings_only_in_another_fuel_are_their_own_issue_not_a_unit_error(portfolio, tmp_path):
    lines = portfolio.lines("readings")
    out = [lines[0]]
    for ln in lines[1:]:
        f = ln.split(",")
        if f[0] == "B01":  # B01 heats with gas; its bills become electricity bills of the same energy
            f[1], f[5], f[4] = "electricity", "kWh", f"{float(f[4]) * 100000 / 3412.141633:.2f}"
        out.append(",".join(f))
    portfolio.readings.write_text("\n".join(out) + "\n", encoding="utf-8")
    ranking, issues, text = _run(portfolio, tmp_path)
    b01 = issues.filter(pl.col("building_id") == "B01")
    assert set(b01["code"]) == {"no_heating_fuel_readings"}, b01  # no likely_unit_error, no 0 % coverage
    row = b01.filter(pl.col("code") == "no_heating_fuel_readings").row(0, named=True)
    assert (
        row["detail"].startswith("readings only in electricity, none in the building's heating fuel natural_gas")
        and row["blocking"]
    )
    r = ranking.filter(pl.col("building_id") == "B01").row(0, named=True)
    assert r["tier"] == "Fix data first" and r["ratio"] in (None, "")
    assert not _non_finite_cells(text)


def test_a_station_without_weather_in_the_span_is_its_own_issue_and_ratio_is_never_inf(portfolio, tmp_path):
    # B01 moves to a station whose weather ends before the analysis window (2024)
    b = portfolio.lines("buildings")
    b = [b[0]] + [ln.replace(",alder-flats,", ",old-mill,", 1) if ln.startswith("B01,") else ln for ln in b[1:]]
    portfolio.buildings.write_text("\n".join(b) + "\n", encoding="utf-8")
    w = portfolio.lines("weather")
    extra = [
        ln.replace("alder-flats,", "old-mill,", 1)
        for ln in w[1:]
        if ln.startswith("alder-flats,") and ln.split(",")[1] < "2023-07-01"
    ]
    portfolio.weather.write_text("\n".join(w + extra) + "\n", encoding="utf-8")
    ranking, issues, text = _run(portfolio, tmp_path)
    b01 = issues.filter(pl.col("building_id") == "B01")
    assert set(b01["code"]) == {"no_weather_at_station"}, b01
    assert b01["detail"][0] == (
        "station old-mill has no weather on any day of the span 2024-01-01 to 2024-12-31 "
        "(its weather runs 2022-10-01 to 2023-06-30): add that station's weather for "
        "these dates, or correct the building's station_id"
    )
    r = ranking.filter(pl.col("building_id") == "B01").row(0, named=True)
    assert r["tier"] == "Fix data first" and r["ratio"] in (None, "")
    assert not _non_finite_cells(text)
    summary = (tmp_path / "out" / "summary.json").read_text(encoding="utf-8")
    json.loads(summary, parse_constant=lambda c: pytest.fail(f"bare {c} in summary.json"))


# ----------------------------------------------------------------------------- item 5: weather units


def _climate(
    path: Path,
    station: str,
    mean_f: float,
    amplitude_f: float,
    *,
    unit: str = "F",
    start: dt.date = dt.date(2023, 1, 1),
    days: int = 730,
) -> Path:
    """Invented daily weather: a cosine year (coldest mid-January), t_min/t_max ±8 °F, in °F or °C."""
    rows = []
    for k in range(days):
        d = start + dt.timedelta(days=k)
        t = mean_f - amplitude_f * math.cos(2 * math.pi * (d.timetuple().tm_yday - 15) / 365.0)
        lo, hi = t - 8.0, t + 8.0
        if unit == "C":
            lo, hi = (lo - 32) / 1.8, (hi - 32) / 1.8
        rows.append([station, d.isoformat(), f"{lo:.1f}", f"{hi:.1f}"])
    return write_rows(path, ["station_id", "date", "t_min", "t_max"], rows)


# invented climates at the edges of populated ones (figures by construction, °F):
# cold: year 13, warmest month ~41.7 (a far-north coastal town); hot: year 75, warmest ~94.8 (a hot desert city)
COLD, HOT = (13.0, 29.0), (75.0, 20.0)


@pytest.mark.parametrize("climate", [COLD, HOT], ids=["cold", "hot"])
@pytest.mark.parametrize("units", ["IP", "SI"])
def test_cold_and_hot_climates_read_in_their_own_unit(tmp_path, climate, units):
    from screening.weather import read_daily_weather

    f = _climate(tmp_path / "w.csv", "edge", *climate, unit="F" if units == "IP" else "C")
    res = read_daily_weather(f, units=units)
    assert res[0].height == 730 and res[1].height == 0 and res.notices == []


@pytest.mark.parametrize(
    "climate,figures",
    [
        (COLD, r"warmest month averages 5\.4 °F, coldest -26\.5 °F, year -10\.6 °F"),
        (HOT, r"warmest month averages 34\.9 °F, coldest 12\.9 °F, year 23\.8 °F"),
    ],
    ids=["cold", "hot"],
)
def test_celsius_read_as_fahrenheit_is_refused(tmp_path, climate, figures):
    from screening.errors import InputError
    from screening.weather import read_daily_weather

    f = _climate(tmp_path / "w.csv", "edge", *climate, unit="C")
    with pytest.raises(
        InputError,
        match=rf"w\.csv: station edge: {figures}; no populated climate has its warmest "
        r"month below 40 °F, but as °C these figures are a plausible climate: looks like °C "
        r"read as °F: set units = \"SI\"",
    ):
        read_daily_weather(f, units="IP")


def test_fahrenheit_read_as_celsius_is_refused(tmp_path):
    from screening.errors import InputError
    from screening.weather import read_daily_weather

    # cold: no value beyond 60, so the warmest month tells
    f = _climate(tmp_path / "cold.csv", "edge", *COLD, unit="F")
    with pytest.raises(
        InputError,
        match=r"station edge: warmest month averages 41\.7 °C, .* no populated climate "
        r"has its warmest month above 40 °C, but as °F .*: looks like °F read as °C: set units = "
        r"\"IP\"",
    ):
        read_daily_weather(f, units="SI")
    # hot: most days above 60 "°C", which alone would only reject rows
    f = _climate(tmp_path / "hot.csv", "edge", *HOT, unit="F")
    with pytest.raises(
        InputError,
        match=r"hot\.csv: \d+ of 730 rows hold temperatures above 60 °C that are ordinary "
        r"in °F .*looks like °F read as °C",
    ):
        read_daily_weather(f, units="SI")


def test_a_short_record_is_not_judged_but_said_so(tmp_path):
    from screening.weather import read_daily_weather

    f = _climate(tmp_path / "w.csv", "edge", *HOT, unit="C", days=90)  # January to March only
    res = read_daily_weather(f, units="IP")
    assert res[0].height == 90
    assert res.notices == [
        f"{f}: the temperature unit of station(s) edge was not checked (fewer than 10 days of "
        "data in some calendar month)"
    ]


def test_the_demo_climates_pass_and_their_celsius_copy_is_refused_by_the_run(tmp_path):
    from screening.resources import sample_portfolio_dir as sample_dir
    from screening.weather import read_daily_weather

    src = sample_dir() / "weather.csv"
    res = read_daily_weather(src, units="IP")
    assert res[1].height == 0 and res.notices == []
    w = pl.read_csv(src, infer_schema_length=0).with_columns(
        [((pl.col(c).cast(pl.Float64) - 32) / 1.8).round(1).alias(c) for c in ("t_min", "t_max")]
    )
    w.write_csv(tmp_path / "weather_c.csv")
    res = cli(
        [
            "run",
            "--buildings",
            str(sample_dir() / "buildings.csv"),
            "--readings",
            str(sample_dir() / "readings.csv"),
            "--weather",
            str(tmp_path / "weather_c.csv"),
            "--out",
            str(tmp_path / "out"),
            "--db",
            str(tmp_path / "s.duckdb"),
            "--as-of",
            "2026-10-15",
            "--no-sheets",
        ]
    )
    assert res.exit_code == 2
    errors = [x for x in res.stderr.splitlines() if "error" in x]
    assert len(errors) == 1 and "looks like °C read as °F" in errors[0] and "weather_c.csv" in errors[0]
    assert not (tmp_path / "out").exists()


# ----------------------------------------------------------------------------- item 7: dates that are not dates


@pytest.mark.parametrize("cell", ["2025-10-01xyz", "2025-11-0199", "2025-10-31 (estimated)"])
def test_a_date_with_trailing_text_is_a_rejected_row(tmp_path, cell):
    from screening.ingest import read_readings

    f = write_rows(
        tmp_path / "r.csv",
        READING_HEADER[:6],
        [
            ["B1", "natural_gas", "2025-09-01", "2025-09-30", "10", "therm"],
            ["B1", "natural_gas", "2025-10-01", cell, "10", "therm"],
        ],
    )
    ld = read_readings(f)
    assert ld.df.height == 1
    rej = ld.rejects.row(0, named=True)
    assert (rej["line"], rej["column"], rej["value"]) == (3, "period_end", cell)
    assert rej["reason"] == "expected a date (YYYY-MM-DD) with nothing after it: remove the text after the date"


def test_a_weather_date_with_trailing_text_is_a_rejected_row(tmp_path):
    from screening.weather import read_daily_weather

    f = _climate(tmp_path / "w.csv", "edge", *HOT)
    lines = f.read_text().splitlines()
    lines[5] = lines[5].replace(",2023-01-05,", ",2023-01-05xyz,")
    f.write_text("\n".join(lines) + "\n")
    res = read_daily_weather(f, units="IP")
    assert res[0].height == 729
    assert res[1].select("line", "column", "value").row(0) == (6, "date", "2023-01-05xyz")


def test_a_time_of_day_is_rejected_saying_what_to_do(tmp_path):
    from screening.ingest import read_readings

    f = write_rows(
        tmp_path / "r.csv", READING_HEADER[:6], [["B1", "natural_gas", "2025-10-01 08:30", "2025-10-31", "10", "therm"]]
    )
    rej = read_readings(f).rejects.row(0, named=True)
    assert rej["reason"] == (
        "expected a date (YYYY-MM-DD): a time of day other than midnight cannot be read as a day; give the date only"
    )


def _monthly(stamp_end) -> list[list[str]]:
    rows = []
    for m in range(1, 13):
        s = dt.date(2025, m, 1)
        nxt = dt.date(2025 + (m == 12), m % 12 + 1, 1)
        rows.append(["B1", "natural_gas", f"{s}T00:00:00", stamp_end(s, nxt), "10", "therm"])
    return rows


def test_exclusive_end_stamps_are_read_as_the_day_before_with_a_notice(tmp_path):
    from screening.ingest import read_readings

    f = write_rows(tmp_path / "r.csv", READING_HEADER[:6], _monthly(lambda s, nxt: f"{nxt}T00:00:00"))
    ld = read_readings(f)
    assert ld.rejects.height == 0
    assert ld.df["period_end"].to_list() == [
        dt.date(2025, m + 1, 1) - dt.timedelta(days=1) if m < 12 else dt.date(2025, 12, 31) for m in range(1, 13)
    ]
    assert (
        f"{f}: 12 period_end value(s) are timestamps at midnight (e.g. '2025-02-01T00:00:00') on meters "
        "whose end stamp equals the start of the next period (11 do): read as exclusive ends, so the day before "
        "is the last day covered" in ld.notices
    )
    assert any("12 period_start value(s) are timestamps at midnight" in n for n in ld.notices)


def test_inclusive_end_stamps_are_read_as_that_day_with_a_notice(tmp_path):
    from screening.ingest import read_readings

    f = write_rows(
        tmp_path / "r.csv", READING_HEADER[:6], _monthly(lambda s, nxt: f"{nxt - dt.timedelta(days=1)} 00:00")
    )
    ld = read_readings(f)
    assert ld.df["period_end"].to_list() == [
        dt.date(2025, m + 1, 1) - dt.timedelta(days=1) if m < 12 else dt.date(2025, 12, 31) for m in range(1, 13)
    ]
    assert any(
        "12 period_end value(s) are timestamps at midnight (e.g. '2025-01-31 00:00') not equal to the start "
        "of the meter's next period: read as the last day covered (inclusive)" in n
        for n in ld.notices
    )


def test_exclusive_end_stamps_screen_like_plain_dates(portfolio, tmp_path):
    """The fixture portfolio with every period as exclusive-end timestamps ranks exactly like the plain file."""
    plain, _, _ = _run(portfolio, tmp_path / "a")
    lines = portfolio.lines("readings")
    out = [lines[0]]
    for ln in lines[1:]:
        f = ln.split(",")
        end = dt.date.fromisoformat(f[3]) + dt.timedelta(days=1)
        f[2], f[3] = f"{f[2]}T00:00:00", f"{end}T00:00:00"
        out.append(",".join(f))
    portfolio.readings.write_text("\n".join(out) + "\n", encoding="utf-8")
    stamped, _, _ = _run(portfolio, tmp_path / "b")
    assert stamped.select("building_id", "tier", "ratio").equals(plain.select("building_id", "tier", "ratio"))
    assert "Fix data first" not in stamped["tier"].to_list()


def test_config_and_degree_day_dates_take_no_trailing_text():
    from screening import ddtool

    with pytest.raises(ValueError, match="date_from must be a date YYYY-MM-DD; got '2024-01-01xyz'"):
        ddtool._parse_date("2024-01-01xyz", "date_from")
    with pytest.raises(ConfigError, match=r"window_from: got '2024-01-01T00:00'; expected a date YYYY-MM-DD"):
        cfgmod.load(None, {"analysis": {"window_from": "2024-01-01T00:00", "window_to": "2024-12-31"}})


def test_data_that_is_no_climate_in_either_unit_is_read_as_declared_with_a_notice(tmp_path):
    from screening.weather import read_daily_weather

    # a constant 35 °F year (a hand-checkable degree-day case): warmest month below 40 °F, but as °C
    # its coldest month (35 °C) is no climate either
    f = _climate(tmp_path / "w.csv", "still", 35.0, 0.0, days=366)
    res = read_daily_weather(f, units="IP")
    assert res[0].height == 366
    assert res.notices == [
        f"{f}: the temperatures of station(s) still are no populated climate in °F or °C "
        "(warmest month outside 40 °F to 40 °C, or coldest month above 30 °C); read as °F as "
        "declared"
    ]
