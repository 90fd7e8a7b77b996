"""Weather readers: strict parsing, rejects with line numbers, units, mapped layouts, hourly stamps.

Data files tests/data/dd_*.csv are invented (invented station names); line numbers below are
the physical lines of those files (header = line 1), read by hand.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pint
import polars as pl
import pytest

from screening.degree_days import DegreeDayCube
from screening.errors import InputError
from screening.weather import read_daily_weather, read_hourly_weather, read_mapped_daily

from .test_degree_days import YEAR, tmy_hourly_c

DATA = Path(__file__).parent / "data"
UREG = pint.UnitRegistry()


def reasons(rejects: pl.DataFrame) -> dict[int, tuple[str, str]]:
    return {r["line"]: (r["column"], r["reason"]) for r in rejects.iter_rows(named=True)}


def test_daily_rejects_with_line_numbers():
    weather, rejects = res = read_daily_weather(DATA / "dd_daily_defects.csv")
    assert weather.columns == ["station_id", "date", "t_min_f", "t_max_f", "t_mean_f", "_line"]
    assert weather.schema["date"] == pl.Date
    # kept: line 2 (25/33), line 6 (t_mean 50; line 7 is its identical duplicate), line 17 (BIRCH-2)
    assert weather["_line"].to_list() == [2, 6, 17]
    r = reasons(rejects)
    assert r[3] == ("t_min", "impossible values: t_min greater than t_max")
    assert r[4] == ("t_min", "not a number")
    assert r[5] == ("t_max", "impossible temperature: beyond ±140 °F")
    assert r[8][0] == "date" and "different values (lines 8, 9)" in r[8][1]
    assert r[9][0] == "date" and "different values (lines 8, 9)" in r[9][1]
    assert r[10] == ("date", "not a valid date (expected format %Y-%m-%d)")  # 2024-02-30
    assert r[11] == ("station_id", "station_id is empty")
    assert r[12] == ("t_min", "no usable temperature: needs t_min and t_max, or t_mean")
    assert r[13] == ("t_mean", "impossible values: t_mean outside [t_min, t_max]")
    assert r[14] == ("t_min", "impossible temperature: beyond ±140 °F")
    assert r[15] == ("t_max", "not a finite number")
    assert r[16] == ("date", "not a valid date (expected format %Y-%m-%d)")  # 01/12/2024: no guessing
    assert set(r) == set(range(3, 17)) - {6, 7}
    assert rejects.columns == ["file", "line", "column", "value", "reason"]
    assert rejects.filter(pl.col("line") == 3)["value"][0] == "t_min=30 > t_max=20"
    # the identical duplicate is dropped and reported, not silent
    assert any("dropped 1 duplicate row(s) identical to an earlier row (lines 7)" in n for n in res.notices)


def test_daily_si_conversion_against_pint(tmp_path):
    p = tmp_path / "si.csv"
    p.write_text(
        "station_id,date,t_min,t_max,t_mean\nS,2024-07-01,-40,20,\nS,2024-07-02,,,0\n"
        "S,2024-07-03,-61,10,\nS,2024-07-04,0,60.5,\n"
    )
    w, rej = read_daily_weather(p, units="SI")
    # pint as the reference for °C → °F (−40 °C = −40 °F, 20 °C = 68 °F, 0 °C = 32 °F)
    assert w["t_min_f"][0] == pytest.approx(UREG.Quantity(-40, "degC").to("degF").magnitude, abs=1e-12)
    assert w["t_max_f"][0] == pytest.approx(UREG.Quantity(20, "degC").to("degF").magnitude, abs=1e-12)
    assert w["t_mean_f"][1] == pytest.approx(UREG.Quantity(0, "degC").to("degF").magnitude, abs=1e-12)
    # ±60 °C limit applies to °C files (issue 3)
    assert reasons(rej) == {
        4: ("t_min", "impossible temperature: beyond ±60 °C"),
        5: ("t_max", "impossible temperature: beyond ±60 °C"),
    }
    with pytest.raises(ValueError, match="units must be 'IP' or 'SI'; got 'metric'"):
        read_daily_weather(p, units="metric")


def test_daily_structural_errors(tmp_path):
    p = tmp_path / "w.csv"
    p.write_text("station_id,date,t_low\nS,2024-01-01,3\n")
    with pytest.raises(InputError, match=r"w.csv, line 1: no temperature columns; expected t_min and t_max, or t_mean"):
        read_daily_weather(p)
    p.write_text("station_id,t_mean\nS,3\n")
    with pytest.raises(InputError, match="missing required column"):
        read_daily_weather(p)
    with pytest.raises(InputError, match="file not found"):
        read_daily_weather(tmp_path / "nope.csv")


def test_daily_mean_only_file_feeds_the_cube(tmp_path):
    p = tmp_path / "m.csv"
    # NWS Key West example as a daily mean: 29 °F → 36 HDD65
    p.write_text("station_id,date,t_mean\nK,2024-01-01,29\nK,2024-01-03,29\n")
    w, rej = read_daily_weather(p)
    assert rej.height == 0 and w["t_min_f"].null_count() == 2
    dd, days, miss = DegreeDayCube.from_daily(w, [65.0]).period_totals("K", ["2024-01-01"], ["2024-01-03"])
    assert dd[0, 0] == 72.0 and days[0] == 3 and miss[0] == 1


def test_mapped_daily_layout():
    mapping = {
        "STN_CODE": "station_id",
        "OBS_DAY": "date",
        "MAXTEMP_TENTHS_C": ("t_max", "0.1C"),
        "MINTEMP_TENTHS_C": ("t_min", "0.1C"),
    }
    w, rej = res = read_mapped_daily(DATA / "dd_mapped_summary.csv", mapping, date_format="%Y.%m.%d")
    # line 2: 20.0 °C / −5.0 °C → 68 / 23 °F (definition of the scales; pint agrees)
    assert w.rows() == [("QX-11", dt.date(2024, 1, 2), pytest.approx(23.0), pytest.approx(68.0), None, 2)]
    assert UREG.Quantity(-5.0, "degC").to("degF").magnitude == pytest.approx(23.0)
    r = reasons(rej)
    assert r[3] == ("MAXTEMP_TENTHS_C", "impossible temperature: beyond ±60 °C")  # 70.0 °C
    assert r[4][1] == "no usable temperature: needs t_min and t_max, or t_mean"
    assert r[5] == ("OBS_DAY", "not a valid date (expected format %Y.%m.%d)")
    assert any("ignored unknown column(s): REMARK" in n for n in res.notices)
    assert any("MAXTEMP_TENTHS_C→t_max [0.1C]" in n for n in res.notices)


def test_mapped_daily_errors(tmp_path):
    f = DATA / "dd_mapped_summary.csv"
    with pytest.raises(ValueError, match="mapping target 'tmax' .* is not one of"):
        read_mapped_daily(f, {"STN_CODE": "station_id", "OBS_DAY": "date", "MAXTEMP_TENTHS_C": "tmax"})
    with pytest.raises(ValueError, match="unknown temperature unit 'K'"):
        read_mapped_daily(f, {"STN_CODE": "station_id", "OBS_DAY": "date", "MAXTEMP_TENTHS_C": ("t_mean", "K")})
    with pytest.raises(ValueError, match="mapping must name t_min and t_max, or t_mean"):
        read_mapped_daily(f, {"STN_CODE": "station_id", "OBS_DAY": "date", "MAXTEMP_TENTHS_C": ("t_max", "0.1C")})
    with pytest.raises(ValueError, match="give exactly one of a 'station_id' mapping or station_id=..."):
        read_mapped_daily(f, {"OBS_DAY": "date", "MAXTEMP_TENTHS_C": ("t_mean", "0.1C")})
    with pytest.raises(InputError, match="missing required column"):
        read_mapped_daily(f, {"STN_CODE": "station_id", "DAY": "date", "MAXTEMP_TENTHS_C": ("t_mean", "0.1C")})
    # a single-station file without a station column
    w, _ = read_mapped_daily(
        f, {"OBS_DAY": "date", "MAXTEMP_TENTHS_C": ("t_mean", "0.1C")}, station_id="ONE", date_format="%Y.%m.%d"
    )
    assert w["station_id"].unique().to_list() == ["ONE"] and w.height == 2


def test_hourly_reader_stamps_and_rejects():
    h, rej = res = read_hourly_weather(DATA / "dd_hourly_small.csv")
    # 24:00 is the next day's 00:00 (line 4); "T" separator accepted (line 5)
    assert h["timestamp"].to_list()[:4] == [
        dt.datetime(2024, 1, 1, 1),
        dt.datetime(2024, 1, 1, 2),
        dt.datetime(2024, 1, 2, 0),
        dt.datetime(2024, 1, 2, 1),
    ]
    r = reasons(rej)
    assert r[6] == ("temperature", "not a number")
    assert r[7][0] == "timestamp" and "different values (lines 7, 8)" in r[7][1] and 8 in r
    assert 11 not in r  # −61 °F is within ±140 °F (a −61 °C reading would not be)
    assert r[12] == ("timestamp", "not a valid timestamp (expected YYYY-MM-DD HH:MM[:SS])")
    assert any("lines 10" in n for n in res.notices)  # identical duplicate


def test_hourly_reader_hour_ending_tmy_roundtrip(tmp_path):
    # Greensboro TMY3 written as hour-ending stamps 01:00 … 24:00 (the TMY convention, ref §3);
    # timestamps="end" puts every reading on its own date; integration HDD65 = 4050.4 (ref §7 [C])
    t = tmy_hourly_c("greensboro")
    day = pl.date_range(dt.date(YEAR, 1, 1), dt.date(YEAR, 12, 31), eager=True).cast(pl.String).to_numpy()
    stamps = [f"{d} {h:02d}:00" for d in day for h in range(1, 25)]
    p = tmp_path / "gso_hourly.csv"
    pl.DataFrame({"station_id": "GSO", "timestamp": stamps, "temperature": np.round(t.ravel(), 4)}).write_csv(p)
    h, rej = read_hourly_weather(p, units="SI", timestamps="end")
    assert rej.height == 0 and h.height == 8760
    assert h["timestamp"][0] == dt.datetime(YEAR, 1, 1, 0) and h["timestamp"][-1] == dt.datetime(YEAR, 12, 31, 23)
    cube = DegreeDayCube.from_hourly(h, [65.0])
    dd, days, miss = cube.period_totals("GSO", [f"{YEAR}-01-01"], [f"{YEAR}-12-31"])
    assert dd[0, 0] == pytest.approx(4050.4, abs=0.5) and miss[0] == 0
    with pytest.raises(ValueError, match="timestamps must be 'start' or 'end'; got 'middle'"):
        read_hourly_weather(p, timestamps="middle")
