"""The events file (issue 17): read through the project's reader, bad rows rejected with their reasons,
optional on a run, and a measure's savings in savings.csv and summary.json."""

from __future__ import annotations

import datetime as dt
import json

import polars as pl
import pytest

from screening import config, events, runner
from screening.errors import InputError
from tests.conftest import AS_OF, cli

HEADER = "building_id,date,kind,finding,mechanism,description,expected_savings,cost\n"


def _write(tmp_path, text, name="events.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_good_rows_and_every_bad_row_with_its_reason(tmp_path):
    rows = [
        "B01,2024-03-01,measure,,controls,new boiler controls,5000,12000",  # line 2: good
        "B02,2024-02-10,audit,confirmed,heat loss,dampers open,,",  # 3: good
        "B03,2024-01-05,audit,none_found,,,,",  # 4: good
        "B04,2024-02-30,measure,,,,,",  # 5: not a date
        "B99,2024-01-01,audit,,,,,",  # 6: unknown building
        "B05,2024-01-01,sweep,,,,,",  # 7: unknown kind
        "B06,2024-01-01,measure,confirmed,,,,",  # 8: finding on a measure
        "B05,2024-01-01,audit,maybe,,,,",  # 9: unknown finding
        "B05,2024-01-01,operation,,,,,-5",  # 10: negative cost
        "B06,2024-05-01,measure,,,a,,",  # 11, 12: two measures one day
        "B06,2024-05-01,measure,,,b,,",
        "B03,2024-01-05,audit,none_found,,,,",  # 13: exact duplicate of 4
        ",2024-01-01,audit,,,,,",  # 14: empty id
    ]
    p = _write(tmp_path, HEADER + "\n".join(rows) + "\n")
    ld = events.read_events(str(p), building_ids=pl.Series(["B01", "B02", "B03", "B04", "B05", "B06"]))
    assert ld.df["building_id"].to_list() == ["B01", "B02", "B03"]
    rej = {(r["line"], r["column"]): r for r in ld.rejects.iter_rows(named=True)}
    assert set(rej) == {
        (5, "date"),
        (6, "building_id"),
        (7, "kind"),
        (8, "finding"),
        (9, "finding"),
        (10, "cost"),
        (11, "date"),
        (12, "date"),
        (14, "building_id"),
    }
    assert rej[(6, "building_id")]["reason"] == "unknown building (not among the accepted buildings)"
    assert "audit, measure, operation, meter_change, vacancy" in rej[(7, "kind")]["reason"]
    assert "belongs to an audit" in rej[(8, "finding")]["reason"]
    assert "confirmed, none_found, data_error" in rej[(9, "finding")]["reason"]
    assert "two different measures" in rej[(11, "date")]["reason"]
    assert all(r["file"] == str(p) and r["value"] is not None or r["line"] == 14 for r in rej.values())
    assert any("1 exact duplicate event row" in n for n in ld.notices)


def test_missing_required_column_stops(tmp_path):
    p = _write(tmp_path, "building_id,date\nB01,2024-01-01\n")
    with pytest.raises(InputError, match="kind"):
        events.read_events(str(p))


def test_config_key_and_its_check():
    assert config.DEFAULTS["inputs"]["events"] == ""
    assert config.DEFAULTS["savings"]["blackout_days"] == 30
    with pytest.raises(Exception, match="blackout_days"):
        config.load(overrides={"savings": {"blackout_days": -1}})


def _run(portfolio, tmp_path, *extra):
    return cli(
        [
            "run",
            "--buildings",
            str(portfolio.buildings),
            "--readings",
            str(portfolio.readings),
            "--weather",
            str(portfolio.weather),
            "--out",
            str(tmp_path / "out"),
            "--db",
            str(tmp_path / "s.duckdb"),
            "--as-of",
            AS_OF,
            "--no-sheets",
            "--quiet",
            *extra,
        ]
    )


def test_a_run_without_events_writes_no_savings(portfolio, tmp_path):
    res = _run(portfolio, tmp_path)
    assert res.exit_code == 0, res.output
    assert not (tmp_path / "out" / "savings.csv").exists()
    assert "savings" not in json.loads((tmp_path / "out" / "summary.json").read_text())


def test_a_measure_on_an_unchanged_building_saves_nothing(portfolio, tmp_path):
    # the test portfolio's bills follow 24·UA·HDD/η + a constant exactly (conftest), so a measure that
    # changed nothing must show avoided energy ≈ 0 within the rounding of the bills (0.01 therm)
    p = _write(
        tmp_path,
        HEADER + "B01,2024-01-01,measure,,controls,new controls,,9000\n"
        "B02,2024-02-01,audit,none_found,,,,\nB77,2024-02-01,audit,,,,,\n",
    )
    res = _run(portfolio, tmp_path, "--events", str(p))
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    s = pl.read_csv(out / "savings.csv", try_parse_dates=True)
    assert s.height == 1
    row = s.row(0, named=True)
    assert row["building_id"] == "B01" and str(row["event_date"]) == "2024-01-01"
    assert str(row["report_start"]) == "2024-01-31" and str(row["report_end"]) == "2024-12-31"
    assert row["baseline_n"] >= 11 and row["meets_guideline14"]
    assert abs(row["avoided_energy"]) < 1e-3 * row["metered"]
    assert row["avoided_low_90"] <= 0 <= row["avoided_high_90"]
    assert abs(row["normalized_savings"]) < 1e-3 * row["metered"]
    assert row["energy_unit"] == "kBtu"
    rej = pl.read_csv(out / "rejects.csv")
    bad = rej.filter(pl.col("file") == str(p))
    assert bad["value"].to_list() == ["B77"] and bad["line"].to_list() == [4]
    summ = json.loads((out / "summary.json").read_text())["savings"]
    assert summ["measures"] == 1 and summ["measures_meeting_guideline14"] == 1
    assert summ["avoided_u90"] == pytest.approx(row["avoided_high_90"] - row["avoided_energy"], abs=0.2)


# ------------------------------------------------------------------------------------------------
# the plan and the events
# ------------------------------------------------------------------------------------------------


def _run_lib(portfolio, tmp_path, as_of, events_path=None, name="out", **plan):
    inputs = {
        "buildings": str(portfolio.buildings),
        "readings": str(portfolio.readings),
        "weather": str(portfolio.weather),
    }
    if events_path is not None:
        inputs["events"] = str(events_path)
    runner.run(
        overrides={
            "inputs": inputs,
            "store": {"database": str(tmp_path / "s.duckdb")},
            "analysis": {"as_of": as_of},
            "output": {"sheets": False},
            "plan": {"audit_cost": 0.0, **plan},
        },
        out_dir=str(tmp_path / name),
        force=True,
        quiet=True,
    )
    out = tmp_path / name
    return pl.read_csv(out / "ranking.csv", infer_schema_length=None), json.loads((out / "summary.json").read_text())


def test_clean_audit_keeps_off_the_plan_and_confirmed_finding_is_pinned(portfolio, tmp_path):
    base, _ = _run_lib(portfolio, tmp_path, AS_OF, name="plain")
    tier = dict(zip(base["building_id"], base["tier"]))
    assert tier["B03"] == "Audit first"  # the wasteful building of the test portfolio
    last = base.filter(pl.col("tier") == "Audit first").sort("rank")["building_id"][-1]
    assert last != "B03"
    p = _write(
        tmp_path,
        HEADER + f"B03,2024-11-01,audit,none_found,,,,\n{last},2024-06-01,audit,confirmed,controls,schedule stuck,,\n",
    )
    ranked, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="ev")
    r = {row["building_id"]: row for row in ranked.iter_rows(named=True)}
    assert r["B03"]["tier"] != "Audit first"  # kept off the plan (no earlier run on record)
    assert r[last]["rank"] == 1 and r[last]["tier"] == "Audit first"  # pinned to the top
    notes = {n["building_id"]: n["note"] for n in summ["plan_notes"]}
    assert "found nothing: kept off the plan until 2025-11-01" in notes["B03"]
    assert "confirmed a finding (controls)" in notes[last]
    # a measure after the confirmed finding: no longer pinned; the rest period over: back on the plan
    p2 = _write(
        tmp_path,
        HEADER + "B03,2023-10-01,audit,none_found,,,,\n"
        f"{last},2023-05-01,audit,confirmed,controls,,,\n{last},2023-06-01,measure,,controls,fixed,,\n",
        name="ev2.csv",
    )
    ranked2, summ2 = _run_lib(portfolio, tmp_path, AS_OF, p2, name="ev2")
    assert ranked2.select("building_id", "tier", "rank").equals(base.select("building_id", "tier", "rank"))
    assert summ2["plan_notes"] == []


