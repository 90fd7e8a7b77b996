"""The declared vocabulary: every input column, code and list of names, once.

Pure declarations (no I/O). Every layer reads its columns, limits and names from here:
``ingest`` (checks of buildings and readings), ``events`` (the events file), ``weather`` (the
temperature limits), ``envelope`` (checks of a buildings frame given directly), ``units`` (fuels),
``config`` (the prices of each fuel, the column names ``[inputs.columns]`` may map to), ``metered`` and
``pipeline`` (the data-issue codes). ``tests/test_schema.py`` fails when a layer, ``sql/schema.sql`` or
README's input tables disagree with this module.

Limits are written in the internal (IP) units; a column with an ``si`` quantity is checked in the file's
own units under SI (the limit converted with ``screening/data/si_conversions.csv``). Meter units and their
factors are reference data with sources: ``screening/data/units.csv``.

How to add an input column: DEVELOPERS.md "How to add a column".
"""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from . import choices

#: Unit systems of the input files and the outputs (``[analysis] units``, ``--units``): declared in
#: ``choices.py`` (no imports), which the command line reads at start-up.
UNIT_SYSTEMS = choices.UNIT_SYSTEMS

#: Use types (buildings ``use_type``), with what each covers.
USE_TYPES: dict[str, str] = {
    "office": "offices",
    "multifamily": "apartment buildings",
    "school": "schools",
    "retail": "shops and stores",
    "warehouse": "warehouses and storage",
    "lodging": "hotels, dormitories",
    "healthcare": "clinics, hospitals, care homes",
    "other": "anything else",
}
#: Fuels (buildings ``heating_fuel``, readings ``fuel``, the ``[prices]`` keys), with their plain name.
#: Heat contents and the units each fuel is metered in: ``screening/data/units.csv`` (which also holds a
#: kerosene heat content; kerosene is not an input fuel: no efficiency default exists for it).
FUELS: dict[str, str] = {
    "natural_gas": "natural gas",
    "fuel_oil": "fuel oil (No. 2)",
    "propane": "propane",
    "electricity": "electricity",
    "district_steam": "district steam",
    "district_hot_water": "district hot water",
}
#: Construction eras from ``year_built``; era i covers [ERA_EDGES[i-1], ERA_EDGES[i]); ``unknown`` when
#: year_built is missing (docs/methods.md "Construction eras and defaults").
ERAS: tuple[str, ...] = ("pre-1950", "1950-1979", "1980-1999", "2000-2011", "2012+", "unknown")
ERA_EDGES: tuple[int, ...] = (1950, 1980, 2000, 2012)
#: Events file: kinds of event and findings of an audit.
EVENT_KINDS: dict[str, str] = {
    "audit": "a visit that looked for waste",
    "measure": "a measure installed (its savings are estimated)",
    "operation": "a change in operation",
    "meter_change": "a meter replaced or changed",
    "vacancy": "the building (partly) empty",
}
FINDINGS: dict[str, str] = {
    "confirmed": "the waste was found",
    "none_found": "nothing was found",
    "data_error": "the data was wrong, not the building",
}

#: 1 kBtu in kWh: 1 Btu_IT = 1055.05585262 J, 1 kWh = 3.6e6 J (NIST SP 811, Appendix B.8).
KBTU_TO_KWH = 0.29307107017222

#: A building id: 1-64 letters, digits, '-', '_' or '.'.
ID_PATTERN = r"^[A-Za-z0-9._-]{1,64}$"

#: One rejected input row: file, line, column, value and the reason (rejects.csv).
REJECT_SCHEMA = pl.Schema(
    {"file": pl.String, "line": pl.Int64, "column": pl.String, "value": pl.String, "reason": pl.String}
)

#: Flags: findings about the building, never data issues; they do not block a verdict (README "Flags").
FLAGS: dict[str, str] = {
    "above_band": "heating above the expected range",
    "high_among_peers": "high heating intensity among peers",
    "high_baseload": "high non-heating use of the heating fuel",
    "high_balance_point": "heating starts at a high outdoor temperature",
    "poor_fit": "use does not follow the weather consistently",
    "rising_use": "weather-normalized heating rising against last year",
    "envelope_defaulted": "envelope entirely from defaults (lower confidence)",
    "shifted_span": "compared over the building's latest covered 12 months, not the window",
    "base_at_grid_edge": "fitted balance point on the edge of the bases searched",
}


@dataclass(frozen=True)
class Issue:
    """A data-issue code: whether it blocks a verdict, which step finds it, and its plain text."""

    blocking: bool
    found_by: str  # "metered" (per reading, screening.metered) or "pipeline" (screening.pipeline)
    text: str


