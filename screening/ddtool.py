"""The library function behind ``ddscreen degree-days`` (layer 3: reads files, calls layer 1).

:func:`degree_days_report` reads a weather file, fills short gaps (≤ 3 days, linear),
builds a :class:`~screening.degree_days.DegreeDayCube` for one station and returns the
command's table: ``station_id, period_start, period_end, days, days_missing, hdd, cdd,
method, base, unit`` (plus ``month`` and ``normal_years`` with ``normal=True``).
Long gaps stay missing and show in ``days_missing``; nothing is zero-filled.
"""

from __future__ import annotations

import math
from datetime import date
from pathlib import Path

import numpy as np
import polars as pl

from .choices import DEGREE_DAY_KINDS, PERIODS_BY
from .csvread import LINE_COL, read_table
from .degree_days import METHODS, DegreeDayCube, c_to_f, degree_day_table, f_to_c, fill_short_gaps, normal_year
from .errors import InputError
from .parse import dates_in_format, require_date
from .weather import read_daily_weather, read_hourly_weather

__all__ = ["degree_days_report", "KIND_CHOICES", "BY_CHOICES"]

#: ``kind`` and ``by`` (declared in ``choices.py``, shared with ``--kind`` and ``--by``)
KIND_CHOICES = DEGREE_DAY_KINDS
BY_CHOICES = PERIODS_BY
COLUMNS = ["station_id", "period_start", "period_end", "days", "days_missing", "hdd", "cdd", "method", "base", "unit"]


def _parse_date(value, name: str) -> date | None:
    if value is None or isinstance(value, date):
        return value
    return require_date(str(value), lambda _: ValueError(f"{name} must be a date YYYY-MM-DD; got {value!r}"))


def _read_periods(path: str | Path, station: str) -> pl.DataFrame:
    label = str(path)
    t = read_table(path, required=["period_start", "period_end"], optional=["station_id"], label=label)
    if t.rejects:
        r = t.rejects[0]
        raise InputError(label, r["reason"], line=r["line"])
    df = t.df.with_columns(
        dates_in_format(t.df["period_start"], strip=False).alias("_s"),
        dates_in_format(t.df["period_end"], strip=False).alias("_e"),
    )
    for raw, parsed in (("period_start", "_s"), ("period_end", "_e")):
        bad = df.filter(pl.col(parsed).is_null())
        if bad.height:
            r = bad.row(0, named=True)
            raise InputError(
                label, "not a valid date", line=r[LINE_COL], column=raw, value=r[raw] or "", expected="YYYY-MM-DD"
            )
    bad = df.filter(pl.col("_e") < pl.col("_s"))
    if bad.height:
        r = bad.row(0, named=True)
        raise InputError(
            label, "period_end before period_start", line=r[LINE_COL], column="period_end", value=r["period_end"]
        )
    if df["station_id"].is_not_null().any():
        df = df.filter(pl.col("station_id").is_null() | (pl.col("station_id").str.strip_chars() == station))
        if not df.height:
            raise InputError(label, f"no period for station {station!r}")
    return df.select(pl.col("_s").alias("period_start"), pl.col("_e").alias("period_end"))


