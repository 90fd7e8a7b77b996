"""The stored result records of a run: ``runs.record.json_records`` against a ``json.dumps`` per building.

    python benchmarks/bench_records.py --n 10000      # a simulated portfolio (sample_portfolio/simulate.py)

Screens the portfolio once without sheets (``runner.run``; the run's results frame is taken where
``record.results_for_store`` receives it), then times on that frame: ``json.dumps(row, default=str,
sort_keys=True)`` per building (what the store held before), ``json_records`` (polars expressions, the same
bytes), and polars ``struct.json_encode`` (compact, NaN stored as null: not the same bytes), and counts the
records identical to the first. Medians of ``--repeat`` timings.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

import polars as pl  # noqa: E402 - after the checkout is on the path

from benchmarks.bench_pipeline import generate  # noqa: E402
from screening import runner  # noqa: E402
from screening.runs import record  # noqa: E402


def results_of_run(n: int, work: Path) -> pl.DataFrame:
    generate(n, work)
    got: dict[str, pl.DataFrame] = {}
    real = record.results_for_store

    def keep(run_id: str, res: pl.DataFrame) -> pl.DataFrame:
        got["res"] = res
        return real(run_id, res)

    record.results_for_store = keep
    try:
        runner.run(
            overrides={
                "inputs": {k: str(work / f"{k}.csv") for k in ("buildings", "readings", "weather")},
                "store": {"database": str(work / "bench.duckdb")},
                "analysis": {"as_of": "2026-10-15"},
                "output": {"sheets": False},
            },
            out_dir=str(work / "out"),
            force=True,
            quiet=True,
        )
    finally:
        record.results_for_store = real
    return got["res"]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=10000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        res = results_of_run(a.n, Path(d))
    frame = res.select([c for c in res.columns if res.schema[c] != pl.Object])
    cols = sorted(frame.columns)
    ways = {
        "json.dumps per building": lambda: [json.dumps(r, default=str, sort_keys=True) for r in frame.to_dicts()],
        "json_records": lambda: record.json_records(frame).to_list(),
        "struct.json_encode": lambda: frame.select(pl.struct(cols).struct.json_encode()).to_series().to_list(),
    }
    reference = None
    print(f"{frame.height} buildings x {len(cols)} columns, load {os.getloadavg()[0]:.1f}")
    for name, f in ways.items():
        times = []
        for _ in range(a.repeat):
            t = time.perf_counter()
            out = f()
            times.append(time.perf_counter() - t)
        reference = reference or out
        same = sum(x == y for x, y in zip(out, reference))
        print(f"{name:>24}: {statistics.median(times):6.3f} s   identical to json.dumps: {same}/{len(reference)}")


if __name__ == "__main__":
    main()
