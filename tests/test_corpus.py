"""The bad-input corpus: every case states its documented behaviour and is checked against it.

Behaviours (issue 2 "Bad input", issue 9 "Hardening"; README input contract):

* ``structural`` — the run stops before anything is written: exit code 2, one
  ``ddscreen: error:`` line naming the file (and line/column where it applies) and what was
  expected, no traceback, every table of the database holds the same number of rows as before;
* ``row`` — the row is rejected with file, line, column, value and reason (in ``rejects.csv``
  and the database) and the rest of the run goes on;
* ``accepted`` — messy but well-defined input (BOM, semicolons, Latin-1, blank lines, repeated
  headers, quoted newlines, spreadsheet dates, …) reads exactly like the clean file.

The cases are generated from the shared fixture portfolio (tests/conftest.py), so each is a
small, readable change to known-good files; line numbers are counted from those files (line 1
is the header). docs/reliability.md "Reliability" reports the figures.
"""

from __future__ import annotations

import re
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import polars as pl
import pytest

from screening import pipeline, units
from screening.errors import InputError
from screening.ingest import ReadOptions

from .conftest import (
    BUILDING_HEADER,
    READING_HEADER,
    WEATHER_HEADER,
    cli,
    portfolio_text,
    table_counts,
    write_portfolio,
)

KINDS = ("buildings", "readings", "weather")


@dataclass(frozen=True)
class Case:
    id: str
    file: str  # buildings | readings | weather
    behaviour: str  # structural | row | accepted
    doc: str  # the documented behaviour, in words
    # structural / accepted: a whole new file from the clean text; row: rows appended to the clean file
    make: Callable[[str], str | bytes] | None = None
    append: tuple[str, ...] = ()
    # structural: message pattern (after the file name), line or None, column or None
    message: str = ""
    line: int | None = None
    column: str | None = None
    # row: expected rejects as (appended row number k ≥ 1 or absolute line as -n, column, reason pattern)
    rejects: tuple[tuple[int, str, str], ...] = ()
    opts: dict = field(default_factory=dict)
    notice: str | None = None  # accepted: a pattern one notice must match


def _lines(kind: str) -> list[str]:
    return portfolio_text()[kind].splitlines()


def _swap_header(kind, old, new):
    return lambda t: t.replace(old, new, 1)


B_ROW = "{id},Case Hall,alder-flats,office,{area},1990,2,natural_gas,0.8,,,,"
R_ROW = "{b},natural_gas,{s},{e},{q},therm,false,10"
W_ROW = "alder-flats,{d},{lo},{hi}"


def b(id_="C01", area="10000", **kw):
    row = dict(zip(BUILDING_HEADER, B_ROW.format(id=id_, area=area).split(",")))
    row.update(kw)
    return ",".join(row[c] for c in BUILDING_HEADER)


def r(b_="B01", s="2025-02-01", e="2025-02-28", q="100", **kw):
    row = dict(zip(READING_HEADER, R_ROW.format(b=b_, s=s, e=e, q=q).split(",")))
    row.update(kw)
    return ",".join(row[c] for c in READING_HEADER)


def w(d="2025-01-05", lo="20", hi="30", **kw):
    row = dict(zip(WEATHER_HEADER, W_ROW.format(d=d, lo=lo, hi=hi).split(",")))
    row.update(kw)
    return ",".join(row[c] for c in WEATHER_HEADER)


def _fixture_line(kind, prefix) -> int:
    """Line number (1 = header) of the first fixture line starting with ``prefix``."""
    return next(i + 1 for i, ln in enumerate(_lines(kind)) if ln.startswith(prefix))


