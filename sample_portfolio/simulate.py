"""Independent simulator of building portfolios: buildings, meter readings, daily weather, truth.

This module is the test-portfolio generator of ddscreen. It is deliberately *independent of the
tool's own model* and must not import ``screening``: the tool estimates heating as
degree days x an envelope UA with documented defaults; this simulator instead

* invents daily weather per station (seasonal sinusoid + AR(1) anomalies + a diurnal range with
  its own seasonal cycle), then reconstructs each hour from a cosine diurnal cycle;
* simulates every building **hourly** (vectorised over chunks of buildings x days x 24 h):
  ``q(t) = max(0, UA_env*(T_set(t) - T_out(t)) + UA_oa*occ(t)*(T_set(t) - T_out(t)) - gains(t))``
  with occupancy schedules, preheat and night/weekend setbacks, holidays and school vacations,
  internal gains that follow occupancy, solar gains with a seasonal and daily shape, a building
  time constant (thermal mass: exponential lag of the outdoor daily mean and a damped diurnal
  swing) and a warm-weather shut-down of the heating plant. Heating is therefore partial through
  the day, and there is no single balance point;
* divides by a true seasonal efficiency (temperature-dependent COP for heat pumps) drawn from its
  own wide distributions, adds seasonal domestic hot water (colder mains in winter) and other
  base loads on the heating fuel, day-to-day multiplicative noise and meter noise;
* bills it over drifting meter-read dates (periods of 27-35 days that straddle months), or as
  calendar-year totals for a share of buildings, with an electricity meter beside the heating
  fuel for some buildings;
* injects faults recorded in the ``truth`` frame: wasteful heating (x1.6-2.5 of space heating via
  a stuck setpoint, open outdoor-air dampers or failed controls), unit errors (factors 10/100/1000
  of realistic mix-ups), missing months, duplicate readings, overlapping periods and runs of
  estimated reads with a catch-up read.

Envelope values (U-factors, air change rates, window fractions, setpoints, gains, efficiencies)
are drawn from this module's own era curves and wide log-normal spreads; they are not any
handbook's default table. Ranges were checked against docs/factors.md for
plausibility only (values there tagged (M) are memory ranges).

Public API
----------
``simulate_portfolio(n_buildings, *, seed, start, years, units="IP", fault_rates=None,
annual_share=0.1, stations=5) -> dict[str, pl.DataFrame]`` with frames ``buildings``,
``readings``, ``weather`` and ``truth``, columns exactly as in the input contract (README of the
project); ``write_portfolio(frames, out_dir)``; ``add_reject_rows(frames)`` appends a few
deliberately invalid rows (for the rejects path) and returns the new frames with a list that
describes them.

Internal computation is in IP units (°F, ft², Btu, Btu/(h·°F)); ``units="SI"`` converts the
buildings, weather and readings at the end (°C, m², W/K, m3/GJ/L/kWh). The ``truth`` frame is
always IP with the unit in every column name.
"""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

import numpy as np
import polars as pl

# ----------------------------------------------------------------------------------------------
# Constants. Conversion factors are definitions or published values quoted in
# docs/factors.md; everything else is this simulator's own invention.
# ----------------------------------------------------------------------------------------------
BTU_PER_KWH = 3412.1416          # docs/factors.md §8 (C), from the IT Btu definition
BTU_PER_THERM = 100_000.0        # definition (docs/factors.md §1, [S4])
BTU_PER_GJ = 947_817.12          # docs/factors.md §1/§8 (C)
FT3_PER_M3 = 35.314666721        # 1 ft = 0.3048 m exact (docs/factors.md §8)
L_PER_GAL = 3.785411784          # US gallon, exact (docs/factors.md §8)
FT2_PER_M2 = 1.0 / 0.09290304    # exact (docs/factors.md §8)
W_K_PER_BTU_H_F = 0.5275279      # 1 Btu/(h·°F) = 0.5275279 W/K (docs/factors.md §8)
BTU_H_PER_W = 3.412142           # docs/factors.md §8
AIR_BTU_FT3_F = 0.018            # 0.075 lb/ft³ x 0.24 Btu/(lb·°F) (docs/factors.md §3)
OIL_BTU_PER_GAL = 138_500.0      # No. 2 heating oil, EIA (docs/factors.md §1 [S2])
PROPANE_BTU_PER_GAL = 91_452.0   # EIA 2022 prelim. (docs/factors.md §1 [S2])

USE_TYPES = ("office", "multifamily", "school", "retail", "warehouse", "lodging", "healthcare", "other")
FUELS = ("natural_gas", "fuel_oil", "propane", "electricity", "district_steam", "district_hot_water")
LABELS = ("normal", "wasteful", "unit_error", "missing_months", "duplicate_readings",
          "overlapping_periods", "estimated_run")
DATA_FAULTS = LABELS[2:]
TAIL_DAYS = 36  # days simulated after the last weather day (bills straddling the end)

DEFAULT_FAULT_RATES = {
    "wasteful": 0.10,
    "unit_error": 0.03,
    "missing_months": 0.03,
    "duplicate_readings": 0.02,
    "overlapping_periods": 0.02,
    "estimated_run": 0.03,
}

# Invented climates: (station_id, display name, annual mean °F, seasonal half-amplitude °F,
# coldest day of year, mean diurnal range °F, AR(1) phi, AR(1) innovation sd °F).
CLIMATES = (
    ("north-ridge", "North Ridge", 41.0, 24.5, 20, 18.0, 0.72, 5.2),
    ("harbor-flats", "Harbor Flats", 51.5, 10.5, 30, 12.0, 0.65, 2.6),
    ("cedar-basin", "Cedar Basin", 46.0, 23.0, 18, 22.0, 0.70, 5.0),
    ("tallgrass-plain", "Tallgrass Plain", 53.5, 21.0, 17, 20.0, 0.68, 4.6),
    ("sunfall-valley", "Sunfall Valley", 63.5, 15.0, 19, 24.0, 0.62, 3.2),
    ("frost-hollow", "Frost Hollow", 36.5, 27.0, 21, 20.0, 0.74, 5.8),
    ("pine-shelf", "Pine Shelf", 48.5, 17.5, 25, 16.0, 0.68, 4.0),
    ("salt-marsh", "Salt Marsh", 59.0, 12.5, 27, 14.0, 0.64, 3.0),
)

FUEL_SHARES = {"natural_gas": 0.60, "fuel_oil": 0.08, "propane": 0.05, "electricity": 0.14,
               "district_steam": 0.08, "district_hot_water": 0.05}

# Units per fuel as (unit, probability) for IP and SI billing.
FUEL_UNITS = {
    "IP": {"natural_gas": (("therm", 0.6), ("ccf", 0.4)), "fuel_oil": (("gal", 1.0),),
           "propane": (("gal", 1.0),), "electricity": (("kWh", 1.0),),
           "district_steam": (("Mlb", 0.7), ("lb", 0.3)),
           "district_hot_water": (("MMBtu", 0.5), ("kBtu", 0.5))},
    "SI": {"natural_gas": (("m3", 0.7), ("GJ", 0.3)), "fuel_oil": (("L", 1.0),),
           "propane": (("L", 1.0),), "electricity": (("kWh", 1.0),),
           "district_steam": (("GJ", 1.0),),
           "district_hot_water": (("GJ", 0.5), ("kWh", 0.5))},
}
# Decimals written per unit (how bills usually print them).
UNIT_DECIMALS = {"therm": 0, "ccf": 0, "gal": 1, "kWh": 0, "Mlb": 2, "lb": 0, "MMBtu": 2,
                 "kBtu": 0, "m3": 0, "GJ": 2, "L": 0, "MWh": 3, "mcf": 2}
# Invented tariffs: price per unit (low, high) and a fixed charge per bill.
UNIT_PRICE = {"therm": (1.05, 1.55), "ccf": (1.10, 1.60), "kWh": (0.11, 0.19), "Mlb": (18.0, 28.0),
              "lb": (0.018, 0.028), "MMBtu": (16.0, 26.0), "kBtu": (0.016, 0.026),
              "m3": (0.38, 0.58), "GJ": (9.0, 15.0), "gal": (2.4, 4.2), "L": (0.65, 1.10)}

