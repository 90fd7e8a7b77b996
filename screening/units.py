"""Meter quantities to energy [kBtu]: units, heat contents, fuel/unit compatibility.

Layer 1: polars in, polars out; no files are read here except the packaged reference
table ``screening/data/units.csv`` through :func:`screening.refdata.load`.

Every factor comes from that table (each row has a source). A fuel accepts every energy
unit (therm, kWh, MMBtu, GJ, ...) and the physical units of its own dimension:

=====================  =================  ============================================
fuel                   physical dimension  default heat content (units.csv)
=====================  =================  ============================================
natural_gas            gas volume [ft³]    1,036 Btu/ft³ (EIA US average; argument
                                           ``gas_btu_per_ft3`` overrides)
fuel_oil               liquid [US gal]     138,500 Btu/gal (EIA, No. 2 oil)
propane                liquid [US gal]     91,452 Btu/gal (EIA)
kerosene               liquid [US gal]     135,000 Btu/gal (40 CFR 98 Table C-1)
district_steam         mass [lb]           1,000 Btu/lb (common practice, 1 Mlb ≈ 1 MMBtu;
                                           argument ``steam_btu_per_lb`` overrides)
electricity            energy units only
district_hot_water     energy units only (a volume of hot water needs a temperature drop)
=====================  =================  ============================================

Per-building override: the buildings column ``heat_content`` is the heat content of that
building's *heating fuel* in Btu per physical base unit (Btu/ft³ for natural gas, Btu/gal
for oil, propane and kerosene, Btu/lb for steam), e.g. 1,025 for a bill that prints
"1.025 therm per ccf". It applies to that building's readings of its heating fuel in a
physical unit (energy-unit readings need no heat content) and wins over the arguments.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import polars as pl

from . import refdata, schema
from .metered import sort_rows
from .schema import REJECT_SCHEMA

if TYPE_CHECKING:
    from polars.expr.whenthen import ChainedThen, Then

#: fuels of the input contract (:data:`screening.schema.FUELS`)
FUELS = tuple(schema.FUELS)

READING_COLUMNS = ("building_id", "fuel", "period_start", "period_end", "quantity", "unit")

#: rejects of this layer name no file (the caller adds it): the declared reject columns without ``file``
_REJECT_SCHEMA = pl.Schema({k: v for k, v in REJECT_SCHEMA.items() if k != "file"})


def unit_table() -> pl.DataFrame:
    """Unit rows of ``units.csv``: ``key`` (lower-case spelling), ``unit``, ``dimension``, ``factor``.

    ``factor`` is the size of one unit in its dimension's base: Btu (energy), ft³ (gas_volume),
    US gal (liquid_volume), lb (mass). Aliases are expanded to extra keys.
    """
    t = refdata.load("units").filter(pl.col("kind") == "unit")
    rows = []
    for name, dim, factor, aliases in t.select("name", "dimension", "factor", "aliases").iter_rows():
        keys = [name] + ([a for a in aliases.split(";") if a] if aliases else [])
        for k in keys:
            rows.append((k.strip().lower(), name, dim, float(factor)))
    out = pl.DataFrame(
        rows, schema={"key": pl.String, "unit": pl.String, "dimension": pl.String, "factor": pl.Float64}, orient="row"
    ).unique(["key", "dimension"], keep="first", maintain_order=True)
    return out


def heat_content_table(*, gas_btu_per_ft3: float | None = None, steam_btu_per_lb: float | None = None) -> pl.DataFrame:
    """Heat-content rows of ``units.csv`` with the configurable ones overridden.

    Returns ``fuel, dimension, btu_per_base, plausible_min, plausible_max`` where
    ``btu_per_base`` is [Btu/ft³], [Btu/gal] or [Btu/lb] (higher heating value).

    Raises
    ------
    ValueError
        When an override is outside the table's plausible range for that fuel.
    """
    t = (
        refdata.load("units")
        .filter(pl.col("kind") == "heat_content")
        .select(
            pl.col("name").alias("fuel"),
            "dimension",
            pl.col("factor").cast(pl.Float64).alias("btu_per_base"),
            "parameter",
            pl.col("plausible_min").cast(pl.Float64),
            pl.col("plausible_max").cast(pl.Float64),
        )
    )
    overrides = {"gas_btu_per_ft3": gas_btu_per_ft3, "steam_btu_per_lb": steam_btu_per_lb}
    for param, value in overrides.items():
        if value is None:
            continue
        row = t.filter(pl.col("parameter") == param)
        lo, hi = row["plausible_min"][0], row["plausible_max"][0]
        if not (lo <= float(value) <= hi):
            raise ValueError(
                f"{param}={value!r} is outside the plausible range {lo:g} to {hi:g} "
                f"(Btu per base unit of {row['fuel'][0]})"
            )
        t = t.with_columns(
            pl.when(pl.col("parameter") == param)
            .then(pl.lit(float(value)))
            .otherwise(pl.col("btu_per_base"))
            .alias("btu_per_base")
        )
    return t.drop("parameter")


def convert_to_kbtu(
    readings: pl.DataFrame,
    buildings: pl.DataFrame,
    *,
    gas_btu_per_ft3: float | None = None,
    steam_btu_per_lb: float | None = None,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Convert meter quantities to energy and reject rows that cannot be converted.

    ``energy_kbtu = quantity × factor_unit × heat_content / 1000`` where ``factor_unit`` is the
    unit's size in its base (Btu, ft³, gal or lb) and ``heat_content`` is 1 for energy units and
    [Btu/ft³], [Btu/gal] or [Btu/lb] for physical units (gross heating value; EIA and 40 CFR 98
    figures in ``units.csv``). ``days = period_end − period_start + 1`` (inclusive end).

    Parameters
    ----------
    readings : pl.DataFrame
        ``building_id, fuel, period_start, period_end, quantity, unit`` and optionally
        ``estimated, cost, meter_id`` and ``_line`` (or ``line``): the input file's line number.
    buildings : pl.DataFrame
        ``building_id, heating_fuel`` and optionally ``heat_content`` [Btu per physical base unit
        of the heating fuel: Btu/ft³ gas, Btu/gal liquids, Btu/lb steam], null where not given.
    gas_btu_per_ft3 : float, optional
        Natural-gas heat content [Btu/ft³] for every building without its own; default 1,036
        (EIA US average consumed).
    steam_btu_per_lb : float, optional
        District-steam heat content [Btu/lb]; default 1,000 (common practice).

    Returns
    -------
    (converted, rejects)
        ``converted``: the accepted readings plus ``unit`` (canonical spelling), ``energy_kbtu``
        [kBtu], ``days`` [day], ``is_heating_fuel`` (bool), ``heat_content_used`` [Btu per base
        unit, null for energy units], sorted by building_id, fuel, period_start, period_end, _line.
        ``rejects``: ``line, column, value, reason`` for each reading not used (unknown fuel or
        unit, a unit the fuel cannot be measured in, missing or negative quantity, end before
        start, unknown building).

    Raises
    ------
    ValueError
        A required column is missing, or a heat content (argument or ``heat_content`` column) is
        outside its plausible range.
    """
    missing = [c for c in READING_COLUMNS if c not in readings.columns]
    if missing:
        raise ValueError(f"readings: missing column(s) {missing}; expected {list(READING_COLUMNS)}")
    for c in ("building_id", "heating_fuel"):
        if c not in buildings.columns:
            raise ValueError(f"buildings: missing column {c!r}")
    line_col = "_line" if "_line" in readings.columns else ("line" if "line" in readings.columns else None)
    r = readings.with_columns(
        (pl.col(line_col).cast(pl.Int64) if line_col else pl.int_range(1, pl.len() + 1, dtype=pl.Int64)).alias("_line")
    )
    if line_col == "line":
        r = r.drop("line")

    hc = heat_content_table(gas_btu_per_ft3=gas_btu_per_ft3, steam_btu_per_lb=steam_btu_per_lb)
    b = buildings.select(
        "building_id",
        "heating_fuel",
        (
            pl.col("heat_content").cast(pl.Float64) if "heat_content" in buildings.columns else pl.lit(None, pl.Float64)
        ).alias("_bld_hc"),
    )
    _check_building_heat_contents(b, hc)

    units = unit_table()
    fuel_dims = pl.concat(
        [pl.DataFrame({"fuel": list(FUELS), "dimension": ["energy"] * len(FUELS)}), hc.select("fuel", "dimension")]
    )
    allowed = fuel_dims.join(units, on="dimension", how="inner")  # fuel, dimension, key, unit, factor
    known_units = sorted(set(units["key"].to_list()))
    accepted = (
        allowed.filter(pl.col("dimension") != "energy")
        .group_by("fuel")
        .agg(pl.col("unit").unique().sort().str.join(", ").alias("_phys"))
    )
    # what depends on the fuel and unit alone is worked out once per distinct (fuel, unit) pair of the
    # readings (a handful), then joined to the rows: the unit's key, dimension, canonical name and
    # factor, the fuel's default heat content and physical units, and the three checks on them
    pairs = (
        r.select(pl.col("fuel").cast(pl.String).alias("_fuel_in"), pl.col("unit").cast(pl.String).alias("_unit_in"))
        .unique()
        .with_columns(
            pl.col("_unit_in").str.strip_chars().str.to_lowercase().alias("_key"),
            pl.col("_fuel_in").str.strip_chars().alias("_fuel"),
        )
        .join(allowed.rename({"unit": "_unit"}), left_on=["_fuel", "_key"], right_on=["fuel", "key"], how="left")
        .join(
            hc.select("fuel", "dimension", pl.col("btu_per_base").alias("_default_hc")),
            left_on=["_fuel", "dimension"],
            right_on=["fuel", "dimension"],
            how="left",
        )
        .join(accepted, left_on="_fuel", right_on="fuel", how="left")
        .with_columns(
            (~pl.col("_fuel").is_in(list(FUELS)) | pl.col("_fuel").is_null()).alias("_bad_fuel"),
            (~pl.col("_key").is_in(known_units) | pl.col("_key").is_null()).alias("_bad_key"),
            pl.col("_unit").is_null().alias("_bad_unit"),
        )
    )
    r = (
        r.join(
            pairs,
            left_on=[pl.col("fuel").cast(pl.String), pl.col("unit").cast(pl.String)],
            right_on=["_fuel_in", "_unit_in"],
            how="left",
            nulls_equal=True,
            maintain_order="left",
        )
        .with_columns(pl.col("_fuel").alias("fuel"))
        .drop("_fuel")
        .join(b, on="building_id", how="left", maintain_order="left")
    )

    # (condition, reject) in order of precedence: the first condition that holds names the reason
    checks = [
        (
            pl.col("building_id").is_null() | pl.col("heating_fuel").is_null(),
            pl.struct(
                column=pl.lit("building_id"),
                value=pl.col("building_id").cast(pl.String),
                reason=pl.lit("unknown building (not in the buildings table)"),
            ),
        ),
        (
            pl.col("_bad_fuel"),
            pl.struct(
                column=pl.lit("fuel"),
                value=pl.col("fuel"),
                reason=pl.lit(f"unknown fuel; expected one of {', '.join(FUELS)}"),
            ),
        ),
        (
            pl.col("_bad_key"),
            pl.struct(column=pl.lit("unit"), value=pl.col("unit").cast(pl.String), reason=pl.lit("unknown unit")),
        ),
        (
            pl.col("_bad_unit"),
            pl.struct(
                column=pl.lit("unit"),
                value=pl.col("unit").cast(pl.String),
                reason=pl.format(
                    "unit {} is not a unit of {} (energy units or: {})",
                    pl.col("unit"),
                    pl.col("fuel"),
                    pl.col("_phys").fill_null("none"),
                ),
            ),
        ),
        (
            pl.col("quantity").is_null() | pl.col("quantity").is_nan(),
            pl.struct(
                column=pl.lit("quantity"), value=pl.col("quantity").cast(pl.String), reason=pl.lit("missing quantity")
            ),
        ),
        (
            pl.col("quantity") < 0,
            pl.struct(
                column=pl.lit("quantity"), value=pl.col("quantity").cast(pl.String), reason=pl.lit("negative quantity")
            ),
        ),
        (
            pl.col("period_start").is_null() | pl.col("period_end").is_null(),
            pl.struct(
                column=pl.lit("period_start"),
                value=pl.col("period_start").cast(pl.String),
                reason=pl.lit("missing period date"),
            ),
        ),
        (
            pl.col("period_end") < pl.col("period_start"),
            pl.struct(
                column=pl.lit("period_end"),
                value=pl.col("period_end").cast(pl.String),
                reason=pl.format("period_end before period_start {}", pl.col("period_start")),
            ),
        ),
    ]
    chain: Then | ChainedThen = pl.when(checks[0][0]).then(checks[0][1])
    for cond, rej in checks[1:]:
        chain = chain.when(cond).then(rej)
    reason = chain.otherwise(None)
    r = r.with_columns(pl.col("quantity").cast(pl.Float64))
    # the reject texts are built for the rejected rows only (for every row they cost ~0.6 KB each)
    r = r.with_columns(pl.any_horizontal([c.fill_null(False) for c, _ in checks]).alias("_reject"))
    # with several readings files the rows carry their ``_file``, and so do their rejects
    keep = ["_file"] if "_file" in r.columns else []
    rejects = (
        r.filter(pl.col("_reject"))
        .with_columns(reason.alias("_reject"))
        .select(pl.col("_line").alias("line"), pl.col("_reject").struct.unnest(), *keep)
        .select(*keep, *_REJECT_SCHEMA)
        .cast(_REJECT_SCHEMA)
        .sort(*keep, "line")
    )

    ok = r.filter(~pl.col("_reject"))
    is_heat = pl.col("fuel") == pl.col("heating_fuel")
    hc_used = (
        pl.when(pl.col("dimension") == "energy")
        .then(None)
        .when(is_heat & pl.col("_bld_hc").is_not_null())
        .then(pl.col("_bld_hc"))
        .otherwise(pl.col("_default_hc"))
    )
    ok = ok.with_columns(hc_used.alias("heat_content_used"), is_heat.alias("is_heating_fuel"))
    ok = ok.with_columns(
        (pl.col("quantity") * pl.col("factor") * pl.col("heat_content_used").fill_null(1.0) / 1000.0).alias(
            "energy_kbtu"
        ),
        ((pl.col("period_end") - pl.col("period_start")).dt.total_days() + 1).cast(pl.Int64).alias("days"),
        pl.col("_unit").alias("unit"),
    )
    drop = ["_key", "_unit", "dimension", "factor", "heating_fuel", "_bld_hc", "_default_hc", "_phys", "_reject"]
    drop += ["_fuel_in", "_unit_in", "_bad_fuel", "_bad_key", "_bad_unit"]
    ok = ok.drop([c for c in drop if c in ok.columns])
    order = ["building_id", "fuel", "period_start", "period_end", "_line"]
    ok = sort_rows(ok, order)  # (readings pulled from the store a chunk at a time come in this order already)
    return ok, rejects


