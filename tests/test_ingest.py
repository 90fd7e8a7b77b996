"""screening.ingest and screening.parse: canonical frames, typed values, rejects with reasons.

Check values: SI→IP factors against pint (its ft, Btu_it and degF definitions, NIST SP 811);
spreadsheet serial dates against the 1900 date system (serial 1 = 1900-01-01 with the
fictitious 1900-02-29, so day 0 of the count is 1899-12-30; 45,292 = 2024-01-01, by hand:
(2024-01-01 − 1899-12-30) = 45,292 days). Line numbers are counted by hand.
"""

from __future__ import annotations

import datetime as dt

import pint
import polars as pl
import pytest

from screening import pipeline
from screening.errors import InputError
from screening.ingest import BUILDING_COLUMNS, FUELS, USE_TYPES, ReadOptions, read_buildings, read_readings
from screening.parse import (
    AmbiguousDates,
    detect_date_order,
    parse_bool,
    parse_choice,
    parse_date,
    parse_float,
    parse_int,
)

from .conftest import BUILDING_HEADER, READING_HEADER, write_rows

U = pint.UnitRegistry()


def _b(tmp_path, rows, header=BUILDING_HEADER, name="buildings.csv", **kw):
    return read_buildings(write_rows(tmp_path / name, header, rows), ReadOptions(**kw))


def _r(tmp_path, rows, header=READING_HEADER, name="readings.csv", **kw):
    return read_readings(write_rows(tmp_path / name, header, rows), ReadOptions(**kw))


ROW = ["X1", "Linden Hall", "alder-flats", "office", "10000", "1990", "2", "natural_gas", "0.8", "", "", "", ""]


# ----------------------------------------------------------------------------- buildings


def test_fixture_buildings_canonical_frame(portfolio):
    ld = read_buildings(portfolio.buildings)
    assert ld.rejects.height == 0 and ld.notices == []
    assert ld.df.height == portfolio.n_buildings
    canon = {c for _, c, *_ in BUILDING_COLUMNS}
    assert canon <= set(ld.df.columns)
    assert ld.df["building_id"].to_list() == sorted(ld.df["building_id"].to_list())
    s = ld.df.schema
    assert s["floor_area_ft2"] == pl.Float64 and s["year_built"] == pl.Int64 and s["stories"] == pl.Int64
    b1 = ld.df.row(0, named=True)
    assert (b1["building_id"], b1["floor_area_ft2"], b1["ua_total_btu_h_f"], b1["balance_point_f"]) == (
        "B01",
        42000.0,
        9000.0,
        58.0,
    )
    assert b1["wall_u_btu_h_ft2_f"] is None  # optional column absent → null, never a default
    assert set(ld.df["use_type"]) <= set(USE_TYPES) and set(ld.df["heating_fuel"]) <= set(FUELS)


def test_si_buildings_are_converted_to_ip(tmp_path):
    row = ["S1", "Metric House", "alder-flats", "school", "1000", "", "", "natural_gas", "", "500", "15", "", ""]
    ld = _b(tmp_path, [row], units="SI")
    r = ld.df.row(0, named=True)
    # pint: 1000 m² in ft²; 500 W/K in Btu_it/(h·°F) (a temperature difference); 15 °C in °F
    assert r["floor_area_ft2"] == pytest.approx(U.Quantity(1000, "m**2").to("ft**2").magnitude, rel=1e-12)
    assert r["ua_total_btu_h_f"] == pytest.approx(
        U.Quantity(500, "W/delta_degC").to("Btu_it/hour/delta_degF").magnitude, rel=1e-9
    )
    assert r["balance_point_f"] == pytest.approx(U.Quantity(15, "degC").to("degF").magnitude, rel=1e-12)  # 59 °F