# Per use type: floor area median ft² and log-sd; stories (lo, hi); occupied hours (start lo/hi,
# length lo/hi); share open on weekends; 24-h occupancy; occupied setpoint °F (lo, hi);
# setback depth °F (lo, hi); share with no setback; gains occupied W/ft² (lo, hi); unoccupied
# fraction of occupied gains; outdoor air cfm/ft² (lo, hi); DHW delivered kBtu/(ft²·yr) (lo, hi);
# other base load on the heating fuel kBtu/(ft²·yr) (lo, hi) (cooking, process); window fraction
# (lo, hi); share with an electricity meter in the data.  All invented for this simulator.
TYPE_PARAMS = {
    "office":      dict(area=(42_000, 0.9), stories=(1, 12), occ=(6, 8, 10, 13), weekend=0.1, h24=0.0,
                        sp=(68, 73), sb=(5, 12), nosb=0.25, gain=(1.1, 2.4), unocc=(0.2, 0.4),
                        oa=(0.05, 0.16), dhw=(1.0, 3.0), other=(0.0, 0.6), win=(0.18, 0.50), elec=0.45),
    "multifamily": dict(area=(36_000, 0.8), stories=(2, 14), occ=(0, 0, 24, 24), weekend=1.0, h24=1.0,
                        sp=(68, 74), sb=(2, 5), nosb=0.7, gain=(0.45, 0.9), unocc=(1.0, 1.0),
                        oa=(0.0, 0.03), dhw=(9.0, 18.0), other=(0.5, 2.0), win=(0.14, 0.32), elec=0.25),
    "school":      dict(area=(60_000, 0.6), stories=(1, 3), occ=(7, 8, 8, 10), weekend=0.0, h24=0.0,
                        sp=(67, 71), sb=(8, 14), nosb=0.15, gain=(1.6, 3.0), unocc=(0.12, 0.3),
                        oa=(0.18, 0.42), dhw=(2.5, 6.5), other=(0.3, 1.5), win=(0.15, 0.35), elec=0.4),
    "retail":      dict(area=(22_000, 1.0), stories=(1, 2), occ=(8, 10, 10, 13), weekend=0.9, h24=0.0,
                        sp=(66, 70), sb=(6, 12), nosb=0.3, gain=(1.2, 2.2), unocc=(0.15, 0.35),
                        oa=(0.08, 0.22), dhw=(0.6, 2.0), other=(0.0, 0.5), win=(0.08, 0.30), elec=0.35),
    "warehouse":   dict(area=(80_000, 0.8), stories=(1, 1), occ=(5, 7, 9, 12), weekend=0.15, h24=0.0,
                        sp=(52, 62), sb=(4, 10), nosb=0.35, gain=(0.25, 0.6), unocc=(0.2, 0.4),
                        oa=(0.01, 0.05), dhw=(0.2, 0.9), other=(0.0, 0.3), win=(0.02, 0.10), elec=0.3),
    "lodging":     dict(area=(55_000, 0.8), stories=(2, 10), occ=(0, 0, 24, 24), weekend=1.0, h24=1.0,
                        sp=(68, 73), sb=(1, 4), nosb=0.6, gain=(0.6, 1.2), unocc=(1.0, 1.0),
                        oa=(0.05, 0.12), dhw=(18.0, 34.0), other=(1.0, 4.0), win=(0.15, 0.35), elec=0.35),
    "healthcare":  dict(area=(70_000, 0.9), stories=(1, 8), occ=(0, 0, 24, 24), weekend=1.0, h24=1.0,
                        sp=(70, 74), sb=(1, 3), nosb=0.8, gain=(1.2, 2.2), unocc=(1.0, 1.0),
                        oa=(0.15, 0.45), dhw=(18.0, 42.0), other=(1.5, 5.0), win=(0.15, 0.35), elec=0.4),
    "other":       dict(area=(18_000, 1.0), stories=(1, 4), occ=(6, 9, 8, 14), weekend=0.4, h24=0.0,
                        sp=(66, 72), sb=(4, 12), nosb=0.3, gain=(0.7, 2.0), unocc=(0.2, 0.45),
                        oa=(0.04, 0.18), dhw=(1.0, 5.0), other=(0.0, 1.0), win=(0.10, 0.35), elec=0.3),
}
TYPE_SHARES = {"office": 0.22, "multifamily": 0.24, "school": 0.12, "retail": 0.12, "warehouse": 0.08,
               "lodging": 0.07, "healthcare": 0.07, "other": 0.08}

# Era curves of this simulator (year anchors -> central values); each building then gets a
# log-normal draw around them.  Own curves, not a handbook table.
ERA_YEARS = np.array([1890.0, 1950.0, 1980.0, 2000.0, 2025.0])
ERA_WALL_U = np.array([0.33, 0.23, 0.135, 0.088, 0.060])     # Btu/(h·ft²·°F)
ERA_ROOF_U = np.array([0.40, 0.19, 0.080, 0.048, 0.032])     # Btu/(h·ft²·°F)
ERA_WIN_U = np.array([1.02, 0.92, 0.64, 0.43, 0.31])         # Btu/(h·ft²·°F)
ERA_ACH = np.array([1.05, 0.80, 0.52, 0.34, 0.22])           # 1/h

# Building names: invented word lists.
NAME_FIRST = ("Larchmont", "Birchwood", "Alder", "Quillby", "Fernhollow", "Marlow", "Thistle", "Oakhaven",
              "Brackenridge", "Wrenfield", "Copperleaf", "Sallow", "Heronmoor", "Linden", "Ashcombe",
              "Juniper", "Tamsin", "Orrin", "Millbrook", "Kestrel", "Bramble", "Harrow", "Greywell",
              "Willowmere", "Sorrel", "Calder", "Pemberly", "Rookwood", "Hazelton", "Emberlane")
NAME_SUFFIX = {"office": ("Tower", "Center", "Exchange", "Offices", "Building"),
               "multifamily": ("Court", "Apartments", "Residences", "Flats", "Terrace"),
               "school": ("Academy", "School", "Learning Center", "Primary", "Institute"),
               "retail": ("Market", "Plaza", "Arcade", "Shops", "Galleria"),
               "warehouse": ("Depot", "Distribution", "Storehouse", "Logistics Hall", "Yard"),
               "lodging": ("Inn", "Lodge", "Suites", "Hotel", "House"),
               "healthcare": ("Clinic", "Medical Pavilion", "Care Center", "Health Hall", "Infirmary"),
               "other": ("Hall", "Community Center", "Pavilion", "Works", "Annex")}
STREETS = ("Alder Lane", "Quarry Road", "Foxglove Way", "Tanager Street", "Bellwether Avenue",
           "Mossbank Drive", "Lantern Row", "Pikeman Street", "Orchard Spur", "Cobble Walk")


# ----------------------------------------------------------------------------------------------
# Small helpers
# ----------------------------------------------------------------------------------------------
def _ar1_scan(eps: np.ndarray, phi: np.ndarray | float) -> np.ndarray:
    """Solve x_t = phi * x_{t-1} + eps_t along the last axis with a log-depth prefix scan.

    Parameters
    ----------
    eps : innovations, shape (..., T)
    phi : coefficient, scalar or broadcastable to eps[..., :1] (one per series), |phi| < 1

    Returns
    -------
    x : shape like eps, with x_{-1} = 0.

    Notes
    -----
    After the pass with shift s, x_t = sum_{k<2s} phi^k eps_{t-k}; doubling s covers T in
    ceil(log2 T) passes without a Python loop over time steps.
    """
    x = np.array(eps, dtype=np.float64, copy=True)
    phi = np.asarray(phi, dtype=np.float64)
    t = x.shape[-1]
    s = 1
    p = phi.copy()
    while s < t:
        shifted = x[..., :-s]
        x[..., s:] = x[..., s:] + p * shifted
        p = p * p
        s *= 2
    return x


def _doy(days: np.ndarray) -> np.ndarray:
    """Day of year (1..366) for an array of numpy datetime64[D]."""
    years = days.astype("datetime64[Y]")
    return (days - years).astype(np.int64) + 1


def _choice(rng: np.random.Generator, options: tuple, probs: tuple, n: int) -> np.ndarray:
    p = np.asarray(probs, dtype=float)
    return np.asarray(options, dtype=object)[rng.choice(len(options), size=n, p=p / p.sum())]


def _check_args(n_buildings, seed, start, years, units, fault_rates, annual_share, stations, audit_share=0.06):
    if not isinstance(n_buildings, (int, np.integer)) or n_buildings < 1:
        raise ValueError(f"n_buildings must be a positive integer, got {n_buildings!r}")
    if not isinstance(seed, (int, np.integer)):
        raise ValueError(f"seed must be an integer, got {seed!r}")
    if not isinstance(start, date):
        raise ValueError(f"start must be a datetime.date, got {start!r}")
    if not isinstance(years, (int, np.integer)) or not 1 <= years <= 20:
        raise ValueError(f"years must be an integer from 1 to 20, got {years!r}")
    if units not in ("IP", "SI"):
        raise ValueError(f"units must be 'IP' or 'SI', got {units!r}")
    if not 0.0 <= annual_share <= 1.0:
        raise ValueError(f"annual_share must be within [0, 1], got {annual_share!r}")
    if not 0.0 <= audit_share <= 1.0:
        raise ValueError(f"audit_share must be within [0, 1], got {audit_share!r}")
    if not isinstance(stations, (int, np.integer)) or not 1 <= stations <= len(CLIMATES):
        raise ValueError(f"stations must be an integer from 1 to {len(CLIMATES)}, got {stations!r}")
    rates = dict(DEFAULT_FAULT_RATES)
    if fault_rates is not None:
        unknown = sorted(set(fault_rates) - set(DEFAULT_FAULT_RATES))
        if unknown:
            raise ValueError(f"fault_rates has unknown fault(s) {unknown}; known: {sorted(DEFAULT_FAULT_RATES)}")
        rates.update(fault_rates)
    for k, v in rates.items():
        if not 0.0 <= float(v) <= 1.0:
            raise ValueError(f"fault_rates[{k!r}] must be within [0, 1], got {v!r}")
    if sum(rates.values()) > 1.0:
        raise ValueError(f"fault_rates sum to {sum(rates.values()):.3f}; they must sum to at most 1")
    return rates


