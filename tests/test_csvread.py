"""screening.csvread.read_table: decoding, delimiters, header checks, physical line numbers.

The expected line numbers are counted by hand from the text written in each test
(line 1 is the header). Encodings per the Python codec tables (UTF-8, cp1252).
"""

from __future__ import annotations

import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from screening import csvread
from screening.csvread import LINE_COL, MAX_FIELD_CHARS, read_table
from screening.errors import InputError

REQ = ["id", "name", "qty"]


def _write(tmp_path, data, name="f.csv"):
    p = tmp_path / name
    if isinstance(data, bytes):
        p.write_bytes(data)
    else:
        p.write_text(data, encoding="utf-8", newline="")
    return p


def _read(tmp_path, data, **kw):
    return read_table(_write(tmp_path, data), required=kw.pop("required", REQ), **kw)


def test_plain_file_keeps_physical_lines(tmp_path):
    t = _read(tmp_path, "id,name,qty\na,Alpha,1\nb,Beta,2\n")
    assert t.df.columns == ["id", "name", "qty", LINE_COL]
    assert t.df.rows() == [("a", "Alpha", "1", 2), ("b", "Beta", "2", 3)]
    assert t.df.schema["qty"] == pl.String  # text only: typing is parse.py's job
    assert (t.encoding, t.delimiter, t.rejects, t.notices) == ("utf-8", ",", [], [])


def test_header_names_are_trimmed_and_case_insensitive(tmp_path):
    t = _read(tmp_path, " ID , Name ,QTY\na,b,1\n")
    assert t.df.select("id", "name", "qty").rows() == [("a", "b", "1")]


def test_values_are_trimmed_and_blank_is_null(tmp_path):
    t = _read(tmp_path, "id,name,qty\n a , ,7 \n")
    assert t.df.row(0) == ("a", None, "7", 2)


@pytest.mark.parametrize("bom", [b"", b"\xef\xbb\xbf"])
def test_utf8_with_or_without_bom(tmp_path, bom):
    t = _read(tmp_path, bom + "id,name,qty\nx,Zoë Hall,1\n".encode("utf-8"))
    assert t.df["name"].to_list() == ["Zoë Hall"] and t.encoding == "utf-8" and not t.notices


def test_latin1_fallback_is_reported_with_line(tmp_path):
    raw = "id,name,qty\na,plain,1\nb,Café Müller,2\n".encode("cp1252")  # é = 0xE9, ü = 0xFC in cp1252
    t = _read(tmp_path, raw)
    assert t.encoding == "cp1252" and t.df["name"].to_list() == ["plain", "Café Müller"]
    assert len(t.notices) == 1 and "line 3" in t.notices[0] and "Latin-1" in t.notices[0]


def test_bom_then_latin1_bytes(tmp_path):
    # a UTF-8 byte-order mark followed by cp1252 text: the mark must not end up in the first column name
    raw = b"\xef\xbb\xbf" + "id,name,qty\nb,Bäckerei,2\n".encode("cp1252")
    t = _read(tmp_path, raw)
    assert t.df.row(0) == ("b", "Bäckerei", "2", 2) and t.encoding == "cp1252"


def test_forced_encoding_that_does_not_fit(tmp_path):
    with pytest.raises(InputError, match=r"f\.csv: cannot decode as ascii"):
        _read(tmp_path, "id,name,qty\na,Zoë,1\n".encode("utf-8"), encoding="ascii")


@pytest.mark.parametrize("delim", [";", "\t"])
def test_semicolon_and_tab_are_detected(tmp_path, delim):
    t = _read(tmp_path, delim.join(REQ) + "\n" + delim.join(["a", "x, y", "1,5"]) + "\n")
    assert t.delimiter == delim and t.df.row(0) == ("a", "x, y", "1,5", 2)


def test_forced_delimiter(tmp_path):
    t = _read(tmp_path, "id|name|qty\na|b|1\n", delimiter="|")
    assert t.df.row(0) == ("a", "b", "1", 2)


def test_blank_lines_skipped_line_numbers_kept(tmp_path):
    t = _read(tmp_path, "id,name,qty\n\na,A,1\n   \n,,\nb,B,2\n\n")
    assert t.df[LINE_COL].to_list() == [3, 6] and t.rejects == []