#: Data issues (README "Data issues"); their detailed messages are built where they are found.
DATA_ISSUES: dict[str, Issue] = {
    "duplicate_reads": Issue(True, "metered", "the same period read twice: energy would be double counted"),
    "overlapping_reads": Issue(True, "metered", "periods of one meter overlap: energy would be double counted"),
    "low_coverage": Issue(True, "metered", "reads cover less than coverage_min of the span"),
    "gap_in_reads": Issue(False, "metered", "days of the span with no read (coverage says how much)"),
    "many_estimated_reads": Issue(False, "metered", "more than estimated_share_max of the span's reads estimated"),
    "estimated_run": Issue(
        True, "metered", "a run of estimated reads and its catch-up: months of the bills' shape invented"
    ),
    "likely_unit_error": Issue(True, "pipeline", "a bill or the whole use 10x-1000x off (units, entry)"),
    "bill_off_fit": Issue(True, "pipeline", "a bill far off the building's own weather fit"),
    "weather_gap": Issue(True, "pipeline", "days of the span without weather at the station"),
    "no_weather_at_station": Issue(True, "pipeline", "the station has no weather on any day of the span"),
    "no_readings": Issue(True, "pipeline", "no usable readings for this building"),
    "no_heating_fuel_readings": Issue(True, "pipeline", "readings only in fuels other than the heating fuel"),
    "missing_bills": Issue(False, "pipeline", "bills missing inside the analysis window (dates named)"),
    "end_days_filled": Issue(False, "pipeline", "the span's last days had no reading yet and were filled"),
}


def issue_codes(found_by: str | None = None) -> dict[str, bool]:
    """Data-issue code → blocks a verdict, for the issues found by one step (or all)."""
    return {c: i.blocking for c, i in DATA_ISSUES.items() if found_by is None or i.found_by == found_by}


@dataclass(frozen=True)
class Column:
    """One column of an input file.

    ``lo``/``hi`` are limits in the IP unit (``hi="this_year"``: the current year); ``lo_open``: the
    lower limit itself is refused. ``si`` names the quantity of ``si_conversions.csv`` that converts the
    file's SI value to IP. ``lo_si``/``hi_si`` give an SI limit that is not the IP one converted.
    """

    name: str  # as written in the file (the header)
    canon: str  # the column of the canonical frame (DEVELOPERS.md glossary)
    kind: str  # id | text | choice | float | int | bool | date
    required: bool
    meaning: str
    unit_ip: str = ""
    unit_si: str = ""
    si: str | None = None
    lo: float | None = None
    hi: float | str | None = None
    lo_open: bool = False
    lo_si: float | None = None
    hi_si: float | None = None
    choices: tuple[str, ...] = ()
    what: str = ""  # how a choice is named in messages ("use type")
    display: bool = False  # display text: control characters are removed

    def spec(self) -> tuple[str, str, str, bool, dict]:
        """``(column, canonical name, kind, required, options)``: the form the readers take."""
        o: dict = {}
        if self.choices:
            o["choices"], o["what"] = self.choices, self.what
        if self.display:
            o["display"] = True
        if self.lo is not None:
            o["min"] = self.lo
        if self.lo_open:
            o["excl"] = True
        if self.hi is not None:
            o["max"] = self.hi
        if self.si:
            o["si"] = self.si
        return (self.name, self.canon, self.kind, self.required, o)


_U = "Btu/(h·ft²·°F)"
_U_SI = "W/(m²·K)"