# ----------------------------------------------------------------------------------------------
# Weather
# ----------------------------------------------------------------------------------------------
def _simulate_weather(rng, n_st: int, days: np.ndarray, burn: int = 90) -> dict:
    """Daily mean, diurnal range, sky clearness and mains-water temperature per station.

    t_mean(d) = mu - A*cos(2*pi*(doy - d_cold)/365.25) + anomaly(d), anomaly AR(1);
    diurnal range with its own seasonal cycle (wider in the dry season) and AR(1) noise,
    larger on clear days.  Returns arrays of shape (n_st, D) in °F.
    """
    n_d = days.size
    total = n_d + burn
    all_days = days[0] - np.timedelta64(burn, "D") + np.arange(total).astype("timedelta64[D]")
    doy = _doy(all_days).astype(float)
    clim = CLIMATES[:n_st]
    mu = np.array([c[2] for c in clim])[:, None]
    amp = np.array([c[3] for c in clim])[:, None]
    dcold = np.array([c[4] for c in clim])[:, None]
    dtr = np.array([c[5] for c in clim])[:, None]
    phi = np.array([c[6] for c in clim])[:, None]
    sd = np.array([c[7] for c in clim])[:, None]
    season = np.cos(2 * np.pi * (doy[None, :] - dcold) / 365.25)
    # winter anomalies are wider than summer ones
    sd_t = sd * (1.0 + 0.35 * season)
    anom = _ar1_scan(rng.standard_normal((n_st, total)) * sd_t, phi)
    # a slow year-to-year wobble so that the years differ (±1.5 °F)
    yr_shift = _ar1_scan(rng.standard_normal((n_st, total)) * 0.06, 0.995)
    t_mean = mu - amp * season + anom + yr_shift
    clear = np.clip(0.55 + 0.25 * _ar1_scan(rng.standard_normal((n_st, total)) * 0.8, 0.5) / 1.15, 0.05, 1.0)
    rng_t = dtr * (1.0 + 0.12 * np.sin(2 * np.pi * (doy[None, :] - 100) / 365.25)) * (0.55 + 0.8 * clear)
    rng_t = np.clip(rng_t + rng.standard_normal((n_st, total)) * 2.0, 3.0, 40.0)
    # mains water: lags the air by ~5 weeks, damped swing, a few degrees above the annual mean air
    t_mains = mu + 5.0 - 0.45 * amp * np.cos(2 * np.pi * (doy[None, :] - dcold - 35) / 365.25)
    t_mains = np.clip(t_mains, 36.0, 85.0)
    return {"t_mean": t_mean, "range": rng_t, "clear": clear, "t_mains": t_mains, "burn": burn,
            "doy": doy}


# ----------------------------------------------------------------------------------------------
# Building population
# ----------------------------------------------------------------------------------------------
def _draw_buildings(rng, n: int, n_st: int, units: str) -> dict:
    """Draw use types, geometry, envelope, schedules and systems (all IP)."""
    types = _choice(rng, tuple(TYPE_SHARES), tuple(TYPE_SHARES.values()), n)
    if n >= len(USE_TYPES):  # every use type present in any portfolio of 8 or more
        types[rng.choice(n, size=len(USE_TYPES), replace=False)] = np.array(USE_TYPES, dtype=object)
    P = {k: np.empty(n) for k in ("area_med", "area_sd", "st_lo", "st_hi", "os_lo", "os_hi", "ol_lo",
                                  "ol_hi", "weekend", "h24", "sp_lo", "sp_hi", "sb_lo", "sb_hi", "nosb",
                                  "g_lo", "g_hi", "u_lo", "u_hi", "oa_lo", "oa_hi", "dhw_lo", "dhw_hi",
                                  "oth_lo", "oth_hi", "w_lo", "w_hi", "elec")}
    for t, p in TYPE_PARAMS.items():  # loop over the 8 use types (not over buildings)
        m = types == t
        vals = dict(area_med=p["area"][0], area_sd=p["area"][1], st_lo=p["stories"][0],
                    st_hi=p["stories"][1], os_lo=p["occ"][0], os_hi=p["occ"][1], ol_lo=p["occ"][2],
                    ol_hi=p["occ"][3], weekend=p["weekend"], h24=p["h24"], sp_lo=p["sp"][0],
                    sp_hi=p["sp"][1], sb_lo=p["sb"][0], sb_hi=p["sb"][1], nosb=p["nosb"],
                    g_lo=p["gain"][0], g_hi=p["gain"][1], u_lo=p["unocc"][0], u_hi=p["unocc"][1],
                    oa_lo=p["oa"][0], oa_hi=p["oa"][1], dhw_lo=p["dhw"][0], dhw_hi=p["dhw"][1],
                    oth_lo=p["other"][0], oth_hi=p["other"][1], w_lo=p["win"][0], w_hi=p["win"][1],
                    elec=p["elec"])
        for k, v in vals.items():
            P[k][m] = v
    u = lambda lo, hi: lo + (hi - lo) * rng.random(n)  # noqa: E731

    area = np.clip(P["area_med"] * np.exp(P["area_sd"] * rng.standard_normal(n)), 2_500, 900_000)
    area = np.round(area, -1)
    # taller buildings are larger: stories grow with area within the type's range
    st_frac = np.clip((np.log(area / P["area_med"]) / 2.5 + 0.5) + 0.25 * rng.standard_normal(n), 0, 1)
    stories = np.round(P["st_lo"] + (P["st_hi"] - P["st_lo"]) * st_frac).astype(int)
    year = np.round(np.clip(1890 + 135 * rng.beta(2.2, 1.6, n), 1885, 2024)).astype(int)
    station = rng.integers(0, n_st, n)

    # geometry
    footprint = area / stories
    aspect = u(1.0, 3.0)
    width = np.sqrt(footprint / aspect)
    perimeter = 2 * (width + aspect * width)
    floor_h = u(10.0, 14.5)
    wall_area = perimeter * floor_h * stories
    win_frac = u(P["w_lo"], P["w_hi"])
    win_area = wall_area * win_frac
    roof_area = footprint
    volume = area * floor_h

    # envelope (own era curves, log-normal spread, partial retrofits)
    lgn = lambda sd: np.exp(sd * rng.standard_normal(n))  # noqa: E731
    wall_u = np.interp(year, ERA_YEARS, ERA_WALL_U) * lgn(0.30)
    roof_u = np.interp(year, ERA_YEARS, ERA_ROOF_U) * lgn(0.35)
    win_u = np.interp(year, ERA_YEARS, ERA_WIN_U) * lgn(0.15)
    ach = np.interp(year, ERA_YEARS, ERA_ACH) * lgn(0.35)
    old = year < 1985
    new_windows = old & (rng.random(n) < 0.35)
    win_u = np.where(new_windows, u(0.34, 0.55), win_u)
    new_roof = old & (rng.random(n) < 0.30)
    roof_u = np.where(new_roof, u(0.035, 0.07), roof_u)
    slab_f = u(0.45, 0.95)  # Btu/(h·ft·°F) per ft of slab edge
    ua_env = (wall_u * (wall_area - win_area) + win_u * win_area + roof_u * roof_area
              + slab_f * perimeter + AIR_BTU_FT3_F * ach * volume)
    oa_cfm_ft2 = u(P["oa_lo"], P["oa_hi"])
    hr_eff = np.where((year >= 1995) & (rng.random(n) < 0.3), u(0.45, 0.75), 0.0)
    ua_oa = 60 * AIR_BTU_FT3_F * oa_cfm_ft2 * area * (1.0 - hr_eff)  # 1.08 x cfm x (1 - HR)

    # schedules
    h24 = P["h24"] > 0.5
    occ_start = np.where(h24, 0, rng.integers(P["os_lo"].astype(int), P["os_hi"].astype(int) + 1))
    occ_len = np.where(h24, 24, np.round(u(P["ol_lo"], P["ol_hi"])))
    occ_end = np.minimum(occ_start + occ_len, 24)
    weekend_open = rng.random(n) < P["weekend"]
    preheat = np.where(h24, 0, rng.integers(1, 4, n))
    sp_occ = u(P["sp_lo"], P["sp_hi"])
    no_setback = rng.random(n) < P["nosb"]
    sb_depth = np.where(no_setback, 0.0, u(P["sb_lo"], P["sb_hi"]))
    sp_unocc = sp_occ - sb_depth
    # 24-h buildings with a night setback: 23:00 - 06:00
    sp_start = np.where(h24, np.where(no_setback, 0, 6), np.maximum(occ_start - preheat, 0))
    sp_end = np.where(h24, np.where(no_setback, 24, 23), occ_end)

    gain_occ = u(P["g_lo"], P["g_hi"])  # W/ft²
    gain_unocc = gain_occ * u(P["u_lo"], P["u_hi"])
    sol_area = win_area * u(0.25, 0.65) * u(0.18, 0.35)  # SHGC x orientation/shading
    tau_days = u(0.3, 2.5)  # thermal time constant of the building, days
    swing = u(0.45, 1.0)    # damping of the diurnal swing seen by the heating load
    cutoff = u(58.0, 68.0)  # warm-weather shut-down on the lagged daily mean, °F

    # systems
    fuel = _choice(rng, tuple(FUEL_SHARES), tuple(FUEL_SHARES.values()), n)
    eff = np.empty(n)
    is_hp = np.zeros(n, dtype=bool)
    for f in FUELS:  # loop over the 6 fuels
        m = fuel == f
        k = int(m.sum())
        if k == 0:
            continue
        yy = year[m]
        if f == "natural_gas":
            e = np.where(rng.random(k) < np.clip((yy - 1990) / 60, 0.05, 0.55),
                         0.86 + 0.09 * rng.random(k), 0.62 + 0.22 * rng.random(k))
        elif f == "fuel_oil":
            e = 0.64 + 0.22 * rng.random(k)
        elif f == "propane":
            e = 0.70 + 0.25 * rng.random(k)
        elif f == "electricity":
            hp = rng.random(k) < 0.55
            is_hp[np.flatnonzero(m)[hp]] = True
            e = np.where(hp, 1.9 + 1.5 * rng.random(k), 0.97 + 0.03 * rng.random(k))
        else:  # district: building-side conversion and distribution losses
            e = 0.84 + 0.14 * rng.random(k)
        eff[m] = e
    dhw_on_fuel = np.where(fuel == "electricity", True,
                           rng.random(n) < np.where(np.isin(types, ["multifamily", "lodging", "healthcare"]), 0.9, 0.6))
    dhw_eff = np.where(fuel == "electricity", 0.95, np.clip(eff - 0.04, 0.55, 0.95))
    dhw_kbtu_ft2 = u(P["dhw_lo"], P["dhw_hi"])
    other_kbtu_ft2 = np.where(fuel == "electricity", 0.0, u(P["oth_lo"], P["oth_hi"]))
    has_elec_meter = np.where(fuel == "electricity", False, rng.random(n) < P["elec"])
    cop_cool = u(2.4, 3.8)
    cool_bal = u(56.0, 64.0)

    units_of = np.empty(n, dtype=object)
    for f in FUELS:
        m = fuel == f
        opts = FUEL_UNITS[units][f]
        units_of[m] = _choice(rng, tuple(o[0] for o in opts), tuple(o[1] for o in opts), int(m.sum()))
    is_school = types == "school"

    return dict(n=n, types=types, area=area, stories=stories, year=year, station=station,
                perimeter=perimeter, wall_area=wall_area, win_area=win_area, roof_area=roof_area,
                volume=volume, win_frac=win_frac, wall_u=wall_u, roof_u=roof_u, win_u=win_u, ach=ach,
                ua_env=ua_env, ua_oa=ua_oa, oa_cfm_ft2=oa_cfm_ft2, hr_eff=hr_eff,
                occ_start=occ_start.astype(int), occ_end=occ_end.astype(int), weekend_open=weekend_open,
                sp_start=sp_start.astype(int), sp_end=sp_end.astype(int), sp_occ=sp_occ,
                sp_unocc=sp_unocc, gain_occ=gain_occ, gain_unocc=gain_unocc, sol_area=sol_area,
                tau_days=tau_days, swing=swing, cutoff=cutoff, fuel=fuel, eff=eff, is_hp=is_hp,
                dhw_on_fuel=dhw_on_fuel, dhw_eff=dhw_eff, dhw_kbtu_ft2=dhw_kbtu_ft2,
                other_kbtu_ft2=other_kbtu_ft2, has_elec_meter=has_elec_meter, cop_cool=cop_cool,
                cool_bal=cool_bal, unit=units_of, is_school=is_school)


