"""Read weather files into the canonical frames (layer 3: reads files, no degree days).

Three readers, all strict and explicit:

* :func:`read_daily_weather` — the daily CSV of the input contract
  (``station_id, date`` and ``t_min`` with ``t_max``, or ``t_mean``; °F with
  ``units="IP"``, °C with ``units="SI"``);
* :func:`read_hourly_weather` — readings ``station_id, timestamp, temperature``;
* :func:`read_mapped_daily` — any daily-summary layout (as national weather services
  publish them) through an explicit mapping *source column → our column, unit*; nothing
  is guessed from names.

Every reader returns ``(frame, rejects)``, a 2-tuple with an extra ``.notices``
attribute (a list of one-line messages, e.g. identical duplicate rows that were
dropped or ignored columns). ``rejects`` has ``file, line, column, value, reason``
for every row not used, so nothing disappears silently. Structural problems
(unreadable file, missing column) raise :class:`screening.errors.InputError`.

Rejected rows: a date that is not ``YYYY-MM-DD`` (or the mapping's format); a
non-numeric or non-finite temperature; a temperature beyond ±140 °F (±60 °C in °C
files); ``t_min > t_max``; ``t_mean`` outside ``[t_min, t_max]``; a row without a
usable temperature (neither both ``t_min`` and ``t_max`` nor ``t_mean``); every row of a
station and date that appears more than once with different values. Identical
duplicates are kept once and reported in ``.notices``.
"""

from __future__ import annotations

from pathlib import Path
from typing import cast

import polars as pl

from .csvread import LINE_COL, read_table
from .degree_days import F_PER_C
from .errors import InputError
from .parse import dates_in_format
from .schema import REJECT_SCHEMA, WEATHER, column

__all__ = [
    "read_daily_weather",
    "read_hourly_weather",
    "read_mapped_daily",
    "WeatherRead",
    "REJECT_SCHEMA",
    "TEMP_UNITS",
]

#: Physical plausibility limits of a surface air temperature, per file unit (issue 3:
#: "beyond ±140 °F / ±60 °C"; the recorded extremes are about 134 °F and −128.6 °F, from memory).
#: Declared in :data:`screening.schema.WEATHER` (the same for t_min, t_max and t_mean).
_LIMITS = {"F": float(column("weather", "t_mean").hi or 0), "C": float(column("weather", "t_mean").hi_si or 0)}
#: Temperature units a mapping may name: unit → (factor to °F, offset to °F, limit family).
#: °F = °C·1.8 + 32 (definition, NIST SP 811); "0.1C"/"0.1F" are tenths, as some services publish.
TEMP_UNITS = {
    "F": (1.0, 0.0, "F"),
    "C": (F_PER_C, 32.0, "C"),
    "0.1F": (0.1, 0.0, "F"),
    "0.1C": (0.1 * F_PER_C, 32.0, "C"),
}
_SCALE_TO_FILE_UNIT = {"F": 1.0, "C": 1.0, "0.1F": 0.1, "0.1C": 0.1}
_OUR_DAILY = tuple(c.name for c in WEATHER)


class WeatherRead(tuple):
    """``(frame, rejects)`` with the reader's notices in ``.notices``."""

    notices: list[str]

    def __new__(cls, frame: pl.DataFrame, rejects: pl.DataFrame, notices: list[str]):
        self = super().__new__(cls, (frame, rejects))
        self.notices = notices
        return self


#: The warmest calendar month of every populated climate averages between 40 °F and 40 °C
#: (4.4 °C and 104 °F). From memory of climate normals: the coldest settled places' warmest month
#: is about 41-46 °F (Utqiagvik, Nuuk, Longyearbyen; only a few High Arctic stations lie below),
#: the hottest about 39 °C (Death Valley in July; Kuwait, Ahvaz 37-38 °C). Read in the wrong unit,
#: every populated climate falls outside: °C numbers read as °F give a warmest month below
#: 40 "°F", °F numbers read as °C one above 40 "°C". Used by :func:`check_plausible`.
WARMEST_MONTH_F = (40.0, 104.0)
#: ... and its coldest month averages at most 30 °C (86 °F): the warmest coldest months, on tropical
#: coasts and lowlands, are about 25-28 °C (from memory). Data outside both (a constant test
#: temperature, random numbers) is no climate in either unit: read as declared, with a notice.
COLDEST_MONTH_MAX_F = 86.0
#: Days of data each of the 12 calendar months needs before a station's warmest month is judged.
PLAUSIBLE_MIN_DAYS = 10