def test_si_bounds_are_checked_in_file_units(tmp_path):
    # balance_point range 20–85 °F is −6.7–29.4 °C: 30 °C is out, 29 °C in (by hand: (85 − 32)/1.8 = 29.44)
    rows = [ROW[:9] + ["", "30", "", ""], ["X2"] + ROW[1:9] + ["", "29", "", ""]]
    ld = _b(tmp_path, rows, units="SI")
    assert ld.df["building_id"].to_list() == ["X2"]
    assert ld.rejects.row(0, named=True)["column"] == "balance_point"
    assert ld.rejects["reason"][0] == "expected a number ≥ -6.66667 and ≤ 29.4444"


def test_decimal_comma_and_semicolons(tmp_path):
    p = tmp_path / "b.csv"
    p.write_text(
        ";".join(BUILDING_HEADER) + "\n" + "X1;Ålbo Hus;alder-flats;office;12.345,5;1990;2;natural_gas;0,85;;;;\n",
        encoding="utf-8",
    )
    ld = read_buildings(p, ReadOptions(decimal_comma=True))
    r = ld.df.row(0, named=True)
    assert (r["name"], r["floor_area_ft2"], r["heating_efficiency"]) == ("Ålbo Hus", 12345.5, 0.85)


def test_decimal_comma_not_configured_is_a_reject(tmp_path):
    p = tmp_path / "b.csv"
    p.write_text(";".join(BUILDING_HEADER) + "\nX1;N;alder-flats;office;12345,5;;;natural_gas;;;;;\n")
    ld = read_buildings(p)
    assert ld.df.height == 0
    assert ld.rejects.select("line", "column", "value").row(0) == (2, "floor_area", "12345,5")


def test_every_bad_value_of_a_row_is_reported(tmp_path):
    bad = ["X 1", "", "alder-flats", "church", "-3", "1799", "0", "coal", "6.5", "0", "90", "", ""]
    ld = _b(tmp_path, [ROW, bad])
    assert ld.df["building_id"].to_list() == ["X1"]
    got = {r["column"]: r["reason"] for r in ld.rejects.iter_rows(named=True)}
    assert set(ld.rejects["line"]) == {3}
    assert got == {
        "building_id": "expected 1-64 letters, digits, '-', '_' or '.'",
        "name": "required value is empty",
        "use_type": "unknown use type; expected one of " + ", ".join(USE_TYPES),
        "floor_area": "expected a number > 0 and ≤ 1e+08",
        "year_built": f"expected a whole number ≥ 1800 and ≤ {dt.date.today().year}",
        "stories": "expected a whole number ≥ 1 and ≤ 200",
        "heating_fuel": "unknown heating fuel; expected one of " + ", ".join(FUELS),
        "heating_efficiency": "expected a number > 0 and ≤ 6",
        "ua_total": "expected a number > 0 and ≤ 1e+09",
        "balance_point": "expected a number ≥ 20 and ≤ 85",
    }


def test_duplicate_ids(tmp_path):
    other = list(ROW)
    other[4] = "20000"
    ld = _b(tmp_path, [ROW, ["Y1"] + ROW[1:], ROW, other])
    # X1 on lines 2, 4 (identical) and 5 (different area): all three X1 rows rejected, Y1 kept
    assert ld.df["building_id"].to_list() == ["Y1"]
    assert ld.rejects["line"].to_list() == [2, 4, 5]
    assert set(ld.rejects["reason"]) == {"building_id appears with different data on lines 2, 4, 5"}


def test_identical_duplicates_kept_once(tmp_path):
    ld = _b(tmp_path, [ROW, ROW])
    assert ld.df.height == 1 and ld.rejects.height == 0
    assert ld.notices == [f"{tmp_path / 'buildings.csv'}: 1 exact duplicate building row(s) kept once"]


def test_choices_are_normalised(tmp_path):
    row = list(ROW)
    row[3], row[7] = " Office ", "Natural-Gas"
    assert _b(tmp_path, [row]).df.select("use_type", "heating_fuel").row(0) == ("office", "natural_gas")


# ----------------------------------------------------------------------------- readings


def _rd(
    start="2024-01-01", end="2024-01-31", q="10", unit="therm", est="false", cost="12", bid="X1", fuel="natural_gas"
):
    return [bid, fuel, start, end, q, unit, est, cost]