#: buildings.csv: one row per building.
BUILDINGS: tuple[Column, ...] = (
    Column("building_id", "building_id", "id", True, "unique; 1–64 characters of letters, digits, `-`, `_`, `.`"),
    Column("name", "name", "text", True, "display name, any text", display=True),
    Column("station_id", "station_id", "text", True, "key into the weather file"),
    Column("use_type", "use_type", "choice", True, ", ".join(USE_TYPES), choices=tuple(USE_TYPES), what="use type"),
    Column(
        "floor_area", "floor_area_ft2", "float", True, "gross floor area > 0", "ft²", "m²", "area", 0, 1e8, lo_open=True
    ),
    Column(
        "year_built", "year_built", "int", False, "1800 to the current year", "year", "year", lo=1800, hi="this_year"
    ),
    Column("stories", "stories", "int", False, "≥ 1 (at most 200)", "floors", "floors", lo=1, hi=200),
    Column("heating_fuel", "heating_fuel", "choice", True, ", ".join(FUELS), choices=tuple(FUELS), what="heating fuel"),
    # above 1 only for electricity (a heat pump's seasonal COP; envelope.estimate_envelope checks the pair)
    Column(
        "heating_efficiency",
        "heating_efficiency",
        "float",
        False,
        "seasonal efficiency as a fraction; seasonal COP for heat pumps (up to 6)",
        "fraction or COP",
        "fraction or COP",
        lo=0,
        hi=6,
        lo_open=True,
    ),
    Column(
        "ua_total",
        "ua_total_btu_h_f",
        "float",
        False,
        "known overall heat-loss coefficient; overrides the envelope estimate",
        "Btu/(h·°F)",
        "W/K",
        "conductance",
        0,
        1e9,
        lo_open=True,
    ),
    Column(
        "balance_point",
        "balance_point_f",
        "float",
        False,
        "known balance-point temperature; overrides the estimate",
        "°F",
        "°C",
        "temperature",
        20,
        85,
    ),
    # U-factors: at most 2 Btu/(h·ft²·°F). The surface films alone (inside 0.68, outside 0.17 h·ft²·°F/Btu,
    # ASHRAE Handbook—Fundamentals ch. 26 surface resistances; from memory) hold an opaque wall below about
    # 1.2; single glazing in an aluminium frame without a thermal break is about 1.0–1.3, a single-glazed
    # sloped skylight up to about 2 (ASHRAE Handbook—Fundamentals ch. 15, fenestration U-factors; from
    # memory). Above 2 is an SI value (W/(m²·K)) in an IP file or a typing error.
    Column("wall_u", "wall_u_btu_h_ft2_f", "float", False, "wall U-factor", _U, _U_SI, "u_factor", 0, 2, lo_open=True),
    Column("roof_u", "roof_u_btu_h_ft2_f", "float", False, "roof U-factor", _U, _U_SI, "u_factor", 0, 2, lo_open=True),
    Column(
        "window_u", "window_u_btu_h_ft2_f", "float", False, "window U-factor", _U, _U_SI, "u_factor", 0, 2, lo_open=True
    ),
    Column(
        "window_fraction",
        "window_fraction",
        "float",
        False,
        "window-to-wall ratio, 0–0.95",
        "fraction",
        "fraction",
        lo=0,
        hi=0.95,
    ),
    # infiltration at natural pressures: at most 10 per hour. Leaky old buildings reach 1–2 /h (ACH50 ÷ 20,
    # common practice; docs/factors.md ACH by age); a blower-door ACH50 of 10–20 entered as natural ACH is the
    # likely mistake above 10.
    Column("air_changes", "ach", "float", False, "infiltration, air changes per hour", "1/h", "1/h", lo=0, hi=10),
    Column(
        "outdoor_air",
        "outdoor_air_cfm_ft2",
        "float",
        False,
        "mechanical ventilation",
        "cfm/ft²",
        "L/(s·m²)",
        "airflow_density",
        0,
        10,
    ),
    # sensible effectiveness below 1: ε → 1 only as the exchanger's NTU → ∞ (ε-NTU relations, e.g.
    # Incropera, Fundamentals of Heat and Mass Transfer, ch. 11); rated recovery devices stay below about
    # 0.9 (ASHRAE Handbook—HVAC Systems and Equipment, air-to-air energy recovery; from memory). 1.0 would
    # mean a ventilation load of zero.
    Column(
        "heat_recovery",
        "heat_recovery",
        "float",
        False,
        "ventilation heat-recovery effectiveness, 0–0.95",
        "fraction",
        "fraction",
        lo=0,
        hi=0.95,
    ),
    Column("setpoint", "setpoint_f", "float", False, "heating setpoint", "°F", "°C", "temperature", 40, 85),
    Column(
        "setback", "setback_f", "float", False, "setback depth", "°F (difference)", "K", "temperature_difference", 0, 40
    ),
    Column("setback_hours", "setback_hours", "float", False, "setback hours per day", "h/day", "h/day", lo=0, hi=24),
    Column(
        "internal_gains",
        "internal_gains_w_ft2",
        "float",
        False,
        "24-hour average internal gains",
        "W/ft²",
        "W/m²",
        "power_density",
        0,
        50,
    ),
    Column(
        "wall_area",
        "wall_area_ft2",
        "float",
        False,
        "gross wall area; overrides the geometry estimate",
        "ft²",
        "m²",
        "area",
        0,
        1e8,
    ),
    Column(
        "window_area",
        "window_area_ft2",
        "float",
        False,
        "window area; overrides the geometry estimate",
        "ft²",
        "m²",
        "area",
        0,
        1e8,
    ),
    Column(
        "roof_area",
        "roof_area_ft2",
        "float",
        False,
        "roof area; overrides the geometry estimate",
        "ft²",
        "m²",
        "area",
        0,
        1e8,
    ),
    Column("address", "address", "text", False, "shown on the sheet", display=True),
    Column("city", "city", "text", False, "shown on the sheet", display=True),
    Column(
        "heat_content",
        "heat_content",
        "float",
        False,
        "the heating fuel's heat content printed on the bill",
        "Btu per ft³ (gas), gal (oil, propane) or lb (steam)",
        "as IP",
        lo=0,
        hi=1e9,
        lo_open=True,
    ),
    Column(
        "price",
        "price",
        "float",
        False,
        "price per unit of the heating fuel",
        "as `[prices]`",
        "as `[prices]`",
        lo=0,
        hi=1e6,
    ),
)