def check_plausible(weather: pl.DataFrame, label: str, *, units: str, rejects: pl.DataFrame | None = None) -> list[str]:
    """Stop when a daily weather file's temperatures look like the other unit (°C read as °F or back).

    Per station, from its daily means (``t_mean_f``, else the mean of ``t_min_f`` and ``t_max_f``)
    [°F]: the mean of each calendar month over the record, the warmest and coldest of them, and the
    annual mean (the mean of the 12). A station whose warmest month lies outside
    :data:`WARMEST_MONTH_F` is not a populated climate in the declared unit; when it is one in the
    other unit, the file is refused naming the station, the figures and the likely mix-up. Under
    ``SI``, values beyond ±60 °C that are ordinary °F temperatures (±140) in more than 1 % of the
    rows (rejected one by one by the readers) tell the same.

    Returns the notices (stations whose record is too short to judge: fewer than
    :data:`PLAUSIBLE_MIN_DAYS` days in some calendar month). Raises :class:`InputError`.
    """
    unit = _units_default(units)
    other = "C" if unit == "F" else "F"
    fix = 'set units = "SI" (°C files) or convert' if unit == "F" else 'set units = "IP" (°F files) or convert'
    if unit == "C" and rejects is not None and rejects.height:
        num = rejects.filter(pl.col("reason").str.starts_with("impossible temperature")).with_columns(
            pl.col("value")
            .str.strip_chars()
            .str.replace(",", ".", literal=True)
            .cast(pl.Float64, strict=False)
            .alias("_v")
        )
        f_like = num.filter(pl.col("_v").abs() <= _LIMITS["F"])
        n_rows = weather.height + rejects.height
        if f_like.height >= 5 and f_like.height > 0.01 * n_rows:
            raise InputError(
                label,
                f"{f_like.height} of {n_rows} rows hold temperatures above 60 °C that are "
                f"ordinary in °F (e.g. {f_like['value'][0]!r} on line {f_like['line'][0]}): looks like "
                f"°F read as °C: {fix}",
            )
    if weather.height == 0:
        return []
    daily = weather.select(
        "station_id", "date", pl.coalesce("t_mean_f", (pl.col("t_min_f") + pl.col("t_max_f")) / 2).alias("_t")
    ).drop_nulls("_t")
    months = daily.group_by("station_id", pl.col("date").dt.month().alias("_m")).agg(
        pl.col("_t").mean().alias("_mean"), pl.len().alias("_n")
    )
    per = (
        months.group_by("station_id")
        .agg(
            pl.col("_mean").max().alias("warm"),
            pl.col("_mean").min().alias("cold"),
            pl.col("_mean").mean().alias("annual"),
            ((pl.col("_n") >= PLAUSIBLE_MIN_DAYS).sum() == 12).alias("judged"),
        )
        .sort("station_id")
    )
    notes = []
    short = per.filter(~pl.col("judged"))["station_id"].to_list()
    if short:
        notes.append(
            f"{label}: the temperature unit of station(s) {', '.join(short[:5])}"
            f"{' …' if len(short) > 5 else ''} was not checked (fewer than {PLAUSIBLE_MIN_DAYS} days of "
            "data in some calendar month)"
        )
    lo, hi = WARMEST_MONTH_F
    # the station's figures as the other unit would have them [°F]
    if unit == "F":
        as_other = {k: pl.col(k) * F_PER_C + 32.0 for k in ("warm", "cold")}
    else:
        as_other = {k: (pl.col(k) - 32.0) / F_PER_C for k in ("warm", "cold")}
    plausible_other = as_other["warm"].is_between(lo, hi) & (as_other["cold"] <= COLDEST_MONTH_MAX_F)
    wrong_here = ~pl.col("warm").is_between(lo, hi) | (pl.col("cold") > COLDEST_MONTH_MAX_F)
    per = per.with_columns((pl.col("judged") & wrong_here).alias("_wrong"), plausible_other.alias("_other"))
    neither = per.filter(pl.col("_wrong") & ~pl.col("_other"))["station_id"].to_list()
    if neither:
        notes.append(
            f"{label}: the temperatures of station(s) {', '.join(neither[:5])}"
            f"{' …' if len(neither) > 5 else ''} are no populated climate in °F or °C (warmest month "
            f"outside 40 °F to 40 °C, or coldest month above 30 °C); read as °{unit} as declared"
        )
    odd = per.filter(pl.col("_wrong") & pl.col("_other"))
    if odd.height:
        r = odd.row(0, named=True)
        to_file = (lambda f: f) if unit == "F" else (lambda f: (f - 32.0) / F_PER_C)
        lim = f"{lo:g} °F" if unit == "F" else f"{(hi - 32) / F_PER_C:g} °C"
        more = f" (and {odd.height - 1} more station(s))" if odd.height > 1 else ""
        raise InputError(
            label,
            f"station {r['station_id']}{more}: warmest month averages {to_file(r['warm']):.1f} °{unit}, "
            f"coldest {to_file(r['cold']):.1f} °{unit}, year {to_file(r['annual']):.1f} °{unit}; no "
            f"populated climate has its warmest month {'below' if unit == 'F' else 'above'} {lim}, but as "
            f"°{other} these figures are a plausible climate: looks like °{other} read as °{unit}: {fix}",
        )
    return notes


