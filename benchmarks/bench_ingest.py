"""Seconds and peak memory of loading the input files into a fresh database (ingest only).

    python benchmarks/bench_ingest.py --n 100000 --work /tmp/bench-100k            # this tree, whole and chunked
    python benchmarks/bench_ingest.py --n 100000 --work /tmp/bench-100k --ref 5551e2c --chunk-mb 0 32 8
    python benchmarks/bench_ingest.py --n 100000 --work /tmp/bench-100k --chunk-mb 32 --store-mb 0 2048 512
    python benchmarks/bench_ingest.py --n 100000 --work /tmp/bench-100k --chunk-mb 0 32 --threads 1 2

The portfolio comes from the independent simulator (sample_portfolio/simulate.py: 3 years of daily
weather, 36 monthly bills a building and some extra meters), written once into ``--work`` (kept for
reuse). Each load is ``pipeline.load_inputs`` into a new DuckDB file in a fresh child process; its
peak is the child's ``VmHWM`` (its own peak resident memory), also given above the memory after the imports. ``--chunk-mb 0`` is
the whole-file path; ``--ref`` also loads with that commit's code (``git archive``, as
compare_outputs.py); ``--threads`` gives ``load_inputs``' threads (``[run] threads``: files read whole side by
side, a streamed file's chunks checked side by side; the default 1 is one at a time). Every load must store the same rows: the script prints the stored tables'
row counts and an order-independent hash of their rows, and exits 1 when they differ.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))

CHILD = r"""
import json, sys, time
from pathlib import Path
def hwm():  # this process's own peak resident memory (ru_maxrss would carry the parent's over exec)
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return int(line.split()[1])
t0 = time.perf_counter()
from screening import pipeline
from screening.ingest import ReadOptions
from screening.store import Store
work, db, chunk, threads = Path(sys.argv[1]), sys.argv[2], sys.argv[3], int(sys.argv[5])
base = hwm()
files = {k: [str(work / f"{k}.csv")] for k in ("buildings", "readings", "weather")}
store = Store(db, memory_mb=int(sys.argv[4])) if len(sys.argv) > 4 and sys.argv[4] != "0" else Store(db)
t = time.perf_counter()
kw = {} if chunk == "ref" else {"chunk_bytes": int(chunk) << 20} | ({"threads": threads} if threads > 1 else {})
loads = pipeline.load_inputs(store, files, ReadOptions(), **kw)
secs = time.perf_counter() - t
peak = hwm()
check = {}
for table, cols in (
    ("buildings", "building_id, floor_area_ft2, year_built, source_line"),
    ("readings", "building_id, fuel, meter_id, period_start, period_end, quantity, cost, source_line"),
    ("load_rejects", "line, \"column\", value, reason"),
):
    n, h = store.con.sql(f"SELECT count(*), coalesce(bit_xor(hash({cols})), 0) FROM {table}").fetchall()[0]
    check[table] = [int(n), str(h)]
print(json.dumps({"seconds": secs, "peak_kb": peak, "base_kb": base, "check": check,
                  "loads": [[f.kind, f.rows, f.rejected] for f in loads]}))
"""


def generate(n: int, work: Path) -> None:
    from bench_memory import generate as gen

    gen(n, work)


def one(tree: Path, work: Path, chunk: str, store_mb: int = 0, threads: int = 1) -> dict:
    db = work / f"ingest-{chunk}.duckdb"
    for p in (db, Path(str(db) + ".wal")):
        p.unlink(missing_ok=True)
    env = os.environ | {"PYTHONPATH": str(tree)}
    out = subprocess.run(
        [sys.executable, "-c", CHILD, str(work), str(db), chunk, str(store_mb), str(threads)],
        cwd=tree,  # ``python -c`` puts the working folder first on sys.path: run in the tree being measured
        env=env,
        capture_output=True,
        text=True,
    )
    db.unlink(missing_ok=True)
    if out.returncode:
        sys.exit(f"{tree} ({chunk}): exit {out.returncode}\n{out.stderr[-2000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def _load() -> str:
    return open("/proc/loadavg").read().split()[0]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--work", required=True)
    ap.add_argument("--chunk-mb", type=int, nargs="*", default=[0, 32])
    ap.add_argument("--ref", default=None, help="also load with this commit's code (its default path)")
    ap.add_argument(
        "--store-mb", type=int, nargs="*", default=[0], help="DuckDB memory limits to load with ([run] store_memory_mb)"
    )
    ap.add_argument("--threads", type=int, nargs="*", default=[1], help="threads of the loads ([run] threads)")
    a = ap.parse_args()
    work = Path(a.work)
    if not (work / "readings.csv").exists():
        work.mkdir(parents=True, exist_ok=True)
        t = time.perf_counter()
        generate(a.n, work)
        print(f"generated {a.n} buildings in {time.perf_counter() - t:.0f} s")
    size = (work / "readings.csv").stat().st_size
    print(f"readings.csv {size / 1e6:.0f} MB, buildings.csv {(work / 'buildings.csv').stat().st_size / 1e6:.1f} MB")
    runs = []
    if a.ref:
        from compare_outputs import ref_tree

        runs.append((f"{a.ref} (before)", ref_tree(a.ref), "ref", 0, 1))
    runs += [
        (
            ("whole files" if c == 0 else f"chunks of {c} MB")
            + (f", store_memory_mb {m}" if m else "")
            + (f", {t} threads" if t > 1 else ""),
            ROOT,
            str(c),
            m,
            t,
        )
        for c in a.chunk_mb
        for m in a.store_mb
        for t in a.threads
    ]
    checks = []
    print("| code | load before → after | ingest s | peak | above imports |")
    print("|---|---|---|---|---|")
    for name, tree, chunk, store_mb, threads in runs:
        before = _load()
        r = one(tree, work, chunk, store_mb, threads)
        checks.append(r["check"])
        print(
            f"| {name} | {before} → {_load()} | {r['seconds']:.1f} | {r['peak_kb'] / 1e6:.2f} GB | "
            f"{(r['peak_kb'] - r['base_kb']) / 1e6:.2f} GB |",
            flush=True,
        )
    print("stored:", json.dumps(checks[0]))
    if any(c != checks[0] for c in checks):
        print("DIFFERENT stored rows:", json.dumps(checks))
        sys.exit(1)
    print("every load stored the same rows")


if __name__ == "__main__":
    main()
