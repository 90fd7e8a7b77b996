"""Check that this tree writes the same tables as a reference commit (a refactoring changes no output).

    python benchmarks/compare_outputs.py                       # the demo, against 43873bc
    python benchmarks/compare_outputs.py --ref main --n 3000   # also a simulated portfolio of 3,000
    python benchmarks/compare_outputs.py --n 3000 --config chunk.toml   # this tree run with a config file

The reference tree is ``git archive <ref>`` unpacked under the system's temp folder (kept for
reuse). Each run is a fresh ``python -m screening`` process without sheets. Compared byte for
byte: ranking.csv, audit_plan.csv, data_issues.csv, rejects.csv, assumptions.csv; summary.json
as parsed JSON without ``run_id`` (a hash that includes the settings); the run id inside the CSVs
is masked the same way, and so is summary.json's ``previous_run`` (the earlier run's id). Exit 1 and the first differing line when anything differs.
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib.util
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TABLES = ("ranking.csv", "audit_plan.csv", "data_issues.csv", "rejects.csv", "assumptions.csv")


def ref_tree(ref: str) -> Path:
    sha = subprocess.run(
        ["git", "-C", str(ROOT), "rev-parse", ref], capture_output=True, text=True, check=True
    ).stdout.strip()
    d = Path(tempfile.gettempdir()) / f"ddscreen-ref-{sha[:12]}"
    if not (d / "screening").is_dir():
        d.mkdir(parents=True, exist_ok=True)
        arch = subprocess.run(["git", "-C", str(ROOT), "archive", sha], capture_output=True, check=True).stdout
        subprocess.run(["tar", "-x", "-C", str(d)], input=arch, check=True)
    return d


def simulate(n: int, work: Path) -> None:
    spec = importlib.util.spec_from_file_location("simulate", ROOT / "sample_portfolio" / "simulate.py")
    assert spec and spec.loader
    sim = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(sim)
    frames = sim.simulate_portfolio(
        n, seed=7, start=dt.date(2023, 10, 1), years=3, stations=min(8, max(5, n // 1000 + 4))
    )
    sim.write_portfolio(frames, work)


def run(tree: Path, args: list[str]) -> None:
    env = os.environ | {"PYTHONPATH": str(tree)}
    out = subprocess.run([sys.executable, "-m", "screening", *args], cwd=tree, env=env, capture_output=True, text=True)
    if out.returncode != 0:
        sys.exit(f"{tree}: exit {out.returncode}\n{out.stderr[-2000:]}")


def _run_id(d: Path) -> str:
    return json.loads((d / "summary.json").read_text())["run_id"]


def compare(a: Path, b: Path, roots: tuple[Path, Path] = (ROOT, ROOT)) -> list[str]:
    """Differences between two output folders (empty when the same); run ids and the two source trees'
    paths (the demo's inputs) are masked."""
    diffs = []
    ida, idb = _run_id(a), _run_id(b)
    ra, rb = str(roots[0]), str(roots[1])
    for name in TABLES:
        fa, fb = a / name, b / name
        if not fa.exists() and not fb.exists():
            continue
        if fa.exists() != fb.exists():
            diffs.append(f"{name}: only in {'the first' if fa.exists() else 'the second'}")
            continue
        la = fa.read_text().replace(ida, "<run>").replace(ra, "<tree>").splitlines()
        lb = fb.read_text().replace(idb, "<run>").replace(rb, "<tree>").splitlines()
        if la != lb:
            i = next((k for k, (x, y) in enumerate(zip(la, lb)) if x != y), min(len(la), len(lb)))
            diffs.append(
                f"{name}: {len(la)} vs {len(lb)} lines, first difference at line {i + 1}:\n"
                f"  {la[i] if i < len(la) else '<end>'}\n  {lb[i] if i < len(lb) else '<end>'}"
            )
    sa, sb = (json.loads((d / "summary.json").read_text().replace(r, "<tree>")) for d, r in ((a, ra), (b, rb)))
    for s in (sa, sb):
        s.pop("run_id", None)
        if s.get("previous_run"):  # a run id too (a hash that includes the settings): masked, kept present
            s["previous_run"] = "<run>"
    if sa != sb:
        keys = sorted(k for k in set(sa) | set(sb) if sa.get(k) != sb.get(k))
        diffs.append(f"summary.json differs in {keys}")
    return diffs


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--ref", default="43873bc", help="reference commit (default 43873bc)")
    ap.add_argument("--n", type=int, default=0, help="also a simulated portfolio of N buildings")
    ap.add_argument(
        "--config", default=None, help="TOML config for this tree's simulated run (e.g. a small chunk size)"
    )
    ap.add_argument("--no-demo", action="store_true")
    a = ap.parse_args()
    ref = ref_tree(a.ref)
    extra = ["--config", str(Path(a.config).resolve())] if a.config else []
    bad = []
    with tempfile.TemporaryDirectory() as d:
        w = Path(d)
        if not a.no_demo:
            for tag, tree in (("ref", ref), ("new", ROOT)):
                run(tree, ["demo", "--no-sheets", "--quiet", "--out", str(w / f"demo-{tag}")])
            diffs = compare(w / "demo-ref", w / "demo-new", (ref, ROOT))
            print(f"demo: {'same' if not diffs else 'DIFFERENT'}")
            bad += diffs
        if a.n:
            simulate(a.n, w / "sim")
            for tag, tree in (("ref", ref), ("new", ROOT)):
                s = w / "sim"
                run(
                    tree,
                    [
                        "run",
                        "--no-sheets",
                        "--quiet",
                        "--buildings",
                        str(s / "buildings.csv"),
                        "--readings",
                        str(s / "readings.csv"),
                        "--weather",
                        str(s / "weather.csv"),
                        "--db",
                        str(w / f"sim-{tag}.duckdb"),
                        "--out",
                        str(w / f"sim-{tag}"),
                        "--as-of",
                        "2026-10-15",
                    ]
                    + (extra if tag == "new" else []),
                )
            diffs = compare(w / "sim-ref", w / "sim-new")
            print(f"simulated {a.n}: {'same' if not diffs else 'DIFFERENT'}")
            bad += diffs
    for x in bad:
        print(x)
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
