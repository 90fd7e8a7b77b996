"""Run settings: defaults, a TOML file, and command-line overrides (in that order).

Every setting is declared once below, as a field of a section dataclass (:class:`Settings`): its type,
default, the comment ``ddscreen init`` writes beside it, and its allowed range or choices. ``DEFAULTS``,
``RANGES``, ``CHOICES`` and :func:`template_comments` are derived from the declarations; :func:`load`
returns the checked settings as a dict (section → key → value) and :func:`settings` its typed view.
Every key is checked against the default's type; an unknown key or a value of the
wrong type raises ``ConfigError`` naming the key and what is expected.
"""

from __future__ import annotations

import copy
import re
import datetime as _dt
import hashlib
import json
import math
import tomllib
from dataclasses import Field, asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

from .choices import DATE_ORDERS
from .errors import ConfigError
from .schema import UNIT_SYSTEMS


def setting(
    default: Any,
    comment: str = "",
    *,
    range: tuple[float, float, str] | None = None,
    choices: tuple[str, ...] | None = None,
    expected: str = "",
) -> Any:
    """One setting: its default, the comment the ``ddscreen init`` template writes beside it, its allowed
    ``range`` (low, high, what) for numbers, or its ``choices`` and how a message names them (``expected``)."""
    md = {"comment": comment, "range": range, "choices": choices, "expected": expected}
    if isinstance(default, (dict, list)):
        return field(default_factory=lambda: copy.deepcopy(default), metadata=md)
    return field(default=default, metadata=md)


PAPERS = ("auto", "Letter", "A4")
UNITS = UNIT_SYSTEMS


# Every setting, declared once: type, default, comment (the init template), range or choices.
# Where no published bound exists a range is our own (common practice): wide enough for any real
# portfolio, narrow enough that a typo (a sign, a missing decimal point, 5 for 0.5) stops. NaN and
# infinities are refused everywhere. The heat contents take their range from screening/data/units.csv
# (plausible_min/plausible_max, with its sources) at check time; prices are checked against PRICE_MAX.


@dataclass
class Inputs:
    """[inputs]"""

    buildings: str = setting("", "path or glob; several files are read in name order")
    readings: str = setting("")
    weather: str = setting("")
    events: str = setting("", "optional: audits, findings and measures (path or glob); see README")
    columns: dict[str, dict[str, str]] = setting(
        {}, 'your column names → ours, per file kind: [inputs.columns.readings] "Usage" = "quantity"'
    )

    def by_kind(self) -> dict[str, str]:
        """The path or glob of each of the three kinds of input file (``pipeline.KINDS``), by kind."""
        return {"buildings": self.buildings, "readings": self.readings, "weather": self.weather}


@dataclass
class Store:
    """[store]"""

    database: str = setting("screening.duckdb")


@dataclass
class Output:
    """[output]"""

    root: str = setting("ddscreen-out", "config runs write ROOT/<quarter label>/ and ROOT/latest")
    keep: int = setting(8, "how many past quarter folders to keep (0 = all)", range=(0, 1000, "a whole number"))
    paper: str = setting(
        "auto", "auto (Letter for IP, A4 for SI), Letter, A4", choices=PAPERS, expected="auto, Letter or A4"
    )
    sheets: bool = setting(True, "write one PDF sheet per building")
    workers: int = setting(2, "processes for sheet rendering", range=(1, 64, "a whole number"))
    ranking_pdf_rows: int = setting(
        1000,
        "rows of the ranked table in ranking.pdf (0 = all; ranking.csv has all)",
        range=(0, 10000000, "a whole number"),
    )
    page_rows: int = setting(
        20000,
        "rows of the buildings table in index.html, first in audit order (0 = all; ranking.csv has all)",
        range=(0, 100_000_000, "a whole number"),
    )
    workbook_max_buildings: int = setting(
        5000,
        "ranking.xlsx is written for portfolios of at most this many buildings (0 = never); "
        "the CSV files always hold every table",
        range=(0, 100_000_000, "a whole number of buildings"),
    )