NUM = r"expected a number"
STRUCTURAL = [
    # ---- buildings
    Case(
        "b_empty_file",
        "buildings",
        "structural",
        "an empty file is unreadable",
        make=lambda t: b"",
        message="file is empty; expected a header line and data rows",
        line=1,
    ),
    Case(
        "b_blank_lines_only",
        "buildings",
        "structural",
        "blank lines only count as empty",
        make=lambda t: "\n\n   \n\t\n",
        message="file is empty",
        line=1,
    ),
    Case(
        "b_header_only",
        "buildings",
        "structural",
        "a header without data rows",
        make=lambda t: t.splitlines()[0] + "\n",
        message="no data rows; expected at least one data row",
        line=2,
    ),
    Case(
        "b_missing_column",
        "buildings",
        "structural",
        "a required column is missing",
        make=lambda t: (
            "\n".join(",".join(x for i, x in enumerate(ln.split(",")) if i != 4) for ln in t.splitlines()) + "\n"
        ),
        message="missing required column; expected columns building_id, name, station_id, use_type, floor_area",
        line=1,
        column="floor_area",
    ),
    Case(
        "b_renamed_column",
        "buildings",
        "structural",
        "a renamed required column is missing (no guessing)",
        make=_swap_header("buildings", "floor_area", "gross_area_ft2"),
        message="missing required column",
        line=1,
        column="floor_area",
    ),
    Case(
        "b_duplicate_column",
        "buildings",
        "structural",
        "a column name twice",
        make=_swap_header("buildings", ",address,", ",name,"),
        message="column name appears twice; expected each column once",
        line=1,
        column="name",
    ),
    Case(
        "b_binary_nul",
        "buildings",
        "structural",
        "binary garbage with NUL bytes",
        make=lambda t: bytes(range(256)) * 8,
        message=r"file is not text \(contains NUL bytes\)",
        line=1,
    ),
    Case(
        "b_binary_undecodable",
        "buildings",
        "structural",
        "bytes that are neither UTF-8 nor cp1252",
        make=lambda t: b"building_id,name\n\x81\x8d\x8f\x90\x9d\n",
        message="file is neither UTF-8 nor Latin-1/cp1252 text",
        line=2,
    ),
    Case(
        "b_unclosed_quote",
        "buildings",
        "structural",
        "a quote opened and never closed swallows the file",
        make=lambda t: t.replace("Tansy Court Flats", '"Tansy Court Flats'),
        message='a quoted field is never closed; expected a closing "',
        line=3,
    ),
    Case("b_not_found", "buildings", "structural", "a path that does not exist", make=None, message="file not found"),
    Case(
        "b_folder",
        "buildings",
        "structural",
        "a folder instead of a file",
        make=None,
        message="is a folder, not a file",
    ),
    # ---- readings
    Case("r_empty_file", "readings", "structural", "an empty file", make=lambda t: "", message="file is empty", line=1),
    Case(
        "r_header_only",
        "readings",
        "structural",
        "a header without data rows",
        make=lambda t: t.splitlines()[0] + "\n\n",
        message="no data rows",
        line=2,
    ),
    Case(
        "r_missing_quantity",
        "readings",
        "structural",
        "the quantity column is missing",
        make=_swap_header("readings", "quantity", "amount"),
        message="missing required column",
        line=1,
        column="quantity",
    ),
    Case(
        "r_duplicate_column",
        "readings",
        "structural",
        "the unit column twice",
        make=_swap_header("readings", "estimated", "UNIT"),
        message="column name appears twice",
        line=1,
        column="UNIT",
    ),
    Case(
        "r_ambiguous_dates",
        "readings",
        "structural",
        "day/month order cannot be told and is not configured",
        make=lambda t: t.replace("2023-02-01", "01/02/2023"),
        message="dates like '01/02/2023' could be day/month or month/day",
        line=5,
        column="period_start",
    ),
    Case(
        "r_binary",
        "readings",
        "structural",
        "a zip archive instead of CSV",
        make=lambda t: b"PK\x03\x04\x14\x00\x00\x00\x08\x00" + bytes(100),
        message="file is not text",
        line=1,
    ),
    # ---- weather
    Case(
        "w_empty_file",
        "weather",
        "structural",
        "an empty file",
        make=lambda t: b"\xef\xbb\xbf",
        message="file is empty",
        line=1,
    ),
    Case(
        "w_header_only",
        "weather",
        "structural",
        "a header without data rows",
        make=lambda t: t.splitlines()[0] + "\n",
        message="no data rows",
        line=2,
    ),
    Case(
        "w_missing_date",
        "weather",
        "structural",
        "the date column is missing",
        make=_swap_header("weather", "date", "day"),
        message="missing required column",
        line=1,
        column="date",
    ),
    Case(
        "w_no_temperatures",
        "weather",
        "structural",
        "neither t_min with t_max nor t_mean",
        make=_swap_header("weather", "t_min,t_max", "low,high"),
        message="no temperature columns; expected t_min and t_max, or t_mean",
        line=1,
    ),
    Case(
        "w_binary_png",
        "weather",
        "structural",
        "an image instead of CSV",
        make=lambda t: b"\x89PNG\r\n\x1a\n" + bytes(64),
        message="file is not text",
        line=3,
    ),
]

