"""Large portfolios (issue 20): the workbook's size limit, the page's row limit, the workbook's column
widths, ranking.pdf rendered beside the other outputs on a child process, the database's memory limit."""

from __future__ import annotations

import json

import openpyxl
import polars as pl
import pytest

from screening import runner
from screening.render import pdf
from screening.xlsxout import CHAR_PX, MAX_CHARS, PAD_PX, column_widths
from tests.conftest import write_portfolio


def _run(tmp_path, run=None, **output):
    p = write_portfolio(tmp_path / "in")
    out = tmp_path / "out"
    res = runner.run(
        overrides={
            "inputs": {"buildings": str(p.buildings), "readings": str(p.readings), "weather": str(p.weather)},
            "store": {"database": str(tmp_path / "s.duckdb")},
            "analysis": {"as_of": p.as_of},
            "output": {"sheets": False, **output},
            "run": run or {},
        },
        out_dir=str(out),
    )
    return res, out


def _page_rows(out) -> list[dict]:
    html = (out / "index.html").read_text(encoding="utf-8")
    start = html.index('<script type="application/json"')
    start = html.index(">", start) + 1
    return json.loads(html[start : html.index("</script>", start)])["rows"]


def test_above_the_workbook_limit_the_csvs_hold_every_table_and_the_run_says_why(tmp_path):
    res, out = _run(tmp_path, workbook_max_buildings=3, page_rows=4)
    ranking = pl.read_csv(out / "ranking.csv")
    assert ranking.height > 4
    assert not (out / "ranking.xlsx").exists()
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    why = summary["files_left_out"]["ranking.xlsx"]
    assert f"{ranking.height} buildings is more than [output] workbook_max_buildings = 3" in why
    assert "ranking.xlsx not written" in (out / "run.log").read_text(encoding="utf-8")
    html = (out / "index.html").read_text(encoding="utf-8")
    assert 'href="ranking.xlsx"' not in html and "and ranking.xlsx" not in html
    # the page: the first 4 buildings in rank order, and it says so
    rows = _page_rows(out)
    assert [r["id"] for r in rows] == ranking["building_id"].head(4).to_list()
    assert f"This page holds the first 4 of {ranking.height} buildings" in html
    assert (out / "ranking.pdf").stat().st_size > 0
    assert res.summary["files_left_out"] == summary["files_left_out"]


def test_within_the_limits_the_workbook_and_every_building_are_there(tmp_path):
    _res, out = _run(tmp_path)
    ranking = pl.read_csv(out / "ranking.csv")
    assert (out / "ranking.xlsx").is_file()
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert "files_left_out" not in summary
    assert [r["id"] for r in _page_rows(out)] == ranking["building_id"].to_list()
    html = (out / "index.html").read_text(encoding="utf-8")
    assert 'href="ranking.xlsx"' in html and "This page holds the first" not in html


def test_zero_means_no_workbook(tmp_path):
    _res, out = _run(tmp_path, workbook_max_buildings=0)
    assert not (out / "ranking.xlsx").exists()
    why = json.loads((out / "summary.json").read_text(encoding="utf-8"))["files_left_out"]["ranking.xlsx"]
    assert why.startswith("[output] workbook_max_buildings = 0")