@dataclass
class Run:
    """[run]"""

    chunk_buildings: int = setting(
        16384,
        "buildings screened at a time (0 = all at once); peak memory grows with it",
        range=(0, 100_000_000, "a whole number of buildings"),
    )
    workers: int = setting(
        1,
        "processes that screen chunks of buildings side by side (1 = this process); each holds one chunk",
        range=(1, 64, "a whole number"),
    )
    threads: int = setting(
        2,
        "threads of this process that read the input files and, when workers = 1, check a large file's chunks "
        "and screen chunks of buildings side by side (1 = one at a time); each holds one chunk; at most one per core",
        range=(1, 64, "a whole number"),
    )
    ingest_chunk_mb: int = setting(
        32,
        "MB of a buildings or readings CSV read, checked and stored at a time (0 = each file whole)",
        range=(0, 1_000_000, "a whole number of MB"),
    )
    store_memory_mb: int = setting(
        1024,
        "MB of memory DuckDB may use for its buffers and queries; above it they spill to <database>.tmp "
        "(0 = DuckDB's default, 80 % of the machine's memory)",
        range=(0, 10_000_000, "a whole number of MB"),
    )
    cluster: str = setting(
        "",
        "run the screening chunks and the sheets on Dask (pip install 'ddscreen[cluster]'): local:N (a local "
        "cluster of N worker processes) or a scheduler address tcp://host:8786; empty = this process",
    )


@dataclass
class Analysis:
    """[analysis]"""

    units: str = setting(
        "IP", "IP or SI: units of the input files and of the outputs", choices=UNIT_SYSTEMS, expected="IP or SI"
    )
    as_of: str = setting("", "YYYY-MM-DD; empty = today")
    window_from: str = setting("", "YYYY-MM-DD; overrides the window start")
    window_to: str = setting("", "YYYY-MM-DD; overrides the window end (inclusive)")
    # the whole method compares 12 months; a building's own span may go back up to 10 years
    lookback_months: int = setting(
        24, "how far back a building's own 12-month span may go", range=(12, 120, "a whole number of months")
    )
    # at most about two billing cycles may be filled; more is a missing bill, not a late read
    fill_end_days: int = setting(
        35,
        "up to this many days at the window's end without a reading yet (about one billing "
        "cycle) are filled from the building's weather fit; 0 = never",
        range=(0, 62, "a whole number of days"),
    )
    degree_day_method: str = setting(
        "mean", "mean or maxmin (daily data); see README", choices=("mean", "maxmin"), expected="mean or maxmin"
    )
    calendarization: str = setting(
        "days", "days or degree_days", choices=("days", "degree_days"), expected="days or degree_days"
    )
    # balance points of real buildings lie well inside 20-90 °F (common practice)
    base_min_f: float = setting(
        40.0, "base-temperature grid for regression and balance point [°F]", range=(20.0, 90.0, "a temperature in °F")
    )
    base_max_f: float = setting(75.0, "", range=(20.0, 90.0, "a temperature in °F"))
    base_step_f: float = setting(0.5, "", range=(0.1, 5.0, "a step in °F"))
    normal_years: list[int] = setting([], "e.g. [2016, 2025] = 2016..2025; empty = every complete year")
    gas_btu_per_ft3: float = setting(1036.0, "natural gas heat content (EIA US average consumed)")
    steam_btu_per_lb: float = setting(1000.0, "district steam heat content per lb (convention, see units.csv)")
    draws: int = setting(500, "Monte Carlo draws for the expected band", range=(10, 10000, "a whole number"))
    seed: int = setting(20240601, "", range=(0, 4294967295, "a whole number"))
    count_other_fuels: bool = setting(False, "count non-heating fuels as heating (normally False)")


@dataclass
class Reading:
    """[reading]"""

    decimal_comma: bool = setting(False, "numbers written 1.234,5")
    date_order: str = setting(
        "",
        '"", "dmy" or "mdy" for slash dates like 03/04/2025',
        choices=("", *DATE_ORDERS),
        expected="dmy, mdy or ymd",
    )
    delimiter: str = setting("", '"" = detect; "," ";" or "\\t"', choices=("", ",", ";", "\t"), expected=", ; or a tab")
    encoding: str = setting("", '"" = UTF-8 with Latin-1 fallback')
    thousands: str = setting("", '"" = none; "," (or "." with decimal_comma, " " or "\'") read 1,485 as 1485')


