"""Workbooks (.xlsx/.xlsm) and Parquet files in (issue 16): the same checks and accounting as CSV.

The workbooks are written here with openpyxl (numbers as numbers, dates as date cells), the
Parquet files with polars; the invented portfolio of conftest is the content.
"""

from __future__ import annotations

import csv
import datetime as dt
from pathlib import Path

import openpyxl
import polars as pl
import pytest

from screening import pipeline
from screening.errors import InputError
from screening.ingest import ReadOptions, read_readings

from .conftest import cli


def _typed(v: str):
    if v == "":
        return None
    try:
        return dt.date.fromisoformat(v)
    except ValueError:
        pass
    try:
        f = float(v)
        return int(f) if f.is_integer() and "." not in v else f
    except ValueError:
        return v


def to_workbook(
    csv_path: Path, out: Path, sheet: str = "Sheet1", *, before: list[list] = (), extra_sheets: tuple[str, ...] = ()
) -> Path:
    wb = openpyxl.Workbook()
    for name in extra_sheets:
        wb.create_sheet(name)
    ws = wb.active
    ws.title = sheet
    if extra_sheets:  # the data sheet first, the others after it
        wb.move_sheet(ws, offset=-len(extra_sheets))
    for row in before:
        ws.append(row)
    with csv_path.open(encoding="utf-8") as f:
        for i, row in enumerate(csv.reader(f)):
            ws.append(row if i == 0 else [_typed(v) for v in row])
    wb.save(out)
    return out


def _run(portfolio, tmp_path, b, r, w, name="out"):
    return cli(
        [
            "run",
            "--buildings",
            str(b),
            "--readings",
            str(r),
            "--weather",
            str(w),
            "--as-of",
            portfolio.as_of,
            "--no-sheets",
            "--out",
            str(tmp_path / name),
            "--db",
            str(tmp_path / f"{name}.duckdb"),
            "--quiet",
        ]
    )


def _ranking(tmp_path, name) -> pl.DataFrame:
    return pl.read_csv(tmp_path / name / "ranking.csv").drop("run_id", strict=False)


def test_a_run_on_workbooks_and_parquet_ranks_as_the_csv_run(portfolio, tmp_path):
    b = to_workbook(portfolio.buildings, tmp_path / "buildings.xlsx", "Buildings", extra_sheets=("Notes",))
    r = to_workbook(portfolio.readings, tmp_path / "bills.xlsm", "Bills")
    w = tmp_path / "weather.parquet"
    pl.read_csv(portfolio.weather, try_parse_dates=True).write_parquet(w)
    assert _run(portfolio, tmp_path, portfolio.buildings, portfolio.readings, portfolio.weather, "csv").exit_code == 0
    res = _run(portfolio, tmp_path, b, f"{r}#Bills", w, "book")
    assert res.exit_code == 0, res.stderr
    a, c = _ranking(tmp_path, "csv"), _ranking(tmp_path, "book")
    assert a.columns == c.columns
    assert a.select("building_id", "tier", "ratio").equals(c.select("building_id", "tier", "ratio"))


def test_workbook_rejects_name_the_sheet_row_and_column(portfolio, tmp_path):
    r = to_workbook(portfolio.readings, tmp_path / "bills.xlsx", "Bills", before=[[], []])  # header on row 3
    wb = openpyxl.load_workbook(r)
    ws = wb["Bills"]
    ws["E10"] = "lots"  # quantity, not a number
    ws["D11"] = dt.datetime(2023, 9, 30, 14, 30)  # a date with a time of day
    ws["K12"] = "stray note"  # beyond the last named column (H)
    ws.append([])  # a blank row: skipped
    ws.append(list(next(ws.iter_rows(min_row=3, max_row=3, values_only=True))))  # the header again
    wb.save(r)
    ld = read_readings(f"{r}#Bills", ReadOptions())
    rej = {(x["file"], x["line"], x["column"]): x["reason"] for x in ld.rejects.iter_rows(named=True)}
    label = f"{r}[Bills]"
    assert rej[(label, 10, "quantity")].startswith("expected a number")
    assert (label, 11, "period_end") in rej
    assert rej[(label, 12, "K")].startswith("a value in column K, beyond the last named column")
    assert ld.df.height + ld.rejects.height == portfolio.n_readings  # every row accepted or rejected
    assert any("header on row 3" in n for n in ld.notices)
    assert any("skipped 1 repeated header row" in n for n in ld.notices)


