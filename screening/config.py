"""Run settings: defaults, a TOML file, and command-line overrides (in that order).

Every key is checked against the default's type; an unknown key or a value of the
wrong type raises ``ConfigError`` naming the key and what is expected.
"""

from __future__ import annotations

import copy
import datetime as _dt
import hashlib
import json
import math
import tomllib
from pathlib import Path
from typing import Any

from .errors import ConfigError

DEFAULTS: dict[str, dict[str, Any]] = {
    "inputs": {
        "buildings": "",            # path or glob; several files are read in name order
        "readings": "",
        "weather": "",
        "events": "",               # optional: audits, findings and measures (path or glob); see README
        "columns": {},              # your column names → ours, per file kind: [inputs.columns.readings] "Usage" = "quantity"
    },
    "store": {
        "database": "screening.duckdb",
    },
    "output": {
        "root": "ddscreen-out",     # config runs write ROOT/<quarter label>/ and ROOT/latest
        "keep": 8,                  # how many past quarter folders to keep (0 = all)
        "paper": "auto",            # auto (Letter for IP, A4 for SI), Letter, A4
        "sheets": True,             # write one PDF sheet per building
        "workers": 2,               # processes for sheet rendering
        "ranking_pdf_rows": 1000,   # rows of the ranked table in ranking.pdf (0 = all; ranking.csv has all)
    },
    "analysis": {
        "units": "IP",              # IP or SI: units of the input files and of the outputs
        "as_of": "",                # YYYY-MM-DD; empty = today
        "window_from": "",          # YYYY-MM-DD; overrides the window start
        "window_to": "",            # YYYY-MM-DD; overrides the window end (inclusive)
        "lookback_months": 24,      # how far back a building's own 12-month span may go
        "fill_end_days": 35,        # up to this many days at the window's end without a reading yet (about
                                    # one billing cycle) are filled from the building's weather fit; 0 = never
        "degree_day_method": "mean",  # mean or maxmin (daily data); see README
        "calendarization": "days",  # days or degree_days
        "base_min_f": 40.0,         # base-temperature grid for regression and balance point [°F]
        "base_max_f": 75.0,
        "base_step_f": 0.5,
        "normal_years": [],         # e.g. [2016, 2025] = 2016..2025; empty = every complete year
        "gas_btu_per_ft3": 1036.0,  # natural gas heat content (EIA US average consumed)
        "steam_btu_per_lb": 1000.0,  # district steam heat content per lb (convention, see units.csv)
        "draws": 500,               # Monte Carlo draws for the expected band
        "seed": 20240601,
        "count_other_fuels": False,  # count non-heating fuels as heating (normally False)
    },
    "reading": {
        "decimal_comma": False,     # numbers written 1.234,5
        "date_order": "",           # "", "dmy" or "mdy" for slash dates like 03/04/2025
        "delimiter": "",            # "" = detect; "," ";" or "\t"
        "encoding": "",             # "" = UTF-8 with Latin-1 fallback
        "thousands": "",            # "" = none; "," (or "." with decimal_comma, " " or "'") read 1,485 as 1485
    },
    "prices": {                     # price per unit of energy, by heating fuel
        "natural_gas": 1.20,        # $ per therm
        "fuel_oil": 3.80,           # $ per gallon
        "propane": 2.90,            # $ per gallon
        "electricity": 0.15,        # $ per kWh
        "district_steam": 25.0,     # $ per Mlb
        "district_hot_water": 20.0,  # $ per MMBtu
        "currency": "$",
    },
    "emissions": {
        "electricity_kg_co2e_per_kwh": None,  # None = the data file's national value; set your region's
    },
    "thresholds": {
        "band_ratio": 1.0,          # metered above expected_high × this → above the band
        "band_floor": 0.10,         # the band is at least ±10 % around P50 (common practice: meter/weather uncertainty)
        "z_review": 2.0,            # unused since the audit order (issue 14); kept so config files that set it still load
        "review_score": 3.5,        # evidence score (z + weighted balance-point and intensity z) for needs_review
        "weight_balance_point": 1.0,  # weight of the fitted-minus-engineering balance point z in the score
        "weight_intensity": 0.5,    # weight of the heating-intensity z within peers in the score
        "audit_first_ratio": 1.5,   # unused since Audit first is this quarter's plan ([plan]); kept so old configs load
        "audit_first_score": 5.0,   # unused since Audit first is this quarter's plan ([plan]); kept so old configs load
        "peer_percentile_high": 90.0,  # intensity percentile among peers flagged as high
        "min_peer_group": 8,        # peer groups smaller than this fall back to use type
        "baseload_share_high": 1.5,  # baseload share above this × the use type's default share
        "balance_point_high_f": 65.0,  # fitted balance point above this → controls/setpoints flag
        "r2_min": 0.7,              # fit poorer than this → inconsistent use
        "cv_rmse_max": 20.0,        # % (ASHRAE Guideline 14 monthly regression criterion)
        "yoy_rise": 0.15,           # normal-year heating up more than 15 % on last year
        "yoy_review": 0.25,         # needs_review also when normal-year heating is up at least 25 % on last year …
        "yoy_review_z": 4.0,        # … and that change is this many robust z above the portfolio's changes …
        "yoy_review_r2_min": 0.5,   # … and the fit that normalizes both years explains at least this share (R²) …
        "yoy_review_heating_share_min": 0.25,  # … and heating is at least this share of the fuel's use
        "coverage_min": 0.9,        # share of the span covered by readings
        "estimated_share_max": 0.5,  # share of estimated reads above which data is weak
        "unit_error_factor": 8.0,   # a reading this many times off the same month of other years suggests a unit error
        "unit_error_factor_expected": 10.0,  # metered/expected at or above this: likely unit or entry error
        "unit_error_factor_expected_low": 25.0,  # metered/expected at or below 1/this: likely unit or entry error
        "unit_error_factor_fit": 4.0,  # a bill this many times above (or below 1/this of) what its own weather fit predicts
        "unit_error_isolation": 2.0,  # … and this many times apart from both neighbouring bills (a spike, not a step)
        "min_excess_ratio": 1.0,    # metered/expected (P50) must reach this for needs_review
        "peer_prior": 3.0,          # evidence scale: the peers' spread weighs n / (n + this), the model band the rest
        "sure_offset": 1.0,         # a view's sureness is Φ(z − this): half sure at z = 1
        "step_sure_z": 3.0,         # the step-up view is half sure at this robust z of the year-on-year change
        "mechanism_support": 0.5,   # a mechanism is named (with its checks) from this sureness on
        "mechanism_weight": 0.5,    # share of the level view's sureness that rests on its surest mechanism
        "balance_point_sd_f": 5.0,  # model scale of fitted − engineering balance point [°F] (our own)
        "baseload_share_sd": 0.15,  # model scale of the non-heating share against the use type's (our own)
    },
    "savings": {                    # savings after a measure (events file kind = measure); README
        "blackout_days": 30,        # days after the measure left out of the reporting period (commissioning)
        "baseline_min_periods": 9,  # bills (of at most 62 days) the baseline needs in the 12 months before
        "cv_rmse_max": 20.0,        # % baseline limit, ASHRAE Guideline 14 (monthly regression; from memory)
        "nmbe_max": 0.005,          # % |net determination bias| limit, ASHRAE Guideline 14 (from memory)
    },
    "plan": {
        "audits_per_quarter": 10,   # buildings to visit this quarter (0 = no limit: every one worth its visit)
        "audit_cost": 2000.0,       # cost of one visit: expected savings per year below it are not planned (0 = any)
        "clean_audit_rest_quarters": 4,  # an audit that found nothing keeps a building off the plan this many quarters …
        "clean_audit_regrow": 2.0,  # … unless its expected savings reach this × those of the list it was audited from
    },
}