def test_fixture_readings_canonical_frame(portfolio):
    ld = read_readings(portfolio.readings)
    assert ld.rejects.height == 0 and ld.df.height == portfolio.n_readings
    assert ld.df.schema["period_start"] == pl.Date and ld.df.schema["quantity"] == pl.Float64
    assert ld.df["estimated"].dtype == pl.Boolean and not ld.df["estimated"].any()
    assert (ld.df["period_end"] >= ld.df["period_start"]).all()


def test_readings_rejects(tmp_path):
    rows = [
        _rd(),  # 2 ok
        _rd("2024-02-10", "2024-02-01"),  # 3 end before start
        _rd("2024-03-01", "2024-03-31", q="-1"),  # 4 negative
        _rd("2024-04-01", "2024-04-30", q="nan"),  # 5 NaN
        _rd("2024-05-01", "2024-05-31", q="inf"),  # 6 inf
        _rd("2024-06-01", "2024-06-30", q="2e12"),  # 7 huge (> 1e12)
        _rd("1899-06-01", "1899-06-30"),  # 8 before 1900
        _rd("2024-02-30", "2024-03-31"),  # 9 no such day
        _rd("2024-07-01", "2024-07-31", est="perhaps"),  # 10 not a boolean
        _rd("2024-08-01", "2024-08-31", q="0"),  # 11 zero is a valid reading
        _rd("2024-09-01", "2024-09-30", q="1,234.5"),  # 12 thousands separator: not guessed
        _rd("2024-10-01", "2024-10-31", fuel="coal"),
    ]  # 13 unknown fuel
    ld = _r(tmp_path, rows)
    assert ld.df["period_start"].to_list() == [dt.date(2024, 1, 1), dt.date(2024, 8, 1)]
    got = [(r["line"], r["column"], r["value"], r["reason"]) for r in ld.rejects.iter_rows(named=True)]
    far = ld.rejects.filter(pl.col("line") == 8)["reason"][0]
    assert sorted(got) == sorted(
        [
            (3, "period_end", "2024-02-01", "period ends before it starts (2024-02-10)"),
            (4, "quantity", "-1", "expected a number ≥ 0 and ≤ 1e+12"),
            (5, "quantity", "nan", "expected a number ≥ 0 and ≤ 1e+12"),
            (6, "quantity", "inf", "expected a number ≥ 0 and ≤ 1e+12"),
            (7, "quantity", "2e12", "expected a number ≥ 0 and ≤ 1e+12"),
            (8, "period_start", "1899-06-01", far),
            (8, "period_end", "1899-06-30", far),
            (9, "period_start", "2024-02-30", "expected a date (YYYY-MM-DD)"),
            (10, "estimated", "perhaps", "expected true or false"),
            (12, "quantity", "1,234.5", '1,234.5: a thousands separator; set [reading] thousands = ","'),
            (13, "fuel", "coal", "unknown fuel; expected one of " + ", ".join(FUELS)),
        ]
    )
    assert far.startswith("date out of range; expected 1900-01-01 to ")


def test_readings_duplicates(tmp_path):
    rows = [_rd(), _rd(), _rd("2024-02-01", "2024-02-29"), _rd("2024-02-01", "2024-02-29", q="11")]
    ld = _r(tmp_path, rows)
    assert ld.df.height == 1 and "1 exact duplicate reading row(s) kept once" in ld.notices[0]
    assert ld.rejects.select("line", "column", "value").rows() == [(4, "quantity", "10.0"), (5, "quantity", "11.0")]
    assert ld.rejects["reason"].to_list() == [
        "same meter and period as line(s) 5 with different data",
        "same meter and period as line(s) 4 with different data",
    ]


