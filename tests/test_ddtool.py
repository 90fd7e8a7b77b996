"""``degree_days_report``: the library function behind ``ddscreen degree-days``.

Check values: weather-service worked examples (NWS Key West, WRCC, NWS Burlington; docs/degree-days.md §1),
the pvlib TMY files (docs/degree-days.md §7 [C]), the UK fact-sheet example (§3), and hand sums over the
invented file tests/data/dd_daily_small.csv (spelled out beside each number).
"""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from screening.ddtool import COLUMNS, degree_days_report
from screening.degree_days import f_to_c
from screening.errors import InputError

from .test_degree_days import tmy_daily

DATA = Path(__file__).parent / "data"
SMALL = DATA / "dd_daily_small.csv"

# FERN-7 daily values at base 65 °F, by hand:
#   Jan 1–3, 15, 16, 31, Feb 1, Feb 29: (25+33)/2 = 29 → 36 HDD each (NWS Key West example)
#   Jan 4: (31+65)/2 = 48 → 17 HDD65, 2 HDD50 (WRCC example)
#   Jan 5–7: a 3-day gap, interpolated between (31, 65) and (53, 68): means 51.125, 54.25, 57.375
#            → 13.875 + 10.75 + 7.625 = 32.25 HDD65
#   Jan 8: (53+68)/2 = 60.5 → 4.5 HDD65, 4 with weather-service rounding (NWS Burlington example)
#   Jan 9: (66+90)/2 = 78 → 13 CDD65 (NWS Key West); Jan 10: (51+95)/2 = 73 → 8 CDD65, 13 CDD60 (WRCC)
#   Jan 11–14 (4 days), 17–30 (14), Feb 2–28 (27): long gaps, missing
JAN_HDD = 3 * 36 + 17 + 32.25 + 4.5 + 3 * 36  # 269.75
JAN_CDD = 13 + 8


def test_by_month_hand_sums():
    notes: list[str] = []
    t = degree_days_report(SMALL, "FERN-7", kind="both", notices=notes)
    assert t.columns == COLUMNS
    assert t["period_start"].to_list() == [dt.date(2024, 1, 1), dt.date(2024, 2, 1)]
    assert t["period_end"].to_list() == [dt.date(2024, 1, 31), dt.date(2024, 2, 29)]
    assert t["days"].to_list() == [31, 29]
    assert t["days_missing"].to_list() == [4 + 14, 27]
    assert t["hdd"].to_list() == pytest.approx([JAN_HDD, 2 * 36], abs=1e-9)
    assert t["cdd"].to_list() == pytest.approx([JAN_CDD, 0.0], abs=1e-9)
    assert t["method"].unique().to_list() == ["mean"] and t["base"][0] == 65.0 and t["unit"][0] == "°F·day"
    assert any("3 day(s) in gaps of ≤ 3 days filled" in n for n in notes)
    assert any("no data 2024-01-11 to 2024-01-14 (4 days)" in n for n in notes)


def test_by_day_and_bases_and_rounding():
    d = degree_days_report(SMALL, "FERN-7", by="day", kind="both", date_from="2024-01-04", date_to="2024-01-10")
    assert d["hdd"].to_list()[:1] == [17.0] and d["hdd"][4] == 4.5 and d["cdd"][5] == 13.0  # by hand (above)
    b50 = degree_days_report(SMALL, "FERN-7", by="day", base=50, date_from="2024-01-04", date_to="2024-01-04")
    assert b50["hdd"].to_list() == [2.0]  # WRCC example
    c60 = degree_days_report(
        SMALL, "FERN-7", by="day", base=60, kind="cdd", date_from="2024-01-10", date_to="2024-01-10"
    )
    assert c60["cdd"].to_list() == [13.0] and c60["hdd"].null_count() == 1  # WRCC example
    r = degree_days_report(SMALL, "FERN-7", by="day", rounding=True, date_from="2024-01-08", date_to="2024-01-08")
    assert r["hdd"].to_list() == [4.0]  # NWS Burlington
    y = degree_days_report(SMALL, "FERN-7", by="year", date_from="2024-01-01", date_to="2024-12-31")
    assert y["hdd"].to_list() == pytest.approx([JAN_HDD + 72]) and y["days"].to_list() == [366]
    assert y["days_missing"].to_list() == [366 - (12 + 3)]  # 12 dated rows with data + 3 filled days