UNITS = ("IP", "SI")
PAPERS = ("auto", "Letter", "A4")


def _check_type(section: str, key: str, value: Any, default: Any) -> Any:
    where = f"[{section}] {key}"
    if default is None:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0:
            raise ConfigError(f"config key {where}: got {value!r}; expected a number ≥ 0")
        return float(value)
    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise ConfigError(f"config key {where}: got {value!r}; expected true or false")
        return value
    if isinstance(default, int) and not isinstance(default, bool):
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"config key {where}: got {value!r}; expected a whole number")
        return value
    if isinstance(default, float):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"config key {where}: got {value!r}; expected a number")
        return float(value)
    if isinstance(default, str):
        if not isinstance(value, str):
            raise ConfigError(f"config key {where}: got {value!r}; expected text in quotes")
        return value
    if isinstance(default, dict):
        if not isinstance(value, dict):
            raise ConfigError(f"config key {where}: got {value!r}; expected a table like "
                              '[inputs.columns.readings] with "Your name" = "our_name" lines')
        return value
    if isinstance(default, list):
        if not isinstance(value, list):
            raise ConfigError(f"config key {where}: got {value!r}; expected a list like [2016, 2025]")
        return value
    return value


def merge(base: dict, overrides: dict, *, origin: str) -> dict:
    """``base`` with ``overrides`` applied; every key must exist in DEFAULTS."""
    out = copy.deepcopy(base)
    for section, values in overrides.items():
        if section not in DEFAULTS:
            raise ConfigError(f"{origin}: unknown section [{section}]; expected one of "
                              + ", ".join(f"[{s}]" for s in DEFAULTS))
        if not isinstance(values, dict):
            raise ConfigError(f"{origin}: [{section}] must be a table of keys")
        for key, value in values.items():
            if key not in DEFAULTS[section]:
                raise ConfigError(f"{origin}: unknown key [{section}] {key}; expected one of "
                                  + ", ".join(DEFAULTS[section]))
            value = _check_type(section, key, value, DEFAULTS[section][key])
            if isinstance(DEFAULTS[section][key], dict):   # tables merge per kind (command line over file)
                merged = dict(out[section][key] or {})
                for kind, mapping in value.items():
                    merged[kind] = {**(merged.get(kind) or {}), **mapping} if isinstance(mapping, dict) \
                        and isinstance(merged.get(kind), dict) else mapping
                value = merged
            out[section][key] = value
    return out


