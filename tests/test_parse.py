"""The column parsers read a value the same whether its column is all plain values or mixed.

parse.py reads values already in canonical form (a plain number, ``YYYY-MM-DD``, a listed word) by a
fast path and runs the full rules on the other rows only; these tests check each row of a mixed
column against the same value read alone (through the full rules).
"""

from __future__ import annotations

import datetime as dt

import polars as pl
import pytest

from screening import csvread
from screening.parse import AmbiguousDates, number_text, parse_bool, parse_choice, parse_date, parse_float

NUMBERS = ["12.5", "$1,855.76", "1,485", "12,5", "85%", "1 485", "1.485,5", None, "7", " 3 ", "12,5 €", "1’485"]
DATES = ["2025-10-01", "2025-02-30", "01/10/2025", "2025/10/4", "2025-10-01T00:00", "2025-10-01T13:00",
         "2025-10-01 note", "45000", None, " 2025-10-02 ", "31.12.24", "1850-01-01"]  # fmt: skip
WORDS = ["natural_gas", "Natural Gas", "fuel-oil", "coal", None, "electricity", " electricity"]
BOOLS = ["true", "false", "E", "Yes", " n ", "maybe", None, "1", ""]


# what the rules give for NUMBERS, DATES, WORDS and BOOLS (the readers before the fast paths were added)
NUMBER_TEXT_SHARE = ["12.5", "1855.76", "1485", "12,5", "0.85", "1 485", "1.485,5", None, "7", " 3 ", "12,5", "1’485"]
DATE_VALUES = [dt.date(2025, 10, 1), None, dt.date(2025, 10, 1), dt.date(2025, 10, 4), dt.date(2025, 10, 1), None,
               None, dt.date(2023, 3, 15), None, dt.date(2025, 10, 2), dt.date(2024, 12, 31), None]  # fmt: skip
WORD_VALUES = ["natural_gas", "natural_gas", "fuel_oil", None, None, "electricity", "electricity"]
BOOL_VALUES = [True, False, True, True, False, None, False, True, False]


def _alone(fn, values, **kw):
    """Each value parsed in a column of its own, the results stacked."""
    outs = [fn(pl.Series("c", [v], dtype=pl.String), **kw) for v in values]
    return [pl.concat([o[i] for o in outs]) for i in range(2)]


def _plain_around(values, plain):
    """The values between runs of a plain value (so the fast path and the rules both have rows)."""
    return [x for v in values for x in (plain, v, plain)]


@pytest.mark.parametrize(
    "kw",
    [
        {},
        {"money": True},
        {"share": True, "thousands": ","},
        {"decimal_comma": True, "thousands": "."},
        {"thousands": " "},
        {"thousands": "'"},
    ],
)
def test_number_text_mixed_column_reads_each_value_as_alone(kw):
    values = _plain_around(NUMBERS, "4.25")
    text, problem, counts = number_text(pl.Series("c", values, dtype=pl.String), **kw)
    alone_text, alone_problem = _alone(lambda s, **k: number_text(s, **k)[:2], values, **kw)
    assert text.to_list() == alone_text.to_list()
    assert problem.to_list() == alone_problem.to_list()
    totals = {"currency": 0, "percent": 0, "thousands": 0}
    for v in values:
        for k, n in number_text(pl.Series("c", [v], dtype=pl.String), **kw)[2].items():
            totals[k] += n
    assert counts == totals
    assert text.len() == problem.len() == len(values)
    if kw == {"share": True, "thousands": ","}:
        assert text.to_list()[1::3] == NUMBER_TEXT_SHARE and counts == {"currency": 0, "percent": 1, "thousands": 1}
        assert problem[4] == "a currency symbol in a column that is not an amount of money"
        assert problem[10] == "12,5: a decimal comma; set [reading] decimal_comma = true"


def test_number_text_plain_column_is_returned_as_written():
    s = pl.Series("quantity", ["47.26", "-3", None, "+4", " 5 "], dtype=pl.String)
    text, problem, counts = number_text(s)
    assert text.to_list() == s.to_list() and text.name == "quantity"
    assert problem.null_count() == 5 and problem.dtype == pl.String
    assert counts == {"currency": 0, "percent": 0, "thousands": 0}