# ----------------------------------------------------------------------------------------------
# Hourly space-heating load, vectorised over a chunk of buildings x days x 24 h
# ----------------------------------------------------------------------------------------------
_HOURS = np.arange(24, dtype=np.float32) + 0.5
_DIURNAL = np.cos(2 * np.pi * (_HOURS - 15.0) / 24.0).astype(np.float32)  # peak at 15:00


def _space_heat_chunk(idx, B, W, off_days, sp_occ, sp_unocc, ua_oa, ua_env_mult=1.0,
                      lockout=None) -> tuple[np.ndarray, np.ndarray]:
    """Delivered space heat [Btu/day] for buildings ``idx``, shape (len(idx), D).

    q(b,d,h) = max(0, (UA_env + UA_oa*occ)(T_set - T_out) - gains); T_out from the lagged
    daily mean and a damped cosine diurnal cycle; gains = internal (occupancy) + solar.
    """
    st = B["station"][idx]
    burn = W["burn"]
    tm = W["t_mean"][st]                       # (b, D+burn)
    # thermal mass: exponential lag of the daily mean, a = exp(-1/tau)
    a = np.exp(-1.0 / B["tau_days"][idx])[:, None]
    drive = (1 - a) * tm
    drive[:, 0] = tm[:, 0]  # start the lagged temperature at the first day's mean
    lag = _ar1_scan(drive, a)
    t_eff = lag[:, burn:].astype(np.float32)
    half = (0.5 * W["range"][st][:, burn:] * B["swing"][idx][:, None]).astype(np.float32)
    clear = W["clear"][st][:, burn:].astype(np.float32)
    t_out = t_eff[:, :, None] + half[:, :, None] * _DIURNAL[None, None, :]

    hours = np.arange(24)
    occ_wd = (hours[None, :] >= B["occ_start"][idx][:, None]) & (hours[None, :] < B["occ_end"][idx][:, None])
    sp_wd = (hours[None, :] >= B["sp_start"][idx][:, None]) & (hours[None, :] < B["sp_end"][idx][:, None])
    we = B["weekend_open"][idx][:, None]
    h24 = (B["occ_end"][idx] - B["occ_start"][idx] >= 24)[:, None]
    occ2 = np.stack([occ_wd, occ_wd & (we | h24)], axis=1)          # (b, day kind, h)
    sp2 = np.stack([sp_wd, sp_wd & (we | h24)], axis=1)
    area = B["area"][idx]
    t_set2 = np.where(sp2, sp_occ[:, None, None], sp_unocc[:, None, None])
    gains2 = area[:, None, None] * BTU_H_PER_W * np.where(occ2, B["gain_occ"][idx][:, None, None],
                                                          B["gain_unocc"][idx][:, None, None])
    ua2 = (B["ua_env"][idx] * ua_env_mult)[:, None, None] + np.where(occ2, ua_oa[:, None, None], 0.0)
    # per building, day kind and hour: net load = ua * (t_set - t_out) - gains = c - ua * t_out
    c2 = (ua2 * t_set2 - gains2).astype(np.float32)
    ua2 = ua2.astype(np.float32)
    off = np.where(B["is_school"][idx][:, None], off_days["school"][None, :], off_days["general"][None, :])
    sel = off[:, :, None]
    ua = np.where(sel, ua2[:, 1][:, None, :], ua2[:, 0][:, None, :])
    c = np.where(sel, c2[:, 1][:, None, :], c2[:, 0][:, None, :])
    sol_bd = clear * B["sol_area"][idx][:, None].astype(np.float32)
    net = c - ua * t_out - sol_bd[:, :, None] * W["solar_dh"][None, :, :]
    q = np.maximum(net, 0, out=net).sum(axis=2, dtype=np.float64)
    shut = t_eff >= B["cutoff"][idx][:, None]
    if lockout is not None:
        shut &= lockout[:, None]
    q = np.where(shut, 0, q)
    return q.astype(np.float64), t_eff.astype(np.float64)


