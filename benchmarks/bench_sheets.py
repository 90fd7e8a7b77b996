"""Benchmark: one WeasyPrint document per sheet vs batched + split + a process pool.

    python benchmarks/bench_sheets.py --sheets 200 --workers 2 --chunk 50 [--baseline 40] [--ranking-rows 1000]

Two baselines, both one document per sheet in one process, each timed on ``--baseline``
sheets and reported per sheet (they scale linearly); the batched path is timed on all sheets:

- **naive** (:func:`naive_one_document_per_sheet`): what issue 7 means by "one WeasyPrint
  document per building": per sheet a fresh ``FontConfiguration``, the stylesheets parsed
  again, ``HTML(string=...)`` rendered and written to its own file, the garbage collector
  left on. Same template, HTML, fetcher and shrink levels as ours. Benchmark only; never a
  production path.
- **warm** (``pdf.render_sheets_one_by_one``): one document per sheet, but with every
  saving of the batched path except the batching itself: one shared ``FontConfiguration``,
  stylesheets parsed once, collector paused, the same page writer (``pdfsplit.write_split``).
  The stricter comparison.

Wall time per sheet gives the speed-ups; CPU time per sheet (the baselines' process time; for
the batched path the render threads' CPU time summed over all processes, without their
start-up) shows how much of the speed-up is batching rather than the second core, and moves
less with the other jobs on the machine.
ranking.pdf is timed for ``--ranking-rows`` ranked rows (the default cap of
``[output] ranking_pdf_rows``), best of two, wall and CPU time.
The renderers' fork server is started before the baselines, as a run starts it while its inputs load
(``pdf.warm_up``). Sheets come from tests/sheet_fixtures.make_sheet (invented buildings). Figures measured
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

from screening.render import filenames, paging, pdf, sheet_view as sv  # noqa: E402
from tests.sheet_fixtures import make_report, make_sheet  # noqa: E402


def naive_one_document_per_sheet(sheets: list[dict], out_dir: Path, *, paper: str = "Letter") -> list[Path]:
    """The naive baseline: one WeasyPrint document per sheet, nothing reused between sheets.

    Per sheet: a new ``FontConfiguration``, ``sheet.css`` and the page-size rule parsed
    again, the sheet's HTML (the production template and view, via ``pdf._sheets_html``)
    rendered with the production :func:`pdf.AssetFetcher` and written by WeasyPrint
    straight to its own file (the ``<title>`` gives the PDF title). The cyclic garbage
    collector stays on. A sheet over one page is rendered again at the next shrink level, as
    the production path does, so both produce the same one-page sheets.
    """
    from weasyprint import CSS, HTML
    from weasyprint.text.fonts import FontConfiguration

    out_dir.mkdir(parents=True, exist_ok=True)
    tdir = pdf.templates_dir()
    base = tdir.as_uri() + "/"
    fetcher = pdf.AssetFetcher(tdir)
    names = filenames.assign_filenames([s.building_id for s in sheets])
    paths = []
    for s in sheets:
        title = sv.sheet_title(s)
        target = out_dir / f"{names[s.building_id]}.pdf"
        for level in range(paging.MAX_LEVEL + 1):
            font_config = FontConfiguration()
            css = [
                CSS(filename=str(tdir / "sheet.css"), font_config=font_config, url_fetcher=fetcher, base_url=base),
                CSS(
                    string=f"@page {{ size: {paging.PAPERS[paper]}; }}"
                    f" .figs {{ tab-size: {paging.CONTENT_MM[paper] / 4:.2f}mm; }}",
                    font_config=font_config,
                ),
            ]
            html = pdf._sheets_html([sv.sheet_view(s, level)], title)
            doc = HTML(string=html, base_url=base, url_fetcher=fetcher).render(stylesheets=css, font_config=font_config)
            if len(doc.pages) == 1:
                doc.write_pdf(target)
                break
        else:
            raise pdf.RenderError(f"sheet {s.building_id!r} does not fit one page")
        paths.append(target)
    return paths


def _check_one_page(paths: list[Path]) -> None:
    from pypdf import PdfReader

    for p in paths:
        n = len(PdfReader(p).pages)
        if n != 1:
            raise SystemExit(f"{p.name}: {n} pages, expected 1")


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
            pdf.render_ranking(make_report(5), tmp / "warm.pdf", paper=a.paper)
            best = None
            for _ in range(2):
                t, c = time.perf_counter(), time.process_time()
                out = pdf.render_ranking(rep, tmp / "ranking.pdf", paper=a.paper)
                run = (time.perf_counter() - t, time.process_time() - c)
                best = run if best is None or run[0] < best[0] else best
            from pypdf import PdfReader

            ranking = (
                f"ranking.pdf, {a.ranking_rows} rows: {best[0]:.2f} s wall, {best[1]:.2f} s CPU "
                f"({len(PdfReader(out).pages)} pages)"
            )
        # the renderers' fork server started first, as a run starts it (runs/phases.py: pdf.warm_up, while the
        # inputs load): it imports WeasyPrint (about 1 s of CPU) beside the baselines, so the batched timing
        # holds the child's fork and warm-up, not the fork server's start (1 s in a 13-s window at 200 sheets)
        pdf.warm_up()
        pdf._state()  # warm the in-process renderer for the baseline, as a long-lived run would
        pdf.render_sheets_one_by_one(sheets[:1], tmp / "warm", paper=a.paper)
        naive_one_document_per_sheet(sheets[:1], tmp / "warm-naive", paper=a.paper)  # imports, template
        print(f"load average before the baselines: {os.getloadavg()[0]:.2f}")
        t, c = time.perf_counter(), time.process_time()
        naive_paths = naive_one_document_per_sheet(sheets[: a.baseline], tmp / "naive", paper=a.paper)
        naive, naive_cpu = ((time.perf_counter() - t) / a.baseline, (time.process_time() - c) / a.baseline)
        _check_one_page(naive_paths)
        t, c = time.perf_counter(), time.process_time()
        pdf.render_sheets_one_by_one(sheets[: a.baseline], tmp / "one", paper=a.paper)
        one, one_cpu = ((time.perf_counter() - t) / a.baseline, (time.process_time() - c) / a.baseline)
        print(f"load average before batched: {os.getloadavg()[0]:.2f}")
        stats: dict = {}
        t = time.perf_counter()
        paths = pdf.render_sheets(
            sheets, tmp / "batched", paper=a.paper, workers=a.workers, chunk_size=a.chunk, stats=stats
        )
        batched = (time.perf_counter() - t) / a.sheets
        assert len(paths) == a.sheets and all(p.is_file() for p in paths)
        _check_one_page(paths[:: max(1, a.sheets // 50)])
        cpu = stats["cpu_s"] / a.sheets
        print(
            f"baseline NAIVE, one document per sheet : {1000 * naive:7.1f} ms/sheet wall, {1000 * naive_cpu:6.1f} "
            f"CPU  ({a.baseline} sheets, 1 process; fresh fonts + CSS per sheet, gc on)"
        )
        print(
            f"baseline WARM,  one document per sheet : {1000 * one:7.1f} ms/sheet wall, {1000 * one_cpu:6.1f} "
            f"CPU  ({a.baseline} sheets, 1 process; shared fonts + parsed CSS, gc paused)"
        )
        print(
            f"batched+split+{a.workers} procs            : {1000 * batched:7.1f} ms/sheet wall, {1000 * cpu:6.1f} "
            f"CPU  ({a.sheets} sheets, chunks of {stats['chunk_size']}, refit {stats['refit']}; CPU summed over "
            f"processes, start-up not counted)"
        )
        print(
            f"speed-up (wall) vs NAIVE baseline: {naive / batched:.2f}x; vs WARM baseline: {one / batched:.2f}x; "
            f"{1 / batched:.1f} sheets/s; 1,000 sheets ~ {1000 * batched:.0f} s"
        )
        print(
            f"CPU per sheet, baseline / batched: NAIVE {naive_cpu / cpu:.2f}x, WARM {one_cpu / cpu:.2f}x "
            f"(the part of the speed-up that is not the second process)"
        )
        if ranking:
            print(ranking)
        print(
            f"load average after: {os.getloadavg()[0]:.2f} (1/5/15 min: "
            f"{', '.join(f'{x:.2f}' for x in os.getloadavg())}; {os.cpu_count()} CPUs)"
        )
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