#: The allowed range of every numeric setting: (section, key) → (low, high, what). NaN and
#: infinities are refused everywhere. The heat contents take their range from
#: ``screening/data/units.csv`` (``plausible_min``/``plausible_max``, with its sources) at check time.
#: Where no published bound exists the range is our own (common practice): wide enough for any
#: real portfolio, narrow enough that a typo (a sign, a missing decimal point, 5 for 0.5) stops.
RANGES: dict[tuple[str, str], tuple[float, float, str]] = {
    ("output", "keep"): (0, 1000, "a whole number"),
    ("output", "workers"): (1, 64, "a whole number"),
    ("output", "ranking_pdf_rows"): (0, 10_000_000, "a whole number"),
    # the whole method compares 12 months; a building's own span may go back up to 10 years
    ("analysis", "lookback_months"): (12, 120, "a whole number of months"),
    # at most about two billing cycles may be filled; more is a missing bill, not a late read
    ("analysis", "fill_end_days"): (0, 62, "a whole number of days"),
    # balance points of real buildings lie well inside 20-90 °F (common practice)
    ("analysis", "base_min_f"): (20.0, 90.0, "a temperature in °F"),
    ("analysis", "base_max_f"): (20.0, 90.0, "a temperature in °F"),
    ("analysis", "base_step_f"): (0.1, 5.0, "a step in °F"),
    ("analysis", "draws"): (10, 10_000, "a whole number"),
    ("analysis", "seed"): (0, 2**32 - 1, "a whole number"),
    # the worst grids emit about 1 kg CO2e per kWh (coal, from memory); 2 leaves room
    ("emissions", "electricity_kg_co2e_per_kwh"): (0.0, 2.0, "kg CO2e per kWh"),
    ("thresholds", "band_ratio"): (0.5, 5.0, "a factor"),
    ("thresholds", "band_floor"): (0.0, 0.9, "a share"),
    ("thresholds", "z_review"): (0.1, 20.0, "a robust z-score"),
    ("thresholds", "review_score"): (0.1, 50.0, "a score"),
    ("thresholds", "weight_balance_point"): (0.0, 10.0, "a weight"),
    ("thresholds", "weight_intensity"): (0.0, 10.0, "a weight"),
    ("thresholds", "audit_first_ratio"): (1.0, 100.0, "a ratio"),
    ("thresholds", "audit_first_score"): (0.1, 50.0, "a score"),
    ("thresholds", "peer_percentile_high"): (50.0, 100.0, "a percentile"),
    ("thresholds", "min_peer_group"): (2, 10_000, "a whole number of buildings"),
    ("thresholds", "baseload_share_high"): (1.0, 10.0, "a factor"),
    ("thresholds", "balance_point_high_f"): (40.0, 90.0, "a temperature in °F"),
    ("thresholds", "r2_min"): (0.0, 1.0, "a share"),
    ("thresholds", "cv_rmse_max"): (1.0, 1000.0, "a percentage"),
    ("thresholds", "yoy_rise"): (0.01, 10.0, "a share"),
    ("thresholds", "yoy_review"): (0.01, 10.0, "a share"),
    ("thresholds", "yoy_review_z"): (0.1, 50.0, "a robust z-score"),
    ("thresholds", "yoy_review_r2_min"): (0.0, 1.0, "a share"),
    ("thresholds", "yoy_review_heating_share_min"): (0.0, 1.0, "a share"),
    # "covered" below half the span's days means nothing (common practice)
    ("thresholds", "coverage_min"): (0.5, 1.0, "a share"),
    ("thresholds", "estimated_share_max"): (0.0, 1.0, "a share"),
    ("thresholds", "unit_error_factor"): (2.0, 10_000.0, "a factor"),
    ("thresholds", "unit_error_factor_expected"): (2.0, 10_000.0, "a factor"),
    ("thresholds", "unit_error_factor_expected_low"): (2.0, 10_000.0, "a factor"),
    ("thresholds", "unit_error_factor_fit"): (1.5, 10_000.0, "a factor"),
    ("thresholds", "unit_error_isolation"): (1.0, 10_000.0, "a factor"),
    ("thresholds", "min_excess_ratio"): (0.5, 10.0, "a ratio"),
    ("thresholds", "peer_prior"): (0.0, 10_000.0, "a number of buildings"),
    ("thresholds", "sure_offset"): (-5.0, 10.0, "a robust z-score"),
    ("thresholds", "step_sure_z"): (0.0, 50.0, "a robust z-score"),
    ("thresholds", "mechanism_support"): (0.0, 1.0, "a share"),
    ("thresholds", "mechanism_weight"): (0.0, 1.0, "a share"),
    ("thresholds", "balance_point_sd_f"): (0.5, 30.0, "a temperature difference in °F"),
    ("thresholds", "baseload_share_sd"): (0.01, 1.0, "a share"),
    ("plan", "audits_per_quarter"): (0, 1_000_000, "a whole number of buildings"),
    # a commissioning settle-in of up to a year; a baseline needs a fit (2 parameters) and at most 12 monthly bills
    ("savings", "blackout_days"): (0, 366, "a whole number of days"),
    ("savings", "baseline_min_periods"): (3, 12, "a whole number of bills"),
    ("savings", "cv_rmse_max"): (0.1, 1000.0, "a percentage"),
    ("savings", "nmbe_max"): (0.0001, 100.0, "a percentage"),
    ("plan", "audit_cost"): (0.0, 100_000_000.0, "a cost per visit"),
    ("plan", "clean_audit_rest_quarters"): (0, 40, "a whole number of quarters"),
    ("plan", "clean_audit_regrow"): (1.0, 100.0, "a factor"),
}
#: Prices are per unit of the fuel in any currency (yen as well as dollars), so only the sign
#: and a finite size are checked.
PRICE_MAX = 1_000_000.0
#: The earliest day a run may be dated (as_of, window_from/window_to, normal_years): degree-day
#: screening on meter data before this is not what the tool is for (our own).
EARLIEST = _dt.date(1950, 1, 1)
#: Window length: the method compares 12 months (365 or 366 days); at most ten years.
WINDOW_DAYS = (365, 3660)