def test_a_clean_audit_comes_back_when_the_savings_grew(portfolio, tmp_path):
    import duckdb

    _run_lib(portfolio, tmp_path, "2024-10-15", name="q3")  # the list the audit acted on
    p = _write(tmp_path, HEADER + "B03,2024-10-20,audit,none_found,,,,\n")
    ranked, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="q4")
    assert dict(zip(ranked["building_id"], ranked["tier"]))["B03"] != "Audit first"  # savings as before: off
    assert "those of the list it was audited from" in summ["plan_notes"][0]["note"]
    # the earlier list's figure for B03 made small: today's savings are far above 2× it
    con = duckdb.connect(str(tmp_path / "s.duckdb"))
    con.execute(
        "UPDATE results SET record = json_merge_patch(record, '{\"expected_recoverable_cost\": 1.0}') "
        "WHERE building_id = 'B03' AND run_id LIKE '2024-Q3%'"
    )
    con.close()
    ranked, _ = _run_lib(portfolio, tmp_path, AS_OF, p, name="q4b")
    assert dict(zip(ranked["building_id"], ranked["tier"]))["B03"] == "Audit first"


def test_the_hit_rate_counts_exactly(portfolio, tmp_path):
    first, _ = _run_lib(portfolio, tmp_path, "2024-10-15", name="q3")
    planned = first.filter(pl.col("tier") == "Audit first").sort("rank")["building_id"].to_list()
    off = first.filter(pl.col("tier") != "Audit first")["building_id"].to_list()
    assert len(planned) >= 2 and off
    p = _write(
        tmp_path,
        HEADER
        + "\n".join(
            [
                f"{planned[0]},2024-10-20,audit,confirmed,,,,",
                f"{planned[1]},2024-11-20,audit,none_found,,,,",
                f"{off[0]},2024-10-25,audit,confirmed,,,,",  # audited although not on the plan
                f"{planned[0]},2023-01-10,audit,none_found,,,,",  # before any run on record
                f"{planned[1]},2024-10-21,operation,,,,,",  # not an audit
            ]
        )
        + "\n",
    )
    _, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="q4")
    h = summ["audit_hit_rate"]
    assert (
        h["audits_with_a_finding"],
        h["audits_without_an_earlier_run"],
        h["audited_from_plan"],
        h["confirmed"],
        h["rate"],
        h["audited_off_plan"],
    ) == (4, 1, 2, 1, 0.5, 1)
    assert h["by_quarter"] == {"2024-Q4": {"audited": 2, "confirmed": 1, "rate": 0.5}}
    assert sum(v["audited"] for v in h["by_mechanism"].values()) == 2


