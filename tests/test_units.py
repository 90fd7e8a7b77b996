"""Checks of screening.units against published heat contents and pint (Btu_it) conversions."""

from datetime import date

import pint
import polars as pl
import pytest

from screening import refdata
from screening.units import btu_per_unit, convert_to_kbtu, heat_content_table

Q = pint.UnitRegistry()
Q.define("billing_therm = 1e5 * Btu_it")  # billing therm = 100,000 Btu_IT (docs/factors.md §8; EIA FAQ 987)


def _readings(rows):
    cols = ["building_id", "fuel", "quantity", "unit"]
    df = pl.DataFrame([dict(zip(cols, r)) for r in rows])
    n = df.height
    return df.with_columns(
        pl.lit(date(2025, 1, 1)).alias("period_start"),
        pl.lit(date(2025, 1, 31)).alias("period_end"),
        pl.lit(False).alias("estimated"),
        pl.lit(None, pl.Float64).alias("cost"),
        pl.Series("_line", list(range(2, n + 2)), dtype=pl.Int64),
    )


BLD = pl.DataFrame(
    {
        "building_id": ["g", "o", "s", "e"],
        "heating_fuel": ["natural_gas", "fuel_oil", "district_steam", "electricity"],
        "heat_content": [None, None, None, None],
    },
    schema_overrides={"heat_content": pl.Float64},
)


def _kbtu(unit, fuel, q=1.0, bld=None, **kw):
    bid = {"natural_gas": "g", "fuel_oil": "o", "district_steam": "s"}.get(fuel, "e")
    ok, rej = convert_to_kbtu(_readings([(bid, fuel, q, unit)]), bld if bld is not None else BLD, **kw)
    assert rej.height == 0, rej.to_dicts()
    return ok["energy_kbtu"][0]


def test_heat_contents_match_their_sources():
    hc = dict(heat_content_table().select("fuel", "btu_per_base").iter_rows())
    assert hc["natural_gas"] == 1036  # EIA Heat Content of Natural Gas Consumed, US 2025 (docs/factors.md §1 [S1])
    assert hc["fuel_oil"] == 138_500  # EIA, No. 2 heating oil Btu/gal (docs/factors.md §1 [S2])
    assert hc["propane"] == 91_452  # EIA, propane Btu/gal (docs/factors.md §1 [S2])
    assert hc["kerosene"] == 135_000  # 40 CFR 98 Table C-1, 0.135 MMBtu/gal (docs/factors.md §1 [S6])
    assert hc["district_steam"] == 1_000  # common practice: 1 Mlb = 1 MMBtu (docs/factors.md §1, from memory)
    t = refdata.load("units")
    assert t.filter(pl.col("source").str.len_chars() < 10).height == 0


def test_definitions():
    assert _kbtu("therm", "natural_gas") == pytest.approx(100.0, rel=1e-15)  # 1 therm = 100,000 Btu (EIA FAQ 987)
    assert _kbtu("kWh", "electricity") == pytest.approx(3.41214, rel=1e-6)  # 1 kWh = 3,412.14 Btu (docs/factors.md §1)
    assert _kbtu("MMBtu", "district_steam") == 1000.0  # definition
    assert _kbtu("Dth", "natural_gas") == 1000.0  # 1 Dth = 10 therm (docs/factors.md §1)
    assert _kbtu("GJ", "natural_gas") == pytest.approx(947.817, rel=1e-6)  # 1 GJ = 947,817 Btu (docs/factors.md §8)
    assert _kbtu("Mlb", "district_steam") == pytest.approx(1000.0)  # 1 Mlb ≈ 1 MMBtu at 1,000 Btu/lb (common practice)


@pytest.mark.parametrize(
    "unit,fuel,pint_expr",
    [
        ("therm", "natural_gas", lambda: Q.Quantity(1, "billing_therm")),
        ("ccf", "natural_gas", lambda: Q.Quantity(100, "ft**3") * Q.Quantity(1036, "Btu_it/ft**3")),
        ("mcf", "natural_gas", lambda: Q.Quantity(1000, "ft**3") * Q.Quantity(1036, "Btu_it/ft**3")),
        ("m3", "natural_gas", lambda: Q.Quantity(1, "m**3").to("ft**3") * Q.Quantity(1036, "Btu_it/ft**3")),
        ("GJ", "natural_gas", lambda: Q.Quantity(1, "GJ")),
        ("kWh", "electricity", lambda: Q.Quantity(1, "kWh")),
        ("MWh", "electricity", lambda: Q.Quantity(1, "MWh")),
        ("MJ", "electricity", lambda: Q.Quantity(1, "MJ")),
        ("L", "fuel_oil", lambda: Q.Quantity(1, "L").to("gallon") * Q.Quantity(138_500, "Btu_it/gallon")),
        ("m3", "fuel_oil", lambda: Q.Quantity(1, "m**3").to("gallon") * Q.Quantity(138_500, "Btu_it/gallon")),
        ("lb", "district_steam", lambda: Q.Quantity(1, "lb") * Q.Quantity(1000, "Btu_it/lb")),
    ],
)
def test_round_trips_with_pint(unit, fuel, pint_expr):
    # reference: pint 0.25 Btu_it (1055.05585262 J) and US gallon; billing therm = 1e5 Btu_it (docs/factors.md §8)
    ref = pint_expr().to("Btu_it").magnitude / 1000.0  # [kBtu]
    got = _kbtu(unit, fuel, 7.5)
    assert got == pytest.approx(7.5 * ref, rel=1e-12)
    back = Q.Quantity(got * 1000.0, "Btu_it") / (pint_expr() / Q.Quantity(1, "dimensionless")).to("Btu_it")
    assert back.to("dimensionless").magnitude == pytest.approx(7.5, rel=1e-12)