# ----------------------------------------------------------------------------------------------
# Main entry point
# ----------------------------------------------------------------------------------------------
def simulate_portfolio(n_buildings: int, *, seed: int, start: date, years: int, units: str = "IP",
                       fault_rates: dict | None = None, annual_share: float = 0.1,
                       stations: int = 5, chunk: int = 64, audit_share: float = 0.06,
                       waste_onset: tuple[date, date] | None = None,
                       onset_share: float = 1.0,
                       excess_window: tuple[date, date] | None = None,
                       space_heat_cut: tuple[date, np.ndarray] | None = None) -> dict[str, pl.DataFrame]:
    """Simulate a portfolio and return the frames ``buildings, readings, weather, truth``.

    Parameters
    ----------
    n_buildings : number of buildings (>= 1)
    seed : seed of numpy's default generator; the same arguments give identical frames
    start : first day of weather and readings [date]
    years : years simulated; the last day is the day before ``start`` shifted by ``years``
    units : "IP" (°F, ft², Btu/(h·°F), therm/ccf/gal/kWh/Mlb/lb/MMBtu/kBtu) or
        "SI" (°C, m², W/K, m3/GJ/L/kWh)
    fault_rates : share of buildings per fault, keys of ``DEFAULT_FAULT_RATES``; missing keys keep
        their default. Data faults go to monthly-billed buildings only; counts are rounded.
    annual_share : share of buildings billed only as calendar-year totals
    stations : number of invented climates used (1..8)
    chunk : buildings per vectorised block of the hourly simulation (memory ~ chunk x days x 24)
    audit_share : share of buildings whose buildings.csv row carries audit values: ``ua_total``
        (true time-averaged UA x a log-normal error of sd 0.08), ``balance_point`` (true time-averaged
        balance point + a normal error of sd 1.5 °F) and ``heating_efficiency`` (true). Only the
        buildings frame depends on it: readings, weather and truth are the same for any value
    waste_onset : None (the default: wasteful buildings waste over the whole record) or a pair of
        dates (first, last): each wasteful building starts wasting on a day drawn uniformly between
        them (a fault that develops, such as a damper actuator or a controller that fails) and is
        normal before it; the waste factor then holds from that day on. The onset days come from a
        second generator seeded with (seed, 1), so the rest of the portfolio is the same as without
        onsets. ``truth`` records ``waste_onset`` (null when the waste holds throughout)
    onset_share : with ``waste_onset``, the share of wasteful buildings that get an onset; the
        others waste over the whole record (drawn after the onset days from the same second
        generator, so 1.0 gives the same onsets as before this option existed)
    excess_window : None (the default) or a pair of dates (first, last), inclusive: ``truth`` then
        gains ``excess_kbtu``, each building's recoverable excess over those days: the heating fuel
        its fault added (the fault's share of space heat, divided by the day's efficiency and times
        the day's meter noise, exactly as the fuel itself), 0 for buildings without waste. It draws
        no random numbers, so every other output is the same as without it
    space_heat_cut : None (the default) or ``(day, cuts)``: a measure installed on ``day`` cuts each
        building's delivered space heat by the share ``cuts[i]`` (0 = no measure) from that day on,
        as a lower-loss envelope or better controls would. It draws no random numbers, so with all
        cuts 0 every output is the same as without it, and two runs that differ only in the cuts
        have the same weather, noise and meter-read dates: the difference of their heating-fuel
        bills is the fuel the measure saved

    Returns
    -------
    dict of polars DataFrames; ``buildings``, ``readings`` and ``weather`` carry exactly the input
    contract's columns; ``truth`` has one row per building (IP units, unit in every name).
    """
    rates = _check_args(n_buildings, seed, start, years, units, fault_rates, annual_share, stations, audit_share)
    rng = np.random.default_rng(seed)
    end = date(start.year + years, start.month, start.day) - timedelta(days=1) if not (
        start.month == 2 and start.day == 29) else date(start.year + years, 3, 1) - timedelta(days=1)
    # the simulation runs TAIL_DAYS past ``end`` so that the last bill can straddle it; weather
    # and calendar-year totals are emitted up to ``end`` only
    days = np.arange(np.datetime64(start, "D"), np.datetime64(end, "D") + 1 + TAIL_DAYS)
    n_d = days.size
    n_out = n_d - TAIL_DAYS
    n = int(n_buildings)

    W = _simulate_weather(rng, stations, days)
    burn = W["burn"]
    doy = W["doy"][burn:]
    # solar on the glazing [Btu/(h·ft²)] per day and hour: seasonal peak (low winter sun on
    # vertical glass), seasonal day length, sine over the daylight hours
    peak = 125.0 + 55.0 * np.cos(2 * np.pi * (doy - 355) / 365.25)
    daylen = 12.0 + 3.0 * np.cos(2 * np.pi * (doy - 172) / 365.25)
    rise = 12.0 - daylen / 2
    x = (_HOURS[None, :] - rise[:, None]) / daylen[:, None]
    W["solar_dh"] = (peak[:, None] * np.where((x > 0) & (x < 1), np.sin(np.pi * np.clip(x, 0, 1)), 0.0)
                     ).astype(np.float32)

    weekday = (days.astype("datetime64[D]").astype(np.int64) + 3) % 7  # 0 = Monday
    md = np.char.add(np.char.zfill(((days.astype("datetime64[M]").astype(int) % 12) + 1).astype(str), 2),
                     np.char.zfill(((days - days.astype("datetime64[M]")).astype(int) + 1).astype(str), 2))
    holiday = np.isin(md, ["0101", "0527", "0704", "0902", "1127", "1224", "1225", "1231"])
    general_off = (weekday >= 5) | holiday
    school_off = general_off | ((md >= "0620") & (md <= "0825")) | (md >= "1222") | (md <= "0102") | \
        ((md >= "0325") & (md <= "0401"))
    off_days = {"general": general_off, "school": school_off}

    B = _draw_buildings(rng, n, stations, units)

    # ---- labels -------------------------------------------------------------------------
    perm = rng.permutation(n)
    n_annual = int(round(annual_share * n))
    annual = np.zeros(n, dtype=bool)
    annual[perm[:n_annual]] = True
    label = np.full(n, "normal", dtype=object)
    monthly_idx = perm[n_annual:]
    counts = {k: int(round(v * n)) for k, v in rates.items()}
    n_waste = counts.pop("wasteful")
    waste_pick = rng.permutation(n)[:n_waste]
    label[waste_pick] = "wasteful"
    cand = rng.permutation(monthly_idx[label[monthly_idx] == "normal"])
    pos = 0
    for k in DATA_FAULTS:  # loop over the fault kinds
        c = min(counts[k], cand.size - pos)
        label[cand[pos:pos + c]] = k
        pos += c
    wasteful = label == "wasteful"
    waste_factor = np.where(wasteful, 1.6 + 0.9 * rng.random(n), 1.0)
    mech = np.where(wasteful, _choice(rng, ("stuck_setpoint", "open_dampers", "failed_controls"),
                                      (1, 1, 1), n), "")
    onset_day = np.zeros(n, dtype=np.int64)  # index into ``days`` from which the waste holds
    excess_win = np.zeros(n)                 # fuel added by the fault over ``excess_window`` [kBtu]
    if excess_window is not None:
        ew0, ew1 = excess_window
        if not (isinstance(ew0, date) and isinstance(ew1, date) and start <= ew0 <= ew1 <= end):
            raise ValueError(f"excess_window must be two dates with {start} <= first <= last <= {end}, "
                             f"got {excess_window!r}")
        in_win = (days >= np.datetime64(ew0, "D")) & (days <= np.datetime64(ew1, "D"))
    if waste_onset is not None:
        first, last = waste_onset
        if not (isinstance(first, date) and isinstance(last, date) and start <= first <= last <= end):
            raise ValueError(f"waste_onset must be two dates with {start} <= first <= last <= {end}, "
                             f"got {waste_onset!r}")
        if not 0.0 <= onset_share <= 1.0:
            raise ValueError(f"onset_share must be within [0, 1], got {onset_share!r}")
        lo_d, hi_d = (first - start).days, (last - start).days
        g_onset = np.random.default_rng((seed, 1))
        drawn = g_onset.integers(lo_d, hi_d + 1, n)
        with_onset = wasteful & (g_onset.random(n) < onset_share)
        onset_day = np.where(with_onset, drawn, 0)

    cut_keep = None
    if space_heat_cut is not None:
        cut_day, cuts = space_heat_cut
        cuts = np.asarray(cuts, dtype=float)
        if not (isinstance(cut_day, date) and start <= cut_day <= end) or cuts.shape != (n,) \
                or np.any(~(cuts >= 0) | (cuts >= 1)):
            raise ValueError(f"space_heat_cut must be (a date within {start}..{end}, {n} shares in [0, 1))")
        after = days >= np.datetime64(cut_day, "D")
        cut_keep = 1.0 - cuts[:, None] * after[None, :]

    # ---- daily energy per building, by chunks ---------------------------------------------
    heat_fuel_kbtu = np.empty((n, n_d))
    elec_kwh = np.zeros((n, n_d))
    space_kbtu_del = np.empty((n, n_d))
    mains = W["t_mains"][:, burn:]
    dhw_shape_all = (130.0 - mains) / (130.0 - mains.mean(axis=1, keepdims=True))
    occ_day = {"general": np.where(general_off, 0.75, 1.07), "school": np.where(school_off, 0.25, 1.35)}
    noise = np.exp(0.06 * rng.standard_normal((n, n_d)) - 0.5 * 0.06 ** 2)
    noise_e = np.exp(0.05 * rng.standard_normal((n, n_d)) - 0.5 * 0.05 ** 2)
    for c0 in range(0, n, chunk):  # chunks of buildings (memory bound), not per building
        idx = np.arange(c0, min(c0 + chunk, n))
        q, t_eff = _space_heat_chunk(idx, B, W, off_days, B["sp_occ"][idx], B["sp_unocc"][idx],
                                     B["ua_oa"][idx])
        w = idx[wasteful[idx]]
        if w.size:
            sub = np.searchsorted(idx, w)
            mk = mech[w]
            sp_o = B["sp_occ"][w] + np.where(mk == "stuck_setpoint", 4.0, np.where(mk == "failed_controls", 6.0, 0.0))
            sp_u = np.where(mk == "open_dampers", B["sp_unocc"][w], sp_o)
            oa = np.where(mk == "open_dampers", B["ua_oa"][w] * 2.5 + B["ua_env"][w] * 0.8, B["ua_oa"][w])
            qf, _ = _space_heat_chunk(w, B, W, off_days, sp_o, sp_u, oa, lockout=mk != "failed_controls")
            q0 = q[sub]
            on = (np.arange(n_d)[None, :] >= onset_day[w][:, None])  # the waste holds from its onset
            emitted = on[:, :n_out]
            s0 = (q0[:, :n_out] * emitted).sum(axis=1)  # calibrated over the emitted wasting days
            s1 = (qf[:, :n_out] * emitted).sum(axis=1)
            k = (waste_factor[w] - 1.0) * s0 / np.maximum(s1 - s0, 1e-9 * s0 + 1.0)
            added = (k[:, None] * on) * (qf - q0)    # space heat the fault adds [Btu/day]
            q[sub] = q0 + added
        if cut_keep is not None:
            q = q * cut_keep[idx]
        space_kbtu_del[idx] = q / 1000.0
        st = B["station"][idx]
        area = B["area"][idx]
        # heating fuel: space heat / efficiency (COP falls with the outdoor temperature)
        eff = B["eff"][idx][:, None] * np.where(B["is_hp"][idx][:, None],
                                               np.clip(1 + 0.022 * (t_eff - 40.0), 0.45, 1.35), 1.0)
        sched = np.where(B["is_school"][idx][:, None], occ_day["school"][None, :], occ_day["general"][None, :])
        sched = np.where(np.isin(B["types"][idx], ["multifamily", "lodging", "healthcare"])[:, None], 1.0, sched)
        dhw = (B["dhw_kbtu_ft2"][idx] * area / 365.25)[:, None] * dhw_shape_all[st] * sched / B["dhw_eff"][idx][:, None]
        other = (B["other_kbtu_ft2"][idx] * area / 365.25)[:, None] * sched
        on_fuel = B["dhw_on_fuel"][idx][:, None]
        fuel_kbtu = q / 1000.0 / eff + np.where(on_fuel, dhw, 0.0) + other
        # electricity meter: plugs and lights (most internal gains), cooling, electric DHW
        occ_h = np.clip(B["occ_end"][idx] - B["occ_start"][idx], 0, 24)[:, None]
        plug_kwh = (0.85 * area / 1000.0)[:, None] * (B["gain_occ"][idx][:, None] * occ_h * sched +
                                                      B["gain_unocc"][idx][:, None] * (24 - occ_h))
        cool_kwh = np.maximum(t_eff - B["cool_bal"][idx][:, None], 0) * (B["ua_env"][idx] * 24 / BTU_PER_KWH /
                                                                        B["cop_cool"][idx])[:, None]
        elec = plug_kwh + cool_kwh + np.where(on_fuel, 0.0, dhw * 0.6 * 1000.0 / BTU_PER_KWH)
        is_el = (B["fuel"][idx] == "electricity")[:, None]
        heat_fuel_kbtu[idx] = np.where(is_el, fuel_kbtu + elec * BTU_PER_KWH / 1000.0, fuel_kbtu) * noise[idx]
        elec_kwh[idx] = elec * noise_e[idx]
        if excess_window is not None and w.size:
            added_fuel = added / 1000.0 / eff[sub] * noise[w]
            excess_win[w] = added_fuel[:, in_win].sum(axis=1)

    # ---- meter periods --------------------------------------------------------------------
    frames_rows, truth_extra = _bill(rng, B, days, n_out, annual, label, heat_fuel_kbtu, elec_kwh)

    # ---- truth ----------------------------------------------------------------------------
    hrs = np.arange(24)
    occ_wd = (hrs[None, :] >= B["occ_start"][:, None]) & (hrs[None, :] < B["occ_end"][:, None])
    sp_wd = (hrs[None, :] >= B["sp_start"][:, None]) & (hrs[None, :] < B["sp_end"][:, None])
    h24 = (B["occ_end"] - B["occ_start"] >= 24)[:, None]
    occ_we = occ_wd & (B["weekend_open"][:, None] | h24)
    sp_we = sp_wd & (B["weekend_open"][:, None] | h24)
    occ_frac = (5 * occ_wd.sum(1) + 2 * occ_we.sum(1)) / (7 * 24)
    sp_frac = (5 * sp_wd.sum(1) + 2 * sp_we.sum(1)) / (7 * 24)
    ua_eff = B["ua_env"] + B["ua_oa"] * occ_frac
    t_set_mean = B["sp_unocc"] + (B["sp_occ"] - B["sp_unocc"]) * sp_frac
    gains_mean = B["area"] * BTU_H_PER_W * (B["gain_unocc"] + (B["gain_occ"] - B["gain_unocc"]) * occ_frac)
    solar_mean = B["sol_area"] * float(W["solar_dh"].mean()) * W["clear"][:, burn:].mean(axis=1)[B["station"]]
    t_bal = t_set_mean - (gains_mean + solar_mean) / ua_eff
    ndy = n_out / 365.25
    ann_space = space_kbtu_del[:, :n_out].sum(axis=1) / ndy
    ann_fuel = heat_fuel_kbtu[:, :n_out].sum(axis=1) / ndy
    ids = frames_rows["ids"]
    truth = pl.DataFrame({
        "building_id": ids,
        "truth_label": label.astype(str),
        "reading_frequency": np.where(annual, "annual", "monthly"),
        "waste_factor": np.round(waste_factor, 4),
        "waste_mechanism": mech.astype(str),
        "waste_onset": pl.Series([None if not (wasteful[i] and onset_day[i] > 0)
                                  else start + timedelta(days=int(onset_day[i])) for i in range(n)],
                                 dtype=pl.Date),
        "ua_true_btu_h_f": np.round(ua_eff, 1),
        "ua_envelope_btu_h_f": np.round(B["ua_env"], 1),
        "ua_outdoor_air_occupied_btu_h_f": np.round(B["ua_oa"], 1),
        "balance_point_true_f": np.round(t_bal, 2),
        "heating_efficiency_true": np.round(B["eff"], 4),
        "heat_pump": B["is_hp"],
        "setpoint_occupied_f": np.round(B["sp_occ"], 2),
        "setpoint_setback_f": np.round(B["sp_unocc"], 2),
        "wall_u_btu_h_ft2_f": np.round(B["wall_u"], 4),
        "roof_u_btu_h_ft2_f": np.round(B["roof_u"], 4),
        "window_u_btu_h_ft2_f": np.round(B["win_u"], 4),
        "window_fraction": np.round(B["win_frac"], 4),
        "ach": np.round(B["ach"], 4),
        "outdoor_air_cfm_ft2": np.round(B["oa_cfm_ft2"], 4),
        "internal_gains_mean_w_ft2": np.round(gains_mean / B["area"] / BTU_H_PER_W, 4),
        "time_constant_days": np.round(B["tau_days"], 3),
        "dhw_on_heating_fuel": B["dhw_on_fuel"],
        "annual_space_heat_delivered_kbtu": np.round(ann_space, 1),
        "annual_heating_fuel_kbtu": np.round(ann_fuel, 1),
        "dhw_other_share": np.round(1.0 - np.divide(ann_space / B["eff"], ann_fuel,
                                                     out=np.zeros(n), where=ann_fuel > 0), 4),
        "heat_content_btu_per_unit": truth_extra["heat_content"],
        "electricity_meter": B["has_elec_meter"],
        "unit_error_kind": truth_extra["ue_kind"],
        "unit_error_factor": truth_extra["ue_factor"],
        "fault_detail": truth_extra["detail"],
    })
    if excess_window is not None:
        truth = truth.with_columns(pl.Series("excess_kbtu", np.round(excess_win, 1)))
    buildings = _buildings_frame(rng, B, ids, ua_eff, t_bal, units, audit_share)
    weather = _weather_frame(W, days[:n_out], stations, units)
    return {"buildings": buildings, "readings": frames_rows["readings"], "weather": weather, "truth": truth}