def test_by_period_file():
    t = degree_days_report(SMALL, "FERN-7", by="period", periods_path=DATA / "dd_periods.csv", kind="both")
    # the MOSS-3 row is for another station; sums by hand (above)
    assert t["period_start"].to_list() == [dt.date(2024, 1, 1), dt.date(2024, 1, 4), dt.date(2024, 1, 11)]
    assert t["hdd"].to_list() == pytest.approx([108.0, 17 + 32.25 + 4.5, 5 * 36.0])  # Jan 15, 16, 31, Feb 1, 29
    assert t["cdd"].to_list() == pytest.approx([0.0, 21.0, 0.0])
    assert t["days"].to_list() == [3, 7, 50] and t["days_missing"].to_list() == [0, 0, 4 + 14 + 27]


def test_maxmin_method():
    # Met Office case II on Jan 4 (Tmax 65 ≤ Tb 65): Tb − Tm = 17 (ref §2); case IV on Jan 8
    # (53 < 65 < 68, Tm 60.5 < 65): (65 − 53)/2 − (68 − 65)/4 = 5.25
    t = degree_days_report(SMALL, "FERN-7", by="day", method="maxmin", date_from="2024-01-04", date_to="2024-01-08")
    assert t["hdd"][0] == 17.0 and t["hdd"][4] == 5.25 and t["method"][0] == "maxmin"


def test_tmy_greensboro_file_ip_and_si(tmp_path):
    # pvlib TMY3 Greensboro as a daily CSV: annual HDD65 3868.9 / CDD65 1370.5 by (max+min)/2 (ref §7 [C])
    p = tmp_path / "gso.csv"
    w = tmy_daily("greensboro", station="GSO").select(
        "station_id",
        pl.col("date").cast(pl.String),
        pl.col("t_min_f").round(6).alias("t_min"),
        pl.col("t_max_f").round(6).alias("t_max"),
    )
    w.write_csv(p)
    y = degree_days_report(p, "GSO", by="year", kind="both")
    assert y["hdd"][0] == pytest.approx(3868.9, abs=0.5) and y["cdd"][0] == pytest.approx(1370.5, abs=0.5)
    m = degree_days_report(p, "GSO", by="year", method="monthly-estimate")
    assert m["method"][0] == "monthly-estimate"
    assert m["hdd"][0] == pytest.approx(3868.9, rel=0.03)  # Erbs holds within 3 % here (ref §4: +1.9 %)
    # the same data in °C (24-h means): HDD18 2081.5 °C·day (ref §7 [C, mean24])
    q = tmp_path / "gso_c.csv"
    tmy_daily("greensboro", mean_only=True, station="GSO").select(
        "station_id",
        pl.col("date").cast(pl.String),
        pl.col("t_mean_f").map_batches(lambda s: pl.Series(np.round(f_to_c(s.to_numpy()), 9))).alias("t_mean"),
    ).write_csv(q)
    c = degree_days_report(q, "GSO", by="year", base=18, units="SI")
    assert c["hdd"][0] == pytest.approx(2081.5, abs=0.05)
    assert c["unit"][0] == "°C·day" and c["base"][0] == pytest.approx(18.0)


def test_normal_year(tmp_path):
    # constant 35 °F daily mean: 30 × 365 = 10,950 °F·day at base 65 (common practice, issue 2)
    dates = pl.date_range(dt.date(2001, 1, 1), dt.date(2004, 12, 31), eager=True)
    p = tmp_path / "const.csv"
    pl.DataFrame({"station_id": "C", "date": dates.cast(pl.String), "t_mean": 35.0}).write_csv(p)
    y = degree_days_report(p, "C", by="year", normal=True, kind="both")
    assert y["hdd"].to_list() == pytest.approx([10950.0]) and y["cdd"].to_list() == [0.0]
    assert y["normal_years"][0] == "2001-2004 (4 years)" and y["days"][0] == 365
    m = degree_days_report(p, "C", by="month", normal=True, date_from="2002-01-01", date_to="2003-12-31")
    assert m.height == 12 and m["hdd"][0] == pytest.approx(30 * 31) and m["hdd"][1] == pytest.approx(30 * 28)
    assert m["normal_years"][0] == "2002-2003 (2 years)"
    with pytest.raises(ValueError, match="no year with ≥ 95 % of its days for station 'C' in 1990–1991"):
        degree_days_report(p, "C", by="year", normal=True, date_from="1990-01-01", date_to="1991-12-31")


