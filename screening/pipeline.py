"""Orchestration: load the inputs into the store, screen the portfolio, keep the results.

``screen_frames`` is the whole computation on in-memory frames (no files, no database);
``load_inputs`` puts checked files into the store; ``run`` does both and writes the
outputs (see :mod:`screening.outputs`).
"""

from __future__ import annotations

import datetime as _dt
from abc import ABC, abstractmethod
import hashlib
import json
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import polars as pl

from . import degree_days as ddm
from . import envelope as env
from . import metered, refdata, screen, units
from .errors import ConfigError, InputError
from .schema import KBTU_TO_KWH, issue_codes
from .ingest import REJECT_SCHEMA, Loaded, ReadOptions, read_buildings, read_readings
from .csvread import split_sheet, unreadable
from .store import Store
from .weather import read_daily_weather

KINDS = ("buildings", "readings", "weather")


#: Plain texts of the data issues found here (the per-reading ones are in :mod:`screening.metered`;
#: README "Data issues" lists every code).
ISSUE_TEXT = {
    "no_readings": "no usable readings for this building",
    "no_heating_fuel_readings": (
        "readings only in {fuels}, none in the building's heating fuel {heating_fuel}: "
        "check heating_fuel in the buildings file or the fuel column of the readings"
    ),
    "no_weather_at_station": (
        "station {station_id} has no weather on any day of the span {span_start} to "
        "{span_end} ({record}): add that station's weather for these dates, or correct "
        "the building's station_id"
    ),
    "missing_bills": (
        "no heating-fuel bill for {gaps} inside the analysis window {window_start} to {window_end}: "
        "obtain the missing bills (or readings) and rerun"
    ),
    "end_days_filled": (
        "no reading yet for the last {days} day(s) of the span, {fill_start} to {span_end}: filled "
        "from {source} ({share} % of the span's use)"
    ),
}
#: Every data-issue code found here, beside the per-reading ones of :data:`screening.metered.ISSUE_CODES`,
#: and whether it blocks a verdict. :data:`DATA_ISSUE_CODES` is the one list of data issues (README
#: "Data issues"); flags are :data:`screening.schema.FLAGS`. All declared in :data:`screening.schema.DATA_ISSUES`.
PIPELINE_ISSUE_CODES = issue_codes("pipeline")
DATA_ISSUE_CODES = {**metered.ISSUE_CODES, **PIPELINE_ISSUE_CODES}
#: Issues that leave no basis for a ratio: no likely_unit_error is claimed beside them.
NO_BASIS_CODES = ("no_readings", "no_heating_fuel_readings", "no_weather_at_station")


# ---------------------------------------------------------------------------- loading


@dataclass
class FileLoad:
    kind: str
    path: str
    sha256: str
    status: str  # "loaded" | "unchanged"
    rows: int
    rejected: int
    notices: list[str] = field(default_factory=list)


def file_sha256(path: str | Path) -> str:
    h = hashlib.sha256()
    src = split_sheet(path)[0]  # book.xlsx#Sheet: the workbook's bytes
    try:
        with open(src, "rb") as f:
            for chunk in iter(lambda: f.read(1 << 20), b""):
                h.update(chunk)
    except OSError as exc:
        raise unreadable(str(path), exc) from None
    return h.hexdigest()


def read_options(cfg: dict) -> ReadOptions:
    r = cfg["reading"]
    return ReadOptions(
        units=cfg["analysis"]["units"],
        decimal_comma=r["decimal_comma"],
        date_order=r["date_order"] or None,
        delimiter=r["delimiter"] or None,
        encoding=r["encoding"] or None,
        columns=dict(cfg["inputs"].get("columns") or {}),
        thousands=r.get("thousands", ""),
    )


def _options_hash(opts: ReadOptions) -> str:
    key = json.dumps(
        [opts.units, opts.decimal_comma, opts.date_order, opts.delimiter, opts.encoding]
        + ([opts.columns, opts.thousands] if opts.columns or opts.thousands else []),
        sort_keys=True,
    )
    return hashlib.sha256(key.encode()).hexdigest()[:16]


def read_file(kind: str, path: str, opts: ReadOptions) -> Loaded:
    """Check one input file (no database): the accepted rows, the rejects, the notices."""
    if kind == "buildings":
        return read_buildings(path, opts)
    if kind == "readings":
        return read_readings(path, opts)
    weather, rejects, notices = _read_weather(path, opts)
    return Loaded(str(path), weather, rejects, notices)


def _read_weather(path: str, opts: ReadOptions):
    res = read_daily_weather(
        path,
        units=opts.units,
        decimal_comma=opts.decimal_comma,
        date_order=opts.date_order,
        delimiter=opts.delimiter,
        encoding=opts.encoding,
        columns=opts.columns.get("weather") or None,
    )
    weather, rejects = res
    return weather, rejects, list(getattr(res, "notices", []))


def load_inputs(
    store: Store, files: dict[str, list[str]], opts: ReadOptions, *, force: bool = False, log=None
) -> list[FileLoad]:
    """Load new or changed input files into the store, all in one transaction.

    Every file is read and checked before anything is written, so a structural error
    in any file leaves the database unchanged. A file whose content hash and reading
    options match its last load is not read again.
    """
    log = log or (lambda msg: None)
    oh = _options_hash(opts)
    plan: list[tuple[str, str, str, Loaded | None]] = []
    for kind in KINDS:
        for path in files.get(kind, []):
            digest = file_sha256(path)
            prev = store.rows("get_input_file", {"kind": kind, "path": str(path)})
            if prev and prev[0][0] == digest and prev[0][1] == oh and not force:
                plan.append((kind, str(path), digest, None))
                continue
            log(f"reading {kind} file {path}")
            plan.append((kind, str(path), digest, read_file(kind, str(path), opts)))
    out: list[FileLoad] = []
    with store.transaction():
        for kind, path, digest, loaded in plan:
            if loaded is None:
                r = store.rows("get_input_file", {"kind": kind, "path": path})[0]
                out.append(FileLoad(kind, path, digest, "unchanged", int(r[2]), int(r[3])))
                continue
            p = {"path": path}
            if kind == "buildings":
                store.execute("delete_buildings_from_file", p)
                store.execute("insert_buildings", p, stage_buildings=loaded.df)
            elif kind == "readings":
                store.execute("delete_readings_from_file", p)
                store.execute("insert_readings", p, stage_readings=loaded.df)
            else:
                store.execute("delete_weather_from_file", p)
                store.execute("insert_weather", p, stage_weather=loaded.df)
            store.execute("delete_load_rejects", {"kind": kind, "path": path})
            store.execute(
                "insert_load_rejects", {"kind": kind, "path": path}, stage_rejects=loaded.rejects.cast(REJECT_SCHEMA)
            )
            store.execute(
                "record_input_file",
                {
                    "path": path,
                    "kind": kind,
                    "sha256": digest,
                    "options_hash": oh,
                    "rows_loaded": loaded.df.height,
                    "rows_rejected": loaded.rejects.height,
                },
            )
            out.append(FileLoad(kind, path, digest, "loaded", loaded.df.height, loaded.rejects.height, loaded.notices))
        _forget_other_files(store, files)
    return out


def _forget_other_files(store: Store, files: dict[str, list[str]]) -> None:
    """Drop the stored rows of files the run does not name (any more): what is screened is
    exactly the content of the files named now."""
    forget = {
        "buildings": "forget_buildings_of_other_files",
        "readings": "forget_readings_of_other_files",
        "weather": "forget_weather_of_other_files",
    }
    for kind in KINDS:
        paths = [str(p) for p in files.get(kind, [])]
        store.execute(forget[kind], {"paths": paths})
        store.execute("forget_load_rejects_of_other_files", {"kind": kind, "paths": paths})
        store.execute("forget_other_input_files", {"kind": kind, "paths": paths})


# ---------------------------------------------------------------------------- screening


@dataclass
class Screened:
    """Everything a run computed, before formatting."""

    results: pl.DataFrame  # one row per screened building, ranked
    rejects: pl.DataFrame  # cross-file rejects found while screening
    issues: pl.DataFrame  # building_id, code, detail, blocking
    periods: pl.DataFrame  # billing periods used for the charts
    envelope: pl.DataFrame
    window: tuple[_dt.date, _dt.date]
    timings: dict[str, float]
    normal_years: dict[str, list[int]]
    savings: pl.DataFrame | None = None  # one row per measure of the events file (events.measure_savings)
    savings_periods: pl.DataFrame | None = None  # one row per reporting bill of each measure (events.PERIOD_SCHEMA)
    learning: pl.DataFrame | None = None  # the defaults' bias per era x use type from audited values (learning.py)