ROWS = [
    # ---- buildings (each case appends rows with its own new ids; 7 fixture lines → first appended row is line 8)
    Case(
        "b_area_text",
        "buildings",
        "row",
        "non-numeric floor area",
        append=(b("C01", "12k"),),
        rejects=((1, "floor_area", NUM),),
    ),
    Case(
        "b_area_zero",
        "buildings",
        "row",
        "zero floor area",
        append=(b("C02", "0"),),
        rejects=((1, "floor_area", r"expected a number > 0"),),
    ),
    Case(
        "b_area_negative",
        "buildings",
        "row",
        "negative floor area",
        append=(b("C03", "-500"),),
        rejects=((1, "floor_area", r"> 0"),),
    ),
    Case(
        "b_area_huge",
        "buildings",
        "row",
        "floor area beyond 1e8 ft²",
        append=(b("C04", "1e12"),),
        rejects=((1, "floor_area", r"≤ 1e\+08"),),
    ),
    Case(
        "b_area_nan", "buildings", "row", "NaN floor area", append=(b("C05", "NaN"),), rejects=((1, "floor_area", NUM),)
    ),
    Case(
        "b_area_inf",
        "buildings",
        "row",
        "infinite floor area",
        append=(b("C06", "inf"),),
        rejects=((1, "floor_area", NUM),),
    ),
    Case(
        "b_unknown_use",
        "buildings",
        "row",
        "use type not in the list",
        append=(b("C07", use_type="chapel"),),
        rejects=((1, "use_type", r"unknown use type; expected one of office"),),
    ),
    Case(
        "b_unknown_fuel",
        "buildings",
        "row",
        "heating fuel not in the list",
        append=(b("C08", heating_fuel="peat"),),
        rejects=((1, "heating_fuel", r"unknown heating fuel"),),
    ),
    Case(
        "b_year_too_old",
        "buildings",
        "row",
        "year built before 1800",
        append=(b("C09", year_built="1700"),),
        rejects=((1, "year_built", r"≥ 1800"),),
    ),
    Case(
        "b_year_future",
        "buildings",
        "row",
        "year built after this year",
        append=(b("C10", year_built="2999"),),
        rejects=((1, "year_built", r"≤ \d{4}"),),
    ),
    Case(
        "b_stories_zero",
        "buildings",
        "row",
        "zero stories",
        append=(b("C11", stories="0"),),
        rejects=((1, "stories", r"≥ 1"),),
    ),
    Case(
        "b_efficiency_high",
        "buildings",
        "row",
        "efficiency above a COP of 6",
        append=(b("C12", heating_efficiency="7.5"),),
        rejects=((1, "heating_efficiency", r"≤ 6"),),
    ),
    Case(
        "b_id_path",
        "buildings",
        "row",
        "building id with path characters",
        append=(b("../etc/C13"),),
        rejects=((1, "building_id", r"expected 1-64 letters, digits"),),
    ),
    Case(
        "b_id_too_long",
        "buildings",
        "row",
        "building id of 65 characters",
        append=(b("C" * 65),),
        rejects=((1, "building_id", r"1-64"),),
    ),
    Case(
        "b_name_empty",
        "buildings",
        "row",
        "required name left empty",
        append=(b("C15", name=""),),
        rejects=((1, "name", r"required value is empty"),),
    ),
    Case(
        "b_extra_field",
        "buildings",
        "row",
        "a row with one field too many",
        append=(b("C16") + ",surplus",),
        rejects=((1, "", r"expected 13 fields, found 14"),),
    ),
    Case(
        "b_duplicate_id",
        "buildings",
        "row",
        "one id twice with different data: both rows rejected",
        append=(b("D01", "10000"), b("D01", "20000")),
        rejects=(
            (1, "building_id", r"appears with different data on lines"),
            (2, "building_id", r"appears with different data on lines"),
        ),
    ),
    Case(
        "b_unknown_station",
        "buildings",
        "row",
        "a station the weather file does not have",
        append=(b("C18", station_id="gull-hollow"),),
        rejects=((1, "station_id", r"unknown station"),),
    ),
    # ---- readings (B01…B06 in 2025 months after the fixture's last period; 157 fixture lines)
    Case(
        "r_negative",
        "readings",
        "row",
        "negative quantity",
        append=(r(q="-5"),),
        rejects=((1, "quantity", r"expected a number ≥ 0"),),
    ),
    Case(
        "r_end_before_start",
        "readings",
        "row",
        "period ends before it starts",
        append=(r(s="2025-03-31", e="2025-03-01"),),
        rejects=((1, "period_end", r"period ends before it starts"),),
    ),
    Case(
        "r_unknown_unit",
        "readings",
        "row",
        "a unit not in units.csv (found while converting)",
        append=(r(s="2025-04-01", e="2025-04-30", unit="furlong"),),
        rejects=((1, "unit", r"unknown unit"),),
    ),
    Case(
        "r_unit_of_other_fuel",
        "readings",
        "row",
        "gallons of natural gas",
        append=(r(s="2025-05-01", e="2025-05-31", unit="gal"),),
        rejects=((1, "unit", r"unit gal is not a unit of natural_gas"),),
    ),
    Case(
        "r_unknown_fuel",
        "readings",
        "row",
        "fuel not in the list",
        append=(r(fuel="coal"),),
        rejects=((1, "fuel", r"unknown fuel"),),
    ),
    Case(
        "r_unknown_building",
        "readings",
        "row",
        "a reading for a building not in the buildings file",
        append=(r("B77", s="2024-01-01", e="2024-01-31"),),
        rejects=((1, "building_id", r"unknown building"),),
    ),
    Case(
        "r_date_too_early",
        "readings",
        "row",
        "a date before 1900",
        append=(r(s="1850-01-01", e="1850-01-31"),),
        rejects=((1, "period_start", r"date out of range"), (1, "period_end", r"date out of range")),
    ),
    Case(
        "r_date_too_late",
        "readings",
        "row",
        "a date more than a year ahead",
        append=(r(s="2230-01-01", e="2230-01-31"),),
        rejects=((1, "period_start", r"date out of range"), (1, "period_end", r"date out of range")),
    ),
    Case(
        "r_no_such_day",
        "readings",
        "row",
        "30 February",
        append=(r(s="2025-02-30", e="2025-03-29"),),
        rejects=((1, "period_start", r"expected a date \(YYYY-MM-DD\)"),),
    ),
    Case(
        "r_date_trailing_text",
        "readings",
        "row",
        "a date with letters after it (issue 18)",
        append=(r(s="2025-03-01xyz", e="2025-03-31"),),
        rejects=((1, "period_start", r"with nothing after it: remove the text after the date"),),
    ),
    Case(
        "r_date_extra_digits",
        "readings",
        "row",
        "a date with two digits too many (issue 18)",
        append=(r(s="2025-04-01", e="2025-04-3099"),),
        rejects=((1, "period_end", r"with nothing after it: remove the text after the date"),),
    ),
    Case(
        "r_date_with_note",
        "readings",
        "row",
        "a date followed by a note (issue 18)",
        append=(r(s="2025-05-01", e="2025-05-31 (estimated)"),),
        rejects=((1, "period_end", r"with nothing after it: remove the text after the date"),),
    ),
    Case(
        "r_date_time_of_day",
        "readings",
        "row",
        "a timestamp other than midnight (issue 18)",
        append=(r(s="2025-06-01 08:30", e="2025-06-30"),),
        rejects=((1, "period_start", r"a time of day other than midnight cannot be read as a day"),),
    ),
    Case("r_quantity_nan", "readings", "row", "NaN quantity", append=(r(q="nan"),), rejects=((1, "quantity", NUM),)),
    Case(
        "r_quantity_inf",
        "readings",
        "row",
        "infinite quantity",
        append=(r(q="-Infinity"),),
        rejects=((1, "quantity", NUM),),
    ),
    Case(
        "r_quantity_huge",
        "readings",
        "row",
        "quantity beyond 1e12",
        append=(r(q="5e12"),),
        rejects=((1, "quantity", r"≤ 1e\+12"),),
    ),
    Case(
        "r_quantity_text",
        "readings",
        "row",
        "quantity in words",
        append=(r(q="twelve"),),
        rejects=((1, "quantity", NUM),),
    ),
    Case(
        "r_bad_estimated",
        "readings",
        "row",
        "estimated neither true nor false",
        append=(r(estimated="maybe"),),
        rejects=((1, "estimated", r"expected true or false"),),
    ),
    Case(
        "r_unit_empty",
        "readings",
        "row",
        "required unit left empty",
        append=(r(unit=""),),
        rejects=((1, "unit", r"required value is empty"),),
    ),
    Case(
        "r_missing_field",
        "readings",
        "row",
        "a row one field short",
        append=("B01,natural_gas,2025-02-01",),
        rejects=((1, "", r"expected 8 fields, found 3"),),
    ),
    Case(
        "r_conflicting_duplicate",
        "readings",
        "row",
        "same meter and period as an existing reading, other quantity: both rows rejected",
        append=(r("B05", s="2024-03-01", e="2024-03-31", q="1"),),
        rejects=(
            (-_fixture_line("readings", "B05,natural_gas,2024-03-01"), "quantity", r"same meter and period"),
            (1, "quantity", r"same meter and period as line"),
        ),
    ),
    # ---- weather (2025 dates after the fixture's last day; 1647 fixture lines)
    Case(
        "w_min_above_max",
        "weather",
        "row",
        "t_min above t_max",
        append=(w(lo="40", hi="30"),),
        rejects=((1, "t_min", r"t_min greater than t_max"),),
    ),
    Case(
        "w_impossible_heat",
        "weather",
        "row",
        "a 200 °F day",
        append=(w(d="2025-01-06", hi="200"),),
        rejects=((1, "t_max", r"beyond ±140 °F"),),
    ),
    Case(
        "w_nan",
        "weather",
        "row",
        "NaN temperature",
        append=(w(d="2025-01-07", lo="nan"),),
        rejects=((1, "t_min", r"not a finite number"),),
    ),
    Case(
        "w_text",
        "weather",
        "row",
        "temperature in words",
        append=(w(d="2025-01-08", lo="cold"),),
        rejects=((1, "t_min", r"not a number"),),
    ),
    Case(
        "w_bad_date",
        "weather",
        "row",
        "month 13",
        append=(w(d="2025-13-01"),),
        rejects=((1, "date", r"not a valid date"),),
    ),
    Case(
        "w_date_trailing_text",
        "weather",
        "row",
        "a date with text after it (issue 18)",
        append=(w(d="2025-01-12xyz"),),
        rejects=((1, "date", r"not a valid date"),),
    ),
    Case(
        "w_conflicting_duplicate",
        "weather",
        "row",
        "one station and day twice with other values",
        append=(w(d="2025-01-09"), w(d="2025-01-09", lo="21")),
        rejects=((1, "date", r"duplicate date for station alder-flats"), (2, "date", r"duplicate date")),
    ),
    Case(
        "w_no_temperature",
        "weather",
        "row",
        "both temperatures empty",
        append=(w(d="2025-01-10", lo="", hi=""),),
        rejects=((1, "t_min", r"no usable temperature"),),
    ),
    Case(
        "w_station_empty",
        "weather",
        "row",
        "empty station id",
        append=(w(d="2025-01-11", station_id=""),),
        rejects=((1, "station_id", r"station_id is empty"),),
    ),
]


