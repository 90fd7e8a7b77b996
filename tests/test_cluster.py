"""The cluster extra (screening/cluster.py): screening chunks and sheets as tasks on a local Dask cluster of
2 workers give what one process gives (ranking.csv byte for byte, every frame equal)."""

from __future__ import annotations

import datetime as dt
import json

import pytest

pytest.importorskip("distributed")

from distributed import LocalCluster  # noqa: E402
from pypdf import PdfReader  # noqa: E402

from screening import cluster, pipeline, runner  # noqa: E402
from screening import config as cfgmod  # noqa: E402
from screening.errors import ConfigError  # noqa: E402
from screening.resources import sample_portfolio_dir  # noqa: E402
from screening.window import analysis_window  # noqa: E402
from tests.conftest import AS_OF  # noqa: E402
from tests.test_chunks import _inputs, _same  # noqa: E402


@pytest.fixture(scope="module")
def address():
    # threads, not processes: a worker process takes seconds to start and import polars
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) as lc:
        yield lc.scheduler_address


def test_chunks_on_dask_equal_one_process(address, tmp_path):
    b, r, w = _inputs(sample_portfolio_dir())
    cfg = cfgmod.load(None, None)
    window = analysis_window(dt.date(2026, 10, 15))
    here = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=50)
    ex = cluster.DaskChunks(address, work_root=tmp_path)
    try:
        there = pipeline.screen_frames(b, r, w, cfg, window=window, fit_block=10, chunk_buildings=50, executor=ex)
        written = sorted(ex.work.glob("screen-*/chunk-*"))
        assert len(written) == 4  # 200 buildings in chunks of 50, each a Parquet partition
        assert {p.name for p in written[0].iterdir()} >= {"buildings.parquet", "readings.parquet", "frame.parquet"}
    finally:
        ex.close()
    assert not ex.work.exists()  # its own folder removed
    _same(here, there)


def test_a_run_on_dask_writes_the_same_ranking(address, portfolio, tmp_path):
    outs = {}
    for tag, where in (("here", ""), ("dask", address)):
        ov = {
            "inputs": {k: str(getattr(portfolio, k)) for k in ("buildings", "readings", "weather")},
            "store": {"database": str(tmp_path / f"{tag}.duckdb")},
            "analysis": {"as_of": AS_OF},
            "output": {"sheets": True, "ranking_pdf_rows": 0},
            "run": {"cluster": where},
        }
        runner.run(overrides=ov, out_dir=str(tmp_path / tag), force=True, quiet=True)
        outs[tag] = tmp_path / tag
    assert (outs["here"] / "ranking.csv").read_bytes() == (outs["dask"] / "ranking.csv").read_bytes()
    s = {t: json.loads((outs[t] / "summary.json").read_text()) for t in outs}
    assert s["here"]["run_id"] == s["dask"]["run_id"]  # where a run executes is not part of its key
    sheets = {t: sorted(p.name for p in (outs[t] / "sheets").glob("*.pdf")) for t in outs}
    assert sheets["here"] and sheets["here"] == sheets["dask"]
    for name in sheets["here"]:
        texts = [PdfReader(outs[t] / "sheets" / name).pages[0].extract_text() for t in outs]
        assert texts[0] == texts[1], name


def test_bad_cluster_setting_stops_before_anything(tmp_path):
    with pytest.raises(ConfigError, match="cluster"):
        cfgmod.load(None, {"run": {"cluster": "local:0"}})
    with pytest.raises(ConfigError, match="cluster"):
        cfgmod.load(None, {"run": {"cluster": "my-scheduler"}})
