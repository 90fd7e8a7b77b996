"""One process against a local Dask cluster of 2 workers (the cluster extra): the same ranking.csv, and the overhead.

    python benchmarks/bench_cluster.py --n 10000 --work /tmp/bench-10k
    python benchmarks/bench_cluster.py --n 10000 --work /tmp/bench-10k --chunk 4096 --workers 2

The portfolio comes from the independent simulator (sample_portfolio/simulate.py), written once into
``--work``. Each run is ``python -m screening run --no-sheets`` in a fresh child process on its own new
database: first in one process (``[run] cluster`` empty), then with ``[run] cluster = "local:N"`` (a local
cluster of N worker processes, started and closed inside the run), both with ``[run] chunk_buildings``
= ``--chunk``, so the portfolio is screened in several chunks (tasks). Printed: wall seconds of each run,
the screening's stages (the ``timings`` the database records for the run) (``chunks_elsewhere`` is the chunks on the
cluster, including writing and reading their Parquet partitions), the load average, and whether ranking.csv is
byte-identical (exit 1 if not).
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

#: summary.json timings of the screening (pipeline.screen_frames): in one process the per-chunk stages and the
#: portfolio pass ("screening" holds both the chunks' data issues and the ranking); on the cluster the chunks
#: are "chunks_elsewhere" (tasks, Parquet written and read back) and "screening" only the portfolio pass.
SCREEN_STAGES = (
    "degree_days",
    "metered_prep",
    "envelope",
    "regression",
    "expected",
    "savings",
    "screening",
    "chunks_elsewhere",
)


def _load() -> str:
    return open("/proc/loadavg").read().split()[0]


def run(work: Path, tag: str, cluster: str, chunk: int) -> dict:
    cfg = work / f"bench-{tag}.toml"
    cfg.write_text(f'[run]\nchunk_buildings = {chunk}\ncluster = "{cluster}"\n')
    db = work / f"bench-{tag}.duckdb"
    for p in (db, Path(str(db) + ".wal")):
        p.unlink(missing_ok=True)
    out = work / f"out-{tag}"
    args = ["run", "--no-sheets", "--quiet", "--config", str(cfg), "--db", str(db), "--out", str(out)]
    args += ["--as-of", "2026-10-15"]
    for k in ("buildings", "readings", "weather"):
        args += [f"--{k}", str(work / f"{k}.csv")]
    before = _load()
    t = time.perf_counter()
    res = subprocess.run(
        [sys.executable, "-m", "screening", *args], env=os.environ | {"PYTHONPATH": str(ROOT)}, capture_output=True
    )
    wall = time.perf_counter() - t
    if res.returncode:
        sys.exit(f"{tag}: exit {res.returncode}\n{res.stderr.decode()[-2000:]}")
    import duckdb

    with duckdb.connect(str(db), read_only=True) as con:  # the run's stage timings, as the database records them
        timings = json.loads(con.sql("SELECT timings FROM runs ORDER BY started_at DESC").fetchall()[0][0])
    return {"wall": wall, "timings": timings, "load": f"{before} → {_load()}", "out": out}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=10_000)
    ap.add_argument("--work", required=True)
    ap.add_argument("--chunk", type=int, default=4096, help="[run] chunk_buildings (tasks = buildings / chunk)")
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args()
    work = Path(a.work)
    if not (work / "readings.csv").exists():
        from bench_memory import generate

        work.mkdir(parents=True, exist_ok=True)
        generate(a.n, work)
    rows = [("one process", run(work, "here", "", a.chunk))]
    rows.append((f"local:{a.workers}", run(work, "dask", f"local:{a.workers}", a.chunk)))
    print(f"{a.n} buildings, chunks of {a.chunk} (rounded up to whole blocks of 4,096)")
    print("| where | load before → after | wall s | ingest s | screening s | of which chunks on the cluster s |")
    print("|---|---|---|---|---|---|")
    for name, r in rows:
        t = r["timings"]
        screening = sum(v for k, v in t.items() if k in SCREEN_STAGES)
        print(
            f"| {name} | {r['load']} | {r['wall']:.1f} | {t.get('ingest', 0):.1f} | {screening:.1f} | "
            f"{t.get('chunks_elsewhere', 0):.1f} |"
        )
    print("stages:", json.dumps({name: r["timings"] for name, r in rows}))
    same = (rows[0][1]["out"] / "ranking.csv").read_bytes() == (rows[1][1]["out"] / "ranking.csv").read_bytes()
    print(f"ranking.csv byte-identical: {same}; overhead {rows[1][1]['wall'] - rows[0][1]['wall']:+.1f} s wall")
    sys.exit(0 if same else 1)


if __name__ == "__main__":
    main()