def _units_default(units: str) -> str:
    if units not in ("IP", "SI"):
        raise ValueError(f"units must be 'IP' or 'SI'; got {units!r}")
    return "F" if units == "IP" else "C"


def _rejects_frame(rows: list[pl.DataFrame], label: str, csv_rejects: list[dict]) -> pl.DataFrame:
    base = [pl.DataFrame(csv_rejects, schema=REJECT_SCHEMA)] if csv_rejects else []
    parts = base + [
        r.select(
            pl.lit(label).alias("file"),
            pl.col(LINE_COL).cast(pl.Int64).alias("line"),
            pl.col("column").cast(pl.String),
            pl.col("value").cast(pl.String),
            pl.col("reason").cast(pl.String),
        )
        for r in rows
        if r.height
    ]
    if not parts:
        return pl.DataFrame(schema=REJECT_SCHEMA)
    return pl.concat(parts, how="vertical").sort("line", "column")


def _reject(df: pl.DataFrame, mask: pl.Expr, column: str, value: pl.Expr, reason: str | pl.Expr):
    """Split ``df`` into (kept, rejected-with-reason)."""
    flagged = df.with_columns(mask.fill_null(False).alias("_bad"))
    bad = flagged.filter(pl.col("_bad")).select(
        LINE_COL,
        pl.lit(column).alias("column"),
        value.cast(pl.String).alias("value"),
        (reason if isinstance(reason, pl.Expr) else pl.lit(reason)).alias("reason"),
    )
    return flagged.filter(~pl.col("_bad")).drop("_bad"), bad


def _numeric(df: pl.DataFrame, cols: dict[str, str], rejected: list[pl.DataFrame]) -> pl.DataFrame:
    """Parse text temperature columns (``{column: unit}``), reject bad values, convert to °F.

    Adds ``<col>_f`` columns; keeps the raw text columns for messages.
    """
    for c, unit in cols.items():
        fac, off, fam = TEMP_UNITS[unit]
        num = pl.col(c).str.strip_chars().cast(pl.Float64, strict=False)
        df = df.with_columns(num.alias(f"_{c}_num"))
        df, bad = _reject(df, pl.col(c).is_not_null() & pl.col(f"_{c}_num").is_null(), c, pl.col(c), "not a number")
        rejected.append(bad)
        df, bad = _reject(
            df, pl.col(f"_{c}_num").is_nan() | pl.col(f"_{c}_num").is_infinite(), c, pl.col(c), "not a finite number"
        )
        rejected.append(bad)
        lim = _LIMITS[fam]
        in_unit = pl.col(f"_{c}_num") * _SCALE_TO_FILE_UNIT[unit]
        df, bad = _reject(df, in_unit.abs() > lim, c, pl.col(c), f"impossible temperature: beyond ±{lim:g} °{fam}")
        rejected.append(bad)
        df = df.with_columns((pl.col(f"_{c}_num") * fac + off).alias(f"{c}_f")).drop(f"_{c}_num")
    return df


