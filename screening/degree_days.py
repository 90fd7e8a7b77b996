"""Degree days: every common method, any base, any period (layer 1, pure).

Numpy/polars in, numpy/polars out; nothing here reads files or prints.
Temperatures and bases are in one consistent unit: °F inside the package (the
glossary in DEVELOPERS.md); degree days are then °F·day. For °C work convert the
temperatures *and* the base, and divide the result by 1.8 (``F_PER_C``).

Methods (``METHODS``)
---------------------
``mean``
    ``HDD_d = (Tb − Tm)⁺`` with ``Tm = (Tmax + Tmin)/2``, or the given daily mean
    where max/min are absent.
``maxmin``
    the UK Met Office partial-day equations (four cases) from Tmax and Tmin.
``hourly``
    integration of hourly (or finer, regularly spaced) readings,
    ``HDD_d = (1/24)·Σ_h (Tb − T_h)⁺``.
``monthly-estimate``
    monthly degree days from the monthly mean temperature (Erbs, Klein & Beckman
    1983), spread evenly over the days of the month; an estimate, to be used only
    where daily data is missing.

Design of :class:`DegreeDayCube`
--------------------------------
All stations' days are laid out end to end ("flat days"): station *s* owns the
contiguous run of flat days ``[first_s, first_s + n_s)``, one per calendar day from
its first to its last date, whether or not that day has data. For every grid base
the cube keeps the running sum (float64) of daily HDD over the flat days, with a
leading zero row, plus running sums of the daily mean temperature and of the count
of days with data. A period total is then two gathers and a subtraction, for all
periods and all bases at once. CDD come from the exact identity
``CDD = HDD − (N_valid·Tb − Σ Tm)``, which holds day by day for every method
(``Tm`` being the method's daily mean: (max+min)/2, the given mean, the mean of the
hourly readings, or the monthly mean), so only one running-sum array is stored.

Missing days are never zero-filled silently: a day that is absent from the frame,
null, or outside a station's record counts in ``days_missing`` and contributes
nothing to the sums. The cube does *not* fill gaps itself; call
:func:`fill_short_gaps` first (the pipeline and ``ddtool`` do), which interpolates
gaps of ≤ 3 days and reports the longer ones.

Memory: the running sums take ``8·(n_flat_days + 1)·n_bases`` bytes (float64, chosen
for exact cancellation in differences over 30-year records): 100 stations × 30 years
× 71 bases ≈ 0.62 GB, 100 stations × 3 years ≈ 62 MB.
"""

from __future__ import annotations

import mmap
from dataclasses import dataclass, field
from datetime import date as _date
from collections.abc import Callable
from typing import cast

import numpy as np
import polars as pl

from .choices import DEGREE_DAY_METHODS

__all__ = [
    "METHODS",
    "KINDS",
    "F_PER_C",
    "daily_mean_dd",
    "maxmin_dd",
    "hourly_dd",
    "erbs_monthly_hdd",
    "erbs_monthly_cdd",
    "nws_round_mean",
    "DegreeDayCube",
    "DailyDegreeDays",
    "NormalYear",
    "normal_year",
    "fill_short_gaps",
    "gaps_in_windows",
    "degree_day_table",
    "f_to_c",
    "c_to_f",
    "WEATHER_COLUMNS",
]

#: the methods' names, declared in ``choices.py`` (shared with ``ddscreen degree-days --method``)
METHODS = DEGREE_DAY_METHODS
KINDS = ("hdd", "cdd")
#: °F·day per °C·day (= K·day); definition of the Fahrenheit scale, NIST SP 811.
F_PER_C = 1.8
#: the 0 °C point on the Fahrenheit scale; definition, NIST SP 811.
_F_AT_0C = 32.0
WEATHER_COLUMNS = ("station_id", "date", "t_min_f", "t_max_f", "t_mean_f")

# Erbs, Klein & Beckman (1983) correlation constants. RECALLED, not re-read from the
# paper (see docs/degree-days.md §4, tagged [M]): treat the
# estimates as approximate until checked against the 1983 paper or Duffie & Beckman.
_ERBS_A = 1.698
_ERBS_S0, _ERBS_S_TM, _ERBS_S_SY = 1.45, -0.0290, 0.0664

# A month's mean is used by the monthly estimate only when at most this many of its
# days are missing. WRCC: "months with 5 or more missing days are not considered"
# (https://wrcc.dri.edu/cgi-bin/cliGCStH.pl?wa2614).
_MAX_MISSING_DAYS_PER_MONTH = 4
_EPOCH = _date(1970, 1, 1)
# Differences of float64 running sums leave residues of order 1e-16 × |sum|; totals
# below this are reported as exactly 0 [°F·day].
_RESIDUE = 1e-8
#: day cells per padded block of :meth:`DegreeDayCube.at_base` (2 MB of float64: in cache, and below the
#: allocator's mapping threshold; a row's sum does not depend on the block it is in)
_AT_BASE_CELLS = 1 << 18
#: elements per step of the row-major range queries (:meth:`DegreeDayCube.range_rows`): 4 MB of float64
_ROWS_STEP = 1 << 19


def f_to_c(t_f):
    """Temperature °F → °C: ``(t − 32)/1.8`` [°C] (NIST SP 811)."""
    return (np.asarray(t_f, dtype=np.float64) - _F_AT_0C) / F_PER_C


def c_to_f(t_c):
    """Temperature °C → °F: ``1.8·t + 32`` [°F] (NIST SP 811)."""
    return np.asarray(t_c, dtype=np.float64) * F_PER_C + _F_AT_0C


def _check_kind(kind: str) -> str:
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {', '.join(KINDS)}; got {kind!r}")
    return kind


def _check_method(method: str) -> str:
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    return method


# ----------------------------------------------------------------------------- daily formulas


def daily_mean_dd(t_mean, base, kind: str = "hdd"):
    """Degree days of one day from its mean temperature (mean-daily-temperature method).

    Parameters
    ----------
    t_mean : array_like
        Daily mean temperature, usually (Tmax + Tmin)/2. [°F] (or °C, with a °C base)
    base : array_like
        Base temperature Tb, broadcast against ``t_mean``. [°F]
    kind : {"hdd", "cdd"}
        Heating (below base) or cooling (above base) degree days.

    Returns
    -------
    ndarray or float
        Degree days of each day. [°F·day] NaN where ``t_mean`` is NaN.

    Notes
    -----
    ``HDD = max(0, Tb − Tm)``, ``CDD = max(0, Tm − Tb)``; a period total is the sum
    of the daily values. ``HDD − CDD = Tb − Tm`` exactly.

    References
    ----------
    .. [1] NOAA National Weather Service, Key West: "Heating & Cooling Degree Days",
       http://weather.gov/key/climate_heat_cool ((33+25)/2 = 29 → 36 HDD65).
    .. [2] Western Regional Climate Center, degree-day tables,
       https://wrcc.dri.edu/cgi-bin/cliGCStH.pl?wa2614 (65/31 °F at base 50 → 2 HDD).
    """
    _check_kind(kind)
    t = np.asarray(t_mean, dtype=np.float64)
    b = np.asarray(base, dtype=np.float64)
    d = b - t if kind == "hdd" else t - b
    out = np.where(np.isnan(d), np.nan, np.maximum(d, 0.0))
    return out if out.ndim else float(out)


def nws_round_mean(t_max, t_min):
    """The daily mean as weather services publish it: ``floor((Tmax + Tmin)/2 + 0.5)``.

    Parameters
    ----------
    t_max, t_min : array_like
        Daily maximum and minimum temperature (whole degrees in weather-service data). [°F]

    Returns
    -------
    ndarray or float
        The mean rounded half up (toward +∞: 60.5 → 61, −2.5 → −2). [°F]

    Notes
    -----
    Opt-in convention: the NWS rounds the daily mean *before* computing degree days, so
    its published daily values are integers (NWS Burlington: 68/53 → 60.5 → 61 → 4
    HDD65). NCDC uses the WMO "asymmetric half-up" rounding ``floor(x + 0.5)``.

    References
    ----------
    .. [1] NWS Burlington, "Degree days" (weather.gov/media/btv/degreedays.pdf), as quoted in
       docs/degree-days.md §1.
    .. [2] NCDC notice on rounding, https://mailinglists.unidata.ucar.edu/archives/nws-changes/2012/msg00193.html
    """
    mx = np.asarray(t_max, dtype=np.float64)
    mn = np.asarray(t_min, dtype=np.float64)
    out = np.floor((mx + mn) / 2.0 + 0.5)
    return out if out.ndim else float(out)


