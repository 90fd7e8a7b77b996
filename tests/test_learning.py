"""Learning from audits (issue 17): the defaults' bias per era × use type from audited values, and its use
only from [learning] min_audits audited buildings on (screening/learning.py)."""

from __future__ import annotations

import datetime as dt
import json
import math

import numpy as np
import polars as pl
import pytest
from scipy.stats import norm

from screening import learning, runner

from .conftest import simulator


def _frames(rows):
    given = pl.DataFrame(
        rows,
        schema={
            "building_id": pl.String,
            "era": pl.String,
            "use_type": pl.String,
            "ua_total_btu_h_f": pl.Float64,
            "heating_efficiency": pl.Float64,
            "balance_point_f": pl.Float64,
        },
        orient="row",
    )
    default = given.select(
        "building_id",
        pl.lit(1000.0).alias("ua_total"),
        pl.lit(0.8).alias("efficiency"),
        pl.lit(55.0).alias("balance_point_f"),
    )
    return given, default


RATIOS = [1.1, 1.2, 1.2, 1.3, 1.25, 1.15]


def test_the_bias_of_a_group_is_the_median_log_ratio_with_its_robust_spread():
    rows = [
        (f"A{i}", "1960-1979", "office", 1000.0 * r, None, 55.0 + d)
        for i, (r, d) in enumerate(zip(RATIOS, [2.0, -1.0, 3.0, 0.0, 1.0, 5.0]))
    ]
    rows += [(f"B{i}", "2000-2009", "school", 1000.0 * r, 0.8 * 0.9, None) for i, r in enumerate([0.7, 0.8, 0.9])]
    rows += [("C0", "2000-2009", "school", None, None, None)]  # not audited: not counted
    given, default = _frames(rows)
    b = learning.audit_bias(given, default, min_audits=5)
    ua = b.filter(pl.col("quantity") == "ua_total")
    a = ua.filter(pl.col("use_type") == "office").row(0, named=True)
    x = np.log(RATIOS)
    # by hand: the median of six log ratios is the mean of the middle two, ln 1.2 and ln 1.2
    assert a["n_audits"] == 6 and a["bias"] == pytest.approx(math.log(1.2), abs=1e-12)
    assert a["spread"] == pytest.approx(1.4826 * np.median(np.abs(x - math.log(1.2))), abs=1e-12)
    assert a["factor"] == pytest.approx(1.2) and a["applied"] and a["compared"] == "log ratio"
    s = ua.filter(pl.col("use_type") == "school").row(0, named=True)
    assert s["n_audits"] == 3 and s["factor"] == pytest.approx(0.8) and not s["applied"]  # 3 < 5: off
    eff = b.filter(pl.col("quantity") == "heating_efficiency").row(0, named=True)
    assert eff["n_audits"] == 3 and eff["factor"] == pytest.approx(0.9) and eff["spread"] == pytest.approx(0.0)
    bp = b.filter(pl.col("quantity") == "balance_point").row(0, named=True)
    # differences 2, −1, 3, 0, 1, 5 °F: median (1 + 2) / 2 = 1.5; |dev| 0.5 2.5 1.5 1.5 0.5 3.5 → median 1.5
    assert bp["compared"] == "difference [°F]" and bp["bias"] == pytest.approx(1.5)
    assert bp["spread"] == pytest.approx(1.4826 * 1.5) and bp["factor"] is None and not bp["applied"]
    assert learning.audit_bias(given, default, min_audits=2).filter(pl.col("quantity") == "ua_total")["applied"].all()


def test_the_mad_factor_is_one_over_the_normal_quartile():
    assert learning.MAD_TO_SD == pytest.approx(1 / norm.ppf(0.75), abs=1e-4)  # scipy.stats.norm


def test_factors_apply_only_to_buildings_without_their_own_value_in_an_applied_group():
    bias = pl.DataFrame(
        {
            "quantity": ["ua_total", "heating_efficiency", "ua_total"],
            "era": ["1960-1979", "1960-1979", "2000-2009"],
            "use_type": ["office"] * 2 + ["school"],
            "compared": ["log ratio"] * 3,
            "n_audits": [6, 5, 3],
            "bias": [0.0] * 3,
            "spread": [0.0] * 3,
            "factor": [1.2, 0.9, 0.5],
            "applied": [True, True, False],
        }
    ).cast(learning.BIAS_SCHEMA)
    frame = pl.DataFrame(
        {
            "building_id": ["P", "Q", "R", "S"],
            "era": ["1960-1979"] * 3 + ["2000-2009"],
            "use_type": ["office"] * 3 + ["school"],
            "ua_given": [False, True, False, False],
            "efficiency_given": [False, False, True, False],
        }
    )
    f = dict(zip(*learning.expectation_factors(frame, bias)))
    assert f == pytest.approx({"P": 1.2 / 0.9, "Q": 1 / 0.9, "R": 1.2, "S": 1.0})


