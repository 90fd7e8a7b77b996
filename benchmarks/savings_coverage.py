"""Coverage of the savings intervals on the project simulator (docs/methods.md "Savings after a measure").

    PYTHONPATH=. python benchmarks/savings_coverage.py [N] [SEED ...]

For each seed: N monthly-billed buildings without faults, every other one with a cut of 10-30 % of its
space heat from 2025-06-01 (``simulate_portfolio(space_heat_cut=...)``), every building given a measure
row on that day, one whole run as of 2026-10-15. The true avoided energy is the same portfolio simulated
without the cut (same seed) minus the one with it, over the reporting bills. A missing interval counts as a
miss. Prints, per seed, the baselines meeting the Guideline 14 limits and the share of true values inside
the 90 % and 68 % intervals, for the cut buildings and for those without a cut.
"""

from __future__ import annotations

import datetime as dt
import importlib.util
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np
import polars as pl

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
from screening import runner  # noqa: E402 - importable from a checkout without installing

CUT_DAY = dt.date(2025, 6, 1)
NO_FAULTS = {
    k: 0.0
    for k in ("wasteful", "unit_error", "missing_months", "duplicate_readings", "overlapping_periods", "estimated_run")
}


def _simulator():
    spec = importlib.util.spec_from_file_location("ddscreen_bench_simulate", ROOT / "sample_portfolio" / "simulate.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


def one_seed(n: int, seed: int, tmp: Path) -> dict:
    sim = _simulator()
    cuts = np.where(np.arange(n) % 2 == 0, 0.10 + 0.20 * (np.arange(n) % 7) / 6, 0.0)
    kw = {"seed": seed, "start": dt.date(2023, 10, 1), "years": 3, "fault_rates": NO_FAULTS, "annual_share": 0.0}
    cut = sim.simulate_portfolio(n, **kw, space_heat_cut=(CUT_DAY, cuts))
    base = sim.simulate_portfolio(n, **kw)
    paths = sim.write_portfolio(cut, tmp / "in")
    ids = cut["buildings"]["building_id"]
    pl.DataFrame({"building_id": ids, "date": [CUT_DAY] * n, "kind": ["measure"] * n}).write_csv(tmp / "events.csv")
    runner.run(
        overrides={
            "inputs": {k: str(paths[k]) for k in ("buildings", "readings", "weather")}
            | {"events": str(tmp / "events.csv")},
            "store": {"database": str(tmp / "s.duckdb")},
            "analysis": {"as_of": "2026-10-15"},
            "output": {"sheets": False},
        },
        out_dir=str(tmp / "out"),
        force=True,
        quiet=True,
    )
    s = pl.read_csv(tmp / "out" / "savings.csv", try_parse_dates=True)
    fuel = cut["buildings"].select("building_id", "heating_fuel")
    heat = [
        r.join(fuel, on="building_id").filter(pl.col("fuel") == pl.col("heating_fuel"))
        for r in (cut["readings"], base["readings"])
    ]
    j = (
        heat[0]
        .with_columns(heat[1]["quantity"].alias("q0"))
        .join(s.select("building_id", "report_start", "report_end"), on="building_id")
    )
    j = j.filter((pl.col("period_start") >= pl.col("report_start")) & (pl.col("period_end") <= pl.col("report_end")))
    ratio = j.group_by("building_id").agg((pl.col("q0").sum() / pl.col("quantity").sum()).alias("_r"))
    s = (
        s.join(ratio, on="building_id")
        .with_columns((pl.col("metered") * (pl.col("_r") - 1)).alias("true"))
        .join(pl.DataFrame({"building_id": ids, "cut": cuts}), on="building_id")
    )
    out = {"meets": int(s["meets_guideline14"].sum()), "of": s.height}
    ok = s.filter(pl.col("meets_guideline14"))
    for lab, f in (("cut", pl.col("cut") > 0), ("none", pl.col("cut") == 0)):
        x = ok.filter(f)
        for lv in ("90", "68"):
            inside = ((x["true"] >= x[f"avoided_low_{lv}"]) & (x["true"] <= x[f"avoided_high_{lv}"])).fill_null(False)
            out[f"{lab}_in{lv}"] = (int(inside.sum()), x.height)
    return out


def main(argv: list[str]) -> None:
    n = int(argv[0]) if argv else 60
    seeds = [int(a) for a in argv[1:]] or [11, 101, 202, 606, 707]
    for seed in seeds:
        tmp = Path(tempfile.mkdtemp(prefix="ddscreen-savings-"))
        try:
            r = one_seed(n, seed, tmp)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        print(
            f"seed {seed}: meets {r['meets']} of {r['of']}; "
            + "; ".join(f"{k} {a} of {b}" for k, (a, b) in ((k, v) for k, v in r.items() if k.endswith(("90", "68"))))
        )


if __name__ == "__main__":
    main(sys.argv[1:])