def base_grid(cfg: dict) -> np.ndarray:
    a = cfg["analysis"]
    n = int(round((a["base_max_f"] - a["base_min_f"]) / a["base_step_f"])) + 1
    return np.round(a["base_min_f"] + a["base_step_f"] * np.arange(n), 6)


def _source(frame: pl.DataFrame, paths: dict, kind: str) -> pl.Expr:
    """The file a row came from: its ``_file`` column (several files of a kind) or the kind's one path."""
    return pl.col("_file") if "_file" in frame.columns else pl.lit(paths.get(kind, kind))


#: columns of the converted readings that the screening steps read (quantity, unit, cost are not)
_CONV_KEEP = (
    "building_id",
    "fuel",
    "meter_id",
    "period_start",
    "period_end",
    "energy_kbtu",
    "days",
    "is_heating_fuel",
    "estimated",
    "_line",
)


def nearest_base(grid: np.ndarray, base: np.ndarray) -> np.ndarray:
    """Index of the grid base nearest to each ``base`` (the lower one on a tie, 0 for NaN).

    The same as ``np.abs(grid[None, :] - base[:, None]).argmin(axis=1)`` for an ascending grid,
    without the (rows × bases) temporary.
    """
    grid = np.asarray(grid, dtype=float)
    base = np.asarray(base, dtype=float)
    if grid.size < 2:
        return np.zeros(base.shape, dtype=np.intp)
    hi = np.clip(np.searchsorted(grid, base), 1, grid.size - 1)
    lo = hi - 1
    j = np.where(np.abs(grid[lo] - base) <= np.abs(grid[hi] - base), lo, hi)
    return np.where(np.isnan(base), 0, j)


class _PeriodHdd:
    """Degree days of each billing period at every grid base, computed for the rows asked for.

    The whole (periods × bases) array is 71 × 8 bytes per period (gigabytes for millions of
    periods), so callers take it a block of rows at a time: ``self(rows)`` is
    ``cube.period_totals(...)[0][rows]``, ``missing()`` the days without weather of every row,
    ``at(j)`` row i's value at base index ``j[i]``.
    """

    BLOCK = 1 << 17

    def __init__(self, cube, periods: pl.DataFrame):
        self.cube = cube
        self.st = periods["station_id"]
        self.start = periods["period_start"]
        self.end = periods["period_end"]
        self.n = periods.height

    def _totals(self, rows: np.ndarray):
        return self.cube.period_totals(self.st.gather(rows), self.start.gather(rows), self.end.gather(rows))

    def __call__(self, rows: np.ndarray) -> np.ndarray:
        return self._totals(rows)[0]

    def _blocks(self):
        for a in range(0, self.n, self.BLOCK):
            yield np.arange(a, min(a + self.BLOCK, self.n))

    def missing(self) -> np.ndarray:
        return np.concatenate([self._totals(r)[2] for r in self._blocks()])

    def at(self, j: np.ndarray) -> np.ndarray:
        return np.concatenate([self(r)[np.arange(r.size), j[r]] for r in self._blocks()])


#: Buildings per regression block (:func:`screening.metered._fit_in_blocks`); a chunk of the two-pass
#: screening is a whole number of blocks, so chunked and one-pass results are the same to the bit
FIT_BLOCK = 4096
REJECTS_EMPTY = pl.DataFrame(schema=REJECT_SCHEMA)


