"""Small portfolios get a verdict (issue 14, "Any portfolio size").

Portfolios of 1, 2 and 7 buildings with audited ``ua_total``, ``heating_efficiency`` and
``balance_point``; their bills follow the degree-day method (``24·UA·HDD(balance point)/η``, as in
``conftest.py``) times a factor per building, with ±3 % month-to-month noise (seeded), plus a constant
baseload. Peers are too few for robust statistics, so the evidence scale is the model's own band (1 and
2 buildings) or a blend of the band and the peers' spread (7 buildings of one use type). A building at
1.6× or more of its audited expectation is on the audit list; none of the normal ones is.
"""

from __future__ import annotations

import json

import numpy as np
import polars as pl
import pytest

from screening import runner

from .conftest import (
    AS_OF,
    BASE_BTU_PER_DAY_FT2,
    BTU_PER_UNIT,
    BUILDING_HEADER,
    READING_HEADER,
    WEATHER_HEADER,
    _csv,
    daily_weather,
    month_periods,
)

HEADER = BUILDING_HEADER[:11]  # the fixture buildings without address and city


def _write(folder, buildings, seed=7):
    """buildings: (id, use type, area ft², UA, η, balance °F, factor on heating)."""
    folder.mkdir(parents=True, exist_ok=True)
    wx = daily_weather()
    days, mean = wx["alder-flats"]
    rng = np.random.default_rng(seed)
    b_rows, r_rows = [], []
    for i, (bid, use, area, ua, eta, bal, factor) in enumerate(buildings):
        b_rows.append(
            [
                bid,
                f"Invented building {i + 1}",
                "alder-flats",
                use,
                f"{area:.0f}",
                1990,
                2,
                "natural_gas",
                eta,
                f"{ua:.0f}",
                bal,
            ]
        )
        hdd = np.maximum(0.0, bal - mean)
        for s, e in month_periods():
            sel = (days >= np.datetime64(s)) & (days <= np.datetime64(e))
            heat = 24.0 * ua * hdd[sel].sum() / eta * factor * (1 + 0.03 * rng.standard_normal())
            q = (heat + BASE_BTU_PER_DAY_FT2 * area * int(sel.sum())) / BTU_PER_UNIT["therm"]
            r_rows.append([bid, "natural_gas", s.isoformat(), e.isoformat(), f"{q:.2f}", "therm", "false", ""])
    w_rows = [["alder-flats", d, f"{t - 8.0:.1f}", f"{t + 8.0:.1f}"] for d, t in zip(days.astype(str), mean)]
    (folder / "buildings.csv").write_text(_csv(HEADER, b_rows), encoding="utf-8")
    (folder / "readings.csv").write_text(_csv(READING_HEADER, r_rows), encoding="utf-8")
    (folder / "weather.csv").write_text(_csv(WEATHER_HEADER, w_rows), encoding="utf-8")


def _run(tmp_path, buildings):
    _write(tmp_path / "in", buildings)
    overrides = {
        "inputs": {k: str(tmp_path / "in" / f"{k}.csv") for k in ("buildings", "readings", "weather")},
        "store": {"database": str(tmp_path / "s.duckdb")},
        "analysis": {"as_of": AS_OF},
        "output": {"sheets": False},
    }
    runner.run(overrides=overrides, out_dir=str(tmp_path / "out"), force=True, quiet=True)
    rk = pl.read_csv(tmp_path / "out" / "ranking.csv", infer_schema_length=None)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    return {r["building_id"]: r for r in rk.iter_rows(named=True)}, summary


def test_one_building_at_1_6_times_its_audited_expectation_is_on_the_list(tmp_path):
    rows, summary = _run(tmp_path, [("S1", "office", 40000.0, 9000.0, 0.80, 58.0, 1.6)])
    r = rows["S1"]
    assert r["ratio"] == pytest.approx(1.6, rel=0.05)
    assert r["needs_review"] is True and r["review_path"] == "level"
    assert r["evidence_scale"] == "model band" and r["peer_weight"] == 0
    assert summary["counts"]["evidence_scale"] == {"model band": 1}
    assert r["expected_recoverable_cost"] > 0 and r["tier"] in ("Audit first", "Audit soon")


def test_one_normal_building_is_not(tmp_path):
    rows, _ = _run(tmp_path, [("S1", "office", 40000.0, 9000.0, 0.80, 58.0, 1.0)])
    assert rows["S1"]["needs_review"] is False
    assert rows["S1"]["evidence_scale"] == "model band"


