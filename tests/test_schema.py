"""The declared schema (screening/schema.py) against every layer that uses it: ingest, events, envelope,
weather, units, config, sql/schema.sql and README's input tables. Any drift fails here."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from screening import config, envelope, events, ingest, metered, pipeline, schema, units, weather

ROOT = Path(__file__).resolve().parents[1]
SQL_TYPE = {
    "id": "VARCHAR",
    "text": "VARCHAR",
    "choice": "VARCHAR",
    "float": "DOUBLE",
    "int": "INTEGER",
    "bool": "BOOLEAN",
    "date": "DATE",
}


@pytest.mark.parametrize(
    "layer, kind",
    [(ingest.BUILDING_COLUMNS, "buildings"), (ingest.READING_COLUMNS, "readings"), (events.EVENT_COLUMNS, "events")],
)
def test_readers_check_the_declared_columns_and_limits(layer, kind):
    declared = {c.name: c for c in schema.FILES[kind]}
    assert [s[0] for s in layer] == list(declared)
    for col, canon, k, required, o in layer:
        c = declared[col]
        assert (canon, k, required) == (c.canon, c.kind, c.required), col
        assert (o.get("min"), o.get("max"), o.get("excl", False), o.get("si")) == (c.lo, c.hi, c.lo_open, c.si), col
        assert tuple(o.get("choices", ())) == c.choices, col


def test_vocabularies_are_the_declared_ones():
    assert ingest.USE_TYPES == envelope.USE_TYPES == tuple(schema.USE_TYPES)
    assert ingest.FUELS == envelope.FUELS == units.FUELS == tuple(schema.FUELS)
    assert envelope.ERAS == schema.ERAS and envelope._ERA_EDGES == schema.ERA_EDGES
    assert events.EVENT_KINDS == tuple(schema.EVENT_KINDS) and events.FINDINGS == tuple(schema.FINDINGS)
    assert set(config.DEFAULTS["prices"]) - {"currency"} == set(schema.FUELS)
    assert config.UNITS == schema.UNIT_SYSTEMS
    assert pipeline.DATA_ISSUE_CODES == schema.issue_codes()
    assert metered.ISSUE_CODES == schema.issue_codes("metered")
    assert pipeline.KBTU_TO_KWH == schema.KBTU_TO_KWH
    for c in schema.BUILDINGS + schema.READINGS + schema.WEATHER + schema.EVENTS:
        assert c.meaning, c.name
        if c.kind in ("float", "int"):
            assert c.unit_ip and c.unit_si, c.name


def test_kbtu_to_kwh_against_pint():
    pint = pytest.importorskip("pint")
    ref = pint.UnitRegistry().Quantity(1000.0, "Btu_it").to("kWh").magnitude  # pint's Btu_IT, NIST SP 811
    assert schema.KBTU_TO_KWH == pytest.approx(ref, rel=1e-13)


def test_config_maps_to_the_declared_columns():
    names = config.column_names()
    assert names["buildings"] == [c.name for c in schema.BUILDINGS]
    assert names["readings"] == [c.name for c in schema.READINGS] + [schema.READ_DATE]
    assert names["weather"] == [c.name for c in schema.WEATHER]


def test_weather_limits_are_the_declared_ones():
    for name in ("t_min", "t_max", "t_mean"):
        c = schema.column("weather", name)
        assert c.lo is not None and c.lo_si is not None
        assert (-c.lo, c.hi) == (weather._LIMITS["F"], weather._LIMITS["F"])
        assert (-c.lo_si, c.hi_si) == (weather._LIMITS["C"], weather._LIMITS["C"])
    assert weather._OUR_DAILY == tuple(c.name for c in schema.WEATHER)


def _one_building(**given) -> pl.DataFrame:
    row = {"building_id": "B1", "use_type": "office", "floor_area_ft2": 20_000.0, "heating_fuel": "natural_gas"}
    return pl.DataFrame([row | given])


@pytest.mark.parametrize(
    "c",
    [c for c in schema.BUILDINGS if c.kind in ("float", "int") and c.canon not in ("heat_content", "price")],
    ids=lambda c: c.name,
)
def test_envelope_refuses_exactly_what_ingest_refuses(c, tmp_path):
    # behaviour, not tables: at the declared limit both layers accept, just beyond it both refuse
    top = 2100.0 if c.hi == "this_year" else float(c.hi)
    if c.hi == "this_year":  # ingest's upper limit is the clock's year; envelope (pure) takes up to 2100
        assert envelope._YEAR_BUILT == (float(c.lo), 2100.0)
        return
    eff = {"heating_efficiency": "electricity"}
    fuel = eff.get(c.canon, "natural_gas")
    envelope.estimate_envelope(_one_building(heating_fuel=fuel, **{c.canon: top}))
    with pytest.raises(ValueError, match=c.canon):
        envelope.estimate_envelope(_one_building(heating_fuel=fuel, **{c.canon: top * (1 + 1e-6) + 1e-6}))
    low = float(c.lo)
    if c.lo_open:
        with pytest.raises(ValueError, match=c.canon):
            envelope.estimate_envelope(_one_building(heating_fuel=fuel, **{c.canon: low}))
    else:
        envelope.estimate_envelope(_one_building(heating_fuel=fuel, **{c.canon: low}))
        with pytest.raises(ValueError, match=c.canon):
            envelope.estimate_envelope(_one_building(heating_fuel=fuel, **{c.canon: low - 1e-3}))
    # ingest: the same two values
    header = "building_id,name,station_id,use_type,floor_area,heating_fuel"
    base = "B1,One,S1,office,20000,{fuel}".format(fuel=fuel)
    p = tmp_path / "b.csv"
    if c.name == "floor_area":
        p.write_text(f"{header}\n" + f"B1,One,S1,office,{top!r},{fuel}\nB2,Two,S1,office,{top * 1.001!r},{fuel}\n")
    else:
        p.write_text(f"{header},{c.name}\n{base},{top!r}\n" + base.replace("B1", "B2") + f",{top * 1.001 + 1e-3!r}\n")
    ld = ingest.read_buildings(p)
    assert ld.df["building_id"].to_list() == ["B1"], (c.name, ld.rejects)
    assert ld.rejects["column"].to_list() == [c.name]


def test_envelope_takes_an_si_value_at_its_limit():
    # an SI file value at the limit, converted to IP, may land a rounding step beyond the IP limit
    top = float(schema.column("buildings", "setpoint").hi) * (1 + 1e-12)
    envelope.estimate_envelope(_one_building(setpoint_f=top))
    assert np.isfinite(top)


def _sql_tables() -> dict[str, list[tuple[str, str]]]:
    text = (ROOT / "sql" / "schema.sql").read_text(encoding="utf-8")
    out = {}
    for m in re.finditer(r"CREATE TABLE IF NOT EXISTS (\w+) \((.*?)\n\);", text, re.S):
        cols = []
        for line in m.group(2).splitlines():
            line = line.strip()
            if not line or line.startswith("--") or line.startswith("PRIMARY KEY"):
                continue
            name, typ = line.rstrip(",").split()[:2]
            cols.append((name, typ))
        out[m.group(1)] = cols
    return out


@pytest.mark.parametrize(
    "table, kind", [("buildings", "buildings"), ("readings", "readings"), ("weather_daily", "weather")]
)
def test_sql_tables_hold_the_declared_columns(table, kind):
    cols = dict(_sql_tables()[table])
    assert cols.pop("source_file") == "VARCHAR" and cols.pop("source_line") == "BIGINT"
    assert cols == {c.canon: SQL_TYPE[c.kind] for c in schema.FILES[kind]}


def _readme_table(heading: str) -> dict[str, bool]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    sec = text.split(heading, 1)[1].split("\n\n", 2)[1]
    out = {}
    for m in re.finditer(r"^\| ([a-z_, ]+) \| (yes|no) \|", sec, re.M):
        for name in m.group(1).split(","):
            out[name.strip()] = m.group(2) == "yes"
    return out


def test_readme_input_tables_list_the_declared_columns():
    assert _readme_table("**buildings.csv**") == {c.name: c.required for c in schema.BUILDINGS}
    assert _readme_table("**events.csv**") == {c.name: c.required for c in schema.EVENTS}
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for kind in ("readings", "weather"):
        para = text.split(f"**{kind}.csv**", 1)[1].split("\n\n", 1)[0]
        named = set(re.findall(r"`([a-z_, ]+)`", para))
        words = {w.strip() for n in named for w in n.split(",")}
        assert {c.name for c in schema.FILES[kind]} <= words, kind
