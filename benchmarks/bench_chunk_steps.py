"""CPU seconds of one chunk's "metered_prep" and "regression" stages, this tree against a reference commit
(issue 20), alternately in one process.

    python benchmarks/bench_chunk_steps.py --db /tmp/me/bench.duckdb            # against 2f8cfc2
    python benchmarks/bench_chunk_steps.py --db DB --ref main --reps 10 --chunk 16384

``--db``: a store written by a run (e.g. the ``bench.duckdb`` of ``bench_pipeline.py``; opened read-only,
nothing is written to it). The first ``--chunk`` buildings (in building-id order) are screened as
``pipeline._screen_part`` does up to ``metered.metered_heating``: their readings pulled from the store
(``runs.inputs.StoreReadings``), ``units.convert_to_kbtu``, ``metered.choose_spans``, the span and
period degree days, ``metered.fit_periods`` ("metered_prep"), then ``metered.metered_heating``
("regression"). The reference tree is ``git archive <ref>`` unpacked as ``compare_outputs.py`` does;
both trees' modules are imported side by side under two package names, and the runs alternate, so a
shared machine's load falls on both alike. CPU time (``time.process_time``, all threads), lowest and
median of ``--reps`` runs each; the two trees' ``metered_heating`` frames are compared (equal, not close).
A figure, not a test: nothing is asserted.
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib
import sys
import time
import types
from pathlib import Path

import numpy as np
import polars as pl

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from compare_outputs import ref_tree  # noqa: E402

MODULES = ("pipeline", "metered", "units", "config", "envelope", "degree_days", "window", "runs.inputs", "store")


def load(alias: str, package_dir: Path) -> dict[str, types.ModuleType]:
    """The tree's ``screening`` modules imported as package ``alias`` (its relative imports stay inside it)."""
    pkg = types.ModuleType(alias)
    pkg.__path__ = [str(package_dir)]
    sys.modules[alias] = pkg
    return {m: importlib.import_module(f"{alias}.{m}") for m in MODULES}


def one_chunk(M: dict, src, b: pl.DataFrame, w: pl.DataFrame, as_of: dt.date) -> tuple[float, float, pl.DataFrame]:
    """CPU seconds of the two stages for buildings ``b`` (the lines of ``pipeline._screen_part``)."""
    pipeline, metered, units, ddm, env = M["pipeline"], M["metered"], M["units"], M["degree_days"], M["envelope"]
    cfg = M["config"].settings(M["config"].load(None, None))
    a = cfg.analysis
    ws, we = M["window"].analysis_window(as_of)
    grid = pipeline.base_grid(cfg)
    filled, _ = ddm.fill_short_gaps(w)
    cube = ddm.DegreeDayCube.from_daily(filled, grid, method=a.degree_day_method)
    normals = ddm.normal_year(cube, grid, years=None)
    envelope = env.estimate_envelope(b)
    t0 = time.process_time()
    r = src(b["building_id"])
    conv, _ = units.convert_to_kbtu(r, b, gas_btu_per_ft3=a.gas_btu_per_ft3, steam_btu_per_lb=a.steam_btu_per_lb)
    units.billed_units(conv)
    conv = conv.select([c for c in pipeline._CONV_KEEP if c in conv.columns])
    spans = metered.choose_spans(
        conv,
        ws,
        we,
        lookback_months=a.lookback_months,
        min_coverage=cfg.thresholds.coverage_min,
        building_ids=b["building_id"],
        fill_end_days=a.fill_end_days,
    )
    spans = spans.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    st = spans["station_id"].to_numpy()
    span_hdd, _, _ = cube.period_totals(st, spans["span_start"], spans["span_end"])
    fill_hdd = pipeline._fill_hdd(cube, spans, grid)
    periods = metered.fit_periods(conv, spans, lookback_months=a.lookback_months)
    periods = periods.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    ph = pipeline._PeriodHdd(cube, periods)
    periods = periods.with_columns((pl.col("usable") & pl.Series(ph.missing() == 0)).alias("usable"))
    normal_hdd = normals.for_stations(st)
    t1 = time.process_time()
    met = metered.metered_heating(
        conv,
        spans.drop("station_id"),
        b,
        periods=periods.drop("station_id"),
        period_hdd=ph,
        span_hdd=span_hdd,
        normal_hdd=normal_hdd,
        base_grid_f=grid,
        efficiency=envelope["efficiency"].to_numpy(),
        engineering_base_f=envelope["balance_point_f"].to_numpy(),
        method=a.calendarization,
        fill_hdd=fill_hdd,
        daily_weights=None,
        fit_block=pipeline.FIT_BLOCK,
    )
    return t1 - t0, time.process_time() - t1, met


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--db", required=True, help="a store written by a run (read only)")
    ap.add_argument("--ref", default="2f8cfc2", help="reference commit (default 2f8cfc2)")
    ap.add_argument("--chunk", type=int, default=16384, help="buildings (default 16,384, the default chunk)")
    ap.add_argument("--reps", type=int, default=6, help="runs of each tree (default 6)")
    ap.add_argument("--as-of", default="2026-10-15")
    a = ap.parse_args()
    trees = {
        "reference": load("screening_ref", ref_tree(a.ref) / "screening"),
        "this tree": load("screening_new", ROOT / "screening"),
    }
    M = trees["this tree"]
    with M["store"].Store(a.db, read_only=True) as st:
        fr = M["runs.inputs"].stored_inputs(st, readings=False)
    b = fr["buildings"].drop("_file", strict=False).sort("building_id").head(a.chunk)
    w = fr["weather"]
    srcs = {k: T["runs.inputs"].StoreReadings(a.db) for k, T in trees.items()}
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in trees}
    met: dict[str, pl.DataFrame] = {}
    as_of = dt.date.fromisoformat(a.as_of)
    for i in range(a.reps):
        for k in list(trees) if i % 2 == 0 else list(trees)[::-1]:
            p, g, met[k] = one_chunk(trees[k], srcs[k], b, w, as_of)
            times[k].append((p, g))
    for s in srcs.values():
        s.close()
    print(f"{b.height:,} buildings of {a.db}; CPU seconds over {a.reps} runs each (lowest, median)")
    arr = {k: np.array(v) for k, v in times.items()}
    for k, v in arr.items():
        print(
            f"  {k:10s} metered_prep {v[:, 0].min():6.3f} {np.median(v[:, 0]):6.3f}   "
            f"regression {v[:, 1].min():6.3f} {np.median(v[:, 1]):6.3f}"
        )
    o, n = arr["reference"], arr["this tree"]
    print(
        f"  speed-up   metered_prep {o[:, 0].min() / n[:, 0].min():.2f}x ({np.median(o[:, 0]) / np.median(n[:, 0]):.2f}x)"
        f"   regression {o[:, 1].min() / n[:, 1].min():.2f}x ({np.median(o[:, 1]) / np.median(n[:, 1]):.2f}x)"
    )
    print(f"  metered_heating frames equal: {met['reference'].equals(met['this tree'])}")


if __name__ == "__main__":
    main()