def _finish_daily(
    df: pl.DataFrame,
    label: str,
    date_format: str,
    temp_units: dict[str, str],
    csv_rejects: list[dict],
    notices: list[str],
) -> WeatherRead:
    """Validate an all-text frame with our daily column names and ``_line``."""
    rejected: list[pl.DataFrame] = []
    df = df.with_columns(pl.col("station_id").str.strip_chars())
    df, bad = _reject(
        df,
        pl.col("station_id").is_null() | (pl.col("station_id") == ""),
        "station_id",
        pl.col("station_id").fill_null(""),
        "station_id is empty",
    )
    rejected.append(bad)
    df = df.with_columns(dates_in_format(df["date"], date_format).alias("_d"))
    df, bad = _reject(
        df,
        pl.col("_d").is_null(),
        "date",
        pl.col("date").fill_null(""),
        f"not a valid date (expected format {date_format})",
    )
    rejected.append(bad)
    df = _numeric(df, temp_units, rejected)
    for c in ("t_min", "t_max", "t_mean"):
        if f"{c}_f" not in df.columns:
            df = df.with_columns(pl.lit(None, dtype=pl.Float64).alias(f"{c}_f"), pl.lit(None, dtype=pl.String).alias(c))
    df, bad = _reject(
        df,
        pl.col("t_min_f") > pl.col("t_max_f"),
        "t_min",
        pl.format("t_min={} > t_max={}", pl.col("t_min"), pl.col("t_max")),
        "impossible values: t_min greater than t_max",
    )
    rejected.append(bad)
    tol = 1e-9
    df, bad = _reject(
        df,
        (pl.col("t_mean_f") < pl.col("t_min_f") - tol) | (pl.col("t_mean_f") > pl.col("t_max_f") + tol),
        "t_mean",
        pl.format("t_mean={} outside [{}, {}]", pl.col("t_mean"), pl.col("t_min"), pl.col("t_max")),
        "impossible values: t_mean outside [t_min, t_max]",
    )
    rejected.append(bad)
    usable = (pl.col("t_min_f").is_not_null() & pl.col("t_max_f").is_not_null()) | pl.col("t_mean_f").is_not_null()
    df, bad = _reject(
        df,
        ~usable,
        "t_min",
        pl.format(
            "t_min={} t_max={} t_mean={}",
            pl.col("t_min").fill_null(""),
            pl.col("t_max").fill_null(""),
            pl.col("t_mean").fill_null(""),
        ),
        "no usable temperature: needs t_min and t_max, or t_mean",
    )
    rejected.append(bad)
    out = df.select(
        pl.col("station_id"),
        pl.col("_d").alias("date"),
        "t_min_f",
        "t_max_f",
        "t_mean_f",
        pl.col(LINE_COL).cast(pl.Int64),
    )
    out, dup_rej, dup_notes = _duplicates(out, ["station_id", "date"], ["t_min_f", "t_max_f", "t_mean_f"], label)
    rejected.append(dup_rej)
    notices.extend(dup_notes)
    return WeatherRead(out.sort("station_id", "date"), _rejects_frame(rejected, label, csv_rejects), notices)


def _duplicates(df: pl.DataFrame, key: list[str], values: list[str], label: str):
    """Identical duplicates → keep the first, notice; conflicting → reject every row of the key."""
    counts = df.with_columns(pl.len().over(key).alias("_n"), pl.struct(values).n_unique().over(key).alias("_nv"))
    conflict = counts.filter((pl.col("_n") > 1) & (pl.col("_nv") > 1))
    notes: list[str] = []
    rej = pl.DataFrame()
    if conflict.height:
        lines = conflict.group_by(key).agg(pl.col(LINE_COL).sort().alias("_lines"))
        rej = conflict.join(lines, on=key, how="left").select(
            LINE_COL,
            pl.lit(key[-1]).alias("column"),
            (
                pl.col(key[-1]).dt.strftime("%Y-%m-%d %H:%M:%S")
                if conflict.schema[key[-1]] != pl.Date
                else pl.col(key[-1]).cast(pl.String)
            ).alias("value"),
            pl.format(
                "duplicate {} for station {} with different values (lines {})",
                pl.lit(key[-1]),
                pl.col("station_id"),
                pl.col("_lines").cast(pl.List(pl.String)).list.join(", "),
            ).alias("reason"),
        )
    keep = counts.filter(~((pl.col("_n") > 1) & (pl.col("_nv") > 1)))
    ident = keep.filter(pl.col("_n") > 1)
    if ident.height:
        dropped = ident.filter(pl.col(LINE_COL) != pl.col(LINE_COL).min().over(key))
        shown = ", ".join(str(x) for x in dropped[LINE_COL].sort().head(10).to_list())
        notes.append(
            f"{label}: dropped {dropped.height} duplicate row(s) identical to an earlier row "
            f"(lines {shown}{' …' if dropped.height > 10 else ''})"
        )
        keep = keep.filter(pl.col(LINE_COL) == pl.col(LINE_COL).min().over(key))
    return keep.drop("_n", "_nv"), rej, notes