# ----------------------------------------------------------------------------------------------
# Billing: periods, quantities, faults
# ----------------------------------------------------------------------------------------------
def _unit_btu(unit: np.ndarray, gas_hc: np.ndarray, steam_hc: np.ndarray, fuel: np.ndarray) -> np.ndarray:
    """Btu per billed unit for each building (gas and steam contents vary by utility)."""
    out = np.full(unit.size, np.nan)
    table = {"therm": BTU_PER_THERM, "MMBtu": 1e6, "kBtu": 1e3, "GJ": BTU_PER_GJ, "kWh": BTU_PER_KWH,
             "MWh": 1e3 * BTU_PER_KWH}
    for u_, v in table.items():
        out[unit == u_] = v
    out[unit == "ccf"] = 100.0 * gas_hc[unit == "ccf"]
    out[unit == "m3"] = FT3_PER_M3 * gas_hc[unit == "m3"]
    oil = OIL_BTU_PER_GAL
    prop = PROPANE_BTU_PER_GAL
    out[(unit == "gal") & (fuel == "fuel_oil")] = oil
    out[(unit == "gal") & (fuel == "propane")] = prop
    out[(unit == "L") & (fuel == "fuel_oil")] = oil / L_PER_GAL
    out[(unit == "L") & (fuel == "propane")] = prop / L_PER_GAL
    out[unit == "Mlb"] = 1000.0 * steam_hc[unit == "Mlb"]
    out[unit == "lb"] = steam_hc[unit == "lb"]
    return out


# realistic mix-ups: billed unit -> (what the numbers really are, factor applied to the numbers)
_UE_WHOLE = {"therm": ("kBtu written as therm", 100.0), "ccf": ("ft3 written as ccf", 100.0),
             "kWh": ("Wh written as kWh", 1000.0), "Mlb": ("lb written as Mlb", 1000.0),
             "lb": ("Mlb written as lb", 0.001), "MMBtu": ("kBtu written as MMBtu", 1000.0),
             "kBtu": ("MMBtu written as kBtu", 0.001), "gal": ("decimal point lost (x10)", 10.0),
             "m3": ("decimal point lost (x10)", 10.0), "GJ": ("MJ written as GJ", 1000.0),
             "L": ("decimal point lost (x10)", 10.0)}


