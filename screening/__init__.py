"""ddscreen: portfolio screening of building heating use against degree-day expectations.

Layers (see DEVELOPERS.md): pure functions over numpy/polars (no I/O) -> the DuckDB
store (`screening.store`, SQL in sql/*.sql) -> orchestration (`screening.pipeline`)
-> a thin typer CLI (`screening.cli`).
"""

__version__ = "0.1.0"
