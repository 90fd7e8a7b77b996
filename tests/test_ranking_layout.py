"""ranking.pdf's layout by page geometry (issue 15): on the demo's report (Letter, IP) and on the
same portfolio converted to SI (A4), every character lies inside the page's content box, no
character overlaps another, every word of the ranked table lies inside one column, and the long
fields (tiers, flags, names) are wrapped, never cut. Measured with pdfplumber's character boxes
(PDFs are tested by text and geometry, never by bytes).

The SI copy of the demo: floor areas ft² → m² (× 0.09290304), temperatures °F → °C
((t − 32) / 1.8, exact to the 0.1 °F of the file at 2 decimals), given UA Btu/(h·°F) → W/K
(× 0.5275279) and balance points °F → °C; readings keep their own units.
"""

from __future__ import annotations

import collections
import itertools
import json

import pdfplumber
import polars as pl
import pytest

from screening.render import display, paging
from screening.resources import sample_portfolio_dir

from .conftest import cli

MM = 72 / 25.4
SIDE = 12 * MM  # ranking.css: 12 mm side margins
PAPER = {"Letter": (612.0, 792.0), "A4": (595.28, 841.89)}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("layout")
    res = cli(["demo", "--out", str(root / "demo"), "--no-sheets", "--quiet"])
    assert res.exit_code == 0, res.stderr
    src = sample_portfolio_dir()
    b = pl.read_csv(src / "buildings.csv", infer_schema_length=0)
    num = {c: pl.col(c).cast(pl.Float64) for c in ("floor_area", "ua_total", "balance_point")}
    b.with_columns(
        (num["floor_area"] * 0.09290304).alias("floor_area"),
        (num["ua_total"] * 0.5275279).alias("ua_total"),
        ((num["balance_point"] - 32) / 1.8).round(3).alias("balance_point"),
    ).write_csv(root / "b_si.csv")
    pl.read_csv(src / "weather.csv", infer_schema_length=0).with_columns(
        [((pl.col(c).cast(pl.Float64) - 32) / 1.8).round(2).alias(c) for c in ("t_min", "t_max")]
    ).write_csv(root / "w_si.csv")
    res = cli(
        [
            "run",
            "--buildings",
            str(root / "b_si.csv"),
            "--readings",
            str(src / "readings.csv"),
            "--weather",
            str(root / "w_si.csv"),
            "--units",
            "SI",
            "--out",
            str(root / "si"),
            "--db",
            str(root / "si.duckdb"),
            "--as-of",
            "2026-10-15",
            "--no-sheets",
            "--quiet",
        ]
    )
    assert res.exit_code == 0, res.stderr
    return {"Letter": root / "demo" / "ranking.pdf", "A4": root / "si" / "ranking.pdf"}


def _chars(page) -> list[dict]:
    """The page's visible characters, upright ones (the chart's rotated axis title is drawn in an
    image of its own and checked by the chart tests)."""
    return [c for c in page.chars if c.get("upright", True) and c["text"].strip()]


