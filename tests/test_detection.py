"""Detection measured on an independent simulated portfolio (issue 6, "Measure it").

The portfolio comes from ``sample_portfolio/simulate.py``, an hourly simulation that never
imports ``screening`` (partial-day heating, schedules, internal and solar gains, hot water,
drifting read dates, noise, envelope values drawn from its own curves). Faults are planted
there and recorded in ``truth.csv``; the tool sees only buildings/readings/weather.

Seed 606 is held out: the thresholds in ``screening/config.py`` were chosen on seeds 11, 101
and 202 (see docs/methods.md "How the audit list is chosen") and the demo's seed 2026 was not used.

Two kinds of waste are measured on the same portfolio (same buildings, weather and faults):

* **persistent**: the waste holds over the whole three-year record (the simulator's default). The
  tool does not reach the issue's target (recall >= 90 % with false alarms <= 5 %) here; README
  "How the audit list is chosen" explains why. The asserts are the measured figures on this seed
  rounded down to a floor that a regression would break: measured recall 17/36 = 47 % (floor
  35 %), false alarms 5/246 = 2.0 % (ceiling 5 %, the issue's target).
* **the audit order** (issue 14): capture@10 %, the share of the true recoverable excess (the
  simulator's ``excess_window``) held by the first 10 % of ``rank``: measured 0.81 (persistent) and
  0.87 (onset) on this seed, oracle 0.99.
* **onset**: each wasteful building starts wasting on a day between 2025-04-01 and 2025-10-01, in
  the six months before the window (a fault that develops). The building is then its own
  baseline: measured recall 34/36 = 94 %, false alarms 6/246 = 2.4 %; the asserts are the issue's
  target itself.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import polars as pl
import pytest

from tests.conftest import simulator

from screening import runner

ROOT = Path(__file__).resolve().parents[1]
SEED = 606  # held out (thresholds were chosen on seeds 11, 101, 202)
N = 300
FAULTS = {
    "wasteful": 0.12,
    "unit_error": 0.03,
    "missing_months": 0.03,
    "duplicate_readings": 0.0,
    "overlapping_periods": 0.0,
    "estimated_run": 0.0,
}


def _simulator():
    return simulator()


ONSET = (dt.date(2025, 4, 1), dt.date(2025, 10, 1))  # waste begins in the six months before the window
WINDOW = (dt.date(2025, 10, 1), dt.date(2026, 9, 30))  # the analysis window of as_of 2026-10-15


def _screen(tmp: Path, waste_onset=None) -> pl.DataFrame:
    sim = _simulator()
    frames = sim.simulate_portfolio(
        N,
        seed=SEED,
        start=dt.date(2023, 10, 1),
        years=3,
        fault_rates=FAULTS,
        waste_onset=waste_onset,
        excess_window=WINDOW,
    )
    paths = sim.write_portfolio(frames, tmp / "in")
    overrides = {
        "inputs": {
            "buildings": str(paths["buildings"]),
            "readings": str(paths["readings"]),
            "weather": str(paths["weather"]),
        },
        "store": {"database": str(tmp / "screening.duckdb")},
        "analysis": {"as_of": "2026-10-15"},  # window 2025-10-01 .. 2026-09-30
        "output": {"sheets": False},
    }
    runner.run(overrides=overrides, out_dir=str(tmp / "out"), force=True, quiet=True)
    ranking = pl.read_csv(tmp / "out" / "ranking.csv", infer_schema_length=None)
    truth = pl.read_csv(paths["truth"])
    return ranking.join(
        truth.select("building_id", "truth_label", "waste_factor", "excess_kbtu"), on="building_id", how="inner"
    )


@pytest.fixture(scope="module")
def screened(tmp_path_factory) -> pl.DataFrame:
    return _screen(tmp_path_factory.mktemp("detection"))


@pytest.fixture(scope="module")
def screened_onset(tmp_path_factory) -> pl.DataFrame:
    return _screen(tmp_path_factory.mktemp("detection-onset"), ONSET)


def _flag(df: pl.DataFrame) -> pl.Series:
    col = df["needs_review"]
    return col if col.dtype == pl.Boolean else col.cast(pl.String).str.to_lowercase() == "true"


def test_every_building_is_ranked(screened):
    # the simulator's frames carry no reject rows, so every building must come back (by construction)
    assert screened.height == N
    assert set(screened["truth_label"].unique()) == {"normal", "wasteful", "unit_error", "missing_months"}


def _measure(screened: pl.DataFrame, what: str) -> tuple[pl.DataFrame, float, float]:
    """The wasteful buildings with a ``_review`` column, recall and false-alarm rate (printed)."""
    df = screened.with_columns(_flag(screened).alias("_review"))
    waste = df.filter(pl.col("truth_label") == "wasteful")
    normal = df.filter(pl.col("truth_label") == "normal")
    recall = waste["_review"].mean()
    false_alarm = normal["_review"].mean()
    print(
        f"seed {SEED}, N {N}, {what}: recall {waste['_review'].sum()}/{waste.height} = {recall:.1%}, "
        f"false alarms {normal['_review'].sum()}/{normal.height} = {false_alarm:.1%}"
    )
    assert waste.height >= 30 and normal.height >= 200
    return waste, recall, false_alarm


def test_recall_and_false_alarms(screened):
    _, recall, false_alarm = _measure(screened, "persistent waste")
    assert false_alarm <= 0.05  # the issue's target (issue 6)
    assert recall >= 0.35  # measured floor (47 % on this seed); the issue's 60 % is not met


def test_flagged_buildings_carry_more_waste(screened):
    # the buildings put on the audit list should, as a group, be the larger wasters: the median
    # waste factor of detected buildings is not below that of the missed ones (measured: holds on this seed)
    df = screened.with_columns(_flag(screened).alias("_review")).filter(pl.col("truth_label") == "wasteful")
    hit = df.filter(pl.col("_review"))["waste_factor"].median()
    miss = df.filter(~pl.col("_review"))["waste_factor"].median()
    assert hit is not None and miss is not None
    assert hit >= miss - 0.1


def test_unit_errors_go_to_fix_data_first(screened):
    df = screened.with_columns(_flag(screened).alias("_review")).filter(pl.col("truth_label") == "unit_error")
    assert df.height >= 5
    assert not df["_review"].any()  # a data fault never passes for waste
    in_fix = (df["tier"] == "Fix data first").mean()
    assert in_fix >= 0.8  # measured 9/9 on this seed
    # each one for a unit check: against its own months, its own weather fit, or the expectation
    assert (
        df.filter(pl.col("tier") == "Fix data first")["data_issues"]
        .str.contains("likely_unit_error|bill_off_fit")
        .all()
    )


def test_missing_months_are_kept_out_of_the_comparison(screened):
    df = screened.with_columns(_flag(screened).alias("_review")).filter(pl.col("truth_label") == "missing_months")
    assert df.height >= 5
    # either the 12 months compared avoid the gap (shifted span, full coverage) or a data issue is raised
    handled = (
        (df["span_kind"] == "shifted") | df["data_issues"].fill_null("").str.len_chars().gt(0) | (df["coverage"] >= 0.9)
    )
    assert handled.all()
    # the gap itself does not make waste: the review rate is no higher than one building in five
    # (on this seed 1/9: a building whose shifted span is genuinely high)
    assert df["_review"].mean() <= 0.2


def test_waste_that_began_last_year_meets_the_target(screened_onset):
    waste, recall, false_alarm = _measure(screened_onset, f"waste from {ONSET[0]}..{ONSET[1]}")
    assert recall >= 0.90  # the issue's target (issue 6); measured 34/36
    assert false_alarm <= 0.05  # the issue's target; measured 6/246
    # it is the building's own history that finds them: most detected wasters rose >= 25 % on last year
    hit = waste.filter(pl.col("_review"))
    assert (hit["yoy_change"].fill_null(0.0) >= 0.25).mean() >= 0.8


def test_data_faults_stay_out_of_the_audit_list_with_onsets(screened_onset):
    df = screened_onset.with_columns(_flag(screened_onset).alias("_review"))
    unit = df.filter(pl.col("truth_label") == "unit_error")
    assert unit.height >= 5 and not unit["_review"].any()  # a unit error is a big "rise", never waste
    assert df.filter(pl.col("truth_label") == "missing_months")["_review"].mean() <= 0.2


def _capture(df: pl.DataFrame, what: str) -> tuple[float, float]:
    """capture@10 %: the share of the true recoverable excess held by the first 10 % of rank; and the oracle's."""
    k = round(0.1 * df.height)
    total = df["excess_kbtu"].sum()
    tool = df.sort("rank").head(k)["excess_kbtu"].sum() / total
    oracle = df.sort("excess_kbtu", descending=True).head(k)["excess_kbtu"].sum() / total
    print(f"seed {SEED}, N {N}, {what}: capture@10 % {tool:.3f} (oracle {oracle:.3f})")
    return tool, oracle