def test_repeated_header_skipped_and_reported(tmp_path):
    t = _read(tmp_path, "id,name,qty\na,A,1\nID, name ,qty\nb,B,2\n")
    assert t.df[LINE_COL].to_list() == [2, 4]
    assert t.notices == [f"{tmp_path / 'f.csv'}: skipped 1 repeated header line(s)"]


def test_repeated_header_in_quoted_file(tmp_path):
    t = _read(tmp_path, '"id","name","qty"\na,"A, Inc",1\n"id","name","qty"\nb,B,2\n')
    assert t.df.rows() == [("a", "A, Inc", "1", 2), ("b", "B", "2", 4)]
    assert "repeated header" in t.notices[0]


def test_quoted_newlines_keep_the_start_line(tmp_path):
    text = 'id,name,qty\na,"two\nlines",1\nb,"three\n\nlines",2\nc,C,3\n'
    t = _read(tmp_path, text)
    # record a starts on line 2 (spans 2-3), b on line 4 (spans 4-6), c on line 7
    assert t.df[LINE_COL].to_list() == [2, 4, 7]
    assert t.df["name"].to_list() == ["two\nlines", "three\n\nlines", "C"]


def test_crlf_and_cr_only_line_ends(tmp_path):
    for text in ("id,name,qty\r\na,A,1\r\nb,B,2\r\n", "id,name,qty\ra,A,1\rb,B,2\r"):
        t = _read(tmp_path, text)
        assert t.df.select("id", "qty", LINE_COL).rows() == [("a", "1", 2), ("b", "2", 3)]


def test_wrong_field_count_rejected_with_line(tmp_path):
    t = _read(tmp_path, "id,name,qty\na,A,1\nb,B\nc,C,3,extra\nd,D,4\n")
    assert t.df["id"].to_list() == ["a", "d"]
    assert [(r["line"], r["reason"]) for r in t.rejects] == [
        (3, "expected 3 fields, found 2"),
        (4, "expected 3 fields, found 4"),
    ]
    assert t.rejects[0]["value"] == "b,B" and t.rejects[0]["file"] == str(tmp_path / "f.csv")


@pytest.mark.parametrize("quoted", [False, True])
def test_over_long_field_is_rejected_not_truncated(tmp_path, quoted):
    long = "x" * (MAX_FIELD_CHARS + 1)
    cell = f'"{long}"' if quoted else long
    t = _read(tmp_path, f"id,name,qty\na,{cell},1\nb,ok,2\n")
    assert t.df["id"].to_list() == ["b"]
    assert [(r["line"], r["reason"]) for r in t.rejects] == [(2, "a field is longer than 10,000 characters")]


def test_field_at_the_limit_is_kept_whole(tmp_path):
    name = "y" * MAX_FIELD_CHARS
    t = _read(tmp_path, f"id,name,qty\na,{name},1\n")
    assert t.df["name"][0] == name


def test_unclosed_quote_is_structural(tmp_path):
    with pytest.raises(InputError, match=r"f\.csv, line 3: a quoted field is never closed; expected a closing \""):
        _read(tmp_path, 'id,name,qty\na,A,1\nb,"B is open,2\nc,C,3\nd,D,4\n')


def test_unclosed_quote_on_last_line_rejects_that_line(tmp_path):
    t = _read(tmp_path, 'id,name,qty\na,A,1\nb,"B is open,2\n')
    assert t.df["id"].to_list() == ["a"] and [r["line"] for r in t.rejects] == [3]


def test_optional_columns_present_or_null(tmp_path):
    t = read_table(_write(tmp_path, "id,name,qty,extra_col\na,A,1,zz\n"), required=REQ, optional=["note"])
    assert t.df["note"].to_list() == [None]
    assert t.notices == [f"{tmp_path / 'f.csv'}: ignored unknown column(s): extra_col"]


@pytest.mark.parametrize(
    "data, pattern",
    [
        (b"", r"f\.csv, line 1: file is empty; expected a header line and data rows"),
        (b"\n \n\t\n", r"f\.csv, line 1: file is empty"),
        (b"\xef\xbb\xbf", r"f\.csv, line 1: file is empty"),
        (b"id,name,qty\n", r"f\.csv, line 2: no data rows; expected at least one data row after the header"),
        (b"id,name,qty\n\n,,\n", r"f\.csv, line 2: no data rows"),
        (
            b"id,name\na,b\n",
            r"f\.csv, line 1, column 'qty': missing required column; expected columns id, name, qty "
            r"\(found: id, name\)",
        ),
        (b"id,Name,qty,NAME\na,b,1,c\n", r"f\.csv, line 1, column 'NAME': column name appears twice"),
        (b"id,name,qty\na,\x00b,1\n", r"f\.csv, line 2: file is not text \(contains NUL bytes\)"),
        (b"id,name,qty\n\x81\x8d\x8f\x90\x9d\n", r"f\.csv, line 2: file is neither UTF-8 nor Latin-1/cp1252 text"),
    ],
)
def test_structural_errors(tmp_path, data, pattern):
    with pytest.raises(InputError, match=pattern) as ei:
        _read(tmp_path, data)
    assert "\n" not in str(ei.value)