def _exclusive_stamps(text: str) -> str:
    """Readings with period_start and period_end as midnight timestamps, the end being the next day's start."""
    import datetime as dt

    lines = text.splitlines()
    out = [lines[0]]
    for ln in lines[1:]:
        f = ln.split(",")
        f[2] = f"{f[2]}T00:00:00"
        f[3] = f"{dt.date.fromisoformat(f[3]) + dt.timedelta(days=1)}T00:00:00"
        out.append(",".join(f))
    return "\n".join(out) + "\n"


def _cp1252(t: str) -> bytes:
    return t.replace("Quillmore Offices", "Quillmöre Offices").encode("cp1252")


ACCEPTED = [
    Case("a_bom", "buildings", "accepted", "UTF-8 with a byte-order mark", make=lambda t: b"\xef\xbb\xbf" + t.encode()),
    Case("a_semicolons", "buildings", "accepted", "semicolon-delimited", make=lambda t: t.replace(",", ";")),
    Case(
        "a_latin1",
        "buildings",
        "accepted",
        "cp1252 bytes: read as Latin-1 with a notice",
        make=_cp1252,
        notice=r"not valid UTF-8 \(first at line 2\); read as Latin-1/cp1252",
    ),
    Case("a_blank_lines", "readings", "accepted", "blank lines between rows", make=lambda t: t.replace("\n", "\n\n")),
    Case(
        "a_repeated_header",
        "weather",
        "accepted",
        "the header repeated mid-file (concatenated exports)",
        make=lambda t: t.replace("\nbrisk-point", "\n" + t.splitlines()[0] + "\nbrisk-point", 1),
        notice=r"skipped 1 repeated header line",
    ),
    Case(
        "a_quoted_newline",
        "buildings",
        "accepted",
        "a quoted name spanning two lines",
        make=lambda t: t.replace("Hollin Grade School", '"Hollin Grade\nSchool"'),
    ),
    Case("a_crlf", "weather", "accepted", "Windows line ends", make=lambda t: t.replace("\n", "\r\n")),
    Case(
        "a_exclusive_end_stamps",
        "readings",
        "accepted",
        "midnight timestamps, each end equal to the next period's start: read as exclusive ends (issue 18)",
        make=lambda t: _exclusive_stamps(t),
        notice=r"156 period_end value\(s\) are timestamps at midnight .* on meters whose end stamp equals the "
        r"start of the next period \(150 do\): read as exclusive ends, so the day before is the last day covered",
    ),
    Case(
        "a_midnight_weather_dates",
        "weather",
        "accepted",
        "daily dates written as midnight timestamps (issue 18)",
        make=lambda t: re.sub(r",(\d{4}-\d{2}-\d{2}),", r",\1T00:00:00,", t),
        notice=r"1646 date value\(s\) are timestamps at midnight \(e\.g\. '2022-10-01T00:00:00'\); read as that day",
    ),
    Case(
        "a_spreadsheet_dates",
        "readings",
        "accepted",
        "serial day numbers of the 1900 date system",
        make=lambda t: _serial_dates(t),
    ),
    Case(
        "a_day_first",
        "readings",
        "accepted",
        "dd/mm/yyyy told apart by days above 12",
        make=lambda t: re.sub(r"(\d{4})-(\d{2})-(\d{2})", r"\3/\2/\1", t),
    ),
    Case(
        "a_configured_order",
        "readings",
        "accepted",
        "an ambiguous order with [reading] date_order set",
        make=lambda t: re.sub(r"(\d{4})-(\d{2})-01", r"\2/01/\1", t),
        opts={"date_order": "mdy"},
    ),
    Case("a_tabs", "weather", "accepted", "tab-delimited", make=lambda t: t.replace(",", "\t")),
    Case(
        "a_header_case",
        "buildings",
        "accepted",
        "header names in other case and with blanks",
        make=lambda t: t.replace("building_id,name", " Building_ID , NAME ", 1),
    ),
    Case(
        "a_extra_column",
        "buildings",
        "accepted",
        "an unknown column is ignored and listed once",
        make=lambda t: (
            "\n".join(ln + (",owner_notes" if i == 0 else ",n/a") for i, ln in enumerate(t.splitlines())) + "\n"
        ),
        notice=r"ignored unknown column\(s\): owner_notes",
    ),
    Case(
        "a_exact_duplicate",
        "buildings",
        "accepted",
        "an identical duplicate building row is kept once",
        make=lambda t: t + t.splitlines()[3] + "\n",
        notice=r"1 exact duplicate building row\(s\) kept once",
    ),
    Case(
        "a_decimal_comma",
        "weather",
        "accepted",
        "semicolons with decimal commas when configured",
        make=lambda t: t.replace(",", ";").replace(".", ","),
        opts={"decimal_comma": True},
    ),
]


