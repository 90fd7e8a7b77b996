"""Peak memory of a run on a large readings file, first load and a rerun with no input changed.

    python benchmarks/bench_memory.py --n 118000            # about 5 million readings (~300 MB file)
    python benchmarks/bench_memory.py --n 2000 --stages     # also per-stage peaks (in-process, sampled)
    python benchmarks/bench_memory.py --n 100000 --chunk 0 4096 32768   # reruns at these chunk sizes

The portfolio comes from the independent simulator (sample_portfolio/simulate.py, 3 years of daily
weather, monthly bills), written once into a work folder (kept with ``--work DIR`` so a second
benchmark can reuse it). Each run is ``python -m screening run --no-sheets`` in a fresh child
process; its peak resident memory is the child's own ``ru_maxrss`` (``os.wait4``). The second run
uses the same database and files, so nothing is read again.

``--stages`` runs the two runs once more in a child that samples its resident memory every 10 ms and
attributes it to the step running at the time (the main steps of ``pipeline.screen_frames`` and the
runner are wrapped for the measurement only); it prints the peak and the growth over the step's
start for each step.
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib.util
import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _simulator():
    spec = importlib.util.spec_from_file_location("simulate", ROOT / "sample_portfolio" / "simulate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def generate(n: int, work: Path) -> None:
    sim = _simulator()
    frames = sim.simulate_portfolio(
        n, seed=7, start=dt.date(2023, 10, 1), years=3, stations=min(8, max(5, n // 1000 + 4))
    )
    sim.write_portfolio(frames, work)


def _rss_kb() -> int:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return 0


def _args(work: Path, chunk: int | None = None, out: str = "out") -> list[str]:
    extra: list[str] = []
    if chunk is not None:  # [run] chunk_buildings for this run
        cfg = work / f"chunk-{chunk}.toml"
        cfg.write_text(f"[run]\nchunk_buildings = {chunk}\n")
        extra = ["--config", str(cfg)]
    return [
        "run",
        "--no-sheets",
        "--quiet",
        *extra,
        "--buildings",
        str(work / "buildings.csv"),
        "--readings",
        str(work / "readings.csv"),
        "--weather",
        str(work / "weather.csv"),
        "--db",
        str(work / "bench.duckdb"),
        "--out",
        str(work / out),
        "--as-of",
        "2026-10-15",
    ]


def timed_run(work: Path, env: dict, chunk: int | None = None, out: str = "out") -> dict:
    """One run in a fresh process, into its own output folder ``work/out`` (a folder holding a
    quarter's outputs is not replaced without --force, which would also reload the inputs)."""
    t = time.perf_counter()
    p = subprocess.Popen(
        [sys.executable, "-m", "screening", *_args(work, chunk, out)],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    err = p.stderr.read().decode(errors="replace")
    p.stdout.close()
    p.stderr.close()
    return {
        "exit": os.waitstatus_to_exitcode(status),
        "wall_s": round(wall, 2),
        "peak_mb": round(ru.ru_maxrss / 1024, 1),
        "stderr": err.strip()[-500:],
    }


def staged(work: Path) -> None:
    """In-process: wrap the main steps, sample RSS every 10 ms, print per-step peaks (two runs)."""
    from screening import (
        cli,
        data_issues,
        degree_days,
        envelope,
        ingest,
        metered,
        outputs,
        pipeline,
        screen,
        store,
        units,
        yoy,
    )
    from screening.runs import record

    current = ["start"]
    peaks: dict[str, list[int]] = {}
    stop = threading.Event()

    def sampler():
        while not stop.is_set():
            v = _rss_kb()
            p = peaks.setdefault(current[0], [v, v])
            p[1] = max(p[1], v)
            time.sleep(0.01)

    def wrap(mod, name, label=None):
        fn = getattr(mod, name)
        label = label or f"{mod.__name__.split('.')[-1]}.{name}"

        def inner(*a, **k):
            prev = current[0]
            current[0] = label
            v = _rss_kb()
            p = peaks.setdefault(label, [v, v])
            p[0] = min(p[0], v)
            try:
                return fn(*a, **k)
            finally:
                p[1] = max(p[1], _rss_kb())
                current[0] = prev

        setattr(mod, name, inner)

    for mod, name in [
        (pipeline, "load_inputs"),
        (pipeline, "read_file"),
        (store.Store, "frame"),
        (pipeline, "_cross_check"),
        (degree_days, "fill_short_gaps"),
        (units, "convert_to_kbtu"),
        (metered, "choose_spans"),
        (metered, "fit_periods"),
        (degree_days.DegreeDayCube, "period_totals"),
        (degree_days.DegreeDayCube, "at_base"),
        (envelope, "estimate_envelope"),
        (metered, "metered_heating"),
        (envelope, "expected_heating"),
        (metered, "reading_issues"),
        (data_issues, "unit_error_issues"),
        (data_issues, "fit_outlier_issues"),
        (yoy, "year_over_year"),
        (screen, "screen"),
        (outputs, "ranking_table"),
        (outputs, "write_csv"),
        (record, "results_for_store"),
        (record, "run_summary"),
        (ingest, "read_readings"),
    ]:
        wrap(mod, name, f"{getattr(mod, '__name__', str(mod)).split('.')[-1]}.{name}")
    th = threading.Thread(target=sampler, daemon=True)
    th.start()
    for i in range(2):
        current[0] = f"run {i + 1}: other"
        t = time.perf_counter()
        try:
            cli.app(_args(work), standalone_mode=False)
        except SystemExit:
            pass
        print(f"run {i + 1}: {time.perf_counter() - t:.1f} s, rss now {_rss_kb() / 1024:.0f} MB", file=sys.stderr)
        rows = sorted(peaks.items(), key=lambda kv: -kv[1][1])
        for k, (lo, hi) in rows:
            print(f"  {k:<40} peak {hi / 1024:8.0f} MB  growth {max(0, hi - lo) / 1024:8.0f} MB", file=sys.stderr)
        peaks.clear()
    stop.set()


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=118000, help="buildings (about 42 readings each)")
    ap.add_argument("--work", default=None, help="keep the portfolio here (reused if it exists)")
    ap.add_argument("--stages", action="store_true", help="also per-step peaks, in-process")
    ap.add_argument("--child-stages", default=None)
    ap.add_argument("--json", default=None)
    ap.add_argument(
        "--chunk",
        type=int,
        nargs="*",
        default=[],
        help="also a rerun (no input changed) at each of these [run] chunk_buildings",
    )
    a = ap.parse_args()
    if a.child_stages:
        staged(Path(a.child_stages))
        return
    import tempfile

    work = Path(a.work) if a.work else Path(tempfile.mkdtemp(prefix="ddscreen-bench-mem-"))
    work.mkdir(parents=True, exist_ok=True)
    env = os.environ | {"PYTHONPATH": str(ROOT)}
    if not (work / "readings.csv").exists():
        t = time.perf_counter()
        subprocess.run(
            [
                sys.executable,
                "-c",
                f"import sys; sys.path.insert(0, {str(ROOT / 'benchmarks')!r}); "
                f"import bench_memory as b; from pathlib import Path; b.generate({a.n}, Path({str(work)!r}))",
            ],
            env=env,
            check=True,
        )
        print(f"generated {a.n} buildings in {time.perf_counter() - t:.0f} s", file=sys.stderr)
    size_mb = (work / "readings.csv").stat().st_size / 1e6
    with open(work / "readings.csv", "rb") as f:
        n_readings = sum(buf.count(b"\n") for buf in iter(lambda: f.read(1 << 24), b"")) - 1
    for p in (work / "bench.duckdb", work / "bench.duckdb.wal"):
        p.unlink(missing_ok=True)
    import shutil

    for d in [*work.glob("out-[0-9]"), *work.glob("out-chunk-*")]:  # this benchmark's own earlier outputs
        shutil.rmtree(d)
    load = open("/proc/loadavg").read().split()[:3]
    rows = {}
    for k, name in enumerate(("first load", "no input changed")):
        rows[name] = timed_run(work, env, out=f"out-{k}")
        r = rows[name]
        print(
            f"{name:<18} exit {r['exit']}  {r['wall_s']:7.1f} s  peak {r['peak_mb']:7.0f} MB  "
            f"{r['peak_mb'] / size_mb:5.1f}x the readings file",
            flush=True,
        )
        if r["exit"] != 0:
            print(r["stderr"], file=sys.stderr)
    for c in a.chunk:
        name = f"rerun, chunk {c}"
        rows[name] = r = timed_run(work, env, c, out=f"out-chunk-{c}")
        print(
            f"{name:<18} exit {r['exit']}  {r['wall_s']:7.1f} s  peak {r['peak_mb']:7.0f} MB  "
            f"{r['peak_mb'] / size_mb:5.1f}x the readings file",
            flush=True,
        )
        if r["exit"] != 0:
            print(r["stderr"], file=sys.stderr)
    print(
        f"readings file {size_mb:.0f} MB, {n_readings:,} readings; load average before {' '.join(load)}, "
        f"after {' '.join(open('/proc/loadavg').read().split()[:3])}; {dt.datetime.now():%Y-%m-%d %H:%M}"
    )
    if a.json:
        Path(a.json).parent.mkdir(parents=True, exist_ok=True)
        Path(a.json).write_text(
            json.dumps(
                {"n": a.n, "readings": n_readings, "file_mb": round(size_mb, 1), "load": load, "runs": rows}, indent=2
            )
        )
    if a.stages:
        for p in (work / "bench.duckdb", work / "bench.duckdb.wal"):
            p.unlink(missing_ok=True)
        subprocess.run([sys.executable, __file__, "--child-stages", str(work)], env=env, check=False)


if __name__ == "__main__":
    main()