def test_parse_float_plus_sign_removed_once():
    # the cast itself takes one '+' more (as before the fast paths: ``^\+`` removed one)
    v, p = parse_float(pl.Series("q", ["+4", "++4", " +2.5", "+++4", None], dtype=pl.String))
    assert v.to_list() == [4.0, 4.0, 2.5, None, None]
    assert p.to_list() == [None, None, None, "expected a number", None]


@pytest.mark.parametrize("bounds", [{}, {"min_date": dt.date(1900, 1, 1), "max_date": dt.date(2027, 1, 1)}])
def test_parse_date_mixed_column_reads_each_value_as_alone(bounds):
    values = _plain_around(DATES, "2024-03-01")
    v, p = parse_date(pl.Series("d", values, dtype=pl.String), date_order="dmy", **bounds)
    av, ap = _alone(parse_date, values, date_order="dmy", **bounds)
    assert v.to_list() == av.to_list()
    assert p.to_list() == ap.to_list()
    assert v.to_list()[1::3] == DATE_VALUES[:-1] + [None if bounds else dt.date(1850, 1, 1)]
    assert p[4] == "expected a date (YYYY-MM-DD)"  # 2025-02-30
    assert p[16].endswith("a time of day other than midnight cannot be read as a day; give the date only")
    assert p[19].endswith("with nothing after it: remove the text after the date")
    assert p[34] == ("date out of range; expected 1900-01-01 to 2027-01-01" if bounds else None)


def test_parse_date_order_is_told_by_the_slash_dates_among_iso_ones():
    s = pl.Series("d", ["2025-01-01", "13/01/2025", "2025-01-02", "01/02/2025"], dtype=pl.String)
    v, p = parse_date(s)
    assert v.to_list() == [dt.date(2025, 1, 1), dt.date(2025, 1, 13), dt.date(2025, 1, 2), dt.date(2025, 2, 1)]
    assert p.null_count() == 4
    with pytest.raises(AmbiguousDates, match="'01/02/2025'"):
        parse_date(pl.Series("d", ["2025-01-01", "01/02/2025", "2025-01-02", "03/04/2025"], dtype=pl.String))


def test_parse_choice_and_bool_mixed_columns_read_each_value_as_alone():
    words = _plain_around(WORDS, "propane")
    choices = ("natural_gas", "fuel_oil", "propane", "electricity")
    got = parse_choice(pl.Series("f", words, dtype=pl.String), choices, what="fuel")
    want = _alone(parse_choice, words, choices=choices, what="fuel")
    assert [g.to_list() for g in got] == [w.to_list() for w in want]
    assert got[0].to_list()[1::3] == WORD_VALUES and got[1][10] == "unknown fuel; expected one of " + ", ".join(choices)
    bools = _plain_around(BOOLS, "false")
    got = parse_bool(pl.Series("e", bools, dtype=pl.String))
    want = _alone(parse_bool, bools)
    assert [g.to_list() for g in got] == [w.to_list() for w in want]
    assert got[0].to_list()[1::3] == BOOL_VALUES and got[1].to_list()[16] == "expected true or false"


@pytest.mark.parametrize(
    "blank", [" ", "\t", "\u00a0", "\u3000", "\x0b"], ids=["space", "tab", "nbsp", "ideographic", "vtab"]
)
def test_fast_chunk_strips_blanks_around_fields_only_where_present(blank):
    header = ["building_id", "fuel"]
    plain = csvread._fast_chunk("B1,gas\nB2,oil\n", 2, "f.csv", ",", header, [0, 1], header)[0]
    padded = csvread._fast_chunk(f"B1{blank},gas\nB2,{blank}oil\n", 2, "f.csv", ",", header, [0, 1], header)[0]
    assert plain.equals(padded)
    inner = csvread._fast_chunk(f"B1,natural{blank}gas\n", 2, "f.csv", ",", header, [0, 1], header)[0]
    assert inner["fuel"].to_list() == [f"natural{blank}gas"]
