"""ranking.xlsx: the run's tables as one workbook for sorting, filtering and notes in a spreadsheet.

Sheets ``ranking``, ``audit plan`` (audit_plan.csv), ``data issues``, ``rejects`` and ``assumptions`` (a table longer
than a worksheet continues on ``assumptions (2)``, ...), each with a frozen
header row, filters, column widths fitted to the content (:func:`column_widths`), number formats, units in the
headers (``floor_area [ft²]``) and money as currency. Text that a spreadsheet would run as a
formula is neutralized as in the CSVs (a leading ``'``), and the writer never turns text into
formulas, links or numbers. Written by xlsxwriter through polars ``write_excel``; the file
carries a fixed creation date, so the same results give the same bytes.
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

import polars as pl

from .outputs import Display, neutralize_formulas

#: The creation date written into the workbook (a fixed one: deterministic output).
FIXED_CREATED = _dt.datetime(2000, 1, 1)
#: Data rows per worksheet: the format's 1,048,576 rows less the header (ECMA-376 / Excel's limit). A
#: longer table continues on sheets named ``<name> (2)``, ``<name> (3)``, ... (the assumptions of more
#: than about 55,000 buildings), every row kept.
SHEET_ROWS = 1_048_575


def _pieces(name: str, df: pl.DataFrame, rows: int = SHEET_ROWS) -> list[tuple[str, pl.DataFrame]]:
    """A table as one sheet, or as consecutive sheets of at most ``rows`` data rows each."""
    if df.height <= rows:
        return [(name, df)]
    return [(name if k == 0 else f"{name} ({k + 1})", df.slice(k * rows, rows)) for k in range(-(-df.height // rows))]


def _ranking_units(d: Display) -> dict[str, str]:
    e, a, t, dd, i, ua = d.energy_unit, d.area_unit, d.temp_unit, d.dd_unit, d.intensity_unit, d.ua_unit
    units = {
        "floor_area": a,
        "hdd": dd,
        "hdd65": dd,
        "base_temperature": t,
        "fitted_base": t,
        "heating_intensity": i,
        "peer_median_intensity": i,
        "effective_ua": ua,
        "heating_slope": f"{e}/{dd}",
        "excess_co2e": "kg CO2e",
        "coverage": "share",
        "cv_rmse": "%",
        "yoy_change": "share",
        "peer_percentile": "%",
    }
    for c in (
        "actual_heating",
        "expected_heating",
        "expected_low",
        "expected_high",
        "expected_fixed_base",
        "expected_modified",
        "normal_heating",
        "baseload",
        "excess_energy",
        "expected_recoverable_energy",
        "excess_heat_loss",
        "excess_controls",
        "excess_baseload",
    ):
        units[c] = e
    for c in ("ua_walls", "ua_windows", "ua_roof", "ua_ground", "ua_infiltration", "ua_ventilation", "ua_total"):
        units[c] = ua
    return units


def _formats(df: pl.DataFrame, currency: str) -> dict[str, str]:
    money = f'"{currency}"#,##0' if currency else "#,##0"
    fmt: dict[str, str] = {}
    for name, dtype in df.schema.items():
        base = name.split(" [")[0]
        if base in ("excess_cost", "expected_recoverable_cost"):
            fmt[name] = money
        elif base in ("coverage", "yoy_change", "cumulative_share"):
            fmt[name] = "0.0%"
        elif base in ("ratio", "r2", "z_score", "z_balance_point", "z_intensity", "evidence_score", "z_yoy", "nmbe"):
            fmt[name] = "0.00"
        elif dtype.is_float():
            fmt[name] = (
                "#,##0.0"
                if base not in ("heating_intensity", "peer_median_intensity", "heating_slope", "value", "low", "high")
                else "#,##0.000"
            )
        elif dtype.is_integer() and base not in ("rank", "year_built", "line", "previous_rank", "n_periods", "visit"):
            fmt[name] = "#,##0"
    return fmt


#: [px] a character's width in the default font (Calibri 11: 7 px for digits and most lower-case letters,
#: from memory of the format's default column of 8.43 characters = 64 px) and the cell's padding.
CHAR_PX, PAD_PX, MAX_CHARS = 7, 12, 60


def column_widths(df: pl.DataFrame) -> dict[str, int]:
    """[px] each column's width fitted to its longest text (header or value as text, at most
    MAX_CHARS characters), computed over the whole column at once; numbers get room for the
    thousands separators of their format."""
    if df.height == 0 or df.width == 0:
        return {c: (min(len(c), MAX_CHARS) + 2) * CHAR_PX + PAD_PX for c in df.columns}
    exprs = []
    for c, t in df.schema.items():
        col = pl.col(c)
        if t.is_float():
            n = col.abs().round(0).cast(pl.Int64, strict=False).cast(pl.String).str.len_chars()
            n = n * 4 // 3 + 4  # separators, the sign and the decimals of the formats
        elif t.is_integer():
            n = col.cast(pl.String).str.len_chars() * 4 // 3 + 1
        else:
            n = col.cast(pl.String).str.len_chars()
        exprs.append(n.max().fill_null(0).alias(c))
    longest = df.select(exprs).row(0)
    return {c: (min(max(int(m or 0), len(c) + 2), MAX_CHARS)) * CHAR_PX + PAD_PX for c, m in zip(df.columns, longest)}


def write_ranking_xlsx(
    path: Path,
    *,
    ranking: pl.DataFrame,
    issues: pl.DataFrame,
    rejects: pl.DataFrame,
    assumptions: pl.DataFrame,
    disp: Display,
    currency: str = "$",
    plan: pl.DataFrame | None = None,
) -> Path:
    """Write ``ranking.xlsx`` with one sheet per table (see the module docstring); ``plan`` is the
    audit_plan.csv frame (``outputs.audit_plan_table``), its sheet left out when it is None."""
    import xlsxwriter

    units = _ranking_units(disp)

    def with_units(df: pl.DataFrame) -> pl.DataFrame:
        df = df.rename({c: f"{c} [{units[c]}]" for c in df.columns if c in units})
        return df.rename(
            {c: f"{c} [{currency}/yr]" for c in ("excess_cost", "expected_recoverable_cost") if c in df.columns}
        )

    sheets = [("ranking", with_units(ranking))]
    if plan is not None:
        sheets.append(("audit plan", with_units(plan)))
    sheets += [("data issues", issues), ("rejects", rejects), ("assumptions", assumptions)]
    sheets = [piece for name, df in sheets for piece in _pieces(name, df)]
    wb = xlsxwriter.Workbook(
        str(path),
        {
            "strings_to_formulas": False,
            "strings_to_urls": False,
            "strings_to_numbers": False,
            "nan_inf_to_errors": True,
        },
    )
    try:
        wb.set_properties({"title": "ddscreen ranking", "created": FIXED_CREATED})
        header = {"bold": True, "bottom": 1, "text_wrap": False}
        for name, df in sheets:
            df = neutralize_formulas(df)
            if df.width == 0:
                df = pl.DataFrame({"(none)": pl.Series([], dtype=pl.String)})
            date_cols = {c: "yyyy-mm-dd" for c, t in df.schema.items() if t == pl.Date}
            df.write_excel(
                workbook=wb,
                worksheet=name,
                position="A1",
                autofilter=True,
                autofit=False,  # xlsxwriter measures cell by cell in Python: a third of the write
                column_widths=column_widths(df),  # type: ignore[arg-type]
                freeze_panes=(1, 0),
                header_format=header,
                include_header=True,
                # ignore: polars types the keys as str | selector | tuple and a dict's key
                # type is invariant; str keys are what it reads
                column_formats={**_formats(df, currency), **date_cols},  # type: ignore[dict-item]
                dtype_formats={},
                hide_gridlines=False,
            )
    finally:
        wb.close()
    return path
