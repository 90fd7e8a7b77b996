"""Benchmark: variable-base regression for 10,000 buildings x 36 monthly periods x 71 bases.

Target (issue 5): under 3 s on the 2-core development machine. Run:

    python benchmarks/bench_regression.py [--buildings 10000] [--repeat 3]

Inputs are synthetic: the pvlib Greensboro TMY3 daily means (°F) tiled over 3 years, each building
given its own climate offset (whole 0.5 °F steps), α, β, τ and 5 % noise (seeded). Only
``fit_variable_base`` is timed; building the arrays is reported separately.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import sys

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a source checkout
from screening.metered import fit_variable_base  # noqa: E402


def _daily_f() -> np.ndarray:
    import pvlib
    from pvlib.iotools import read_tmy3

    df, _ = read_tmy3(str(Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"), map_variables=True)
    day = df["Date (MM/DD/YYYY)"].str.slice(0, 5).to_numpy()
    order = np.argsort(day, kind="stable")
    t = df["temp_air"].to_numpy()[order].reshape(365, 24).mean(axis=1)
    return np.tile(t * 9 / 5 + 32, 3)


def build(n_b: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    grid = np.arange(40.0, 75.01, 0.5)  # 71 bases
    t = _daily_f()
    month_len = np.tile([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], 3)
    edges = np.concatenate([[0], np.cumsum(month_len)])
    fine = np.arange(0.0, 120.01, 0.5)  # bases for the offset lookup
    dd = np.maximum(fine[None, :] - t[:, None], 0.0)
    c = np.vstack([np.zeros((1, fine.size)), np.cumsum(dd, axis=0)])
    month_hdd = c[edges[1:]] - c[edges[:-1]]  # (36, n_fine) [°F·day]
    offset = rng.integers(-20, 21, n_b) * 0.5  # building climate offset [°F]
    k = np.rint((grid[None, :] - offset[:, None] - fine[0]) / 0.5).astype(int)  # (n_b, 71)
    hdd = month_hdd[:, k].transpose(1, 0, 2)  # (n_b, 36, 71)
    days = np.broadcast_to(month_len.astype(float), (n_b, 36)).copy()
    x = hdd / days[:, :, None]
    tau_i = rng.integers(10, 61, n_b)  # true τ index within the grid
    alpha = rng.uniform(5, 50, n_b)
    beta = rng.uniform(0.2, 3.0, n_b)
    xt = np.take_along_axis(x, tau_i[:, None, None], axis=2)[:, :, 0]
    y = (alpha[:, None] + beta[:, None] * xt) * (1 + 0.05 * rng.standard_normal((n_b, 36)))
    valid = np.ones((n_b, 36), bool)
    return y, days, x, grid, valid, tau_i


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--buildings", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    t0 = time.perf_counter()
    y, days, x, grid, valid, tau_i = build(a.buildings)
    t1 = time.perf_counter()
    times = []
    for _ in range(a.repeat):
        s = time.perf_counter()
        fit = fit_variable_base(y, days, x, grid, valid)
        times.append(time.perf_counter() - s)
    err = np.abs(fit["base_index"] - tau_i)
    print(
        f"inputs: {a.buildings} buildings x 36 periods x {grid.size} bases "
        f"({x.nbytes / 1e6:.0f} MB), built in {t1 - t0:.2f} s"
    )
    print(
        f"fit_variable_base: best {min(times):.3f} s, median {sorted(times)[len(times) // 2]:.3f} s "
        f"over {a.repeat} runs (target < 3 s)"
    )
    print(
        f"sanity: heating models {np.mean(fit['model'] == 'heating'):.3f}, "
        f"median |τ error| {np.median(err) * 0.5:.2f} °F"
    )


if __name__ == "__main__":
    main()