def _check_building_heat_contents(b: pl.DataFrame, hc: pl.DataFrame) -> None:
    chk = b.filter(pl.col("_bld_hc").is_not_null()).join(hc, left_on="heating_fuel", right_on="fuel", how="left")
    no_phys = chk.filter(pl.col("dimension").is_null())
    if no_phys.height:
        bid, fuel, v = no_phys.row(0)[:3]
        raise ValueError(
            f"buildings: heat_content={v!r} for building {bid!r}, but its heating fuel "
            f"{fuel!r} is metered in energy units only; leave heat_content empty"
        )
    bad = chk.filter((pl.col("_bld_hc") < pl.col("plausible_min")) | (pl.col("_bld_hc") > pl.col("plausible_max")))
    if bad.height:
        row = bad.row(0, named=True)
        raise ValueError(
            f"buildings: heat_content={row['_bld_hc']!r} for building {row['building_id']!r} "
            f"({row['heating_fuel']}) is outside {row['plausible_min']:g} to {row['plausible_max']:g} "
            f"Btu per base unit ({'ft³' if row['dimension'] == 'gas_volume' else 'gal' if row['dimension'] == 'liquid_volume' else 'lb'})"
        )


def btu_per_unit(unit: str, fuel: str, *, heat_contents: Mapping[str, float] | None = None) -> float:
    """Energy of one ``unit`` of ``fuel`` [Btu] with the default (or given) heat contents.

    A scalar convenience for reports and tests; :func:`convert_to_kbtu` is the vectorized path.

    Raises
    ------
    ValueError
        Unknown unit or fuel, or a unit the fuel is not measured in.
    """
    if fuel not in FUELS:
        raise ValueError(f"fuel={fuel!r} is not one of {', '.join(FUELS)}")
    u = unit_table().filter(pl.col("key") == unit.strip().lower())
    if u.height == 0:
        raise ValueError(f"unit={unit!r} is unknown")
    hc = heat_content_table()
    if heat_contents:
        hc = hc.with_columns(
            pl.col("fuel")
            .replace_strict(heat_contents, default=None, return_dtype=pl.Float64)
            .fill_null(pl.col("btu_per_base"))
            .alias("btu_per_base")
        )
    dims = {"energy": 1.0} | dict(hc.filter(pl.col("fuel") == fuel).select("dimension", "btu_per_base").iter_rows())
    for dim, factor in u.select("dimension", "factor").iter_rows():
        if dim in dims:
            return factor * dims[dim]
    raise ValueError(f"unit={unit!r} is not a unit of fuel={fuel!r}")