def test_a_measure_in_the_window_is_judged_on_the_days_after_it(portfolio, tmp_path):
    base, _ = _run_lib(portfolio, tmp_path, AS_OF, name="plain")
    assert dict(zip(base["building_id"], base["tier"]))["B03"] == "Audit first"
    # window 2024-01-01..2024-12-31; 2024-06-01 + 30 days blackout leaves 184 days (≥ 180): judged on them
    p = _write(tmp_path, HEADER + "B03,2024-05-01,audit,confirmed,controls,,,\nB03,2024-06-01,measure,,controls,,,\n")
    ranked, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="judged")
    b03 = ranked.filter(pl.col("building_id") == "B03").row(0, named=True)
    assert (b03["period_start"], b03["period_end"]) == ("2024-07-01", "2024-12-31")
    assert b03["yoy_change"] is None
    # the test portfolio's B03 wastes all year (conftest): a measure that changed nothing leaves it on the plan
    assert b03["tier"] == "Audit first"
    # (six bills and half a year of weather instead of twelve: the ratio is near, not equal)
    assert b03["ratio"] == pytest.approx(dict(zip(base["building_id"], base["ratio"]))["B03"], rel=0.15)
    (note,) = [n["note"] for n in summ["plan_notes"] if n["building_id"] == "B03"]
    assert note.startswith("measure of 2024-06-01: judged on the 184 days from 2024-07-01 to 2024-12-31")
    assert note in b03["verdict"]
    # the other buildings are judged as before
    keep = ~pl.col("building_id").is_in(["B03"])
    assert (
        ranked.filter(keep)
        .select("building_id", "period_start", "ratio")
        .sort("building_id")
        .equals(base.filter(keep).select("building_id", "period_start", "ratio").sort("building_id"))
    )


