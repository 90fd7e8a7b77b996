"""How much memory a run will need, how much this process may use, and the message when it is short.

Layer 3 (reads /proc, /sys/fs/cgroup and the process's resource limits). A run that runs out of
memory inside the data libraries (polars, DuckDB) cannot be caught: the process aborts. So the
runner estimates the run's peak from the input row counts before it starts, and stops with one line
and exit 1 when the estimate is larger than what the process may use; a Python ``MemoryError`` that
happens anyway becomes the same one-line error.
"""

from __future__ import annotations

import os
import resource
from pathlib import Path

from .errors import OutOfMemoryError

# Peak resident memory of a run: the larger of two phases, each linear in row counts.
# - reading the files (first load only; every row of the files being read is held, typed, until stored):
#   BYTES_PER_READING_READ per readings row;
# - screening (issue 20): the per-building work runs over chunks of ``[run] chunk_buildings`` buildings,
#   so its temporaries grow with the readings of one chunk (BYTES_PER_CHUNK_READING, the chunk's share
#   of the readings), while the results of every building are kept for the portfolio pass and the
#   output tables (BYTES_PER_BUILDING).
# The coefficients are those measured for one pass (benchmarks/bench_memory.py, docs/performance.md "Large files:
# memory and speed"); the split between the per-building and per-chunk parts is set, not fitted. A check
# at 100,000 buildings / 4,246,886 readings (docs/performance.md): 1.80 GB after reading (this model:
# 2.5 GB), screening growth above that 95 MB in chunks of 16,384 and 440 MB all at once (model: 0.75 and
# 2.5 GB): conservative, not tight.
BASE_BYTES = 330e6  # interpreter, libraries, weather cube, fixed tables
BYTES_PER_READING_READ = 500.0  # readings file rows while the file is read and checked
BYTES_PER_CHUNK_READING = 500.0  # readings of the chunk being screened
BYTES_PER_BUILDING = 4_000.0  # buildings: results kept for the portfolio pass and the outputs
BYTES_PER_WEATHER_ROW = 200.0  # daily weather rows (the degree-day cube: 71 bases of cumulative sums)
#: a screening worker process (``[run] workers`` ≥ 2) before its chunk: interpreter, libraries, the shared
#: weather and degree-day cube (set from the children's resident memory at 10^4 buildings, not fitted)
CHILD_BASE_BYTES = 300e6
#: readings rows in a MB of a readings CSV (the simulator's files: 42,467,316 rows in 2,910 MB; a file with
#: longer lines has fewer, so the streamed estimate is on the safe side for it)
READINGS_PER_MB = 14_600
#: DuckDB's memory per reading of a first load without a memory limit (10^6 buildings, 42 million readings:
#: 9.6 GB during the load, benchmarks/bench_pipeline.py --n 1000000 at 054f147, docs/performance.md)
BYTES_PER_READING_STORED = 230.0
#: kept for callers of the one-phase model: a readings row counted once
BYTES_PER_READING = BYTES_PER_READING_READ


def count_rows(path: str | Path) -> int:
    """Lines of a text file less the header (a quick upper bound of its records)."""
    n = 0
    last = b"\n"
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 22), b""):
            n += chunk.count(b"\n")
            last = chunk[-1:]
    return max(0, n + (last != b"\n") - 1)