def _bill(rng, B, days, n_out, annual, label, heat_kbtu, elec_kwh) -> tuple[dict, dict]:
    n = B["n"]
    n_d = days.size
    width = max(4, len(str(n)))
    ids = np.array([f"B{i + 1:0{width}d}" for i in range(n)])
    gas_hc = np.array([1018.0, 1031.0, 1044.0, 1025.0, 1052.0, 1037.0, 1022.0, 1040.0])[B["station"]]
    steam_hc = np.array([1000.0, 1120.0, 1050.0, 1190.0, 1000.0, 1090.0, 1150.0, 1000.0])[B["station"]]
    fuel = B["fuel"]
    hc = _unit_btu(B["unit"], gas_hc, steam_hc, fuel)

    cum_h = np.concatenate([np.zeros((n, 1)), np.cumsum(heat_kbtu, axis=1)], axis=1)
    cum_e = np.concatenate([np.zeros((n, 1)), np.cumsum(elec_kwh, axis=1)], axis=1)

    # monthly schedules: reads on drifting dates; period i covers (R[i]+1 .. R[i+1])
    n_p = int(n_d / 27) + 2

    def schedule(k):
        cycle = 29.6 + 1.6 * rng.random((k, 1))
        lens = np.clip(np.round(cycle + 1.4 * rng.standard_normal((k, n_p))), 27, 35).astype(int)
        r0 = rng.integers(-1, 27, (k, 1))
        reads = np.concatenate([r0, r0 + np.cumsum(lens, axis=1)], axis=1)
        s = reads[:, :-1] + 1
        e = reads[:, 1:]
        ok = (s >= 0) & (s <= n_out - 1) & (e <= n_d - 1)
        return s, e, ok

    s_h, e_h, ok_h = schedule(n)
    s_e, e_e, ok_e = schedule(n)
    # calendar-year periods for annual buildings
    out_days = days[:n_out]
    uy = np.unique(out_days.astype("datetime64[Y]"))
    ystart = np.searchsorted(out_days, uy.astype("datetime64[D]"))
    yend = np.searchsorted(out_days, (uy + 1).astype("datetime64[D]")) - 1
    full = (ystart < n_out) & (out_days[np.minimum(ystart, n_out - 1)] == uy.astype("datetime64[D]")) & \
        (out_days[np.clip(yend, 0, n_out - 1)] == (uy + 1).astype("datetime64[D]") - 1)
    ystart, yend = ystart[full], yend[full]
    n_y = ystart.size
    ann = annual[:, None]
    if n_y:
        pad = n_p - n_y
        ys = np.concatenate([np.broadcast_to(ystart, (n, n_y)), np.zeros((n, pad), int)], axis=1)
        ye = np.concatenate([np.broadcast_to(yend, (n, n_y)), np.zeros((n, pad), int)], axis=1)
        yok = np.concatenate([np.ones((n, n_y), bool), np.zeros((n, pad), bool)], axis=1)
    else:
        ys = ye = np.zeros((n, n_p), int)
        yok = np.zeros((n, n_p), bool)
    for (s, e, ok) in ((s_h, e_h, ok_h), (s_e, e_e, ok_e)):
        s[:] = np.where(ann, ys, s)
        e[:] = np.where(ann, ye, e)
        ok[:] = np.where(ann, yok, ok)
    s_h = np.clip(s_h, 0, n_d - 1)
    e_h = np.clip(e_h, 0, n_d - 1)
    s_e = np.clip(s_e, 0, n_d - 1)
    e_e = np.clip(e_e, 0, n_d - 1)

    def period_sum(cum, s, e):
        return np.take_along_axis(cum, e + 1, axis=1) - np.take_along_axis(cum, s, axis=1)

    meter = np.exp(0.015 * rng.standard_normal((n, n_p)))
    q_h = period_sum(cum_h, s_h, e_h) * 1000.0 / hc[:, None] * meter     # billed units
    q_e = period_sum(cum_e, s_e, e_e) * np.exp(0.01 * rng.standard_normal((n, n_p)))
    est_h = ~ann & (rng.random((n, n_p)) < 0.015)  # sporadic estimated reads (normal practice)
    est_e = ~ann & (rng.random((n, n_p)) < 0.01)
    # sporadic estimates under-read and the next read catches up (cumulative stays right)
    f = np.where(est_h, 0.7 + 0.25 * rng.random((n, n_p)), 1.0)
    short = q_h * (1 - f)
    q_h = q_h * f
    catch = np.zeros_like(short)
    catch[:, 1:] = short[:, :-1]
    q_h = q_h + catch
    ok_h = ok_h & ~(est_h & ~np.roll(ok_h, -1, axis=1))  # no estimated read without its catch-up
    keep_h = ok_h.copy()
    dup = np.zeros((n, n_p), bool)
    revised = np.zeros(n, bool)
    ue_kind = np.full(n, "", dtype=object)
    ue_factor = np.ones(n)
    detail = np.full(n, "", dtype=object)
    # index of the last valid period of each building (heating meter)
    last = np.where(ok_h.any(1), n_p - 1 - np.argmax(ok_h[:, ::-1], axis=1), 0)
    col = np.arange(n_p)[None, :]

    # Faults sit among the last 12 bills before the final one (inside the latest 12 months).
    # -- missing months: drop 2-4 consecutive bills
    m = np.flatnonzero(label == "missing_months")
    if m.size:
        k = rng.integers(2, 5, m.size)
        i0 = np.maximum(last[m] - rng.integers(k + 1, 12, m.size), 1)
        drop = (col >= i0[:, None]) & (col < (i0 + k)[:, None])
        keep_h[m] &= ~drop
        gone_s = days[s_h[m, np.maximum(i0, 0)]]
        gone_e = days[e_h[m, np.clip(i0 + k - 1, 0, n_p - 1)]]
        detail[m] = [f"{kk} bill(s) missing {a}..{b}" for kk, a, b in zip(k, gone_s, gone_e)]
    # -- duplicate readings: 1-3 bills repeated exactly
    m = np.flatnonzero(label == "duplicate_readings")
    if m.size:
        k = rng.integers(1, 4, m.size)
        i0 = np.maximum(last[m] - rng.integers(k + 1, 12, m.size), 0)
        dup[m] = (col >= i0[:, None]) & (col < (i0 + k)[:, None]) & ok_h[m]
        # half of them exact copies, half a re-issued bill: same period, quantity changed by 2-6 %
        revised[m] = rng.random(m.size) < 0.5
        detail[m] = [f"{kk} bill(s) entered twice from {days[s_h[b, i]]}" + (", second copy revised" if rv else ", exact copies")
                     for kk, b, i, rv in zip(k, m, i0, revised[m])]
    # -- overlapping periods: 1-2 bills whose start reaches 5-12 days into the previous bill,
    #    double-counting those days
    m = np.flatnonzero(label == "overlapping_periods")
    if m.size:
        k = rng.integers(1, 3, m.size)
        back = rng.integers(5, 13, m.size)
        i0 = np.maximum(last[m] - rng.integers(k + 1, 12, m.size), 1)
        sel = (col >= i0[:, None]) & (col < (i0 + k)[:, None])
        prev_q = np.roll(q_h[m], 1, axis=1)
        prev_len = np.roll(e_h[m] - s_h[m] + 1, 1, axis=1)
        q_h[m] = np.where(sel, q_h[m] + prev_q * back[:, None] / prev_len, q_h[m])
        s_h[m] = np.where(sel, np.maximum(s_h[m] - back[:, None], 0), s_h[m])
        detail[m] = [f"{kk} bill(s) start {bb} days early from {days[e_h[b, i - 1]]}"
                     for kk, bb, b, i in zip(k, back, m, i0)]
    # -- estimated run: 3-5 consecutive estimated bills at a flat estimate, then a catch-up read
    est_run = np.zeros((n, n_p), bool)
    m = np.flatnonzero(label == "estimated_run")
    if m.size:
        k = rng.integers(3, 6, m.size)
        i0 = np.maximum(last[m] - k - rng.integers(1, 12 - k, m.size), 0)
        sel = (col >= i0[:, None]) & (col < (i0 + k)[:, None])
        est_run[m] = sel
        qm = q_h[m]
        plen = e_h[m] - s_h[m] + 1
        base = np.where(ok_h[m], qm, 0).sum(1) / np.maximum(np.where(ok_h[m], plen, 0).sum(1), 1)
        flat = base[:, None] * plen * 0.8
        short = np.where(sel, qm - flat, 0).sum(1)
        qm = np.where(sel, flat, qm)
        cidx = np.minimum(i0 + k, n_p - 1)
        qm[np.arange(m.size), cidx] = np.maximum(qm[np.arange(m.size), cidx] + short, 0.05 * base * 30)
        q_h[m] = qm
        detail[m] = [f"{kk} estimated bill(s) from {days[s_h[b, i]]}, catch-up read after"
                     for kk, b, i in zip(k, m, i0)]
    # -- unit errors: whole history, from a date on, or a single bill
    q_before_ue = q_h.copy()
    m = np.flatnonzero(label == "unit_error")
    if m.size:
        kinds = np.array(["whole_history", "from_date", "single_reading"], dtype=object)
        kind = kinds[(np.arange(m.size) + rng.integers(0, 3)) % 3]  # the three kinds in turn
        uu = B["unit"][m]
        fac = np.array([_UE_WHOLE[x][1] for x in uu])
        what = np.array([_UE_WHOLE[x][0] for x in uu], dtype=object)
        single_fac = np.where(rng.random(m.size) < 0.5, 10.0, 100.0)
        fac = np.where(kind == "single_reading", single_fac, fac)
        i0 = np.maximum(last[m] - rng.integers(2, 11, m.size), 0)
        sel = np.where((kind == "whole_history")[:, None], True,
                       np.where((kind == "from_date")[:, None], col >= i0[:, None], col == i0[:, None]))
        q_h[m] = np.where(sel, q_h[m] * fac[:, None], q_h[m])
        ue_kind[m] = kind
        ue_factor[m] = fac
        detail[m] = [
            (f"all bills: {w}" if kd == "whole_history" else
             f"from {days[s_h[b, i]]}: {w}" if kd == "from_date" else
             f"one bill from {days[s_h[b, i]]} x{int(fc)}")
            for kd, w, b, i, fc in zip(kind, what, m, i0, fac)]

    estimated = (est_h | est_run)
    cost_on = rng.random(n) < 0.7
    lo = np.array([UNIT_PRICE[x][0] for x in B["unit"]])
    hi = np.array([UNIT_PRICE[x][1] for x in B["unit"]])
    price = lo + (hi - lo) * rng.random(n)
    fixed = 15.0 + 45.0 * rng.random(n)
    # costs follow the billed quantities before any unit error: a unit error shows as an odd
    # price per unit
    n_bills = np.where(ann[:, 0], 12.0, 1.0)
    cost_h = q_before_ue * price[:, None] + fixed[:, None] * n_bills[:, None]
    price_e = 0.11 + 0.08 * rng.random(n)
    cost_e = q_e * price_e[:, None] + fixed[:, None] * 0.6 * n_bills[:, None]

    dec = np.array([UNIT_DECIMALS[x] for x in B["unit"]])
    qh_round = _round_by(q_h, dec[:, None])
    rows_h = keep_h
    reps = np.where(dup, 2, 1)[rows_h]
    bi = np.broadcast_to(np.arange(n)[:, None], (n, n_p))
    q_rep = np.repeat(qh_round[rows_h], reps)
    cost_rep = np.repeat(np.where(cost_on[:, None], np.round(cost_h, 2), np.nan)[rows_h], reps)
    second = (np.cumsum(reps) - 1)[reps == 2]            # positions of the second copies
    b_rep = np.repeat(bi[rows_h], reps)
    rev = second[revised[b_rep[second]]]
    bump = 1.0 + np.where(rng.random(rev.size) < 0.5, -1, 1) * (0.02 + 0.04 * rng.random(rev.size))
    q_rep[rev] = _round_by(q_rep[rev] * bump, dec[b_rep[rev]])
    cost_rep[rev] = np.round(cost_rep[rev] * bump, 2)
    heat = {
        "b": b_rep,
        "fuel": np.repeat(np.broadcast_to(fuel[:, None], (n, n_p))[rows_h], reps),
        "s": np.repeat(s_h[rows_h], reps), "e": np.repeat(e_h[rows_h], reps),
        "q": q_rep,
        "unit": np.repeat(np.broadcast_to(B["unit"][:, None], (n, n_p))[rows_h], reps),
        "est": np.repeat(estimated[rows_h], reps),
        "cost": cost_rep,
    }
    rows_e = ok_e & B["has_elec_meter"][:, None]
    elec = {
        "b": bi[rows_e], "fuel": np.full(int(rows_e.sum()), "electricity", dtype=object),
        "s": s_e[rows_e], "e": e_e[rows_e], "q": np.round(q_e)[rows_e],
        "unit": np.full(int(rows_e.sum()), "kWh", dtype=object), "est": est_e[rows_e],
        "cost": np.where(cost_on[:, None], np.round(cost_e, 2), np.nan)[rows_e],
    }
    cat = {k: np.concatenate([heat[k], elec[k]]) for k in heat}
    order = np.lexsort((cat["e"], cat["s"], cat["fuel"].astype(str), cat["b"]))
    cat = {k: v[order] for k, v in cat.items()}
    readings = pl.DataFrame({
        "building_id": ids[cat["b"]],
        "fuel": cat["fuel"].astype(str),
        "period_start": days[cat["s"]],
        "period_end": days[cat["e"]],
        "quantity": cat["q"].astype(np.float64),
        "unit": cat["unit"].astype(str),
        "estimated": cat["est"].astype(bool),
        "cost": cat["cost"],
    }).with_columns(pl.col("cost").fill_nan(None), pl.col("period_start").cast(pl.Date),
                    pl.col("period_end").cast(pl.Date))
    return ({"ids": ids, "readings": readings},
            {"heat_content": np.round(hc, 3), "ue_kind": ue_kind.astype(str), "ue_factor": ue_factor,
             "detail": detail.astype(str)})