#: columns of :func:`billed_units`
BILLED_UNIT_COLUMNS = ("building_id", "billed_unit", "kbtu_per_billed_unit")


def billed_units(converted: pl.DataFrame) -> pl.DataFrame:
    """The unit each building's heating-fuel bills are stated in, and its energy [kBtu per that unit].

    From the converted readings (:func:`convert_to_kbtu`'s first result: ``building_id, unit, quantity,
    energy_kbtu, is_heating_fuel``): the unit of most of the building's heating-fuel readings (ties: the
    unit's name in sort order), and ``kbtu_per_billed_unit = Σ energy_kbtu / Σ quantity`` over its
    readings in that unit with a positive quantity, i.e. the factor and heat content the conversion
    used (``energy_kbtu = quantity × factor × heat content / 1000``), so a figure in kBtu divided by
    it reads as the bills would state it (therm, ccf, gal, Mlb, kWh ...). A building without such a
    reading gets no row.
    """
    need = ("building_id", "unit", "quantity", "energy_kbtu", "is_heating_fuel")
    if converted.height == 0 or any(c not in converted.columns for c in need):
        return pl.DataFrame(
            schema={"building_id": pl.String, "billed_unit": pl.String, "kbtu_per_billed_unit": pl.Float64}
        )
    h = (
        converted.filter(pl.col("is_heating_fuel") & (pl.col("quantity") > 0))
        .group_by("building_id", "unit")
        .agg(pl.len().alias("_n"), pl.col("quantity").sum().alias("_q"), pl.col("energy_kbtu").sum().alias("_e"))
    )
    return (
        h.sort(["building_id", "_n", "unit"], descending=[False, True, False])
        .unique("building_id", keep="first", maintain_order=True)
        .select(
            pl.col("building_id").cast(pl.String),
            pl.col("unit").alias("billed_unit"),
            (pl.col("_e") / pl.col("_q")).alias("kbtu_per_billed_unit"),
        )
    )