@dataclass
class Prices:
    """[prices]: price per unit of energy, by heating fuel"""

    natural_gas: float = setting(1.2, "$ per therm")
    fuel_oil: float = setting(3.8, "$ per gallon")
    propane: float = setting(2.9, "$ per gallon")
    electricity: float = setting(0.15, "$ per kWh")
    district_steam: float = setting(25.0, "$ per Mlb")
    district_hot_water: float = setting(20.0, "$ per MMBtu")
    currency: str = setting("$")


@dataclass
class Emissions:
    """[emissions]"""

    # the worst grids emit about 1 kg CO2e per kWh (coal, from memory); 2 leaves room
    electricity_kg_co2e_per_kwh: float | None = setting(
        None, "None = the data file's national value; set your region's", range=(0.0, 2.0, "kg CO2e per kWh")
    )


@dataclass(frozen=True)
class Thresholds:
    """[thresholds] (frozen: built once per screening by :func:`thresholds` and passed to every step)"""

    band_ratio: float = setting(
        1.0, "metered above expected_high × this → above the band", range=(0.5, 5.0, "a factor")
    )
    band_floor: float = setting(
        0.1,
        "the band is at least ±10 % around P50 (common practice: meter/weather uncertainty)",
        range=(0.0, 0.9, "a share"),
    )
    z_review: float = setting(
        2.0,
        "unused since the audit order (issue 14); kept so config files that set it still load",
        range=(0.1, 20.0, "a robust z-score"),
    )
    review_score: float = setting(
        3.5,
        "evidence score (z + weighted balance-point and intensity z) for needs_review",
        range=(0.1, 50.0, "a score"),
    )
    weight_balance_point: float = setting(
        1.0, "weight of the fitted-minus-engineering balance point z in the score", range=(0.0, 10.0, "a weight")
    )
    weight_intensity: float = setting(
        0.5, "weight of the heating-intensity z within peers in the score", range=(0.0, 10.0, "a weight")
    )
    audit_first_ratio: float = setting(
        1.5,
        "unused since Audit first is this quarter's plan ([plan]); kept so old configs load",
        range=(1.0, 100.0, "a ratio"),
    )
    audit_first_score: float = setting(
        5.0,
        "unused since Audit first is this quarter's plan ([plan]); kept so old configs load",
        range=(0.1, 50.0, "a score"),
    )
    peer_percentile_high: float = setting(
        90.0, "intensity percentile among peers flagged as high", range=(50.0, 100.0, "a percentile")
    )
    min_peer_group: int = setting(
        8, "peer groups smaller than this fall back to use type", range=(2, 10000, "a whole number of buildings")
    )
    baseload_share_high: float = setting(
        1.5, "baseload share above this × the use type's default share", range=(1.0, 10.0, "a factor")
    )
    balance_point_high_f: float = setting(
        65.0, "fitted balance point above this → controls/setpoints flag", range=(40.0, 90.0, "a temperature in °F")
    )
    r2_min: float = setting(0.7, "fit poorer than this → inconsistent use", range=(0.0, 1.0, "a share"))
    cv_rmse_max: float = setting(
        20.0, "% (ASHRAE Guideline 14 monthly regression criterion)", range=(1.0, 1000.0, "a percentage")
    )
    yoy_rise: float = setting(0.15, "normal-year heating up more than 15 % on last year", range=(0.01, 10.0, "a share"))
    yoy_review: float = setting(
        0.25,
        "needs_review also when normal-year heating is up at least 25 % on last year …",
        range=(0.01, 10.0, "a share"),
    )
    yoy_review_z: float = setting(
        4.0,
        "… and that change is this many robust z above the portfolio's changes …",
        range=(0.1, 50.0, "a robust z-score"),
    )
    yoy_review_r2_min: float = setting(
        0.5, "… and the fit that normalizes both years explains at least this share (R²) …", range=(0.0, 1.0, "a share")
    )
    yoy_review_heating_share_min: float = setting(
        0.25, "… and heating is at least this share of the fuel's use", range=(0.0, 1.0, "a share")
    )
    # "covered" below half the span's days means nothing (common practice)
    coverage_min: float = setting(0.9, "share of the span covered by readings", range=(0.5, 1.0, "a share"))
    estimated_share_max: float = setting(
        0.5, "share of estimated reads above which data is weak", range=(0.0, 1.0, "a share")
    )
    estimated_run_min: int = setting(
        3,
        "this many estimated reads in a row, then a true read: the bills' shape is invented (estimated_run)",
        range=(2, 24, "a whole number"),
    )
    unit_error_factor: float = setting(
        8.0,
        "a reading this many times off the same month of other years suggests a unit error",
        range=(2.0, 10000.0, "a factor"),
    )
    unit_error_factor_expected: float = setting(
        10.0, "metered/expected at or above this: likely unit or entry error", range=(2.0, 10000.0, "a factor")
    )
    unit_error_factor_expected_low: float = setting(
        25.0, "metered/expected at or below 1/this: likely unit or entry error", range=(2.0, 10000.0, "a factor")
    )
    unit_error_factor_fit: float = setting(
        4.0,
        "a bill this many times above (or below 1/this of) what its own weather fit predicts",
        range=(1.5, 10000.0, "a factor"),
    )
    unit_error_isolation: float = setting(
        2.0,
        "… and this many times apart from both neighbouring bills (a spike, not a step)",
        range=(1.0, 10_000.0, "a factor"),
    )
    min_excess_ratio: float = setting(
        1.0, "metered/expected (P50) must reach this for needs_review", range=(0.5, 10.0, "a ratio")
    )
    peer_prior: float = setting(
        3.0,
        "evidence scale: the peers' spread weighs n / (n + this), the model band the rest",
        range=(0.0, 10000.0, "a number of buildings"),
    )
    sure_offset: float = setting(
        1.0, "a view's sureness is Φ(z − this): half sure at z = 1", range=(-5.0, 10.0, "a robust z-score")
    )
    step_sure_z: float = setting(
        3.0,
        "the step-up view is half sure at this robust z of the year-on-year change",
        range=(0.0, 50.0, "a robust z-score"),
    )
    mechanism_support: float = setting(
        0.5, "a mechanism is named (with its checks) from this sureness on", range=(0.0, 1.0, "a share")
    )
    balance_point_sd_f: float = setting(
        5.0,
        "model scale of fitted − engineering balance point [°F] (our own)",
        range=(0.5, 30.0, "a temperature difference in °F"),
    )
    baseload_share_sd: float = setting(
        0.15, "model scale of the non-heating share against the use type's (our own)", range=(0.01, 1.0, "a share")
    )
    mechanism_weight: float = setting(
        0.5, "share of the level view's sureness that rests on its surest mechanism", range=(0.0, 1.0, "a share")
    )


