"""Shared fixtures: a tiny valid portfolio written into ``tmp_path``, and CLI helpers.

The portfolio is invented (invented names and two invented climates): 6 buildings ×
2 weather stations × 26 monthly readings (2022-11 to 2024-12) and daily weather from
2022-10-01 to 2024-12-31. Readings follow the degree-day method itself,
``heat = 24 · UA · HDD(balance point) / η`` (common practice; the method of issue 2),
plus a constant baseload, so every building's ratio metered/expected is known by
construction: 1.0 except ``B03`` (heating × 2.0, the planted waste).

``as_of = 2025-01-15`` selects the window 2024-01-01 to 2024-12-31 (issue 2: the 12
months ending on the last day of the last complete calendar quarter).

Other test files may use ``portfolio`` (a :class:`Portfolio`) and the helpers
``write_rows``, ``table_counts``, ``cli`` and ``run_module``.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.util
import datetime as dt
import os
import subprocess
import sys
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest

AS_OF = "2025-01-15"
WINDOW = (dt.date(2024, 1, 1), dt.date(2024, 12, 31))
WEATHER_START = dt.date(2022, 10, 1)
WEATHER_END = dt.date(2024, 12, 31)
STATIONS = {"alder-flats": 0.0, "brisk-point": 9.0}  # invented stations: °F offset of the mean

BUILDING_HEADER = [
    "building_id",
    "name",
    "station_id",
    "use_type",
    "floor_area",
    "year_built",
    "stories",
    "heating_fuel",
    "heating_efficiency",
    "ua_total",
    "balance_point",
    "address",
    "city",
]
READING_HEADER = ["building_id", "fuel", "period_start", "period_end", "quantity", "unit", "estimated", "cost"]
WEATHER_HEADER = ["station_id", "date", "t_min", "t_max"]

# building_id, name, station, use, area ft², year, stories, fuel, η, UA Btu/(h·°F), balance °F, waste factor
BUILDINGS = [
    ("B01", "Quillmore Offices", "alder-flats", "office", 42000.0, 1988, 3, "natural_gas", 0.80, 9000.0, 58.0, 1.0),
    (
        "B02",
        "Tansy Court Flats",
        "alder-flats",
        "multifamily",
        36000.0,
        1965,
        4,
        "natural_gas",
        0.78,
        11000.0,
        60.0,
        1.0,
    ),
    ("B03", "Hollin Grade School", "alder-flats", "school", 55000.0, 1972, 2, "natural_gas", 0.80, 14000.0, 57.0, 2.0),
    ("B04", "Marrow Lane Shops", "brisk-point", "retail", 24000.0, 2004, 1, "fuel_oil", 0.82, 5200.0, 55.0, 1.0),
    ("B05", "Sedge Depot", "brisk-point", "warehouse", 61000.0, 1995, 1, "natural_gas", 0.85, 8000.0, 50.0, 1.0),
    ("B06", "Wrenfield Inn", "brisk-point", "lodging", 30000.0, 2011, 5, "electricity", 3.0, 6500.0, 56.0, 1.0),
]
UNIT_OF = {"natural_gas": "therm", "fuel_oil": "gal", "electricity": "kWh"}
BTU_PER_UNIT = {
    "therm": 100_000.0,  # definition (EIA: 1 therm = 100,000 Btu)
    "gal": 138_500.0,  # EIA No. 2 heating oil, Btu/gal (docs/factors.md §1)
    "kWh": 3_412.141633,
}  # 3.6e6 J / 1055.05585262 J (NIST SP 811)
BASE_BTU_PER_DAY_FT2 = 8.0  # invented constant non-heating use of the heating fuel
N_READINGS = 26


def daily_weather() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per station: (dates as datetime64[D], daily mean °F), deterministic (seeded)."""
    days = np.arange(np.datetime64(WEATHER_START), np.datetime64(WEATHER_END) + 1)
    doy = (days - days.astype("datetime64[Y]")).astype(int)
    rng = np.random.default_rng(20240601)
    out = {}
    for st, off in STATIONS.items():
        mean = 47.0 + off - 24.0 * np.cos(2 * np.pi * (doy - 15) / 365.0) + rng.normal(0, 4.0, days.size)
        out[st] = (days, np.round(mean, 1))
    return out


def month_periods() -> list[tuple[dt.date, dt.date]]:
    """26 calendar-month reading periods 2022-11 … 2024-12 (inclusive ends)."""
    out = []
    y, m = 2022, 11
    for _ in range(N_READINGS):
        start = dt.date(y, m, 1)
        y2, m2 = (y + (m == 12), m % 12 + 1)
        out.append((start, dt.date(y2, m2, 1) - dt.timedelta(days=1)))
        y, m = y2, m2
    return out