def screening_bytes(
    readings: int, buildings: int, chunk_buildings: int = 0, workers: int = 1, threads: int = 1
) -> float:
    """Memory of the screening phase above the base [bytes]: every building's results, and the
    temporaries of one chunk's readings (``chunk_buildings`` rounded up to whole regression blocks,
    :func:`screening.pipeline.chunk_size`; 0 = all buildings at once) for each of W chunks screened side
    by side: ``workers`` ≥ 2, each on a child process of its own (``[run] workers``,
    ``screening/workers.py``), else ``threads`` on threads of this process (``[run] threads``). Linear in
    the chunk size and in W::

        b·B + W·r_chunk·R·c/B + (workers ≥ 2)·W·child
    """
    from .pipeline import chunk_size

    size = chunk_size(chunk_buildings, buildings)
    share = size / buildings if buildings else 1.0
    n_chunks = -(-buildings // size) if size else 1
    side = workers if workers >= 2 else threads
    w = max(1, min(side, n_chunks))
    return (
        BYTES_PER_BUILDING * buildings
        + w * BYTES_PER_CHUNK_READING * readings * share
        + (w * CHILD_BASE_BYTES if workers >= 2 and w >= 2 else 0.0)
    )


def reading_bytes(readings: int, ingest_chunk_mb: int = 0, store_memory_mb: int = 0, threads: int = 1) -> float:
    """Memory of a first load of the readings above the base [bytes]. Whole files (``ingest_chunk_mb`` 0):
    ``r_read·R``. Streamed: the rows of the chunks checked side by side (``threads``, ``[run] threads``),
    ``T·r_read·min(R, ROWS_PER_MB·chunk_mb)``, plus the database's share: its ``memory_limit``
    (``store_memory_mb``) or, without one, ``r_store·R`` (DuckDB keeps the load's rows and its duplicate
    search in memory up to 80 % of the machine). Measured at 10^5 buildings (4.2 M readings, 32 MB chunks,
    ``benchmarks/bench_ingest.py --chunk-mb 32 --threads 1 2``, three runs each): 1.21-1.25 GB peak one chunk at a
    time, 1.26-1.40 GB on two threads."""
    if ingest_chunk_mb <= 0:
        return BYTES_PER_READING_READ * readings
    ours = max(1, threads) * BYTES_PER_READING_READ * min(readings, READINGS_PER_MB * ingest_chunk_mb)
    return ours + (store_memory_mb * 1e6 if store_memory_mb > 0 else BYTES_PER_READING_STORED * readings)


def estimate_peak(
    readings: int,
    buildings: int,
    weather: int,
    chunk_buildings: int = 0,
    *,
    ingest_chunk_mb: int = 0,
    store_memory_mb: int = 0,
    workers: int = 1,
    threads: int = 1,
) -> float:
    """Estimated peak resident memory of a run over inputs of these row counts [bytes]:
    ``BASE + w·weather + max(reading_bytes(R, …), screening_bytes(R, B, c))`` (the files are read and stored
    before the screening starts, and their frames are freed)."""
    return (
        BASE_BYTES
        + BYTES_PER_WEATHER_ROW * weather
        + max(
            reading_bytes(readings, ingest_chunk_mb, store_memory_mb, 1 if workers >= 2 else threads),
            screening_bytes(readings, buildings, chunk_buildings, workers, threads),
        )
    )


def _read_int(path: str) -> int | None:
    try:
        text = Path(path).read_text().strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None


def _stat_value(path: str, keys: tuple[str, ...]) -> int:
    try:
        for line in Path(path).read_text().splitlines():
            k, _, v = line.partition(" ")
            if k in keys and v.strip().isdigit():
                return int(v)
    except OSError:
        pass
    return 0


def _cgroup_room() -> int | None:
    """Memory the process's cgroup may still take (limit − usage + reclaimable file cache)."""
    try:
        lines = Path("/proc/self/cgroup").read_text().splitlines()
    except OSError:
        return None
    for line in lines:
        _, ctrl, rel = line.split(":", 2)
        if ctrl == "":  # cgroup v2
            d = f"/sys/fs/cgroup{rel.rstrip('/')}"
            limit, usage = _read_int(f"{d}/memory.max"), _read_int(f"{d}/memory.current")
            cache = _stat_value(f"{d}/memory.stat", ("inactive_file",))
        elif "memory" in ctrl.split(","):  # cgroup v1
            d = f"/sys/fs/cgroup/memory{rel.rstrip('/')}"
            if not os.path.isdir(d):
                d = "/sys/fs/cgroup/memory"
            limit, usage = _read_int(f"{d}/memory.limit_in_bytes"), _read_int(f"{d}/memory.usage_in_bytes")
            cache = _stat_value(f"{d}/memory.stat", ("total_inactive_file", "inactive_file"))
        else:
            continue
        if limit is not None and limit < (1 << 60):  # "max" or a huge number: no limit
            return max(0, limit - (usage or 0) + cache)
    return None


def _status_kb(key: str) -> int | None:
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def available() -> tuple[float, str]:
    """What this process may still use [bytes] and what sets it (the smallest of the limits found)."""
    found: list[tuple[float, str]] = []
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft != resource.RLIM_INFINITY:
        found.append((max(0, soft - (_status_kb("VmSize") or 0)), "the address-space limit (ulimit -v)"))
    room = _cgroup_room()
    if room is not None:
        found.append((room, "the memory limit of this container/cgroup"))
    avail = _status_meminfo("MemAvailable")
    if avail is not None:
        found.append((avail, "the memory available on this machine"))
    if not found:
        return float("inf"), "no limit found"
    return min(found)


def _status_meminfo(key: str) -> int | None:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def gb(x: float) -> str:
    return f"{x / 1e9:.1f} GB" if x >= 1e9 else f"{x / 1e6:.0f} MB"


def check(
    files: dict[str, list[str]],
    chunk_buildings: int = 0,
    *,
    ingest_chunk_mb: int = 0,
    store_memory_mb: int = 0,
    workers: int = 1,
    threads: int = 1,
) -> float:
    """Stop (``OutOfMemoryError``) when the run clearly needs more memory than the process may use.

    ``files``: the run's input paths by kind; ``chunk_buildings``, ``ingest_chunk_mb``, ``store_memory_mb``,
    ``workers`` and ``threads`` the ``[run]`` settings. Returns the estimate [bytes].
    """

    def rows_of(path):
        try:
            return count_rows(path)
        except OSError:  # reported with its reason when the file is read
            return 0

    rows = {k: sum(rows_of(p) for p in files.get(k, [])) for k in ("readings", "buildings", "weather")}
    need = estimate_peak(
        rows["readings"],
        rows["buildings"],
        rows["weather"],
        chunk_buildings,
        ingest_chunk_mb=ingest_chunk_mb,
        store_memory_mb=store_memory_mb,
        workers=workers,
        threads=threads,
    )
    have, what = available()
    if need > have:
        raise OutOfMemoryError(
            f"not enough memory: {rows['readings']:,} readings of {rows['buildings']:,} buildings need about "
            f"{gb(need)}, and {what} leaves {gb(have)}; nothing was changed. Run on a machine with more "
            "free memory, raise the limit, lower [run] chunk_buildings, workers or threads, or screen the portfolio in smaller parts "
            "(fewer files per run)"
        )
    return need


def ran_out(exc: MemoryError, need: float | None) -> OutOfMemoryError:
    """The one-line error for a ``MemoryError`` raised during a run."""
    have, what = available()
    est = f"; the estimate was {gb(need)}" if need else ""
    return OutOfMemoryError(
        f"ran out of memory{est}, and {what} leaves {gb(have)} now; earlier outputs are untouched. Run on a "
        "machine with more free memory, raise the limit, or screen the portfolio in smaller parts (fewer "
        "files per run)"
    )