def test_a_measure_too_recent_to_judge_on_is_not_planned_on_months_that_mix(portfolio, tmp_path):
    base, _ = _run_lib(portfolio, tmp_path, AS_OF, name="plain")
    # 2024-08-01 + 30 days leaves 123 days (< [savings] post_measure_min_days 180): not planned on the mix
    p = _write(tmp_path, HEADER + "B03,2024-05-01,audit,confirmed,controls,,,\nB03,2024-08-01,measure,,controls,,,\n")
    ranked, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="recent")
    b03 = ranked.filter(pl.col("building_id") == "B03").row(0, named=True)
    assert b03["tier"] != "Audit first" and b03["period_start"] == "2024-01-01"
    (note,) = [n["note"] for n in summ["plan_notes"] if n["building_id"] == "B03"]
    assert note.startswith("measure of 2024-08-01") and "from 2024-08-31 once 180 days" in note
    # a measure before the window: its 12 months are all after it, no change on last year is computed
    p = _write(tmp_path, HEADER + "B03,2023-11-01,measure,,controls,,,\n", name="old.csv")
    ranked, summ = _run_lib(portfolio, tmp_path, AS_OF, p, name="old")
    assert ranked.select("building_id", "tier").equals(base.select("building_id", "tier"))
    assert ranked.filter(pl.col("building_id") == "B03")["yoy_change"].to_list() == [None]
    assert [n["building_id"] for n in summ["plan_notes"]] == ["B03"]
    assert "no change on last year is computed" in summ["plan_notes"][0]["note"]


def test_the_sheet_records_carry_the_since_the_measure_data(portfolio, tmp_path, monkeypatch):
    from screening.render import pdf

    seen: list = []

    def capture(sheets, out_dir, **kw):  # the records the sheets would render (rendering is test_report.py's)
        seen.extend(sheets)

    monkeypatch.setattr(pdf, "render_sheets", capture)
    p = _write(tmp_path, HEADER + "B01,2024-01-01,measure,,controls,new boiler controls,,9000\n")
    inputs = {
        "buildings": str(portfolio.buildings),
        "readings": str(portfolio.readings),
        "weather": str(portfolio.weather),
        "events": str(p),
    }
    runner.run(
        overrides={
            "inputs": inputs,
            "store": {"database": str(tmp_path / "s.duckdb")},
            "analysis": {"as_of": AS_OF},
            "output": {"sheets": True},
        },
        out_dir=str(tmp_path / "out"),
        force=True,
        quiet=True,
    )
    by_id = {r.building_id: r for r in seen}
    assert set(by_id) >= {"B01", "B02"}
    assert all(r.since_measure is None for b, r in by_id.items() if b != "B01")
    box = by_id["B01"].since_measure
    assert box["event_date"] == "2024-01-01" and box["description"] == "new boiler controls"
    assert box["energy_unit"] == "kBtu" and box["currency"] == "$"
    per = box["periods"]
    assert len(per) >= 10 and per[0]["start"] >= "2024-01-31" and per[-1]["end"] <= "2024-12-31"
    assert [p["start"] for p in per] == sorted(p["start"] for p in per)
    # the periods add up to the avoided energy; the interval holds it; savings.csv says the same
    assert sum(p["baseline"] - p["metered"] for p in per) == pytest.approx(box["avoided_energy"], abs=1e-6)
    assert box["avoided_low_90"] <= box["avoided_energy"] <= box["avoided_high_90"]
    row = pl.read_csv(tmp_path / "out" / "savings.csv").row(0, named=True)
    assert box["avoided_energy"] == pytest.approx(row["avoided_energy"], abs=0.06)
    assert box["avoided_high_90"] == pytest.approx(row["avoided_high_90"], abs=0.06)
    # the test portfolio's bills follow the model exactly (conftest): the projection is the metered use
    assert all(p["baseline"] == pytest.approx(p["metered"], rel=1e-3) for p in per)
    assert box["cost"] == pytest.approx(row["avoided_cost"], abs=0.01)


def test_since_measure_in_si_units(tmp_path):
    s = pl.DataFrame(
        {
            "building_id": ["A"],
            "event_date": [dt.date(2024, 1, 1)],
            "avoided_kbtu": [100.0],
            "avoided_u90_kbtu": [30.0],
            "usd_per_kbtu": [0.02],
        }
    )
    per = pl.DataFrame(
        {
            "building_id": ["A", "A"],
            "event_date": [dt.date(2024, 1, 1)] * 2,
            "period_start": [dt.date(2024, 2, 1), dt.date(2024, 3, 1)],
            "period_end": [dt.date(2024, 2, 29), dt.date(2024, 3, 31)],
            "baseline_kbtu": [500.0, 400.0],
            "metered_kbtu": [450.0, 350.0],
        }
    )
    ev = pl.DataFrame(
        {"building_id": ["A"], "date": [dt.date(2024, 1, 1)], "kind": ["measure"], "description": [None]},
        schema_overrides={"description": pl.String},
    )
    box = events.since_measure(s, per, ev, si=True, currency="€", kbtu_to_kwh=0.29307107)["A"]
    # 1 kBtu = 0.29307107 kWh (1 Btu_IT = 1055.05585262 J, ISO 80000-5 / NIST SP 811)
    assert box["avoided_energy"] == pytest.approx(29.307107)
    assert (box["avoided_low_90"], box["avoided_high_90"]) == pytest.approx((70 * 0.29307107, 130 * 0.29307107))
    assert box["periods"][0] == {
        "start": "2024-02-01",
        "end": "2024-02-29",
        "baseline": pytest.approx(146.535535),
        "metered": pytest.approx(131.8819815),
    }
    assert box["cost"] == pytest.approx(2.0) and box["currency"] == "€" and box["description"] == ""
    assert box["energy_unit"] == "kWh"