@dataclass
class Savings:
    """[savings]: savings after a measure (events file kind = measure); README"""

    # a commissioning settle-in of up to a year; a baseline needs a fit (2 parameters) and at most 12 monthly bills
    blackout_days: int = setting(
        30,
        "days after the measure left out of the reporting period (commissioning)",
        range=(0, 366, "a whole number of days"),
    )
    post_measure_min_days: int = setting(
        180,
        "measure in the window: judged on the days after it + blackout if this many",
        range=(90, 365, "a whole number of days"),
    )
    baseline_min_periods: int = setting(
        9,
        "bills (of at most 62 days) the baseline needs in the 12 months before",
        range=(3, 12, "a whole number of bills"),
    )
    cv_rmse_max: float = setting(
        20.0,
        "% baseline limit, ASHRAE Guideline 14 (monthly regression; from memory)",
        range=(0.1, 1000.0, "a percentage"),
    )
    nmbe_max: float = setting(
        0.005,
        "% |net determination bias| limit, ASHRAE Guideline 14 (from memory)",
        range=(0.0001, 100.0, "a percentage"),
    )


@dataclass
class Learning:
    """[learning]: learning from audits (docs/methods.md "Learning from audits")"""

    min_audits: int = setting(
        5,
        "an era x use type's default bias is applied from this many audited buildings on",
        range=(2, 1_000_000, "a whole number of audited buildings"),
    )