def test_first_sheet_by_default_and_sheet_names_are_checked(portfolio, tmp_path):
    r = to_workbook(portfolio.readings, tmp_path / "bills.xlsx", "Bills", extra_sheets=("Summary",))
    assert read_readings(str(r)).df.height == portfolio.n_readings
    with pytest.raises(InputError, match=r"bills\.xlsx: no sheet named 'Nope'; expected one of 'Bills', 'Summary'"):
        read_readings(f"{r}#Nope")
    res = cli(
        [
            "validate",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            f"{r}#Nope",
            "--weather",
            str(portfolio.weather),
        ]
    )
    assert res.exit_code == 2 and "no sheet named 'Nope'" in res.stdout


@pytest.mark.parametrize(
    "content, message",
    [
        (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 600, "an encrypted workbook or an old .xls file"),
        (b"PK\x03\x04 not really a zip", "cannot read the workbook"),
        (b"name,value\na,1\n", "cannot read the workbook"),
    ],
)
def test_encrypted_or_damaged_workbooks_are_one_line_exit_2(portfolio, tmp_path, content, message):
    bad = tmp_path / "bills.xlsx"
    bad.write_bytes(content)
    res = _run(portfolio, tmp_path, portfolio.buildings, bad, portfolio.weather)
    assert res.exit_code == 2
    assert message in res.stderr and res.stderr.count("\n") == 1 and "Traceback" not in res.stderr


def test_workbook_with_their_column_names_and_the_mapping(portfolio, tmp_path):
    r = to_workbook(portfolio.readings, tmp_path / "bills.xlsx")
    wb = openpyxl.load_workbook(r)
    ws = wb.active
    for cell, name in zip(
        ws[1], ["Building ID", "Fuel Type", "Start Date", "End Date", "Usage", "Units", "Estimated", "Amount"]
    ):
        cell.value = name
    wb.save(r)
    res = cli(
        ["validate", "--buildings", str(portfolio.buildings), "--readings", str(r), "--weather", str(portfolio.weather)]
    )
    assert res.exit_code == 2 and '"Usage" = "quantity"' in res.stdout  # suggested from the sheet's header
    opt = (
        "readings:Building ID=building_id,Fuel Type=fuel,Start Date=period_start,End Date=period_end,"
        "Usage=quantity,Units=unit,Amount=cost"
    )
    ok = cli(
        [
            "validate",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(r),
            "--weather",
            str(portfolio.weather),
            "--columns",
            opt,
        ]
    )
    assert ok.exit_code == 0, ok.stdout


def test_parquet_rows_are_numbered_and_checked(portfolio, tmp_path):
    df = pl.read_csv(portfolio.readings, try_parse_dates=True, infer_schema_length=0)
    df = df.with_columns(
        pl.when(pl.int_range(pl.len()) == 4).then(pl.lit("-5")).otherwise(pl.col("quantity")).alias("quantity")
    )
    p = tmp_path / "bills.parquet"
    df.write_parquet(p)
    ld = read_readings(p)
    assert ld.rejects.select("line", "column").rows() == [(5, "quantity")]  # the 5th row
    assert ld.df.height == portfolio.n_readings - 1
    bad = tmp_path / "broken.parquet"
    bad.write_bytes(b"PAR1 nothing here")
    with pytest.raises(InputError, match="cannot read the Parquet file"):
        read_readings(bad)


def test_the_workbook_hash_is_of_the_file_named_before_the_sheet(portfolio, tmp_path):
    r = to_workbook(portfolio.readings, tmp_path / "bills.xlsx", "Bills")
    assert pipeline.file_sha256(f"{r}#Bills") == pipeline.file_sha256(r)


# ---------------------------------------------------------------------------- ranking.xlsx out