@lru_cache(maxsize=1)
def portfolio_text() -> dict[str, str]:
    """The three CSV files' text (computed once per session)."""
    wx = daily_weather()
    w_rows = []
    for st, (days, mean) in wx.items():
        for d, t in zip(days.astype(str), mean):
            w_rows.append([st, d, f"{t - 8.0:.1f}", f"{t + 8.0:.1f}"])
    b_rows, r_rows = [], []
    for bid, name, st, use, area, year, stories, fuel, eta, ua, bal, waste in BUILDINGS:
        b_rows.append(
            [
                bid,
                name,
                st,
                use,
                f"{area:.0f}",
                year,
                stories,
                fuel,
                eta,
                f"{ua:.0f}",
                bal,
                f"{10 + len(b_rows)} Fernbrake Road",
                "Lowmere",
            ]
        )
        days, mean = wx[st]
        # t_mean = (t_min + t_max)/2 = mean exactly; HDD per day = max(0, base − mean) (daily-mean method)
        hdd = np.maximum(0.0, bal - mean)
        unit = UNIT_OF[fuel]
        for s, e in month_periods():
            sel = (days >= np.datetime64(s)) & (days <= np.datetime64(e))
            n_days = int(sel.sum())
            heat_btu = 24.0 * ua * hdd[sel].sum() / eta * waste  # 24·UA·HDD/η (degree-day method)
            base_btu = BASE_BTU_PER_DAY_FT2 * area * n_days
            q = (heat_btu + base_btu) / BTU_PER_UNIT[unit]
            r_rows.append([bid, fuel, s.isoformat(), e.isoformat(), f"{q:.2f}", unit, "false", f"{q * 0.9:.2f}"])
    return {
        "buildings": _csv(BUILDING_HEADER, b_rows),
        "readings": _csv(READING_HEADER, r_rows),
        "weather": _csv(WEATHER_HEADER, w_rows),
    }


def _csv(header, rows) -> str:
    return "\n".join([",".join(header)] + [",".join(str(x) for x in r) for r in rows]) + "\n"


@dataclass
class Portfolio:
    """Paths of the three fixture files (in ``folder``) and what they hold."""

    folder: Path
    buildings: Path
    readings: Path
    weather: Path
    n_buildings: int = len(BUILDINGS)
    n_readings: int = len(BUILDINGS) * N_READINGS
    n_weather: int = len(STATIONS) * ((WEATHER_END - WEATHER_START).days + 1)
    as_of: str = AS_OF
    window: tuple = WINDOW
    wasteful: str = "B03"
    extra: dict = field(default_factory=dict)

    def args(self, out: Path | str, db: Path | str | None = None, *more: str) -> list[str]:
        """``ddscreen run`` arguments on these files."""
        a = [
            "run",
            "--buildings",
            str(self.buildings),
            "--readings",
            str(self.readings),
            "--weather",
            str(self.weather),
            "--out",
            str(out),
            "--as-of",
            self.as_of,
            "--db",
            str(db or self.folder / "screening.duckdb"),
        ]
        return a + list(more)

    def text(self, kind: str) -> str:
        return getattr(self, kind).read_text(encoding="utf-8")

    def lines(self, kind: str) -> list[str]:
        return self.text(kind).splitlines()


def write_portfolio(folder: Path) -> Portfolio:
    """Write the fixture portfolio's three CSV files into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = {}
    for kind, text in portfolio_text().items():
        p = folder / f"{kind}.csv"
        p.write_text(text, encoding="utf-8")
        paths[kind] = p
    return Portfolio(folder, paths["buildings"], paths["readings"], paths["weather"])


@pytest.fixture
def portfolio(tmp_path) -> Portfolio:
    """A fresh copy of the tiny valid portfolio in ``tmp_path/in``."""
    return write_portfolio(tmp_path / "in")


def write_rows(
    path: Path, header: list[str] | None, rows: list[list], *, delimiter: str = ",", encoding: str = "utf-8"
) -> Path:
    """Write a CSV (csv module quoting) and return its path."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", newline="", encoding=encoding) as f:
        w = csv.writer(f, delimiter=delimiter, lineterminator="\n")
        if header is not None:
            w.writerow(header)
        w.writerows(rows)
    return path


TABLES = ("buildings", "readings", "weather_daily", "input_files", "load_rejects", "runs", "results", "rejects")


def table_counts(db: Path | str) -> dict[str, int]:
    """Row count of every table of the store (``{}`` when the file does not exist)."""
    import duckdb

    if not Path(db).exists():
        return {}
    con = duckdb.connect(str(db), read_only=True)
    try:
        have = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
        return {t: con.execute(f'SELECT count(*) FROM "{t}"').fetchone()[0] for t in TABLES if t in have}
    finally:
        con.close()


def cli(args: list[str]):
    """Invoke the typer app in-process; returns click's Result (stdout and stderr apart)."""
    from typer.testing import CliRunner
    from screening.cli import app

    return CliRunner().invoke(app, args, catch_exceptions=True)


def run_module(args: list[str], cwd: Path | str | None = None, timeout: float = 120) -> subprocess.CompletedProcess:
    """``python -m screening ARGS`` in a subprocess."""
    env = dict(os.environ, PYTHONIOENCODING="utf-8")
    return subprocess.run(
        [sys.executable, "-m", "screening", *args], cwd=cwd, capture_output=True, text=True, timeout=timeout, env=env
    )


def tree_digest(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` (relative path → sha256 of its bytes), symlinks as their target."""
    out = {}
    for p in sorted(folder.rglob("*")):
        rel = str(p.relative_to(folder))
        if p.is_symlink():
            out[rel] = "-> " + os.readlink(p)
        elif p.is_file():
            out[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


SIMULATOR_MODULE = "ddscreen_test_simulate"


def simulator():
    """The project simulator ``sample_portfolio/simulate.py`` (a script folder, not a package),
    loaded once per test session and registered in ``sys.modules`` (its dataclasses need it)."""
    mod = sys.modules.get(SIMULATOR_MODULE)
    if mod is None:
        path = Path(__file__).resolve().parents[1] / "sample_portfolio" / "simulate.py"
        spec = importlib.util.spec_from_file_location(SIMULATOR_MODULE, path)
        assert spec is not None and spec.loader is not None
        mod = importlib.util.module_from_spec(spec)
        sys.modules[SIMULATOR_MODULE] = mod
        spec.loader.exec_module(mod)
    return mod