def test_the_audit_order_holds_most_of_the_recoverable_excess(screened, screened_onset):
    # issue 14: the first 10 % of rank should hold >= 85 % of the true recoverable excess. Measured on this
    # held-out seed: 0.81 (persistent) and 0.87 (onset), oracle 0.99; main before issue 14: 0.38 and 0.49.
    # The persistent floor is the measured figure rounded down (the target is not met, README says why).
    tool, oracle = _capture(screened, "persistent waste")
    assert oracle > 0.95 and tool >= 0.75
    tool, oracle = _capture(screened_onset, "waste with onset")
    assert tool >= 0.85  # the issue's target


def test_a_data_fault_never_takes_an_audit_slot(screened, screened_onset):
    for df in (screened, screened_onset):
        faults = df.filter(pl.col("truth_label").is_in(["unit_error", "missing_months"]))
        blocked = faults.filter(pl.col("tier") == "Fix data first")
        judged = df.filter(pl.col("tier") != "Fix data first")
        # every building whose data block a verdict is ranked after every building that can be judged
        assert blocked.height == 0 or blocked["rank"].min() > judged["rank"].max()
        assert not df.filter(pl.col("truth_label") == "unit_error")["tier"].is_in(["Audit first", "Audit soon"]).any()


# --------------------------------------------------------------------------------------------
# estimated reads followed by a catch-up (issue 14, "data faults never on the audit list")
# --------------------------------------------------------------------------------------------


