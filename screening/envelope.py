"""Expected heating from an envelope estimate (layer 1: pure functions, no I/O).

The model, in IP units (see DEVELOPERS.md glossary and docs/methods.md "Expected heating: the envelope model"):

* geometry from floor area, stories, an aspect ratio and a floor-to-floor height;
* ``UA = sum(U*A) [walls, windows, roof] + F*perimeter [ground] + 0.018*ACH*V
  + 1.08*cfm_OA*(1 - recovery)*occupied_fraction``  [Btu/(h*F)];
* balance point ``T_bal = T_set,eff - (internal + solar gains) / UA`` [F], clipped to a
  sane range; setback hours lower the effective setpoint;
* heating fuel ``Q = 24 * UA * DD(T_bal) / eta`` [Btu] by three degree-day methods
  (variable base at T_bal, fixed 65 F, modified degree-day), with a Monte Carlo band
  over the defaults' ranges.

Every default comes from ``screening/data/*.csv`` (each row has a source); values given
in buildings.csv override the defaults and are taken as known (no spread).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import polars as pl

from . import refdata, schema
from .schema import ERA_EDGES as _ERA_EDGES
from .schema import ERAS

USE_TYPES: tuple[str, ...] = tuple(schema.USE_TYPES)
FUELS: tuple[str, ...] = tuple(schema.FUELS)

# Drawn parameters, in a fixed order (the order fixes the random stream).
# name -> (defaults table, buildings.csv column that overrides it or None, unit)
PARAMETERS: dict[str, tuple[str, str | None, str]] = {
    "stories": ("use_type_defaults", "stories", "floors"),
    "aspect_ratio": ("use_type_defaults", None, "length/width"),
    "floor_to_floor_ft": ("use_type_defaults", None, "ft"),
    "window_fraction": ("use_type_defaults", "window_fraction", "fraction of gross wall"),
    "wall_u_btu_h_ft2_f": ("envelope_defaults", "wall_u_btu_h_ft2_f", "Btu/(h*ft2*F)"),
    "window_u_btu_h_ft2_f": ("envelope_defaults", "window_u_btu_h_ft2_f", "Btu/(h*ft2*F)"),
    "roof_u_btu_h_ft2_f": ("envelope_defaults", "roof_u_btu_h_ft2_f", "Btu/(h*ft2*F)"),
    "ground_f_btu_h_ft_f": ("envelope_defaults", None, "Btu/(h*ft*F)"),
    "ach": ("envelope_defaults", "ach", "1/h"),
    "outdoor_air_cfm_ft2": ("use_type_defaults", "outdoor_air_cfm_ft2", "cfm/ft2"),
    "heat_recovery": ("use_type_defaults", "heat_recovery", "fraction"),
    "occupied_fraction": ("use_type_defaults", None, "fraction of hours"),
    "internal_gains_w_ft2": ("use_type_defaults", "internal_gains_w_ft2", "W/ft2"),
    "solar_gains_w_ft2_window": ("use_type_defaults", None, "W per ft2 of window"),
    "setpoint_f": ("use_type_defaults", "setpoint_f", "F"),
    "setback_f": ("use_type_defaults", "setback_f", "F"),
    "setback_hours": ("use_type_defaults", "setback_hours", "h/day"),
    "setback_realization": ("use_type_defaults", None, "fraction"),
    "efficiency": ("efficiency_defaults", "heating_efficiency", "fraction or COP"),
}

# Optional buildings.csv columns that count as envelope data for ``envelope_source``.
_ENVELOPE_INPUTS = (
    "wall_u_btu_h_ft2_f",
    "roof_u_btu_h_ft2_f",
    "window_u_btu_h_ft2_f",
    "window_fraction",
    "ach",
    "outdoor_air_cfm_ft2",
    "heat_recovery",
    "wall_area_ft2",
    "window_area_ft2",
    "roof_area_ft2",
)
# Given-only inputs (no default; estimated when absent).
_GIVEN_ONLY = {
    "wall_area_ft2": "ft2",
    "window_area_ft2": "ft2",
    "roof_area_ft2": "ft2",
    "ua_total_btu_h_f": "Btu/(h*F)",
    "balance_point_f": "F",
}
_REQUIRED = ("building_id", "use_type", "floor_area_ft2", "heating_fuel")

# Limits of given values, from the declared schema (the ones ingest checks): (min, max, min inclusive?)
_GIVEN_BOUNDS: dict[str, tuple[float, float, bool]] = {
    c: b for c, b in schema.numeric_bounds("buildings").items() if c not in ("heat_content", "price")
}
#: year_built: the schema's lower limit; the upper one is the current year at ingest, which a pure
#: function does not read (any year up to 2100 passes here)
_YEAR_BUILT = (float(schema.column("buildings", "year_built").lo or 0), 2100.0)
#: relative slack of the checks: an SI value at its limit converted to IP may land a rounding step beyond it
_BOUND_SLACK = 1e-9

_GIVEN_SOURCE = "buildings.csv"

# Monte Carlo block size (buildings x draws elements, 256 kB of float64 per array): keeps the
# ~60 temporaries of one block in cache (measured ~20 % faster than 1 MB blocks); every result
# is per building (row), so the block size changes no value.
_BLOCK_ELEMENTS = 32_768


# --------------------------------------------------------------------------- constants


@lru_cache(maxsize=None)
def constants() -> dict[str, float]:
    """Named constants from ``screening/data/envelope_constants.csv`` (value by name)."""
    df = refdata.load("envelope_constants")
    return dict(zip(df["name"].to_list(), df["value"].cast(pl.Float64).to_list()))


def air_heat_capacity_ip() -> tuple[float, float]:
    """Volumetric heat capacity of air and the airflow constant, IP.

    Returns
    -------
    (rho_cp, airflow_constant) : tuple of float
        ``rho_cp`` [Btu/(ft³·°F)] and ``airflow_constant`` [Btu/(h·°F) per cfm].

    Notes
    -----
    ``rho_cp = 0.075 lb/ft³ × 0.24 Btu/(lb·°F) = 0.018``; ``1.08 = 0.018 × 60 min/h``,
    the constant of the sensible-heat equation ``Q = 1.08 · cfm · ΔT``.
    The density and specific heat are rows of ``envelope_constants.csv``.

    References
    ----------
    .. [1] ASHRAE standard air (sea level); sensible heat equation, docs/factors.md §3 [S9].
    """
    c = constants()
    rho_cp = c["air_density_lb_ft3"] * c["air_cp_btu_lb_f"]
    return rho_cp, rho_cp * c["minutes_per_hour"]


def infiltration_ua(ach, volume_ft3):
    """Conductance of infiltration air.

    Parameters
    ----------
    ach : array_like
        Air changes per hour [1/h], ≥ 0.
    volume_ft3 : array_like
        Conditioned volume [ft³], ≥ 0.

    Returns
    -------
    ndarray
        ``UA_inf = 0.018 · ACH · V`` [Btu/(h·°F)] (SI: ``0.335 · n · V`` [W/K]).

    References
    ----------
    .. [1] docs/factors.md §3; ASHRAE Fundamentals, infiltration sensible load (0.018 = ρ·c_p of
       standard air).
    """
    ach = np.asarray(ach, dtype=float)
    volume_ft3 = np.asarray(volume_ft3, dtype=float)
    _nonneg("ach", ach)
    _nonneg("volume_ft3", volume_ft3)
    return air_heat_capacity_ip()[0] * ach * volume_ft3


def ventilation_ua(cfm, recovery, occupied_fraction):
    """Time-averaged conductance of mechanical outdoor air.

    Parameters
    ----------
    cfm : array_like
        Outdoor-air flow while the system runs [ft³/min], ≥ 0.
    recovery : array_like
        Sensible heat-recovery effectiveness [fraction, 0–1].
    occupied_fraction : array_like
        Share of hours the outdoor air runs [fraction, 0–1].

    Returns
    -------
    ndarray
        ``UA_vent = 1.08 · cfm · (1 − recovery) · occupied_fraction`` [Btu/(h·°F)].

    Notes
    -----
    Averaging over the operating fraction treats the outdoor air as a constant
    conductance over the heating season; this is exact for degree-day sums only if
    the schedule is independent of outdoor temperature.

    References
    ----------
    .. [1] Sensible heat equation Q = 1.08·cfm·ΔT, docs/factors.md §3 [S9]; ASHRAE 62.1 rates.
    """
    cfm = np.asarray(cfm, dtype=float)
    recovery = np.asarray(recovery, dtype=float)
    occupied_fraction = np.asarray(occupied_fraction, dtype=float)
    _nonneg("cfm", cfm)
    _fraction("recovery", recovery)
    _fraction("occupied_fraction", occupied_fraction)
    return air_heat_capacity_ip()[1] * cfm * (1.0 - recovery) * occupied_fraction


def effective_setpoint(setpoint_f, setback_f, setback_hours, realization):
    """Time-weighted heating setpoint with setback.

    Parameters
    ----------
    setpoint_f : array_like
        Occupied heating setpoint [°F].
    setback_f : array_like
        Depth of the setback [°F], ≥ 0.
    setback_hours : array_like
        Hours per day in setback, averaged over the week [h/day], 0–24.
    realization : array_like
        Share of the setback depth the space actually reaches on average [fraction].

    Returns
    -------
    ndarray
        ``T_set,eff = T_set − setback · hours/24 · realization`` [°F].

    References
    ----------
    .. [1] Time-weighted setpoint, common practice; realization factor from memory
       (use_type_defaults.csv).
    """
    setpoint_f = np.asarray(setpoint_f, dtype=float)
    setback_f = np.asarray(setback_f, dtype=float)
    setback_hours = np.asarray(setback_hours, dtype=float)
    realization = np.asarray(realization, dtype=float)
    _nonneg("setback_f", setback_f)
    if setback_hours.size and not (setback_hours.min() >= 0 and setback_hours.max() <= 24):
        bad = ~((setback_hours >= 0) & (setback_hours <= 24))
        raise ValueError(f"setback_hours must be within 0-24 h/day, got {_first_bad(setback_hours, bad)}")
    _fraction("realization", realization)
    return setpoint_f - setback_f * setback_hours / constants()["hours_per_day"] * realization


def balance_point(setpoint_f, gains_btu_h, ua_btu_h_f):
    """Balance-point temperature.

    Parameters
    ----------
    setpoint_f : array_like
        Effective heating setpoint [°F].
    gains_btu_h : array_like
        Internal plus solar gains, 24-h average [Btu/h].
    ua_btu_h_f : array_like
        Total heat-loss coefficient [Btu/(h·°F)], > 0.

    Returns
    -------
    ndarray
        ``T_bal = T_set − gains / UA`` [°F] (not clipped; the model clips to the range in
        envelope_constants.csv).

    References
    ----------
    .. [1] Balance point temperature, docs/factors.md §5 [S13]; ASHRAE Fundamentals,
       variable-base degree-day method (docs/degree-days.md §5).
    """
    setpoint_f = np.asarray(setpoint_f, dtype=float)
    gains_btu_h = np.asarray(gains_btu_h, dtype=float)
    ua_btu_h_f = np.asarray(ua_btu_h_f, dtype=float)
    bad = ~(ua_btu_h_f > 0) if not np.all(ua_btu_h_f > 0) else None
    if bad is not None:
        raise ValueError(f"ua_btu_h_f must be > 0, got {_first_bad(ua_btu_h_f, bad)}")
    return setpoint_f - gains_btu_h / ua_btu_h_f


def degree_day_heating_kbtu(ua, dd, efficiency):
    """Heating fuel input by the degree-day method.

    Parameters
    ----------
    ua : array_like
        Heat-loss coefficient [Btu/(h·°F)], ≥ 0.
    dd : array_like
        Heating degree days at the chosen base [°F·day], ≥ 0.
    efficiency : array_like
        Seasonal efficiency [fraction] or seasonal COP, > 0.

    Returns
    -------
    ndarray
        ``Q = 24 · UA · DD / η / 1000`` [kBtu].

    References
    ----------
    .. [1] Degree-day method, docs/degree-days.md §5 ("BLC × DD × 24 h × eff"); docs/factors.md §5.
    """
    ua = np.asarray(ua, dtype=float)
    dd = np.asarray(dd, dtype=float)
    efficiency = np.asarray(efficiency, dtype=float)
    _nonneg("ua", ua)
    _nonneg("dd", dd)
    bad = ~(efficiency > 0) if not np.all(efficiency > 0) else None
    if bad is not None:
        raise ValueError(f"efficiency must be > 0, got {_first_bad(efficiency, bad)}")
    return constants()["hours_per_day"] * ua * dd / efficiency / 1000.0


@lru_cache(maxsize=None)
def _cd_table() -> tuple[np.ndarray, np.ndarray]:
    df = refdata.load("modified_dd_factor").sort("hdd_f_day")
    x = df["hdd_f_day"].cast(pl.Float64).to_numpy()
    y = df["c_d"].cast(pl.Float64).to_numpy()
    if np.any(np.diff(x) <= 0):
        raise ValueError("modified_dd_factor.csv: hdd_f_day must be strictly increasing")
    return x, y


def modified_dd_factor(dd):
    """Correction factor C_D of the modified degree-day method.

    Parameters
    ----------
    dd : array_like
        Annual heating degree days, base 65 °F [°F·day], ≥ 0.

    Returns
    -------
    ndarray
        C_D [-], interpolated linearly in ``modified_dd_factor.csv``, flat outside it.
        Energy by the method: ``E = 24 · UA · DD65 · C_D / η``.

    Notes
    -----
    The curve's points are recalled from the ASHRAE figure "C_D vs degree days", not
    checked against it: low confidence (see the file's source column).

    References
    ----------
    .. [1] ASHRAE Handbook (1980s), modified degree-day method (from memory; docs/degree-days.md §5).
    """
    dd = np.asarray(dd, dtype=float)
    _nonneg("dd", dd)
    x, y = _cd_table()
    return np.interp(dd, x, y)


def geometry(
    floor_area_ft2,
    stories,
    aspect_ratio,
    floor_to_floor_ft,
    window_fraction,
    wall_area_ft2=None,
    window_area_ft2=None,
    roof_area_ft2=None,
) -> dict[str, np.ndarray]:
    """Areas and volume of a rectangular block building.

    Parameters
    ----------
    floor_area_ft2 : array_like
        Gross floor area [ft²].
    stories : array_like
        Number of floors above grade [-], ≥ 1 (may be fractional in the band).
    aspect_ratio : array_like
        Long side / short side of the footprint [-], ≥ 1.
    floor_to_floor_ft : array_like
        Floor-to-floor height [ft].
    window_fraction : array_like
        Window-to-wall ratio of the gross wall [fraction].
    wall_area_ft2, window_area_ft2, roof_area_ft2 : array_like, optional
        Given areas [ft²]; NaN where not given. ``wall_area_ft2`` is the gross exterior
        wall area including windows.

    Returns
    -------
    dict of ndarray
        ``footprint_ft2 = A/N``; ``perimeter_ft = 2·√(footprint)·(√r + 1/√r)``;
        ``wall_area_ft2 = perimeter · h · N`` (gross); ``window_area_ft2 = WWR · wall``;
        ``opaque_wall_ft2 = max(wall − window, 0)``; ``roof_area_ft2 = footprint``;
        ``volume_ft3 = A · h``.

    References
    ----------
    .. [1] Rectangle geometry (by hand); block-model simplification, common practice.
    """
    a = np.asarray(floor_area_ft2, dtype=float)
    n = np.asarray(stories, dtype=float)
    r = np.asarray(aspect_ratio, dtype=float)
    h = np.asarray(floor_to_floor_ft, dtype=float)
    wwr = np.asarray(window_fraction, dtype=float)
    footprint = a / n
    sr = np.sqrt(r)
    perimeter = 2.0 * np.sqrt(footprint) * (sr + 1.0 / sr)
    wall = perimeter * h * n
    if wall_area_ft2 is not None:
        wall = _given_or(wall, wall_area_ft2)
    window = wwr * wall
    if window_area_ft2 is not None:
        window = _given_or(window, window_area_ft2)
    roof = footprint
    if roof_area_ft2 is not None:
        roof = _given_or(roof, roof_area_ft2)
    return {
        "footprint_ft2": footprint,
        "perimeter_ft": perimeter,
        "wall_area_ft2": wall,
        "window_area_ft2": window,
        "opaque_wall_ft2": np.maximum(wall - window, 0.0),
        "roof_area_ft2": roof,
        "volume_ft3": a * h,
    }


def _given_or(estimate, given) -> np.ndarray:
    """``np.where(np.isnan(given), estimate, given)``: the given value where there is one, else the
    estimate; without the pass over the arrays when ``given`` is all NaN or has no NaN (then the
    estimate or the given values, broadcast to the same shape: the same values)."""
    given = np.asarray(given, dtype=float)
    nan = np.isnan(given)
    if nan.any():
        if not nan.all():
            return np.where(nan, estimate, given)
        pick = estimate = np.asarray(estimate, dtype=float)
    else:
        pick, estimate = given, np.asarray(estimate, dtype=float)
    shape = estimate.shape if estimate.shape == given.shape else np.broadcast(estimate, given).shape
    return pick if pick.shape == shape else np.broadcast_to(pick, shape)


def _era_index(year_built) -> np.ndarray:
    y = np.asarray(year_built, dtype=float)
    idx = np.searchsorted(np.asarray(_ERA_EDGES, dtype=float), y, side="right")
    return np.where(np.isnan(y), len(ERAS) - 1, idx)


# --------------------------------------------------------------------------- defaults


def _check_range_rows(name: str, df: pl.DataFrame) -> None:
    bad = df.filter(~((pl.col("low") <= pl.col("central")) & (pl.col("central") <= pl.col("high"))))
    if bad.height:
        raise ValueError(f"{name}.csv: low <= central <= high violated in {bad.height} row(s): {bad.row(0)}")


@lru_cache(maxsize=None)
def _resolved_defaults() -> dict[str, tuple[np.ndarray, np.ndarray, tuple[str, ...]]]:
    """Per parameter: values [key1, key2, 3 (central, low, high)], source codes [key1, key2]
    and the source texts the codes index.

    Keys are (era, use_type) for envelope and use-type tables, (fuel, era) for efficiency.
    The most specific row wins: exact > (key1, *) > (*, key2) > (*, *).
    """
    out: dict[str, tuple[np.ndarray, np.ndarray, tuple[str, ...]]] = {}
    tables = {}
    for tname in ("envelope_defaults", "use_type_defaults", "efficiency_defaults"):
        df = refdata.load(tname).with_columns(pl.col("central", "low", "high").cast(pl.Float64))
        _check_range_rows(tname, df)
        if tname == "use_type_defaults":
            df = df.with_columns(pl.lit("*").alias("era"))
        if tname == "efficiency_defaults":
            df = df.with_columns(pl.lit("efficiency").alias("parameter"))
        tables[tname] = df
    for pname, (tname, _, _) in PARAMETERS.items():
        df = tables[tname].filter(pl.col("parameter") == pname)
        if tname == "efficiency_defaults":
            k1, k2, keys1, keys2 = "heating_fuel", "era", FUELS, ERAS
        else:
            k1, k2, keys1, keys2 = "era", "use_type", ERAS, USE_TYPES
        lut = {(r[k1], r[k2]): r for r in df.iter_rows(named=True)}
        vals = np.empty((len(keys1), len(keys2), 3))
        codes = np.empty((len(keys1), len(keys2)), dtype=np.int32)
        texts: list[str] = [_GIVEN_SOURCE]  # code 0 = given in buildings.csv
        for i, a in enumerate(keys1):
            for j, b in enumerate(keys2):
                row = lut.get((a, b)) or lut.get((a, "*")) or lut.get(("*", b)) or lut.get(("*", "*"))
                if row is None:
                    raise ValueError(f"{tname}.csv: no default for parameter {pname!r} at ({a}, {b})")
                vals[i, j] = (row["central"], row["low"], row["high"])
                text = f"{tname}.csv: {row['source']}"
                if text not in texts:
                    texts.append(text)
                codes[i, j] = texts.index(text)
        out[pname] = (vals, codes, tuple(texts))
    return out


# --------------------------------------------------------------------------- validation helpers


def _first_bad(values: np.ndarray, mask: np.ndarray, ids=None) -> str:
    i = int(np.flatnonzero(np.ravel(mask))[0])
    v = np.ravel(values)[i]
    v = v.item() if isinstance(v, np.generic) else v
    n = int(np.count_nonzero(mask))
    where = f" for building {ids[i]!r}" if ids is not None else ""
    more = f" ({n - 1} more)" if n > 1 else ""
    return f"{v!r}{where}{more}"


def _nonneg(name: str, x: np.ndarray) -> None:
    if x.size and x.min() >= 0:  # fast path: one pass (a NaN is the minimum, and fails it)
        return
    bad = ~(x >= 0)
    if np.any(bad):
        raise ValueError(f"{name} must be >= 0, got {_first_bad(x, bad)}")


def _fraction(name: str, x: np.ndarray) -> None:
    if x.size == 0 or (x.min() >= 0 and x.max() <= 1):  # fast path (NaN fails it)
        return
    bad = ~((x >= 0) & (x <= 1))
    if np.any(bad):
        raise ValueError(f"{name} must be within 0-1, got {_first_bad(x, bad)}")


def _float_col(df: pl.DataFrame, name: str) -> np.ndarray:
    if name not in df.columns:
        return np.full(df.height, np.nan)
    s = df[name]
    try:
        s = s.cast(pl.Float64)
    except pl.exceptions.InvalidOperationError as exc:  # pragma: no cover - message path
        raise ValueError(f"buildings column {name!r} must be numeric, got dtype {df[name].dtype}") from exc
    return s.fill_null(np.nan).to_numpy().astype(float, copy=True)


def _validate_categorical(ids: np.ndarray, name: str, values: np.ndarray, allowed: tuple[str, ...]) -> np.ndarray:
    allowed_arr = np.asarray(allowed, dtype=object)
    idx = np.full(values.shape[0], -1)
    for k, a in enumerate(allowed_arr):
        idx[values == a] = k
    bad = idx < 0
    if np.any(bad):
        raise ValueError(f"{name} must be one of {', '.join(allowed)}; got {_first_bad(values, bad, ids)}")
    return idx


# --------------------------------------------------------------------------- estimate_envelope


def estimate_envelope(buildings: pl.DataFrame) -> pl.DataFrame:
    """Envelope estimate, UA breakdown and balance point for every building.

    Parameters
    ----------
    buildings : pl.DataFrame
        Canonical buildings frame (IP units, DEVELOPERS.md). Required columns
        ``building_id, use_type, floor_area_ft2, heating_fuel``; every optional column
        may be absent or null and is then filled from the defaults.

    Returns
    -------
    pl.DataFrame
        One row per input row, same order. Geometry [ft², ft, ft³]; ``ua_*`` parts and
        ``ua_total`` [Btu/(h·°F)]; ``balance_point_f``, ``setpoint_effective_f`` [°F];
        ``gains_btu_h`` [Btu/h]; ``efficiency`` [fraction or COP]; ``envelope_source``;
        ``assumptions`` (list of structs); per drawn parameter its value and
        ``_low``/``_high`` range, and the ``given_*`` columns read by
        :func:`expected_heating`. See docs/methods.md "Expected heating: the envelope model" for every column.

    Notes
    -----
    ``UA = U_wall·A_opaque + U_win·A_win + U_roof·A_roof + F·P + 0.018·ACH·V
    + 1.08·cfm·(1−recovery)·occupied_fraction``. When ``ua_total_btu_h_f`` is given it
    replaces the total and the parts are scaled in proportion so they still add up to
    it (``ua_parts_scaled`` is true). ``T_bal = T_set,eff − gains/UA`` clipped to
    [balance_point_min_f, balance_point_max_f]; a given ``balance_point_f`` replaces it
    unclipped.

    References
    ----------
    .. [1] docs/factors.md §3–§6; docs/degree-days.md §5; ASHRAE Fundamentals degree-day methods.
    """
    missing = [c for c in _REQUIRED if c not in buildings.columns]
    if missing:
        raise ValueError(f"buildings frame is missing required column(s): {', '.join(missing)}")
    n = buildings.height
    ids = buildings["building_id"].cast(pl.String).to_numpy()
    if buildings["building_id"].null_count():
        raise ValueError("building_id must not be null")
    use = buildings["use_type"].cast(pl.String).to_numpy().astype(object)
    fuel = buildings["heating_fuel"].cast(pl.String).to_numpy().astype(object)
    use_idx = _validate_categorical(ids, "use_type", use, USE_TYPES)
    fuel_idx = _validate_categorical(ids, "heating_fuel", fuel, FUELS)

    given: dict[str, np.ndarray] = {}
    for col in set(_GIVEN_BOUNDS) | {"year_built"}:
        given[col] = _float_col(buildings, col)
    for col, (lo, hi, incl) in _GIVEN_BOUNDS.items():
        x = given[col]
        lo_s, hi_s = lo - _BOUND_SLACK * max(1.0, abs(lo)), hi + _BOUND_SLACK * max(1.0, abs(hi))
        ok = np.isnan(x) | (((x >= lo_s) if incl else (x > lo)) & (x <= hi_s))
        if col == "floor_area_ft2":
            ok &= np.isfinite(x)
        if not np.all(ok):
            rng = f"{'[' if incl else '('}{lo:g}, {hi:g}]"
            raise ValueError(f"{col} must be within {rng}; got {_first_bad(x, ~ok, ids)}")
    yb = given["year_built"]
    bad = ~np.isnan(yb) & ((yb < _YEAR_BUILT[0]) | (yb > _YEAR_BUILT[1]))
    if np.any(bad):
        raise ValueError(
            f"year_built must be within {_YEAR_BUILT[0]:g}-{_YEAR_BUILT[1]:g}; got {_first_bad(yb, bad, ids)}"
        )
    eff_g = given["heating_efficiency"]
    bad = (fuel != "electricity") & (eff_g > 1.0)
    if np.any(bad):
        raise ValueError(
            "heating_efficiency above 1 (a heat-pump COP) is accepted only for heating_fuel "
            f"electricity; got {_first_bad(eff_g, bad, ids)}"
        )
    ww, wn = given["wall_area_ft2"], given["window_area_ft2"]
    bad = ~np.isnan(ww) & ~np.isnan(wn) & (wn > ww)
    if np.any(bad):
        raise ValueError(
            "window_area_ft2 must not exceed wall_area_ft2 (the gross wall incl. windows); "
            f"got {_first_bad(wn, bad, ids)}"
        )

    era_idx = _era_index(yb)
    defaults = _resolved_defaults()

    # per parameter: value used (central), low, high, origin, source
    p_val: dict[str, np.ndarray] = {}
    p_lo: dict[str, np.ndarray] = {}
    p_hi: dict[str, np.ndarray] = {}
    p_given: dict[str, np.ndarray] = {}
    p_src: dict[str, np.ndarray] = {}
    # each building's cell of the (fuel, era) and (era, use type) tables: one flat index per table
    cell = {"efficiency_defaults": fuel_idx * len(ERAS) + era_idx}
    cell_era_use = era_idx * len(USE_TYPES) + use_idx
    for pname, (tname, gcol, _unit) in PARAMETERS.items():
        vals, codes, texts = defaults[pname]
        k = cell.get(tname, cell_era_use)
        v, s = vals.reshape(-1, 3)[k], codes.ravel()[k]
        g = given[gcol] if gcol is not None else np.full(n, np.nan)
        is_given = ~np.isnan(g)
        p_given[pname] = is_given
        p_val[pname] = np.where(is_given, g, v[:, 0])
        p_lo[pname] = np.where(is_given, g, v[:, 1])
        p_hi[pname] = np.where(is_given, g, v[:, 2])
        p_src[pname] = np.where(is_given, 0, s)  # an index into the parameter's source texts

    area = given["floor_area_ft2"]
    parts = _model(area, p_val, given)
    ua_given = given["ua_total_btu_h_f"]
    has_ua = ~np.isnan(ua_given)
    scale = np.where(has_ua, ua_given / parts["ua_total"], 1.0)
    ua_cols = ("ua_walls", "ua_windows", "ua_roof", "ua_ground", "ua_infiltration", "ua_ventilation")
    shown = {k: parts[k] * scale for k in ua_cols}

    any_env = np.zeros(n, dtype=bool)
    for c in _ENVELOPE_INPUTS:
        any_env |= ~np.isnan(given[c])
    source = pl.Series(["estimated", "partly given", "given"], dtype=pl.String).gather(
        np.where(has_ua, 2, np.where(any_env, 1, 0)).astype(np.int32)
    )

    data: dict[str, object] = {
        "building_id": buildings["building_id"],
        "era": pl.Series(ERAS, dtype=pl.String).gather(era_idx.astype(np.int32)),
        "use_type": buildings["use_type"].cast(pl.String),
        "heating_fuel": buildings["heating_fuel"].cast(pl.String),
        "floor_area_ft2": area,
        "footprint_ft2": parts["footprint_ft2"],
        "perimeter_ft": parts["perimeter_ft"],
        "wall_area_ft2": parts["wall_area_ft2"],
        "window_area_ft2": parts["window_area_ft2"],
        "roof_area_ft2": parts["roof_area_ft2"],
        "volume_ft3": parts["volume_ft3"],
        **shown,
        "ua_total": parts["ua_total_used"],
        "ua_estimated": parts["ua_total"],
        "ua_parts_scaled": has_ua,
        "balance_point_f": parts["balance_point_f"],
        "balance_point_given": ~np.isnan(given["balance_point_f"]),
        "setpoint_effective_f": parts["setpoint_effective_f"],
        "gains_btu_h": parts["gains_btu_h"],
        "efficiency": p_val["efficiency"],
        "envelope_source": source,
    }
    for pname in PARAMETERS:
        data[pname] = p_val[pname]
        data[f"{pname}_low"] = p_lo[pname]
        data[f"{pname}_high"] = p_hi[pname]
    for col in _GIVEN_ONLY:
        data[f"given_{col}"] = pl.Series(given[col], nan_to_null=True)
    out = pl.DataFrame(data)

    # assumptions: list of {name, value, low, high, unit, origin, source} per building, the parameters in
    # their order, then the given-only values it has: built long in that order, then grouped
    kp, kg = len(PARAMETERS), len(_GIVEN_ONLY)
    value = np.empty((n, kp + kg))
    low = np.empty((n, kp + kg))
    high = np.empty((n, kp + kg))
    origin = np.ones((n, kp + kg), dtype=np.int32)  # 0 default, 1 given
    src = np.zeros((n, kp + kg), dtype=np.int32)  # into all_texts; 0 is buildings.csv (every table's code 0)
    all_texts: list[str] = [_GIVEN_SOURCE]
    for k, pname in enumerate(PARAMETERS):
        value[:, k], low[:, k], high[:, k] = p_val[pname], p_lo[pname], p_hi[pname]
        origin[:, k] = p_given[pname]
        texts = defaults[pname][2]
        all_texts += [t for t in dict.fromkeys(texts) if t not in all_texts]
        src[:, k] = np.array([all_texts.index(t) for t in texts], dtype=np.int32)[p_src[pname]]
    for j, col in enumerate(_GIVEN_ONLY):
        value[:, kp + j] = low[:, kp + j] = high[:, kp + j] = given[col]
    keep = np.ones((n, kp + kg), dtype=bool)
    keep[:, kp:] = ~np.isnan(value[:, kp:])
    flat = keep.ravel()
    k_of = np.broadcast_to(np.arange(kp + kg, dtype=np.int32), (n, kp + kg)).ravel()[flat]
    names = pl.Series([*PARAMETERS, *_GIVEN_ONLY], dtype=pl.String)
    units = pl.Series([u for _, _, u in PARAMETERS.values()] + list(_GIVEN_ONLY.values()), dtype=pl.String)
    assumptions = (
        pl.DataFrame(
            {
                "row": np.repeat(np.arange(n, dtype=np.int64), kp + kg)[flat],
                "name": names.gather(k_of),
                "value": value.ravel()[flat],
                "low": low.ravel()[flat],
                "high": high.ravel()[flat],
                "unit": units.gather(k_of),
                "origin": pl.Series(["default", "given"], dtype=pl.String).gather(origin.ravel()[flat]),
                "source": pl.Series(all_texts, dtype=pl.String).gather(src.ravel()[flat]),
            }
        )
        .group_by("row", maintain_order=True)
        .agg(pl.struct("name", "value", "low", "high", "unit", "origin", "source").alias("assumptions"))
    )
    return out.with_columns(assumptions["assumptions"])


def _model(area, p: dict, given: dict) -> dict[str, np.ndarray]:
    """UA parts, gains and balance point; arrays broadcast (building vectors or draw grids)."""
    c = constants()
    geo = geometry(
        area,
        p["stories"],
        p["aspect_ratio"],
        p["floor_to_floor_ft"],
        p["window_fraction"],
        given["wall_area_ft2"],
        given["window_area_ft2"],
        given["roof_area_ft2"],
    )
    parts = {
        "ua_walls": p["wall_u_btu_h_ft2_f"] * geo["opaque_wall_ft2"],
        "ua_windows": p["window_u_btu_h_ft2_f"] * geo["window_area_ft2"],
        "ua_roof": p["roof_u_btu_h_ft2_f"] * geo["roof_area_ft2"],
        "ua_ground": p["ground_f_btu_h_ft_f"] * geo["perimeter_ft"],
        "ua_infiltration": infiltration_ua(p["ach"], geo["volume_ft3"]),
        "ua_ventilation": ventilation_ua(p["outdoor_air_cfm_ft2"] * area, p["heat_recovery"], p["occupied_fraction"]),
    }
    ua = (
        parts["ua_walls"]
        + parts["ua_windows"]
        + parts["ua_roof"]
        + parts["ua_ground"]
        + parts["ua_infiltration"]
        + parts["ua_ventilation"]
    )
    ua_used = _given_or(ua, given["ua_total_btu_h_f"])
    gains = c["btu_h_per_w"] * (
        p["internal_gains_w_ft2"] * area + p["solar_gains_w_ft2_window"] * geo["window_area_ft2"]
    )
    t_eff = effective_setpoint(p["setpoint_f"], p["setback_f"], p["setback_hours"], p["setback_realization"])
    t_bal = np.clip(balance_point(t_eff, gains, ua_used), c["balance_point_min_f"], c["balance_point_max_f"])
    t_bal = _given_or(t_bal, given["balance_point_f"])
    return {
        **geo,
        **parts,
        "ua_total": ua,
        "ua_total_used": ua_used,
        "gains_btu_h": gains,
        "setpoint_effective_f": t_eff,
        "balance_point_f": t_bal,
    }


# --------------------------------------------------------------------------- expected_heating


def _curve_pairs(curve: np.ndarray) -> np.ndarray:
    """Each base's HDD and its rise to the next base, side by side as one complex number (B, G): one
    gather of :func:`_interp_rows` reads both. ``rise[j] = curve[j + 1] − curve[j]`` [°F·day], 0 at the
    last base."""
    pair = np.zeros(curve.shape + (2,))
    pair[..., 0] = curve
    np.subtract(curve[:, 1:], curve[:, :-1], out=pair[:, :-1, 1])  # curve[:, j + 1] - curve[:, j]
    return pair.view(np.complex128)[..., 0]


def _interp_rows(
    curve: np.ndarray, grid: np.ndarray, t: np.ndarray, uniform: bool, *, pairs=None, rows=None
) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise linear interpolation: curve (B, G), t (B, D) -> (B, D), and a clip mask.

    ``pairs`` (:func:`_curve_pairs` of a larger curve, made once) and ``rows`` (the rows of it that
    ``t``'s rows interpolate in) replace ``curve``: the same values, without a block's own copy.
    ``HDD(T) = y_j + (T − g_j)/(g_{j+1} − g_j) · (y_{j+1} − y_j)``, T clipped to the grid.
    """
    g0, g1 = grid[0], grid[-1]
    clipped = (t < g0) | (t > g1)
    tc = np.clip(t, g0, g1)
    ng = grid.shape[0]
    if uniform:
        step = (g1 - g0) / (ng - 1)
        u = np.subtract(tc, g0)
        u /= step
        j = u.astype(np.intp)
        np.minimum(j, ng - 2, out=j)
    else:
        j = np.minimum(np.searchsorted(grid, tc, side="right") - 1, ng - 2)
    gaps = np.diff(grid)  # gaps[j] is grid[j + 1] - grid[j], the same bits
    frac = np.subtract(tc, np.take(grid, j), out=tc)
    frac /= gaps[0] if (gaps == gaps[0]).all() else np.take(gaps, j)  # (one gap for all: the same divisor)
    # each base's HDD and its rise to the next base, side by side (one complex number: one gather for both)
    if pairs is None:
        pairs, rows = _curve_pairs(curve), np.arange(curve.shape[0])
    j += (np.asarray(rows) * ng).reshape((-1,) + (1,) * (t.ndim - 1))  # the flat index
    at = np.take(pairs.ravel(), j)
    dd = np.multiply(frac, at.imag, out=frac)
    dd += at.real  # (y0 + frac·rise: the sum is the same either way round)
    return dd, clipped


def _unique_rows(*cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unique (col0, col1, ...) tuples and the inverse index; exact, via 1-D integer codes."""
    code = np.zeros(cols[0].shape[0], dtype=np.int64)
    for c in cols:
        vals, ci = np.unique(c, return_inverse=True)
        code = code * vals.shape[0] + ci.ravel()
    ucode, first, inv = np.unique(code, return_index=True, return_inverse=True)
    return np.stack([c[first] for c in cols], axis=1), inv.ravel()


def _tri_ppf(u, lo, c, hi):
    """Inverse CDF of the triangular distribution (low, mode, high); exact for lo == hi."""
    w = hi - lo
    with np.errstate(invalid="ignore", divide="ignore"):
        fc = np.where(w > 0, (c - lo) / np.where(w > 0, w, 1.0), 0.5)
    left = lo + np.sqrt(u * w * (c - lo))
    right = hi - np.sqrt((1.0 - u) * w * (hi - c))
    return np.where(u < fc, left, right)


def _row_percentiles(x: np.ndarray, percents: tuple[float, ...], *, presorted: bool = False) -> np.ndarray:
    """``np.percentile(x, percents, axis=1)`` (method "linear") to the bit, with one sort per row.

    Returns shape ``(len(percents), rows)``. The order statistics of a row do not depend on how
    they are found, so sorting each row once gives the same values as numpy's partition of the
    transposed copy (several times slower on a (buildings, draws) block); the index and
    interpolation steps are numpy 2's ``_get_indexes``/``_lerp`` step for step: virtual index
    ``(n − 1)·p/100``, ``a + (b − a)·γ`` below γ = 0.5 and ``b − (b − a)·(1 − γ)`` from it; a row
    with a NaN gives NaN. ``presorted``: each row of ``x`` is already in ascending order.
    """
    s = x if presorted else np.sort(x, axis=1)
    n = s.shape[1]
    vi = (n - 1) * np.true_divide(np.asarray(percents, dtype=np.float64), 100)
    prev = np.floor(vi)
    nxt = prev + 1
    above = vi >= n - 1
    prev[above] = -1
    nxt[above] = -1
    prev_i, next_i = prev.astype(np.intp), nxt.astype(np.intp)
    gamma = (vi - prev_i)[:, None]
    a, b = s[:, prev_i].T, s[:, next_i].T
    diff = b - a
    out = np.add(a, diff * gamma)
    np.subtract(b, diff * (1 - gamma), out=out, where=gamma >= 0.5)
    last = s[:, -1]
    has_nan = np.isnan(last)
    if has_nan.any():
        np.copyto(out, last, where=has_nan)
    return out


def _band_blocks(tables: dict, given: dict, block: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The buildings in an order where neighbours share which parameters are known and which values are given,
    then their rows of draws; the starts of the blocks of that order (and its end), a block at most ``block``
    buildings, all with the same known parameters and given values; and per block and parameter whether all
    its buildings have the same row of draws (or all a known value)."""
    rows = np.stack([r for _, r, _ in tables.values()], axis=1)  # (B, P), -1 where known
    pattern = np.concatenate([rows < 0, np.stack([np.isnan(v) for v in given.values()], axis=1)], axis=1)
    order = np.lexsort(np.concatenate([pattern, rows], axis=1).T[::-1])  # ties in building order
    k = pattern[order]
    n = k.shape[0]
    new = np.ones(n, dtype=bool)
    new[1:] = (k[1:] != k[:-1]).any(axis=1)
    first = np.flatnonzero(new)
    size = np.diff(np.append(first, n))
    pieces = -(-size // block)
    starts = np.repeat(first, pieces) + block * (
        np.arange(pieces.sum()) - np.repeat(np.cumsum(pieces) - pieces, pieces)
    )
    r = rows[order]
    one_row = np.minimum.reduceat(r, starts, axis=0) == np.maximum.reduceat(r, starts, axis=0)
    return order, np.append(starts, n), one_row


def _band(
    tables: dict,
    given: dict,
    area: np.ndarray,
    curve: np.ndarray,
    grid: np.ndarray,
    uniform: bool,
    d: int,
    block: int,
    *,
    compact: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """P10, P50, P90 of the Monte Carlo heating [kBtu] and the share of draws whose balance point was
    clipped to the grid, per building; ``tables``: per parameter its draws (K, D), each building's row
    of them (-1 where known) and the known values.

    ``compact``: buildings in the order of :func:`_band_blocks`, and a parameter one row for its whole
    block held as (1, D) (known: (B, 1)), broadcast by numpy instead of copied to (B, D); every element
    is the same operation on the same numbers, so the same bits. Otherwise blocks of ``block``
    buildings in order, every parameter (B, D): a value out of range is named as it first appears.
    """
    b = area.shape[0]
    if b == 0:
        return np.empty(0), np.empty(0), np.empty(0), np.empty(0)
    if compact:
        order, cuts, one_row = _band_blocks(tables, given, block)
    else:
        order, cuts = np.arange(b), np.append(np.arange(0, b, block), b)
        one_row = np.zeros((cuts.shape[0] - 1, len(tables)), dtype=bool)
    out = np.empty((4, b))
    pairs = _curve_pairs(curve)  # (once for every block)
    for i, (b0, b1) in enumerate(zip(cuts[:-1].tolist(), cuts[1:].tolist())):
        ix = order[b0:b1]
        nb = b1 - b0
        p = {}
        for one, (pname, (draws, row, lo)) in zip(one_row[i].tolist(), tables.items()):
            if one:
                r0 = row[ix[0]]
                x = lo[ix][:, None] if r0 < 0 else draws[r0][None, :]
                p[pname] = x
                continue
            r = row[ix]
            if (r >= 0).any():
                x = np.take(draws, np.maximum(r, 0), axis=0)
                kn = r < 0
                if kn.any():
                    x[kn] = lo[ix][kn, None]
            else:
                x = np.broadcast_to(lo[ix][:, None], (nb, d))
            p[pname] = x if compact else np.broadcast_to(x, (nb, d))
        g = {k: v[ix][:, None] if compact else np.broadcast_to(v[ix][:, None], (nb, d)) for k, v in given.items()}
        m = _model(area[ix][:, None], p, g)
        ddm, clip = _interp_rows(curve, grid, m["balance_point_f"], uniform, pairs=pairs, rows=ix)
        q = degree_day_heating_kbtu(m["ua_total_used"], ddm, p["efficiency"])
        if q.shape == (nb, d) and q.flags.writeable:
            q.sort(axis=1)  # (the block's own array: sorted where it is)
        else:
            q = np.sort(np.broadcast_to(q, (nb, d)), axis=1)
        out[:3, ix] = _row_percentiles(q, (10.0, 50.0, 90.0), presorted=True)
        out[3, ix] = np.count_nonzero(np.broadcast_to(clip, (nb, d)), axis=1) / d  # the mean, exactly
    return out[0], out[1], out[2], out[3]


def expected_heating(
    envelope: pl.DataFrame,
    base_grid_f: np.ndarray,
    hdd_curve: np.ndarray,
    *,
    hdd_fixed_base: np.ndarray | None = None,
    n_draws: int = 500,
    seed: int = 20240601,
) -> pl.DataFrame:
    """Expected heating fuel by three degree-day methods, with a Monte Carlo band.

    Parameters
    ----------
    envelope : pl.DataFrame
        Output of :func:`estimate_envelope`.
    base_grid_f : ndarray, shape (G,)
        Strictly increasing degree-day base temperatures [°F].
    hdd_curve : ndarray, shape (B, G)
        ``hdd_curve[i, j]``: heating degree days of building i over its comparison span
        at base ``base_grid_f[j]`` [°F·day]. Interpolated linearly in the base; a base
        outside the grid is clipped to the grid's end (reported in ``base_clipped`` and
        ``draws_clipped_share``). A row containing NaN (no weather) gives null results
        for that building only; negative or infinite values raise.
    hdd_fixed_base : ndarray, shape (B,), optional
        HDD at 65 °F [°F·day]; interpolated from ``hdd_curve`` when omitted.
    n_draws : int
        Monte Carlo draws per building (≥ 1).
    seed : int
        Seed of the random stream (numpy PCG64).

    Returns
    -------
    pl.DataFrame
        Same order as ``envelope``: ``building_id, expected_heating_kbtu`` (P50),
        ``expected_low_kbtu`` (P10), ``expected_high_kbtu`` (P90),
        ``expected_point_kbtu`` (central values), ``expected_fixed_base_kbtu`` (65 °F),
        ``expected_modified_kbtu`` (modified degree-day), ``hdd_at_balance``,
        ``hdd_fixed_base`` [°F·day], ``modified_dd_factor``, ``base_clipped``,
        ``draws_clipped_share``. Energies are fuel input [kBtu].

    Notes
    -----
    ``Q = 24 · UA · DD(T_bal) / η / 1000`` [kBtu]. Fixed base: ``24·UA·HDD65/η``;
    modified: the fixed-base value × ``C_D(HDD65)``. The band draws every defaulted
    parameter from a triangular distribution (low, central, high), Latin-hypercube
    stratified, one column of uniforms per parameter shared by all buildings (so a
    building's band does not depend on the rest of the portfolio); given inputs have
    low = high and do not spread. Draws are processed in blocks of buildings, all draws
    at once; a block holds buildings with the same known and given parameters, so a parameter
    with one row of draws (or a known value) for the whole block is held once and broadcast.

    References
    ----------
    .. [1] docs/degree-days.md §5 (variable base, modified degree-day method); docs/factors.md §5.
    """
    grid = np.asarray(base_grid_f, dtype=float)
    curve = np.asarray(hdd_curve, dtype=float)
    b = envelope.height
    if grid.ndim != 1 or grid.shape[0] < 2:
        raise ValueError(f"base_grid_f must be 1-D with at least 2 bases, got shape {grid.shape}")
    if not np.all(np.diff(grid) > 0):
        raise ValueError("base_grid_f must be strictly increasing")
    if curve.shape != (b, grid.shape[0]):
        raise ValueError(f"hdd_curve must have shape (buildings, bases) = {(b, grid.shape[0])}, got {curve.shape}")
    bad = (curve < 0) | np.isinf(curve)
    if np.any(bad):
        raise ValueError(f"hdd_curve must be finite and >= 0, got {_first_bad(curve, bad)}")
    no_weather = np.isnan(curve).any(axis=1)  # such a building gets null results, the others go on
    if no_weather.any():
        curve = np.where(no_weather[:, None], 0.0, curve)
    if not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
        raise ValueError(f"n_draws must be an integer >= 1, got {n_draws!r}")
    steps = np.diff(grid)
    uniform = bool(np.allclose(steps, steps[0], rtol=1e-9, atol=0.0))
    c = constants()

    # deterministic pieces
    ua = envelope["ua_total"].to_numpy().astype(float)
    bp = envelope["balance_point_f"].to_numpy().astype(float)
    eff = envelope["efficiency"].to_numpy().astype(float)
    dd_bal, clip_pt = _interp_rows(curve, grid, bp[:, None], uniform)
    dd_bal, clip_pt = dd_bal[:, 0], clip_pt[:, 0]
    no_fixed = no_weather
    if hdd_fixed_base is None:
        hdd65 = _interp_rows(curve, grid, np.full((b, 1), c["fixed_base_f"]), uniform)[0][:, 0]
    else:
        hdd65 = np.array(hdd_fixed_base, dtype=float)  # a copy: null rows are written below
        if hdd65.shape != (b,):
            raise ValueError(f"hdd_fixed_base must have shape ({b},), got {hdd65.shape}")
        bad = (hdd65 < 0) | np.isinf(hdd65)
        if np.any(bad):
            raise ValueError(f"hdd_fixed_base must be finite and >= 0, got {_first_bad(hdd65, bad)}")
        no_fixed = np.isnan(hdd65)
        hdd65[no_fixed] = 0.0
    point = degree_day_heating_kbtu(ua, dd_bal, eff)
    fixed = degree_day_heating_kbtu(ua, hdd65, eff)
    cd = modified_dd_factor(hdd65)

    # Monte Carlo
    rng = np.random.default_rng(seed)
    names = list(PARAMETERS)
    d = int(n_draws)
    u = (rng.permuted(np.tile(np.arange(d), (len(names), 1)), axis=1) + rng.random((len(names), d))) / d
    tables = {}
    for k, pname in enumerate(names):
        lo = envelope[f"{pname}_low"].to_numpy().astype(float)
        ce = envelope[pname].to_numpy().astype(float)
        hi = envelope[f"{pname}_high"].to_numpy().astype(float)
        known = lo == hi
        uniq, inv = _unique_rows(lo[~known], ce[~known], hi[~known])
        draws = _tri_ppf(u[k][None, :], uniq[:, 0:1], uniq[:, 1:2], uniq[:, 2:3])  # (K, D)
        row = np.full(b, -1, dtype=np.intp)  # each building's row of draws, -1 where the value is known
        row[~known] = inv.ravel()
        tables[pname] = (draws, row, lo)
    given = {col: envelope[f"given_{col}"].fill_null(np.nan).to_numpy().astype(float) for col in _GIVEN_ONLY}
    area_all = envelope["floor_area_ft2"].to_numpy().astype(float)
    block = max(1, _BLOCK_ELEMENTS // d)
    try:
        p10, p50, p90, share = _band(tables, given, area_all, curve, grid, uniform, d, block, compact=True)
    except ValueError:  # a value out of range: raised as the plain blocks raise it (the same first value)
        p10, p50, p90, share = _band(tables, given, area_all, curve, grid, uniform, d, block, compact=False)

    for arr in (p10, p50, p90, point, dd_bal, share):
        arr[no_weather] = np.nan
    no_fixed = no_fixed | no_weather
    for arr in (fixed, hdd65, cd):
        arr[no_fixed] = np.nan
    out = pl.DataFrame(
        {
            "building_id": envelope["building_id"],
            "expected_heating_kbtu": p50,
            "expected_low_kbtu": p10,
            "expected_high_kbtu": p90,
            "expected_point_kbtu": point,
            "expected_fixed_base_kbtu": fixed,
            "expected_modified_kbtu": fixed * cd,  # NaN where either is
            "hdd_at_balance": dd_bal,
            "hdd_fixed_base": hdd65,
            "modified_dd_factor": cd,
            "base_clipped": clip_pt,
            "draws_clipped_share": share,
        }
    )
    return out.with_columns(pl.col(pl.Float64).fill_nan(None))