def degree_days_report(
    weather_path: str | Path | None,
    station: str,
    *,
    base: float = 65.0,
    kind: str = "hdd",
    method: str = "mean",
    by: str = "month",
    periods_path: str | Path | None = None,
    date_from=None,
    date_to=None,
    normal: bool = False,
    units: str = "IP",
    hourly_path: str | Path | None = None,
    hourly_timestamps: str = "start",
    rounding: bool = False,
    notices: list[str] | None = None,
    date_order: str | None = None,
) -> pl.DataFrame:
    """Degree days of one station per day, month, year or listed period.

    Parameters
    ----------
    weather_path : path or None
        Daily weather CSV (input contract). Not needed with ``method="hourly"``.
    station : str
        A ``station_id`` of the file.
    base : float
        Base temperature, °F with ``units="IP"``, °C with ``"SI"`` (default 65).
    kind : {"hdd", "cdd", "both"}
        The column not asked for is null.
    method : {"mean", "maxmin", "hourly", "monthly-estimate"}
    by : {"day", "month", "year", "period"}
        Calendar periods are clipped to ``date_from``/``date_to`` (default: the station's
        record); ``period`` reads ``periods_path`` (``period_start, period_end`` inclusive,
        optional ``station_id``).
    normal : bool
        Normal-year values (by month or year) from the years with ≥ 95 % of their days,
        within ``date_from``–``date_to`` when given; adds ``month`` and ``normal_years``.
    units : {"IP", "SI"}
        File temperatures and base in °F → °F·day, or in °C → °C·day.
    hourly_path : path, optional
        Hourly readings (``station_id, timestamp, temperature``) for ``method="hourly"``;
        ``hourly_timestamps`` says whether stamps mark interval starts or ends.
    rounding : bool
        Weather-service rounding of the daily mean (mean method only).
    notices : list, optional
        Receives one-line notices (rejected rows, interpolated days, long gaps), and a line
        starting ``warning:`` for a base that cannot be right in the unit system (see
        :func:`base_unit_warning`).
    date_order : {"dmy", "mdy", "ymd"}, optional
        The order of slash dates in the daily file (``[reading] date_order``).

    Returns
    -------
    pl.DataFrame
        ``station_id, period_start, period_end, days, days_missing, hdd, cdd, method, base,
        unit``, sorted by period; degree days and base rounded to ``DECIMALS`` (2) places.

    Raises
    ------
    ValueError
        A bad argument (unknown kind, method, by, unit system, date, base, combination).
    InputError
        An unreadable weather/periods file or a station that is not in the file.
    """
    if kind not in KIND_CHOICES:
        raise ValueError(f"kind must be one of {', '.join(KIND_CHOICES)}; got {kind!r}")
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if by not in BY_CHOICES:
        raise ValueError(f"by must be one of {', '.join(BY_CHOICES)}; got {by!r}")
    if units not in ("IP", "SI"):
        raise ValueError(f"units must be IP or SI; got {units!r}")
    try:
        base = float(base)
    except (TypeError, ValueError):
        raise ValueError(f"base must be a number; got {base!r}") from None
    if not math.isfinite(base):
        raise ValueError(f"base must be finite; got {base!r}")
    if (by == "period") != (periods_path is not None):
        raise ValueError(f"by='period' and a periods file go together; got by={by!r}, periods_path={periods_path!r}")
    if normal and by not in ("month", "year"):
        raise ValueError(f"normal-year values are given by month or year; got by={by!r}")
    if rounding and method != "mean":
        raise ValueError(f"rounding applies to the mean method only; got method={method!r}")
    d_from = _parse_date(date_from, "date_from")
    d_to = _parse_date(date_to, "date_to")
    if d_from and d_to and d_to < d_from:
        raise ValueError(f"date_to {d_to} is before date_from {d_from}")
    station = str(station).strip()
    note = notices.append if notices is not None else (lambda _m: None)
    base_f = base if units == "IP" else float(c_to_f(base))
    bases = np.array([base_f])
    warn = base_unit_warning(base, units)
    if warn:
        note(warn)

    if method == "hourly":
        if hourly_path is None:
            raise ValueError("method 'hourly' needs an hourly readings file (hourly_path)")
        res = read_hourly_weather(hourly_path, units=units, timestamps=hourly_timestamps)
        frame, rejects = res
        label = str(hourly_path)
    else:
        if weather_path is None:
            raise ValueError(f"method {method!r} needs a daily weather file (weather_path)")
        res = read_daily_weather(weather_path, units=units, date_order=date_order)
        frame, rejects = res
        label = str(weather_path)
    for n in res.notices:
        note(n)
    known = sorted(frame["station_id"].unique().to_list())
    if station not in known:
        shown = ", ".join(known[:20]) + (" …" if len(known) > 20 else "")
        raise InputError(label, "unknown station", value=station, expected=f"one of {shown or '(none)'}")
    frame = frame.filter(pl.col("station_id") == station)
    n_rej = rejects.height
    if n_rej:
        note(
            f"{label}: {n_rej} row(s) rejected (first at line {int(rejects['line'].min())}); "
            "their days count as missing"
        )

    if method == "hourly":
        cube = DegreeDayCube.from_hourly(frame, bases)
    else:
        filled, gaps = fill_short_gaps(frame)
        n_int = int(filled["interpolated"].sum())
        if n_int:
            note(f"{label}: station {station}: {n_int} day(s) in gaps of ≤ 3 days filled by linear interpolation")
        for g in gaps.iter_rows(named=True):  # report lines, one per long gap
            note(
                f"{label}: station {station}: no data {g['gap_start']} to {g['gap_end']} ({g['days']} days); "
                "counted as missing"
            )
        if method == "maxmin" and not (filled["t_min_f"].is_not_null() & filled["t_max_f"].is_not_null()).any():
            raise ValueError(f"method 'maxmin' needs t_min and t_max; station {station!r} has only t_mean")
        cube = DegreeDayCube.from_daily(filled, bases, method=method, rounding=rounding)
    unit = "F" if units == "IP" else "C"

    if not normal:
        # (by == "period" exactly when a periods file is given: checked above)
        periods = _read_periods(periods_path, station) if periods_path is not None else None
        table = degree_day_table(
            cube,
            station_ids=[station],
            by=by,
            date_from=d_from,
            date_to=d_to,
            periods=periods,
            kind=kind,
            base_f=base_f,
            unit=unit,
        )
    else:
        table = _normal_table(cube, station, by, d_from, d_to, kind, base_f, unit)
    return table.with_columns(pl.col("hdd", "cdd", "base").round(DECIMALS))


