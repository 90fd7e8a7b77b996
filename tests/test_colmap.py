"""Column mapping (issue 16): [inputs.columns], --columns, validate's suggestion, init --from.

A manager's export names our columns in its own words (invented headers below); a run reads
them only through a mapping the user wrote or confirmed, never by a guess of its own.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from screening import colmap, config as cfgmod
from screening.errors import ConfigError

from .conftest import cli

THEIR_READINGS = "Building ID,Fuel Type,Start Date,End Date,Usage,Units,Estimated,Amount"
MAPPING = {
    "Building ID": "building_id",
    "Fuel Type": "fuel",
    "Start Date": "period_start",
    "End Date": "period_end",
    "Usage": "quantity",
    "Units": "unit",
    "Amount": "cost",
}


def _their_readings(portfolio, name="bills.csv") -> Path:
    lines = portfolio.lines("readings")
    p = portfolio.folder / name
    p.write_text("\n".join([THEIR_READINGS] + lines[1:]) + "\n", encoding="utf-8")
    return p


def _validate(portfolio, readings, *more):
    return cli(
        [
            "validate",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(readings),
            "--weather",
            str(portfolio.weather),
            *more,
        ]
    )


def _toml_of(mapping: dict) -> str:
    return "[inputs.columns.readings]\n" + "".join(f'"{k}" = "{v}"\n' for k, v in mapping.items())


def test_suggest_finds_case_blanks_synonyms_and_close_spellings():
    header = ["Building ID", "Fuel Type", "Start Date", "End Date", "Usage (therms)", "Units", "Amount", "Meter #"]
    got = {t: o for t, o, _ in colmap.suggest(header, "readings")}
    assert got == {
        "Building ID": "building_id",
        "Fuel Type": "fuel",
        "Start Date": "period_start",
        "End Date": "period_end",
        "Usage (therms)": "quantity",
        "Units": "unit",
        "Amount": "cost",
        "Meter #": "meter_id",
    }
    close = {
        t: o
        for t, o, _ in colmap.suggest(
            ["buildng_id", "Name", "station", "Use Type", "Floor  Area", "HEATING_FUEL"], "buildings"
        )
    }
    assert close == {
        "buildng_id": "building_id",
        "station": "station_id",
        "Use Type": "use_type",
        "Floor  Area": "floor_area",
    }  # Name and HEATING_FUEL are ours already (case is ignored)
    # a read-date file: the read date is suggested, not a start date
    rd = {t: o for t, o, _ in colmap.suggest(["Bldg", "Fuel", "Read Date", "Usage", "UOM"], "readings")}
    assert rd == {"Bldg": "building_id", "Read Date": "read_date", "Usage": "quantity", "UOM": "unit"}


def test_kind_is_told_from_the_header():
    assert colmap.best_kind(THEIR_READINGS.split(","))[0] == "readings"
    assert (
        colmap.best_kind(
            ["Site", "Building Name", "Weather Station", "Property Type", "Gross Floor Area", "Heating Fuel"]
        )[0]
        == "buildings"
    )
    assert colmap.best_kind(["Station", "Day", "Min Temp", "Max Temp"])[0] == "weather"


def test_without_a_mapping_the_file_stops_and_validate_prints_a_mapping_that_works(portfolio, tmp_path):
    bills = _their_readings(portfolio)
    r = _validate(portfolio, bills)
    assert r.exit_code == 2
    assert "missing required column" in r.stdout
    block = r.stdout[r.stdout.index("[inputs.columns.readings]") : r.stdout.index("1 problem(s)")]
    assert tomllib.loads(block)["inputs"]["columns"]["readings"] == MAPPING  # pasteable TOML
    cfg = tmp_path / "c.toml"
    cfg.write_text(block, encoding="utf-8")
    ok = _validate(portfolio, bills, "--config", str(cfg))
    assert ok.exit_code == 0, ok.stdout
    assert "readings 156 rows accepted" in ok.stdout
    assert "columns read by the mapping: Building ID → building_id" in ok.stdout


def test_columns_option_maps_on_the_command_line_and_adds_to_the_config(portfolio, tmp_path):
    bills = _their_readings(portfolio)
    opt = "readings:" + ",".join(f"{k}={v}" for k, v in MAPPING.items())
    r = _validate(portfolio, bills, "--columns", opt)
    assert r.exit_code == 0, r.stdout
    # half in the file, half on the command line: merged per kind
    cfg = tmp_path / "half.toml"
    cfg.write_text(_toml_of(dict(list(MAPPING.items())[:4])), encoding="utf-8")
    r2 = _validate(
        portfolio, bills, "--config", str(cfg), "--columns", "readings:Usage=quantity,Units=unit,Amount=cost"
    )
    assert r2.exit_code == 0, r2.stdout
    bad = _validate(portfolio, bills, "--columns", "bills:Usage=quantity")
    assert bad.exit_code == 2 and "--columns 'bills:Usage=quantity'" in bad.stderr
    bad2 = _validate(portfolio, bills, "--columns", "readings:Usage")
    assert bad2.exit_code == 2 and "'Usage' is not Their name=our_name" in bad2.stderr


def test_a_run_with_the_mapping_screens_the_managers_file(portfolio, tmp_path):
    bills = _their_readings(portfolio)
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml_of(MAPPING), encoding="utf-8")
    r = cli(
        [
            "run",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(bills),
            "--weather",
            str(portfolio.weather),
            "--config",
            str(cfg),
            "--as-of",
            portfolio.as_of,
            "--no-sheets",
            "--out",
            str(tmp_path / "out"),
            "--db",
            str(tmp_path / "s.duckdb"),
            "--quiet",
        ]
    )
    assert r.exit_code == 0, r.stderr
    ranking = (tmp_path / "out" / "ranking.csv").read_text(encoding="utf-8")
    assert "B03" in ranking and ranking.count("\n") == 1 + portfolio.n_buildings


@pytest.mark.parametrize(
    "text, key",
    [
        ('[inputs.columns.bills]\n"Usage" = "quantity"\n', "[inputs.columns] bills"),
        ('[inputs.columns.readings]\n"Usage" = "qty"\n', '[inputs.columns.readings] "Usage"'),
        ('[inputs.columns.readings]\n"Usage" = "quantity"\n"Use" = "quantity"\n', "[inputs.columns.readings]:"),
        ('[inputs.columns.readings]\n"" = "quantity"\n', '[inputs.columns.readings] ""'),
        ('[inputs.columns.readings]\n"Usage" = 3\n', '[inputs.columns.readings] "Usage"'),
        ('[inputs]\ncolumns = "Usage=quantity"\n', "[inputs] columns"),
        ('[inputs.columns]\nreadings = "Usage=quantity"\n', "[inputs.columns] readings"),
    ],
)
def test_a_bad_mapping_stops_when_the_config_is_read(tmp_path, text, key):
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError) as ei:
        cfgmod.load(p)
    msg = str(ei.value)
    assert key in msg and "\n" not in msg


def test_a_mapping_onto_a_column_the_file_also_has_is_refused(portfolio):
    r = _validate(portfolio, portfolio.readings, "--columns", "readings:cost=quantity")
    assert r.exit_code == 2
    assert "columns 'quantity' and 'cost' are both read as 'quantity' (column mapping)" in r.stdout


def test_init_from_writes_a_config_that_validates_after_a_glance(portfolio, tmp_path):
    bills = _their_readings(portfolio)
    cfg = portfolio.folder / "mine.toml"
    r = cli(
        ["init", str(cfg), "--from", str(bills), "--from", str(portfolio.buildings), "--from", str(portfolio.weather)]
    )
    assert r.exit_code == 0, r.stderr
    assert "bills.csv: read as readings; 7 column(s) mapped" in r.stdout
    text = cfg.read_text(encoding="utf-8")
    data = tomllib.loads(text)
    assert data["inputs"]["readings"] == "bills.csv" and data["inputs"]["buildings"] == "buildings.csv"
    assert data["inputs"]["columns"]["readings"] == MAPPING
    assert '"Usage" = "quantity"   # a common name for it: check it' in text  # commented for the user
    ok = cli(
        [
            "validate",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(bills),
            "--weather",
            str(portfolio.weather),
            "--config",
            str(cfg),
        ]
    )
    assert ok.exit_code == 0, ok.stdout
    # the plain template still loads (no mapping, only the commented example)
    plain = tmp_path / "plain.toml"
    assert cli(["init", str(plain)]).exit_code == 0
    assert cfgmod.load(plain)["inputs"]["columns"] == {}


def test_init_from_says_what_it_could_not_find(portfolio, tmp_path):
    p = tmp_path / "odd.csv"
    p.write_text(
        "Bldg,Fuel,Start Date,End Date,Zorp,Units\nB01,natural_gas,2024-01-01,2024-01-31,5,therm\n", encoding="utf-8"
    )
    cfg = tmp_path / "odd.toml"
    r = cli(["init", str(cfg), "--from", f"readings={p}"])
    assert r.exit_code == 0
    assert "still missing quantity" in r.stdout
    assert "# still missing: quantity (add a line for each)" in cfg.read_text(encoding="utf-8")
    again = cli(["init", str(cfg), "--from", str(p)])
    assert again.exit_code == 2 and "exists" in again.stderr  # never overwrites without --force


def test_init_from_sets_the_thousands_separator_the_values_show(portfolio, tmp_path):
    lines = portfolio.lines("readings")
    head = lines[0].split(",")
    k = head.index("cost")
    out = [THEIR_READINGS]
    for ln in lines[1:]:
        f = ln.split(",")
        f[k] = '"${:,.2f}"'.format(float(f[k]) + 1000)
        out.append(",".join(f))
    bills = portfolio.folder / "money.csv"
    bills.write_text("\n".join(out) + "\n", encoding="utf-8")
    cfg = portfolio.folder / "money.toml"
    r = cli(["init", str(cfg), "--from", str(bills)])
    assert r.exit_code == 0 and '[reading] thousands = ","' in r.stdout
    data = tomllib.loads(cfg.read_text(encoding="utf-8"))
    assert data["reading"]["thousands"] == ","
    ok = _validate(portfolio, bills, "--config", str(cfg))
    assert ok.exit_code == 0, ok.stdout
    assert "cost: 156 currency symbol(s) removed" in ok.stdout
    # without the setting every row is rejected, each with the reason naming it
    no = _validate(portfolio, bills, "--columns", "readings:" + ",".join(f"{a}={b}" for a, b in MAPPING.items()))
    assert no.exit_code == 2 and no.stdout.count('set [reading] thousands = ","') == 156


def test_a_managers_workbooks_screen_after_one_init_from(portfolio, tmp_path):
    """Issue 16's 'done when': workbooks with the manager's own headers, thousands separators and
    currency, screened after one ``init --from`` and validated from the config alone."""
    import polars as pl

    b = pl.read_csv(portfolio.buildings, infer_schema_length=0)
    r = pl.read_csv(portfolio.readings, infer_schema_length=0)
    theirs_b = {
        "building_id": "Building ID",
        "name": "Property Name",
        "station_id": "Weather Station",
        "use_type": "Property Type",
        "floor_area": "Gross Floor Area",
        "heating_fuel": "Heating Fuel",
    }
    b = b.rename({k: v for k, v in theirs_b.items() if k in b.columns})
    b = b.with_columns(
        pl.col("Gross Floor Area").cast(pl.Float64).map_elements(lambda v: f"{v:,.0f}", return_dtype=pl.String),
        pl.lit("").alias("Notes"),
    )
    if "ua_total" in b.columns:
        b = b.rename({"ua_total": "UA"})
    r = r.rename(
        {
            "building_id": "Building ID",
            "fuel": "Fuel Type",
            "period_start": "Start Date",
            "period_end": "End Date",
            "quantity": "Usage",
            "unit": "Units",
        }
    )
    if "cost" in r.columns:
        r = r.with_columns(
            pl.col("cost").cast(pl.Float64).map_elements(lambda v: f"${v:,.2f}", return_dtype=pl.String)
        ).rename({"cost": "Cost ($)"})
    book_b, book_r = tmp_path / "portfolio.xlsx", tmp_path / "bills.xlsx"
    b.write_excel(book_b, worksheet="Properties")
    r.write_excel(book_r, worksheet="Bills")
    cfg = tmp_path / "mine.toml"
    made = cli(["init", str(cfg), "--from", str(book_r), "--from", str(book_b), "--from", str(portfolio.weather)])
    assert made.exit_code == 0, made.stderr
    assert "portfolio.xlsx: read as buildings" in made.stdout and "still missing" not in made.stdout
    assert "not used (no column of ours matches; add a line if one should be): Notes" in made.stdout
    data = tomllib.loads(cfg.read_text(encoding="utf-8"))
    assert data["inputs"]["columns"]["buildings"]["Gross Floor Area"] == "floor_area"
    if "UA" in b.columns:
        assert data["inputs"]["columns"]["buildings"]["UA"] == "ua_total"
    # validate takes the files from the config when none is given
    v = cli(["validate", "--config", str(cfg)])
    plain = cli(
        [
            "validate",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(portfolio.readings),
            "--weather",
            str(portfolio.weather),
        ]
    )
    assert v.exit_code == plain.exit_code
    assert v.stdout.count("problem(s)") == 1
    assert v.stdout.splitlines()[-1].split(";")[0] == plain.stdout.splitlines()[-1].split(";")[0]
    out = tmp_path / "out"
    run = cli(["run", "--config", str(cfg), "--out", str(out), "--no-sheets", "--quiet", "--as-of", portfolio.as_of])
    ref = cli(
        [
            "run",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(portfolio.readings),
            "--weather",
            str(portfolio.weather),
            "--db",
            str(tmp_path / "ref.duckdb"),
            "--out",
            str(tmp_path / "ref"),
            "--no-sheets",
            "--quiet",
            "--as-of",
            portfolio.as_of,
        ]
    )
    assert run.exit_code == ref.exit_code == 0, run.stderr
    got = pl.read_csv(out / "ranking.csv").select("building_id", "rank", "tier")
    want = pl.read_csv(tmp_path / "ref" / "ranking.csv").select("building_id", "rank", "tier")
    assert got.equals(want)
    assert (out / "ranking.xlsx").is_file() and (out / "index.html").is_file()