def chunk_size(chunk_buildings: int, n_buildings: int, fit_block: int | None = None) -> int:
    """Buildings per chunk: ``chunk_buildings`` rounded up to whole regression blocks, all of them for 0."""
    fb = fit_block or FIT_BLOCK
    return n_buildings if chunk_buildings <= 0 else min(-(-chunk_buildings // fb) * fb, max(n_buildings, 1))


class ReadingsSource(ABC):
    """Where a screening gets the readings of a chunk of buildings (the readings rows of the canonical
    frame, one row per key): an interface, implemented by :class:`FrameReadings` (a frame in memory) and
    ``runner.StoreReadings`` (the store)."""

    @abstractmethod
    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        """The readings of the buildings ``ids``."""

    @abstractmethod
    def others(self, ids: pl.Series) -> pl.DataFrame:
        """The readings of every other building (rejected as unknown buildings)."""


class FrameReadings(ReadingsSource):
    """Readings held in memory as one frame."""

    def __init__(self, readings: pl.DataFrame):
        self.r = readings

    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        return self.r.filter(pl.col("building_id").is_in(ids.implode()))

    def others(self, ids: pl.Series) -> pl.DataFrame:
        return self.r.filter(~pl.col("building_id").is_in(ids.implode()))


def _cross_check_buildings(b: pl.DataFrame, stations: list[str], paths: dict) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Buildings whose station has weather, and the rejects of the others."""
    st = pl.Series(stations, dtype=pl.String).implode()
    bad_b = b.filter(~pl.col("station_id").is_in(st))
    rej = bad_b.select(
        _source(b, paths, "buildings").alias("file"),
        pl.col("_line").alias("line"),
        pl.lit("station_id").alias("column"),
        pl.col("station_id").alias("value"),
        pl.lit("unknown station (not in the weather data)").alias("reason"),
    )
    return b.filter(pl.col("station_id").is_in(st)), rej.cast(REJECT_SCHEMA)


def _cross_check(b: pl.DataFrame, r: pl.DataFrame, stations: list[str], paths: dict) -> tuple:
    """Buildings with a known station, their readings, and the rejects of the rest (both files)."""
    b, rej = _cross_check_buildings(b, stations, paths)
    ids = b["building_id"].implode()
    bad_r = r.filter(~pl.col("building_id").is_in(ids))
    return b, r.filter(pl.col("building_id").is_in(ids)), pl.concat([rej, _unknown_building_rejects(bad_r, paths)])


def _unknown_building_rejects(bad_r: pl.DataFrame, paths: dict) -> pl.DataFrame:
    """Rejects of readings whose building is not among the accepted buildings."""
    return bad_r.select(
        _source(bad_r, paths, "readings").alias("file"),
        pl.col("_line").alias("line"),
        pl.lit("building_id").alias("column"),
        pl.col("building_id").alias("value"),
        pl.lit("unknown building (not among the accepted buildings)").alias("reason"),
    ).cast(REJECT_SCHEMA)


#: The unit mix-ups each heating fuel's bills are prone to, named in the likely_unit_error detail (our own
#: list, common practice in bill checking).
UNIT_MIXUPS: dict[str, str] = {
    "natural_gas": "therm against ccf or Mcf, kBtu against MMBtu",
    "electricity": "kWh against MWh or Wh",
    "fuel_oil": "gallons against litres",
    "propane": "gallons against litres or lb",
    "district_steam": "lb against Mlb",
    "district_hot_water": "kBtu against MMBtu",
}


def _unit_error_issues(
    conv: pl.DataFrame, b: pl.DataFrame, factor: float, *, isolation: float = 1.0, block: int = 16384
) -> pl.DataFrame:
    """:func:`_unit_error_issues_block` over blocks of ``block`` buildings (each issue is one building's;
    the blocks bound the memory of the window statistics over every reading)."""
    if b.height <= block:
        return _unit_error_issues_block(conv, b, factor, isolation)
    ids = b["building_id"]
    parts = [
        _unit_error_issues_block(
            conv.filter(pl.col("building_id").is_in(ids.slice(a, block).implode())),
            b.slice(a, block),
            factor,
            isolation,
        )
        for a in range(0, b.height, block)
    ]
    return pl.concat(parts).sort("building_id")


#: a bill this many times off (or 1/this of) what was expected of it is a data fault even when its neighbours are
#: off too: no operation multiplies a month's use by it (waste that began measured up to ×20 in a shoulder month
#: on the outside world, seeds 3 and 4), and it keeps ×100 and ×1000 errors in a run of bills (our own margin)
UNIT_ERROR_FACTOR_ANY = 50.0


def _spike(q: pl.Expr, over: list[str], isolation: float) -> pl.Expr:
    """A bill off by ``q`` [-] (its use against what was expected of it) that its neighbouring bills do not share.

    ``q`` is compared with the previous and the next bill of the same series (``over``, in time order;
    a missing neighbour or one with no ``q`` counts as 1): the bill must stand ``isolation`` times apart
    from both, in its own direction, or be ``UNIT_ERROR_FACTOR_ANY`` times off on its own. A lost decimal
    point, a wrong unit on one bill or a catch-up after estimated reads is a spike; waste that began, or a
    building that changed, moves a run of bills together (a step), which this leaves to the comparisons of
    the whole span.
    """
    prev = q.shift(1).over(over).fill_null(1.0)
    nxt = q.shift(-1).over(over).fill_null(1.0)
    hi = (q >= isolation * prev) & (q >= isolation * nxt)
    lo = (q * isolation <= prev) & (q * isolation <= nxt)
    far = (q >= UNIT_ERROR_FACTOR_ANY) | (q * UNIT_ERROR_FACTOR_ANY <= 1)
    return (pl.when(q >= 1).then(hi).otherwise(lo) | far).fill_null(False)


def _unit_error_issues_block(
    conv: pl.DataFrame, b: pl.DataFrame, factor: float, isolation: float = 1.0
) -> pl.DataFrame:
    """Readings that differ from the same calendar month of other years by ≥ ``factor``, as a spike.

    A factor of about 10, 100 or 1000 between years of one meter is the mark of a
    unit or entry error (therm vs ccf ×1.036 is too small to see; kBtu vs MMBtu is 1000).
    Such a reading must also stand ``isolation`` × apart from the meter's previous and next
    readings' own ratios (:func:`_spike`): a run of months off together is a step (waste that
    began), which the ratio of the whole span to the expectation judges instead.
    """
    empty = pl.DataFrame(
        schema={"building_id": pl.String, "code": pl.String, "detail": pl.String, "blocking": pl.Boolean}
    )
    heat = (
        conv.select("building_id", "meter_id", "fuel", "period_start", "period_end", "days", "energy_kbtu")
        .join(b.select("building_id", "heating_fuel"), on="building_id")
        .filter((pl.col("fuel") == pl.col("heating_fuel")) & (pl.col("days") <= 62) & (pl.col("days") >= 20))
    )
    if heat.height == 0:
        return empty
    mid = pl.col("period_start") + pl.duration(days=(pl.col("days") // 2))
    heat = heat.with_columns((pl.col("energy_kbtu") / pl.col("days")).alias("_upd"), mid.dt.month().alias("_m"))
    # only months of substantial use: summer use of a heating fuel varies by large factors on its own
    heat = heat.with_columns(pl.col("_upd").median().over("building_id", "meter_id").alias("_mmed"))
    heat = heat.with_columns((pl.col("_upd") >= 0.5 * pl.col("_mmed")).alias("_big"))
    big = pl.col("_upd").filter(pl.col("_big"))
    grp = ["building_id", "meter_id", "_m"]
    heat = heat.with_columns(
        big.median().over(grp).alias("_med"),
        big.count().over(grp).alias("_n"),
        big.sum().over(grp).alias("_sum"),
        pl.col("_upd").count().over(grp).alias("_n_all"),
        pl.col("_upd").sum().over(grp).alias("_sum_all"),
        pl.col("_upd").median().over(grp).alias("_med_all"),
    )
    # the reading against the same month of the other years: their median; with two readings the
    # median sits between them, so each is compared with the other. A month of substantial use whose
    # other years were small (a summer bill ×100) is compared with all of them, and counts only from
    # UNIT_ERROR_FACTOR_ANY on and at `factor` × the meter's median month: summer use varies by large
    # factors on its own (heating in warm weather that began on a heating-only fuel: ×124 on the
    # simulator, seed 707), but never above the winter's bills
    own = (
        pl.when(pl.col("_n") == 2)
        .then(pl.col("_upd") / (pl.col("_sum") - pl.col("_upd")))
        .otherwise(pl.col("_upd") / pl.col("_med"))
    )
    all_ = (
        pl.when(pl.col("_n_all") == 2)
        .then(pl.col("_upd") / (pl.col("_sum_all") - pl.col("_upd")))
        .otherwise(pl.col("_upd") / pl.col("_med_all"))
    )
    q = (
        pl.when(pl.col("_big") & (pl.col("_n") >= 2) & (pl.col("_med") > 0) & (pl.col("_upd") > 0))
        .then(own)
        .when(
            pl.col("_big")
            & (pl.col("_n_all") >= 2)
            & (pl.col("_med_all") > 0)
            & (pl.col("_upd") > 0)
            & (all_ >= UNIT_ERROR_FACTOR_ANY)
            & (pl.col("_upd") >= factor * pl.col("_mmed"))
        )
        .then(all_)
    )
    heat = heat.sort("building_id", "meter_id", "period_start").with_columns(q.alias("_q"))
    heat = heat.with_columns(_spike(pl.col("_q"), ["building_id", "meter_id"], isolation).alias("_spike"))
    odd = heat.filter(((pl.col("_q") >= factor) | (pl.col("_q") * factor <= 1)) & pl.col("_spike"))
    if odd.height == 0:
        return empty
    odd = odd.sort("building_id", "period_start").with_columns(
        (
            pl.col("period_start").cast(pl.String)
            + pl.lit("–")
            + pl.col("period_end").cast(pl.String)
            + pl.lit(" (")
            + pl.col("_q").round(2).cast(pl.String)
            + pl.lit("× the same month's median)")
        ).alias("_d")
    )
    return (
        odd.group_by("building_id")
        .agg(pl.col("_d").str.join("; ").alias("detail"))
        .select(
            "building_id",
            pl.lit("likely_unit_error").alias("code"),
            (pl.lit("reading(s) about 10×, 100× or 1000× off the building's own history: ") + pl.col("detail")).alias(
                "detail"
            ),
            pl.lit(True).alias("blocking"),
        )
        .sort("building_id")
    )


def _fit_outlier_issues(
    periods: pl.DataFrame, met: pl.DataFrame, factor: float, isolation: float = 1.0
) -> pl.DataFrame:
    """Bills far off the building's own weather fit (code ``bill_off_fit``, blocking).

    Each fitted bill's use per day is compared with what the building's variable-base fit
    predicts for its degree days, ``α + β·HDD(τ)/day`` [kBtu/day]. A bill at ≥ ``factor`` × the
    prediction, or at ≤ 1/``factor`` of it, is flagged when the larger of the two is substantial
    (at least half the building's median bill per day): summer use varies by large factors on
    its own, winter-sized use in a summer bill does not. The same-month comparison across years
    (:func:`_unit_error_issues`) misses a summer bill, whose other years are too small to count.
    The bill must also stand ``isolation`` × apart from its neighbours' own ratios to the fit
    (:func:`_spike`): when waste begins inside the fitted months, the fit mixes before and after,
    and a whole run of bills sits off it together (a step, not a data fault).
    """
    empty = pl.DataFrame(
        schema={"building_id": pl.String, "code": pl.String, "detail": pl.String, "blocking": pl.Boolean}
    )
    if periods.height == 0 or "hdd_per_day_fit" not in periods.columns:
        return empty
    fit = met.filter(pl.col("fit_method") == "regression").select(
        "building_id",
        pl.col("baseload_kbtu_per_day").fill_null(0.0).alias("_a"),
        pl.col("heating_slope_kbtu_per_dd").fill_null(0.0).alias("_b"),
    )
    p = (
        periods.filter(pl.col("usable"))
        .join(fit, on="building_id", how="inner")
        .with_columns(
            (pl.col("energy_kbtu") / pl.col("days")).alias("_upd"),
            (pl.col("_a") + pl.col("_b") * pl.col("hdd_per_day_fit")).alias("_pred"),
        )
    )
    p = p.sort("building_id", "period_start", "period_end").with_columns(
        pl.col("_upd").median().over("building_id").alias("_bmed"),
        pl.when((pl.col("_pred") > 0) & (pl.col("_upd") > 0)).then(pl.col("_upd") / pl.col("_pred")).alias("_q"),
    )
    p = p.with_columns(_spike(pl.col("_q"), ["building_id"], isolation).alias("_spike"))
    odd = p.filter(
        (pl.col("_pred") > 0)
        & (pl.col("_upd") > 0)
        & pl.col("_spike")
        & (
            ((pl.col("_upd") >= factor * pl.col("_pred")) & (pl.col("_upd") >= 0.5 * pl.col("_bmed")))
            | ((pl.col("_upd") * factor <= pl.col("_pred")) & (pl.col("_pred") >= 0.5 * pl.col("_bmed")))
        )
    )
    if odd.height == 0:
        return empty
    odd = odd.sort("building_id", "period_start").with_columns(
        (
            pl.col("period_start").cast(pl.String)
            + pl.lit("–")
            + pl.col("period_end").cast(pl.String)
            + pl.lit(" (")
            + (pl.col("_upd") / pl.col("_pred")).round(2).cast(pl.String)
            + pl.lit("× what the building's weather fit predicts)")
        ).alias("_d")
    )
    return (
        odd.group_by("building_id")
        .agg(pl.col("_d").str.join("; ").alias("detail"))
        .select(
            "building_id",
            pl.lit("bill_off_fit").alias("code"),
            (
                pl.lit(
                    "bill(s) far off the building's own weather fit (a lost decimal point or unit, a catch-up "
                    "after estimated reads, a meter change, or weeks the building stood empty): "
                )
                + pl.col("detail")
            ).alias("detail"),
            pl.lit(True).alias("blocking"),
        )
        .sort("building_id")
    )


def screen_frames(
    buildings: pl.DataFrame,
    readings: pl.DataFrame | ReadingsSource,
    weather: pl.DataFrame,
    cfg: dict,
    *,
    window: tuple[_dt.date, _dt.date],
    paths: dict | None = None,
    previous: pl.DataFrame | None = None,
    events: pl.DataFrame | None = None,
    plan_context: pl.DataFrame | None = None,
    chunk_buildings: int = 0,
    fit_block: int | None = None,
) -> Screened:
    """Screen a portfolio (canonical IP frames, see DEVELOPERS.md).

    ``previous`` is an earlier run's results (``building_id, normal_heating_kbtu``) for
    the year-over-year comparison. ``events`` (from ``events.read_all``) adds the savings after
    each measure (``Screened.savings``).

    Two passes: the per-building work (spans, periods, fits, envelope, Monte Carlo, excess, data
    issues, savings) runs over chunks of ``chunk_buildings`` buildings in building_id order (0 = all
    at once), each chunk with only its own readings (``readings`` is a frame, or a
    :class:`ReadingsSource` that gives a chunk's readings, e.g. from the store); the portfolio
    statistics (peer medians and spreads, year-on-year z, the ranking: :func:`screen.screen`) run
    once over all results. A chunk is a whole number of regression blocks of ``fit_block``
    buildings (default :data:`FIT_BLOCK`; :func:`chunk_size`), so the results are those of one pass.
    """
    fit_block = fit_block or FIT_BLOCK
    paths = paths or {}
    a = cfg["analysis"]
    t0 = time.perf_counter()
    timings: dict[str, float] = {}

    def lap(name: str) -> None:  # summed over the chunks
        nonlocal t0
        now = time.perf_counter()
        timings[name] = round(timings.get(name, 0.0) + now - t0, 4)
        t0 = now

    grid = base_grid(cfg)
    stations = sorted(weather["station_id"].unique().to_list())
    source = readings if isinstance(readings, ReadingsSource) else FrameReadings(readings)
    del readings  # the source holds the frame (a caller passing the store's frame frees it with the source)
    b, rejects = _cross_check_buildings(buildings, stations, paths)
    rejects = pl.concat([rejects, _unknown_building_rejects(source.others(b["building_id"]), paths)])
    b = b.drop("_file", strict=False).sort("building_id")
    if b.height == 0:
        raise InputError(
            paths.get("buildings", "buildings"),
            "no building could be screened",
            expected="at least one accepted building with a known weather station",
        )
    ws, we = window

    # weather: short gaps filled, long ones reported; the degree-day cube for every base
    filled, gaps = ddm.fill_short_gaps(weather)
    cube = ddm.DegreeDayCube.from_daily(filled, grid, method=a["degree_day_method"])
    years = range(a["normal_years"][0], a["normal_years"][1] + 1) if a["normal_years"] else None
    normals = ddm.normal_year(cube, grid, years=years)
    if years is not None:
        _check_normal_years(normals, b, weather, a["normal_years"])
    lap("degree_days")

    # the defaults' bias learned from audited buildings: a portfolio statistic, before the chunks (issue 17)
    learned = _audit_bias(b, cfg["learning"]["min_audits"])
    lap("envelope")

    # per-building work, a chunk of buildings at a time (each building's rows depend only on its own)
    size = chunk_size(chunk_buildings, b.height, fit_block)
    chunked = size < b.height
    parts: list[_Part] = []
    for c0 in range(0, b.height, max(size, 1)):
        bc = b.slice(c0, size)
        rc = source(bc["building_id"])
        parts.append(
            _screen_part(
                bc,
                rc,
                weather,
                cfg,
                cube=cube,
                normals=normals,
                gaps=gaps,
                grid=grid,
                window=window,
                paths=paths,
                previous=previous,
                plan_context=plan_context,
                events=events,
                chunked=chunked,
                fit_block=fit_block,
                lap=lap,
                learned=learned,
            )
        )
        del rc
    del source
    if chunked and not any(p.covered for p in parts):
        firsts = [p.first for p in parts if p.first is not None]
        lasts = [p.last for p in parts if p.last is not None]
        _no_building_screenable_counts(
            sum(p.n_conv for p in parts),
            sum(p.n_readings for p in parts),
            min(firsts) if firsts else None,
            max(lasts) if lasts else None,
            window,
            paths,
        )
    frame = pl.concat([p.frame for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].frame
    rejects = pl.concat([rejects, *[p.rejects for p in parts]])
    issues_df = pl.concat([p.issues for p in parts]) if len(parts) > 1 else parts[0].issues
    periods = pl.concat([p.periods for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].periods
    envelope = pl.concat([p.envelope for p in parts], how="vertical_relaxed") if len(parts) > 1 else parts[0].envelope
    saved, saved_periods = None, None
    if events is not None:
        saved = pl.concat([p.savings for p in parts if p.savings is not None], how="vertical_relaxed")
        saved_periods = pl.concat(
            [p.savings_periods for p in parts if p.savings_periods is not None], how="vertical_relaxed"
        )
    ctx_parts = [p.plan_context for p in parts if p.plan_context is not None]
    measure_ctx = pl.concat(ctx_parts, how="vertical_relaxed") if ctx_parts else None
    del parts
    thr = cfg["thresholds"]

    # the portfolio pass: peer statistics, year-on-year z, the ranking
    units_ip = cfg["analysis"]["units"] == "IP"
    results = screen.screen(
        frame,
        thr,
        plan=cfg["plan"],
        currency=cfg["prices"]["currency"],
        energy_factor=1.0 if units_ip else KBTU_TO_KWH,
        energy_unit="kBtu" if units_ip else "kWh",
    )
    if measure_ctx is not None and "_measure_date" in measure_ctx.columns:  # the measure's note in the verdict
        said = measure_ctx.filter(pl.col("_measure_date").is_not_null()).select(
            "building_id", pl.col("plan_note").alias("_mnote")
        )
        results = (
            results.join(said, on="building_id", how="left", maintain_order="left")
            .with_columns(
                pl.when(pl.col("_mnote").is_not_null())
                .then(pl.col("verdict") + pl.lit(" After the ") + pl.col("_mnote") + pl.lit("."))
                .otherwise(pl.col("verdict"))
                .alias("verdict")
            )
            .drop("_mnote")
        )
    lap("screening")
    return Screened(
        results=results,
        rejects=rejects,
        issues=issues_df,
        periods=periods.drop("station_id"),
        envelope=envelope,
        window=window,
        timings=timings,
        normal_years=normals.years_used,
        savings=saved,
        savings_periods=saved_periods,
        learning=learned,
    )


@dataclass
class _Part:
    """One chunk's per-building results (before the portfolio pass)."""

    frame: pl.DataFrame = field(default_factory=pl.DataFrame)
    issues: pl.DataFrame = field(default_factory=pl.DataFrame)
    periods: pl.DataFrame = field(default_factory=pl.DataFrame)
    envelope: pl.DataFrame = field(default_factory=pl.DataFrame)
    rejects: pl.DataFrame = field(default_factory=pl.DataFrame)
    savings: pl.DataFrame | None = None
    savings_periods: pl.DataFrame | None = None
    plan_context: pl.DataFrame | None = None  # the chunk's rows of the plan context, as the measure rules left them
    covered: bool = False
    first: _dt.date | None = None
    last: _dt.date | None = None
    n_conv: int = 0
    n_readings: int = 0


def _screen_part(
    b: pl.DataFrame,
    r: pl.DataFrame,
    weather: pl.DataFrame,
    cfg: dict,
    *,
    cube,
    normals,
    gaps: pl.DataFrame,
    grid: np.ndarray,
    window: tuple[_dt.date, _dt.date],
    paths: dict,
    previous: pl.DataFrame | None,
    plan_context: pl.DataFrame | None,
    events: pl.DataFrame | None,
    chunked: bool,
    fit_block: int,
    lap,
    learned: pl.DataFrame | None = None,
) -> _Part:
    """The per-building work for the buildings ``b`` (sorted) and their checked readings ``r``."""
    a = cfg["analysis"]
    ws, we = window
    part = _Part()
    # metered side
    conv, conv_rej = units.convert_to_kbtu(
        r, b, gas_btu_per_ft3=a["gas_btu_per_ft3"], steam_btu_per_lb=a["steam_btu_per_lb"]
    )
    n_readings = r.height
    del r
    billed = units.billed_units(conv)  # the bills' own unit per building (sheets and ranking.csv)
    conv = conv.select([c for c in _CONV_KEEP if c in conv.columns])  # what the later steps read (not _file)
    rejects = REJECTS_EMPTY
    if conv_rej.height:
        rejects = pl.concat(
            [
                rejects,
                conv_rej.select(
                    _source(conv_rej, paths, "readings").alias("file"),
                    "line",
                    "column",
                    pl.col("value").cast(pl.String),
                    "reason",
                ).cast(REJECT_SCHEMA),
            ]
        )
    thr = cfg["thresholds"]
    spans = metered.choose_spans(
        conv,
        ws,
        we,
        lookback_months=a["lookback_months"],
        min_coverage=thr["coverage_min"],
        building_ids=b["building_id"],
        fill_end_days=a["fill_end_days"],
    )
    if plan_context is not None:
        plan_context = plan_context.filter(pl.col("building_id").is_in(b["building_id"].implode()))
    if plan_context is not None and plan_context.height and "_judge_from" in plan_context.columns:
        # issue 17: a building with a measure in the window is judged on the days after it (events.plan_context)
        spans, plan_context = _post_measure_spans(
            conv,
            spans,
            plan_context,
            we,
            lookback_months=a["lookback_months"],
            min_coverage=thr["coverage_min"],
            fill_end_days=a["fill_end_days"],
        )
    part.plan_context = plan_context
    part.covered = bool((spans["coverage"].fill_null(0.0) > 0).any())
    if conv.height:
        part.first, part.last = conv["period_start"].min(), conv["period_end"].max()  # type: ignore[assignment]
    part.n_conv, part.n_readings = conv.height, n_readings
    if not part.covered and not chunked:
        _no_building_screenable(conv, n_readings, window, a["lookback_months"], paths)
    spans = spans.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    st = spans["station_id"].to_numpy()
    span_hdd, span_days, span_missing = cube.period_totals(st, spans["span_start"], spans["span_end"])
    fill_hdd = _fill_hdd(cube, spans, grid)
    periods = metered.fit_periods(conv, spans, lookback_months=a["lookback_months"])
    if plan_context is not None and "_judge_from" in plan_context.columns:  # post-measure bills only (issue 17)
        jf = plan_context.filter(pl.col("_judge_from").is_not_null()).select("building_id", "_judge_from")
        periods = (
            periods.join(jf, on="building_id", how="left", maintain_order="left")
            .filter(pl.col("_judge_from").is_null() | (pl.col("period_start") >= pl.col("_judge_from")))
            .drop("_judge_from")
        )
    periods = periods.join(b.select("building_id", "station_id"), on="building_id", how="left", maintain_order="left")
    period_hdd: _PeriodHdd | np.ndarray
    if periods.height:
        period_hdd = _PeriodHdd(cube, periods)  # rows computed a block at a time, never all at once
        periods = periods.with_columns((pl.col("usable") & pl.Series(period_hdd.missing() == 0)).alias("usable"))
    else:
        period_hdd = np.zeros((0, grid.size))
    normal_hdd = normals.for_stations(st)
    lap("metered_prep")

    envelope = env.estimate_envelope(b)
    lap("envelope")
    eff = envelope["efficiency"].to_numpy()
    met = metered.metered_heating(
        conv,
        spans.drop("station_id"),
        b,
        periods=periods.drop("station_id"),
        period_hdd=period_hdd,
        span_hdd=span_hdd,
        normal_hdd=normal_hdd,
        base_grid_f=grid,
        efficiency=eff,
        engineering_base_f=envelope["balance_point_f"].to_numpy(),
        method=a["calendarization"],
        fill_hdd=fill_hdd,
        daily_weights=_daily_weights(cube, spans, conv, envelope) if a["calendarization"] == "degree_days" else None,
        fit_block=fit_block,
    )
    lap("regression")
    if periods.height:
        fb = periods.select("building_id").join(
            met.select("building_id", "fitted_base_f"), on="building_id", how="left", maintain_order="left"
        )
        fb = fb.join(
            envelope.select("building_id", "balance_point_f"), on="building_id", how="left", maintain_order="left"
        )
        base = np.where(
            np.isfinite(fb["fitted_base_f"].fill_null(np.nan).to_numpy()),
            fb["fitted_base_f"].fill_null(np.nan).to_numpy(),
            fb["balance_point_f"].to_numpy(),
        )
        assert isinstance(period_hdd, _PeriodHdd)  # set so above whenever there are periods
        periods = periods.with_columns(
            pl.Series("hdd_per_day_fit", period_hdd.at(nearest_base(grid, base)) / periods["days"].to_numpy())
        )
    hdd65 = cube.at_base(st, spans["span_start"], spans["span_end"], np.full(len(st), 65.0))[0]
    exp = env.expected_heating(envelope, grid, span_hdd, hdd_fixed_base=hdd65, n_draws=a["draws"], seed=a["seed"])
    if learned is not None and bool(learned["applied"].any()):  # issue 17: the defaults corrected by the audits
        exp = _apply_bias(exp, b, envelope, learned)
    lap("expected")
    hdd_bal = cube.at_base(st, spans["span_start"], spans["span_end"], envelope["balance_point_f"].to_numpy())[0]

    # data issues
    # (the days filled at a span's end are their own issue, end_days_filled, not a gap in the reads)
    read_spans = spans.drop("station_id").with_columns(
        (pl.col("span_end") - pl.duration(days=pl.col("filled_days"))).alias("span_end")
    )
    issues = [
        metered.reading_issues(
            conv,
            read_spans,
            lookback_months=a["lookback_months"],
            min_coverage=thr["coverage_min"],
            max_estimated_share=thr["estimated_share_max"],
        ),
        metered.estimated_run_issues(conv, read_spans, min_run=thr["estimated_run_min"]),
        _missing_bill_issues(conv, spans, window),
        _filled_end_issues(met),
        _unit_error_issues(conv, b, thr["unit_error_factor"], isolation=thr["unit_error_isolation"]),
        _fit_outlier_issues(periods, met, thr["unit_error_factor_fit"], thr["unit_error_isolation"]),
    ]
    wgap = spans.with_columns(pl.Series("missing", span_missing)).filter(pl.col("missing") > 0)
    # a station without a single day of weather in the span: its own issue, not a gap
    no_wx = wgap.filter(pl.col("missing") >= pl.col("span_days"))
    wgap = wgap.filter(pl.col("missing") < pl.col("span_days"))
    if wgap.height:
        gdetail = _gap_details(gaps, wgap)
        issues.append(gdetail)
    if no_wx.height:
        issues.append(_no_weather_issues(no_wx, weather))
    no_read = spans.join(conv.select("building_id").unique(), on="building_id", how="anti")
    if no_read.height:
        issues.append(
            no_read.select(
                "building_id",
                pl.lit("no_readings").alias("code"),
                pl.lit(ISSUE_TEXT["no_readings"]).alias("detail"),
                pl.lit(True).alias("blocking"),
            )
        )
    other_only = _other_fuel_only(conv, b)
    if other_only.height:
        issues.append(other_only)
    issues_df = (
        pl.concat([i.select("building_id", "code", "detail", "blocking") for i in issues])
        .unique()
        .sort("building_id", "code")
    )
    # where the span is the window, missing_bills names the days a gap in the span would name again
    named = issues_df.filter(pl.col("code") == "missing_bills").join(
        spans.filter(pl.col("span_kind") != "shifted").select("building_id"), on="building_id"
    )["building_id"]
    issues_df = issues_df.filter(~((pl.col("code") == "gap_in_reads") & pl.col("building_id").is_in(named.implode())))
    issues_df = issues_df.with_columns(  # whether an issue blocks a verdict: declared once, DATA_ISSUE_CODES
        pl.col("code").replace_strict(DATA_ISSUE_CODES, return_dtype=pl.Boolean).alias("blocking")
    )
    if other_only.height:  # "0 % covered" says nothing more than "no reading in the heating fuel"
        issues_df = issues_df.filter(
            ~((pl.col("code") == "low_coverage") & pl.col("building_id").is_in(other_only["building_id"].implode()))
        )

    # assemble and screen
    shares = refdata.load("baseload_shares")
    frame = (
        b.select(
            "building_id",
            "name",
            "station_id",
            "use_type",
            "floor_area_ft2",
            "year_built",
            "heating_fuel",
            "price",
            "address",
            "city",
        )
        .join(met, on="building_id", how="left", maintain_order="left")
        .join(exp, on="building_id", how="left", maintain_order="left")
        .join(
            envelope.select(
                "building_id",
                "era",
                "envelope_source",
                "balance_point_f",
                "efficiency",
                *[c for c in envelope.columns if c.startswith("ua_")],
            ),
            on="building_id",
            how="left",
            maintain_order="left",
        )
    )
    frame = frame.with_columns(pl.Series("hdd65", hdd65), pl.Series("hdd_balance", hdd_bal))
    frame = frame.with_columns(
        pl.when(pl.col("heating_fuel") == "electricity")
        .then(pl.lit("electricity"))
        .otherwise(pl.lit("combustion"))
        .alias("_fc")
    )
    frame = frame.join(
        shares.select(
            pl.col("use_type"),
            pl.col("fuel_class").alias("_fc"),
            pl.col("nonheating_share").cast(pl.Float64).alias("baseload_share_default"),
        ),
        on=["use_type", "_fc"],
        how="left",
        maintain_order="left",
    ).drop("_fc")
    frame = frame.with_columns(
        pl.when(pl.col("total_fuel_kbtu") > 0)
        .then(pl.col("baseload_kbtu") / pl.col("total_fuel_kbtu"))
        .otherwise(None)
        .alias("baseload_share")
    )
    frame = frame.join(_prices(b, cfg), on="building_id", how="left", maintain_order="left")
    frame = frame.join(billed, on="building_id", how="left", maintain_order="left")
    frame = frame.join(
        _year_over_year(conv, spans, met, cube, normals, grid), on="building_id", how="left", maintain_order="left"
    )
    if previous is not None and previous.height:
        frame = frame.join(
            previous.select("building_id", pl.col("normal_heating_kbtu").alias("prev_normal_heating_kbtu")),
            on="building_id",
            how="left",
            maintain_order="left",
        )
    else:
        frame = frame.with_columns(pl.lit(None, dtype=pl.Float64).alias("prev_normal_heating_kbtu"))
    # a ratio that far off the expectation is a data problem, not waste
    uf = thr["unit_error_factor_expected"]
    ratio = pl.col("actual_heating_kbtu") / pl.col("expected_heating_kbtu")
    # (only a finite ratio over a positive expectation; a missing fuel or missing weather has its own issue)
    no_basis = issues_df.filter(pl.col("code").is_in(list(NO_BASIS_CODES)))["building_id"].implode()
    far = frame.filter(
        ((ratio >= uf) | (ratio <= 1 / thr["unit_error_factor_expected_low"]))
        & (pl.col("expected_heating_kbtu") > 0)
        & ratio.is_finite()
        & ~pl.col("building_id").is_in(no_basis)
    ).select(
        "building_id",
        pl.lit("likely_unit_error").alias("code"),
        (
            pl.lit("metered heating is ")
            + pl.when(ratio >= 10)
            .then(ratio.round(0).cast(pl.Int64).cast(pl.String))
            .otherwise(ratio.round_sig_figs(3).cast(pl.String))
            + pl.lit("× the expectation: check the units (")
            + pl.col("heating_fuel").replace_strict(UNIT_MIXUPS, default="the unit column against the bills")
            + pl.lit(") and the floor area")
            + pl.when((pl.col("heating_fuel") == "electricity") & (ratio < 1))
            .then(
                pl.lit(
                    "; for electric heat also a heat pump (give its seasonal COP as heating_efficiency) "
                    "or a meter whose lights, plugs and cooling leave little to heating"
                )
            )
            .otherwise(pl.lit(""))
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    )
    issues_df = (
        pl.concat([issues_df, far]).unique(subset=["building_id", "code"], keep="first").sort("building_id", "code")
    )
    agg = issues_df.group_by("building_id").agg(
        pl.col("blocking").any().alias("blocking"),
        pl.col("code").sort().alias("data_issue_codes"),
        pl.col("detail").sort_by("code").alias("data_issue_texts"),
    )
    frame = frame.join(agg, on="building_id", how="left", maintain_order="left").with_columns(
        pl.col("blocking").fill_null(False),
        pl.col("data_issue_codes").fill_null(pl.lit([], dtype=pl.List(pl.String))),
        pl.col("data_issue_texts").fill_null(pl.lit([], dtype=pl.List(pl.String))),
    )
    # no metered heating without heating-fuel readings, no expectation without weather: shown as n/a
    no_fuel = (
        pl.col("data_issue_codes").list.set_intersection(["no_readings", "no_heating_fuel_readings"]).list.len() > 0
    )
    no_weather = pl.col("data_issue_codes").list.contains("no_weather_at_station")
    frame = frame.with_columns(
        pl.when(no_fuel).then(None).otherwise(pl.col("actual_heating_kbtu")).alias("actual_heating_kbtu"),
        *[
            pl.when(no_weather).then(None).otherwise(pl.col(c)).alias(c)
            for c in ("expected_heating_kbtu", "expected_low_kbtu", "expected_high_kbtu")
        ],
    )
    if plan_context is not None:  # issue 17: events.plan_context (audits that found nothing, confirmed findings)
        frame = frame.join(plan_context, on="building_id", how="left", maintain_order="left")
        if "_measure_in_years" in frame.columns:  # the drop after a measure is savings, not a change on last year
            no_yoy = pl.col("_measure_in_years").fill_null(False)
            frame = frame.with_columns(
                [
                    pl.when(no_yoy).then(None).otherwise(pl.col(c)).alias(c)
                    for c in ("yoy_change", "prev_normal_heating_kbtu")
                    if c in frame.columns
                ]
            )
    lap("screening")  # the data issues and the frame: counted with the screening, as in one pass
    part.savings = None
    if events is not None:  # savings after a measure (issue 17): screening/events.py, screening/savings.py
        from . import events as ev

        sc = cfg["savings"]
        part.savings, part.savings_periods = ev.savings_with_periods(
            conv,
            b,
            cube,
            normals,
            grid,
            events.filter(pl.col("building_id").is_in(b["building_id"].implode())),
            _prices(b, cfg),
            window_end=we,
            blackout_days=sc["blackout_days"],
            min_periods=sc["baseline_min_periods"],
            cv_max=sc["cv_rmse_max"],
            nmbe_max=sc["nmbe_max"],
        )
        lap("savings")
    part.frame, part.issues, part.periods, part.envelope, part.rejects = frame, issues_df, periods, envelope, rejects
    return part


_AUDITED = ("ua_total_btu_h_f", "heating_efficiency", "balance_point_f")


def _audit_bias(b: pl.DataFrame, min_audits: int) -> pl.DataFrame | None:
    """The defaults' bias per era x use type from the buildings' audited values (``learning.audit_bias``);
    None when no building has one. The defaults are the envelope estimate with the audited values left out."""
    from . import learning

    cols = [c for c in _AUDITED if c in b.columns]
    if not cols or not bool(b.select(pl.any_horizontal([pl.col(c).is_not_null() for c in cols])).to_series().any()):
        return None
    envelope = env.estimate_envelope(b)
    dflt = env.estimate_envelope(b.with_columns([pl.lit(None, dtype=pl.Float64).alias(c) for c in cols]))
    given = b.select(
        "building_id",
        *[pl.col(c).cast(pl.Float64) if c in cols else pl.lit(None, dtype=pl.Float64).alias(c) for c in _AUDITED],
    ).join(envelope.select("building_id", "era", "use_type"), on="building_id", how="inner")
    return learning.audit_bias(given, dflt, min_audits=min_audits)


def _apply_bias(exp: pl.DataFrame, b: pl.DataFrame, envelope: pl.DataFrame, learned: pl.DataFrame) -> pl.DataFrame:
    """The expected heating of buildings without their own audited UA or efficiency, times the learned factor."""
    from . import learning

    eff_given = (
        b.select("building_id", pl.col("heating_efficiency").is_not_null().alias("efficiency_given"))
        if "heating_efficiency" in b.columns
        else b.select("building_id", pl.lit(False).alias("efficiency_given"))
    )
    fr = (
        envelope.select("building_id", "era", "use_type", pl.col("ua_parts_scaled").alias("ua_given"))
        .join(eff_given, on="building_id", how="left", maintain_order="left")
        .with_columns(pl.col("efficiency_given").fill_null(False))
    )
    f = learning.expectation_factors(fr, learned)["learned_factor"]
    cols = [
        c
        for c in (
            "expected_heating_kbtu",
            "expected_low_kbtu",
            "expected_high_kbtu",
            "expected_point_kbtu",
            "expected_fixed_base_kbtu",
            "expected_modified_kbtu",
        )
        if c in exp.columns
    ]
    return exp.with_columns([pl.col(c) * f for c in cols])


def _post_measure_spans(
    conv: pl.DataFrame,
    spans: pl.DataFrame,
    ctx: pl.DataFrame,
    window_end: _dt.date,
    *,
    lookback_months: int,
    min_coverage: float,
    fill_end_days: int,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """The spans of buildings judged on their post-measure days (``events.plan_context`` ``_judge_from``).

    Each such span becomes ``[_judge_from, window_end]`` when the bills cover it (rule 1 of
    ``metered.choose_spans`` on that window, the filled end included). A building whose bills do not
    keeps its 12-month span and is held off the plan (``_measure_recent``), its note saying why.
    """
    jf = ctx.filter(pl.col("_judge_from").is_not_null()).select("building_id", "_judge_from")
    if jf.height == 0:
        return spans, ctx
    new = []
    for (day,), grp in jf.group_by("_judge_from", maintain_order=True):  # one call per measure day, not per building
        ids = grp["building_id"]
        s = metered.choose_spans(
            conv.filter(pl.col("building_id").is_in(ids.implode())),
            day,
            window_end,
            lookback_months=lookback_months,
            min_coverage=min_coverage,
            building_ids=ids,
            fill_end_days=fill_end_days,
        )
        new.append(s.filter(pl.col("span_kind") == "window").select(spans.columns))
    cut = pl.concat(new).cast(spans.schema)
    ok = cut["building_id"].implode()
    spans = pl.concat([spans.filter(~pl.col("building_id").is_in(ok)), cut]).sort("building_id")
    failed = pl.col("_judge_from").is_not_null() & ~pl.col("building_id").is_in(ok)
    ctx = ctx.with_columns(
        pl.when(failed).then(pl.lit(True)).otherwise(pl.col("_measure_recent")).alias("_measure_recent"),
        pl.when(failed)
        .then(
            pl.lit("measure of ")
            + pl.col("_measure_date").cast(pl.String)
            + pl.lit(": the bills do not cover every day from ")
            + pl.col("_judge_from").cast(pl.String)
            + pl.lit(
                f" to {window_end}, so it is not judged on its post-measure days and not planned "
                "on the mixed 12 months (its savings are in savings.csv)"
            )
        )
        .otherwise(pl.col("plan_note"))
        .alias("plan_note"),
    ).with_columns(pl.when(failed).then(None).otherwise(pl.col("_judge_from")).alias("_judge_from"))
    return spans, ctx


def _check_normal_years(normals, b: pl.DataFrame, weather: pl.DataFrame, ny: list[int]) -> None:
    """Configured normal years must be complete years of every station that serves a building.

    Otherwise every normal-year figure of those buildings would be empty and the year-over-year
    path of the audit list silently off.
    """
    used = sorted(set(b["station_id"].to_list()))
    missing = [s for s in used if not normals.years_used.get(s)]
    if not missing:
        return
    rng = (
        weather.filter(pl.col("station_id").is_in(missing))
        .group_by("station_id")
        .agg(pl.col("date").min().alias("a"), pl.col("date").max().alias("b"))
        .sort("station_id")
    )
    have = "; ".join(f"{r['station_id']} has weather {r['a']} to {r['b']}" for r in rng.head(3).iter_rows(named=True))
    more = f" and {len(missing) - 3} more" if len(missing) > 3 else ""
    raise ConfigError(
        f"config key [analysis] normal_years: got {ny!r}; no complete year of weather in "
        f"{ny[0]}–{ny[1]} at station(s) {', '.join(missing[:3])}{more} ({have}); "
        "expected years the weather files cover (or leave it empty for every complete year)"
    )


def _no_building_screenable(conv: pl.DataFrame, n_readings: int, window, lookback: int, paths: dict) -> None:
    """No building has a heating-fuel reading on any day of its span: nothing can be screened."""
    first = conv["period_start"].min() if conv.height else None
    last = conv["period_end"].max() if conv.height else None
    _no_building_screenable_counts(conv.height, n_readings, first, last, window, paths)


def _no_building_screenable_counts(n_conv: int, n_readings: int, first, last, window, paths: dict) -> None:
    """:func:`_no_building_screenable` from the counts and the readings' first and last dates."""
    ws, we = window
    if n_conv:
        span = f"readings run from {first!s} to {last!s}"
    elif n_readings:
        span = "no reading converts to energy (see rejects)"
    else:
        span = "no reading was accepted"
    raise InputError(
        paths.get("readings", "readings"),
        f"no building can be screened: no heating-fuel reading covers any day of the analysis "
        f"window {ws} to {we} ({span})",
        expected="readings for the window (check --as-of / --from / --to)",
    )


def _year_over_year(
    conv: pl.DataFrame, spans: pl.DataFrame, met: pl.DataFrame, cube, normals, grid: np.ndarray
) -> pl.DataFrame:
    """Weather-normalized heating of the span against the 12 months before it, from the readings.

    For buildings with a regression fit (baseload α per day, base τ) and readings covering both
    spans, each year's heating is normalized by the ratio of normal-year to actual degree days at τ
    (the degree-day normalization of ASHRAE Guideline 14 practice)::

        H_norm = (E − α·days) · HDD_normal(τ) / HDD_year(τ)
        yoy_change = H_norm(current) / H_norm(previous) − 1

    Buildings without a fit (annual totals; ``fit_method`` "default share") use the use type's
    non-heating share s and the engineering balance point as τ: ``H = (1 − s)·E``, the same
    normalization.

    Returns ``building_id, yoy_change`` for the buildings where it is defined, and
    ``prev_fuel_kbtu``: the heating fuel's whole use over the 12 months before the span (not weather
    normalized), where the readings cover them.
    """
    fit = met.filter(
        (
            ((pl.col("fit_method") == "regression") & pl.col("fitted_base_f").is_not_null())
            | ((pl.col("fit_method") == "default share") & pl.col("base_used_f").is_not_null())
        )
        & (pl.col("coverage") + pl.col("filled_days") / _span_days() >= 0.99)
    ).select(
        "building_id",
        pl.coalesce("fitted_base_f", "base_used_f").alias("fitted_base_f"),
        pl.col("baseload_kbtu_per_day").fill_null(0.0),
        "actual_heating_kbtu",
        pl.when(pl.col("fit_method") == "default share")
        .then(pl.col("baseload_share"))
        .otherwise(0.0)
        .fill_null(0.0)
        .alias("_share"),
    )
    sp = spans.join(fit, on="building_id", how="inner").with_columns(
        pl.col("span_start").dt.offset_by("-1y").alias("prev_start"),
        (pl.col("span_start") - pl.duration(days=1)).alias("prev_end"),
    )
    if sp.height == 0:
        return pl.DataFrame(schema={"building_id": pl.String, "yoy_change": pl.Float64, "prev_fuel_kbtu": pl.Float64})
    prev = metered.calendarize(
        conv, sp.select("building_id", pl.col("prev_start").alias("span_start"), pl.col("prev_end").alias("span_end"))
    )
    prev = (
        prev.filter(pl.col("is_heating_fuel"))
        .group_by("building_id")
        .agg(pl.col("energy_kbtu").sum().alias("e_prev"), pl.col("coverage").min().alias("cov_prev"))
    )
    sp = sp.join(prev, on="building_id", how="inner").filter(pl.col("cov_prev") >= 0.99)
    if sp.height == 0:
        return pl.DataFrame(schema={"building_id": pl.String, "yoy_change": pl.Float64, "prev_fuel_kbtu": pl.Float64})
    st = sp["station_id"].to_numpy()
    tau = sp["fitted_base_f"].to_numpy()
    hdd_cur = cube.at_base(st, sp["span_start"], sp["span_end"], tau)[0]
    hdd_prev, _, miss_prev = cube.at_base(st, sp["prev_start"], sp["prev_end"], tau)
    j = nearest_base(grid, tau)
    hdd_norm = normals.for_stations(st)[np.arange(st.size), j]
    days_prev = (sp["prev_end"] - sp["prev_start"]).dt.total_days().to_numpy() + 1
    heat_prev = np.maximum(
        sp["e_prev"].to_numpy() * (1.0 - sp["_share"].to_numpy()) - sp["baseload_kbtu_per_day"].to_numpy() * days_prev,
        0.0,
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        norm_prev = heat_prev * hdd_norm / hdd_prev
        norm_cur = sp["actual_heating_kbtu"].to_numpy() * hdd_norm / hdd_cur
        yoy = norm_cur / norm_prev - 1.0
    ok = np.isfinite(yoy) & (miss_prev == 0) & (norm_prev > 0)
    return pl.DataFrame(
        {"building_id": sp["building_id"], "yoy_change": np.where(ok, yoy, np.nan), "prev_fuel_kbtu": sp["e_prev"]}
    ).with_columns(pl.col("yoy_change").fill_nan(None))


def _span_days() -> pl.Expr:
    return (pl.col("span_end") - pl.col("span_start")).dt.total_days() + 1


def _fill_hdd(cube, spans: pl.DataFrame, grid: np.ndarray) -> np.ndarray:
    """HDD at every grid base over each span's filled days at its end (zeros where none) [°F·day]."""
    out = np.zeros((spans.height, grid.size))
    idx = np.flatnonzero(spans["filled_days"].fill_null(0).to_numpy() > 0)
    if idx.size:
        sub = spans[idx]
        start = sub.select(pl.col("span_end") - pl.duration(days=pl.col("filled_days")) + pl.duration(days=1))
        out[idx] = cube.period_totals(sub["station_id"].to_numpy(), start.to_series(), sub["span_end"])[0]
    return out


def _missing_bill_issues(conv: pl.DataFrame, spans: pl.DataFrame, window) -> pl.DataFrame:
    """Heating-fuel bills missing inside the analysis window, their dates named (``missing_bills``)."""
    ws, we = window
    g = metered.missing_bills(conv, ws, we, spans=spans)
    g = g.with_columns(
        (
            pl.when(pl.col("meter_id").is_null())
            .then(pl.lit(""))
            .otherwise(pl.lit("meter ") + pl.col("meter_id") + pl.lit(" "))
        ).alias("_m")
    )
    g = g.with_columns(pl.format("{}{}..{} ({} days)", "_m", "gap_start", "gap_end", "days").alias("_d"))
    t = ISSUE_TEXT["missing_bills"].replace("{window_start}", str(ws)).replace("{window_end}", str(we))
    head, tail = t.split("{gaps}")
    return (
        g.group_by("building_id", maintain_order=True)
        .agg(pl.col("_d").str.join("; "))
        .select(
            "building_id",
            pl.lit("missing_bills").alias("code"),
            (pl.lit(head) + pl.col("_d") + pl.lit(tail)).alias("detail"),
            pl.lit(False).alias("blocking"),
        )
        .sort("building_id")
    )


def _filled_end_issues(met: pl.DataFrame) -> pl.DataFrame:
    """Spans whose last days had no reading yet and were filled (``end_days_filled``)."""
    f = met.filter(pl.col("filled_days") > 0)
    src = (
        pl.when(pl.col("fit_method") == "regression")
        .then(pl.lit("the building's own weather fit"))
        .otherwise(pl.lit("the days and degree days of its read part (no weather fit)"))
    )
    share = (100 * pl.col("filled_kbtu") / pl.col("total_fuel_kbtu")).round(1).fill_nan(0.0).fill_null(0.0)
    t = ISSUE_TEXT["end_days_filled"]
    for k in ("{days}", "{fill_start}", "{span_end}", "{source}", "{share}"):
        t = t.replace(k, "{}")
    return f.select(
        "building_id",
        pl.lit("end_days_filled").alias("code"),
        pl.format(
            t,
            "filled_days",
            (pl.col("span_end") - pl.duration(days=pl.col("filled_days") - 1)).cast(pl.String),
            pl.col("span_end").cast(pl.String),
            src,
            share,
        ).alias("detail"),
        pl.lit(False).alias("blocking"),
    ).sort("building_id")


def _other_fuel_only(conv: pl.DataFrame, b: pl.DataFrame) -> pl.DataFrame:
    """Buildings whose readings are all of fuels other than their heating fuel (``no_heating_fuel_readings``)."""
    per = conv.group_by("building_id").agg(
        pl.col("is_heating_fuel").any().alias("_any"), pl.col("fuel").unique().sort().str.join(", ").alias("_fuels")
    )
    per = per.filter(~pl.col("_any")).join(b.select("building_id", "heating_fuel"), on="building_id")
    t = ISSUE_TEXT["no_heating_fuel_readings"]
    return per.select(
        "building_id",
        pl.lit("no_heating_fuel_readings").alias("code"),
        pl.format(
            t.replace("{fuels}", "{}").replace("{heating_fuel}", "{}"), pl.col("_fuels"), pl.col("heating_fuel")
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    ).sort("building_id")


def _no_weather_issues(no_wx: pl.DataFrame, weather: pl.DataFrame) -> pl.DataFrame:
    """Buildings whose station has no weather on any day of the span (``no_weather_at_station``)."""
    rec = weather.group_by("station_id").agg(
        (
            pl.lit("its weather runs ")
            + pl.col("date").min().cast(pl.String)
            + pl.lit(" to ")
            + pl.col("date").max().cast(pl.String)
        ).alias("_rec")
    )
    j = no_wx.join(rec, on="station_id", how="left").with_columns(pl.col("_rec").fill_null("no weather at all"))
    t = ISSUE_TEXT["no_weather_at_station"]
    for k in ("{station_id}", "{span_start}", "{span_end}", "{record}"):
        t = t.replace(k, "{}")
    return j.select(
        "building_id",
        pl.lit("no_weather_at_station").alias("code"),
        pl.format(
            t, "station_id", pl.col("span_start").cast(pl.String), pl.col("span_end").cast(pl.String), "_rec"
        ).alias("detail"),
        pl.lit(True).alias("blocking"),
    ).sort("building_id")


def _gap_details(gaps: pl.DataFrame, wgap: pl.DataFrame) -> pl.DataFrame:
    j = wgap.select("building_id", "station_id", "span_start", "span_end", "missing").join(
        gaps, on="station_id", how="left"
    )
    j = j.filter(
        pl.col("gap_start").is_null()
        | ((pl.col("gap_start") <= pl.col("span_end")) & (pl.col("gap_end") >= pl.col("span_start")))
    )
    j = j.with_columns(
        pl.when(pl.col("gap_start").is_null())
        .then(pl.lit("outside the station's record"))
        .otherwise(pl.col("gap_start").cast(pl.String) + pl.lit("–") + pl.col("gap_end").cast(pl.String))
        .alias("_d")
    )
    return (
        j.group_by("building_id")
        .agg(pl.col("missing").first(), pl.col("_d").unique().sort().str.join("; "))
        .select(
            "building_id",
            pl.lit("weather_gap").alias("code"),
            (
                pl.col("missing").cast(pl.String) + pl.lit(" day(s) of the span have no weather data: ") + pl.col("_d")
            ).alias("detail"),
            pl.lit(True).alias("blocking"),
        )
        .sort("building_id")
    )


def _daily_weights(cube, spans: pl.DataFrame, conv: pl.DataFrame, envelope: pl.DataFrame) -> pl.DataFrame:
    """Daily HDD at each building's balance point (nearest grid base) over its readings' days.

    The weights of the degree-day proration option of :func:`screening.metered.calendarize`.
    """
    rng = conv.group_by("building_id").agg(
        pl.col("period_start").min().alias("s"), pl.col("period_end").max().alias("e")
    )
    rng = (
        spans.select("building_id", "station_id")
        .join(rng, on="building_id", how="inner")
        .join(envelope.select("building_id", "balance_point_f"), on="building_id")
        .sort("building_id")
    )
    d = cube.daily(rng["station_id"].to_numpy(), rng["s"], rng["e"])
    j = nearest_base(cube.bases_f, rng["balance_point_f"].to_numpy())
    w = d.dd[np.arange(d.row.size), j[d.row]]
    return pl.DataFrame(
        {
            "building_id": rng["building_id"].to_numpy()[d.row],
            "date": d.date.astype("datetime64[D]"),
            "weight": np.where(d.missing, np.nan, w),
        }
    ).with_columns(pl.col("weight").fill_nan(None))


def _prices(b: pl.DataFrame, cfg: dict) -> pl.DataFrame:
    """$ and kg CO2e per kBtu of fuel input for each building."""
    pu = refdata.load("price_units")
    ef = refdata.load("emission_factors")
    rows = []
    for r in pu.iter_rows(named=True):
        fuel, unit = r["fuel"], r["price_unit"]
        kbtu_per_unit = (
            units.btu_per_unit(
                unit,
                fuel,
                heat_contents={
                    "natural_gas": cfg["analysis"]["gas_btu_per_ft3"],
                    "district_steam": cfg["analysis"]["steam_btu_per_lb"],
                },
            )
            / 1000.0
        )
        kg = float(ef.filter(pl.col("fuel") == fuel)["kg_co2e_per_mmbtu"][0]) / 1000.0
        if fuel == "electricity" and cfg["emissions"]["electricity_kg_co2e_per_kwh"] is not None:
            kg = cfg["emissions"]["electricity_kg_co2e_per_kwh"] / units.btu_per_unit("kWh", fuel) * 1000.0
        rows.append(
            {
                "heating_fuel": fuel,
                "_kbtu_per_unit": kbtu_per_unit,
                "_price": float(cfg["prices"][fuel]),
                "kg_co2e_per_kbtu": kg,
            }
        )
    table = pl.DataFrame(rows)
    return (
        b.select("building_id", "heating_fuel", "price")
        .join(table, on="heating_fuel", how="left")
        .select(
            "building_id",
            (pl.coalesce(pl.col("price"), pl.col("_price")) / pl.col("_kbtu_per_unit")).alias("usd_per_kbtu"),
            "kg_co2e_per_kbtu",
        )
    )
