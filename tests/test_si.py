"""The same portfolio in SI and in IP gives the same answer (issue 4: within 0.1 %).

The shared tiny portfolio (tests/conftest.py) is converted to SI with pint, at full precision:
floor area ft² → m², temperatures °F → °C, UA Btu/(h·°F) → W/K, balance point °F → °C. Readings
keep their own units (therm, gal, kWh are valid in either system). Both are run through
``ddscreen run`` and ranking.csv is compared after converting the SI outputs back with pint.
"""

from __future__ import annotations

import csv
import io

import pint
import polars as pl
import pytest

from tests.conftest import cli, portfolio_text

U = pint.UnitRegistry()
Q = U.Quantity


def _to_si(text: dict[str, str]) -> dict[str, str]:
    out = dict(text)
    rows = list(csv.DictReader(io.StringIO(text["buildings"])))
    ft2_m2 = Q(1, "ft**2").to("m**2").magnitude
    uaf = Q(1, "Btu_it/hour/delta_degF").to("W/K").magnitude
    for r in rows:
        r["floor_area"] = repr(float(r["floor_area"]) * ft2_m2)
        if r["ua_total"]:
            r["ua_total"] = repr(float(r["ua_total"]) * uaf)
        if r["balance_point"]:
            r["balance_point"] = repr(Q(float(r["balance_point"]), "degF").to("degC").magnitude)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
    w.writeheader()
    w.writerows(rows)
    out["buildings"] = buf.getvalue()
    wrows = list(csv.DictReader(io.StringIO(text["weather"])))
    for r in wrows:
        for c in ("t_min", "t_max", "t_mean"):
            if r.get(c):
                r[c] = repr(Q(float(r[c]), "degF").to("degC").magnitude)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(wrows[0]), lineterminator="\n")
    w.writeheader()
    w.writerows(wrows)
    out["weather"] = buf.getvalue()
    return out


def _run(tmp_path, name: str, text: dict[str, str], units: str) -> pl.DataFrame:
    d = tmp_path / name
    d.mkdir()
    for k, v in text.items():
        (d / f"{k}.csv").write_text(v, encoding="utf-8")
    res = cli(
        [
            "run",
            "--buildings",
            str(d / "buildings.csv"),
            "--readings",
            str(d / "readings.csv"),
            "--weather",
            str(d / "weather.csv"),
            "--out",
            str(d / "out"),
            "--db",
            str(d / "db.duckdb"),
            "--as-of",
            "2025-01-15",
            "--units",
            units,
            "--no-sheets",
            "--quiet",
        ]
    )
    assert res.exit_code == 0, res.stderr
    return pl.read_csv(d / "out" / "ranking.csv", infer_schema_length=None)


def test_si_and_ip_agree_within_0_1_percent(tmp_path):
    text = portfolio_text()
    ip = _run(tmp_path, "ip", text, "IP")
    si = _run(tmp_path, "si", _to_si(text), "SI")
    j = ip.join(si, on="building_id", suffix="_si")
    kwh = Q(1000, "Btu_it").to("kWh").magnitude  # 1 kBtu in kWh (pint)
    assert si["energy_unit"].unique().to_list() == ["kWh"]
    for r in j.iter_rows(named=True):
        assert r["tier_si"] == r["tier"]
        assert r["rank_si"] == r["rank"]
        assert r["ratio_si"] == pytest.approx(r["ratio"], rel=1e-3)
        assert r["expected_heating_si"] == pytest.approx(r["expected_heating"] * kwh, rel=1e-3)
        assert r["actual_heating_si"] == pytest.approx(r["actual_heating"] * kwh, rel=1e-3)
        assert r["floor_area_si"] == pytest.approx(Q(r["floor_area"], "ft**2").to("m**2").magnitude, rel=1e-3)
        assert r["base_temperature_si"] == pytest.approx(
            Q(r["base_temperature"], "degF").to("degC").magnitude, abs=0.02
        )
        # K·day = °F·day / 1.8 (docs/degree-days.md §7)
        assert r["hdd_si"] == pytest.approx(r["hdd"] / 1.8, rel=1e-3)
        # Wh/(m²·K·day) = 5.678263 × Btu/(ft²·°F·day) (docs/factors.md §8), checked with pint
        f = Q(1, "Btu_it/(ft**2*delta_degF)").to("W*hour/(m**2*K)").magnitude
        assert r["heating_intensity_si"] == pytest.approx(r["heating_intensity"] * f, rel=1e-3)


def test_si_assumptions_are_converted(tmp_path):
    text = portfolio_text()
    _run(tmp_path, "ip", text, "IP")
    _run(tmp_path, "si", _to_si(text), "SI")
    ip = pl.read_csv(tmp_path / "ip" / "out" / "assumptions.csv", infer_schema_length=None)
    si = pl.read_csv(tmp_path / "si" / "out" / "assumptions.csv", infer_schema_length=None)
    j = ip.join(si, on=["building_id", "name"], suffix="_si")
    assert j.height == ip.height == si.height
    u = Q(1, "Btu_it/(hour*ft**2*delta_degF)").to("W/(m**2*K)").magnitude  # 5.678263 (docs/factors.md §8)
    wall = j.filter(pl.col("name") == "wall U-factor")
    assert (wall["value_si"] / wall["value"] - u).abs().max() < 1e-6
    assert set(wall["unit_si"]) == {"W/(m²·K)"} and set(wall["unit"]) == {"Btu/h·ft²·°F"}
    sp = j.filter(pl.col("name") == "heating setpoint")
    for r in sp.iter_rows(named=True):
        assert r["value_si"] == pytest.approx(Q(r["value"], "degF").to("degC").magnitude, abs=1e-9)
        assert r["high_si"] == pytest.approx(Q(r["high"], "degF").to("degC").magnitude, abs=1e-9)
    sb = j.filter(pl.col("name") == "setback depth")
    assert ((sb["value_si"] - sb["value"] / 1.8).abs() < 1e-9).all()  # a difference: K = °F / 1.8