def test_ranking_xlsx_reads_back_with_sheets_headers_types_and_neutral_text(portfolio, tmp_path):
    import shutil

    b = tmp_path / "b.csv"
    shutil.copy(portfolio.buildings, b)
    text = b.read_text(encoding="utf-8").replace("Quillmore Offices", "=1+2 Quillmore")
    b.write_text(text, encoding="utf-8")
    res = _run(portfolio, tmp_path, b, portfolio.readings, portfolio.weather, "x")
    assert res.exit_code == 0, res.stderr
    path = tmp_path / "x" / "ranking.xlsx"
    wb = openpyxl.load_workbook(path)
    assert wb.sheetnames == ["ranking", "audit plan", "data issues", "rejects", "assumptions"]
    ws = wb["ranking"]
    head = [c.value for c in ws[1]]
    assert head[:7] == ["rank", "building_id", "name", "address", "city", "use_type", "floor_area [ft²]"]
    assert "excess_cost [$/yr]" in head and "actual_heating [kBtu]" in head and "hdd [°F·day]" in head
    assert ws.freeze_panes == "A2"
    assert [t.autoFilter.ref for t in ws.tables.values()] == [
        f"A1:{openpyxl.utils.get_column_letter(len(head))}{portfolio.n_buildings + 1}"
    ]
    rows = {r[1]: r for r in ws.iter_rows(min_row=2, values_only=True)}
    csv_rank = pl.read_csv(tmp_path / "x" / "ranking.csv")
    assert set(rows) == set(csv_rank["building_id"])
    cost = head.index("excess_cost [$/yr]")
    waste = rows[portfolio.wasteful]
    assert isinstance(waste[0], int) and isinstance(waste[cost], float)
    assert waste[cost] == pytest.approx(csv_rank.filter(pl.col("building_id") == portfolio.wasteful)["excess_cost"][0])
    assert ws.cell(2, cost + 1).number_format == '"$"#,##0'
    assert isinstance(rows["B01"][head.index("period_start")], dt.datetime)  # a date cell
    assert rows["B01"][2] == "'=1+2 Quillmore"  # as in ranking.csv: text, never a formula
    assert ws.cell(2, 3).data_type == "s" or ws.cell(3, 3).data_type == "s"
    assert ws.column_dimensions["C"].width > 10  # widths fitted to the content
    assert wb["assumptions"].max_row == pl.read_csv(tmp_path / "x" / "assumptions.csv").height + 1
    # the audit plan sheet: audit_plan.csv's rows and columns, with units, currency and a percent share
    plan_csv = pl.read_csv(tmp_path / "x" / "audit_plan.csv")
    assert plan_csv.height >= 1
    wp = wb["audit plan"]
    ph = [c.value for c in wp[1]]
    assert ph == [
        {
            "expected_recoverable_cost": "expected_recoverable_cost [$/yr]",
            "expected_recoverable_energy": "expected_recoverable_energy [kBtu]",
        }.get(c, c)
        for c in plan_csv.columns
    ]
    assert wp.freeze_panes == "A2" and [t.autoFilter.ref for t in wp.tables.values()] == [
        f"A1:{openpyxl.utils.get_column_letter(len(ph))}{plan_csv.height + 1}"
    ]
    prow = [list(r) for r in wp.iter_rows(min_row=2, values_only=True)]
    assert [r[ph.index("building_id")] for r in prow] == plan_csv["building_id"].to_list()
    assert [r[ph.index("visit")] for r in prow] == list(range(1, plan_csv.height + 1))
    c = ph.index("expected_recoverable_cost [$/yr]")
    assert [r[c] for r in prow] == pytest.approx(plan_csv["expected_recoverable_cost"].to_list())
    assert wp.cell(2, c + 1).number_format == '"$"#,##0'
    assert wp.cell(2, ph.index("cumulative_share") + 1).number_format == "0.0%"
    assert "expected_recoverable_cost [$/yr]" in head  # the ranking's money columns are currency too


def test_ranking_xlsx_same_results_same_bytes(tmp_path):
    from screening.outputs import Display
    from screening.xlsxout import write_ranking_xlsx

    frames = dict(
        ranking=pl.DataFrame(
            {"rank": [1], "building_id": ["B1"], "excess_cost": [12.5], "period_start": [dt.date(2024, 1, 1)]}
        ),
        issues=pl.DataFrame({"building_id": ["B1"], "code": ["x"]}),
        rejects=pl.DataFrame(schema={"file": pl.String, "line": pl.Int64}),
        assumptions=pl.DataFrame({"building_id": ["B1"], "value": [0.5]}),
    )
    a = write_ranking_xlsx(tmp_path / "a.xlsx", disp=Display("SI"), currency="€", **frames)
    b = write_ranking_xlsx(tmp_path / "b.xlsx", disp=Display("SI"), currency="€", **frames)
    assert a.read_bytes() == b.read_bytes()
    ws = openpyxl.load_workbook(a)["ranking"]
    assert [c.value for c in ws[1]] == ["rank", "building_id", "excess_cost [€/yr]", "period_start"]
    assert ws["C2"].number_format == '"€"#,##0'


def test_a_table_longer_than_a_worksheet_continues_on_numbered_sheets():
    from screening import xlsxout

    df = pl.DataFrame({"building_id": [f"B{i}" for i in range(7)], "value": list(range(7))})
    parts = xlsxout._pieces("assumptions", df, rows=3)
    assert [n for n, _ in parts] == ["assumptions", "assumptions (2)", "assumptions (3)"]
    assert pl.concat([p for _, p in parts]).equals(df)  # every row, in order
    assert xlsxout._pieces("rejects", df, rows=7) == [("rejects", df)]
    assert xlsxout.SHEET_ROWS == 1_048_576 - 1  # the worksheet's rows less the header