def _fmt(x: float) -> str:
    if isinstance(x, int) or (isinstance(x, float) and x.is_integer() and abs(x) >= 1000):
        return f"{int(x):,}"
    return f"{x:g}"


def _range_error(where: str, value: Any, expected: str) -> ConfigError:
    return ConfigError(f"config key {where}: got {value!r}; expected {expected}")


def _check_range(section: str, key: str, value: Any, lo: float, hi: float, what: str) -> None:
    where = f"[{section}] {key}"
    if value is None:
        return
    if isinstance(value, float) and not math.isfinite(value):
        raise _range_error(where, value, f"{what} from {_fmt(lo)} to {_fmt(hi)} (not NaN or infinite)")
    if not (lo <= value <= hi):
        raise _range_error(where, value, f"{what} from {_fmt(lo)} to {_fmt(hi)}")


def _check_text(section: str, key: str, value: str, *, empty_ok: bool = True) -> None:
    if not empty_ok and not value.strip():
        raise _range_error(f"[{section}] {key}", value, "a path (not empty)")
    if any(ord(ch) < 32 for ch in value):
        raise _range_error(f"[{section}] {key}", value, "text without control characters")


def validate(cfg: dict, *, today: _dt.date | None = None) -> dict:
    """Check every setting's range (see :data:`RANGES`); raise ``ConfigError`` naming key, value, range."""
    today = today or _dt.date.today()
    for (section, key), (lo, hi, what) in RANGES.items():
        _check_range(section, key, cfg[section][key], lo, hi, what)
    for section, key in (("inputs", "buildings"), ("inputs", "readings"), ("inputs", "weather"), ("inputs", "events")):
        _check_text(section, key, cfg[section][key])
    _check_text("store", "database", cfg["store"]["database"], empty_ok=False)
    _check_text("output", "root", cfg["output"]["root"], empty_ok=False)
    a = cfg["analysis"]
    if a["units"] not in UNITS:
        raise ConfigError(f"config key [analysis] units: got {a['units']!r}; expected IP or SI")
    if cfg["output"]["paper"] not in PAPERS:
        raise ConfigError(f"config key [output] paper: got {cfg['output']['paper']!r}; expected auto, Letter or A4")
    if a["degree_day_method"] not in ("mean", "maxmin"):
        raise ConfigError(f"config key [analysis] degree_day_method: got {a['degree_day_method']!r}; "
                          "expected mean or maxmin")
    if a["calendarization"] not in ("days", "degree_days"):
        raise ConfigError(f"config key [analysis] calendarization: got {a['calendarization']!r}; "
                          "expected days or degree_days")
    if not a["base_min_f"] < a["base_max_f"]:
        raise ConfigError(f"config keys [analysis] base_min_f/base_max_f: got {a['base_min_f']:g} and "
                          f"{a['base_max_f']:g}; expected min < max")
    _check_heat_contents(a)
    _check_dates(a, today)
    ny = a["normal_years"]
    if ny:
        if len(ny) != 2 or not all(isinstance(y, int) and not isinstance(y, bool) for y in ny) or ny[0] > ny[1]:
            raise ConfigError(f"config key [analysis] normal_years: got {ny!r}; expected [first_year, last_year]")
        last_complete = today.year - 1
        if ny[0] < EARLIEST.year or ny[1] > last_complete:
            raise ConfigError(f"config key [analysis] normal_years: got {ny!r}; expected complete years from "
                              f"{EARLIEST.year} to {last_complete}")
    check_columns(cfg["inputs"]["columns"])
    r = cfg["reading"]
    dec = "," if r["decimal_comma"] else "."
    if r["thousands"] not in ("", ",", ".", " ", "'") or r["thousands"] == dec:
        raise _range_error("[reading] thousands", r["thousands"],
                           f'"" (none), ",", ".", " " or "\'", not the decimal mark {dec!r}'
                           + (" (decimal_comma = true)" if r["decimal_comma"] else ""))
    if r["date_order"] not in ("", "dmy", "mdy", "ymd"):
        raise ConfigError(f"config key [reading] date_order: got {r['date_order']!r}; expected dmy, mdy or ymd")
    if r["delimiter"] not in ("", ",", ";", "\t"):
        raise ConfigError(f"config key [reading] delimiter: got {r['delimiter']!r}; expected , ; or a tab")
    if r["encoding"]:
        import codecs
        try:
            codecs.lookup(r["encoding"])
        except LookupError:
            raise _range_error("[reading] encoding", r["encoding"],
                               "an encoding name such as utf-8, cp1252 or latin-1 (or empty)") from None
    for k, v in cfg["prices"].items():
        if k == "currency":
            if not (1 <= len(v) <= 8) or any(ord(ch) < 32 for ch in v):
                raise _range_error("[prices] currency", v, "a symbol or code of 1 to 8 characters")
            continue
        _check_range("prices", k, v, 0.0, PRICE_MAX, "a price per unit")
    return cfg