def read_daily_weather(
    path: str | Path,
    *,
    units: str = "IP",
    decimal_comma: bool = False,
    date_order: str | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
    columns: dict[str, str] | None = None,
) -> WeatherRead:
    """Read the daily weather CSV of the input contract.

    Parameters
    ----------
    path : file with ``station_id, date`` (``YYYY-MM-DD``) and ``t_min`` with ``t_max``,
        or ``t_mean`` (any of the three may be present; blanks are null).
    units : {"IP", "SI"}
        Temperatures in °F (IP) or °C (SI); converted to °F.
    decimal_comma, date_order, delimiter, encoding :
        The ``[reading]`` options of the config: numbers written ``-3,5``; the order of slash dates
        (spreadsheet serial dates and ``YYYY/MM/DD`` are read too, see :func:`screening.parse.parse_date`);
        forced delimiter and encoding.
    columns : the file's own column names mapped to ours (``[inputs.columns] weather``).

    Returns
    -------
    WeatherRead
        ``(weather, rejects)``: weather has ``station_id, date (pl.Date), t_min_f,
        t_max_f, t_mean_f`` [°F] and ``_line``, sorted by station_id, date; rejects has
        ``file, line, column, value, reason``; ``.notices`` lists the notices.

    Raises
    ------
    InputError
        Unreadable file, missing ``station_id``/``date``, or none of the temperature
        columns (needs ``t_min`` and ``t_max``, or ``t_mean``).
    """
    unit = _units_default(units)
    label = str(path)
    table = read_table(
        path,
        required=["station_id", "date"],
        optional=["t_min", "t_max", "t_mean"],
        label=label,
        delimiter=delimiter,
        encoding=encoding,
        columns=columns,
    )
    label = table.path
    notices = list(table.notices)
    table.df = _normalize_daily_text(
        table.df, label, decimal_comma=decimal_comma, date_order=date_order, notices=notices
    )
    cmap = {k.strip().lower(): v for k, v in (columns or {}).items()}
    present = {cmap.get(h, h) for h in (h.strip().lower() for h in table.header)}
    has_pair = {"t_min", "t_max"} <= present
    if not has_pair and "t_mean" not in present:
        raise InputError(label, "no temperature columns", line=1, expected="t_min and t_max, or t_mean")
    temps: dict[str, str] = {c: unit for c in ("t_min", "t_max", "t_mean") if c in present}
    res = _finish_daily(table.df, label, "%Y-%m-%d", temps, table.rejects, notices)
    res.notices.extend(check_plausible(res[0], label, units=units, rejects=res[1]))
    return res


