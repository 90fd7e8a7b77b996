"""Workbooks (``.xlsx``/``.xlsm``) and Parquet files in: the same all-text table as a CSV.

Every cell becomes the text the CSV path would have read, so the checks that follow
(``ingest``, ``weather``) are the same and every row is accepted, rejected with its
reason, or reported.

Workbooks (openpyxl, read-only, cached formula values):

* the sheet is ``book.xlsx#Sheet`` or else the first sheet; messages name it as
  ``book.xlsx[Sheet]`` and the line is the sheet's row number;
* the first row with any value is the header; blank rows are skipped, a row repeating
  the header is skipped and counted, a value under no column name rejects its row;
* numbers are written back in full (``1855.76``, ``12``), date cells as ``YYYY-MM-DD``
  (a date with a time of day keeps it, and the strict date check says so), true/false
  as ``true``/``false``; error cells (``#DIV/0!``) stay text and are rejected;
* a missing sheet, an encrypted, old (``.xls``) or damaged workbook is a structural error.

Parquet (pyarrow through polars): the line is the row number (1 = first row); dates as
``YYYY-MM-DD``, timestamps at midnight as their day.
"""

from __future__ import annotations

import datetime as _dt
import zipfile
from pathlib import Path

import polars as pl

from .csvread import LINE_COL, MAX_FIELD_CHARS, PARQUET_SUFFIXES, CsvTable, _norm, header_plan, split_sheet, unreadable
from .errors import InputError

_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"  # encrypted OOXML and old .xls are OLE compound files
_CELL_TEXT = MAX_FIELD_CHARS


def read_table_file(
    path: str | Path, *, required, optional=(), label: str | None = None, columns: dict[str, str] | None = None
) -> CsvTable:
    """Read a workbook sheet or a Parquet file into the all-text table of :func:`csvread.read_table`."""
    src, sheet = split_sheet(path)
    base_label = split_sheet(label or path)[0] if label else src
    if Path(src).suffix.lower() in PARQUET_SUFFIXES:
        return _read_parquet(src, base_label, required, optional, columns)
    return _read_workbook(src, sheet, base_label, required, optional, columns)


def read_header_names(path: str | Path) -> list[str]:
    """The header of a workbook sheet or a Parquet file, as written."""
    src, sheet = split_sheet(path)
    if Path(src).suffix.lower() in PARQUET_SUFFIXES:
        return list(_parquet_frame(src, src).columns)
    ws, wb, _name = _open_sheet(src, sheet, src)
    try:
        for _r, cells in _rows(ws):
            if any(c is not None for c in cells):
                return ["" if c is None else c for c in cells]
        return []
    finally:
        wb.close()


# ---------------------------------------------------------------------------- workbooks


def _open_sheet(src: str, sheet: str | None, label: str):
    try:
        head = Path(src).open("rb").read(8)
    except OSError as exc:
        raise unreadable(label, exc) from None
    if head.startswith(_OLE_MAGIC):
        raise InputError(
            label,
            "an encrypted workbook or an old .xls file",
            expected="an .xlsx/.xlsm workbook without a password (save it again as .xlsx, or as CSV)",
        )
    import openpyxl

    try:
        wb = openpyxl.load_workbook(src, read_only=True, data_only=True, keep_links=False)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError, TypeError) as exc:
        raise InputError(
            label,
            f"cannot read the workbook ({type(exc).__name__}: {str(exc)[:120]})",
            expected="an .xlsx/.xlsm workbook saved by a spreadsheet program",
        ) from None
    except Exception as exc:  # noqa: BLE001 - openpyxl's own exceptions for a damaged file
        raise InputError(
            label,
            f"cannot read the workbook ({type(exc).__name__}: {str(exc)[:120]})",
            expected="an .xlsx/.xlsm workbook saved by a spreadsheet program",
        ) from None
    names = wb.sheetnames
    if sheet is None:
        if not names:
            wb.close()
            raise InputError(label, "the workbook has no sheets")
        name = names[0]
    else:
        match = [n for n in names if n == sheet] or [n for n in names if n.strip().lower() == sheet.strip().lower()]
        if not match:
            wb.close()
            raise InputError(
                label, f"no sheet named {sheet!r}", expected="one of " + ", ".join(repr(n) for n in names[:20])
            )
        name = match[0]
    ws = wb[name]
    if not hasattr(ws, "iter_rows"):  # a chart sheet
        wb.close()
        raise InputError(label, f"sheet {name!r} holds no cells (a chart sheet)", expected="a sheet of rows")
    return ws, wb, name