def test_spreadsheet_and_slash_dates(tmp_path):
    rows = [
        _rd("45292", "45322"),  # serials: 2024-01-01 and 2024-01-31 (by hand, 1900 system)
        _rd("2024/02/01", "2024/02/29"),  # ISO with slashes
        _rd("2024-03-01T00:00:00", "2024-03-31 00:00"),
    ]  # a timestamp's date part
    ld = _r(tmp_path, rows)
    assert ld.rejects.height == 0
    assert ld.df.select("period_start", "period_end").rows() == [
        (dt.date(2024, 1, 1), dt.date(2024, 1, 31)),
        (dt.date(2024, 2, 1), dt.date(2024, 2, 29)),
        (dt.date(2024, 3, 1), dt.date(2024, 3, 31)),
    ]


def test_day_month_order(tmp_path):
    # 13/01/2024 can only be day-first; 01/13/2024 only month-first
    assert _r(tmp_path, [_rd("13/01/2024", "31/01/2024")]).df["period_start"][0] == dt.date(2024, 1, 13)
    assert _r(tmp_path, [_rd("01/13/2024", "01/31/2024")]).df["period_start"][0] == dt.date(2024, 1, 13)
    amb = [_rd("2024-01-01", "2024-01-31"), _rd("02/03/2024", "03/03/2024")]
    with pytest.raises(
        InputError,
        match=r"readings\.csv, line 3, column 'period_start': dates like '02/03/2024' "
        r"could be day/month or month/day",
    ):
        _r(tmp_path, amb)
    assert _r(tmp_path, amb, date_order="dmy").df["period_start"][1] == dt.date(2024, 3, 2)
    assert _r(tmp_path, amb, date_order="mdy").df["period_start"][1] == dt.date(2024, 2, 3)


# ----------------------------------------------------------------------------- parse.py directly


def test_parse_float_bounds_and_specials():
    s = pl.Series(["1", "+2.5", " 3 ", None, "NaN", "-inf", "1e309", "abc", "0"])
    v, p = parse_float(s, min_value=0, min_exclusive=True, max_value=10)
    assert v.to_list()[:3] == [1.0, 2.5, 3.0]
    assert p.to_list() == [None] * 4 + ["expected a number > 0 and ≤ 10"] * 5


def test_parse_int_rejects_fractions():
    v, p = parse_int(pl.Series(["12", "12.0", "12.5"]))
    assert v.to_list() == [12, 12, None] and p.to_list() == [None, None, "expected a whole number"]


def test_parse_bool_words():
    v, p = parse_bool(pl.Series(["TRUE", "no", "E", "a", "1", None, "sometimes"]))
    assert v.to_list() == [True, False, True, False, True, False, None]
    assert p.to_list() == [None] * 6 + ["expected true or false"]


def test_parse_choice():
    v, p = parse_choice(pl.Series(["Fuel Oil", "fuel-oil", "oil"]), FUELS, what="fuel")
    assert v.to_list() == ["fuel_oil", "fuel_oil", None]
    assert p[2] == "unknown fuel; expected one of " + ", ".join(FUELS)


def test_detect_date_order_and_ambiguity():
    assert detect_date_order(pl.Series(["13/01/2024", "01/02/2024"])) == "dmy"
    assert detect_date_order(pl.Series(["01/13/2024", "01/02/2024"])) == "mdy"
    assert detect_date_order(pl.Series(["01/02/2024"])) is None
    with pytest.raises(AmbiguousDates, match=r"dates like '01/02/2024' could be day/month or month/day"):
        parse_date(pl.Series(["01/02/2024"]))


def test_parse_date_two_digit_years_and_range():
    v, p = parse_date(
        pl.Series(["31.12.23", "1.2.2024"]),
        date_order="dmy",
        min_date=dt.date(2024, 1, 1),
        max_date=dt.date(2030, 1, 1),
    )
    assert v.to_list() == [None, dt.date(2024, 2, 1)]
    assert p.to_list() == ["date out of range; expected 2024-01-01 to 2030-01-01", None]


def test_validate_reads_without_store(portfolio, tmp_path):
    # read_file is the check of one file: no database is created
    ld = pipeline.read_file("weather", str(portfolio.weather), ReadOptions())
    assert ld.df.height == portfolio.n_weather and ld.rejects.height == 0
    assert not any(tmp_path.rglob("*.duckdb"))