def maxmin_dd(t_max, t_min, base):
    """Degree days of one day by the UK Met Office equations (four cases).

    Parameters
    ----------
    t_max, t_min : array_like
        Daily maximum and minimum temperature, ``t_min ≤ t_max``. [°F]
    base : array_like
        Base temperature Tb, broadcast against the temperatures. [°F]

    Returns
    -------
    hdd, cdd : ndarray or float
        Heating and cooling degree days of each day. [°F·day] NaN where an input is NaN.

    Raises
    ------
    ValueError
        Where ``t_min > t_max``.

    Notes
    -----
    With ``Tm = (Tmax + Tmin)/2``:

    ====  ==============================  ==========================  =========================
    case  condition                       HDD                         CDD
    ====  ==============================  ==========================  =========================
    I     Tmin ≥ Tb                       0                           Tm − Tb
    II    Tmax ≤ Tb                       Tb − Tm                     0
    III   Tmin < Tb < Tmax, Tm ≥ Tb       (Tb − Tmin)/4               (Tmax−Tb)/2 − (Tb−Tmin)/4
    IV    Tmin < Tb < Tmax, Tm < Tb       (Tb−Tmin)/2 − (Tmax−Tb)/4   (Tmax − Tb)/4
    ====  ==============================  ==========================  =========================

    The formulas are continuous at every case boundary and in every case
    ``HDD − CDD = Tb − Tm``.

    References
    ----------
    .. [1] Met Éireann, "Degree days", http://www.met.ie/climate/data03.asp?prn=1
    .. [2] CIBSE TM41:2006, "Degree-days: theory and application", T. Day (ed.).
    .. [3] D. Day and T. Karayiannis, "Degree-days: comparison of calculation methods",
       Building Services Engineering Research and Technology 19(1), 1998.
       :doi:`10.1177/014362449801900102`
    """
    mx = np.asarray(t_max, dtype=np.float64)
    mn = np.asarray(t_min, dtype=np.float64)
    b = np.asarray(base, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        if np.any(mn > mx):
            bad = np.broadcast_to(mn > mx, np.broadcast_shapes(mn.shape, mx.shape))
            first = tuple(int(i[0]) for i in np.nonzero(bad)) if bad.ndim else ()
            raise ValueError(
                f"t_min must not exceed t_max; got t_min={np.broadcast_to(mn, bad.shape)[first]} "
                f"> t_max={np.broadcast_to(mx, bad.shape)[first]}"
            )
    hdd = _maxmin_hdd_cases(mx, mn, b)
    tm = (mx + mn) / 2.0
    cdd = np.maximum(hdd - (b - tm), 0.0)
    nan = np.isnan(hdd)
    cdd = np.where(nan, np.nan, cdd)
    if hdd.ndim == 0:
        return float(hdd), float(cdd)
    return hdd, cdd


def _maxmin_hdd(mx, mn, b):
    """Met Office HDD (no validation); NaN propagates.

    The four cases are one piecewise-linear function of the base with slopes 0, ¼, ¾, 1
    and knots at Tmin, Tm, Tmax, i.e. ``¼(Tb − Tmin)⁺ + ½(Tb − Tm)⁺ + ¼(Tb − Tmax)⁺``
    (by algebra from the case formulas; the tests check it against the cases).
    """
    tm = (mx + mn) / 2.0
    return 0.25 * np.maximum(b - mn, 0.0) + 0.5 * np.maximum(b - tm, 0.0) + 0.25 * np.maximum(b - mx, 0.0)


def _maxmin_hdd_cases(mx, mn, b):
    """Met Office HDD by the four published cases (reference form of :func:`_maxmin_hdd`)."""
    tm = (mx + mn) / 2.0
    case2 = b - tm  # Tmax ≤ Tb
    case3 = (b - mn) / 4.0  # crossing, Tm ≥ Tb
    case4 = (b - mn) / 2.0 - (mx - b) / 4.0  # crossing, Tm < Tb
    with np.errstate(invalid="ignore"):
        out = np.where(mn >= b, 0.0, np.where(mx <= b, case2, np.where(tm >= b, case3, case4)))
        out = np.where(np.isnan(tm) | np.isnan(b), np.nan, out)
    return out


def hourly_dd(t_hourly, base):
    """Degree days of each day by integrating hourly (or regular sub-hourly) readings.

    Parameters
    ----------
    t_hourly : array_like, shape (..., n_readings)
        Readings of each day on the last axis (24 for hourly data). NaN readings are
        ignored (the mean of the remaining ones is used). [°F]
    base : array_like
        Base temperature Tb, broadcast against ``t_hourly.shape[:-1]``. [°F]

    Returns
    -------
    hdd, cdd : ndarray or float, shape (...)
        ``(1/24)·Σ_h (Tb − T_h)⁺`` and ``(1/24)·Σ_h (T_h − Tb)⁺``; for n readings per
        day the mean of the n positive parts (the rectangle rule). [°F·day] NaN for a day
        without any reading.

    Notes
    -----
    Taking the positive part before averaging makes this ≥ the 24-hour-mean method
    ``(Tb − mean_h T_h)⁺`` on every day (Jensen's inequality), and
    ``HDD − CDD = Tb − mean_h T_h``.

    References
    ----------
    .. [1] CIBSE TM41:2006, "Degree-days: theory and application" ("mean daily degree-hours").
    .. [2] D. Day and T. Karayiannis (1998), :doi:`10.1177/014362449801900102`.
    """
    t = np.asarray(t_hourly, dtype=np.float64)
    if t.ndim < 1:
        raise ValueError(f"t_hourly must have the readings on a last axis; got a scalar {t!r}")
    b = np.asarray(base, dtype=np.float64)[..., None]
    n = np.sum(~np.isnan(t), axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        h = np.nansum(np.maximum(b - t, 0.0), axis=-1) / n
        c = np.nansum(np.maximum(t - b, 0.0), axis=-1) / n
    h = np.where(n == 0, np.nan, h)
    c = np.where(n == 0, np.nan, c)
    if h.ndim == 0:
        return float(h), float(c)
    return h, c


def _erbs_sigma_m(t_mean_month_c, sigma_yr_c):
    s = (
        _ERBS_S0
        + _ERBS_S_TM * np.asarray(t_mean_month_c, dtype=np.float64)
        + _ERBS_S_SY * np.asarray(sigma_yr_c, dtype=np.float64)
    )
    with np.errstate(invalid="ignore"):
        if np.any(s <= 0):
            raise ValueError(
                "Erbs correlation gives a non-positive monthly standard deviation "
                f"(min sigma_m={np.nanmin(s):.3f} °C); t_mean_month_c or sigma_yr_c out of range"
            )
    return s


def erbs_monthly_hdd(t_mean_month_c, n_days, base_c, sigma_yr_c):
    """Monthly heating degree days estimated from the monthly mean temperature (Erbs et al. 1983).

    Parameters
    ----------
    t_mean_month_c : array_like
        Mean temperature of the month. [°C]
    n_days : array_like
        Days in the month (or the period the mean covers). [day]
    base_c : array_like
        Base temperature. [°C]
    sigma_yr_c : array_like
        Standard deviation of the 12 monthly mean temperatures about the annual mean. [°C]

    Returns
    -------
    ndarray or float
        Estimated HDD of the month. [°C·day] (multiply by 1.8 for °F·day)

    Notes
    -----
    ``σ_m = 1.45 − 0.0290·T̄_m + 0.0664·σ_yr`` [°C],
    ``h = (Tb − T̄_m)/(σ_m·√N)``,
    ``HDD = σ_m·N^1.5·[h/2 + ln(e^(−a·h) + e^(a·h))/(2a)]`` with ``a = 1.698``,
    evaluated as ``ln(e^(−ah)+e^(ah)) = a|h| + log1p(e^(−2a|h|))``. The estimate tends to
    ``N·(Tb − T̄_m)`` far below the base and to 0 far above it, and always exceeds
    ``N·(Tb − T̄_m)⁺``.

    **The constants are recalled, not re-read from the paper** (reference file
    docs/degree-days.md §4 tags them [M]); on the TMY files shipped with pvlib the recalled
    form reproduces annual HDD65 within ~2 % in cold and mixed climates and is poor in
    warm climates near the base (Miami 89 vs 130 °F·day). Whether σ_yr uses divisor
    12 or 11 is not confirmed; this package uses 12.

    References
    ----------
    .. [1] D. G. Erbs, S. A. Klein and W. A. Beckman, "Estimation of degree-days and
       ambient temperature bin data from monthly-average temperatures", ASHRAE
       Transactions 89(2A), 1983.
    """
    tm = np.asarray(t_mean_month_c, dtype=np.float64)
    n = np.asarray(n_days, dtype=np.float64)
    b = np.asarray(base_c, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        if np.any(n <= 0):
            raise ValueError(f"n_days must be positive; got min {np.nanmin(n)}")
    s = _erbs_sigma_m(tm, sigma_yr_c)
    h = (b - tm) / (s * np.sqrt(n))
    ah = _ERBS_A * np.abs(h)
    out = s * n**1.5 * (h / 2.0 + (ah + np.log1p(np.exp(-2.0 * ah))) / (2.0 * _ERBS_A))
    return out if np.ndim(out) else float(out)


def erbs_monthly_cdd(t_mean_month_c, n_days, base_c, sigma_yr_c):
    """Monthly cooling degree days by the identity ``CDD = HDD − N·(Tb − T̄_m)``.

    Parameters and reference as :func:`erbs_monthly_hdd`. [°C·day]
    """
    hdd = erbs_monthly_hdd(t_mean_month_c, n_days, base_c, sigma_yr_c)
    out = np.maximum(
        hdd
        - np.asarray(n_days, dtype=np.float64)
        * (np.asarray(base_c, dtype=np.float64) - np.asarray(t_mean_month_c, dtype=np.float64)),
        0.0,
    )
    return out if np.ndim(out) else float(out)


# ----------------------------------------------------------------------------- helpers


def _day_numbers(x, name: str) -> np.ndarray:
    """Dates (polars Series of Date, numpy datetime64, list of date/str) → int64 days since 1970-01-01."""
    if isinstance(x, pl.Series):
        if x.dtype != pl.Date:
            try:
                x = x.cast(pl.Date)
            except pl.exceptions.PolarsError:
                raise ValueError(f"{name} must be dates; got dtype {x.dtype}") from None
        if x.null_count():
            raise ValueError(f"{name} contains {x.null_count()} null date(s)")
        return x.cast(pl.Int32).to_numpy().astype(np.int64)
    arr = np.asarray(x)
    if arr.dtype.kind != "M":
        try:
            arr = np.asarray(x, dtype="datetime64[D]")
        except (TypeError, ValueError):
            raise ValueError(f"{name} must be dates; got {arr.dtype} values like {arr.ravel()[:1]!r}") from None
    arr = arr.astype("datetime64[D]")
    if np.any(np.isnat(arr)):
        raise ValueError(f"{name} contains {int(np.isnat(arr).sum())} missing date(s)")
    return np.atleast_1d(arr.astype(np.int64))


def _to_dates(days: np.ndarray) -> pl.Series:
    return pl.Series(np.asarray(days, dtype=np.int64).astype("datetime64[D]"))


def _as_bases(bases_f) -> np.ndarray:
    b = np.atleast_1d(np.asarray(bases_f, dtype=np.float64))
    if b.ndim != 1 or b.size == 0:
        raise ValueError(f"bases_f must be a non-empty 1-D array; got shape {b.shape}")
    if not np.all(np.isfinite(b)):
        raise ValueError(f"bases_f must be finite; got {b[~np.isfinite(b)][:3]}")
    if np.any(np.diff(b) <= 0):
        raise ValueError("bases_f must be strictly increasing")
    return b


# ----------------------------------------------------------------------------- the cube


@dataclass
class DailyDegreeDays:
    """Per-day degree days over a set of spans, as a flat (ragged) table.

    ``row[k]`` is the input span that day *k* belongs to, ``date[k]`` its date,
    ``dd[k, j]`` its degree days at grid base ``bases_f[j]`` [°F·day] (0 where
    ``missing[k]``), ``missing[k]`` True where the day has no data.
    """

    row: np.ndarray
    date: np.ndarray
    dd: np.ndarray
    missing: np.ndarray
    bases_f: np.ndarray

    def to_frame(self, station_ids=None) -> pl.DataFrame:
        """Long polars frame: row, date, missing, then one column ``dd_<base>`` per grid base."""
        cols = {"row": self.row, "date": self.date.astype("datetime64[D]"), "missing": self.missing}
        for j, b in enumerate(self.bases_f):
            cols[f"dd_{b:g}"] = self.dd[:, j]
        return pl.DataFrame(cols)


@dataclass(repr=False)
class DegreeDayCube:
    """Running sums of daily degree days per station on a grid of bases (see module notes).

    Build with :meth:`from_daily`, :meth:`from_hourly` or :meth:`from_monthly`; query with
    :meth:`period_totals` (grid bases), :meth:`at_base` (any per-row base, exact),
    :meth:`daily` (per-day values over spans).
    """

    bases_f: np.ndarray
    stations: list[str]
    method: str
    rounding: bool
    first_day: np.ndarray  # (n_stations,) int64 days since epoch of each station's first day
    n_days: np.ndarray  # (n_stations,) int64 length of each station's record
    offset: np.ndarray  # (n_stations,) int64 first flat day of each station
    valid: np.ndarray  # (n_flat,) bool: day has data
    tm: np.ndarray  # (n_flat,) daily mean temperature of the method [°F], NaN if missing
    cum_hdd: np.ndarray  # (n_bases, n_flat + 1) float64 running sum of daily HDD, one row per base
    cum_tm: np.ndarray  # (n_flat + 1,) running sum of tm over valid days
    cum_valid: np.ndarray  # (n_flat + 1,) running count of valid days
    extra: dict = field(default_factory=dict)  # method-specific per-day data (tmax/tmin, hourly, monthly)

    # ------------------------------------------------------------------ construction

    @classmethod
    def from_daily(
        cls, weather: pl.DataFrame, bases_f, method: str = "mean", rounding: bool = False
    ) -> "DegreeDayCube":
        """Build the cube from daily station data.

        Parameters
        ----------
        weather : pl.DataFrame
            Columns ``station_id`` (str), ``date`` (pl.Date), ``t_min_f``, ``t_max_f``,
            ``t_mean_f`` [°F]; nulls allowed. One row per station and date (no duplicates);
            gaps are *not* filled here (use :func:`fill_short_gaps` first).
        bases_f : array_like
            Strictly increasing grid of base temperatures. [°F]
        method : {"mean", "maxmin", "monthly-estimate"}
            ``mean``: Tm = (t_max + t_min)/2 where both are given, else t_mean.
            ``maxmin``: Met Office equations; a day without both t_max and t_min counts
            as missing. ``monthly-estimate``: the Erbs estimate from each calendar month's
            mean of the daily means (a month with ≥ 5 missing days is missing as a whole;
            σ_yr from the station's 12 long-term monthly means, divisor 12). For ``hourly``
            use :meth:`from_hourly`.
        rounding : bool
            Mean method only: round the daily mean half up before the degree days, as
            weather services publish (:func:`nws_round_mean`).

        Raises
        ------
        ValueError
            Missing columns, duplicate station/date rows, t_min > t_max, bad method.
        """
        kernel = KERNELS[_check_method(method)]
        if kernel.from_daily is None:
            raise ValueError(f"method {method!r} needs hourly readings: use DegreeDayCube.from_hourly")
        if rounding and not kernel.rounds:
            raise ValueError(f"rounding applies to the 'mean' method only; got method {method!r}")
        bases = _as_bases(bases_f)
        w = _prepare_daily(weather)
        layout = _layout(w)
        n_flat = int(layout["n_flat"])
        flat = layout["flat_index"]
        tmax = np.full(n_flat, np.nan)
        tmin = np.full(n_flat, np.nan)
        tmean = np.full(n_flat, np.nan)
        tmax[flat] = w["t_max_f"].to_numpy()
        tmin[flat] = w["t_min_f"].to_numpy()
        tmean[flat] = w["t_mean_f"].to_numpy()
        tm, extra = kernel.from_daily(tmax, tmin, tmean, layout, rounding)
        return cls._finish(bases, layout, method, rounding, tm, extra)

    @classmethod
    def from_hourly(cls, hourly: pl.DataFrame, bases_f, *, min_readings: int = 20) -> "DegreeDayCube":
        """Build an ``hourly``-method cube from readings.

        Parameters
        ----------
        hourly : pl.DataFrame
            Columns ``station_id`` (str), ``timestamp`` (pl.Datetime, the *start* of the
            reading's interval in local standard time; a reading belongs to the calendar
            date of its timestamp) and ``t_f`` [°F]. Hour-ending data (e.g. TMY "24:00")
            must be shifted back one interval by the reader.
        bases_f : array_like
            Strictly increasing grid of base temperatures. [°F]
        min_readings : int
            A day counts as present when it has at least this many non-null readings
            (default 20 of 24, our choice); its degree days are then the mean of the
            positive parts over its readings (:func:`hourly_dd`).
        """
        bases = _as_bases(bases_f)
        need = {"station_id", "timestamp", "t_f"}
        if not need <= set(hourly.columns):
            raise ValueError(f"hourly frame needs columns {sorted(need)}; got {hourly.columns}")
        h = (
            hourly.select(pl.col("station_id").cast(pl.String), pl.col("timestamp"), pl.col("t_f").cast(pl.Float64))
            .filter(pl.col("t_f").is_not_null() & pl.col("t_f").is_not_nan())
            .with_columns(pl.col("timestamp").dt.date().alias("date"))
        )
        dup = h.filter(pl.struct("station_id", "timestamp").is_duplicated())
        if dup.height:
            r = dup.row(0, named=True)
            raise ValueError(f"duplicate reading for station {r['station_id']!r} at {r['timestamp']}")
        h = h.sort("station_id", "timestamp").with_columns(
            pl.col("timestamp").rank("ordinal").over("station_id", "date").cast(pl.Int64).alias("k")
        )
        days = h.group_by("station_id", "date").agg(pl.len().alias("n")).sort("station_id", "date")
        days = days.with_columns(pl.lit(None, dtype=pl.Float64).alias(c) for c in ("t_min_f", "t_max_f", "t_mean_f"))
        layout = _layout(days)
        n_flat = int(layout["n_flat"])
        width = cast(int, h["k"].max()) if h.height else 24
        width = max(width, 24)
        pos = h.join(
            days.with_columns(pl.Series("flat", layout["flat_index"])).select("station_id", "date", "flat"),
            on=["station_id", "date"],
            how="left",
        )
        readings = np.full((n_flat, width), np.nan)
        readings[pos["flat"].to_numpy(), pos["k"].to_numpy() - 1] = pos["t_f"].to_numpy()
        count = np.sum(~np.isnan(readings), axis=1)
        ok = count >= min_readings
        readings[~ok] = np.nan
        with np.errstate(invalid="ignore"):
            tm = np.where(ok, np.nanmean(np.where(ok[:, None], readings, 0.0), axis=1), np.nan)
        return cls._finish(bases, layout, "hourly", False, tm, {"hourly": readings})

    @classmethod
    def from_monthly(cls, monthly: pl.DataFrame, bases_f, *, sigma_yr_c=None) -> "DegreeDayCube":
        """Build a ``monthly-estimate`` cube from monthly mean temperatures only.

        Parameters
        ----------
        monthly : pl.DataFrame
            Columns ``station_id``, ``year``, ``month``, ``t_mean_f`` [°F]; one row per
            station and month.
        bases_f : array_like
            Base grid. [°F]
        sigma_yr_c : float or dict[str, float], optional
            σ_yr per station [°C]; by default the SD (divisor 12) of the station's 12
            long-term calendar-month means (all 12 months must be present).
        """
        bases = _as_bases(bases_f)
        m = monthly.select(
            pl.col("station_id").cast(pl.String),
            pl.col("year").cast(pl.Int32),
            pl.col("month").cast(pl.Int8),
            pl.col("t_mean_f").cast(pl.Float64),
        )
        days = (
            m.with_columns(pl.date(pl.col("year"), pl.col("month"), 1).alias("d0"))
            .with_columns(pl.date_ranges("d0", pl.col("d0").dt.month_end()).alias("date"))
            .explode("date")
            .select(
                "station_id",
                "date",
                pl.lit(None, dtype=pl.Float64).alias("t_min_f"),
                pl.lit(None, dtype=pl.Float64).alias("t_max_f"),
                pl.col("t_mean_f"),
            )
        )
        w = _prepare_daily(days)
        layout = _layout(w)
        tm_day = np.full(int(layout["n_flat"]), np.nan)
        tm_day[layout["flat_index"]] = w["t_mean_f"].to_numpy()
        tm, extra = _monthly_from_daily(tm_day, layout, sigma_yr_c=sigma_yr_c, min_days_missing=0)
        return cls._finish(bases, layout, "monthly-estimate", False, tm, extra)

    @classmethod
    def _finish(cls, bases, layout, method, rounding, tm, extra) -> "DegreeDayCube":
        valid = ~np.isnan(tm)
        self = cls(
            bases_f=bases,
            stations=layout["stations"],
            method=method,
            rounding=rounding,
            first_day=layout["first_day"],
            n_days=layout["n_days"],
            offset=layout["offset"],
            valid=valid,
            tm=tm,
            cum_hdd=np.empty((0, 0)),
            cum_tm=np.empty(0),
            cum_valid=np.empty(0, dtype=np.int64),
            extra=extra,
        )
        n_flat = tm.size
        # one contiguous row per base: compute the daily values and accumulate them in place
        # (a loop over the ≤ ~100 bases, each step vectorized over all stations × days)
        cum = _alloc_f64((bases.size, n_flat + 1))
        cum[:, 0] = 0.0
        KERNELS[self.method].cumulate(self, cum)
        self.cum_hdd = cum
        self.cum_tm = np.concatenate([[0.0], np.cumsum(np.where(valid, tm, 0.0))])
        self.cum_valid = np.concatenate([[0], np.cumsum(valid, dtype=np.int64)])
        return self

    # ------------------------------------------------------------------ per-day kernel

    def _hdd_days(self, idx: np.ndarray, base) -> np.ndarray:
        """Daily HDD of flat days ``idx`` at ``base`` (broadcast against ``idx[..., None]``
        for a grid row ``(1, n_bases)`` or against ``idx`` for a per-element base);
        0 where the day is missing."""
        base = np.asarray(base, dtype=np.float64)
        grid = base.ndim == 2 and idx.ndim == 1
        ix = idx[:, None] if grid else idx
        out = KERNELS[self.method].hdd_days(self, idx, ix, base, grid)
        out = np.where(self.valid[ix], out, 0.0)
        return np.asarray(out, dtype=np.float64)

    # ------------------------------------------------------------------ queries

    def _rows(self, station_ids, starts, ends):
        s0 = _day_numbers(starts, "starts")
        e0 = _day_numbers(ends, "ends")
        n = max(s0.size, e0.size)
        if isinstance(station_ids, str):
            ids = pl.Series("station_id", [station_ids] * n, dtype=pl.String)
        elif isinstance(station_ids, pl.Series):
            ids = station_ids.cast(pl.String)
        else:
            arr = np.asarray(station_ids, dtype=object)
            if arr.ndim == 0:
                arr = np.full(n, arr.item(), dtype=object)
            ids = pl.Series("station_id", arr.tolist(), dtype=pl.String)
        s0 = np.broadcast_to(s0, (n,)) if s0.size == 1 else s0
        e0 = np.broadcast_to(e0, (n,)) if e0.size == 1 else e0
        if not (ids.len() == s0.size == e0.size):
            raise ValueError(
                f"station_ids, starts and ends must have one length; got {ids.len()}, {s0.size}, {e0.size}"
            )
        if np.any(e0 < s0):
            k = int(np.argmax(e0 < s0))
            raise ValueError(
                f"period end before start at row {k}: {_to_dates(s0[k : k + 1])[0]} to {_to_dates(e0[k : k + 1])[0]}"
            )
        mapping = {st_id: i for i, st_id in enumerate(self.stations)}
        sidx_s = ids.replace_strict(mapping, default=-1, return_dtype=pl.Int64)
        sidx = sidx_s.fill_null(-1).to_numpy()
        if np.any(sidx < 0):
            unknown = sorted({str(x) for x in ids.filter(pl.Series(sidx < 0)).to_list()})
            raise ValueError(
                f"unknown station_id {unknown[0]!r}"
                + (f" (and {len(unknown) - 1} more)" if len(unknown) > 1 else "")
                + f"; the weather data has {', '.join(self.stations[:10])}"
            )
        # clipped half-open flat ranges [a, b)
        first = self.first_day[sidx]
        nd = self.n_days[sidx]
        a = np.clip(s0 - first, 0, nd)
        b = np.clip(e0 - first + 1, 0, nd)
        b = np.maximum(a, b)
        off = self.offset[sidx]
        return sidx, s0, e0, off + a, off + b

    def period_totals(self, station_ids, starts, ends, kind: str = "hdd"):
        """Degree days at every grid base over each period, in one vectorized pass.

        Parameters
        ----------
        station_ids : str or sequence of str (n,)
        starts, ends : dates (n,)
            numpy ``datetime64[D]``, polars Series of Date, or dates; ``ends`` inclusive.
        kind : {"hdd", "cdd"}

        Returns
        -------
        dd : ndarray (n, n_bases)
            Sum over the period's days that have data. [°F·day] Column-major (a transposed
            view), so ``dd[:, j]`` — one base for every period — is contiguous.
        days : ndarray (n,) int64
            Calendar days in the period (``end − start + 1``).
        days_missing : ndarray (n,) int64
            Days without data (absent, null, or outside the station's record). Callers
            must act on it; nothing is zero-filled silently.
        """
        _check_kind(kind)
        fa, fb, days = self.flat_ranges(station_ids, starts, ends)
        return self.range_totals(fa, fb, kind), days, self.range_missing(fa, fb, days)

    def flat_ranges(self, station_ids, starts, ends) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Each period's half-open range ``[fa, fb)`` of flat days with a record, and its calendar days.

        For a set of periods queried several times (:meth:`range_totals`, :meth:`range_at`,
        :meth:`range_missing`): the stations are looked up and the dates checked once.
        Arguments and errors as :meth:`period_totals`; returns three int64 arrays (n,).
        """
        _, s0, e0, fa, fb = self._rows(station_ids, starts, ends)
        return fa, fb, e0 - s0 + 1

    def range_totals(self, fa: np.ndarray, fb: np.ndarray, kind: str = "hdd") -> np.ndarray:
        """``period_totals(...)[0]`` of the flat ranges from :meth:`flat_ranges` [°F·day], (n, n_bases)
        column-major: ``Σ dd = cum[fb] − cum[fa]`` per grid base, residues below 1e-8 set to 0."""
        _check_kind(kind)
        valid = self.cum_valid[fb] - self.cum_valid[fa]
        sum_tm = self.cum_tm[fb] - self.cum_tm[fa] if kind == "cdd" else None
        out = _alloc_f64((self.bases_f.size, fa.size))  # one row per base, filled row by row
        for j, b in enumerate(self.bases_f):  # loop over bases only; rows vectorized
            row = out[j]
            c = self.cum_hdd[j]
            np.subtract(c[fb], c[fa], out=row)
            if sum_tm is not None:
                row -= valid * b - sum_tm
            row[row < _RESIDUE] = 0.0
        return out.T

    def range_rows(self, fa: np.ndarray, fb: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """``range_totals(fa, fb)`` (HDD) as a row-major (n, n_bases) array [°F·day]: the same values,
        each period's bases contiguous (for consumers that read a row at a time, e.g. the padded
        regression arrays), taken from a row-major copy of the running sums made once per cube.
        ``out``: a float64 (n, n_bases) array to fill and return (a caller asking step after step
        reuses one); default a new one."""
        rows = self.__dict__.get("_cum_rows")
        if rows is None:
            rows = np.ascontiguousarray(self.cum_hdd.T)
            self.__dict__["_cum_rows"] = rows
        n, k = fa.size, rows.shape[1]
        if out is None:
            out = np.empty((n, k))
        elif out.shape != (n, k) or out.dtype != np.float64 or not out.flags.c_contiguous:
            raise ValueError(f"out has shape {out.shape} {out.dtype}; expected a C-contiguous ({n}, {k}) float64 array")
        if n and (min(fa.min(), fb.min()) < 0 or max(fa.max(), fb.max()) >= rows.shape[0]):
            raise IndexError(f"flat range outside the cube's {rows.shape[0]} running sums")
        step = _ROWS_STEP // max(1, k)  # temporaries of ≤ 4 MB: reused memory, no page faults
        tmp = np.empty((min(step, n), k))
        for a in range(0, n, step):
            o = out[a : a + step]
            t = tmp[: o.shape[0]]
            np.take(rows, fb[a : a + step], axis=0, out=o, mode="clip")  # (indices checked above)
            np.take(rows, fa[a : a + step], axis=0, out=t, mode="clip")
            np.subtract(o, t, out=o)
            np.putmask(o, o < _RESIDUE, 0.0)
        return out

    def range_at(self, fa: np.ndarray, fb: np.ndarray, base_index: np.ndarray) -> np.ndarray:
        """HDD of each flat range at its own grid base ``bases_f[base_index[i]]`` [°F·day], (n,):
        ``range_totals(fa, fb)[i, base_index[i]]`` without the other bases."""
        out = self.cum_hdd[base_index, fb] - self.cum_hdd[base_index, fa]
        out[out < _RESIDUE] = 0.0
        return out

    def range_missing(self, fa: np.ndarray, fb: np.ndarray, days: np.ndarray) -> np.ndarray:
        """Days without data of each flat range (``days`` its calendar days), int64 (n,)."""
        return days - (self.cum_valid[fb] - self.cum_valid[fa])

    def at_base(self, station_ids, starts, ends, base_f, kind: str = "hdd"):
        """Exact degree days at an arbitrary base per row (not interpolated on the grid).

        Parameters
        ----------
        station_ids, starts, ends : as :meth:`period_totals`.
        base_f : array_like (n,) or scalar
            Base temperature of each row. [°F]
        kind : {"hdd", "cdd"}

        Returns
        -------
        dd : ndarray (n,) [°F·day]; days, days_missing : ndarray (n,) int64

        Notes
        -----
        The daily data of every span are gathered into a padded block (rows sorted by
        span length and processed in blocks of ≤ 262,144 day cells, 2 MB, to bound memory and stay in cache)
        and the method's daily formula is applied at each row's base; CDD by the identity.
        """
        _check_kind(kind)
        sidx, s0, e0, fa, fb = self._rows(station_ids, starts, ends)
        n = fa.size
        base = np.broadcast_to(np.asarray(base_f, dtype=np.float64), (n,))
        if not np.all(np.isfinite(base)):
            raise ValueError("base_f must be finite")
        length = fb - fa
        out = np.zeros(n)
        width = self.extra["hourly"].shape[1] if "hourly" in self.extra else 1
        budget = max(1, _AT_BASE_CELLS // width)
        # bucket rows by span length (powers of two: ≤ 2× padding), then blocks of ≤ budget cells
        padded = KERNELS[self.method].padded_days
        bucket = np.ceil(np.log2(np.maximum(length, 1))).astype(np.int64)
        for k in np.unique(bucket[length > 0]):  # ≤ ~15 buckets; blocks only bound memory
            rows = np.nonzero((bucket == k) & (length > 0))[0]
            lmax = int(length[rows].max())
            step = max(1, budget // lmax)
            ks = np.arange(lmax)
            for i in range(0, rows.size, step):
                blk = rows[i : i + step]
                inside = ks[None, :] < length[blk, None]
                if padded is not None:  # the same values, with a "no day" index instead of two masks
                    idx = np.where(inside, fa[blk, None] + ks[None, :], self.tm.size)
                    out[blk] = np.sum(padded(self, idx, base[blk, None]), axis=1)
                    continue
                idx = np.where(inside, fa[blk, None] + ks[None, :], 0)
                d = self._hdd_days(idx, np.broadcast_to(base[blk, None], idx.shape))
                out[blk] = np.sum(np.where(inside, d, 0.0), axis=1)
        valid = self.cum_valid[fb] - self.cum_valid[fa]
        if kind == "cdd":
            sum_tm = self.cum_tm[fb] - self.cum_tm[fa]
            out = out - (valid * base - sum_tm)
        out[out < _RESIDUE] = 0.0
        days = e0 - s0 + 1
        return out, days, days - valid

    def daily(self, station_ids, starts, ends, kind: str = "hdd") -> DailyDegreeDays:
        """Per-day degree days at every grid base over each span (for degree-day weighting).

        Every calendar day of every span appears once, including days outside the
        station's record (``missing`` True, ``dd`` 0). Output size is Σ span lengths ×
        n_bases; for prorating a bill to a window by degree days prefer
        ``period_totals`` over the overlap divided by ``period_totals`` over the bill.

        Returns
        -------
        DailyDegreeDays
        """
        _check_kind(kind)
        sidx, s0, e0, _, _ = self._rows(station_ids, starts, ends)
        span = (e0 - s0 + 1).astype(np.int64)
        row = np.repeat(np.arange(span.size), span)
        start_of = np.repeat(np.cumsum(span) - span, span)
        day = np.repeat(s0, span) + (np.arange(row.size) - start_of)
        st = sidx[row]
        i = day - self.first_day[st]
        inside = (i >= 0) & (i < self.n_days[st])
        flat = np.where(inside, self.offset[st] + np.clip(i, 0, None), 0)
        present = inside & self.valid[flat]
        hdd = self._hdd_days(flat, self.bases_f[None, :]) if row.size else np.zeros((0, self.bases_f.size))
        if kind == "cdd":
            hdd = np.maximum(hdd - (self.bases_f[None, :] - np.where(present, self.tm[flat], 0.0)[:, None]), 0.0)
        dd = np.where(present[:, None], hdd, 0.0)
        return DailyDegreeDays(row=row, date=day.astype("datetime64[D]"), dd=dd, missing=~present, bases_f=self.bases_f)

    def __repr__(self) -> str:
        return (
            f"DegreeDayCube(method={self.method!r}, stations={len(self.stations)}, "
            f"days={int(self.n_days.sum())}, bases={self.bases_f.size} "
            f"[{self.bases_f[0]:g}..{self.bases_f[-1]:g}], rounding={self.rounding})"
        )

    @property
    def estimated(self) -> bool:
        """True for the ``monthly-estimate`` method: its degree days are estimates, to be marked so."""
        return KERNELS[self.method].estimate

    def record(self) -> pl.DataFrame:
        """Each station's record: station_id, first_date, last_date, days, days_with_data."""
        end = self.offset + self.n_days
        return pl.DataFrame(
            {
                "station_id": self.stations,
                "first_date": _to_dates(self.first_day),
                "last_date": _to_dates(self.first_day + self.n_days - 1),
                "days": self.n_days,
                "days_with_data": self.cum_valid[end] - self.cum_valid[self.offset],
            }
        )


# ---------------------------------------------------------------------------- one kernel per method
# Each method's three steps, chosen by name through :data:`KERNELS` (no if/elif on the method string):
# ``from_daily(tmax, tmin, tmean, layout, rounding) -> (tm, extra)`` turns daily station data into the
# method's daily mean and per-day extras (None: the method cannot be built from daily data);
# ``cumulate(cube, cum)`` fills the (n_bases, n_flat + 1) running sums at every grid base;
# ``hdd_days(cube, idx, ix, base, grid)`` gives the daily HDD of flat days (before missing days are zeroed).


def _mean_from_daily(tmax, tmin, tmean, layout, rounding):
    """Tm = (t_max + t_min)/2 where both are given, else t_mean [°F]; rounded as published with ``rounding``."""
    both = ~np.isnan(tmax) & ~np.isnan(tmin)
    tm = np.where(both, (tmax + tmin) / 2.0, tmean)
    if rounding:
        tm = np.where(both, nws_round_mean(tmax, tmin), np.floor(tmean + 0.5))
    return tm, {}


def _maxmin_from_daily(tmax, tmin, tmean, layout, rounding):
    """Tm = (t_max + t_min)/2; a day without both is missing; t_max and t_min kept for the Met Office ramps."""
    both = ~np.isnan(tmax) & ~np.isnan(tmin)
    tm = np.where(both, (tmax + tmin) / 2.0, np.nan)
    return tm, {"tmax": np.where(both, tmax, np.nan), "tmin": np.where(both, tmin, np.nan)}


def _monthly_estimate_from_daily(tmax, tmin, tmean, layout, rounding):
    """The Erbs estimate's inputs from each calendar month's mean of the daily means (:func:`_monthly_from_daily`)."""
    both = ~np.isnan(tmax) & ~np.isnan(tmin)
    tm_day = np.where(both, (tmax + tmin) / 2.0, tmean)
    return _monthly_from_daily(tm_day, layout)


def _mean_cumulate(cube, cum):
    """Running sums of (b − Tm)⁺ per grid base b [°F·day]."""
    valid, tm, bases = cube.valid, cube.tm, cube.bases_f
    t_inf = np.where(valid, tm, np.inf)  # a missing day contributes max(0, b − ∞) = 0
    for j, b in enumerate(bases):
        row = cum[j, 1:]
        np.subtract(b, t_inf, out=row)
        np.maximum(row, 0.0, out=row)
        np.cumsum(cum[j], out=cum[j])


def _maxmin_cumulate(cube, cum):
    """Running sums of the Met Office daily HDD per grid base [°F·day]."""
    valid, tm, bases, extra = cube.valid, cube.tm, cube.bases_f, cube.extra
    n_flat = tm.size
    # Met Office HDD as a sum of ramps: ¼(b − Tmin)⁺ + ½(b − Tm)⁺ + ¼(b − Tmax)⁺ (see _maxmin_hdd)
    lo = np.where(valid, extra["tmin"], np.inf)
    mid = np.where(valid, tm, np.inf)
    hi = np.where(valid, extra["tmax"], np.inf)
    tmp = np.empty(n_flat)
    for j, b in enumerate(bases):
        row = cum[j, 1:]
        np.subtract(b, lo, out=row)
        np.maximum(row, 0.0, out=row)
        for t, w in ((mid, 2.0), (hi, 1.0)):
            np.subtract(b, t, out=tmp)
            np.maximum(tmp, 0.0, out=tmp)
            if w != 1.0:
                tmp *= w
            row += tmp
        row *= 0.25
        np.cumsum(cum[j], out=cum[j])


def _by_day_cumulate(cube, cum):
    """Running sums of the method's daily HDD (:attr:`Kernel.hdd_days`) per grid base, in chunks of days."""
    extra, bases = cube.extra, cube.bases_f
    n_flat = cube.tm.size
    width = extra["hourly"].shape[1] if "hourly" in extra else 1
    chunk = max(1, 4_000_000 // width)
    for j, b in enumerate(bases):
        for a in range(0, n_flat, chunk):  # chunks only bound memory (hourly)
            idx = np.arange(a, min(a + chunk, n_flat))
            cum[j, 1 + a : 1 + a + idx.size] = cube._hdd_days(idx, b)
        np.cumsum(cum[j], out=cum[j])


def _mean_days(cube, idx, ix, base, grid):
    """(base − Tm)⁺ [°F·day]."""
    out = base - cube.tm[ix]
    out = np.maximum(out, 0.0)
    return out


def _mean_padded_days(cube, idx, base):
    """(base − Tm)⁺ [°F·day] of flat days ``idx`` (broadcast against ``base``), 0 for a missing day
    and for ``idx == n_flat`` (no day): there Tm is +∞, and (base − ∞)⁺ = 0, the value that
    :meth:`DegreeDayCube._hdd_days` and the caller's mask give. The +∞-padded daily means are
    made once per cube."""
    t = cube.__dict__.get("_tm_or_inf")
    if t is None:
        t = np.append(np.where(cube.valid, cube.tm, np.inf), np.inf)
        cube.__dict__["_tm_or_inf"] = t
    out = np.subtract(base, t[idx])
    np.maximum(out, 0.0, out=out)
    return out


def _maxmin_days(cube, idx, ix, base, grid):
    """The Met Office daily HDD from t_max and t_min (:func:`_maxmin_hdd`) [°F·day]."""
    out = _maxmin_hdd(cube.extra["tmax"][ix], cube.extra["tmin"][ix], base)
    return out


def _hourly_days(cube, idx, ix, base, grid):
    """The mean of (base − T_h)⁺ over the day's readings (:func:`hourly_dd`) [°F·day]."""
    r = cube.extra["hourly"][idx]  # (..., width); all-NaN rows are missing days
    if grid:  # base (1, nb), r (n, w) → (n, nb)
        return (
            _nanmean_last(np.maximum(base[:, :, None] - r[:, None, :], 0.0))
            if r.shape[0]
            else np.zeros((0, base.shape[1]))
        )
    return _nanmean_last(np.maximum(base[..., None] - r, 0.0))  # base like idx, r (..., w)


def _nanmean_last(x: np.ndarray) -> np.ndarray:
    """``np.nanmean(x, axis=-1)``, the same bits (numpy's own steps: NaN set to 0, summed, divided by the
    count), NaN where a row is all NaN (a missing day) without numpy's "Mean of empty slice" warning, so
    no ``warnings.catch_warnings`` (not thread-safe; chunks run on threads, ``pipeline._side_by_side``)."""
    nan = np.isnan(x)
    total = np.where(nan, 0.0, x).sum(axis=-1)
    count = np.sum(~nan, axis=-1, dtype=np.intp)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.true_divide(total, count)


def _monthly_estimate_days(cube, idx, ix, base, grid):
    """The month's Erbs estimate (:func:`erbs_monthly_hdd`) spread evenly over its days [°F·day]."""
    ex = cube.extra
    tmc = f_to_c(cube.tm[ix])
    n = ex["month_days"][ix]
    s = ex["sigma_yr_c"][ix]
    safe = ~np.isnan(tmc)
    with np.errstate(invalid="ignore"):
        out = (
            erbs_monthly_hdd(np.where(safe, tmc, 0.0), np.where(safe, n, 1.0), f_to_c(base), np.where(safe, s, 0.0))
            * F_PER_C
            / np.where(safe, n, 1.0)
        )
    return out


@dataclass(frozen=True)
class Kernel:
    """One degree-day method's steps (see the notes above :func:`_mean_from_daily`)."""

    from_daily: Callable | None
    cumulate: Callable
    hdd_days: Callable
    rounds: bool = False  # the published rounding of the daily mean applies (mean method only)
    # ``padded_days(cube, idx, base)``: hdd_days with missing days and the index n_flat ("no day") at 0,
    # without masks (at_base's padded blocks); None: at_base masks hdd_days' values
    padded_days: Callable | None = None
    estimate: bool = False  # its degree days are estimates, to be marked so


#: method name -> its kernel; the names are :data:`METHODS`
KERNELS: dict[str, Kernel] = {
    "mean": Kernel(_mean_from_daily, _mean_cumulate, _mean_days, rounds=True, padded_days=_mean_padded_days),
    "maxmin": Kernel(_maxmin_from_daily, _maxmin_cumulate, _maxmin_days),
    "hourly": Kernel(None, _by_day_cumulate, _hourly_days),
    "monthly-estimate": Kernel(_monthly_estimate_from_daily, _by_day_cumulate, _monthly_estimate_days, estimate=True),
}


def _alloc_f64(shape: tuple[int, int]) -> np.ndarray:
    """An uninitialised float64 array; large ones from an anonymous mapping with MAP_POPULATE.

    Touching fresh memory page by page is slow on virtual machines (measured here: about
    1.7 s for 0.6 GB, against 0.25 s when the kernel populates the mapping at once); the
    mapping is freed with the array. Falls back to ``np.empty`` where MAP_POPULATE is absent.
    """
    nbytes = int(np.prod(shape)) * 8
    if nbytes < 64 * 2**20 or not hasattr(mmap, "MAP_POPULATE"):
        return np.empty(shape, dtype=np.float64)
    try:
        buf = mmap.mmap(-1, nbytes, flags=mmap.MAP_PRIVATE | mmap.MAP_ANONYMOUS | mmap.MAP_POPULATE)
    except (OSError, ValueError):
        return np.empty(shape, dtype=np.float64)
    return np.frombuffer(buf, dtype=np.float64).reshape(shape)


def _prepare_daily(weather: pl.DataFrame) -> pl.DataFrame:
    missing = [c for c in WEATHER_COLUMNS if c not in weather.columns]
    if missing:
        raise ValueError(f"weather frame is missing column(s) {', '.join(missing)}; needs {', '.join(WEATHER_COLUMNS)}")
    if weather.schema["date"] != pl.Date:
        raise ValueError(f"weather column 'date' must be pl.Date; got {weather.schema['date']}")
    w = weather.select(
        pl.col("station_id").cast(pl.String),
        pl.col("date"),
        *[pl.col(c).cast(pl.Float64).fill_nan(None) for c in ("t_min_f", "t_max_f", "t_mean_f")],
    )
    w = w.filter(pl.col("station_id").is_not_null() & pl.col("date").is_not_null()).sort("station_id", "date")
    dup = w.filter(
        (pl.col("station_id") == pl.col("station_id").shift(1)) & (pl.col("date") == pl.col("date").shift(1))
    )
    if dup.height:
        r = dup.row(0, named=True)
        raise ValueError(f"weather has more than one row for station {r['station_id']!r} on {r['date']}")
    bad = w.filter(pl.col("t_min_f") > pl.col("t_max_f"))
    if bad.height:
        r = bad.row(0, named=True)
        raise ValueError(
            f"t_min_f > t_max_f for station {r['station_id']!r} on {r['date']}: {r['t_min_f']} > {r['t_max_f']}"
        )
    return w


def _layout(w: pl.DataFrame) -> dict:
    """Flat-day layout of stations sorted by id; ``w`` sorted by station_id, date."""
    rec = (
        w.group_by("station_id")
        .agg(pl.col("date").min().alias("d0"), pl.col("date").max().alias("d1"))
        .sort("station_id")
    )
    first = rec["d0"].cast(pl.Int32).to_numpy().astype(np.int64)
    n_days = rec["d1"].cast(pl.Int32).to_numpy().astype(np.int64) - first + 1
    offset = np.concatenate([[0], np.cumsum(n_days)[:-1]]).astype(np.int64)
    stations = rec["station_id"].to_list()
    # w is sorted by station_id (same order as ``stations``): station index by run boundaries
    s_idx = (
        w.select((pl.col("station_id") != pl.col("station_id").shift(1)).fill_null(True).cum_sum().cast(pl.Int64) - 1)
        .to_series()
        .to_numpy()
    )
    day = w["date"].cast(pl.Int32).to_numpy().astype(np.int64)
    flat = offset[s_idx] + (day - first[s_idx]) if s_idx.size else np.zeros(0, dtype=np.int64)
    return {
        "stations": stations,
        "first_day": first,
        "n_days": n_days,
        "offset": offset,
        "n_flat": int(n_days.sum()),
        "flat_index": flat,
    }


def _flat_dates(layout: dict) -> tuple[np.ndarray, np.ndarray]:
    """Station index and day number of every flat day."""
    st = np.repeat(np.arange(len(layout["stations"])), layout["n_days"])
    day = layout["first_day"][st] + (np.arange(st.size) - layout["offset"][st])
    return st, day


def _monthly_from_daily(tm_day: np.ndarray, layout: dict, *, sigma_yr_c=None, min_days_missing: int | None = None):
    """Monthly means of daily means per station; returns (per-day month mean, extra)."""
    max_missing = _MAX_MISSING_DAYS_PER_MONTH if min_days_missing is None else min_days_missing
    st, day = _flat_dates(layout)
    d = day.astype("datetime64[D]")
    ym = d.astype("datetime64[M]")
    month_days = ((ym + 1).astype("datetime64[D]") - ym.astype("datetime64[D]")).astype(np.int64)
    f = pl.DataFrame({"st": st, "ym": ym.astype(np.int64), "t": tm_day, "nd": month_days})
    g = f.group_by("st", "ym").agg(
        pl.col("t").drop_nans().mean().alias("tbar"),
        pl.col("t").is_not_nan().sum().alias("n_ok"),
        pl.col("nd").first().alias("nd"),
    )
    g = g.with_columns(
        pl.when(pl.col("nd") - pl.col("n_ok") <= max_missing).then(pl.col("tbar")).otherwise(None).alias("tbar")
    )
    # σ_yr: SD (divisor 12) of the 12 long-term calendar-month means, in °C
    clim = (
        g.with_columns((pl.col("ym") % 12).alias("m"))
        .group_by("st", "m")
        .agg(pl.col("tbar").mean().alias("tc"))
        .group_by("st")
        .agg(pl.col("tc").drop_nulls().std(ddof=0).alias("sd_f"), pl.col("tc").drop_nulls().len().alias("n_months"))
    )
    n_st = len(layout["stations"])
    sig = np.full(n_st, np.nan)
    if sigma_yr_c is None:
        ok = clim.filter(pl.col("n_months") == 12)
        sig[ok["st"].to_numpy()] = ok["sd_f"].to_numpy() / F_PER_C
    elif isinstance(sigma_yr_c, dict):
        for i, s in enumerate(layout["stations"]):
            sig[i] = float(sigma_yr_c.get(s, np.nan))
    else:
        sig[:] = float(sigma_yr_c)
    joined = f.select("st", "ym").join(g.select("st", "ym", "tbar"), on=["st", "ym"], how="left", maintain_order="left")
    tbar = joined["tbar"].fill_null(np.nan).to_numpy()
    s_day = sig[st]
    tm = np.where(np.isnan(s_day), np.nan, tbar)
    return tm, {
        "month_days": month_days.astype(np.float64),
        "sigma_yr_c": s_day,
        "sigma_yr_c_station": dict(zip(layout["stations"], sig.tolist())),
    }


# ----------------------------------------------------------------------------- normals


@dataclass
class NormalYear:
    """Normal-year degree days per station at each base.

    ``hdd``/``cdd`` are (n_stations, n_bases) annual values [°F·day] over a 365-day
    year; ``monthly_hdd``/``monthly_cdd`` (n_stations, 12, n_bases); ``years_used``
    maps each station to the years that counted (NaN rows where none did).
    """

    stations: list[str]
    bases_f: np.ndarray
    hdd: np.ndarray
    cdd: np.ndarray
    monthly_hdd: np.ndarray
    monthly_cdd: np.ndarray
    years_used: dict[str, list[int]]

    def for_stations(self, station_ids, kind: str = "hdd") -> np.ndarray:
        """Normal-year rows (n, n_bases) for each given station id [°F·day]; NaN for a station
        without a normal (unknown, or no year with enough data)."""
        _check_kind(kind)
        table = self.hdd if kind == "hdd" else self.cdd
        ids = pl.Series("station_id", np.asarray(station_ids, dtype=object).tolist(), dtype=pl.String)
        idx = (
            ids.replace_strict({s: i for i, s in enumerate(self.stations)}, default=-1, return_dtype=pl.Int64)
            .fill_null(-1)
            .to_numpy()
        )
        out = np.full((idx.size, self.bases_f.size), np.nan)
        ok = idx >= 0
        out[ok] = table[idx[ok]]
        return out

    def to_frame(self) -> pl.DataFrame:
        """Long frame: station_id, base_f, hdd, cdd, n_years, first_year, last_year."""
        ns, nb = self.hdd.shape
        st = np.repeat(np.array(self.stations, dtype=object), nb)
        yrs = [self.years_used[s] for s in self.stations]
        return pl.DataFrame(
            {
                "station_id": st.tolist(),
                "base_f": np.tile(self.bases_f, ns),
                "hdd": self.hdd.ravel(),
                "cdd": self.cdd.ravel(),
                "n_years": np.repeat([len(y) for y in yrs], nb),
                "first_year": pl.Series(np.repeat([min(y) if y else None for y in yrs], nb).tolist(), dtype=pl.Int32),
                "last_year": pl.Series(np.repeat([max(y) if y else None for y in yrs], nb).tolist(), dtype=pl.Int32),
            }
        )


def normal_year(
    cube_or_weather, bases_f=None, years=None, min_coverage: float = 0.95, method: str = "mean"
) -> NormalYear:
    """Normal-year degree days per station from the complete years of its record.

    Parameters
    ----------
    cube_or_weather : DegreeDayCube or pl.DataFrame
        A cube, or a daily weather frame (a ``method`` cube is built from it).
    bases_f : array_like, optional
        Bases [°F]; default the cube's grid. Must be a subset of the cube's grid when a
        cube is given.
    years : iterable of int, optional
        Candidate years (e.g. ``range(1991, 2021)``); default every calendar year that
        lies within a station's record.
    min_coverage : float
        A year counts only when at least this fraction of its days has data (0.95).

    Returns
    -------
    NormalYear

    Notes
    -----
    For each station and calendar month, the normal daily value is the sum of that
    month's degree days over the counted years divided by the number of days with
    data in them; times the month's length in a 365-day year (February 28) it gives
    the normal month, and the 12 months sum to the normal year. With complete,
    non-leap years this equals the mean of the annual totals; missing days (≤ 5 %)
    are thus replaced by their month's mean rather than by zero.
    """
    if not 0 < min_coverage <= 1:
        raise ValueError(f"min_coverage must be in (0, 1]; got {min_coverage}")
    if isinstance(cube_or_weather, DegreeDayCube):
        cube = cube_or_weather
        if bases_f is not None:
            b = _as_bases(bases_f)
            cols = np.searchsorted(cube.bases_f, b)
            cols = np.clip(cols, 0, cube.bases_f.size - 1)
            if not np.allclose(cube.bases_f[cols], b, rtol=0, atol=1e-9):
                raise ValueError("bases_f must be on the cube's base grid; build the cube with these bases")
        else:
            cols = np.arange(cube.bases_f.size)
    else:
        if bases_f is None:
            raise ValueError("bases_f is required when a weather frame is given")
        cube = DegreeDayCube.from_daily(cube_or_weather, bases_f, method=method)
        cols = np.arange(cube.bases_f.size)
    bases = cube.bases_f[cols]
    ns = len(cube.stations)
    y_first = cube.first_day.astype("datetime64[D]").astype("datetime64[Y]").astype(np.int64) + 1970
    y_last = (cube.first_day + cube.n_days - 1).astype("datetime64[D]").astype("datetime64[Y]").astype(np.int64) + 1970
    cand = (
        sorted(set(years))
        if years is not None
        else (list(range(int(y_first.min()), int(y_last.max()) + 1)) if ns else [])
    )
    ny = len(cand)
    nb = bases.size
    empty = np.full((ns, nb), np.nan)
    if ny == 0 or ns == 0:
        return NormalYear(
            list(cube.stations),
            bases,
            empty,
            empty.copy(),
            np.full((ns, 12, nb), np.nan),
            np.full((ns, 12, nb), np.nan),
            {s: [] for s in cube.stations},
        )
    yr = np.array(cand, dtype=np.int64)
    # (station, year, month) grid of periods
    S, Y, M = np.meshgrid(np.arange(ns), yr, np.arange(12), indexing="ij")
    m0 = ((Y - 1970) * 12 + M).astype("datetime64[M]")
    starts = m0.astype("datetime64[D]").ravel()
    ends = ((m0 + 1).astype("datetime64[D]") - 1).ravel()
    sid = np.array(cube.stations, dtype=object)[S.ravel()]
    h, days, miss = cube.period_totals(sid, starts, ends, "hdd")
    c, _, _ = cube.period_totals(sid, starts, ends, "cdd")
    h = h[:, cols].reshape(ns, ny, 12, nb)
    c = c[:, cols].reshape(ns, ny, 12, nb)
    valid = (days - miss).reshape(ns, ny, 12)
    cover = valid.sum(axis=2) / days.reshape(ns, ny, 12).sum(axis=2)
    counted = cover >= min_coverage  # (ns, ny)
    w = counted[:, :, None]
    vsum = np.where(w, valid, 0).sum(axis=1)  # (ns, 12)
    month_len = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        mh = np.where(w[..., None], h, 0.0).sum(axis=1) / vsum[..., None] * month_len[None, :, None]
        mc = np.where(w[..., None], c, 0.0).sum(axis=1) / vsum[..., None] * month_len[None, :, None]
    none = ~counted.any(axis=1)
    mh[none] = np.nan
    mc[none] = np.nan
    used = {s: [int(yr[j]) for j in np.nonzero(counted[i])[0]] for i, s in enumerate(cube.stations)}
    return NormalYear(list(cube.stations), bases, mh.sum(axis=1), mc.sum(axis=1), mh, mc, used)


# ----------------------------------------------------------------------------- gaps


def fill_short_gaps(weather: pl.DataFrame, max_gap_days: int = 3) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Fill short gaps in daily station data by linear interpolation; report the long ones.

    Parameters
    ----------
    weather : pl.DataFrame
        The canonical daily frame (``station_id, date, t_min_f, t_max_f, t_mean_f``;
        extra columns are kept on the rows that had them).
    max_gap_days : int
        Longest run of consecutive days without a value that is interpolated (3).

    Returns
    -------
    filled : pl.DataFrame
        One row per station and calendar day from the station's first to last date,
        sorted by station_id, date; each temperature column interpolated linearly in time
        across null runs of ≤ ``max_gap_days`` days bounded by values on both sides;
        boolean ``interpolated`` True on rows where any value was filled.
    gaps : pl.DataFrame
        ``station_id, gap_start, gap_end, days``: every remaining run of days without a
        usable daily mean (neither max+min nor mean), i.e. the gaps longer than
        ``max_gap_days`` (and unbounded ones); these stay missing in the degree days.
    """
    if max_gap_days < 0:
        raise ValueError(f"max_gap_days must be ≥ 0; got {max_gap_days}")
    w = _prepare_daily(weather)
    extra_cols = [c for c in weather.columns if c not in WEATHER_COLUMNS]
    if extra_cols:
        w = w.join(
            weather.select(pl.col("station_id").cast(pl.String), "date", *extra_cols),
            on=["station_id", "date"],
            how="left",
        )
    cal = (
        w.group_by("station_id")
        .agg(pl.col("date").min().alias("d0"), pl.col("date").max().alias("d1"))
        .with_columns(pl.date_ranges("d0", "d1").alias("date"))
        .select("station_id", "date")
        .explode("date")
    )
    full = cal.join(w, on=["station_id", "date"], how="left").sort("station_id", "date")
    temps = ["t_min_f", "t_max_f", "t_mean_f"]

    def usable() -> pl.Expr:
        return (pl.col("t_min_f").is_not_null() & pl.col("t_max_f").is_not_null()) | pl.col("t_mean_f").is_not_null()

    # a day is filled only when it has no usable value at all, lies in a run of ≤ max_gap_days
    # such days, and the column's own null run is ≤ max_gap_days (bounded on both sides)
    full = full.with_columns((~usable()).alias("_gap"))
    full = full.with_columns(
        (pl.col("_gap") != pl.col("_gap").shift(1).over("station_id"))
        .fill_null(True)
        .cum_sum()
        .over("station_id")
        .alias("_run")
    )
    full = full.with_columns(pl.len().over("station_id", "_run").alias("_gap_len"))
    exprs = []
    for c in temps:
        isn = pl.col(c).is_null()
        crun = (isn != isn.shift(1).over("station_id")).fill_null(True).cum_sum().over("station_id")
        clen = pl.len().over(pl.col("station_id"), crun)
        ok = pl.col("_gap") & (pl.col("_gap_len") <= max_gap_days) & isn & (clen <= max_gap_days)
        exprs.append(pl.when(ok).then(pl.col(c).interpolate().over("station_id")).otherwise(pl.col(c)).alias(c))
    out = full.with_columns(exprs)
    out = out.with_columns((pl.col("_gap") & usable()).alias("interpolated"))
    g = out.with_columns((~usable()).alias("_miss"))
    g = g.with_columns(
        (pl.col("_miss") != pl.col("_miss").shift(1).over("station_id"))
        .fill_null(True)
        .cum_sum()
        .over("station_id")
        .alias("_r2")
    )
    gaps = (
        g.filter(pl.col("_miss"))
        .group_by("station_id", "_r2")
        .agg(
            pl.col("date").min().alias("gap_start"),
            pl.col("date").max().alias("gap_end"),
            pl.len().cast(pl.Int64).alias("days"),
        )
        .sort("station_id", "gap_start")
        .select("station_id", "gap_start", "gap_end", "days")
    )
    out = out.drop("_gap", "_run", "_gap_len")
    return out, gaps


def gaps_in_windows(
    gaps: pl.DataFrame, windows: pl.DataFrame, *, start: str = "window_start", end: str = "window_end"
) -> pl.DataFrame:
    """Long weather gaps that touch each window (e.g. each building's comparison span).

    Parameters
    ----------
    gaps : pl.DataFrame
        ``station_id, gap_start, gap_end, days`` from :func:`fill_short_gaps`.
    windows : pl.DataFrame
        ``station_id`` plus the ``start``/``end`` date columns (inclusive) and any key
        columns (``building_id`` …), which are kept.

    Returns
    -------
    pl.DataFrame
        One row per (window, gap) overlap: the window's columns, ``gap_start, gap_end``
        and ``gap_days_in_window`` (days of the gap inside the window); sorted by the
        window columns then gap_start. Empty when no gap touches any window.
    """
    for c in ("station_id", start, end):
        if c not in windows.columns:
            raise ValueError(f"windows frame needs column {c!r}; got {windows.columns}")
    j = windows.join(gaps.select("station_id", "gap_start", "gap_end"), on="station_id", how="inner")
    j = j.filter((pl.col("gap_start") <= pl.col(end)) & (pl.col("gap_end") >= pl.col(start)))
    lo = pl.max_horizontal(pl.col("gap_start"), pl.col(start))
    hi = pl.min_horizontal(pl.col("gap_end"), pl.col(end))
    j = j.with_columns(((hi - lo).dt.total_days() + 1).cast(pl.Int64).alias("gap_days_in_window"))
    return j.sort([*windows.columns, "gap_start"])


# ----------------------------------------------------------------------------- tables

_BY = ("day", "month", "year", "period")


def _periods(by: str, start: int, end: int) -> tuple[np.ndarray, np.ndarray]:
    """Calendar periods (clipped to [start, end]) as day numbers."""
    if by == "day":
        d = np.arange(start, end + 1, dtype=np.int64)
        return d, d
    unit = "M" if by == "month" else "Y"
    a = np.datetime64(int(start), "D").astype(f"datetime64[{unit}]")
    b = np.datetime64(int(end), "D").astype(f"datetime64[{unit}]")
    p = np.arange(a, b + 1)
    ps = np.maximum(p.astype("datetime64[D]").astype(np.int64), start)
    pe = np.minimum((p + 1).astype("datetime64[D]").astype(np.int64) - 1, end)
    return ps, pe


def degree_day_table(
    cube: DegreeDayCube,
    *,
    station_ids=None,
    by: str = "month",
    date_from=None,
    date_to=None,
    periods: pl.DataFrame | None = None,
    kind: str = "both",
    base_f: float | None = None,
    unit: str = "F",
) -> pl.DataFrame:
    """Degree days per period as the command-line table.

    Parameters
    ----------
    cube : DegreeDayCube
    station_ids : list of str, optional
        Default: every station of the cube.
    by : {"day", "month", "year", "period"}
        Calendar periods are clipped to ``[date_from, date_to]`` (default: each
        station's record); ``period`` takes ``periods`` (``period_start``,
        ``period_end`` and optionally ``station_id``).
    kind : {"hdd", "cdd", "both"}
        The column not asked for is null.
    base_f : float, optional
        Base [°F]; exact at any value (default: the cube's first grid base).
    unit : {"F", "C"}
        Output unit: °F·day, or °C·day with the base shown in °C.

    Returns
    -------
    pl.DataFrame
        ``station_id, period_start, period_end, days, days_missing, hdd, cdd, method,
        base, unit`` sorted by station_id, period_start, period_end.
    """
    if by not in _BY:
        raise ValueError(f"by must be one of {', '.join(_BY)}; got {by!r}")
    if kind not in ("hdd", "cdd", "both"):
        raise ValueError(f"kind must be hdd, cdd or both; got {kind!r}")
    if unit not in ("F", "C"):
        raise ValueError(f"unit must be 'F' or 'C'; got {unit!r}")
    base = float(cube.bases_f[0] if base_f is None else base_f)
    stations = list(cube.stations) if station_ids is None else list(station_ids)
    rec = cube.record()
    if by == "period":
        if periods is None:
            raise ValueError("by='period' needs a periods frame (period_start, period_end)")
        p = periods
        if "station_id" not in p.columns:
            p = pl.DataFrame({"station_id": stations}).join(p, how="cross")
        p = p.filter(pl.col("station_id").is_in(stations))
        sid = np.array(p["station_id"].to_list(), dtype=object)
        ps = _day_numbers(p["period_start"], "period_start")
        pe = _day_numbers(p["period_end"], "period_end")
    else:
        sids, pss, pes = [], [], []
        known = dict(
            zip(
                rec["station_id"].to_list(),
                zip(rec["first_date"].cast(pl.Int32).to_list(), rec["last_date"].cast(pl.Int32).to_list()),
            )
        )
        for s in stations:  # per station (a handful), not per period
            if s not in known:
                raise ValueError(f"unknown station_id {s!r}; the weather data has {', '.join(cube.stations[:10])}")
            a = known[s][0] if date_from is None else int(_day_numbers([date_from], "date_from")[0])
            b = known[s][1] if date_to is None else int(_day_numbers([date_to], "date_to")[0])
            if b < a:
                raise ValueError(
                    f"date_to {_to_dates(np.array([b]))[0]} is before date_from {_to_dates(np.array([a]))[0]}"
                )
            x, y = _periods(by, a, b)
            sids.append(np.full(x.size, s, dtype=object))
            pss.append(x)
            pes.append(y)
        sid = np.concatenate(sids) if sids else np.zeros(0, dtype=object)
        ps = np.concatenate(pss) if pss else np.zeros(0, dtype=np.int64)
        pe = np.concatenate(pes) if pes else np.zeros(0, dtype=np.int64)
    n = sid.size
    if n:
        exact_grid = np.isclose(cube.bases_f, base, rtol=0, atol=1e-12)
        if exact_grid.any():
            j = int(np.argmax(exact_grid))
            h, days, miss = cube.period_totals(sid, ps, pe, "hdd")
            c, _, _ = cube.period_totals(sid, ps, pe, "cdd")
            h, c = h[:, j], c[:, j]
        else:
            h, days, miss = cube.at_base(sid, ps, pe, np.full(n, base), "hdd")
            c, _, _ = cube.at_base(sid, ps, pe, np.full(n, base), "cdd")
    else:
        h = c = np.zeros(0)
        days = miss = np.zeros(0, dtype=np.int64)
    scale = 1.0 if unit == "F" else 1.0 / F_PER_C
    base_out = base if unit == "F" else float(f_to_c(base))
    df = pl.DataFrame(
        {
            "station_id": pl.Series(sid.tolist(), dtype=pl.String),
            "period_start": _to_dates(ps),
            "period_end": _to_dates(pe),
            "days": pl.Series(days, dtype=pl.Int64),
            "days_missing": pl.Series(miss, dtype=pl.Int64),
            "hdd": pl.Series(h * scale, dtype=pl.Float64)
            if kind in ("hdd", "both")
            else pl.Series([None] * n, dtype=pl.Float64),
            "cdd": pl.Series(c * scale, dtype=pl.Float64)
            if kind in ("cdd", "both")
            else pl.Series([None] * n, dtype=pl.Float64),
            "method": pl.Series([cube.method] * n, dtype=pl.String),
            "base": pl.Series([base_out] * n, dtype=pl.Float64),
            "unit": pl.Series(["°F·day" if unit == "F" else "°C·day"] * n, dtype=pl.String),
        }
    )
    return df.sort("station_id", "period_start", "period_end", maintain_order=True)


def nearest_base(grid: np.ndarray, base: np.ndarray) -> np.ndarray:
    """Index of the grid base nearest to each ``base`` (the lower one on a tie, 0 for NaN).

    The same as ``np.abs(grid[None, :] - base[:, None]).argmin(axis=1)`` for an ascending grid,
    without the (rows × bases) temporary.
    """
    grid = np.asarray(grid, dtype=float)
    base = np.asarray(base, dtype=float)
    if grid.size < 2:
        return np.zeros(base.shape, dtype=np.intp)
    hi = np.clip(np.searchsorted(grid, base), 1, grid.size - 1)
    lo = hi - 1
    j = np.where(np.abs(grid[lo] - base) <= np.abs(grid[hi] - base), lo, hi)
    return np.where(np.isnan(base), 0, j)