@dataclass
class Plan:
    """[plan]"""

    audits_per_quarter: int = setting(
        10,
        "buildings to visit this quarter (0 = no limit: every one worth its visit)",
        range=(0, 1000000, "a whole number of buildings"),
    )
    audit_cost: float = setting(
        2000.0,
        "cost of one visit: expected savings per year below it are not planned (0 = any)",
        range=(0.0, 100000000.0, "a cost per visit"),
    )
    clean_audit_rest_quarters: int = setting(
        4,
        "an audit that found nothing keeps a building off the plan this many quarters …",
        range=(0, 40, "a whole number of quarters"),
    )
    clean_audit_regrow: float = setting(
        2.0,
        "… unless its expected savings reach this × those of the list it was audited from",
        range=(1.0, 100.0, "a factor"),
    )


@dataclass
class Settings:
    """All settings, typed (:func:`settings` gives this view of a checked config)."""

    inputs: Inputs = field(default_factory=Inputs)
    store: Store = field(default_factory=Store)
    output: Output = field(default_factory=Output)
    run: Run = field(default_factory=Run)
    analysis: Analysis = field(default_factory=Analysis)
    reading: Reading = field(default_factory=Reading)
    prices: Prices = field(default_factory=Prices)
    emissions: Emissions = field(default_factory=Emissions)
    thresholds: Thresholds = field(default_factory=Thresholds)
    savings: Savings = field(default_factory=Savings)
    learning: Learning = field(default_factory=Learning)
    plan: Plan = field(default_factory=Plan)


#: section name → its dataclass
SECTIONS: dict[str, type] = {
    f.name: f.type if isinstance(f.type, type) else globals()[f.type] for f in fields(Settings)
}


def _keys() -> list[tuple[str, Field]]:
    return [(s, f) for s, cls in SECTIONS.items() for f in fields(cls)]


#: The defaults as a plain dict (section → key → value), in the declared order; a run's config is this
#: dict with the file's and the command line's values merged in (:func:`load`).
DEFAULTS: dict[str, dict[str, Any]] = asdict(Settings())
#: The allowed range of every numeric setting: (section, key) → (low, high, what), from the declarations.
RANGES: dict[tuple[str, str], tuple[float, float, str]] = {
    (s, f.name): f.metadata["range"] for s, f in _keys() if f.metadata["range"] is not None
}
#: Settings with a fixed set of values: (section, key) → (choices, how a message names them).
CHOICES: dict[tuple[str, str], tuple[tuple[str, ...], str]] = {
    (s, f.name): (f.metadata["choices"], f.metadata["expected"]) for s, f in _keys() if f.metadata["choices"]
}


def settings(cfg: Settings | dict) -> Settings:
    """The typed view of a config dict (as :func:`load` returns it); a :class:`Settings` is returned as it is.

    The run builds it once, right after :func:`load` checked the dict, and the orchestration reads its
    attributes (a misspelt key is a type-check or ``AttributeError``, not a ``KeyError`` mid-run); the
    library's entry points that take a config accept either and convert here, at the boundary."""
    if isinstance(cfg, Settings):
        return cfg
    return Settings(**{s: cls(**cfg[s]) for s, cls in SECTIONS.items()})


def thresholds(cfg: dict) -> Thresholds:
    """The ``[thresholds]`` settings of a config dict (as :func:`load` returns it) as the frozen :class:`Thresholds`."""
    return Thresholds(**cfg["thresholds"])