def _round_by(x: np.ndarray, dec: np.ndarray) -> np.ndarray:
    scale = 10.0 ** dec
    return np.round(x * scale) / scale


# ----------------------------------------------------------------------------------------------
# Frames
# ----------------------------------------------------------------------------------------------
def _buildings_frame(rng, B, ids, ua_eff, t_bal, units, audit_share=0.06) -> pl.DataFrame:
    n = B["n"]
    first = np.asarray(NAME_FIRST, dtype=object)[rng.integers(0, len(NAME_FIRST), n)]
    suffix = np.array([NAME_SUFFIX[t][j] for t, j in zip(B["types"], rng.integers(0, 5, n))], dtype=object)
    num = rng.integers(1, 60, n)
    names = [f"{a} {b} {c}" for a, b, c in zip(first, suffix, num)]
    street = np.asarray(STREETS, dtype=object)[rng.integers(0, len(STREETS), n)]
    address = [f"{h} {s}" for h, s in zip(rng.integers(10, 2999, n), street)]
    city = np.array([c[1] for c in CLIMATES])[B["station"]]
    audit = rng.random(n) < audit_share
    eff_given = audit | (rng.random(n) < 0.05)
    ua = np.where(audit, np.round(ua_eff * np.exp(0.08 * rng.standard_normal(n)), -1), np.nan)
    bp = np.where(audit, np.round(t_bal + 1.5 * rng.standard_normal(n), 1), np.nan)
    eff = np.where(eff_given, np.round(B["eff"], 2), np.nan)
    area = B["area"]
    if units == "SI":
        area = np.round(area / FT2_PER_M2, 1)
        ua = np.round(ua * W_K_PER_BTU_H_F, 0)
        bp = np.round((bp - 32.0) * 5.0 / 9.0, 1)
    year = B["year"].astype(float)
    year = np.where(rng.random(n) < 0.04, np.nan, year)      # a few unknown years
    stories = np.where(rng.random(n) < 0.03, np.nan, B["stories"].astype(float))
    df = pl.DataFrame({
        "building_id": ids, "name": names,
        "station_id": np.array([c[0] for c in CLIMATES])[B["station"]],
        "use_type": B["types"].astype(str), "floor_area": area,
        "year_built": year, "stories": stories, "heating_fuel": B["fuel"].astype(str),
        "heating_efficiency": eff, "ua_total": ua, "balance_point": bp,
        "address": address, "city": city,
    })
    return df.with_columns(
        pl.col(["heating_efficiency", "ua_total", "balance_point", "year_built", "stories"]).fill_nan(None),
    ).with_columns(pl.col("year_built").cast(pl.Int64), pl.col("stories").cast(pl.Int64))


def _weather_frame(W, days, n_st, units) -> pl.DataFrame:
    burn = W["burn"]
    tm = W["t_mean"][:, burn:burn + days.size]
    half = W["range"][:, burn:burn + days.size] / 2
    t_min = tm - half
    t_max = tm + half
    if units == "SI":
        t_min = (t_min - 32.0) * 5.0 / 9.0
        t_max = (t_max - 32.0) * 5.0 / 9.0
    st = np.array([c[0] for c in CLIMATES[:n_st]])
    return pl.DataFrame({
        "station_id": np.repeat(st, days.size),
        "date": np.tile(days, n_st),
        "t_min": np.round(t_min, 1).ravel(),
        "t_max": np.round(t_max, 1).ravel(),
    }).with_columns(pl.col("date").cast(pl.Date))


def write_portfolio(frames: dict[str, pl.DataFrame], out_dir) -> dict[str, Path]:
    """Write ``buildings.csv``, ``readings.csv``, ``weather.csv`` and ``truth.csv`` to ``out_dir``.

    Returns the paths written. Dates are ISO 8601, booleans true/false, nulls empty.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}
    for name in ("buildings", "readings", "weather", "truth"):
        if name not in frames:
            raise ValueError(f"frames lacks {name!r}; got {sorted(frames)}")
        p = out / f"{name}.csv"
        frames[name].write_csv(p)
        paths[name] = p
    return paths


def add_reject_rows(frames: dict[str, pl.DataFrame]) -> tuple[dict[str, pl.DataFrame], list[dict]]:
    """Append a few deliberately invalid rows that a loader must reject (and nothing else).

    Planted (ids refer to the first buildings of the frame):

    * readings: a negative quantity; an unknown unit ("bbl"); natural gas in gallons; a reading for
      a building that does not exist ("ZZ-404"); a period that ends before it starts;
    * buildings: one extra building ("B-BAD-AREA") with a floor area of 0 and no readings.

    Each planted row is invalid for the one reason listed; dropping the planted rows leaves the
    portfolio exactly as simulated (the truth frame does not list them).

    Returns
    -------
    (frames, planted) : new frames (inputs are not modified) and one dict per planted row with
    ``file``, ``building_id``, ``column``, ``value`` and ``reason``.
    """
    b = frames["buildings"]
    r = frames["readings"]
    ids = b["building_id"].to_list()
    if len(ids) < 3:
        raise ValueError(f"add_reject_rows needs at least 3 buildings, got {len(ids)}")
    gas = b.filter(pl.col("heating_fuel") == "natural_gas")["building_id"].to_list()
    gas_id = gas[0] if gas else ids[2]
    last = r["period_end"].max()
    p0 = last - timedelta(days=29)
    rows = [
        (ids[0], "electricity", p0, last, -412.0, "kWh", "quantity", "-412", "negative quantity"),
        (ids[1], "electricity", p0, last, 380.0, "bbl", "unit", "bbl", "unknown unit"),
        (gas_id, "natural_gas", p0, last, 95.0, "gal", "unit", "gal", "gallons are not a natural gas unit"),
        ("ZZ-404", "natural_gas", p0, last, 1200.0, "therm", "building_id", "ZZ-404", "unknown building"),
        (ids[2], "electricity", last, p0, 510.0, "kWh", "period_end", str(p0), "period ends before it starts"),
    ]
    bad = pl.DataFrame({
        "building_id": [x[0] for x in rows], "fuel": [x[1] for x in rows],
        "period_start": [x[2] for x in rows], "period_end": [x[3] for x in rows],
        "quantity": [x[4] for x in rows], "unit": [x[5] for x in rows],
        "estimated": [False] * len(rows), "cost": [None] * len(rows),
    }, schema=r.schema)
    planted = [{"file": "readings.csv", "building_id": x[0], "column": x[6], "value": x[7], "reason": x[8]}
               for x in rows]
    first = b.row(0, named=True)
    bad_b = pl.DataFrame([{**first, "building_id": "B-BAD-AREA", "name": "Unsized Annex 1", "floor_area": 0.0,
                           "ua_total": None, "balance_point": None, "heating_efficiency": None}],
                         schema=b.schema)
    planted.append({"file": "buildings.csv", "building_id": "B-BAD-AREA", "column": "floor_area", "value": "0",
                    "reason": "floor area must be > 0"})
    out = dict(frames)
    out["readings"] = pl.concat([r, bad])
    out["buildings"] = pl.concat([b, bad_b])
    return out, planted