def _serial_dates(text: str) -> str:
    import datetime as dt

    epoch = dt.date(1899, 12, 30)  # day 0 of the 1900 date system (serial 1 = 1900-01-01, 1900-02-29 counted)
    return re.sub(r"\d{4}-\d{2}-\d{2}", lambda m: str((dt.date.fromisoformat(m.group(0)) - epoch).days), text)


ALL = STRUCTURAL + ROWS + ACCEPTED


def test_corpus_size_and_ids():
    assert len({c.id for c in ALL}) == len(ALL)
    assert len(ALL) >= 40 and len(STRUCTURAL) >= 15 and len(ROWS) >= 30
    assert {c.file for c in ALL} == set(KINDS)


# ----------------------------------------------------------------------------- helpers


@pytest.fixture(scope="module")
def loaded(tmp_path_factory):
    """The clean portfolio loaded once (a good run), as the database every structural case starts from."""
    root = tmp_path_factory.mktemp("corpus")
    p = write_portfolio(root / "in")
    res = cli(p.args(root / "out", root / "base.duckdb", "--no-sheets", "--quiet"))
    assert res.exit_code == 0, res.stderr
    return p, root / "base.duckdb"


def _write_case(case: Case, folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / f"{case.file}.csv"
    if case.id.endswith("not_found"):
        return folder / "missing.csv"
    if case.id.endswith("folder"):
        (folder / "a_folder.csv").mkdir()
        return folder / "a_folder.csv"
    clean = portfolio_text()[case.file]
    data = case.make(clean) if case.make else clean + "".join(x + "\n" for x in case.append)
    if isinstance(data, bytes):
        target.write_bytes(data)
    else:
        target.write_text(data, encoding="utf-8", newline="")
    return target


def _files(p, case: Case, path: Path) -> dict[str, str]:
    f = {k: str(getattr(p, k)) for k in KINDS}
    f[case.file] = str(path)
    return f


def check_all(files: dict[str, str], opts: ReadOptions) -> tuple[dict[str, int], pl.DataFrame]:
    """Every row-level check a run makes, without a database: per-file reading, the cross-file
    check (stations, buildings) and unit conversion — in the order the run applies them."""
    ld = {k: pipeline.read_file(k, files[k], opts) for k in KINDS}
    stations = sorted(ld["weather"].df["station_id"].unique().to_list())
    bld, rd, cross = pipeline._cross_check(ld["buildings"].df, ld["readings"].df, stations, files)
    conv, conv_rej = units.convert_to_kbtu(rd, bld)
    conv_rej = conv_rej.select(
        pl.lit(files["readings"]).alias("file"), "line", "column", pl.col("value").cast(pl.String), "reason"
    )
    rej = pl.concat([ld[k].rejects for k in KINDS] + [cross, conv_rej], how="vertical_relaxed")
    return {"buildings": bld.height, "readings": conv.height, "weather": ld["weather"].df.height}, rej


def _expected_rows(case: Case, path: str, base_lines: int) -> list[tuple[str, int, str, str]]:
    return [(path, base_lines + k if k > 0 else -k, col, pat) for k, col, pat in case.rejects]


def _base(kind):
    return len(_lines(kind))


# ----------------------------------------------------------------------------- structural


@pytest.mark.parametrize("case", STRUCTURAL, ids=lambda c: c.id)
def test_structural_library(case, tmp_path, loaded):
    p, _ = loaded
    path = _write_case(case, tmp_path)
    with pytest.raises(InputError) as ei:
        check_all(_files(p, case, path), ReadOptions(**case.opts))
    msg = str(ei.value)
    assert "\n" not in msg and msg.startswith(str(path))
    assert re.search(case.message, msg), msg
    assert ei.value.line == case.line
    assert ei.value.column == case.column
    if case.line is not None:
        assert f", line {case.line}" in msg
    if case.column is not None:
        assert f"column {case.column!r}" in msg


@pytest.mark.parametrize("case", STRUCTURAL, ids=lambda c: c.id)
def test_structural_cli_leaves_database_unchanged(case, tmp_path, loaded):
    p, base_db = loaded
    db = tmp_path / "db.duckdb"
    shutil.copy(base_db, db)
    before = table_counts(db)
    path = _write_case(case, tmp_path / "case")
    args = p.args(tmp_path / "out", db, "--no-sheets")
    args[args.index(f"--{case.file}") + 1] = str(path)
    res = cli(args)
    assert res.exit_code == 2, (res.stdout, res.stderr)
    assert "Traceback" not in res.stderr + res.stdout
    errors = [ln for ln in res.stderr.splitlines() if ln.startswith("ddscreen: error: ")]
    assert len(errors) == 1, res.stderr
    assert errors[0].startswith(f"ddscreen: error: {path}") and re.search(case.message, errors[0])
    if case.line is not None:
        assert f"line {case.line}" in errors[0]
    after = table_counts(db)
    # every data table unchanged; the runs table is checked on its own (below)
    assert {k: v for k, v in after.items() if k != "runs"} == {k: v for k, v in before.items() if k != "runs"}
    assert not (tmp_path / "out").exists()


def test_structural_error_adds_no_run_row(tmp_path, loaded):
    p, base_db = loaded
    db = tmp_path / "db.duckdb"
    shutil.copy(base_db, db)
    before = table_counts(db)
    args = p.args(tmp_path / "out", db, "--no-sheets", "--quiet")
    (tmp_path / "empty.csv").write_bytes(b"")
    args[args.index("--readings") + 1] = str(tmp_path / "empty.csv")
    assert cli(args).exit_code == 2
    assert table_counts(db) == before


def test_structural_error_is_exactly_one_stderr_line(tmp_path, loaded):
    p, base_db = loaded
    db = tmp_path / "db.duckdb"
    shutil.copy(base_db, db)
    bad = tmp_path / "buildings.csv"
    bad.write_text("building_id,name\nB01,x\n")
    args = p.args(tmp_path / "out", db, "--no-sheets", "--quiet")
    args[args.index("--buildings") + 1] = str(bad)
    res = cli(args)
    assert res.exit_code == 2
    assert res.stderr.splitlines() == [
        f"ddscreen: error: {bad}, line 1, column 'station_id': missing required "
        "column; expected columns building_id, name, station_id, use_type, "
        "floor_area, heating_fuel (found: building_id, name)"
    ]


# ----------------------------------------------------------------------------- row level


@pytest.mark.parametrize("case", ROWS, ids=lambda c: c.id)
def test_row_case_rejected_rest_kept(case, tmp_path, loaded):
    p, _ = loaded
    path = _write_case(case, tmp_path)
    counts, rej = check_all(_files(p, case, path), ReadOptions(**case.opts))
    expected = _expected_rows(case, str(path), _base(case.file))
    got = [(r["file"], r["line"], r["column"] or "", r["reason"], r["value"]) for r in rej.iter_rows(named=True)]
    assert len(got) == len(expected), got
    for f, line, col, pat in expected:
        hit = [g for g in got if g[:3] == (f, line, col) and re.search(pat, g[3])]
        assert len(hit) == 1, (line, col, pat, got)
    # the rest goes on: every clean row of the fixture is still accepted (less a row the case rejects)
    clean = {"buildings": 6, "readings": 156, "weather": 1646}
    lost_fixture = sum(1 for k, *_ in case.rejects if k < 0)
    if case.file == "readings" and lost_fixture:
        clean["readings"] -= lost_fixture
    assert counts == clean


# ----------------------------------------------------------------------------- accepted


def _accepted_params():
    marks: dict = {}
    return [pytest.param(c, id=c.id, marks=marks.get(c.id, ())) for c in ACCEPTED]


@pytest.mark.parametrize("case", _accepted_params())
def test_messy_but_valid_reads_like_clean(case, tmp_path, loaded):
    p, _ = loaded
    path = _write_case(case, tmp_path)
    opts = ReadOptions(**case.opts)
    got = pipeline.read_file(case.file, str(path), opts)
    ref = pipeline.read_file(case.file, str(getattr(p, case.file)), ReadOptions())
    assert got.rejects.height == 0, got.rejects.rows()[:3]
    drop = ["_line"]
    g, e = got.df.drop(drop), ref.df.drop(drop)
    if case.id == "a_latin1":
        assert g.filter(pl.col("building_id") == "B01")["name"][0] == "Quillmöre Offices"
        g = g.with_columns(pl.col("name").str.replace("ö", "o"))
    if case.id == "a_quoted_newline":
        assert g.filter(pl.col("building_id") == "B03")["name"][0] == "Hollin Grade\nSchool"
        g = g.with_columns(pl.col("name").str.replace("\n", " "))
        assert got.df["_line"].to_list() == [2, 3, 4, 6, 7, 8]  # B03 spans lines 4–5
    assert g.equals(e), (g.head(3), e.head(3))
    if case.notice:
        assert any(re.search(case.notice, n) for n in got.notices), got.notices
    else:
        assert got.notices == []


# ----------------------------------------------------------------------------- one run with every row case


def test_run_with_every_row_case(tmp_path):
    """All row-level cases planted at once: the run succeeds, rejects.csv lists exactly the planted rows."""
    p = write_portfolio(tmp_path / "in")
    expected = []
    for kind in KINDS:
        path = getattr(p, kind)
        extra = []
        for case in (c for c in ROWS if c.file == kind):
            base = _base(kind) + len(extra)
            expected += _expected_rows(case, str(path), base)
            extra += case.append
        # overlapping periods are kept and flagged on the building (data issue), not rejected
        if kind == "readings":
            extra.append(r("B06", s="2024-06-15", e="2024-07-14", q="900", unit="kWh", fuel="electricity"))
        path.write_text(portfolio_text()[kind] + "".join(x + "\n" for x in extra), encoding="utf-8")
    db = tmp_path / "s.duckdb"
    res = cli(p.args(tmp_path / "out", db, "--no-sheets"))
    assert res.exit_code == 0, res.stderr
    rj = pl.read_csv(tmp_path / "out" / "rejects.csv", infer_schema=False)
    assert rj.columns == ["file", "line", "column", "value", "reason"]
    got = [(x["file"], int(x["line"]), x["column"] or "", x["reason"]) for x in rj.iter_rows(named=True)]
    assert len(got) == len(expected)
    for f, line, col, pat in expected:
        assert sum(1 for g in got if g[:3] == (f, line, col) and re.search(pat, g[3])) == 1, (f, line, col, pat)
    # every reject carries the value it refers to (the record itself for a field-count problem)
    empty_ok = ["required value is empty", "station_id is empty"]
    assert rj.filter(pl.col("value").is_null() & ~pl.col("reason").is_in(empty_ok)).height == 0
    rank = pl.read_csv(tmp_path / "out" / "ranking.csv", infer_schema=False)
    assert sorted(rank["building_id"]) == ["B01", "B02", "B03", "B04", "B05", "B06"]
    b6 = rank.filter(pl.col("building_id") == "B06").row(0, named=True)
    assert "overlapping_reads" in b6["data_issues"].split(";") and b6["tier"] == "Fix data first"
    counts = table_counts(db)
    assert counts["rejects"] == len(expected)
    # in the database: rows that passed their own file's checks (C18, B77 and the two unit rows are rejected later)
    assert counts["buildings"] == 6 + 1 and counts["readings"] == 156 - 1 + 1 + 3  # −B05 conflict, +overlap


# ----------------------------------------------------------------------------- a 50 MB file


def test_50_mb_weather_file(tmp_path):
    """A 50 MB daily weather file (2,100 stations × 820 days, generated here, not committed) is read
    whole: every good row accepted, one planted bad row near the end rejected with its exact line."""
    import datetime as dt
    import numpy as np

    days = pl.date_range(dt.date(2022, 10, 1), dt.date(2024, 12, 28), eager=True)
    st = pl.DataFrame({"station_id": [f"stn-{i:04d}" for i in range(2100)]})
    df = st.join(pl.DataFrame({"date": days}), how="cross")
    # daily means around 42.5 °F: a climate in °F (the reader refuses a warmest month below 40 °F as °C read as °F)
    lo = np.round(np.random.default_rng(7).uniform(-10.0, 80.0, df.height), 1)
    df = df.with_columns(pl.Series("t_min", lo), pl.Series("t_max", np.round(lo + 15.0, 1)))
    path = tmp_path / "weather_big.csv"
    df.write_csv(path)
    with open(path, "a") as f:
        f.write("stn-0000,2025-01-01,50.0,10.0\n")  # t_min above t_max
        f.write("stn-0000,2025-01-02,10.0,20.0\n")
    assert path.stat().st_size >= 50_000_000
    ld = pipeline.read_file("weather", str(path), ReadOptions())
    assert ld.df.height == df.height + 1
    assert ld.rejects.select("line", "column").rows() == [(df.height + 2, "t_min")]
