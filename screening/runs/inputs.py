"""A run's inputs: the files a config names, and the stored rows the screening reads (whole, or a
chunk of buildings' readings at a time)."""

from __future__ import annotations

import glob
import logging
from pathlib import Path

import polars as pl

from .. import pipeline, sources
from ..config import Settings
from ..errors import ConfigError, InputError
from ..store import Store

log = logging.getLogger("ddscreen")


def expand(pattern: str, kind: str) -> list[str]:
    if not pattern:
        raise ConfigError(f"no {kind} file given: pass --{kind} FILE or set [inputs] {kind} in the config")
    if any(ch in pattern for ch in "*?[") and not Path(pattern).exists():  # "bills [2026].csv" is a name
        found = sorted(glob.glob(pattern))
        if not found:
            raise InputError(pattern, f"no {kind} file matches this pattern")
        return found
    return [pattern]


class StoreReadings(pipeline.ReadingsSource):
    """Each chunk's readings pulled from the store (named statements, the chunk's building ids bound),
    through a read-only connection held while the screening runs. For one readings file only: rows
    given by several files are resolved over all of them first (``sources.one_row_per_key``)."""

    def __init__(self, db_path: str, memory_mb: int = 0):
        self.db_path = db_path
        self.memory_mb = memory_mb
        self.store: Store | None = None

    def _frame(self, name: str, params: dict) -> pl.DataFrame:
        if self.store is None:
            self.store = Store(self.db_path, read_only=True, memory_mb=self.memory_mb)
        return self.store.frame(name, params).drop(sources.FILE_COL, strict=False)

    def __call__(self, ids: pl.Series) -> pl.DataFrame:
        """The readings of ``ids`` (a chunk: the store reads those between its first and last id, in
        the table's order; the ids of other buildings between them are left out here)."""
        rows = self._frame("select_readings_of_buildings", {"lo": ids.min(), "hi": ids.max()})
        return rows.filter(pl.col("building_id").is_in(ids.implode())).rechunk()  # (DuckDB hands over pieces)

    def others(self, ids: pl.Series) -> pl.DataFrame:
        return self._frame("select_readings_of_other_buildings", {"ids": ids.to_list()})

    def close(self) -> None:
        if self.store is not None:
            self.store.close()
            self.store = None


def readings_in_chunks(store: Store, cfg: Settings, db_path: str, n_buildings: int) -> bool:
    """Whether the screening pulls each chunk's readings from the store: chunks configured and more
    buildings than one chunk, one readings file, a database file (not ``:memory:``)."""
    return (
        pipeline.chunk_size(cfg.run.chunk_buildings, n_buildings) < n_buildings
        and str(db_path) != ":memory:"
        and int(store.rows("count_reading_files")[0][0]) <= 1
    )


def stored_inputs(store: Store, *, readings: bool = True) -> dict[str, pl.DataFrame]:
    """The stored rows of the files the run names, one row per key across files (see ``sources``):
    ``buildings``, ``readings`` (unless ``readings`` is false: pulled a chunk at a time), ``weather``
    and the cross-file ``rejects``."""
    frames, rejects = [], []
    for name, spec in (
        ("select_buildings", sources.BUILDINGS),
        ("select_readings", sources.READINGS),
        ("select_weather", sources.WEATHER),
    ):
        if name == "select_readings" and not readings:
            frames.append(pl.DataFrame())
            continue
        df, rej, notices = sources.one_row_per_key(store.frame(name), spec)
        for n in notices:
            log.warning("%s", n)
        if df.height == 0 or df[sources.FILE_COL].n_unique() <= 1:
            df = df.drop(sources.FILE_COL)  # one file: the path is the kind's
        if name == "select_weather":
            df = df.drop(sources.LINE_COL, sources.FILE_COL, strict=False)
        frames.append(df)
        rejects.append(rej)
    return {"buildings": frames[0], "readings": frames[1], "weather": frames[2], "rejects": pl.concat(rejects)}
