"""CPU seconds of the per-chunk model steps in one screening of a simulated portfolio (issue 20).

    python benchmarks/bench_model_steps.py               # 10,000 buildings, one chunk
    python benchmarks/bench_model_steps.py --n 3000 --reps 3

The portfolio comes from the independent simulator (sample_portfolio/simulate.py: 3 years of daily
weather and monthly bills, seed 7), read as the CLI reads it (IP); ``pipeline.screen_frames`` runs
``--reps`` times with each step wrapped, and the lowest CPU time (``time.process_time``: the
machine is shared, wall time moves with the load) of every step over the runs is printed, with
the screening's wall time. Steps: ``metered.calendarize`` (twice: the span and, for the
year-on-year change, the year before), ``metered._fit_in_blocks``, ``metered.missing_bills``,
``envelope.expected_heating``, ``yoy.year_over_year``, ``DegreeDayCube.at_base`` and the period
degree days of the regression (``pipeline._PeriodHdd``); a step called inside another counts in both.
A figure, not a test: nothing is asserted.
"""

from __future__ import annotations

import argparse
import datetime as dt
import functools
import importlib.util
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from screening import config as cfgmod  # noqa: E402
from screening import degree_days, envelope, metered, pipeline, yoy  # noqa: E402
from screening.ingest import ReadOptions  # noqa: E402
from screening.window import analysis_window  # noqa: E402

STEPS = (
    (metered, "calendarize"),
    (metered, "_fit_in_blocks"),
    (metered, "missing_bills"),
    (envelope, "expected_heating"),
    (yoy, "year_over_year"),
    (degree_days.DegreeDayCube, "at_base"),
    (pipeline._PeriodHdd, "missing"),
    (pipeline._PeriodHdd, "at"),
)


def _simulator():
    spec = importlib.util.spec_from_file_location("simulate", ROOT / "sample_portfolio" / "simulate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _wrap(totals: dict[str, float]) -> None:
    """Wrap every step so that its CPU seconds add up in ``totals`` (the module attribute, so callers see it)."""
    for owner, name in STEPS:
        f = getattr(owner, name)
        key = f"{getattr(owner, '__name__', owner)}.{name}".replace("screening.", "")

        @functools.wraps(f)
        def timed(*a, _f=f, _key=key, **k):
            c = time.process_time()
            try:
                return _f(*a, **k)
            finally:
                totals[_key] = totals.get(_key, 0.0) + time.process_time() - c

        setattr(owner, name, timed)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=10_000, help="buildings (default 10,000)")
    ap.add_argument("--reps", type=int, default=3, help="screenings; the lowest CPU time of each step is kept")
    args = ap.parse_args()
    sim = _simulator()
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        frames = sim.simulate_portfolio(
            args.n, seed=7, start=dt.date(2023, 10, 1), years=3, stations=min(8, max(5, args.n // 1000 + 4))
        )
        sim.write_portfolio(frames, work)
        opts = ReadOptions(units="IP")
        b, r, w = (pipeline.read_file(k, str(work / f"{k}.csv"), opts).df for k in ("buildings", "readings", "weather"))
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    totals: dict[str, float] = {}
    _wrap(totals)
    best: dict[str, float] = {}
    walls = []
    for _ in range(args.reps):
        totals.clear()
        t = time.perf_counter()
        pipeline.screen_frames(b, r, w, cfg, window=window, keep_periods=False)
        walls.append(time.perf_counter() - t)
        for k, v in totals.items():
            best[k] = min(best.get(k, v), v)
    print(f"{args.n:,} buildings, {r.height:,} readings; screen_frames wall {min(walls):.2f} s (best of {args.reps})")
    for k, v in sorted(best.items(), key=lambda kv: -kv[1]):
        print(f"  {k:40s} {v:7.3f} s CPU")


if __name__ == "__main__":
    main()