def test_nan_and_infinite_dates_are_rejected_not_crashing():
    # found by tests/test_fuzz.py: "NAN" parsed as a float NaN and crashed the serial-date path
    from screening.parse import parse_date

    v, p = parse_date(pl.Series(["NAN", "inf", "-1e300", "45292"]))
    assert v.to_list()[:3] == [None, None, None]
    assert all(x is not None for x in p.to_list()[:3])
    assert str(v[3]) == "2024-01-01"  # spreadsheet serial 45292, 1900 date system (by hand)


def test_a_file_is_hashed_once_while_it_is_unchanged(tmp_path, monkeypatch):
    import time

    f = tmp_path / "r.csv"
    f.write_text("a,b\n1,2\n")
    hashed: list[str] = []
    from screening import published

    real = published.file_sha256  # the bytes' digest, which pipeline.file_sha256 remembers
    monkeypatch.setattr(published, "file_sha256", lambda src: hashed.append(src) or real(src))
    first = pipeline.file_sha256(f)
    assert pipeline.file_sha256(f) == first and len(hashed) == 2  # just written: not remembered (racy)
    monkeypatch.setattr(pipeline, "RACY_NS", -(10**12))  # as if written long ago
    assert pipeline.file_sha256(f) == first and pipeline.file_sha256(f) == first and len(hashed) == 3
    time.sleep(0.05)
    f.write_text("a,b\n1,3\n")  # the same size, other bytes: hashed again
    assert pipeline.file_sha256(f) != first and len(hashed) == 4


def _duplicates_in_one_pass(good: pl.DataFrame, label: str):
    """The rule of ``ingest.reading_duplicates`` written plainly over every row: exact duplicates kept once, then
    every row of a key still twice rejected (the reference the faster version is checked against)."""
    from screening import ingest

    n = good.height
    good = good.unique(subset=ingest.READING_DATA, keep="first", maintain_order=True)
    conflict = good.filter(pl.struct(ingest.READING_KEY).is_duplicated())
    return (
        good.filter(~pl.struct(ingest.READING_KEY).is_duplicated()),
        sorted(conflict["_line"].to_list()),
        n - good.height,
    )


def test_reading_duplicates_compare_only_rows_whose_key_repeats():
    """Exact repeats, conflicting repeats and a key three times, among rows given once: the
    kept rows (in line order), the rejected lines and the count of exact repeats are those of the plain rule."""
    from hypothesis import given, settings
    from hypothesis import strategies as st

    from screening import ingest

    row = st.tuples(
        st.sampled_from(["B1", "B2"]),
        st.sampled_from(["gas", "oil"]),
        st.sampled_from(["", "m1"]),  # (a key has no nulls here: a missing meter is "")
        st.sampled_from([dt.date(2025, 1, 1), dt.date(2025, 2, 1)]),
        st.sampled_from([1.0, 2.0, None]),
        st.booleans(),
    )

    @settings(max_examples=200, deadline=None)
    @given(rows=st.lists(row, min_size=1, max_size=25))
    def check(rows):
        good = pl.DataFrame(
            {
                "building_id": [r[0] for r in rows],
                "fuel": [r[1] for r in rows],
                "meter_id": pl.Series([r[2] for r in rows], dtype=pl.String),
                "period_start": [r[3] for r in rows],
                "period_end": [r[3] + dt.timedelta(days=30) for r in rows],
                "quantity": pl.Series([r[4] for r in rows], dtype=pl.Float64),
                "unit": ["therm"] * len(rows),
                "estimated": [r[5] for r in rows],
                "cost": pl.Series([None] * len(rows), dtype=pl.Float64),
                "_line": list(range(2, len(rows) + 2)),
            }
        )
        kept, rejects, n_exact = ingest.reading_duplicates(good, "r.csv")
        want_kept, want_lines, want_exact = _duplicates_in_one_pass(good, "r.csv")
        assert kept.equals(want_kept)
        assert sorted(rejects["line"].to_list()) == want_lines
        assert n_exact == want_exact

    check()
