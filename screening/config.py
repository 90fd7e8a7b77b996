"""Run settings: defaults, a TOML file, and command-line overrides (in that order).

Every key is checked against the default's type; an unknown key or a value of the
wrong type raises ``ConfigError`` naming the key and what is expected.
"""

from __future__ import annotations

import copy
import datetime as _dt
import hashlib
import json
import tomllib
from pathlib import Path
from typing import Any

from .errors import ConfigError

DEFAULTS: dict[str, dict[str, Any]] = {
    "inputs": {
        "buildings": "",            # path or glob; several files are read in name order
        "readings": "",
        "weather": "",
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
        "z_review": 2.0,            # robust z-score of log(ratio) within peers that alone puts a building on watch
        "review_score": 3.5,        # evidence score (z + weighted balance-point and intensity z) for needs_review
        "weight_balance_point": 1.0,  # weight of the fitted-minus-engineering balance point z in the score
        "weight_intensity": 0.5,    # weight of the heating-intensity z within peers in the score
        "audit_first_ratio": 1.5,   # needs_review with metered/expected at least this …
        "audit_first_score": 5.0,   # … and an evidence score at least this → the most urgent tier
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
        "min_excess_ratio": 1.0,    # metered/expected (P50) must reach this for needs_review
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
            out[section][key] = _check_type(section, key, value, DEFAULTS[section][key])
    return out


def validate(cfg: dict) -> dict:
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
    if not (0 < a["base_step_f"] <= 5 and a["base_min_f"] < a["base_max_f"]):
        raise ConfigError("config keys [analysis] base_min_f/base_max_f/base_step_f: expected min < max "
                          "and 0 < step ≤ 5")
    if a["draws"] < 10 or a["draws"] > 10000:
        raise ConfigError(f"config key [analysis] draws: got {a['draws']}; expected 10 to 10000")
    for key in ("as_of", "window_from", "window_to"):
        if a[key]:
            parse_date_value(a[key], f"[analysis] {key}")
    if bool(a["window_from"]) != bool(a["window_to"]):
        raise ConfigError("config keys [analysis] window_from and window_to: give both or neither")
    ny = a["normal_years"]
    if ny and (len(ny) != 2 or not all(isinstance(y, int) for y in ny) or ny[0] > ny[1]):
        raise ConfigError(f"config key [analysis] normal_years: got {ny!r}; expected [first_year, last_year]")
    r = cfg["reading"]
    if r["date_order"] not in ("", "dmy", "mdy", "ymd"):
        raise ConfigError(f"config key [reading] date_order: got {r['date_order']!r}; expected dmy, mdy or ymd")
    if r["delimiter"] not in ("", ",", ";", "\t"):
        raise ConfigError(f"config key [reading] delimiter: got {r['delimiter']!r}; expected , ; or a tab")
    for k, v in cfg["prices"].items():
        if k != "currency" and v < 0:
            raise ConfigError(f"config key [prices] {k}: got {v}; expected a price ≥ 0")
    if cfg["output"]["keep"] < 0:
        raise ConfigError("config key [output] keep: expected a whole number ≥ 0")
    if cfg["output"]["ranking_pdf_rows"] < 0:
        raise ConfigError("config key [output] ranking_pdf_rows: expected a whole number ≥ 0")
    if cfg["output"]["workers"] < 1:
        raise ConfigError("config key [output] workers: expected a whole number ≥ 1")
    return cfg


def parse_date_value(value: str, where: str) -> _dt.date:
    try:
        return _dt.date.fromisoformat(value)
    except (TypeError, ValueError):
        raise ConfigError(f"{where}: got {value!r}; expected a date YYYY-MM-DD") from None


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
