"""Benchmark: one WeasyPrint document per sheet vs batched + split + a process pool.

    python benchmarks/bench_sheets.py --sheets 200 --workers 2 --chunk 50 [--baseline 40] [--ranking-rows 1000]

The baseline (one document per sheet, one process) is timed on ``--baseline`` sheets and
reported per sheet, since it scales linearly; the batched path is timed on all sheets.
ranking.pdf is timed for ``--ranking-rows`` ranked rows (the default cap of
``[output] ranking_pdf_rows``), best of two, wall and CPU time.
Sheets come from tests/sheet_fixtures.make_sheet (invented buildings). Figures measured
and the conditions (uptime) are in DEVELOPERS.md "Rendering". Timings are wall
clock on this machine; other processes sharing the cores make them vary, so the load
average is printed beside them.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from screening import report  # noqa: E402
from tests.sheet_fixtures import make_report, make_sheet  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sheets", type=int, default=200)
    ap.add_argument("--baseline", type=int, default=40)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--chunk", type=int, default=50)
    ap.add_argument("--paper", default="Letter")
    ap.add_argument("--ranking-rows", type=int, default=1000, help="rows of the ranking.pdf timing (0: skip)")
    a = ap.parse_args()
    sheets = [make_sheet(i, annual=(i % 10 == 9)) for i in range(a.sheets)]
    tmp = Path(tempfile.mkdtemp(prefix="bench-sheets-"))
    try:
        ranking = ""
        if a.ranking_rows:
            rep = make_report(a.ranking_rows)
            report.render_ranking(make_report(5), tmp / "warm.pdf", paper=a.paper)
            best = None
            for _ in range(2):
                t, c = time.perf_counter(), time.process_time()
                out = report.render_ranking(rep, tmp / "ranking.pdf", paper=a.paper)
                run = (time.perf_counter() - t, time.process_time() - c)
                best = run if best is None or run[0] < best[0] else best
            from pypdf import PdfReader
            ranking = (f"ranking.pdf, {a.ranking_rows} rows: {best[0]:.2f} s wall, {best[1]:.2f} s CPU "
                       f"({len(PdfReader(out).pages)} pages)")
        report._state()  # warm the in-process renderer for the baseline, as a long-lived run would
        report.render_sheets_one_by_one(sheets[:1], tmp / "warm", paper=a.paper)
        t = time.perf_counter()
        report.render_sheets_one_by_one(sheets[: a.baseline], tmp / "one", paper=a.paper)
        one = (time.perf_counter() - t) / a.baseline
        print(f"load average before batched: {os.getloadavg()[0]:.2f}")
        stats: dict = {}
        t = time.perf_counter()
        paths = report.render_sheets(sheets, tmp / "batched", paper=a.paper, workers=a.workers,
                                     chunk_size=a.chunk, stats=stats)
        batched = (time.perf_counter() - t) / a.sheets
        assert len(paths) == a.sheets and all(p.is_file() for p in paths)
        print(f"one document per sheet : {1000 * one:7.1f} ms/sheet  ({a.baseline} sheets, 1 process)")
        print(f"batched+split+{a.workers} procs: {1000 * batched:7.1f} ms/sheet  ({a.sheets} sheets, "
              f"chunks of {stats['chunk_size']}, refit {stats['refit']})")
        print(f"speed-up {one / batched:.2f}x; {1 / batched:.1f} sheets/s; 1,000 sheets ~ {1000 * batched:.0f} s")
        if ranking:
            print(ranking)
        print(f"load average after: {os.getloadavg()[0]:.2f} (1/5/15 min: "
              f"{', '.join(f'{x:.2f}' for x in os.getloadavg())}; {os.cpu_count()} CPUs)")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
