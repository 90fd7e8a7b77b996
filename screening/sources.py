"""Rows of several input files of one kind: one row per key, conflicts rejected (pure, no I/O).

A run may name several files of a kind (``buildings = "in/bld_*.csv"``). Each file is
checked on its own when it is read (``ingest``); what only shows across files is checked
here, on the rows the store holds for the files the run names now:

* a key given identically in two files is kept once (the first file in name order) and
  reported as a notice;
* a key given with different data in two files is rejected in every file that gives it,
  each row naming the other places: which one is right cannot be known, and which file
  was loaded last must not decide it.

The frames carry ``_file`` (the source file) and ``_line`` (its line).
"""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from .schema import REJECT_SCHEMA as _REJECT_SCHEMA

FILE_COL = "_file"
LINE_COL = "_line"


@dataclass(frozen=True)
class KeySpec:
    """How rows of one input kind are identified and reported."""

    noun: str  # "building", "reading", "weather day" (for notices and reasons)
    key: tuple[str, ...]  # the columns that identify a row
    column: str  # the column named in a reject
    value: str  # the column whose value a reject shows


BUILDINGS = KeySpec("building", ("building_id",), "building_id", "building_id")
READINGS = KeySpec("reading", ("building_id", "fuel", "meter_id", "period_start", "period_end"), "quantity", "quantity")
WEATHER = KeySpec("weather day", ("station_id", "date"), "date", "date")


def one_row_per_key(df: pl.DataFrame, spec: KeySpec) -> tuple[pl.DataFrame, pl.DataFrame, list[str]]:
    """Resolve keys given by more than one file.

    Parameters
    ----------
    df : rows of all files of one kind, with ``_file`` and ``_line``.
    spec : the kind's key and report columns.

    Returns
    -------
    (rows, rejects, notices): ``rows`` without the conflicting keys and with each
    identically repeated key once (``_file`` kept); ``rejects`` as ``file, line, column,
    value, reason``; one notice per kind of finding.
    """
    empty = pl.DataFrame(schema=_REJECT_SCHEMA)
    if df.height == 0 or df[FILE_COL].n_unique() <= 1:
        return df, empty, []
    key = list(spec.key)
    data = [c for c in df.columns if c not in (FILE_COL, LINE_COL)]
    shared = pl.col(FILE_COL).n_unique().over(key) > 1
    multi = df.filter(shared)
    if multi.height == 0:
        return df, empty, []
    multi = multi.with_columns(pl.struct(data).n_unique().over(key).alias("_versions"))
    conflict = multi.filter(pl.col("_versions") > 1).sort(FILE_COL, LINE_COL)
    notices: list[str] = []
    rejects = empty
    if conflict.height:
        places = conflict.group_by(key, maintain_order=True).agg(
            (pl.col(FILE_COL) + pl.lit(" line ") + pl.col(LINE_COL).cast(pl.String)).str.join("; ").alias("_places")
        )
        conflict = conflict.join(places, on=key, how="left", maintain_order="left")
        rejects = conflict.select(
            pl.col(FILE_COL).alias("file"),
            pl.col(LINE_COL).alias("line"),
            pl.lit(spec.column).alias("column"),
            pl.col(spec.value).cast(pl.String).alias("value"),
            (
                pl.lit(f"the same {spec.noun} is given with different data in more than one input file (")
                + pl.col("_places")
                + pl.lit("); none of them is used")
            ).alias("reason"),
        ).cast(_REJECT_SCHEMA)
        notices.append(
            f"{conflict.select(key).unique().height} {spec.noun}(s) given with different data "
            "in more than one input file: all their rows rejected (see rejects.csv)"
        )
    same = multi.filter(pl.col("_versions") == 1)
    # keep the first copy (file name order, then line); drop the others
    drop = same.sort(FILE_COL, LINE_COL).filter(pl.int_range(pl.len()).over(key) > 0).select(FILE_COL, LINE_COL)
    if drop.height:
        notices.append(f"{drop.height} {spec.noun} row(s) given identically in more than one input file kept once")
    out = df.join(conflict.select(FILE_COL, LINE_COL), on=[FILE_COL, LINE_COL], how="anti").join(
        drop, on=[FILE_COL, LINE_COL], how="anti"
    )
    return out, rejects, notices