def _rows(ws):
    """(row number, cell values) of a sheet in order, row numbers as the spreadsheet shows them."""
    for row in ws.iter_rows():
        cells = [c for c in row if getattr(c, "row", None) is not None]
        if not cells:
            continue
        width = max(getattr(c, "column", 0) or 0 for c in cells)
        values: list[object] = [None] * width
        for c in cells:
            values[c.column - 1] = c.value
        yield cells[0].row, values


def _cell_text(v) -> str | None:
    if v is None:
        return None
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)
    if isinstance(v, _dt.datetime):
        if v.time() == _dt.time(0, 0):
            return v.date().isoformat()
        return v.isoformat(sep=" ")
    if isinstance(v, (_dt.date, _dt.time)):
        return v.isoformat()
    if isinstance(v, _dt.timedelta):
        return str(v)
    t = str(v).strip()
    return t or None


def _read_workbook(src, sheet, base_label, required, optional, columns) -> CsvTable:
    ws, wb, name = _open_sheet(src, sheet, base_label)
    label = f"{base_label}[{name}]"
    notices: list[str] = []
    rejects: list[dict] = []
    try:
        it = _rows(ws)
        header, header_line = None, 1
        for r, vals in it:
            texts = [_cell_text(v) for v in vals]
            if any(t is not None for t in texts):
                header, header_line = ["" if t is None else t for t in texts], r
                break
        if header is None:
            raise InputError(label, "sheet is empty", line=1, expected="a header row and data rows")
        if header_line > 1:
            notices.append(f"{label}: header on row {header_line} (rows above it are empty)")
        seen, wanted = header_plan(label, header, required, optional, columns, notices, header_line=header_line)
        idx = [seen[c] for c in wanted]
        header_norm = [_norm(h) for h in header]
        n = len(header)
        cols: list[list[str | None]] = [[] for _ in wanted]
        lines: list[int] = []
        repeated = 0
        for r, vals in it:
            texts = [_cell_text(v) for v in vals]
            if not any(t is not None for t in texts):
                continue
            if [_norm(t or "") for t in texts[:n]] == header_norm and all(t is None for t in texts[n:]):
                repeated += 1
                continue
            beyond = [j for j in range(n, len(texts)) if texts[j] is not None]
            if beyond:
                rejects.append(
                    {
                        "file": label,
                        "line": r,
                        "column": _column_letter(beyond[0]),
                        "value": (texts[beyond[0]] or "")[:80],
                        "reason": f"a value in column {_column_letter(beyond[0])}, beyond the last named "
                        f"column ({n} columns in the header row)",
                    }
                )
                continue
            long = [j for j, t in enumerate(texts) if t is not None and len(t) > _CELL_TEXT]
            if long:
                rejects.append(
                    {
                        "file": label,
                        "line": r,
                        "column": header[long[0]],
                        "value": (texts[long[0]] or "")[:80],
                        "reason": f"a field is longer than {MAX_FIELD_CHARS:,} characters",
                    }
                )
                continue
            texts += [None] * (n - len(texts))
            for j, k in enumerate(idx):
                cols[j].append(texts[k])
            lines.append(r)
    finally:
        wb.close()
    if repeated:
        notices.append(f"{label}: skipped {repeated} repeated header row(s)")
    if not lines and not rejects:
        raise InputError(label, "no data rows", line=header_line + 1, expected="at least one data row after the header")
    df = pl.DataFrame(
        {c: pl.Series(c, v, dtype=pl.String) for c, v in zip(wanted, cols)}
        | {LINE_COL: pl.Series(LINE_COL, lines, dtype=pl.Int64)}
    )
    for c in list(required) + list(optional):
        if c not in df.columns:
            df = df.with_columns(pl.lit(None, dtype=pl.String).alias(c))
    return CsvTable(path=label, df=df, header=header, encoding="xlsx", delimiter="", notices=notices, rejects=rejects)