def test_history_shows_the_events_between_the_two_runs_beside_the_changes(portfolio, tmp_path):
    p = _write(
        tmp_path,
        HEADER + "B03,2024-03-01,audit,confirmed,controls,valves stuck open,,\n"
        "B02,2024-11-05,audit,none_found,,nothing found,,\n"
        "B03,2024-11-20,measure,,controls,new valves,,5000\n"
        "B01,2025-02-01,vacancy,,,after both windows,,\n",
    )
    _run_lib(portfolio, tmp_path, "2024-10-15", p, name="q3")  # window ends 2024-09-30
    _run_lib(portfolio, tmp_path, AS_OF, p, name="q4")  # window ends 2024-12-31
    db = str(tmp_path / "s.duckdb")
    runs, diff = runner.history(db)
    ev = dict(zip(diff["building_id"], diff["events"]))
    # only what happened after the older window and up to the newer one, in date order
    assert ev["B02"] == "2024-11-05 audit: none_found – nothing found"
    assert ev["B03"] == "2024-11-20 measure: (controls) – new valves"
    assert ev["B01"] is None
    # the newer run recorded its events file; another one can be given
    other = _write(tmp_path, HEADER + "B01,2024-12-01,operation,,,boiler serviced,,\n", name="other.csv")
    ev2 = dict(zip(*runner.history(db, events=[str(other)])[1].select("building_id", "events")))
    assert ev2["B01"] == "2024-12-01 operation: boiler serviced" and ev2["B03"] is None
    out = cli(["history", "--db", db]).stdout
    assert "events: 2024-11-05 audit: none_found – nothing found" in out
    assert out.count("events:") == 2


def test_validate_checks_an_events_file_and_suggests_a_mapping(portfolio, tmp_path):
    base = [
        "validate",
        "--buildings",
        str(portfolio.buildings),
        "--readings",
        str(portfolio.readings),
        "--weather",
        str(portfolio.weather),
    ]
    good = _write(
        tmp_path,
        HEADER + "B01,2024-01-01,measure,,controls,new controls,,9000\n"
        "B02,2024-02-01,audit,maybe,,,,\nB77,2024-02-01,audit,,,,,\n",
    )
    r = cli([*base, "--events", str(good)])
    assert r.exit_code == 2
    assert f"{good}, line 3, column 'finding'" in r.stdout and "(got 'maybe')" in r.stdout
    assert f"{good}, line 4, column 'building_id'" in r.stdout and "unknown building" in r.stdout
    assert "events 1 rows accepted" in r.stdout
    # their own column names: a mapping is suggested; with it (--columns or the config) the file reads
    theirs = _write(
        tmp_path, "Building,Visit date,Event type,Notes\nB01,2024-01-01,measure,new controls\n", name="theirs.csv"
    )
    r = cli([*base, "--events", str(theirs)])
    assert r.exit_code == 2 and "[inputs.columns.events]" in r.stdout
    assert '"Building" = "building_id"' in r.stdout and '"Visit date" = "date"' in r.stdout
    assert '"Event type" = "kind"' in r.stdout
    mapping = "events:Building=building_id,Visit date=date,Event type=kind,Notes=description"
    r = cli([*base, "--events", str(theirs), "--columns", mapping])
    assert r.exit_code == 0, r.stdout
    res = _run(portfolio, tmp_path, "--events", str(theirs), "--columns", mapping)
    assert res.exit_code == 0, res.output
    assert pl.read_csv(tmp_path / "out" / "savings.csv")["building_id"].to_list() == ["B01"]
    with pytest.raises(config.ConfigError, match="unknown file kind; expected buildings, readings, weather or events"):
        config.check_columns({"audits": {"a": "b"}})