def test_a_run_reports_the_bias_and_applies_it_from_min_audits_on(tmp_path):
    sim = simulator()
    frames = sim.simulate_portfolio(
        40,
        seed=7,
        start=dt.date(2023, 10, 1),
        years=2,
        audit_share=0.6,
        annual_share=0.0,
        stations=1,
        fault_rates={"wasteful": 0.0},
    )
    paths = sim.write_portfolio(frames, tmp_path / "in")

    def run(name, min_audits):
        runner.run(
            overrides={
                "inputs": {k: str(paths[k]) for k in ("buildings", "readings", "weather")},
                "store": {"database": str(tmp_path / f"{name}.duckdb")},
                "analysis": {"as_of": "2025-10-15"},
                "output": {"sheets": False},
                "learning": {"min_audits": min_audits},
            },
            out_dir=str(tmp_path / name),
            force=True,
            quiet=True,
        )
        return (
            json.loads((tmp_path / name / "summary.json").read_text())["audit_bias"],
            pl.read_csv(tmp_path / name / "ranking.csv", infer_schema_length=None),
        )

    off, r_off = run("off", 1_000_000)
    on, r_on = run("on", 2)
    assert off["groups_applied"] == 0 and not any(g["applied"] for g in off["groups"])
    applied = [g for g in on["groups"] if g["applied"]]
    assert applied and all(g["n_audits"] >= 2 and g["quantity"] != "balance_point" for g in applied)
    assert (
        on["min_audits"] == 2
        and sum(g["n_audits"] for g in on["groups"] if g["quantity"] == "ua_total")
        == frames["buildings"]["ua_total"].is_not_null().sum()
    )
    # a building with its own audited UA and efficiency keeps its expectation; the others move by the factor
    b = frames["buildings"]
    own = b.filter(pl.col("ua_total").is_not_null() & pl.col("heating_efficiency").is_not_null())["building_id"]
    j = r_off.select("building_id", pl.col("expected_heating").alias("e0")).join(
        r_on.select("building_id", pl.col("expected_heating").alias("e1")), on="building_id"
    )
    same = j.filter(pl.col("building_id").is_in(own.implode()))
    assert same.height and (same["e0"] - same["e1"]).abs().max() <= 1e-6 * same["e0"].abs().max()
    assert (j["e0"] != j["e1"]).any()


def test_the_bias_from_the_audited_buildings_alone_equals_the_one_over_every_building():
    # pipeline._audit_bias estimates the envelope of the audited buildings only (memory at 10^6 buildings);
    # the bias must be the one computed from every building's estimates
    from screening import envelope as env
    from screening import learning, pipeline
    from screening.ingest import ReadOptions
    from screening.resources import sample_portfolio_dir

    b = pipeline.read_file("buildings", str(sample_portfolio_dir() / "buildings.csv"), ReadOptions(units="IP")).df
    cols = [c for c in pipeline._AUDITED if c in b.columns]
    audited = b.select(pl.any_horizontal([pl.col(c).is_not_null() for c in cols])).to_series()
    assert 0 < int(audited.sum()) < b.height
    envelope = env.estimate_envelope(b)
    dflt = env.estimate_envelope(b.with_columns([pl.lit(None, dtype=pl.Float64).alias(c) for c in cols]))
    given = b.select(
        "building_id",
        *[
            pl.col(c).cast(pl.Float64) if c in cols else pl.lit(None, dtype=pl.Float64).alias(c)
            for c in pipeline._AUDITED
        ],
    ).join(envelope.select("building_id", "era", "use_type"), on="building_id", how="inner")
    whole = learning.audit_bias(given, dflt, min_audits=2)
    got = pipeline._audit_bias(b, 2)
    assert got is not None and got.height > 0 and got.equals(whole)
