"""The screening chunks and the sheet rendering as tasks on Dask (the optional ``cluster`` extra).

``pip install 'ddscreen[cluster]'`` installs ``dask[distributed]``; ``[run] cluster`` in the config
names where the tasks run:

* ``""`` (the default): in this process, as without the extra (Dask is never imported);
* ``"local:N"``: a local cluster of N worker processes, started for the run and closed after it;
* a scheduler address (``"tcp://host:8786"``, anything with ``://``): an existing Dask cluster. Its
  workers must import the same ddscreen version and see the database's folder at the same path
  (the chunks' Parquet files are written there) and the output folder (the sheets are written there).

A run then writes each chunk's buildings and readings as Parquet partitions
(``<database folder>/.ddscreen-cluster-*/screen-*/chunk-<k>/``), one task per chunk reads them and runs
``pipeline._screen_part`` (the same function as in one process), writes the chunk's result frames as
Parquet partitions beside them and returns only their column types; DuckDB reads the partitions back
(``sql/cluster.sql``), in chunk order, and the portfolio pass runs here as usual. The sheets' chunks
(``render.pdf._render_chunk``) are tasks too. The results are those of one process: ranking.csv byte for
byte (``tests/test_cluster.py``; ``benchmarks/bench_cluster.py`` measures the overhead). The folder is
removed when the run ends.
"""

from __future__ import annotations

import atexit
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import polars as pl

from . import pipeline
from .config import CLUSTER_LOCAL, Settings, check_cluster, settings
from .errors import ConfigError
from .store import Store

#: The result frames of a chunk (``pipeline._Part``) written as Parquet; the other fields are small values.
PART_FRAMES = ("frame", "issues", "periods", "envelope", "rejects", "savings", "savings_periods", "plan_context")
PART_VALUES = ("covered", "first", "last", "n_conv", "n_readings")


def from_config(cfg: Settings | dict, db_path: str | Path | None = None) -> DaskChunks | None:
    """The executor named by ``[run] cluster`` (None when empty); ``ConfigError`` when Dask is missing."""
    address = settings(cfg).run.cluster
    check_cluster(address)
    if not address:
        return None
    folder = Path(db_path).resolve().parent if db_path and str(db_path) != ":memory:" else None
    return DaskChunks(address, work_root=folder)


class DaskChunks(pipeline.ChunkExecutor):
    """Screening chunks and sheet chunks as tasks on a Dask cluster (see the module's docstring)."""

    def __init__(self, address: str, *, work_root: Path | None = None):
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise ConfigError(
                f"[run] cluster = {address!r} needs Dask: pip install 'ddscreen[cluster]' (or leave cluster empty)"
            ) from None
        self._cluster = None
        m = CLUSTER_LOCAL.match(address)
        try:
            if m:
                from .render.pdf import _main_not_reimported

                # the worker processes are spawned: they must not run ``python -m screening`` (an unguarded main) again
                with _main_not_reimported():
                    self._cluster = LocalCluster(
                        n_workers=int(m.group(1)), threads_per_worker=1, processes=True, dashboard_address=None
                    )
                self.client = Client(self._cluster)
            else:
                self.client = Client(address, timeout="30s")
        except OSError as exc:
            raise ConfigError(f"[run] cluster = {address!r}: cannot reach the scheduler ({exc})") from None
        self.work = Path(tempfile.mkdtemp(prefix=".ddscreen-cluster-", dir=work_root))
        self._closed = False
        atexit.register(self.close)

    # -- screening ------------------------------------------------------------------------
    def screen_parts(self, chunks: Iterator[tuple[pl.DataFrame, pl.DataFrame]], common: dict) -> list:
        shared = self.client.scatter(common, broadcast=True, hash=False)
        call = Path(tempfile.mkdtemp(prefix="screen-", dir=self.work))  # one folder per screening
        futures = []
        for k, (b, r) in enumerate(chunks):  # each chunk's inputs written, then its task submitted at once
            d = call / f"chunk-{k:05d}"
            d.mkdir()
            b.write_parquet(d / "buildings.parquet")
            r.write_parquet(d / "readings.parquet")
            del b, r
            key = f"ddscreen-chunk-{k}-{self.work.name}-{call.name}"
            futures.append(self.client.submit(screen_chunk, str(d), shared, key=key))
        metas = self.client.gather(futures)
        parts = []
        with Store(":memory:") as store:
            for meta in metas:
                part = pipeline._Part()
                for name in PART_FRAMES:
                    setattr(part, name, _read_back(store, meta["dir"], name, meta["frames"][name]))
                for name in PART_VALUES:
                    setattr(part, name, meta[name])
                parts.append(part)
        return parts

    # -- sheets ---------------------------------------------------------------------------
    def render_chunks(self, chunks: list[tuple[list, list]], paper: str) -> list[dict[str, Any]]:
        """``render.pdf._render_chunk`` of every sheet chunk, as tasks; their stats in order."""
        from .render import pdf

        futures = [
            self.client.submit(pdf._render_chunk, c, t, paper, key=f"ddscreen-sheets-{k}-{self.work.name}")
            for k, (c, t) in enumerate(chunks)
        ]
        return list(self.client.gather(futures))

    def close(self) -> None:
        """Close the client (and a local cluster) and remove the Parquet folder."""
        if self._closed:
            return
        self._closed = True
        try:
            self.client.close()
            if self._cluster is not None:
                self._cluster.close()
        finally:
            shutil.rmtree(self.work, ignore_errors=True)  # our own folder (mkdtemp above)


def screen_chunk(folder: str, common: dict) -> dict[str, Any]:
    """The task: one chunk's Parquet inputs → ``pipeline._screen_part`` → its result frames as Parquet.

    Returns the small values of the part and, per frame, its column types (``None`` for a frame
    given back inline: absent, or without columns).
    """
    d = Path(folder)
    b = pl.read_parquet(d / "buildings.parquet")
    r = pl.read_parquet(d / "readings.parquet")
    part = pipeline._screen_part(b, r, lap=_no_lap, **common)
    meta: dict[str, Any] = {"dir": folder, "frames": {}}
    for name in PART_FRAMES:
        df = getattr(part, name)
        if df is None or df.width == 0:
            meta["frames"][name] = ("inline", df)
        else:
            df.write_parquet(d / f"{name}.parquet")
            meta["frames"][name] = ("parquet", dict(df.schema))
    for name in PART_VALUES:
        meta[name] = getattr(part, name)
    return meta


def _no_lap(name: str) -> None:
    """Stage timing is not kept inside a task."""


def _read_back(store: Store, folder: str, name: str, how: tuple) -> pl.DataFrame | None:
    """A result frame of a chunk: read by DuckDB from its Parquet partition, with the column types it
    was written with (Parquet and DuckDB have no categorical or null-only column)."""
    kind, value = how
    if kind == "inline":
        return value
    df = store.frame("read_chunk_result", {"path": str(Path(folder) / f"{name}.parquet")})
    if df.schema == value:
        return df
    return df.select(pl.col(c).cast(t) for c, t in value.items())
