"""Load the reference data files in ``screening/data``.

Every file is a CSV with a ``source`` column; a row without a source is refused, so
no value enters the model without saying where it came from.
"""

from __future__ import annotations

from functools import lru_cache

import polars as pl

from .resources import data_dir


@lru_cache(maxsize=None)
def load(name: str) -> pl.DataFrame:
    """Read ``screening/data/<name>.csv`` (comment lines start with ``#``)."""
    path = data_dir() / f"{name}.csv"
    df = pl.read_csv(path, comment_prefix="#", infer_schema_length=10000)
    if "source" not in df.columns:
        raise ValueError(f"{path}: reference data must have a 'source' column")
    missing = df.filter(pl.col("source").is_null() | (pl.col("source").str.strip_chars() == ""))
    if missing.height:
        raise ValueError(f"{path}: {missing.height} row(s) without a source")
    return df
