"""The DuckDB store: named SQL statements from ``sql/*.sql``, bound parameters only.

A statement block starts with ``-- name: <name>``; the comment lines right after it
are its description; the block holds exactly one statement. Frames are passed to
SQL by registering them under the relation name the statement reads
(``stage_buildings`` …), never by formatting values into SQL text.
"""

from __future__ import annotations

import re
from contextlib import contextmanager
from functools import lru_cache
from pathlib import Path

import duckdb
import polars as pl

from .errors import StoreError
from .resources import sql_dir

SCHEMA_VERSION = 3  # see sql/schema.sql
_NAME = re.compile(r"^--\s*name:\s*([A-Za-z0-9_]+)\s*$")


@lru_cache(maxsize=None)
def statements() -> dict[str, str]:
    """All named statements of ``sql/*.sql`` (name → SQL text)."""
    out: dict[str, str] = {}
    for path in sorted(sql_dir().glob("*.sql")):
        name = None
        buf: list[str] = []
        for line in path.read_text(encoding="utf-8").splitlines() + ["-- name: __end__"]:
            m = _NAME.match(line.strip())
            if m:
                if name is not None:
                    sql = "\n".join(x for x in buf if not x.strip().startswith("--")).strip()
                    if sql.count(";") > 1 or not sql:
                        raise ValueError(f"{path.name}: block {name!r} must hold exactly one statement")
                    if name in out:
                        raise ValueError(f"{path.name}: statement name {name!r} is used twice")
                    out[name] = sql.rstrip(";")
                name = m.group(1)
                buf = []
            elif name is not None:
                buf.append(line)
    out.pop("__end__", None)
    return out


class Store:
    """One open DuckDB database file (or ``:memory:``)."""

    def __init__(self, path: str | Path = ":memory:", *, read_only: bool = False, memory_mb: int = 0):
        """``memory_mb`` > 0 is DuckDB's ``memory_limit`` for this connection: above it, loads, sorts and
        groupings spill to a temporary folder beside the database (``<database>.tmp``) instead of
        growing (``[run] store_memory_mb``); 0 leaves DuckDB's default (80 % of the machine's memory)."""
        self.path = str(path)
        try:
            if self.path != ":memory:" and not read_only:
                Path(self.path).parent.mkdir(parents=True, exist_ok=True)
            settings: dict[str, str | bool | int | float | list[str]] = (
                {"memory_limit": f"{int(memory_mb)}MB"} if memory_mb > 0 else {}
            )
            self.con = duckdb.connect(self.path, read_only=read_only, config=settings)
            self.con.execute(statements()["session_quiet"])
            if not read_only:
                self.con.execute(statements()["session_checkpoint_direct"])
        except duckdb.IOException as exc:
            msg = str(exc).splitlines()[0]
            if "lock" in msg.lower():
                raise StoreError(f"{self.path}: database is in use by another program ({msg})") from None
            raise StoreError(f"{self.path}: cannot open database ({msg})") from None
        except (duckdb.Error, OSError) as exc:
            raise StoreError(f"{self.path}: cannot open database ({str(exc).splitlines()[0]})") from None
        if not read_only:
            try:
                self.create_schema()
            except (duckdb.IOException, duckdb.InternalException, duckdb.SerializationException) as exc:
                self.con.close()
                raise StoreError(f"{self.path}: the database file is damaged ({str(exc).splitlines()[0]})") from None

    # -- basics -----------------------------------------------------------------------
    def close(self) -> None:
        self.con.close()

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def create_schema(self) -> None:
        """Create missing tables and bring a database of an earlier version up to this one, in one
        transaction (a migration that fails part-way leaves the file as it was)."""
        existed = self._has_table("input_files")
        self.con.execute(statements()["tx_begin"])
        try:
            for name, sql in statements().items():
                if name.startswith("create_"):
                    self.con.execute(sql)
            version = self.con.execute(statements()["get_schema_version"]).fetchall()
            found = int(version[0][0]) if version else (1 if existed else SCHEMA_VERSION)
            if found < 2:  # a version-1 database: every input is read again on the next load
                for name in (
                    "migrate_v2_drop_buildings",
                    "migrate_v2_forget_readings",
                    "migrate_v2_forget_weather",
                    "migrate_v2_forget_rejects",
                    "migrate_v2_forget_inputs",
                    "migrate_v2_runs_files",
                    "create_buildings",
                ):
                    self.con.execute(statements()[name])
            if found < 3:  # results without the primary key, records compressed with zstd
                for name in (
                    "migrate_v3_set_aside_results",
                    "create_results",
                    "migrate_v3_copy_results",
                    "migrate_v3_drop_results",
                ):
                    self.con.execute(statements()[name])
            if found < SCHEMA_VERSION or not version:
                self.con.execute(statements()["set_schema_version"], {"version": str(SCHEMA_VERSION)})
        except BaseException:
            try:
                self.con.execute(statements()["tx_rollback"])
            except duckdb.Error:  # a damaged file: the caller words the first error
                pass
            raise
        self.con.execute(statements()["tx_commit"])

    def _has_table(self, table: str) -> bool:
        return bool(self.con.execute(statements()["has_table"], {"table": table}).fetchall())

    def execute(self, name: str, params: dict | None = None, **frames: pl.DataFrame) -> list[tuple]:
        """Run the named statement with bound ``params`` and return all its rows.

        ``frames`` are registered under their keyword names for the statement's duration. A statement
        reading one frame and no parameters (an insert of a staged frame) scans it as a relation of this
        connection under that name instead: DuckDB kept what it inserted from a registered frame in memory
        until the end of the transaction (10^5 results, 1.3 GB of JSON records: 1.5 GB more, also past
        ``memory_limit``; 10^6: 5 GB, the run's peak), and what it inserts from a relation it writes out as
        its row groups fill (0.4 GB; measured with DuckDB 2.0.1). The frame goes to DuckDB as Arrow at polars'
        newest compatibility level: its strings as Arrow string views, without a copy (the oldest level copies
        every string into one buffer: 0.35 s for 300 MB of text; DuckDB reads both to the same rows).
        """
        sql = statements()[name]
        one = len(frames) == 1 and not params
        if not one:
            for rel, df in frames.items():
                self.con.register(rel, df)
        try:
            if one:
                ((rel, df),) = frames.items()
                res = self.con.from_arrow(df.to_arrow(compat_level=pl.CompatLevel.newest())).query(rel, sql)
                return [] if res is None else res.fetchall()
            cur = self.con.execute(sql, params or {})
            try:
                return cur.fetchall()
            except duckdb.InvalidInputException:  # statements without a result set
                return []
        except duckdb.IOException as exc:  # a damaged or vanished file, a full disk
            raise StoreError(f"{self.path}: cannot read or write the database ({str(exc).splitlines()[0]})") from None
        finally:
            if not one:
                for rel in frames:
                    self.con.unregister(rel)

    def frame(self, name: str, params: dict | None = None) -> pl.DataFrame:
        """The named query's result as a polars frame."""
        try:
            return self.con.sql(statements()[name], params=params or None).pl()
        except duckdb.IOException as exc:
            raise StoreError(f"{self.path}: cannot read the database ({str(exc).splitlines()[0]})") from None

    def rows(self, name: str, params: dict | None = None) -> list[tuple]:
        return self.execute(name, params)

    @contextmanager
    def transaction(self):
        """Commit on success, roll back on any exception (including KeyboardInterrupt)."""
        self.execute("tx_begin")
        try:
            yield self
        except BaseException:
            self.execute("tx_rollback")
            raise
        else:
            self.execute("tx_commit")
