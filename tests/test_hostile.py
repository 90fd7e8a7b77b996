"""Hostile content through a whole run (issue 9 "Hostile content").

Not repeated here (tests/test_report.py has them): markup rendered as literal text in PDFs,
the URL fetcher refusing remote and outside files, ``safe_filename`` / ``assign_filenames``
on unsafe ids. Here the same threats go end to end through ``ddscreen run``:

* CSV formula injection: text cells starting with ``=``, ``+``, ``-``, ``@``, tab or CR are
  written with a leading ``'`` in ranking.csv, rejects.csv and data_issues.csv (OWASP "CSV
  Injection"), numbers are not touched;
* building ids that are path tricks or device names: the unsafe ones are rejected at input
  (README input contract: 1-64 letters, digits, ``-``, ``_``, ``.``), the allowed-but-awkward
  ones (``CON``, ``con``, ``..``, ``.hidden``, ``-rf``) get distinct sheet files inside
  ``sheets/``; every file the run writes is listed and lies under the output root or is the
  database;
* SQL text from inputs is stored verbatim (bound parameters), and a meta-test checks that every
  statement lives in ``sql/*.sql`` with ``$name`` parameters only and that no module builds SQL
  text in Python.
"""

from __future__ import annotations

import ast
import csv
import io
import re
import socket
from pathlib import Path

import duckdb
import pytest

from screening import store as storemod
from screening.resources import sql_dir

from .conftest import BUILDING_HEADER, cli, portfolio_text, write_portfolio

SCREENING = Path(storemod.__file__).parent

# OWASP "CSV Injection": a cell starting with = + - @ (and tab, carriage return) is run as a formula
FORMULA_NAMES = [
    '=HYPERLINK("http://evil.example/x","click")',
    "+1+cmd|' /C calc'!A0",
    "-2+3",
    "@SUM(A1:A9)",
    "\tTabbed Hall",
    " =SUM(1,2)",
]  # input cells are trimmed: tab and blank go
SQL_NAME = "Robert'); DROP TABLE buildings; --"
MARKUP_NAME = '<img src="http://evil.example/p.png"><script>fetch("https://evil.example")</script>'
AWKWARD_IDS = ["CON", "con", "..", ".hidden", "-rf", "AUX.txt", "a.pdf", "B" * 64, "nul"]
UNSAFE_IDS = ["../B01", "a/b", "a\\b", "C" * 65, "x y", "é1"]


