"""Benchmark of the degree-day engine (a script, not a test).

100 invented stations × 30 years of daily max/min, a 71-base grid (40–75 °F by 0.5 °F)
and 10,000 billing periods (~30 days each, random stations and dates). Times, on one run:
building the cube (``DegreeDayCube.from_daily``), degree days at all 71 bases for every
period (``period_totals``), and the exact value at a per-period base (``at_base``).
Target (issue 3): the whole job under 2 s on the 2-core machine.

    python benchmarks/bench_degree_days.py [--stations 100] [--years 30] [--periods 10000]
                                           [--method mean|maxmin] [--repeat 5]

The machine is shared, so the script repeats the job and prints the best and the median.
"""

from __future__ import annotations

import argparse
import datetime as dt
import resource
import time

import numpy as np
import polars as pl

from screening.degree_days import DegreeDayCube


def make_weather(n_stations: int, years: int, seed: int = 42) -> pl.DataFrame:
    rng = np.random.default_rng(seed)
    start = dt.date(1995, 1, 1)
    dates = pl.date_range(start, dt.date(1995 + years - 1, 12, 31), eager=True)
    n = dates.len()
    doy = np.arange(n)
    mean_annual = rng.uniform(35, 75, n_stations)[:, None]
    swing = rng.uniform(8, 30, n_stations)[:, None]
    tm = mean_annual + swing * np.sin(2 * np.pi * (doy - 105) / 365.25)[None, :] + rng.normal(0, 6, (n_stations, n))
    rngt = rng.uniform(8, 25, (n_stations, n))
    return pl.DataFrame(
        {
            "station_id": np.repeat([f"B{i:03d}" for i in range(n_stations)], n),
            "date": pl.concat([dates] * n_stations),
            "t_min_f": (tm - rngt / 2).ravel(),
            "t_max_f": (tm + rngt / 2).ravel(),
            "t_mean_f": pl.Series([None] * (n_stations * n), dtype=pl.Float64),
        }
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stations", type=int, default=100)
    ap.add_argument("--years", type=int, default=30)
    ap.add_argument("--periods", type=int, default=10_000)
    ap.add_argument("--method", default="mean", choices=["mean", "maxmin"])
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    weather = make_weather(a.stations, a.years)
    bases = np.arange(40.0, 75.0 + 1e-9, 0.5)
    rng = np.random.default_rng(7)
    n_days = a.years * 365
    sid = np.array([f"B{i:03d}" for i in rng.integers(0, a.stations, a.periods)], dtype=object)
    s = np.datetime64("1995-01-01") + rng.integers(0, n_days - 40, a.periods).astype("timedelta64[D]")
    e = s + rng.integers(27, 35, a.periods).astype("timedelta64[D]")
    base = rng.uniform(45, 70, a.periods)

    runs = []
    for _ in range(a.repeat):
        t0 = time.perf_counter()
        cube = DegreeDayCube.from_daily(weather, bases, method=a.method)
        t1 = time.perf_counter()
        hdd, days, miss = cube.period_totals(sid, s, e, "hdd")
        cdd, _, _ = cube.period_totals(sid, s, e, "cdd")
        t2 = time.perf_counter()
        exact, _, _ = cube.at_base(sid, s, e, base, "hdd")
        t3 = time.perf_counter()
        runs.append((t1 - t0, t2 - t1, t3 - t2, t3 - t0))
        nbytes = cube.cum_hdd.nbytes
        del cube
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    r = np.array(runs)
    best, med = r.min(axis=0), np.median(r, axis=0)
    print(
        f"{a.stations} stations × {a.years} years ({weather.height:,} station-days), {bases.size} bases, "
        f"{a.periods:,} periods, method {a.method}; best / median of {a.repeat} runs"
    )
    print(f"  from_daily          {best[0]:7.3f} / {med[0]:.3f} s   (running sums {nbytes / 2**20:,.0f} MiB float64)")
    print(f"  period_totals ×2    {best[1]:7.3f} / {med[1]:.3f} s   (HDD and CDD at all bases)")
    print(f"  at_base             {best[2]:7.3f} / {med[2]:.3f} s   (exact, per-period base)")
    print(f"  total               {best[3]:7.3f} / {med[3]:.3f} s   target < 2 s; peak RSS {rss:,.0f} MiB")
    assert hdd.shape == (a.periods, bases.size) and np.all(miss == 0) and np.all(days >= 28)
    assert np.all(exact >= 0) and np.all(cdd >= 0)


if __name__ == "__main__":
    main()