def test_worked_example_ccf():
    # docs/factors.md §10 item 9 (C): 75.0 MMBtu = 723.9 ccf at 1,036 Btu/ft3 (ccf rounded to 0.1 -> rel 1e-4)
    assert _kbtu("ccf", "natural_gas", 723.9) == pytest.approx(75_000.0, rel=1e-4)


def test_overrides():
    # argument override of the gas heat content (a utility's printed 1.025 therm/ccf -> 1,025 Btu/ft3, by hand)
    assert _kbtu("ccf", "natural_gas", gas_btu_per_ft3=1025) == pytest.approx(102.5, rel=1e-15)
    assert _kbtu("Mlb", "district_steam", steam_btu_per_lb=1194) == pytest.approx(1194.0, rel=1e-15)
    # per-building column wins over the argument (by hand: 2 ccf x 100 ft3 x 1,050 Btu/ft3)
    b = BLD.with_columns(pl.when(pl.col("building_id") == "g").then(1050.0).otherwise(None).alias("heat_content"))
    assert _kbtu("ccf", "natural_gas", 2.0, bld=b, gas_btu_per_ft3=1025) == pytest.approx(210.0, rel=1e-15)
    # energy units ignore heat contents
    assert _kbtu("therm", "natural_gas", 1.0, bld=b) == pytest.approx(100.0)
    with pytest.raises(ValueError, match=r"gas_btu_per_ft3=1\.036 is outside"):
        convert_to_kbtu(_readings([("g", "natural_gas", 1.0, "ccf")]), BLD, gas_btu_per_ft3=1.036)
    bad = BLD.with_columns(pl.when(pl.col("building_id") == "g").then(1.025).otherwise(None).alias("heat_content"))
    with pytest.raises(ValueError, match=r"heat_content=1\.025 for building 'g'"):
        convert_to_kbtu(_readings([("g", "natural_gas", 1.0, "ccf")]), bad)
    bad_e = BLD.with_columns(pl.when(pl.col("building_id") == "e").then(3412.0).otherwise(None).alias("heat_content"))
    with pytest.raises(ValueError, match="metered in energy units only"):
        convert_to_kbtu(_readings([("e", "electricity", 1.0, "kWh")]), bad_e)


def test_rejects_and_other_fuels():
    rows = [
        ("g", "natural_gas", 10.0, "gal"),  # gallons of natural gas
        ("g", "natural_gas", 10.0, "furlong"),  # unknown unit
        ("g", "coal", 10.0, "lb"),  # unknown fuel
        ("g", "natural_gas", -1.0, "therm"),  # negative
        ("zz", "natural_gas", 1.0, "therm"),  # unknown building
        ("o", "electricity", 1.0, "gal"),  # gallons of electricity
        ("g", "electricity", 500.0, "KWH"),  # a second fuel, kept, case-insensitive unit
        ("o", "kerosene", 2.0, "gal"),
    ]  # not an input fuel (screening.schema.FUELS)
    ok, rej = convert_to_kbtu(_readings(rows), BLD)
    reasons = dict(zip(rej["line"], rej["reason"]))
    assert rej.columns == ["line", "column", "value", "reason"]
    assert reasons[2].startswith("unit gal is not a unit of natural_gas")
    assert reasons[3] == "unknown unit"
    assert reasons[4].startswith("unknown fuel")
    assert reasons[5] == "negative quantity"
    assert reasons[6].startswith("unknown building")
    assert reasons[7].startswith("unit gal is not a unit of electricity")
    assert reasons[9].startswith("unknown fuel")
    assert set(rej["line"]) == {2, 3, 4, 5, 6, 7, 9}
    assert ok["unit"].to_list() == ["kWh"]
    assert ok["is_heating_fuel"].to_list() == [False]
    assert ok["energy_kbtu"][0] == pytest.approx(500 * 3.412141633, rel=1e-9)  # exact kWh (docs/factors.md §8)
    assert ok["days"].to_list() == [31]