def _row(values: list[str]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow(values)
    return buf.getvalue()


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    """The fixture portfolio plus buildings with hostile names and ids (copies of B01's data
    and readings), run once with sheets and no network."""
    root = tmp_path_factory.mktemp("hostile")
    p = write_portfolio(root / "in")
    b_lines = portfolio_text()["buildings"].splitlines()
    r_lines = portfolio_text()["readings"].splitlines()
    b01 = next(csv.reader([b_lines[1]]))
    r01 = [next(csv.reader([ln])) for ln in r_lines[1:] if ln.startswith("B01,")]
    names = {}
    new_ids = [f"F{i}" for i in range(len(FORMULA_NAMES))] + ["S1", "M1"] + AWKWARD_IDS + UNSAFE_IDS
    for i, bid in enumerate(new_ids):
        names[bid] = (FORMULA_NAMES + [SQL_NAME, MARKUP_NAME])[i] if i < len(FORMULA_NAMES) + 2 else f"Hall {i}"
    b_text = portfolio_text()["buildings"]
    r_text = portfolio_text()["readings"]
    for bid in new_ids:
        row = list(b01)
        row[0], row[1] = bid, names[bid]
        row[BUILDING_HEADER.index("address")] = "=1+2 Fernbrake Road" if bid == "F0" else row[11]
        b_text += _row(row)
        for rr in r01:
            r_text += _row([bid] + rr[1:])
    p.buildings.write_text(b_text, encoding="utf-8", newline="")
    p.readings.write_text(r_text, encoding="utf-8", newline="")
    before = {x for x in root.rglob("*")}
    mp = pytest.MonkeyPatch()
    attempts = []

    real_connect = socket.socket.connect

    def no_connect(self, *a, **k):  # internet sockets only (worker processes talk over AF_UNIX)
        if self.family in (socket.AF_INET, socket.AF_INET6):
            attempts.append(a)
            raise OSError("network disabled in this test")
        return real_connect(self, *a, **k)

    mp.setattr(socket.socket, "connect", no_connect)
    try:
        res = cli(p.args(root / "out", root / "s.duckdb"))
    finally:
        mp.undo()
    assert res.exit_code == 0, res.stderr
    written = sorted(x for x in root.rglob("*") if x not in before)
    return {
        "root": root,
        "out": root / "out",
        "db": root / "s.duckdb",
        "names": names,
        "written": written,
        "attempts": attempts,
        "accepted": ["B01", "B02", "B03", "B04", "B05", "B06"]
        + [f"F{i}" for i in range(len(FORMULA_NAMES))]
        + ["S1", "M1"]
        + AWKWARD_IDS,
    }


def _csv(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def test_formula_cells_are_neutralized_in_ranking_csv(hostile_run):
    rows = {
        r["building_id"].removeprefix("'") if r["building_id"] == "'-rf" else r["building_id"]: r
        for r in _csv(hostile_run["out"] / "ranking.csv")
    }
    for i, name in enumerate(FORMULA_NAMES):
        kept = name.strip()
        assert rows[f"F{i}"]["name"] == ("'" + kept if kept[0] in "=+-@" else kept), rows[f"F{i}"]["name"]
    # other names untouched (a leading ' only where a spreadsheet would compute)
    assert rows["S1"]["name"] == SQL_NAME and rows["B01"]["name"] == "Quillmore Offices"
    for r in rows.values():
        for col, v in r.items():
            assert not re.match(r"^[=+\-@\t\r]", v) or re.fullmatch(r"-\d+(\.\d+)?(e-?\d+)?", v), (col, v)
    # numbers stay numbers: a numeric cell starting with '-' (here nmbe of -0.0) is not prefixed
    neg = [v for r in rows.values() for c, v in r.items() if v.startswith("-")]
    assert neg and all(float(v) <= 0 for v in neg)
    assert rows["-rf"]["building_id"] == "'-rf"  # a text id is: it would start a formula


def test_formula_cells_are_neutralized_in_the_other_csv_files(hostile_run):
    rej = _csv(hostile_run["out"] / "rejects.csv")
    assert rej, "the unsafe ids must be rejected"
    for name in ("rejects.csv", "data_issues.csv", "sheets_index.csv"):
        for r in _csv(hostile_run["out"] / name):
            for col, v in r.items():
                assert not re.match(r"^[=+@\t\r]", v or ""), (name, col, v)
                assert not re.match(r"^-[^\d]", v or ""), (name, col, v)


@pytest.mark.parametrize(
    "cell, written",
    [
        ("-412.0", "-412.0"),
        ("+3", "+3"),
        ("-2e5", "-2e5"),
        ("-0.0", "-0.0"),
        (".5", ".5"),
        ("+.5E-3", "+.5E-3"),
        ("-2+3", "'-2+3"),
        ("=1+2", "'=1+2"),
        ("+A1", "'+A1"),
        ("@SUM(A1:A9)", "'@SUM(A1:A9)"),
        ("-1e", "'-1e"),
        ("-inf", "'-inf"),
        ("-", "'-"),
        ("-rf", "'-rf"),
        ("\tTab", "'\tTab"),
        ("3-2", "3-2"),
    ],
)
def test_a_text_cell_that_is_a_number_is_left_alone(tmp_path, cell, written):
    """A rejected value like -412.0 stays a number in the CSV (README: numbers are left alone);
    anything else a spreadsheet would compute still gets its leading '."""
    import polars as pl
    from screening import outputs

    outputs.write_csv(pl.DataFrame({"value": [cell], "n": [-412.0]}), tmp_path / "x.csv")
    (row,) = _csv(tmp_path / "x.csv")
    assert row == {"value": written, "n": "-412.0"}


def test_unsafe_ids_are_rejected_with_their_line(hostile_run):
    rej = _csv(hostile_run["out"] / "rejects.csv")
    bad = {r["value"]: r for r in rej if r["column"] == "building_id" and r["file"].endswith("buildings.csv")}
    for bid in UNSAFE_IDS:
        assert bid in bad, (bid, sorted(bad))
        assert "expected 1-64 letters, digits" in bad[bid]["reason"]


def test_every_written_file_is_under_the_output_root(hostile_run):
    root, out = hostile_run["root"], hostile_run["out"].resolve()
    db = hostile_run["db"]
    allowed_outside = {db, Path(str(db) + ".lock"), Path(str(db) + ".wal")}
    for x in hostile_run["written"]:
        r = x.resolve()
        assert r == out or out in r.parents or x in allowed_outside, x
    files = [x for x in hostile_run["written"] if x.is_file()]
    sheets = [x for x in files if x.parent.name == "sheets"]
    assert all(x.parent.resolve() == out / "sheets" for x in sheets)
    assert all(x.suffix == ".pdf" for x in sheets)
    assert len(sheets) == len(hostile_run["accepted"])
    assert len({x.name.casefold() for x in sheets}) == len(sheets)  # no two collide without case
    assert not any(x.name.split(".")[0].upper() in {"CON", "NUL", "AUX", "PRN"} for x in sheets)
    assert not any(x.name.startswith((".", "-")) for x in sheets)
    _ = root


def test_sheets_index_names_a_distinct_file_for_every_building(hostile_run):
    idx = _csv(hostile_run["out"] / "sheets_index.csv")
    got = {
        r["building_id"].removeprefix("'") if r["building_id"].startswith("'-") else r["building_id"]: r["file"]
        for r in idx
    }
    assert sorted(got) == sorted(hostile_run["accepted"])
    for bid, f in got.items():
        path = (hostile_run["out"] / f).resolve()
        assert path.parent == (hostile_run["out"] / "sheets").resolve() and path.is_file(), (bid, f)
    assert len({f.casefold() for f in got.values()}) == len(got)


def test_no_network_during_the_run(hostile_run):
    assert hostile_run["attempts"] == []


def test_sql_text_in_inputs_is_stored_verbatim(hostile_run):
    con = duckdb.connect(str(hostile_run["db"]), read_only=True)
    try:
        tables = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
        assert {"buildings", "readings", "results"} <= tables
        names = dict(con.execute("SELECT building_id, name FROM buildings").fetchall())
    finally:
        con.close()
    assert names["S1"] == SQL_NAME and names["M1"] == MARKUP_NAME
    assert names["F0"] == FORMULA_NAMES[0]  # stored as given; neutralized only in the CSV outputs


# ----------------------------------------------------------------------------- SQL only with bound parameters

PY_PLACEHOLDER = re.compile(r"\{[A-Za-z_0-9!:]*\}|%\(?\w*\)?[sd]|%s")


def test_every_sql_statement_uses_dollar_parameters_only():
    stmts = storemod.statements()
    assert len(stmts) >= 30
    for name, sql in stmts.items():
        assert not PY_PLACEHOLDER.search(sql), (name, sql)
        body = re.sub(r"'[^']*'", "''", sql)  # string literals aside
        assert "?" not in body, (name, "positional parameters: use $name")
    # every .sql file holds only named blocks (no statement outside a block)
    for path in sorted(sql_dir().glob("*.sql")):
        text = path.read_text(encoding="utf-8")
        head = text.split("-- name:", 1)[0]
        assert all(ln.strip() == "" or ln.strip().startswith("--") for ln in head.splitlines()), path.name


def _calls(tree: ast.AST):
    for node in ast.walk(tree):
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
            yield node


def _dynamic(arg: ast.AST) -> bool:
    """Text built at run time: an f-string, % or + formatting, or .format()/.join()."""
    if isinstance(arg, ast.JoinedStr):
        return True
    if isinstance(arg, ast.BinOp) and isinstance(arg.op, (ast.Mod, ast.Add)):
        return True
    return isinstance(arg, ast.Call) and isinstance(arg.func, ast.Attribute) and arg.func.attr in ("format", "join")


def test_no_module_builds_sql_text():
    names = set(storemod.statements())
    con_calls, store_calls = [], []
    for path in sorted(SCREENING.rglob("*.py")):  # subpackages too (screening/runs/)
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for call in _calls(tree):
            attr = call.func.attr
            target = call.func.value
            on_con = isinstance(target, ast.Attribute) and target.attr == "con"
            if attr in ("execute", "sql", "executemany", "query") and on_con:
                con_calls.append((path.name, call.lineno))
                assert call.args and not _dynamic(call.args[0]), (path.name, call.lineno)
                assert not isinstance(call.args[0], ast.Constant), (path.name, call.lineno, "SQL literal in Python")
            on_store = (isinstance(target, ast.Name) and target.id == "store") or (
                isinstance(target, ast.Attribute) and target.attr == "store"
            )
            if attr in ("execute", "frame", "rows") and on_store:  # store.execute("name", params)
                if call.args and isinstance(call.args[0], ast.Constant) and isinstance(call.args[0].value, str):
                    store_calls.append(call.args[0].value)
                    assert call.args[0].value in names, (path.name, call.lineno, call.args[0].value)
                else:
                    assert call.args and not _dynamic(call.args[0]), (path.name, call.lineno)
    assert {f for f, _ in con_calls} == {"store.py"}, con_calls  # only the store talks to DuckDB
    assert len(store_calls) >= 20
