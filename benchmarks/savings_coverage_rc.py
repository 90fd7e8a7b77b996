"""Coverage of the savings intervals on the outside world ``../shared/worlds/rc_world.py`` (README "Savings
after a measure").

    PYTHONPATH=. python benchmarks/savings_coverage_rc.py [N] [SEED ...]

rc_world has no measure option. What it has is the mirror image of one: every wasteful building is
simulated twice, with its fault and without it, and with ``--onset recent`` each fault starts on a known day
(between 2025-04-03 and 2025-09-30). So for each seed: the world is written with ``--onset recent`` (its own
``main``; the only thing this script adds is keeping the daily fuel arrays that ``simulate`` returns, by
wrapping it), every monthly-billed wasteful building gets a ``measure`` row on its fault's first day, and
every monthly-billed normal building (no data fault) one on a day drawn in the same range (seeded): a
"measure" that changed nothing. One whole ddscreen run as of 2026-10-15. The true avoided energy over the
reporting bills is Σ (fuel of the fault-free twin − fuel of the building) over the days of those bills
(negative: the fault added fuel), scaled to the tool's kBtu by the ratio of the tool's metered energy to the
world's over the same bills (heat contents and the 1 % meter noise are the world's). A missing interval
counts as a miss. Nothing of rc_world's physics is used by the tool; this script only reads its outputs.
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

WORLD = ROOT.parent / "shared" / "worlds" / "rc_world.py"


def _world():
    spec = importlib.util.spec_from_file_location("ddscreen_bench_rc_world", WORLD)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


def one_seed(n: int, seed: int, tmp: Path) -> dict:
    rc = _world()
    kept: dict = {}
    simulate = rc.simulate

    def keep(B, wx, s, **kw):  # rc_world's own simulation, its result kept for the truth
        kept["B"], kept["sim"] = B, simulate(B, wx, s, **kw)
        return kept["sim"]

    rc.simulate = keep
    argv = sys.argv
    sys.argv = ["rc_world.py", "--out", str(tmp / "w"), "--n", str(n), "--seed", str(seed), "--onset", "recent"]
    try:
        rc.main()
    finally:
        sys.argv = argv
    sim, B = kept["sim"], kept["B"]
    t0 = dt.date.fromisoformat(str(rc.DATES[0]))
    truth = pl.read_csv(tmp / "w" / "truth.csv", infer_schema_length=None)
    monthly = truth.filter(pl.col("billing") == "monthly")
    waste = monthly.filter(pl.col("label") == "waste").select(
        "building_id", pl.col("onset").str.to_date().alias("date")
    )
    normal = monthly.filter(pl.col("label") == "normal").select("building_id")
    g = np.random.default_rng((seed, 5))
    lo, hi = int(B["onset"][B["recent"]].min()), int(B["onset"][B["recent"]].max())
    normal = normal.with_columns(
        pl.Series("date", [t0 + dt.timedelta(days=int(d)) for d in g.integers(lo, hi + 1, normal.height)])
    )
    ev = pl.concat([waste, normal]).with_columns(pl.lit("measure").alias("kind"))
    ev.write_csv(tmp / "events.csv")
    runner.run(
        overrides={
            "inputs": {k: str(tmp / "w" / f"{k}.csv") for k in ("buildings", "readings", "weather")}
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
    # daily fuel [kBtu] of every building and of the fault-free twin of each wasteful one
    fuel = sim["fuel"]
    cum = np.vstack([np.zeros((1, fuel.shape[1])), np.cumsum(fuel, 0)])
    twin = np.arange(n)
    twin[sim["waste"]] = n + np.arange(len(sim["waste"]))
    rd = (
        pl.read_csv(tmp / "w" / "readings.csv", infer_schema=False)
        .select("building_id", pl.col("period_start").str.to_date(), pl.col("period_end").str.to_date())
        .unique()
    )
    j = rd.join(s.select("building_id", "report_start", "report_end"), on="building_id").filter(
        (pl.col("period_start") >= pl.col("report_start")) & (pl.col("period_end") <= pl.col("report_end"))
    )
    b = j["building_id"].str.slice(1).cast(pl.Int64).to_numpy() - 1
    si = j.select((pl.col("period_start") - pl.lit(t0)).dt.total_days()).to_series().to_numpy()
    ei = j.select((pl.col("period_end") - pl.lit(t0)).dt.total_days()).to_series().to_numpy()
    own = cum[ei + 1, b] - cum[si, b]
    free = cum[ei + 1, twin[b]] - cum[si, twin[b]]
    per = (
        j.select("building_id")
        .with_columns(pl.Series("own", own), pl.Series("free", free))
        .group_by("building_id")
        .agg(pl.col("own").sum(), pl.col("free").sum())
    )
    s = s.join(per, on="building_id", how="left").with_columns(
        (pl.col("metered") / pl.col("own") * (pl.col("free") - pl.col("own"))).alias("true_avoided"),
        pl.col("building_id").is_in(waste["building_id"].implode()).alias("changed"),
    )
    s = s.with_columns(
        ((pl.col("true_avoided") >= pl.col("avoided_low_90")) & (pl.col("true_avoided") <= pl.col("avoided_high_90")))
        .fill_null(False)
        .alias("in90"),
        ((pl.col("true_avoided") >= pl.col("avoided_low_68")) & (pl.col("true_avoided") <= pl.col("avoided_high_68")))
        .fill_null(False)
        .alias("in68"),
    )
    ok = s.filter(pl.col("meets_guideline14"))
    out = {"seed": seed, "measures": s.height, "meet": ok.height}
    for name, grp in (("changed", ok.filter(pl.col("changed"))), ("none", ok.filter(~pl.col("changed")))):
        out[name] = (grp.height, int(grp["in90"].sum()), int(grp["in68"].sum()))
    chg = ok.filter(pl.col("changed"))
    out["true_share"] = float((-chg["true_avoided"] / chg["baseline_projected"]).median()) if chg.height else None
    return out


def main(argv: list[str]) -> int:
    n = int(argv[0]) if argv else 300
    seeds = [int(a) for a in argv[1:]] or [1, 2]
    tot = {"changed": [0, 0, 0], "none": [0, 0, 0]}
    for seed in seeds:
        tmp = Path(tempfile.mkdtemp(prefix="ddscreen-rc-savings-"))
        try:
            r = one_seed(n, seed, tmp)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        for k in tot:
            tot[k] = [a + b for a, b in zip(tot[k], r[k])]
        print(
            f"seed {seed}: {r['measures']} measures, {r['meet']} baselines meet Guideline 14; "
            f"fault onset (median added fuel {100 * (r['true_share'] or 0):.0f} % of the projection): "
            f"in 90 % {r['changed'][1]}/{r['changed'][0]}, in 68 % {r['changed'][2]}/{r['changed'][0]}; "
            f"no change: in 90 % {r['none'][1]}/{r['none'][0]}, in 68 % {r['none'][2]}/{r['none'][0]}",
            flush=True,
        )
    for k, (m, a, b) in tot.items():
        print(f"all, {k}: in 90 % {a}/{m} ({a / m:.2f}), in 68 % {b}/{m} ({b / m:.2f})" if m else f"all, {k}: none")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