def _normalize_daily_text(
    df: pl.DataFrame, label: str, *, decimal_comma: bool, date_order: str | None, notices: list[str] | None = None
) -> pl.DataFrame:
    """Spreadsheet conventions to the contract's text forms before the strict checks.

    Dates that :func:`screening.parse.parse_date` reads become ``YYYY-MM-DD``; others are left as
    written so the strict check rejects them with the original value. With ``decimal_comma`` the
    temperature columns' ``,`` becomes ``.``.
    """
    from .errors import InputError
    from .parse import AmbiguousDates, midnight_stamps, parse_date

    stamps = midnight_stamps(df["date"])
    if bool(stamps.any()):
        # a timestamp at midnight names its day; any other time or text stays and is rejected
        example = df["date"].filter(stamps)[0].strip()
        df = df.with_columns(
            pl.when(stamps)
            .then(pl.col("date").str.strip_chars().str.slice(0, 10))
            .otherwise(pl.col("date"))
            .alias("date")
        )
        if notices is not None:
            notices.append(
                f"{label}: {int(stamps.sum())} date value(s) are timestamps at midnight (e.g. "
                f"{example!r}); read as that day"
            )
    iso_hits = df["date"].str.strip_chars().str.contains(r"^\d{4}-\d{2}-\d{2}$").fill_null(True)
    iso_share = float(cast("float | None", iso_hits.mean()) or 1.0)
    d = None
    if date_order is not None or iso_share < 0.5:
        # a file written in another date style; an ISO file with a few odd dates instead has
        # those rows rejected one by one by the strict check
        try:
            d, _ = parse_date(df["date"], date_order=date_order)
        except AmbiguousDates as exc:
            raise InputError(label, str(exc), column="date") from None
    if d is not None:
        df = df.with_columns(pl.coalesce(d.dt.strftime("%Y-%m-%d"), pl.col("date")).alias("date"))
    if decimal_comma:
        df = df.with_columns(
            [pl.col(c).str.replace(",", ".", literal=True) for c in ("t_min", "t_max", "t_mean") if c in df.columns]
        )
    return df


def read_mapped_daily(
    path: str | Path, mapping: dict, *, units: str = "IP", date_format: str = "%Y-%m-%d", station_id: str | None = None
) -> WeatherRead:
    """Read a daily-summary CSV of another layout through an explicit column mapping.

    Parameters
    ----------
    path : the file.
    mapping : dict
        ``{source column: our column}`` or ``{source column: (our column, unit)}``; our
        columns are ``station_id, date, t_min, t_max, t_mean``; units ``F``, ``C``,
        ``0.1F``, ``0.1C`` (tenths). Source columns not named are ignored (listed in the
        notices); a named column missing from the file is a structural error. Example
        for a file with ``STATION, DATE, TMAX, TMIN`` in °F:
        ``{"STATION": "station_id", "DATE": "date", "TMAX": ("t_max", "F"), "TMIN": ("t_min", "F")}``.
    units : {"IP", "SI"}
        Unit of temperature columns mapped without a unit: °F (IP) or °C (SI).
    date_format : str
        strftime format of the date column (default ``%Y-%m-%d``); no guessing.
    station_id : str, optional
        The station of a single-station file that has no station column.

    Returns
    -------
    WeatherRead
        As :func:`read_daily_weather`; reject lines are the file's physical lines and
        reject columns are the *source* column names.
    """
    default_unit = _units_default(units)
    if not isinstance(mapping, dict) or not mapping:
        raise ValueError("mapping must be a non-empty dict {source column: our column or (our column, unit)}")
    ours: dict[str, tuple[str, str | None]] = {}
    for src, spec in mapping.items():
        col, unit = (spec, None) if isinstance(spec, str) else tuple(spec)
        if col not in _OUR_DAILY:
            raise ValueError(
                f"mapping target {col!r} (for source column {src!r}) is not one of {', '.join(_OUR_DAILY)}"
            )
        if col in ours:
            raise ValueError(f"mapping names our column {col!r} twice ({ours[col][0]!r} and {src!r})")
        if unit is not None and col in ("station_id", "date"):
            raise ValueError(f"mapping gives a unit for {col!r}; units apply to temperatures only")
        if col.startswith("t_"):
            unit = unit or default_unit
            if unit not in TEMP_UNITS:
                raise ValueError(
                    f"unknown temperature unit {unit!r} for source column {src!r}; use one of {', '.join(TEMP_UNITS)}"
                )
        ours[col] = (str(src), unit)
    if "date" not in ours:
        raise ValueError("mapping must name the source column for 'date'")
    if ("station_id" in ours) == (station_id is not None):
        raise ValueError("give exactly one of a 'station_id' mapping or station_id=...")
    if not ({"t_min", "t_max"} <= set(ours) or "t_mean" in ours):
        raise ValueError("mapping must name t_min and t_max, or t_mean")
    label = str(path)
    src_cols = [s.strip().lower() for s, _ in ours.values()]
    table = read_table(path, required=src_cols, label=label)
    df = table.df.select(*[pl.col(s.strip().lower()).alias(col) for col, (s, _) in ours.items()], LINE_COL)
    if station_id is not None:
        df = df.with_columns(pl.lit(str(station_id)).alias("station_id"))
    temps = {c: u for c, (_, u) in ours.items() if c.startswith("t_") and u is not None}  # always set for t_
    notices = list(table.notices)
    notices.append(
        f"{label}: read with mapping " + ", ".join(f"{s}→{c}" + (f" [{u}]" if u else "") for c, (s, u) in ours.items())
    )
    res = _finish_daily(df, label, date_format, temps, table.rejects, notices)
    back = {col: s for col, (s, _) in ours.items()}
    rej = res[1].with_columns(pl.col("column").replace(back))
    return WeatherRead(res[0], rej, res.notices)