def template_comments() -> dict[tuple[str, str], str]:
    """The comment of each setting (used by ``ddscreen init``)."""
    return {(s, f.name): f.metadata["comment"] for s, f in _keys()}


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
            raise ConfigError(
                f"config key {where}: got {value!r}; expected a table like "
                '[inputs.columns.readings] with "Your name" = "our_name" lines'
            )
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
            raise ConfigError(
                f"{origin}: unknown section [{section}]; expected one of " + ", ".join(f"[{s}]" for s in DEFAULTS)
            )
        if not isinstance(values, dict):
            raise ConfigError(f"{origin}: [{section}] must be a table of keys")
        for key, value in values.items():
            if key not in DEFAULTS[section]:
                raise ConfigError(
                    f"{origin}: unknown key [{section}] {key}; expected one of " + ", ".join(DEFAULTS[section])
                )
            value = _check_type(section, key, value, DEFAULTS[section][key])
            if isinstance(DEFAULTS[section][key], dict):  # tables merge per kind (command line over file)
                merged = dict(out[section][key] or {})
                for kind, mapping in value.items():
                    merged[kind] = (
                        {**(merged.get(kind) or {}), **mapping}
                        if isinstance(mapping, dict) and isinstance(merged.get(kind), dict)
                        else mapping
                    )
                value = merged
            out[section][key] = value
    return out


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


def _check_choice(cfg: dict, section: str, key: str) -> None:
    choices, expected = CHOICES[(section, key)]
    if cfg[section][key] not in choices:
        raise _range_error(f"[{section}] {key}", cfg[section][key], expected)


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
    for section, key in (
        ("analysis", "units"),
        ("output", "paper"),
        ("analysis", "degree_day_method"),
        ("analysis", "calendarization"),
    ):
        _check_choice(cfg, section, key)
    if not a["base_min_f"] < a["base_max_f"]:
        raise ConfigError(
            f"config keys [analysis] base_min_f/base_max_f: got {a['base_min_f']:g} and "
            f"{a['base_max_f']:g}; expected min < max"
        )
    _check_heat_contents(a)
    _check_dates(a, today)
    ny = a["normal_years"]
    if ny:
        if len(ny) != 2 or not all(isinstance(y, int) and not isinstance(y, bool) for y in ny) or ny[0] > ny[1]:
            raise ConfigError(f"config key [analysis] normal_years: got {ny!r}; expected [first_year, last_year]")
        last_complete = today.year - 1
        if ny[0] < EARLIEST.year or ny[1] > last_complete:
            raise ConfigError(
                f"config key [analysis] normal_years: got {ny!r}; expected complete years from "
                f"{EARLIEST.year} to {last_complete}"
            )
    check_columns(cfg["inputs"]["columns"])
    check_cluster(cfg["run"]["cluster"])
    r = cfg["reading"]
    dec = "," if r["decimal_comma"] else "."
    if r["thousands"] not in ("", ",", ".", " ", "'") or r["thousands"] == dec:
        raise _range_error(
            "[reading] thousands",
            r["thousands"],
            f'"" (none), ",", ".", " " or "\'", not the decimal mark {dec!r}'
            + (" (decimal_comma = true)" if r["decimal_comma"] else ""),
        )
    _check_choice(cfg, "reading", "date_order")
    _check_choice(cfg, "reading", "delimiter")
    if r["encoding"]:
        import codecs

        try:
            codecs.lookup(r["encoding"])
        except LookupError:
            raise _range_error(
                "[reading] encoding", r["encoding"], "an encoding name such as utf-8, cp1252 or latin-1 (or empty)"
            ) from None
    for k, v in cfg["prices"].items():
        if k == "currency":
            if not (1 <= len(v) <= 8) or any(ord(ch) < 32 for ch in v):
                raise _range_error("[prices] currency", v, "a symbol or code of 1 to 8 characters")
            continue
        _check_range("prices", k, v, 0.0, PRICE_MAX, "a price per unit")
    return cfg


#: ``[run] cluster = "local:N"``: a local Dask cluster of N worker processes (screening/cluster.py).
CLUSTER_LOCAL = re.compile(r"^local:(\d{1,3})$")


def check_cluster(address: str) -> None:
    """``[run] cluster``: empty (this process), ``local:N`` (1 ≤ N ≤ 256) or a scheduler address (``://``)."""
    m = CLUSTER_LOCAL.match(address)
    if address == "" or "://" in address or (m and 1 <= int(m.group(1)) <= 256):
        return
    raise _range_error(
        "[run] cluster",
        address,
        "empty (this process), local:N (a local Dask cluster of N worker processes, 1-256) or a scheduler "
        "address such as tcp://host:8786",
    )


