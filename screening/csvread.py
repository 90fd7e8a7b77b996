"""Read an input CSV into an all-text polars frame with physical line numbers.

This is the single low-level reader for every input file. It decides the text
encoding and the delimiter, checks the header, and keeps the line on which each
record starts, so that every later message can name file, line and column.

Rules
-----
* Encoding: UTF-8 (with or without a byte-order mark); otherwise cp1252 (a superset
  of Latin-1 for printable text), reported as a notice. Bytes that decode under
  neither, or NUL bytes, make the file unreadable (a structural error).
* Delimiter: ``,`` or ``;`` (or tab), taken from the header line unless given.
* Header: names are matched after trimming blanks, case-insensitively; a required
  column that is missing, or a name that appears twice, is a structural error.
  Unknown extra columns are ignored and listed once as a notice.
* Records: blank lines are skipped; a record that repeats the header is skipped and
  reported; a record with the wrong number of fields, or with a field longer than
  ``MAX_FIELD_CHARS``, is rejected with its line (never truncated). Quoted fields may
  contain delimiters and newlines; a quote left open to the end of the file is a
  structural error. CR-only line ends are read as line ends.
* Memory: the file's decoded text is held once; a file without quote characters is then
  split into records chunk by chunk (``FAST_CHUNK_CHARS`` characters of whole lines at a
  time), so the peak is about the text plus the output frame plus one chunk. A chunk whose
  every line is a regular record goes through polars' CSV parser, any other line by line;
  the records, rejects and line numbers are the same. A file with
  quoted fields goes through the ``csv`` module record by record into Python lists
  (several times the file size; see docs/reliability.md "Reliability" for measured limits).
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from .errors import InputError

LINE_COL = "_line"
MAX_FIELD_CHARS = 10_000
#: characters of whole lines per chunk of the quote-free path (8 Mi): polars' parser of a regular chunk
#: (:func:`_native_chunk`) takes 5 ms a MB in chunks of 8 MB, 15 ms in chunks of 1 MB (27 MB of readings)
FAST_CHUNK_CHARS = 8 << 20
_LONG_REASON = f"a field is longer than {MAX_FIELD_CHARS:,} characters"
_ASCII_BLANKS = " \t\r\x0b\x0c"  # with \n, the ASCII characters of Unicode White_Space


@dataclass
class CsvTable:
    path: str
    df: pl.DataFrame
    header: list[str]
    encoding: str
    delimiter: str
    notices: list[str] = field(default_factory=list)
    rejects: list[dict] = field(default_factory=list)


def _decode(raw: bytes, path: str, encoding: str | None) -> tuple[str, str, list[str]]:
    notices: list[str] = []
    if b"\x00" in raw[:1_000_000]:
        line = raw[: raw.index(b"\x00")].count(b"\n") + 1
        raise InputError(
            path, "file is not text (contains NUL bytes)", line=line, expected="a CSV text file (UTF-8 or Latin-1)"
        )
    if encoding:
        try:
            return raw.decode(encoding), encoding, notices
        except (UnicodeDecodeError, LookupError) as exc:
            raise InputError(path, f"cannot decode as {encoding}: {exc}") from None
    try:
        text = raw.decode("utf-8-sig")
        return text, "utf-8", notices
    except UnicodeDecodeError as exc:
        bad_line = raw[: exc.start].count(b"\n") + 1
    body = raw[3:] if raw.startswith(b"\xef\xbb\xbf") else raw  # a BOM is not Latin-1 text
    try:
        text = body.decode("cp1252")
    except UnicodeDecodeError:
        raise InputError(
            path, "file is neither UTF-8 nor Latin-1/cp1252 text", line=bad_line, expected="a CSV text file"
        ) from None
    notices.append(f"{path}: not valid UTF-8 (first at line {bad_line}); read as Latin-1/cp1252")
    return text, "cp1252", notices


def _sniff_delimiter(first_line: str) -> str:
    counts = {d: first_line.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=lambda d: (counts[d], d == ","))
    return best if counts[best] > 0 else ","


def _show(name: str) -> str:
    """A header name fit for a one-line message (control characters escaped)."""
    return name if name.isprintable() else repr(name)[1:-1]


def _norm(name: str) -> str:
    return name.strip().strip("\ufeff").strip().lower()


def unreadable(label: str, exc: OSError) -> InputError:
    """The one-line error for an input file that cannot be opened or read."""
    if isinstance(exc, FileNotFoundError):
        return InputError(label, "file not found")
    if isinstance(exc, IsADirectoryError):
        return InputError(label, "is a folder, not a file")
    return InputError(label, f"cannot read file ({exc.strerror or exc})")


def read_table(
    path: str | Path,
    *,
    required: list[str] | tuple[str, ...],
    optional: list[str] | tuple[str, ...] = (),
    label: str | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
    columns: dict[str, str] | None = None,
) -> CsvTable:
    """Read ``path`` and return its known columns as text plus ``_line``.

    Parameters
    ----------
    path : file to read.
    required : column names that must be present (structural error otherwise).
    optional : column names that are read when present.
    label : the name used in messages (defaults to the path).
    delimiter, encoding : force these instead of detecting them.
    columns : the user's column names mapped to ours (``[inputs.columns]``); names are matched
        like header names (blanks and case ignored).

    A workbook (``.xlsx``/``.xlsm``, ``book.xlsx#Sheet`` for a named sheet) or a Parquet file
    is read by :mod:`screening.tables` into the same text table.

    Raises
    ------
    InputError
        The file is unreadable, empty, has no data rows, lacks a required column
        or repeats a column name.
    """
    label = str(label or path)
    if is_table_file(path):
        from .tables import read_table_file

        return read_table_file(path, required=required, optional=optional, label=label, columns=columns)
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise unreadable(label, exc) from None
    text, enc, notices = _decode(raw, label, encoding)
    del raw  # only the decoded text is kept from here on
    if "\n" not in text and "\r" in text:  # old-style CR-only line ends
        text = text.replace("\r", "\n")
    if not text.strip():
        raise InputError(label, "file is empty", line=1, expected="a header line and data rows")

    first_nl = text.find("\n")
    first_line = text if first_nl < 0 else text[:first_nl]
    delim = delimiter or _sniff_delimiter(first_line)

    if '"' not in text:
        header = first_line.rstrip("\r").split(delim)
    else:
        # lines end at \n only (a bare \r is data, as in the quote-free path); slices of the text,
        # not a StringIO copy of it (which holds 4 bytes per character)
        reader = csv.reader(_lines(text), delimiter=delim, strict=False)
        try:
            header = next(reader)
        except (StopIteration, csv.Error) as exc:
            raise InputError(label, f"cannot read the header line ({exc})", line=1) from None
    header_norm = [_norm(h) for h in header]
    seen, wanted = header_plan(label, header, required, optional, columns, notices)
    idx = [seen[c] for c in wanted]
    n_fields = len(header)

    if '"' not in text:
        df, rejects, repeated_headers = _fast_records(text, label, delim, header_norm, idx, wanted)
    else:
        n_lines = text.count("\n") + (0 if text.endswith("\n") else 1)
        df, rejects, repeated_headers = _slow_records(reader, label, delim, header_norm, idx, wanted, n_fields, n_lines)
        del reader
    del text  # before joining the chunks: the peak stays about text + frame
    df = df.rechunk()
    if repeated_headers:
        notices.append(f"{label}: skipped {repeated_headers} repeated header line(s)")
    if not df.height and not rejects:
        raise InputError(label, "no data rows", line=2, expected="at least one data row after the header")
    for c in list(required) + list(optional):
        if c not in df.columns:
            df = df.with_columns(pl.lit(None, dtype=pl.String).alias(c))
    return CsvTable(
        path=label,
        df=df,
        header=[h.strip() for h in header],
        encoding=enc,
        delimiter=delim,
        notices=notices,
        rejects=rejects,
    )


def split_sheet(path: str | Path) -> tuple[str, str | None]:
    """``book.xlsx#Sheet`` → (``book.xlsx``, ``Sheet``); any other path → (path, None).

    A file whose own name contains ``#`` is taken as it is when it exists.
    """
    text = str(path)
    if "#" in text and not Path(text).exists():
        base, sheet = text.rsplit("#", 1)
        if Path(base).suffix.lower() in WORKBOOK_SUFFIXES:
            return base, sheet
    return text, None


WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")
PARQUET_SUFFIXES = (".parquet", ".pq")


def is_table_file(path: str | Path) -> bool:
    """Whether ``path`` is a workbook or a Parquet file (read by :mod:`screening.tables`)."""
    return Path(split_sheet(path)[0]).suffix.lower() in WORKBOOK_SUFFIXES + PARQUET_SUFFIXES


def header_plan(
    label: str,
    header: list[str],
    required,
    optional,
    columns: dict[str, str] | None,
    notices: list[str],
    *,
    header_line: int = 1,
) -> tuple[dict[str, int], list[str]]:
    """Check a header (after the column mapping): ``(our name → field index, wanted names)``.

    Raises ``InputError`` for a name that appears twice (also after mapping) or a required
    column that is missing; lists unknown extra columns and the mapping used as notices.
    """
    header_norm = [_norm(h) for h in header]
    names = list(header_norm)
    if columns:
        cmap = {_norm(k): v for k, v in columns.items()}
        used = []
        for i, h in enumerate(header_norm):
            if h in cmap and h:
                names[i] = cmap[h]
                used.append(f"{_show(header[i].strip())} → {cmap[h]}")
        if used:
            notices.append(f"{label}: columns read by the mapping: {', '.join(used[:30])}")
        absent = [k for k in columns if _norm(k) not in header_norm]
        if absent:
            notices.append(f"{label}: mapped column(s) not in this file: {', '.join(_show(a) for a in absent[:20])}")
    seen: dict[str, int] = {}
    for i, h in enumerate(names):
        if h in seen and h:
            j = seen[h]
            if names[i] != header_norm[i] or names[j] != header_norm[j]:
                a, b = _show(header[j].strip()), _show(header[i].strip())
                raise InputError(
                    label,
                    f"columns {a!r} and {b!r} are both read as {h!r} (column mapping)",
                    line=header_line,
                    column=header[i].strip(),
                    expected="each of our columns from one column of the file",
                )
            raise InputError(
                label,
                "column name appears twice",
                line=header_line,
                column=header[i].strip(),
                expected="each column once",
            )
        seen[h] = i
    missing = [c for c in required if c not in seen]
    if missing:
        raise InputError(
            label,
            "missing required column",
            line=header_line,
            column=missing[0],
            expected="columns "
            + ", ".join(required)
            + (f" (found: {', '.join(_show(h) for h in header_norm if h)[:200]})" if header_norm else ""),
        )
    wanted = [c for c in list(required) + list(optional) if c in seen]
    extra = [_show(header[i].strip()) for i, h in enumerate(names) if h and h not in wanted]
    if extra:
        notices.append(
            f"{label}: ignored unknown column(s): {', '.join(extra[:20])}" + (" …" if len(extra) > 20 else "")
        )
    return seen, wanted


def read_header(path: str | Path, *, delimiter: str | None = None, encoding: str | None = None) -> list[str]:
    """The column names of a file as written (for suggesting a column mapping); ``InputError`` if unreadable."""
    if is_table_file(path):
        from .tables import read_header_names

        return read_header_names(path)
    label = str(path)
    try:
        raw = Path(path).read_bytes()[:1_000_000]
    except OSError as exc:
        raise unreadable(label, exc) from None
    text, _enc, _n = _decode(raw, label, encoding)
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    first = text.split("\n", 1)[0] if text.strip() else ""
    delim = delimiter or _sniff_delimiter(first)
    try:
        return [h.strip() for h in next(csv.reader([first], delimiter=delim))]
    except (StopIteration, csv.Error):
        return []


def _lines(text: str, chunk_chars: int | None = None):
    """The lines of ``text``, each with its ``\n``: a ``StringIO`` over one chunk of whole lines at a
    time (C-speed iteration; a ``StringIO`` of the whole text would hold 4 bytes per character)."""
    chunk_chars = int(chunk_chars or FAST_CHUNK_CHARS)
    pos, n = 0, len(text)
    while pos < n:
        cut = text.find("\n", pos + chunk_chars)
        end = n if cut < 0 else cut + 1
        yield from io.StringIO(text[pos:end], newline="\n")
        pos = end


def _fast_records(text, label, delim, header_norm, idx, wanted, chunk_chars=None):
    """Records of a file without quote characters: one record per physical line.

    The text after the header is processed in chunks of whole lines of about
    ``chunk_chars`` characters (``FAST_CHUNK_CHARS``), so the working memory beyond the
    decoded text and the output frame is bounded by the chunk size, whatever the file
    size. Line numbers, rejects and notices are those of a whole-file pass.
    """
    chunk_chars = int(chunk_chars or FAST_CHUNK_CHARS)
    frames: list[pl.DataFrame] = []
    rejects: list[dict] = []
    repeated = 0
    first_nl = text.find("\n")
    pos = len(text) if first_nl < 0 else first_nl + 1
    line = 2
    while pos < len(text):
        cut = text.find("\n", pos + chunk_chars)
        end = len(text) if cut < 0 else cut + 1
        chunk = text[pos:end]
        df, rej, rep = _fast_chunk(chunk, line, label, delim, header_norm, idx, wanted)
        frames.append(df)
        rejects += rej
        repeated += rep
        line += chunk.count("\n")
        pos = end
        del chunk
    if not frames:
        schema = {name: pl.String for name in wanted} | {LINE_COL: pl.Int64}
        return pl.DataFrame(schema=schema), rejects, repeated
    df = frames[0] if len(frames) == 1 else pl.concat(frames, rechunk=False)
    return df, rejects, repeated


def _fast_chunk(chunk, first_line, label, delim, header_norm, idx, wanted):
    """One chunk of whole lines (``first_line`` is the physical line of its first line): a regular chunk
    through polars' own CSV parser (:func:`_native_chunk`), any other line by line (:func:`_split_chunk`);
    the same frame, rejects and count either way."""
    got = _native_chunk(chunk, first_line, delim, header_norm, idx, wanted)
    return got if got is not None else _split_chunk(chunk, first_line, label, delim, header_norm, idx, wanted)


def _native_chunk(chunk, first_line, delim, header_norm, idx, wanted):
    """A chunk in which every line is a record of the header's number of fields, none blank and none with a
    field longer than ``MAX_FIELD_CHARS``, parsed by polars' CSV reader (native code, 4-5x faster than splitting
    the lines into lists: 0.08 against 0.31-0.45 s for 27 MB of readings); None for any other chunk, which
    :func:`_split_chunk` reads line by line with its rejects.

    What makes it exact (the file has no quote characters, so a record is a physical line): polars' rows are
    the chunk's lines, one for one (a blank line is a row of nulls; a line with more fields raises; the row
    count is checked); no line has fewer fields (polars would pad them with nulls), because no line has more
    and the delimiters number exactly ``(fields - 1)`` a line; no row is blank (all fields empty or white
    space: skipped by the rules, so left to the line-by-line path). Fields are taken, stripped and nulled as
    there; repeated header lines are found the same way."""
    n_fields = len(header_norm)
    if len(delim) != 1 or not delim.isascii() or delim in "\r\n" or not chunk:  # polars: a one-byte separator
        return None
    n_lines = chunk.count("\n") + (0 if chunk.endswith("\n") else 1)
    if chunk.count(delim) != (n_fields - 1) * n_lines:
        return None
    names = [f"f{k}" for k in range(n_fields)]
    try:
        frame = pl.read_csv(
            chunk.encode("utf-8"),
            has_header=False,
            schema=dict.fromkeys(names, pl.String),
            separator=delim,
            quote_char=None,
            truncate_ragged_lines=False,
            raise_if_empty=False,
        )
    except (pl.exceptions.PolarsError, ValueError):  # a line with more fields, say
        return None
    if frame.height != n_lines:
        return None
    blanks = _has_blanks(chunk)
    if bool(frame.select(pl.any_horizontal(pl.all().str.len_bytes() > MAX_FIELD_CHARS).any()).item()):
        return None  # (a field longer in characters is longer in bytes; the exact test is the other path's)
    empty = [
        (pl.col(c).is_null() | (pl.col(c).str.strip_chars() == "")) if blanks else pl.col(c).is_null() for c in names
    ]
    if bool(frame.select(pl.all_horizontal(empty).any()).item()):
        return None  # a blank line
    frame = frame.with_row_index(LINE_COL, offset=first_line).with_columns(pl.col(LINE_COL).cast(pl.Int64))
    key_k = _header_key(header_norm, idx)
    cand = frame[names[key_k]].fill_null("").str.contains("(?i)" + re.escape(header_norm[key_k]))
    repeated = 0
    if bool(cand.any()):
        rows = frame.filter(cand).select(names).rows()
        exact = [[_norm(f or "") for f in row] == header_norm for row in rows]
        is_header = cand.scatter(cand.arg_true(), exact)
        repeated = int(is_header.sum())
        frame = frame.filter(~is_header)
    return _records(frame, [pl.col(names[k]) for k in idx], wanted, blanks), [], repeated


def _has_blanks(chunk: str) -> bool:
    """Whether a chunk's fields may have blanks around them to strip: a chunk of ASCII text without a blank (the
    whitespace that ``strip_chars`` removes: six ASCII characters, the rest not ASCII) has none."""
    return not chunk.isascii() or any(c in chunk for c in _ASCII_BLANKS)


def _header_key(header_norm: list[str], idx: list[int]) -> int:
    """The field of the longest known column name (the first if several), always present in the header: a line
    that repeats the header contains it there, which narrows the lines compared name by name."""
    return max(idx, key=lambda k: len(header_norm[k]))


def _records(frame: pl.DataFrame, fields: list[pl.Expr], wanted: list[str], blanks: bool) -> pl.DataFrame:
    """The wanted columns from the ``fields`` (stripped of blanks where ``blanks``), an empty field null, and
    the line: each field is taken out once, then nulled in a second step."""
    if blanks:
        fields = [v.str.strip_chars() for v in fields]
    df = frame.select(*(v.alias(name) for v, name in zip(fields, wanted)), pl.col(LINE_COL))
    return df.with_columns(
        pl.when(pl.col(name) == "").then(None).otherwise(pl.col(name)).alias(name) for name in wanted
    )


def _split_chunk(chunk, first_line, label, delim, header_norm, idx, wanted):
    """:func:`_fast_chunk` line by line: every line split into its fields (blank lines, wrong field counts,
    long fields, repeated headers: each as the rules say)."""
    lines = pl.Series("raw", [chunk], dtype=pl.String).str.split("\n").explode()  # as chunk.split("\n")
    if "\r" in chunk:
        lines = lines.str.strip_suffix("\r")
    frame = pl.DataFrame({"raw": lines}).with_row_index(LINE_COL, offset=first_line)
    frame = frame.with_columns(pl.col(LINE_COL).cast(pl.Int64))
    frame = frame.filter(pl.col("raw").str.contains(f"[^\\s{re.escape(delim)}]"))  # not blank
    parts = frame["raw"].str.split(delim)
    n_fields = len(header_norm)
    lens = parts.list.len()
    # a repeated header: the same names field by field (as the quoted path compares them);
    # the literal test only narrows the candidates checked exactly in Python (rare lines)
    key = header_norm[_header_key(header_norm, idx)]
    cand = (lens == n_fields) & frame["raw"].str.contains("(?i)" + re.escape(key))
    is_header = cand
    if bool(cand.any()):
        exact = [[_norm(f) for f in raw.split(delim)] == header_norm for raw in frame["raw"].filter(cand)]
        is_header = cand.scatter(cand.arg_true(), exact) if exact else cand
    repeated = int(is_header.sum())
    frame = frame.with_columns(
        parts.alias("parts"),
        lens.alias("n"),
        is_header.alias("hdr"),
        # a line longer than the limit in characters is longer in bytes too (the count in bytes is cheaper)
        (
            (frame["raw"].str.len_chars() > MAX_FIELD_CHARS)
            if bool((frame["raw"].str.len_bytes() > MAX_FIELD_CHARS).any())
            else pl.repeat(False, frame.height, eager=True)
        ).alias("long"),
    )
    bad = frame.filter((pl.col("n") != n_fields) & ~pl.col("hdr"))
    rejects = [
        {
            "file": label,
            "line": int(r[LINE_COL]),
            "column": "",
            "value": r["raw"][:80],
            "reason": f"expected {n_fields} fields, found {r['n']}",
        }
        for r in bad.select(LINE_COL, "raw", "n").iter_rows(named=True)
    ]
    ok = (pl.col("n") == n_fields) & ~pl.col("hdr")
    if bool(frame["long"].any()):
        long_field = pl.col("parts").list.eval(pl.element().str.len_chars()).list.max() > MAX_FIELD_CHARS
        frame = frame.with_columns((pl.col("long") & long_field).alias("long"))
        rejects += [
            {"file": label, "line": int(r[LINE_COL]), "column": "", "value": r["raw"][:80], "reason": _LONG_REASON}
            for r in frame.filter(ok & pl.col("long")).select(LINE_COL, "raw").iter_rows(named=True)
        ]
        ok = ok & ~pl.col("long")
    good = frame.filter(ok)
    return _records(good, [pl.col("parts").list.get(k) for k in idx], wanted, _has_blanks(chunk)), rejects, repeated


def _slow_records(reader, label, delim, header_norm, idx, wanted, n_fields, n_lines):
    """Records through the csv module (quoted fields, embedded newlines): one frame of the whole file
    (see :func:`slow_batches`)."""
    frames, rejects, repeated_headers = [], [], 0
    for df, rej, rep in slow_batches(reader, label, delim, header_norm, idx, wanted, n_fields, n_lines):
        frames.append(df)
        rejects += rej
        repeated_headers += rep
    return pl.concat(frames), rejects, repeated_headers


def slow_batches(reader, label, delim, header_norm, idx, wanted, n_fields, n_lines, batch_records=None):
    """Records through the csv module (quoted fields, embedded newlines), ``batch_records`` kept
    records at a time (all at once when None): ``(frame, rejects, repeated headers)`` per batch, the
    last batch always yielded (possibly empty).

    ``reader`` has read the header line; line numbers are physical lines of the file (the reader's
    ``line_num``). A record with too few fields that spans several lines up to the end of the file
    (line ``n_lines``) is an unclosed quote (the csv module reads it to the end): a structural error,
    since every later record is lost inside it.
    """
    cols: list[list[str | None]] = [[] for _ in wanted]
    lines: list[int] = []
    rejects: list[dict] = []
    repeated_headers = 0
    start_line = 2

    def batch():
        df = pl.DataFrame(
            {name: pl.Series(name, col, dtype=pl.String) for name, col in zip(wanted, cols)}
            | {LINE_COL: pl.Series(LINE_COL, lines, dtype=pl.Int64)}
        )
        return df, rejects, repeated_headers

    while True:
        if batch_records and len(lines) >= batch_records:
            yield batch()
            cols, lines, rejects, repeated_headers = [[] for _ in wanted], [], [], 0
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            why = (
                "a carriage return inside an unquoted field; quote the field or remove it"
                if "new-line character" in str(exc)
                else str(exc)
            )
            rejects.append(
                {"file": label, "line": start_line, "column": "", "value": "", "reason": f"unreadable record ({why})"}
            )
            start_line = reader.line_num + 1
            continue
        this_line = start_line
        start_line = reader.line_num + 1
        if not row or all(not f.strip() for f in row):
            continue
        if [_norm(f) for f in row] == header_norm:
            repeated_headers += 1
            continue
        if len(row) != n_fields:
            if reader.line_num > this_line and any("\n" in f for f in row) and reader.line_num >= n_lines:
                raise InputError(
                    label,
                    "a quoted field is never closed",
                    line=this_line,
                    expected='a closing " before the end of the file',
                )
            rejects.append(
                {
                    "file": label,
                    "line": this_line,
                    "column": "",
                    "value": delim.join(row)[:80],
                    "reason": f"expected {n_fields} fields, found {len(row)}",
                }
            )
            continue
        if any(len(f) > MAX_FIELD_CHARS for f in row):
            rejects.append(
                {"file": label, "line": this_line, "column": "", "value": delim.join(row)[:80], "reason": _LONG_REASON}
            )
            continue
        for j, k in enumerate(idx):
            v = row[k].strip()
            cols[j].append(v if v != "" else None)
        lines.append(this_line)
    yield batch()