def column_names() -> dict[str, list[str]]:
    """Our column names per file kind (what ``[inputs.columns]`` may map to)."""
    from .ingest import BUILDING_COLUMNS, READING_COLUMNS
    return {"buildings": [c[0] for c in BUILDING_COLUMNS],
            "readings": [c[0] for c in READING_COLUMNS] + ["read_date"],
            "weather": ["station_id", "date", "t_min", "t_max", "t_mean"]}


def check_columns(columns: dict) -> None:
    """``[inputs.columns]``: per kind, a table of "their name" = "our name" (each of ours once)."""
    known = column_names()
    for kind, mapping in columns.items():
        where = f"[inputs.columns] {kind}"
        if kind not in known:
            raise ConfigError(f"config key {where}: unknown file kind; expected buildings, readings or weather")
        if not isinstance(mapping, dict):
            raise _range_error(where, mapping, f'a table like [inputs.columns.{kind}] with "Your name" = "our_name"')
        targets: dict[str, str] = {}
        for theirs, ours in mapping.items():
            w = f'[inputs.columns.{kind}] "{theirs}"'
            if not theirs.strip() or any(ord(ch) < 32 for ch in theirs):
                raise _range_error(w, theirs, "a column name as written in the file (not empty, no control characters)")
            if not isinstance(ours, str) or ours.strip().lower() not in known[kind]:
                raise _range_error(w, ours, f"one of our {kind} columns: " + ", ".join(known[kind]))
            ours = ours.strip().lower()
            if ours in targets:
                raise ConfigError(f"config key [inputs.columns.{kind}]: {targets[ours]!r} and {theirs!r} both map to "
                                  f"{ours!r}; expected each of our columns from one column of the file")
            targets[ours] = theirs
            mapping[theirs] = ours


