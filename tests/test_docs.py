"""docs/python.md: the notebook example runs as written and gives what it says."""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

DOC = Path(__file__).resolve().parent.parent / "docs" / "python.md"


def test_python_example_runs():
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), flags=re.S)
    assert len(blocks) == 1
    ns: dict = {}
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        exec(compile(blocks[0], str(DOC), "exec"), ns)
    res, top, dd = ns["res"], ns["top"], ns["dd"]
    assert res.results.height == ns["some"].height > 0  # every school screened or listed
    assert set(res.results["building_id"]) == set(ns["some"]["building_id"])
    assert top.columns == ["rank", "building_id", "tier", "ratio", "excess_cost"]
    assert top["rank"].to_list() == sorted(top["rank"].to_list())
    assert dd.height == 12 and (dd["hdd"] >= 0).all()
    assert "rows rejected" in out.getvalue()