def test_missing_path_and_folder(tmp_path):
    with pytest.raises(InputError, match=r"nope\.csv: file not found"):
        read_table(tmp_path / "nope.csv", required=REQ)
    with pytest.raises(InputError, match=r": is a folder, not a file"):
        read_table(tmp_path, required=REQ)


def test_label_is_used_in_messages(tmp_path):
    with pytest.raises(InputError, match=r"^buildings\.csv, line 2: no data rows"):
        read_table(_write(tmp_path, "id,name,qty\n"), required=REQ, label="buildings.csv")


# ----------------------------------------------------------------------------- polars' parser for regular chunks

_HEADER = ["id", "name", "qty"]
# fields of every kind the rules treat apart: plain, empty, blanks around or inside, non-ASCII, a bare CR, the
# header's own names in other cases (a repeated header), long ones
_FIELD = st.sampled_from(
    ["a", "B7", "", " 1 ", "\t", "x y", "é", "\u3000z", "ID", " Name ", "qty", "b\rc", "x" * 40, "y" * 10_001]
)
_LINE = st.one_of(
    st.lists(_FIELD, min_size=3, max_size=3),  # a regular record
    st.lists(_FIELD, min_size=0, max_size=5),  # any number of fields, blank lines
)


@settings(max_examples=300, deadline=None)
@given(
    lines=st.lists(_LINE, min_size=1, max_size=12),
    delim=st.sampled_from([",", ";", "\t"]),
    crlf=st.booleans(),
    last_nl=st.booleans(),
    first=st.integers(2, 10_000),
)
def test_regular_chunks_through_polars_read_as_line_by_line(lines, delim, crlf, last_nl, first):
    """The native path gives the frame, rejects and repeated-header count of the line-by-line path, or
    declines (None) and leaves the chunk to it."""
    eol = "\r\n" if crlf else "\n"
    chunk = eol.join(delim.join(f for f in fields) for fields in lines) + (eol if last_nl else "")
    idx, wanted = [0, 1, 2], list(_HEADER)
    native = csvread._native_chunk(chunk, first, delim, _HEADER, idx, wanted)
    split = csvread._split_chunk(chunk, first, "f.csv", delim, _HEADER, idx, wanted)
    if native is not None:
        assert native[0].equals(split[0]) and native[0].schema == split[0].schema
        assert native[1] == split[1] == [] and native[2] == split[2]
    assert csvread._fast_chunk(chunk, first, "f.csv", delim, _HEADER, idx, wanted)[0].equals(split[0])


@pytest.mark.parametrize("crlf", [False, True])
def test_a_regular_chunk_takes_polars_parser(crlf):
    """Regular records (blanks, non-ASCII, a repeated header among them) are parsed natively, as the line-by-line
    path reads them; a blank line, a short line or a long field leaves the chunk to that path."""
    eol = "\r\n" if crlf else "\n"
    rows = ["B1,gas, 3 ", "B2,oil,", "ID, Name ,QTY", "Bé,\u3000x,7"]
    chunk = eol.join(rows) + eol
    native = csvread._native_chunk(chunk, 5, ",", _HEADER, [0, 1, 2], _HEADER)
    assert native is not None
    split = csvread._split_chunk(chunk, 5, "f.csv", ",", _HEADER, [0, 1, 2], _HEADER)
    assert native[0].equals(split[0]) and native[2] == split[2] == 1
    assert native[0][LINE_COL].to_list() == [5, 6, 8]
    assert native[0]["qty"].to_list() == ["3", None, "7"]
    for odd in (["B1,gas,3", "", "B2,oil,4"], ["B1,gas,3", "B2,oil"], ["B1,gas," + "9" * (MAX_FIELD_CHARS + 1)]):
        assert csvread._native_chunk(eol.join(odd) + eol, 2, ",", _HEADER, [0, 1, 2], _HEADER) is None