def _check_heat_contents(a: dict) -> None:
    from . import refdata
    import polars as pl
    t = refdata.load("units").filter(pl.col("parameter").is_in(["gas_btu_per_ft3", "steam_btu_per_lb"]))
    for row in t.iter_rows(named=True):
        key = row["parameter"]
        lo, hi = float(row["plausible_min"]), float(row["plausible_max"])
        _check_range("analysis", key, a[key], lo, hi, f"a heat content in {row['base']} (units.csv)")


def _check_dates(a: dict, today: _dt.date) -> None:
    latest = today + _dt.timedelta(days=1)   # one day of slack for a server clock in another time zone
    for key in ("as_of", "window_from", "window_to"):
        if a[key]:
            d = parse_date_value(a[key], f"config key [analysis] {key}")
            if not (EARLIEST <= d <= latest):
                raise _range_error(f"[analysis] {key}", a[key], f"a date from {EARLIEST} to {latest} "
                                   "(no readings exist after today)")
    if bool(a["window_from"]) != bool(a["window_to"]):
        raise ConfigError("config keys [analysis] window_from and window_to: give both or neither")
    if a["window_from"]:
        lo, hi = parse_date_value(a["window_from"], ""), parse_date_value(a["window_to"], "")
        days = (hi - lo).days + 1
        if not (WINDOW_DAYS[0] <= days <= WINDOW_DAYS[1]):
            raise ConfigError(f"config keys [analysis] window_from/window_to (--from/--to): got {lo} to {hi} "
                              f"({days} days); expected a window of {WINDOW_DAYS[0]} to {WINDOW_DAYS[1]} days "
                              "(12 months to ten years) with window_to after window_from")