def _monthly_reads(bid: str, kbtu: list[float], estimated: list[bool], start=dt.date(2025, 10, 1)) -> pl.DataFrame:
    """Consecutive calendar-month reads of one gas meter from ``start`` [kBtu]."""
    rows, s = [], start
    for q, est in zip(kbtu, estimated, strict=True):
        e = (s.replace(day=28) + dt.timedelta(days=4)).replace(day=1) - dt.timedelta(days=1)
        rows.append(dict(building_id=bid, meter_id="M1", period_start=s, period_end=e, energy_kbtu=q, estimated=est))
        s = e + dt.timedelta(days=1)
    return pl.DataFrame(rows).with_columns(pl.lit(True).alias("is_heating_fuel"))


# a heating year Oct..Sep [kBtu]: the shape of a gas-heated building (illustrative, invented)
_YEAR = [40.0, 90.0, 150.0, 170.0, 140.0, 100.0, 60.0, 30.0, 20.0, 20.0, 20.0, 25.0]
_SPAN = pl.DataFrame(
    {
        "building_id": ["A", "B", "C", "D"],
        "span_start": [dt.date(2025, 10, 1)] * 4,
        "span_end": [dt.date(2026, 9, 30)] * 4,
    }
)


def test_a_run_of_estimates_with_its_catch_up_is_a_blocking_data_issue():
    from screening import metered

    # A: Nov..Feb estimated at October's rate, then a true March read that catches up (total kept)
    est_a = [False, True, True, True, True, False, *[False] * 6]
    q_a = list(_YEAR)
    q_a[1:5] = [40.0] * 4
    q_a[5] = sum(_YEAR[1:6]) - 160.0
    # B: Feb..Jul estimated at January's rate, scaled to 0.9 of the truth; a small true read in August
    est_b = [False] * 4 + [True] * 6 + [False, False]
    q_b = list(_YEAR)
    run = 0.9 * sum(_YEAR[4:11])
    q_b[4:10] = [run / 6] * 6
    q_b[10] = sum(_YEAR[4:11]) - run
    # C, must NOT fire: sporadic single estimates (normal practice), each followed by its catch-up,
    # and two estimates in a row (the simulator's normal buildings have such pairs)
    est_c = [False, True, False, False, True, True, False, False, True, False, False, False]
    # D, must NOT fire: three estimates, but a month without any read breaks the run
    r = pl.concat(
        [
            _monthly_reads("A", q_a, est_a),
            _monthly_reads("B", q_b, est_b),
            _monthly_reads("C", _YEAR, est_c),
            _monthly_reads("D", _YEAR[:2], [True, True]),
            _monthly_reads("D", _YEAR[3:], [True, *[False] * 8], start=dt.date(2026, 1, 1)),
        ]
    )
    runs = metered.estimated_runs(r)
    assert runs["building_id"].to_list() == ["A", "B"]
    a = runs.row(0, named=True)
    assert (a["run_start"], a["run_end"], a["n_estimated"]) == (dt.date(2025, 11, 1), dt.date(2026, 2, 28), 4)
    assert a["catch_start"] == dt.date(2026, 3, 1) and a["catch_kbtu"] == pytest.approx(sum(_YEAR[1:6]) - 160.0)
    iss = metered.estimated_run_issues(r, _SPAN)
    assert iss["building_id"].to_list() == ["A", "B"]
    assert iss["code"].unique().to_list() == ["estimated_run"] and iss["blocking"].all()
    assert "4 estimated reads 2025-11-01..2026-02-28" in iss["detail"][0]
    assert "then a true read 2026-03-01..2026-03-31 at " in iss["detail"][0]
    # a run outside the span is not this span's issue; a run with no true read after it is named as such
    later = _SPAN.with_columns(
        pl.lit(dt.date(2026, 9, 1)).alias("span_start"), pl.lit(dt.date(2027, 8, 31)).alias("span_end")
    )
    assert metered.estimated_run_issues(r, later).height == 0
    open_run = _monthly_reads("A", _YEAR[:4], [False, True, True, True])
    assert "no true read after them yet" in metered.estimated_run_issues(open_run, _SPAN)["detail"][0]
    # min_run 2 would take building C's pair (and normal buildings' pairs on the simulator)
    assert "C" in metered.estimated_runs(r, min_run=2)["building_id"].to_list()


