"""A manager's own files (issue 16): read-date bills, number formats, --date-order, and a
degree-day base given in the other unit. Invented buildings and values throughout.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import polars as pl
import pytest

from screening import config as cfgmod
from screening.errors import ConfigError
from screening.ingest import ReadOptions, read_buildings, read_readings

from .conftest import cli

D = dt.date
DATA = Path(__file__).parent / "data"


def _write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


# ---------------------------------------------------------------------------- read-date bills

READS = """building_id,fuel,meter_id,read_date,quantity,unit
B01,natural_gas,G1,2024-03-15,310,therm
B01,natural_gas,G1,2024-01-15,999,therm
B01,natural_gas,G1,2024-02-14,420,therm
B01,natural_gas,G2,2024-02-01,50,therm
B01,natural_gas,G2,2024-03-01,lots,therm
B01,natural_gas,G2,2024-04-01,40,therm
B02,fuel_oil,,2024-01-31,100,gal
B02,fuel_oil,,2024-02-29,80,gal
B02,fuel_oil,,2024-02-29,80,gal
"""


def test_read_dates_chain_per_meter_and_the_first_read_is_listed(tmp_path):
    ld = read_readings(_write(tmp_path, "reads.csv", READS))
    got = ld.df.select("building_id", "meter_id", "period_start", "period_end", "quantity").rows()
    assert got == [
        ("B01", "G1", D(2024, 1, 16), D(2024, 2, 14), 420.0),  # the day after the previous read
        ("B01", "G1", D(2024, 2, 15), D(2024, 3, 15), 310.0),  # rows out of order in the file
        ("B01", "G2", D(2024, 3, 2), D(2024, 4, 1), 40.0),  # the rejected row's read still ends a period
        ("B02", "", D(2024, 2, 1), D(2024, 2, 29), 80.0),  # an exact duplicate kept once
    ]
    rej = {(r["line"], r["column"]): r["reason"] for r in ld.rejects.iter_rows(named=True)}
    first = "first read of this meter: it opens the record"
    assert rej[(3, "read_date")].startswith(first) and rej[(5, "read_date")].startswith(first)
    assert rej[(8, "read_date")].startswith(first)
    assert rej[(6, "quantity")].startswith("expected a number")
    assert len(rej) == 4
    assert any("3 first read(s) of a meter only open the record" in n for n in ld.notices)
    # every row accounted for: accepted, rejected, or the one duplicate reported as kept once
    assert ld.df.height + ld.rejects.height + 1 == READS.count("\n") - 1
    assert any("1 exact duplicate reading row(s) kept once" in n for n in ld.notices)


def test_period_end_without_period_start_is_a_read_date_and_mapping_works(tmp_path):
    ld = read_readings(_write(tmp_path, "ends.csv", READS.replace("read_date", "period_end")))
    assert ld.df.height == 4 and ld.rejects.filter(pl.col("column") == "period_end").height == 3
    mapped = READS.replace("read_date", "Read Date")
    opts = ReadOptions(columns={"readings": {"Read Date": "read_date"}})
    assert read_readings(_write(tmp_path, "mapped.csv", mapped), opts).df.height == 4


def test_a_file_without_start_or_read_dates_still_names_period_start(tmp_path):
    from screening.errors import InputError

    p = _write(tmp_path, "none.csv", "building_id,fuel,quantity,unit\nB01,natural_gas,3,therm\n")
    with pytest.raises(InputError, match="column 'period_start': missing required column"):
        read_readings(p)


def test_a_run_on_read_date_bills(portfolio, tmp_path):
    df = pl.read_csv(portfolio.readings, infer_schema_length=0).drop("period_start").rename({"period_end": "read_date"})
    bills = tmp_path / "reads.csv"
    df.write_csv(bills)
    r = cli(
        [
            "run",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(bills),
            "--weather",
            str(portfolio.weather),
            "--as-of",
            portfolio.as_of,
            "--no-sheets",
            "--out",
            str(tmp_path / "o"),
            "--db",
            str(tmp_path / "s.duckdb"),
        ]
    )
    assert r.exit_code == 0, r.stderr
    rejects = pl.read_csv(tmp_path / "o" / "rejects.csv")
    firsts = rejects.filter(pl.col("reason").str.starts_with("first read of this meter"))
    assert firsts.height == portfolio.n_buildings  # one meter each
    ranking = pl.read_csv(tmp_path / "o" / "ranking.csv")
    assert ranking.filter(pl.col("building_id") == portfolio.wasteful)["tier"][0] != "Fix data first"


# ---------------------------------------------------------------------------- number formats

MONEY = """building_id,fuel,period_start,period_end,quantity,unit,cost
B01,natural_gas,2024-01-01,2024-01-31,"1,485",therm,"$1,855.76"
B01,natural_gas,2024-02-01,2024-02-29,1485.5,therm,$12
B01,natural_gas,2024-03-01,2024-03-31,$40,therm,10
B01,natural_gas,2024-04-01,2024-04-30,"1,48",therm,10
B01,natural_gas,2024-05-01,2024-05-31,"12,5",therm,10
"""


def test_separators_and_currency_without_the_setting_are_rejected_with_what_to_set(tmp_path):
    ld = read_readings(_write(tmp_path, "money.csv", MONEY))
    rej = {(r["line"], r["column"]): r["reason"] for r in ld.rejects.iter_rows(named=True)}
    assert rej[(2, "quantity")] == (
        '1,485: a thousands separator (or a decimal comma); set [reading] thousands = "," (or decimal_comma = true)'
    )
    assert rej[(2, "cost")] == '$1,855.76: a thousands separator; set [reading] thousands = ","'
    assert rej[(4, "quantity")] == "a currency symbol in a column that is not an amount of money"
    assert rej[(5, "quantity")] == "1,48: a decimal comma; set [reading] decimal_comma = true"  # not in threes
    assert rej[(6, "quantity")] == "12,5: a decimal comma; set [reading] decimal_comma = true"
    assert ld.df["cost"].to_list() == [12.0]  # the $ of a cost is removed
    assert any("cost: 1 currency symbol(s) removed" in n for n in ld.notices)


def test_separators_are_read_when_the_setting_says_so(tmp_path):
    ld = read_readings(_write(tmp_path, "money.csv", MONEY), ReadOptions(thousands=","))
    assert ld.df.select("quantity", "cost").rows() == [(1485.0, 1855.76), (1485.5, 12.0)]
    assert {r["line"] for r in ld.rejects.iter_rows(named=True)} == {4, 5, 6}
    assert any("quantity: 1 value(s) read with the thousands separator ','" in n for n in ld.notices)
    eu = (
        "building_id,fuel,period_start,period_end,quantity,unit,cost\n"
        'B01,natural_gas,2024-01-01,2024-01-31,1.485,therm,"1.855,76 €"\n'
        "B01,natural_gas,2024-02-01,2024-02-29,1 485,therm,3\n"
    )
    ld_eu = read_readings(_write(tmp_path, "eu.csv", eu), ReadOptions(decimal_comma=True, thousands="."))
    assert ld_eu.df.select("quantity", "cost").rows() == [(1485.0, 1855.76)]
    assert ld_eu.rejects["line"].to_list() == [3]
    ld_sp = read_readings(_write(tmp_path, "sp.csv", eu), ReadOptions(decimal_comma=True, thousands=" "))
    assert ld_sp.df["quantity"].to_list()[1] == 1485.0


def test_percent_signs_are_shares_only_where_a_share_is_meant(tmp_path):
    head = "building_id,name,station_id,use_type,floor_area,heating_fuel,heating_efficiency\n"
    p = _write(
        tmp_path, "b.csv", head + "B01,One,st,office,1000,natural_gas,85%\nB02,Two,st,office,50%,natural_gas,0.8\n"
    )
    ld = read_buildings(p)
    assert ld.df["heating_efficiency"].to_list() == [pytest.approx(0.85)]
    assert ld.rejects.rows() == [(str(p), 3, "floor_area", "50%", "a percent sign in a column that is not a share")]


@pytest.mark.parametrize("value", ["x", ";", ".,"])
def test_thousands_setting_is_checked(tmp_path, value):
    p = _write(tmp_path, "c.toml", f'[reading]\nthousands = "{value}"\n')
    with pytest.raises(ConfigError, match=r"\[reading\] thousands"):
        cfgmod.load(p)
    same = _write(tmp_path, "d.toml", '[reading]\nthousands = "."\n')
    with pytest.raises(ConfigError, match="not the decimal mark '.'"):
        cfgmod.load(same)
    assert cfgmod.load(_write(tmp_path, "e.toml", '[reading]\nthousands = ","\n'))["reading"]["thousands"] == ","


# ---------------------------------------------------------------------------- --date-order


def test_date_order_on_the_command_line(portfolio, tmp_path):
    slash = _write(
        tmp_path,
        "slash.csv",
        "building_id,fuel,period_start,period_end,quantity,unit\n"
        "B01,natural_gas,01/03/2024,10/03/2024,5,therm\nB01,natural_gas,11/03/2024,12/04/2024,5,therm\n",
    )
    base = [
        "validate",
        "--buildings",
        str(portfolio.buildings),
        "--readings",
        str(slash),
        "--weather",
        str(portfolio.weather),
    ]
    first = cli(base)
    assert first.exit_code == 2 and "date_order" in first.stdout
    ok = cli(base + ["--date-order", "dmy"])
    assert ok.exit_code == 0, ok.stdout
    assert "readings 2 rows accepted" in ok.stdout
    bad = cli(base + ["--date-order", "dym"])  # a fixed choice of the command line (an enum): a usage error
    assert bad.exit_code == 2 and "--date-order" in bad.stderr and "dmy" in bad.stderr


def test_degree_days_reads_slash_dates_with_date_order(tmp_path):
    src = pl.read_csv(DATA / "dd_daily_small.csv", infer_schema_length=0)
    slash = src.with_columns(pl.col("date").str.to_date().dt.strftime("%d/%m/%Y"))
    p = tmp_path / "w.csv"
    slash.write_csv(p)
    a = cli(["degree-days", "--weather", str(DATA / "dd_daily_small.csv"), "--station", "FERN-7"])
    b = cli(["degree-days", "--weather", str(p), "--station", "FERN-7", "--date-order", "dmy"])
    assert a.exit_code == 0 and b.exit_code == 0, b.stderr
    assert a.stdout == b.stdout


# ---------------------------------------------------------------------------- degree-day base in the other unit


def test_a_celsius_base_on_a_fahrenheit_file_is_named(tmp_path):
    r = cli(["degree-days", "--weather", str(DATA / "dd_daily_small.csv"), "--station", "FERN-7", "--base", "18"])
    assert r.exit_code == 0
    assert "warning: base 18 °F is outside 32-90 °F" in r.stderr
    assert "it looks like a °C base (18 °C = 64.4 °F): pass --base 64.4, or --units SI" in r.stderr
    ok = cli(["degree-days", "--weather", str(DATA / "dd_daily_small.csv"), "--station", "FERN-7", "--base", "65"])
    assert "warning" not in ok.stderr


def test_a_fahrenheit_base_on_a_celsius_file_is_named(tmp_path):
    src = pl.read_csv(DATA / "dd_daily_small.csv")
    c = src.with_columns(((pl.col(k) - 32) / 1.8).round(2) for k in ("t_min", "t_max") if k in src.columns)
    p = tmp_path / "c.csv"
    c.write_csv(p)
    r = cli(["degree-days", "--weather", str(p), "--station", "FERN-7", "--units", "SI", "--base", "65"])
    assert r.exit_code == 0
    assert "warning: base 65 °C is outside 0-32 °C" in r.stderr and "pass --base 18.3, or --units IP" in r.stderr


@pytest.mark.parametrize("kw", [{}, {"thousands": ","}, {"decimal_comma": True}, {"money": True, "share": True}])
def test_number_formats_of_no_values(kw):
    from screening.parse import number_text

    out, problem, counts = number_text(pl.Series("q", [], dtype=pl.String), **kw)
    assert (out.len(), problem.len(), out.dtype, problem.dtype) == (0, 0, pl.String, pl.String)
    assert counts == {"currency": 0, "percent": 0, "thousands": 0}