def test_two_buildings_one_doubled(tmp_path):
    rows, summary = _run(
        tmp_path,
        [("S1", "office", 40000.0, 9000.0, 0.80, 58.0, 2.0), ("S2", "multifamily", 30000.0, 10000.0, 0.78, 60.0, 1.0)],
    )
    assert rows["S1"]["needs_review"] is True
    assert rows["S2"]["needs_review"] is False
    assert rows["S1"]["rank"] == 1
    assert summary["counts"]["evidence_scale"] == {"model band": 2}
    # the sentence names a mechanism only where its own evidence supports it: the doubled slope
    assert "heat loss" in rows["S1"]["waste_kind"] and "outdoor air" in rows["S1"]["waste_kind"]
    assert "check" not in rows["S2"]["waste_kind"]
    # each mechanism's excess in money and CO2e at the building's own price and factor per unit of energy,
    # the same as the expected recoverable figures' (by hand: cost / energy is one price)
    r = rows["S1"]
    price = r["expected_recoverable_cost"] / r["expected_recoverable_energy"]
    co2 = r["expected_recoverable_co2e"] / r["expected_recoverable_energy"]
    assert r["excess_heat_loss"] > 0
    for m in ("heat_loss", "controls", "baseload"):
        assert r[f"excess_{m}_cost"] == pytest.approx(r[f"excess_{m}"] * price, rel=1e-3, abs=0.01), m
        assert r[f"excess_{m}_co2e"] == pytest.approx(r[f"excess_{m}"] * co2, rel=1e-3, abs=0.1), m


def test_seven_buildings_two_wasteful(tmp_path):
    factors = {"S1": 2.22, "S2": 1.67, "S3": 0.87, "S4": 0.93, "S5": 1.0, "S6": 1.04, "S7": 1.08}
    sizes = [
        (38000.0, 8200.0, 0.80, 58.0),
        (52000.0, 12500.0, 0.82, 57.0),
        (24000.0, 6100.0, 0.78, 59.0),
        (61000.0, 13800.0, 0.85, 56.0),
        (30000.0, 7400.0, 0.80, 60.0),
        (45000.0, 9900.0, 0.79, 58.5),
        (27000.0, 6600.0, 0.81, 57.5),
    ]
    rows, summary = _run(tmp_path, [(bid, "office", *sz, f) for (bid, f), sz in zip(factors.items(), sizes)])
    for bid, f in factors.items():
        assert rows[bid]["ratio"] == pytest.approx(f, rel=0.06), bid
        assert rows[bid]["needs_review"] is (f >= 1.6), bid
    # seven peers: the peers' spread weighs 7 / (7 + peer_prior 3) = 0.7, the model band the rest
    assert {r["evidence_scale"] for r in rows.values()} == {"blend"}
    assert rows["S1"]["peer_weight"] == pytest.approx(0.7)
    assert summary["counts"]["evidence_scale"] == {"blend": 7}
    assert {rows["S1"]["rank"], rows["S2"]["rank"]} == {1, 2}


def test_audit_plan_lists_this_quarters_visits(tmp_path):
    factors = {"S1": 2.22, "S2": 1.67, "S3": 0.87, "S4": 1.0}
    sizes = [
        (38000.0, 8200.0, 0.80, 58.0),
        (52000.0, 12500.0, 0.82, 57.0),
        (24000.0, 6100.0, 0.78, 59.0),
        (61000.0, 13800.0, 0.85, 56.0),
    ]
    bld = [(bid, "office", *sz, f) for (bid, f), sz in zip(factors.items(), sizes)]
    rows, summary = _run(tmp_path, bld)
    plan = pl.read_csv(tmp_path / "out" / "audit_plan.csv")
    assert plan["building_id"].to_list() == ["S1", "S2"]  # the two wasters, in rank order
    assert plan["rank"].to_list() == [1, 2] and plan["visit"].to_list() == [1, 2]
    share = plan["cumulative_share"].to_list()
    assert share == sorted(share) and 0 < share[-1] <= 1
    assert all("check" in k for k in plan["waste_kind"])
    assert summary["counts"]["audit_plan"] == 2
    # one visit a quarter: only the first; the second is still worth a visit, later
    _write(tmp_path / "in", bld)
    overrides = {
        "inputs": {k: str(tmp_path / "in" / f"{k}.csv") for k in ("buildings", "readings", "weather")},
        "store": {"database": str(tmp_path / "s.duckdb")},
        "analysis": {"as_of": AS_OF},
        "output": {"sheets": False},
        "plan": {"audits_per_quarter": 1},
    }
    runner.run(overrides=overrides, out_dir=str(tmp_path / "out1"), force=True, quiet=True)
    assert pl.read_csv(tmp_path / "out1" / "audit_plan.csv")["building_id"].to_list() == ["S1"]
    rk = pl.read_csv(tmp_path / "out1" / "ranking.csv")
    assert rk.filter(pl.col("building_id") == "S2")["tier"][0] == "Audit soon"
    # a visit that costs more than any building's expected savings: nothing is planned
    overrides["plan"] = {"audit_cost": 1e8}
    runner.run(overrides=overrides, out_dir=str(tmp_path / "out2"), force=True, quiet=True)
    assert pl.read_csv(tmp_path / "out2" / "audit_plan.csv").height == 0