def test_end_before_start_and_missing_column():
    r = _readings([("g", "natural_gas", 1.0, "therm")]).with_columns(pl.lit(date(2024, 12, 1)).alias("period_end"))
    ok, rej = convert_to_kbtu(r, BLD)
    assert ok.height == 0 and rej["column"][0] == "period_end"
    with pytest.raises(ValueError, match=r"readings: missing column\(s\) \['unit'\]"):
        convert_to_kbtu(r.drop("unit"), BLD)


def test_btu_per_unit():
    assert btu_per_unit("ccf", "natural_gas") == pytest.approx(103_600.0)  # 100 ft3 x 1,036 (EIA)
    assert btu_per_unit("gal", "propane") == 91_452  # EIA
    with pytest.raises(ValueError, match="unit='gal' is not a unit of fuel='natural_gas'"):
        btu_per_unit("gal", "natural_gas")


def test_billed_units_name_the_bills_unit_and_its_energy():
    """The unit of most of a building's heating-fuel readings and kBtu per unit as converted.
    Check values by definition: 1 therm = 100,000 Btu (EIA); 1 ccf = 100 ft³ × 1,036 Btu/ft³ (the default
    heat content, EIA US average) = 103.6 kBtu; 1 kWh = 3.412141633 kBtu (NIST SP 811); an energy-unit
    reading of another fuel does not count."""
    from screening.units import billed_units

    r = pl.DataFrame(
        {
            "building_id": ["A", "A", "A", "B", "B", "C", "C"],
            "fuel": [
                "natural_gas",
                "natural_gas",
                "natural_gas",
                "natural_gas",
                "electricity",
                "electricity",
                "electricity",
            ],
            "period_start": [date(2025, 1, 1)] * 7,
            "period_end": [date(2025, 1, 31)] * 7,
            "quantity": [100.0, 200.0, 50.0, 10.0, 999.0, 1000.0, 0.0],
            "unit": ["ccf", "ccf", "therm", "ccf", "kWh", "kWh", "kWh"],
        }
    )
    b = pl.DataFrame({"building_id": ["A", "B", "C"], "heating_fuel": ["natural_gas", "natural_gas", "electricity"]})
    conv, rej = convert_to_kbtu(r, b)
    assert rej.height == 0
    out = {row["building_id"]: row for row in billed_units(conv).iter_rows(named=True)}
    assert out["A"]["billed_unit"] == "ccf" and out["A"]["kbtu_per_billed_unit"] == pytest.approx(103.6)
    assert out["B"]["billed_unit"] == "ccf" and out["B"]["kbtu_per_billed_unit"] == pytest.approx(103.6)
    assert out["C"]["billed_unit"] == "kWh" and out["C"]["kbtu_per_billed_unit"] == pytest.approx(3.412141633)
    assert billed_units(conv.head(0)).height == 0


def test_rows_in_order_or_not_convert_the_same():
    """Readings in their sorted order (as the store hands a chunk over: no sort) and shuffled give the same
    frames, the same flags and one chunk; unit spellings, padded fuels and rejects are worked out per pair."""
    rows = [
        ("g", "natural_gas", 10.0, "ccf"),
        ("g", " natural_gas", 12.0, " CCF"),
        ("g", "natural_gas", 3.0, "therm"),
        ("o", "fuel_oil", 100.0, "gal"),
        ("o", "fuel_oil", 5.0, "ccf"),  # not a unit of oil
        ("s", "district_steam", 2.0, "Mlb"),
        ("e", "electricity", 900.0, "kWh"),
        ("x", "electricity", 1.0, "kWh"),  # unknown building
        ("e", "coal", 1.0, "kWh"),  # unknown fuel
        ("e", "electricity", None, "kWh"),
    ]
    r = _readings(rows).with_columns(
        pl.Series("period_start", [date(2025, 1 + k % 3, 1) for k in range(len(rows))]),
        pl.Series("period_end", [date(2025, 1 + k % 3, 28) for k in range(len(rows))]),
    )
    a_ok, a_rej = convert_to_kbtu(r.sample(fraction=1.0, shuffle=True, seed=3), BLD)
    b_ok, b_rej = convert_to_kbtu(r.sort("building_id", "fuel", "period_start", "period_end", "_line"), BLD)
    assert a_ok.equals(b_ok) and a_rej.equals(b_rej)
    assert [a_ok[c].flags for c in a_ok.columns] == [b_ok[c].flags for c in b_ok.columns]
    assert b_ok.n_chunks() == 1
    assert sorted(a_rej["reason"].to_list())[0].startswith("missing quantity")
    assert a_rej.height == 4 and a_ok.height == 6
    assert set(a_ok["unit"].to_list()) == {"ccf", "therm", "gal", "Mlb", "kWh"}