def column_names() -> dict[str, list[str]]:
    """Our column names per file kind (what ``[inputs.columns]`` may map to)."""
    from .schema import BUILDINGS, EVENTS, READ_DATE, READINGS, WEATHER

    return {
        "buildings": [c.name for c in BUILDINGS],
        "readings": [c.name for c in READINGS] + [READ_DATE],
        "weather": [c.name for c in WEATHER],
        "events": [c.name for c in EVENTS],
    }


def check_columns(columns: dict) -> None:
    """``[inputs.columns]``: per kind, a table of "their name" = "our name" (each of ours once)."""
    known = column_names()
    for kind, mapping in columns.items():
        where = f"[inputs.columns] {kind}"
        if kind not in known:
            raise ConfigError(f"config key {where}: unknown file kind; expected buildings, readings, weather or events")
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
                raise ConfigError(
                    f"config key [inputs.columns.{kind}]: {targets[ours]!r} and {theirs!r} both map to "
                    f"{ours!r}; expected each of our columns from one column of the file"
                )
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
    latest = today + _dt.timedelta(days=1)  # one day of slack for a server clock in another time zone
    for key in ("as_of", "window_from", "window_to"):
        if a[key]:
            d = parse_date_value(a[key], f"config key [analysis] {key}")
            if not (EARLIEST <= d <= latest):
                raise _range_error(
                    f"[analysis] {key}", a[key], f"a date from {EARLIEST} to {latest} (no readings exist after today)"
                )
    if bool(a["window_from"]) != bool(a["window_to"]):
        raise ConfigError("config keys [analysis] window_from and window_to: give both or neither")
    if a["window_from"]:
        lo, hi = parse_date_value(a["window_from"], ""), parse_date_value(a["window_to"], "")
        days = (hi - lo).days + 1
        if not (WINDOW_DAYS[0] <= days <= WINDOW_DAYS[1]):
            raise ConfigError(
                f"config keys [analysis] window_from/window_to (--from/--to): got {lo} to {hi} "
                f"({days} days); expected a window of {WINDOW_DAYS[0]} to {WINDOW_DAYS[1]} days "
                "(12 months to ten years) with window_to after window_from"
            )


def run_window(cfg: Settings | dict, today: _dt.date | None = None) -> tuple[_dt.date, tuple[_dt.date, _dt.date]]:
    """The run's as-of day and analysis window (start, inclusive end) from checked settings."""
    from .window import analysis_window

    a = settings(cfg).analysis
    as_of = parse_date_value(a.as_of, "config key [analysis] as_of") if a.as_of else (today or _dt.date.today())
    if a.window_from:
        return as_of, (
            parse_date_value(a.window_from, "config key [analysis] window_from"),
            parse_date_value(a.window_to, "config key [analysis] window_to"),
        )
    return as_of, analysis_window(as_of)


def parse_date_value(value: str, where: str) -> _dt.date:
    from .parse import require_date

    return require_date(value, lambda v: ConfigError(f"{where}: got {v!r}; expected a date YYYY-MM-DD"))


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
        for section, key in (
            ("inputs", "buildings"),
            ("inputs", "readings"),
            ("inputs", "weather"),
            ("store", "database"),
            ("output", "root"),
        ):
            v = cfg[section][key]
            if v and not Path(v).is_absolute() and (section, key) in _file_keys(data):
                cfg[section][key] = str(base / v)
    if overrides:
        cfg = merge(
            cfg,
            {s: {k: v for k, v in kv.items() if v is not None} for s, kv in overrides.items()},
            origin="command line",
        )
    return validate(cfg)


def _file_keys(data: dict) -> set[tuple[str, str]]:
    return {(s, k) for s, kv in data.items() if isinstance(kv, dict) for k in kv}


def config_hash(cfg: dict) -> str:
    """A stable hash of the settings that change results (paths excluded; [run] only says how a run is
    executed: chunk sizes, workers, the Dask cluster)."""
    relevant = {k: v for k, v in cfg.items() if k not in ("inputs", "store", "output", "run")}
    relevant["output"] = {"paper": cfg["output"]["paper"]}
    return hashlib.sha256(json.dumps(relevant, sort_keys=True, default=str).encode()).hexdigest()[:16]