def test_hourly_method(tmp_path):
    # 7.5 °C held for 48 h at base 15.5 °C → 16 °C·day (UK fact sheet, ref §3)
    p = tmp_path / "h.csv"
    stamps = [f"2024-03-0{1 + h // 24} {h % 24:02d}:00" for h in range(48)]
    pl.DataFrame({"station_id": "H", "timestamp": stamps, "temperature": 7.5}).write_csv(p)
    t = degree_days_report(None, "H", method="hourly", hourly_path=p, units="SI", base=15.5, by="month")
    assert t["hdd"].to_list() == pytest.approx([16.0]) and t["days"][0] == 2 and t["method"][0] == "hourly"


def test_argument_errors(tmp_path):
    with pytest.raises(InputError, match=r"unknown station \(got 'NOPE'\); expected one of FERN-7, MOSS-3"):
        degree_days_report(SMALL, "NOPE")
    with pytest.raises(ValueError, match="kind must be one of hdd, cdd, both; got 'heat'"):
        degree_days_report(SMALL, "FERN-7", kind="heat")
    with pytest.raises(ValueError, match="method must be one of mean, maxmin, hourly, monthly-estimate; got 'x'"):
        degree_days_report(SMALL, "FERN-7", method="x")
    with pytest.raises(ValueError, match="by='period' and a periods file go together"):
        degree_days_report(SMALL, "FERN-7", by="period")
    with pytest.raises(ValueError, match="normal-year values are given by month or year; got by='day'"):
        degree_days_report(SMALL, "FERN-7", by="day", normal=True)
    with pytest.raises(ValueError, match="method 'hourly' needs an hourly readings file"):
        degree_days_report(SMALL, "FERN-7", method="hourly")
    with pytest.raises(ValueError, match="date_from must be a date YYYY-MM-DD; got '1/2/2024'"):
        degree_days_report(SMALL, "FERN-7", date_from="1/2/2024")
    with pytest.raises(ValueError, match="date_to 2024-01-01 is before date_from 2024-02-01"):
        degree_days_report(SMALL, "FERN-7", date_from="2024-02-01", date_to="2024-01-01")
    with pytest.raises(ValueError, match="base must be a number; got 'warm'"):
        degree_days_report(SMALL, "FERN-7", base="warm")
    p = tmp_path / "m.csv"
    p.write_text("station_id,date,t_mean\nK,2024-01-01,29\n")
    with pytest.raises(ValueError, match="method 'maxmin' needs t_min and t_max; station 'K' has only t_mean"):
        degree_days_report(p, "K", method="maxmin")
    bad = tmp_path / "periods.csv"
    bad.write_text("period_start,period_end\n2024-01-05,2024-01-01\n")
    with pytest.raises(InputError, match="line 2, column 'period_end': period_end before period_start"):
        degree_days_report(SMALL, "FERN-7", by="period", periods_path=bad)


def test_the_command_prints_degree_days_to_two_decimals(tmp_path):
    """``ddscreen degree-days`` prints what the method carries (2 decimals, ``ddtool.DECIMALS``),
    not floating-point noise: °C means of one decimal, converted through °F inside, summed."""
    import csv
    import io
    from .conftest import cli

    temps = [round(-3.7 + 0.9 * i % 17.3, 1) for i in range(31)]  # invented January, one decimal
    p = tmp_path / "w.csv"
    p.write_text(
        "station_id,date,t_mean\n" + "".join(f"WREN,2025-01-{d + 1:02d},{t}\n" for d, t in enumerate(temps)),
        encoding="utf-8",
    )
    r = cli(
        [
            "degree-days",
            "--weather",
            str(p),
            "--station",
            "WREN",
            "--units",
            "SI",
            "--base",
            "18",
            "--kind",
            "both",
            "--by",
            "month",
        ]
    )
    assert r.exit_code == 0, r.stderr
    (row,) = list(csv.DictReader(io.StringIO(r.stdout)))
    by_hand = sum(max(0.0, 18 - t) for t in temps)  # every day below 18 °C here
    assert float(row["hdd"]) == round(by_hand, 2)
    assert re.fullmatch(r"\d+(\.\d{1,2})?", row["hdd"]) and row["cdd"] in ("0.0", "0")
    assert row["base"] in ("18.0", "18")
    lib = degree_days_report(p, "WREN", units="SI", base=18, kind="hdd")  # the library function rounds too
    assert lib["hdd"][0] == round(by_hand, 2)