def _overlaps(chars: list[dict]) -> list[tuple]:
    """Pairs of characters whose boxes overlap by more than 0.6 pt both ways (bucketed by 20 pt)."""
    grid = collections.defaultdict(list)
    for k, c in enumerate(chars):
        for gx in range(int(c["x0"] // 20), int(c["x1"] // 20) + 1):
            for gy in range(int(c["top"] // 20), int(c["bottom"] // 20) + 1):
                grid[gx, gy].append(k)
    found = set()
    for ks in grid.values():
        for a, b in itertools.combinations(ks, 2):
            A, B = chars[a], chars[b]
            if (
                min(A["x1"], B["x1"]) - max(A["x0"], B["x0"]) > 0.6
                and min(A["bottom"], B["bottom"]) - max(A["top"], B["top"]) > 0.6
            ):
                found.add((A["text"], B["text"], round(A["x0"]), round(A["top"])))
    return sorted(found)


@pytest.mark.parametrize("paper", ["Letter", "A4"])
def test_every_character_inside_the_page_and_none_overlapping(runs, paper):
    with pdfplumber.open(runs[paper]) as pdf:
        assert len(pdf.pages) >= 4
        for i, page in enumerate(pdf.pages, 1):
            assert (page.width, page.height) == pytest.approx(PAPER[paper], abs=0.5)
            chars = _chars(page)
            outside = [
                (c["text"], round(c["x0"]), round(c["x1"]), round(c["top"]))
                for c in chars
                if c["x0"] < SIDE - 0.5
                or c["x1"] > page.width - SIDE + 0.5
                or c["top"] < 0
                or c["bottom"] > page.height
            ]
            assert not outside, (paper, i, outside[:5])
            overlapping = _overlaps(chars)
            assert not overlapping, (paper, i, overlapping[:5])


@pytest.mark.parametrize("paper", ["Letter", "A4"])
def test_ranked_table_words_stay_in_their_column_and_nothing_is_cut(runs, paper):
    width = PAPER[paper][0] - 2 * SIDE
    edges = [SIDE]
    for _key, _h, w, _r in paging.RANK_COLUMNS:
        edges.append(edges[-1] + width * w / 100)
    table_pages = 0
    text = ""
    with pdfplumber.open(runs[paper]) as pdf:
        for page in pdf.pages:
            words = page.extract_words(x_tolerance=1.5)
            head = [w for w in words if w["text"] == "intensity" and w["x0"] > edges[6] - 1]
            if not head:
                continue
            table_pages += 1
            top = head[0]["top"]
            body = [w for w in words if w["top"] >= top - 0.5 and w["bottom"] < page.height - 16 * MM]
            for w in body:
                inside = [
                    j for j in range(len(edges) - 1) if edges[j] - 0.5 <= w["x0"] and w["x1"] <= edges[j + 1] + 0.5
                ]
                assert inside, (paper, w["text"], round(w["x0"]), round(w["x1"]), [round(e) for e in edges])
            text += page.extract_text() + "\n"
    assert table_pages >= 2
    assert "…" not in text  # nothing of the demo is cut
    assert "Fix data first" in text.replace("\n", " ") or "Fix data\nfirst" in text
    ranking = pl.read_csv(runs[paper].with_name("ranking.csv"), schema_overrides={"flags": pl.String})
    flat = text.replace("\n", " ").replace("_ ", "_").replace("; ", ";")
    for flags in ranking["flags"].drop_nulls().unique().to_list():  # every flag code of every row is there
        for code in flags.split(";"):
            assert code in flat, code


@pytest.mark.parametrize("paper", ["Letter", "A4"])
def test_first_page_shows_one_run_id_one_co2e_unit_and_the_excess_definition(runs, paper):
    summary = json.loads(runs[paper].with_name("summary.json").read_text())
    with pdfplumber.open(runs[paper]) as pdf:
        first = pdf.pages[0].extract_text()
        table = pdf.pages[1].extract_text().replace("\n", " ")
    assert f"Run {summary['run_id']}," in first and f"run {summary['run_id']} ·" in first
    kg = summary["totals"]["excess_co2e_kg"]
    assert f"{display.fmt_num(kg / 1000)} t CO₂e" in first and " kg" not in first
    assert "Excess above the expected band, per year" in first.replace("\n", " ")
    assert "metered heating minus the top of its expected band" in table
    # the histogram's note counts the last bar, not the portfolio
    ratios = pl.read_csv(runs[paper].with_name("ranking.csv"))["ratio"].drop_nulls()
    note = f"last bar: ratio 3 and above, {(ratios >= 2.95).sum()} building(s) of the {ratios.len()} plotted"
    assert note.replace(" ", "") in "".join(first.split())  # chart text comes out without blanks


def test_the_savings_page_shows_the_measures_the_total_and_the_hit_rate(runs):
    demo = runs["Letter"]
    summary = json.loads(demo.with_name("summary.json").read_text())
    saved = pl.read_csv(demo.with_name("savings.csv"))
    with pdfplumber.open(demo) as pdf:
        last = pdf.pages[-1].extract_text()
        other = " ".join(p.extract_text() for p in pdf.pages[:-1])
    assert last.startswith("Savings after measures") and "Savings after measures" not in other
    for r in saved.iter_rows(named=True):  # each measure: id, avoided energy and its 90 % interval as in savings.csv
        line = next(ln for ln in last.splitlines() if ln.startswith(r["building_id"]))
        assert display.fmt_num(r["avoided_energy"]) in line
        assert f"{display.fmt_num(r['avoided_low_90'])} to {display.fmt_num(r['avoided_high_90'])}" in line
        assert display.fmt_money(r["avoided_cost"]) in line
    tot = summary["savings"]
    assert display.fmt_num(tot["avoided_energy"]) in last and f"± {display.fmt_num(tot['avoided_u90'])}" in last
    hr = summary["audit_hit_rate"]
    assert f"{hr['confirmed']} of {hr['audited_from_plan']} confirmed a finding" in last
    for q, g in hr["by_quarter"].items():
        assert f"{q} {g['confirmed']} / {g['audited']}" in last
    # the page's totals are those of the measures meeting the Guideline 14 limits, in quadrature
    ok = saved.filter(pl.col("meets_guideline14"))
    u90 = ((ok["avoided_high_90"] - ok["avoided_energy"]) ** 2).sum() ** 0.5
    assert abs(u90 - tot["avoided_u90"]) < 0.2


def test_the_portfolio_page_shows_the_hit_rate(runs):
    from html.parser import HTMLParser

    demo = runs["Letter"]
    hr = json.loads(demo.with_name("summary.json").read_text())["audit_hit_rate"]

    class Section(HTMLParser):  # the text inside <section id="hit-rate">
        depth, text = 0, []

        def handle_starttag(self, tag, attrs):
            if self.depth or (tag == "section" and ("id", "hit-rate") in attrs):
                self.depth += tag == "section"

        def handle_endtag(self, tag):
            if self.depth and tag == "section":
                self.depth -= 1

        def handle_data(self, data):
            if self.depth:
                self.text.append(data)

    p = Section()
    p.feed(demo.with_name("index.html").read_text(encoding="utf-8"))
    text = " ".join(" ".join(p.text).split())
    assert f"{hr['confirmed']} of {hr['audited_from_plan']} confirmed a finding ({100 * hr['rate']:.0f} %)" in text
    for groups in (hr["by_mechanism"], hr["by_quarter"]):
        for k, g in groups.items():
            assert f"{k} {g['confirmed']} / {g['audited']} ({100 * g['rate']:.0f} %)" in text