def run_window(cfg: dict, today: _dt.date | None = None) -> tuple[_dt.date, tuple[_dt.date, _dt.date]]:
    """The run's as-of day and analysis window (start, inclusive end) from checked settings."""
    from .window import analysis_window
    a = cfg["analysis"]
    as_of = parse_date_value(a["as_of"], "config key [analysis] as_of") if a["as_of"] else (today or _dt.date.today())
    if a["window_from"]:
        return as_of, (parse_date_value(a["window_from"], "config key [analysis] window_from"),
                       parse_date_value(a["window_to"], "config key [analysis] window_to"))
    return as_of, analysis_window(as_of)


def parse_date_value(value: str, where: str) -> _dt.date:
    from .parse import iso_date
    d = iso_date(value)
    if d is None:
        raise ConfigError(f"{where}: got {value!r}; expected a date YYYY-MM-DD")
    return d


def load(path: str | Path | None = None, overrides: dict | None = None) -> dict:
    """Defaults ← TOML file ← overrides (command-line flags), validated.

    Relative input, database and output paths in a file are taken relative to the
    file's folder, so a crontab line works from any current folder.
    """
    cfg = copy.deepcopy(DEFAULTS)
    if path is not None:
        p = Path(path)
        try:
            text = p.read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"{p}: cannot read config file ({exc.strerror or exc})") from None
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{p}: not valid TOML ({exc})") from None
        cfg = merge(cfg, data, origin=str(p))
        base = p.resolve().parent
        for section, key in (("inputs", "buildings"), ("inputs", "readings"), ("inputs", "weather"),
                             ("store", "database"), ("output", "root")):
            v = cfg[section][key]
            if v and not Path(v).is_absolute() and (section, key) in _file_keys(data):
                cfg[section][key] = str(base / v)
    if overrides:
        cfg = merge(cfg, {s: {k: v for k, v in kv.items() if v is not None} for s, kv in overrides.items()},
                    origin="command line")
    return validate(cfg)


def _file_keys(data: dict) -> set[tuple[str, str]]:
    return {(s, k) for s, kv in data.items() if isinstance(kv, dict) for k in kv}


def config_hash(cfg: dict) -> str:
    """A stable hash of the settings that change results (paths excluded)."""
    relevant = {k: v for k, v in cfg.items() if k not in ("inputs", "store", "output")}
    relevant["output"] = {"paper": cfg["output"]["paper"]}
    return hashlib.sha256(json.dumps(relevant, sort_keys=True, default=str).encode()).hexdigest()[:16]


def template_comments() -> dict[tuple[str, str], str]:
    """The comment beside each key of DEFAULTS in this file (used by ``ddscreen init``)."""
    import re
    out: dict[tuple[str, str], str] = {}
    section = None
    src = Path(__file__).read_text(encoding="utf-8")
    body = src[src.index("DEFAULTS"):src.index("UNITS = (")]
    for line in body.splitlines():
        m = re.match(r'^    "(\w+)": \{', line)
        if m:
            section = m.group(1)
            continue
        m = re.match(r'^        "(\w+)":.*?#\s*(.*)$', line)
        if m and section:
            out[(section, m.group(1))] = m.group(2).strip()
    return out