def _column_letter(j: int) -> str:
    """Spreadsheet column letters of 0-based index ``j`` (0 → A, 26 → AA)."""
    out = ""
    j += 1
    while j:
        j, rem = divmod(j - 1, 26)
        out = chr(65 + rem) + out
    return out


# ---------------------------------------------------------------------------- parquet


def _parquet_frame(src: str, label: str) -> pl.DataFrame:
    try:
        return pl.read_parquet(src)
    except FileNotFoundError as exc:
        raise unreadable(label, exc) from None
    except IsADirectoryError as exc:
        raise unreadable(label, exc) from None
    except Exception as exc:  # noqa: BLE001 - polars/arrow errors for a damaged file
        raise InputError(
            label, f"cannot read the Parquet file ({type(exc).__name__}: {str(exc)[:120]})", expected="a Parquet file"
        ) from None


def _as_text(s: pl.Series) -> pl.Series:
    dt = s.dtype
    if dt == pl.String:
        t = s.str.strip_chars()
        return pl.select(pl.when(t == "").then(None).otherwise(t)).to_series().rename(s.name)
    if dt == pl.Date:
        return s.dt.strftime("%Y-%m-%d")
    if isinstance(dt, pl.Datetime):
        midnight = (s.dt.time() == _dt.time(0, 0)) | s.is_null()
        if bool(midnight.all()):
            return s.dt.strftime("%Y-%m-%d")
        return s.dt.strftime("%Y-%m-%d %H:%M:%S")
    if dt == pl.Boolean:
        return pl.select(pl.when(s).then(pl.lit("true")).when(~s).then(pl.lit("false"))).to_series().rename(s.name)
    if dt.is_float():
        whole = (s == s.floor()) & (s.abs() < 1e15)
        return (
            pl.select(pl.when(whole).then(s.cast(pl.Int64, strict=False).cast(pl.String)).otherwise(s.cast(pl.String)))
            .to_series()
            .rename(s.name)
        )
    try:
        return s.cast(pl.String)
    except Exception:  # noqa: BLE001 - nested types have no text form
        return pl.Series(s.name, [None if v is None else str(v) for v in s.to_list()], dtype=pl.String)


def _read_parquet(src, label, required, optional, columns) -> CsvTable:
    notices: list[str] = []
    frame = _parquet_frame(src, label)
    header = [str(c) for c in frame.columns]
    seen, wanted = header_plan(label, header, required, optional, columns, notices)
    if frame.height == 0:
        raise InputError(label, "no data rows", line=1, expected="at least one row")
    data = {c: _as_text(frame.get_column(header[seen[c]])).rename(c) for c in wanted}
    df = pl.DataFrame(data).with_columns(pl.int_range(1, frame.height + 1, dtype=pl.Int64).alias(LINE_COL))
    rejects: list[dict] = []
    too_long = pl.any_horizontal([pl.col(c).str.len_chars() > MAX_FIELD_CHARS for c in wanted]).fill_null(False)
    if df.height and bool(df.select(too_long).to_series().any()):
        rejects = [
            {
                "file": label,
                "line": int(r[LINE_COL]),
                "column": "",
                "value": "",
                "reason": f"a field is longer than {MAX_FIELD_CHARS:,} characters",
            }
            for r in df.filter(too_long).iter_rows(named=True)
        ]
        df = df.filter(~too_long)
    blank = pl.all_horizontal([pl.col(c).is_null() for c in wanted])
    n_blank = int(df.select(blank.sum()).item()) if df.height else 0
    if n_blank:
        notices.append(f"{label}: skipped {n_blank} row(s) with every column read empty")
        df = df.filter(~blank)
    for c in list(required) + list(optional):
        if c not in df.columns:
            df = df.with_columns(pl.lit(None, dtype=pl.String).alias(c))
    return CsvTable(
        path=label, df=df, header=header, encoding="parquet", delimiter="", notices=notices, rejects=rejects
    )