#: Decimals of the degree days and the base in the report. Daily means carry at most 0.05 ° (the mean
#: of two temperatures given to 0.1 °), so a day's degree days are exact to 2 decimals in °F and to
#: well under 0.01 in °C (÷ 1.8); a sum printed with more digits shows only floating-point noise
#: (206.4499999999989 is 206.45).
DECIMALS = 2


#: Heating and cooling bases used in practice lie within these ranges (common practice: 50-70 °F
#: and 10-21 °C are the usual published bases); a base outside its unit's wide range is most likely
#: given in the other unit.
PLAUSIBLE_BASE = {"IP": (32.0, 90.0), "SI": (0.0, 32.0)}


def base_unit_warning(base: float, units: str) -> str | None:
    """A ``warning:`` line when ``base`` cannot be right for the unit system (18 for °F, 65 for °C)."""
    lo, hi = PLAUSIBLE_BASE[units]
    if lo <= base <= hi:
        return None
    if units == "IP":
        as_c = float(c_to_f(base))
        hint = (
            (
                f"it looks like a °C base ({base:g} °C = {as_c:.1f} °F): pass --base {as_c:.1f}, or --units SI "
                "if the file is in °C"
            )
            if float(PLAUSIBLE_BASE["SI"][0]) <= base <= PLAUSIBLE_BASE["SI"][1]
            else "check the value"
        )
        return f"warning: base {base:g} °F is outside {lo:g}-{hi:g} °F, where heating and cooling bases lie; {hint}"
    as_f = float(f_to_c(base))
    hint = (
        (
            f"it looks like a °F base ({base:g} °F = {as_f:.1f} °C): pass --base {as_f:.1f}, or --units IP "
            "if the file is in °F"
        )
        if PLAUSIBLE_BASE["IP"][0] <= base <= PLAUSIBLE_BASE["IP"][1]
        else "check the value"
    )
    return f"warning: base {base:g} °C is outside {lo:g}-{hi:g} °C, where heating and cooling bases lie; {hint}"


def _normal_table(cube, station, by, d_from, d_to, kind, base_f, unit) -> pl.DataFrame:
    years = None
    if d_from or d_to:
        rec = cube.record().row(0, named=True)
        y0 = (d_from or rec["first_date"]).year
        y1 = (d_to or rec["last_date"]).year
        years = range(y0, y1 + 1)
    ny = normal_year(cube, years=years)
    used = ny.years_used[station]
    if not used:
        raise ValueError(
            f"no year with ≥ 95 % of its days for station {station!r}"
            + (f" in {years.start}–{years.stop - 1}" if years else "")
        )
    scale = 1.0 if unit == "F" else 1.0 / 1.8
    label = f"{used[0]}-{used[-1]} ({len(used)} years)"
    y0, y1 = used[0], used[-1]
    if by == "year":
        starts, ends = [date(y0, 1, 1)], [date(y1, 12, 31)]
        h, c = ny.hdd[0, :1], ny.cdd[0, :1]
        days, months = [365], [None]  # type: list[int], list[int | None]
    else:
        month_len = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]
        starts = [date(y0, m, 1) for m in range(1, 13)]
        ends = [
            date(y1, m, month_len[m - 1] + (1 if m == 2 and y1 % 4 == 0 and (y1 % 100 or y1 % 400 == 0) else 0))
            for m in range(1, 13)
        ]
        h, c = ny.monthly_hdd[0, :, 0], ny.monthly_cdd[0, :, 0]
        days, months = month_len, list(range(1, 13))
    n = len(starts)
    base_out = base_f if unit == "F" else float(f_to_c(base_f))
    return pl.DataFrame(
        {
            "station_id": [station] * n,
            "period_start": pl.Series(starts, dtype=pl.Date),
            "period_end": pl.Series(ends, dtype=pl.Date),
            "days": pl.Series(days, dtype=pl.Int64),
            "days_missing": pl.Series([0] * n, dtype=pl.Int64),
            "hdd": pl.Series(np.asarray(h) * scale if kind in ("hdd", "both") else [None] * n, dtype=pl.Float64),
            "cdd": pl.Series(np.asarray(c) * scale if kind in ("cdd", "both") else [None] * n, dtype=pl.Float64),
            "method": [cube.method] * n,
            "base": pl.Series([base_out] * n, dtype=pl.Float64),
            "unit": ["°F·day" if unit == "F" else "°C·day"] * n,
            "month": pl.Series(months, dtype=pl.Int8),
            "normal_years": [label] * n,
        }
    )