def test_a_run_of_estimates_keeps_the_building_off_the_audit_list():
    # the whole screening (pipeline.screen_frames) on two copies of one building billed monthly from its
    # own weather: T1 read truly, T2 with Nov..Feb estimated at October's daily rate and a March catch-up
    from tests.test_pipeline import UA, _building, _buildings, _cfg, _monthly_readings, _seasonal

    from screening.pipeline import screen_frames

    w = _seasonal()
    t1 = _monthly_readings(w, dt.date(2024, 10, 1), 24, UA, 0.8)
    t1 = t1.with_columns(pl.col("quantity") + 1000.0)  # and hot water, 1,000 therm a month
    oct25 = t1.filter(pl.col("period_start") == dt.date(2025, 10, 1)).row(0, named=True)
    rate = oct25["quantity"] / 31
    run = pl.col("period_start").is_between(dt.date(2025, 11, 1), dt.date(2026, 2, 1))
    catch = pl.col("period_start") == dt.date(2026, 3, 1)
    days = (pl.col("period_end") - pl.col("period_start")).dt.total_days() + 1
    shortfall = t1.filter(run).select((pl.col("quantity") - rate * days).sum()).item()
    billed = pl.when(run).then(rate * days).when(catch).then(pl.col("quantity") + shortfall)
    t2 = t1.with_columns(
        pl.lit("T2").alias("building_id"),
        billed.otherwise(pl.col("quantity")).alias("quantity"),
        run.alias("estimated"),
        (pl.col("_line") + 100).alias("_line"),
    )
    assert t2["quantity"].sum() == pytest.approx(t1["quantity"].sum())  # the catch-up keeps the total
    b = _buildings([_building(heating_efficiency=0.8), _building(building_id="T2", heating_efficiency=0.8, _line=3)])
    res = screen_frames(b, pl.concat([t1, t2]), w, _cfg(), window=(dt.date(2025, 10, 1), dt.date(2026, 9, 30)))
    rows = {r["building_id"]: r for r in res.results.iter_rows(named=True)}
    assert "estimated_run" in rows["T2"]["data_issue_codes"] and rows["T2"]["tier"] == "Fix data first"
    assert "estimated_run" not in (rows["T1"]["data_issue_codes"] or []) and rows["T1"]["tier"] != "Fix data first"
    iss = res.issues.filter(pl.col("code") == "estimated_run")
    assert iss["building_id"].to_list() == ["T2"] and iss["blocking"].to_list() == [True]
    assert iss["detail"][0].startswith("4 estimated reads 2025-11-01..2026-02-28 at ")
