"""Write the demo portfolio of ddscreen: buildings.csv, readings.csv, weather.csv, truth.csv, events.csv.

The scenario: Quillmere Estates Trust (an invented management company) holds about 200 buildings
of every use type in five invented climates. Weather runs 2022-10-01..2026-09-30 (so
``ddscreen demo`` with ``--as-of 2026-10-15`` screens 2025-10-01..2026-09-30); monthly bills
run to the first read after 2026-09-30; about 10 % of buildings report calendar-year totals only
(2023, 2024, 2025), about 10 % waste heat (about half of them since a day between April and
October 2025), and a handful carry each kind of data defect.
A few deliberately invalid rows are appended for the rejects path (see README.md here).

Run from anywhere (seeded; the output is identical on every run):

    python sample_portfolio/generate.py [--out DIR] [--n 200] [--seed 2026] [--units IP|SI]

This script and ``simulate.py`` use numpy and polars only and never import ``screening``.
"""

from __future__ import annotations

import argparse
import importlib.util
import sys
import time
from datetime import date
from pathlib import Path

import numpy as np
import polars as pl

HERE = Path(__file__).resolve().parent

DEMO = dict(n_buildings=200, seed=2026, start=date(2022, 10, 1), years=4, annual_share=0.10, stations=5,
            fault_rates={"wasteful": 0.10, "unit_error": 0.03, "missing_months": 0.025,
                         "duplicate_readings": 0.02, "overlapping_periods": 0.02, "estimated_run": 0.025},
            # about half the wasteful buildings develop their fault between April and October 2025
            # (the others have always wasted): the demo shows both ways onto the audit list
            waste_onset=(date(2025, 4, 1), date(2025, 10, 1)), onset_share=0.5)

# Two measures with savings (invented): installed on MEASURE_DAY, each cuts the building's delivered space heat
# by the share given from that day on (the simulator's ``space_heat_cut``), so the bills show the drop.
MEASURE_DAY = date(2025, 11, 17)
MEASURES = {"B0075": 0.25, "B0035": 0.18}

# The events file of the demo (invented): what Quillmere's managers recorded. Audits of buildings the
# 2026-Q1 list (``ddscreen demo`` screens that quarter first) put on its plan: some confirmed the waste the
# simulator planted, some found nothing; the two measures above; and an operation and a vacancy note.
EVENTS = [
    # building_id, date, kind, finding, mechanism, description, expected_savings, cost
    ("B0035", "2025-09-22", "audit", "confirmed", "heat loss", "walk-through: uninsulated roof deck over the gym",
     "", ""),
    ("B0075", "2025-10-06", "audit", "confirmed", "controls", "boiler plant runs on a fixed curve, no night setback",
     "", ""),
    ("B0035", MEASURE_DAY.isoformat(), "measure", "", "heat loss", "roof deck insulated over the gym and hall",
     "450000", "186000"),
    ("B0075", MEASURE_DAY.isoformat(), "measure", "", "controls",
     "outdoor reset and night setback on the boiler plant", "1500000", "42500"),
    ("B0010", "2026-04-21", "audit", "confirmed", "heat loss", "outdoor-air dampers stuck open around the clock",
     "", ""),
    ("B0062", "2026-04-28", "audit", "none_found", "", "envelope and plant as designed; the high use comes from "
     "long opening hours", "", ""),
    ("B0098", "2026-05-05", "audit", "confirmed", "heat loss", "ventilation runs at full outdoor air at night", "", ""),
    ("B0181", "2026-05-19", "audit", "confirmed", "controls", "occupied setpoint held around the clock", "", ""),
    ("B0094", "2026-05-26", "audit", "confirmed", "controls", "setback schedule overridden at the panel", "", ""),
    ("B0057", "2026-06-02", "audit", "confirmed", "controls", "heating not locked out in warm weather", "", ""),
    ("B0128", "2026-06-16", "audit", "none_found", "", "nothing found", "", ""),
    ("B0110", "2026-07-08", "audit", "confirmed", "controls", "controller failed: no setback, heating in summer",
     "", ""),
    ("B0054", "2026-07-14", "audit", "none_found", "", "nothing found; dock doors already on closers", "", ""),
    ("B0120", "2026-02-09", "operation", "", "", "boiler serviced; burner retuned to the maker's settings", "", ""),
    ("B0142", "2026-07-01", "vacancy", "", "", "two floors empty during refit", "", ""),
]
EVENT_HEADER = ("building_id", "date", "kind", "finding", "mechanism", "description", "expected_savings", "cost")


def _load_simulate():
    spec = importlib.util.spec_from_file_location("ddscreen_sample_simulate", HERE / "simulate.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


def build(n: int = DEMO["n_buildings"], seed: int = DEMO["seed"], units: str = "IP"):
    """Simulate the demo portfolio and plant the reject rows; returns (frames, planted)."""
    sim = _load_simulate()
    args = {k: v for k, v in DEMO.items() if k not in ("n_buildings", "seed")}
    width = max(4, len(str(n)))
    cuts = np.zeros(n)
    for bid, share in MEASURES.items():
        i = int(bid[1:]) - 1
        if i < n and len(bid) == width + 1:
            cuts[i] = share
    frames = sim.simulate_portfolio(n, seed=seed, units=units, space_heat_cut=(MEASURE_DAY, cuts), **args)
    return sim.add_reject_rows(frames)


def events_frame(building_ids) -> pl.DataFrame:
    """The demo's events (``EVENTS``) of the buildings present, every column text (empty = not given)."""
    have = set(building_ids)
    rows = [tuple(v or None for v in e) for e in EVENTS if e[0] in have]
    return pl.DataFrame(rows, schema=list(EVENT_HEADER), orient="row").sort("building_id", "date", "kind")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=HERE, help="output folder (default: beside this script)")
    ap.add_argument("--n", type=int, default=DEMO["n_buildings"], help="number of buildings")
    ap.add_argument("--seed", type=int, default=DEMO["seed"], help="random seed")
    ap.add_argument("--units", choices=("IP", "SI"), default="IP", help="units of the files written")
    a = ap.parse_args(argv)
    t0 = time.perf_counter()
    frames, planted = build(a.n, a.seed, a.units)
    sim = sys.modules["ddscreen_sample_simulate"]
    paths = sim.write_portfolio(frames, a.out)
    paths["events"] = a.out / "events.csv"
    events_frame(frames["buildings"]["building_id"].to_list()).write_csv(paths["events"])
    dt = time.perf_counter() - t0
    t = frames["truth"]
    print(f"wrote {', '.join(str(p) for p in paths.values())} in {dt:.1f} s")
    print(f"{frames['buildings'].height} buildings, {frames['readings'].height} readings, "
          f"{frames['weather'].height} weather days")
    for row in t.group_by("truth_label").len().sort("truth_label").iter_rows():
        print(f"  {row[0]:<22}{row[1]:>5}")
    print(f"  annual-only buildings {int((t['reading_frequency'] == 'annual').sum()):>5}")
    for p in planted:
        print(f"  planted reject: {p['file']} {p['building_id']} {p['column']}={p['value']}: {p['reason']}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