#: readings.csv: one row per meter reading of any length.
READINGS: tuple[Column, ...] = (
    Column("building_id", "building_id", "id", True, "the building read"),
    Column("fuel", "fuel", "choice", True, ", ".join(FUELS), choices=tuple(FUELS), what="fuel"),
    Column("period_start", "period_start", "date", True, "first day covered"),
    Column("period_end", "period_end", "date", True, "last day covered (inclusive)"),
    Column(
        "quantity",
        "quantity",
        "float",
        True,
        "metered quantity",
        "the `unit` column",
        "the `unit` column",
        lo=0,
        hi=1e12,
    ),
    Column("unit", "unit", "text", True, "a unit of screening/data/units.csv that fits the fuel"),
    Column("estimated", "estimated", "bool", False, "true for an estimated read"),
    Column("cost", "cost", "float", False, "amount billed", "currency", "currency", lo=0, hi=1e10),
    Column("meter_id", "meter_id", "text", False, "tells several meters of one fuel apart"),
)
#: A readings file with read dates and no start dates names this column (or ``period_end`` alone).
READ_DATE = "read_date"

#: weather.csv (daily). A temperature beyond ±140 °F (±60 °C in °C files) is no surface air temperature:
#: the recorded extremes are about 134 °F and −128.6 °F (from memory).
WEATHER: tuple[Column, ...] = (
    Column("station_id", "station_id", "text", True, "the station, as named in buildings' station_id"),
    Column("date", "date", "date", True, "the day"),
    Column(
        "t_min",
        "t_min_f",
        "float",
        False,
        "the day's lowest temperature (with t_max)",
        "°F",
        "°C",
        "temperature",
        -140,
        140,
        lo_si=-60,
        hi_si=60,
    ),
    Column(
        "t_max",
        "t_max_f",
        "float",
        False,
        "the day's highest temperature (with t_min)",
        "°F",
        "°C",
        "temperature",
        -140,
        140,
        lo_si=-60,
        hi_si=60,
    ),
    Column(
        "t_mean",
        "t_mean_f",
        "float",
        False,
        "the day's mean temperature (or t_min with t_max)",
        "°F",
        "°C",
        "temperature",
        -140,
        140,
        lo_si=-60,
        hi_si=60,
    ),
)

#: events.csv (optional): one row per thing that happened at a building.
EVENTS: tuple[Column, ...] = (
    Column("building_id", "building_id", "id", True, "one of the accepted buildings"),
    Column("date", "date", "date", True, "the day it happened (a measure: its installation day)"),
    Column("kind", "kind", "choice", True, ", ".join(EVENT_KINDS), choices=tuple(EVENT_KINDS), what="event kind"),
    Column(
        "finding",
        "finding",
        "choice",
        False,
        "for an audit only: " + ", ".join(FINDINGS),
        choices=tuple(FINDINGS),
        what="finding",
    ),
    Column("mechanism", "mechanism", "text", False, "free text", display=True),
    Column("description", "description", "text", False, "free text", display=True),
    Column(
        "expected_savings",
        "expected_savings",
        "float",
        False,
        "what the measure was expected to save, ≥ 0",
        "as given",
        "as given",
        lo=0,
        hi=1e12,
    ),
    Column("cost", "cost", "float", False, "what it cost, ≥ 0", "currency", "currency", lo=0, hi=1e10),
)

FILES: dict[str, tuple[Column, ...]] = {
    "buildings": BUILDINGS,
    "readings": READINGS,
    "weather": WEATHER,
    "events": EVENTS,
}


def column(kind: str, name: str) -> Column:
    """The declared column ``name`` of file ``kind``."""
    for c in FILES[kind]:
        if c.name == name:
            return c
    raise KeyError(f"{kind}: no column {name!r}")


def specs(kind: str) -> list[tuple[str, str, str, bool, dict]]:
    """The readers' column specifications of file ``kind`` (see :meth:`Column.spec`)."""
    return [c.spec() for c in FILES[kind]]


def numeric_bounds(kind: str) -> dict[str, tuple[float, float, bool]]:
    """Canonical column → (lo, hi, lo inclusive?) of every numeric column with a fixed upper limit."""
    return {
        c.canon: (float(c.lo if c.lo is not None else float("-inf")), float(c.hi), not c.lo_open)
        for c in FILES[kind]
        if c.kind in ("float", "int") and isinstance(c.hi, (int, float))
    }