def test_column_widths_follow_the_longest_text_header_or_value(tmp_path):
    df = pl.DataFrame(
        {
            "id": ["B1", "B2"],
            "a_long_header_name": [1.5, 2.5],
            "name": ["short", "x" * 40],
            "note": ["y" * 500, None],
            "cost": [1234567.0, None],
        }
    )
    w = column_widths(df)
    chars = {c: (v - PAD_PX) // CHAR_PX for c, v in w.items()}
    assert chars["id"] == len("id") + 2  # the header (and its filter button) is the longest
    assert chars["a_long_header_name"] == len("a_long_header_name") + 2
    assert chars["name"] == 40
    assert chars["note"] == MAX_CHARS  # capped
    assert chars["cost"] >= len("1,234,567.0")  # room for the separators and the decimal
    # the widths reach the file (openpyxl reads them back in characters, about px / 7)
    from screening.outputs import Display
    from screening.xlsxout import write_ranking_xlsx

    path = write_ranking_xlsx(
        tmp_path / "w.xlsx",
        ranking=df,
        issues=pl.DataFrame({"building_id": ["B1"], "code": ["x"]}),
        rejects=pl.DataFrame(schema={"file": pl.String}),
        assumptions=pl.DataFrame({"building_id": ["B1"]}),
        disp=Display("IP"),
    )
    ws = openpyxl.load_workbook(path)["ranking"]
    assert ws.column_dimensions["C"].width > ws.column_dimensions["A"].width + 20


def _fail(text: str) -> None:
    raise ValueError(text)


def test_a_background_call_returns_its_value_or_raises_its_error():
    assert pdf.Background(max, 3, 9).result() == 9
    with pytest.raises(ValueError, match="broken on purpose"):
        pdf.Background(_fail, "broken on purpose").result()
    job = pdf.Background(sorted, [3, 1])
    job.cancel()  # stopped before its result is asked for: nothing is left running
    job.cancel()


def test_on_one_core_the_call_runs_here(monkeypatch):
    monkeypatch.setattr(pdf.os, "cpu_count", lambda: 1)
    job = pdf.Background(sorted, [3, 1, 2])
    assert job._pool is None and job.result() == [1, 2, 3]


def test_the_database_memory_limit_reaches_duckdb_and_changes_no_result(tmp_path):
    from screening.store import Store

    with Store(tmp_path / "m.duckdb", memory_mb=300) as st:
        limit = st.con.execute("SELECT current_setting('memory_limit')").fetchone()[0]
    # DuckDB reports 300 MB (10^6 bytes) in MiB
    assert limit.endswith("MiB") and float(limit.split()[0]) == pytest.approx(300e6 / 2**20, abs=0.2)
    with Store(tmp_path / "d.duckdb") as st:  # 0: DuckDB's own default, larger
        default = st.con.execute("SELECT current_setting('memory_limit')").fetchone()[0]
    assert default != limit
    _r, a = _run(tmp_path / "a", run={"store_memory_mb": 256})
    _r, b = _run(tmp_path / "b", run={"store_memory_mb": 0})
    assert (a / "ranking.csv").read_bytes() == (b / "ranking.csv").read_bytes()


def test_results_are_stored_a_piece_at_a_time_with_the_same_rows(tmp_path, monkeypatch):
    import duckdb

    from screening.runs import record

    def stored(db) -> list[tuple]:
        con = duckdb.connect(str(db), read_only=True)
        try:
            return con.execute("SELECT * EXCLUDE (run_id) FROM results ORDER BY building_id").fetchall()
        finally:
            con.close()

    _run(tmp_path / "a")
    monkeypatch.setattr(record.results_for_store, "__defaults__", (3,))  # pieces of 3 buildings
    _run(tmp_path / "b")
    a, b = stored(tmp_path / "a" / "s.duckdb"), stored(tmp_path / "b" / "s.duckdb")
    assert len(a) == 6 and a == b  # 6 buildings: two pieces of 3


def test_ranking_pdf_lists_the_data_issues_of_its_table_in_rank_order_and_counts_the_rest(tmp_path):
    """ranking.pdf's data issues are those of the buildings in its table, in rank order; the others are
    counted ("and N more in data_issues.csv"), never dropped without a word (the first 1,000 issues by
    building id were listed before, and those past the cut went unmentioned)."""
    import re

    import pdfplumber

    p = write_portfolio(tmp_path / "in")
    # a missing February bill for three buildings: B03 ranks first, B05 third, B02 last (fixture's order)
    lines = p.lines("readings")
    p.readings.write_text(
        "\n".join(x for x in lines if not (x.startswith(("B02,", "B03,", "B05,")) and ",2024-02-01," in x)) + "\n",
        encoding="utf-8",
    )
    out = tmp_path / "out"
    runner.run(
        overrides={
            "inputs": {"buildings": str(p.buildings), "readings": str(p.readings), "weather": str(p.weather)},
            "store": {"database": str(tmp_path / "s.duckdb")},
            "analysis": {"as_of": p.as_of},
            "output": {"sheets": False, "ranking_pdf_rows": 3},
        },
        out_dir=str(out),
    )
    ranking = pl.read_csv(out / "ranking.csv", infer_schema_length=0)
    issues = pl.read_csv(out / "data_issues.csv")
    table = ranking.head(3)
    listed = issues.filter(pl.col("building_id").is_in(table["building_id"].implode()))
    assert 0 < listed.height < issues.height  # some issues in the table's buildings, some outside it
    want = [f"rank {r} · {b}" for r, b in table.select("rank", "building_id").iter_rows() if b in listed["building_id"]]
    with pdfplumber.open(out / "ranking.pdf") as doc:
        text = "\n".join(pg.extract_text() or "" for pg in doc.pages)
    section = text[text.index("Data issues\nThose of the 3 building(s) in the table above") :]
    assert re.findall(r"rank \d+ · B\d+", section) == want
    assert f"and {issues.height - listed.height} more in data_issues.csv." in section
