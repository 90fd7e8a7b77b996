"""Time the portfolio pass's sentences: screen.screen + wording.explain on the frame a real run hands them.

    python benchmarks/bench_wording.py --n 10000                  # this tree only
    python benchmarks/bench_wording.py --n 10000 --ref 5551e2c    # and a reference commit's screen.screen

The portfolio is the simulator's (as benchmarks/bench_pipeline.py writes it); one run of the tool saves the
frame ``screen.screen`` receives, then each variant is timed ``--repeat`` times on that frame in this
process, alternating, and the medians are printed. With ``--ref`` the reference commit's ``screen.py``
(which made the sentences row by row, before ``wording.py``) is loaded from ``git show`` and timed beside
this tree's, and the sentences of both are compared.
"""

from __future__ import annotations

import argparse
import dataclasses
import importlib.util
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))


def _frame(n: int, work: Path):
    """The frame ``screen.screen`` receives in a default run on the simulated portfolio in ``work`` (written
    first, as bench_pipeline writes it), with the default thresholds and plan the run used."""
    import polars as pl

    from screening import config

    import audit_list
    import bench_pipeline

    if not (work / "buildings.csv").exists():
        bench_pipeline.generate(n, work)
    audit_list.screen_full(work)  # one whole run; keeps the frame as work/frame.parquet
    return pl.read_parquet(work / "frame.parquet"), config.Thresholds(), config.Plan()


def _ref_screen(ref: str):
    src = subprocess.run(
        ["git", "-C", str(ROOT), "show", f"{ref}:screening/screen.py"], capture_output=True, text=True, check=True
    ).stdout
    path = Path(tempfile.mkdtemp()) / "screen_ref.py"
    path.write_text(src.replace("from . import", "from screening import").replace("from .", "from screening."))
    spec = importlib.util.spec_from_file_location("screen_ref", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=10000)
    ap.add_argument("--ref", default=None)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--work", default=None)
    a = ap.parse_args()
    work = Path(a.work or Path(tempfile.gettempdir()) / f"ddscreen-wording-n{a.n}")
    work.mkdir(parents=True, exist_ok=True)
    frame, thr, plan = _frame(a.n, work)

    from screening import screen, wording

    kw = {"energy_factor": 1.0, "energy_unit": "kBtu", "currency": "$"}
    runs: dict[str, list[float]] = {"screen": [], "explain": []}
    ref = _ref_screen(a.ref) if a.ref else None
    if ref is not None:
        runs["ref screen (sentences row by row)"] = []
    new = old = None
    thr_dict = dataclasses.asdict(thr)
    plan_dict = dataclasses.asdict(plan)
    for _ in range(a.repeat):
        t = time.perf_counter()
        s = screen.screen(frame, thr, plan=plan)
        runs["screen"].append(time.perf_counter() - t)
        t = time.perf_counter()
        new = wording.explain(s, thr, **kw)
        runs["explain"].append(time.perf_counter() - t)
        if ref is not None:
            t = time.perf_counter()
            old = ref.screen(frame, thr_dict, plan=plan_dict, **kw)  # the reference read the settings as dicts
            runs["ref screen (sentences row by row)"].append(time.perf_counter() - t)
    print(f"{a.n} buildings, medians of {a.repeat}:")
    for k, v in runs.items():
        print(f"  {k:<36} {statistics.median(v):7.3f} s")
    print(f"  {'screen + explain':<36} {statistics.median(runs['screen']) + statistics.median(runs['explain']):7.3f} s")
    if ref is not None and new is not None and old is not None:
        same = all(new[c].equals(old[c]) for c in wording.TEXT_COLUMNS) and new.columns == old.columns
        print(f"  sentences and columns the same as {a.ref}'s: {same}")


if __name__ == "__main__":
    main()