def read_hourly_weather(path: str | Path, *, units: str = "IP", timestamps: str = "start") -> WeatherRead:
    """Read hourly (or sub-hourly) readings ``station_id, timestamp, temperature``.

    Parameters
    ----------
    path : file with ``station_id``, ``timestamp`` (``YYYY-MM-DD HH:MM[:SS]`` or with a
        ``T``; local standard time, no zone; ``24:00`` means the next day's ``00:00``) and
        ``temperature``.
    units : {"IP", "SI"}
        °F or °C; converted to °F.
    timestamps : {"start", "end"}
        Whether a stamp marks the start of its interval or the end (hour-ending data
        such as TMY files). End stamps are moved back by the station's median reading
        interval so that every reading belongs to the date of its interval's start.

    Returns
    -------
    WeatherRead
        ``(hourly, rejects)``: hourly has ``station_id, timestamp (pl.Datetime, interval
        start), t_f`` [°F] and ``_line``, sorted by station_id, timestamp.
    """
    unit = _units_default(units)
    if timestamps not in ("start", "end"):
        raise ValueError(f"timestamps must be 'start' or 'end'; got {timestamps!r}")
    label = str(path)
    table = read_table(path, required=["station_id", "timestamp", "temperature"], label=label)
    rejected: list[pl.DataFrame] = []
    df = table.df.with_columns(pl.col("station_id").str.strip_chars())
    df, bad = _reject(df, pl.col("station_id").is_null(), "station_id", pl.lit(""), "station_id is empty")
    rejected.append(bad)
    ts = pl.col("timestamp").str.strip_chars().str.replace("T", " ")
    is24 = ts.str.contains(r"^\d{4}-\d{2}-\d{2} 24:00(:00)?$")
    base = pl.when(is24).then(ts.str.slice(0, 10) + " 00:00:00").otherwise(ts)
    full = pl.when(base.str.len_chars() == 16).then(base + ":00").otherwise(base)
    parsed = full.str.to_datetime("%Y-%m-%d %H:%M:%S", strict=False)
    parsed = pl.when(is24).then(parsed + pl.duration(days=1)).otherwise(parsed)
    df = df.with_columns(parsed.alias("_ts"))
    df, bad = _reject(
        df,
        pl.col("_ts").is_null(),
        "timestamp",
        pl.col("timestamp").fill_null(""),
        "not a valid timestamp (expected YYYY-MM-DD HH:MM[:SS])",
    )
    rejected.append(bad)
    df, bad = _reject(df, pl.col("temperature").is_null(), "temperature", pl.lit(""), "temperature is empty")
    rejected.append(bad)
    df = _numeric(df, {"temperature": unit}, rejected)
    out = df.select(
        "station_id",
        pl.col("_ts").alias("timestamp"),
        pl.col("temperature_f").alias("t_f"),
        pl.col(LINE_COL).cast(pl.Int64),
    )
    out, dup_rej, notes = _duplicates(out, ["station_id", "timestamp"], ["t_f"], label)
    rejected.append(dup_rej)
    out = out.sort("station_id", "timestamp")
    if timestamps == "end" and out.height:
        step = pl.col("timestamp").diff().median().over("station_id")
        out = out.with_columns((pl.col("timestamp") - step.fill_null(pl.duration(hours=1))).alias("timestamp"))
    notices = list(table.notices) + notes
    return WeatherRead(out, _rejects_frame(rejected, label, table.rejects), notices)
