"""Tests of the rendering layer (screening.render): file names, the URL fetcher, the
one-page building sheets and ranking.pdf. PDFs are checked by page count, page size,
extracted text and metadata, never by bytes."""

from __future__ import annotations

import ast
import dataclasses
import inspect
import logging
import re
import socket
import textwrap
from dataclasses import replace

import pdfplumber
import pytest
from pypdf import PdfReader

from screening.render import display, filenames, paging, pdf, pdfsplit, ranking_view as rv, sheet_view as sv
from screening.render.record import SheetRecord
from screening.resources import templates_dir
from tests.sheet_fixtures import HOSTILE_NAME, extreme_sheets, make_report, make_sheet, scripts_without_font

# Page sizes in PDF points (1/72 in): US Letter 8.5 x 11 in (ANSI/ASME Y14.1);
# A4 210 x 297 mm (ISO 216) = 595.28 x 841.89 pt. Tolerance 0.5 pt for rounding.
LETTER = (612.0, 792.0)
A4 = (595.28, 841.89)


# --- file names ---------------------------------------------------------------------


def test_safe_id_is_kept():
    assert filenames.safe_filename("B-1001") == "B-1001"
    assert filenames.safe_filename("site_7.north") == "site_7.north"


@pytest.mark.parametrize(
    "bid",
    [
        "../../etc/passwd",
        "a/b",
        "a\\b",
        "x\x00y",
        "CON",
        "nul",
        "Com1.pdf",
        "LPT9",
        "",
        "...",
        " lead",
        "trail.",
        "é" * 5,
        "x" * 500,
        "<script>",
    ],
)
def test_unsafe_ids_get_a_safe_hashed_stem(bid):
    stem = filenames.safe_filename(bid)
    assert stem != bid
    assert all(c.isalnum() and c.isascii() or c in "._-" for c in stem)
    assert not stem.startswith((".", "-", "_")) and len(stem) <= 60 + 1 + 10
    assert stem.split(".")[0].upper() not in {"CON", "NUL", "COM1", "LPT9", "PRN", "AUX"}
    assert filenames.safe_filename(bid) == stem  # deterministic


def test_assign_filenames_unique_without_case_and_order_free():
    ids = ["Alpha", "alpha", "ALPHA", "a/b", "a\\b", "a_b", "CON", "con", "B-1", "x" * 300, "x" * 301]
    names = filenames.assign_filenames(ids)
    folded = [n.casefold() for n in names.values()]
    assert len(set(folded)) == len(ids)
    assert filenames.assign_filenames(list(reversed(ids))) == names
    assert names["B-1"] == "B-1"  # a safe id that clashes with nothing keeps its name
    with pytest.raises(ValueError, match=r"building id 'B-1' appears more than once"):
        filenames.assign_filenames(["B-1", "B-1"])
    with pytest.raises(TypeError, match=r"building_id must be a str, got int: 7"):
        filenames.safe_filename(7)


# --- URL fetcher --------------------------------------------------------------------


@pytest.fixture
def no_network(monkeypatch):
    """Any attempt to open a socket or a urllib request fails the test."""

    def refuse(*a, **k):
        raise AssertionError(f"network access attempted: {a[:2]}")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


def test_fetcher_refuses_remote_and_outside_files(no_network, tmp_path):
    f = pdf.AssetFetcher()
    outside = tmp_path / "secret.css"
    outside.write_text("body{}")
    for url in [
        "http://198.51.100.7/x.png",
        "https://198.51.100.7/",
        "ftp://198.51.100.7/a",
        outside.as_uri(),
        "file:///etc/passwd",
        (templates_dir() / ".." / "pyproject.toml").as_uri(),
        "file://198.51.100.7/share/x.css",
        "file:///dev/urandom",
    ]:
        with pytest.raises(ValueError, match="refused to fetch"):
            f.fetch(url)
    assert len(f.refused) == 8


def test_fetcher_serves_template_assets_and_data(no_network):
    f = pdf.AssetFetcher()
    r = f.fetch((templates_dir() / "sheet.css").as_uri())
    assert b"@page" in r.read()
    assert f.fetch("data:text/plain;base64,aGk=").read() == b"hi"


def test_render_with_remote_references_never_fetches(no_network, tmp_path, caplog):
    """Even raw markup that asks for remote resources (which the templates never emit)
    is refused by the fetcher: the render stops instead of reaching out."""
    from weasyprint import HTML
    from weasyprint.urls import FatalURLFetchingError

    f = pdf.AssetFetcher()
    html = '<img src="http://198.51.100.7/t.png"><link rel="stylesheet" href="file:///etc/passwd">'
    with pytest.raises(FatalURLFetchingError):
        HTML(string=html, base_url=templates_dir().as_uri() + "/", url_fetcher=f).render()
    assert f.refused and all("198.51.100.7" in u or "/etc/passwd" in u for u in f.refused)


# --- formatting ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "x, text",
    [
        (None, "n/a"),
        (float("nan"), "n/a"),
        (float("inf"), "∞"),
        (0, "0"),
        (1234567.8, "1,234,568"),
        (12.345, "12.3"),
        (0.0812, "0.0812"),
        (-3.2, "-3.2"),
        (1e12, "1.00e+12"),
        (999.5, "1,000"),
    ],
)
def test_fmt_num(x, text):  # expected strings by hand from the documented rules
    assert display.fmt_num(x) == text


def test_fmt_money_and_co2e():
    assert display.fmt_money(12345.6) == "$12,346"
    assert display.fmt_money(-50.0) == "-$50"
    assert display.fmt_co2e(25400.0) == ("25.4", "t")  # by hand: 25,400 kg = 25.4 t
    assert display.fmt_co2e(950.0) == ("0.95", "t")  # one unit in every rendered output
    assert display.fmt_co2e(0.0) == ("0", "t") and display.fmt_co2e(3_809_200.0) == ("3,809", "t")
    assert display.fmt_co2e(None) == ("n/a", "t")


# --- sheets -------------------------------------------------------------------------


def known_sheet() -> SheetRecord:
    return replace(
        make_sheet(0),
        **{
            "building_id": "B-KNOWN",
            "name": "Kestrel Row Depot",
            "actual_heating": 1234567.8,
            "expected_heating": 867000.4,
            "ratio": 1.4234,
            "excess_energy": 367567.4,
            "excess_cost": 12345.6,
            "excess_co2e_kg": 25400.0,
            "heating_intensity": 7.412,
            "peer_median_intensity": 5.55,
            "expected_recoverable_cost": 9876.7,
            "expected_recoverable_co2e_kg": 18300.0,
            "waste_kind": "Likely heat loss: check outdoor air and dampers.",
            "evidence_scale": "peers",
            # the bills' unit: therm = 100 kBtu
            "actual_heating_billed": 12345.678,
            "expected_heating_billed": 8670.004,
            "heating_cost": 13580.2,
        },
    )


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """Render a few sheets once (one process): known, annual, extremes; plus one A4 sheet."""
    out = tmp_path_factory.mktemp("sheets")
    sheets = [known_sheet(), make_sheet(5, annual=True)] + extreme_sheets()
    stats: dict = {}
    records: list[logging.LogRecord] = []

    class Grab(logging.Handler):
        def emit(self, record):
            records.append(record)

    h = Grab(level=logging.WARNING)
    logging.getLogger("weasyprint").addHandler(h)
    try:
        paths = pdf.render_sheets(sheets, out / "letter", workers=1, stats=stats)
        a4 = pdf.render_sheets([make_sheet(6, units="SI")], out / "a4", paper="A4", workers=1)
    finally:
        logging.getLogger("weasyprint").removeHandler(h)
    return {"sheets": sheets, "paths": paths, "a4": a4, "stats": stats, "out": out, "records": records}


def test_every_sheet_is_one_page_of_the_right_size(rendered):
    for p in rendered["paths"]:
        r = PdfReader(p)
        assert len(r.pages) == 1, p
        box = r.pages[0].mediabox
        assert float(box.width) == pytest.approx(LETTER[0], abs=0.5)
        assert float(box.height) == pytest.approx(LETTER[1], abs=0.5)
    r = PdfReader(rendered["a4"][0])
    assert len(r.pages) == 1
    assert (float(r.pages[0].mediabox.width), float(r.pages[0].mediabox.height)) == pytest.approx(A4, abs=0.5)


def test_overflowing_sheet_was_shrunk_not_split(tmp_path, monkeypatch):
    """A sheet that runs over one page in the batch is re-rendered alone, smaller."""
    big = replace(extreme_sheets()[0], building_id="X-BIG")
    # let level 0 show every item so this sheet cannot fit; the shrink levels still cut
    monkeypatch.setattr(
        sv, "LIMITS", [dict(paging.LIMITS[0], flags=40, issues=40, steps=40, asm=40)] + paging.LIMITS[1:]
    )
    st: dict = {}
    paths = pdf.render_sheets([make_sheet(0), big, make_sheet(1)], tmp_path, workers=1, stats=st)
    assert st["batched"] == 2 and st["refit"] == 1
    assert all(1 <= lv <= paging.MAX_LEVEL for lv in st["levels"])
    assert all(len(PdfReader(p).pages) == 1 for p in paths)
    assert "X-BIG" in PdfReader(paths[1]).pages[0].extract_text()


def test_key_numbers_in_text(rendered):
    text = PdfReader(rendered["paths"][0]).pages[0].extract_text()
    # expected strings by hand from the fixture values and the documented formats
    # (the sheet's emissions figure is the expected recoverable one: 18,300 kg = 18.3 t)
    for s in [
        "Kestrel Row Depot",
        "B-KNOWN",
        "1,234,568",
        "867,000",
        "1.42",
        "367,567",
        "$12,346",
        "$9,877",
        "12,346 therms",
        "8,670 therms",
        "$13,580",
        "18.3",
        "Likely heat loss",
        "its peers' spread",
        "7.41",
        "5.55",
        "screening estimate",
        "combustion",
        "minimum indoor temperatures",
        "licensed",
    ]:
        assert s in text, s


def test_hostile_markup_is_literal_text(rendered):
    k = [i for i, s in enumerate(rendered["sheets"]) if s.name == HOSTILE_NAME][0]
    with pdfplumber.open(rendered["paths"][k]) as doc:
        text = doc.pages[0].extract_text()
    flat = text.replace("\n", " ")
    assert '<script>alert("x")</script>' in flat
    assert '<img src="http://198.51.100.7/track.png">' in flat
    assert "Smith &" in flat and "Sons" in flat and "{{ 7*7 }}" in flat
    assert "<svg onload=alert(1)>" in flat


def test_no_fetch_leaves_the_templates(rendered):
    f = pdf._state()["fetcher"]
    root = templates_dir().resolve().as_uri()
    assert f.refused == []
    assert f.requested and all(u.startswith(("data:", root)) for u in f.requested)


def test_split_files_stand_alone(rendered):
    for sheet, p in zip(rendered["sheets"], rendered["paths"]):
        r = PdfReader(p)
        assert r.metadata.title == sv.sheet_title(sheet)
        fonts = r.pages[0]["/Resources"]["/Font"]
        assert len(fonts) >= 2
        for f in fonts.values():
            desc = f.get_object()["/DescendantFonts"][0].get_object()["/FontDescriptor"].get_object()
            assert "/FontFile2" in desc  # TrueType program embedded
    # only the sheets were written, all inside the output folder, with safe names
    out = rendered["out"] / "letter"
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in rendered["paths"])
    assert all(p.parent == out.resolve() for p in rendered["paths"])
    assert sorted(p.name for p in rendered["out"].iterdir()) == ["a4", "letter"]


def _resolve_all(obj, reader, seen, missing):
    """Follow every indirect reference below ``obj``; collect those that do not resolve."""
    from pypdf.generic import ArrayObject, DictionaryObject, IndirectObject, NullObject, StreamObject

    if isinstance(obj, IndirectObject):
        if obj.idnum in seen:
            return
        seen.add(obj.idnum)
        target = reader.get_object(obj)
        if target is None or isinstance(target, NullObject):
            missing.append(obj.idnum)
            return
        obj = target
    if isinstance(obj, (DictionaryObject, StreamObject)):
        for v in obj.values():
            _resolve_all(v, reader, seen, missing)
    elif isinstance(obj, ArrayObject):
        for v in obj:
            _resolve_all(v, reader, seen, missing)


def test_split_files_are_well_formed(rendered):
    """Every object a split file refers to is in it, at the offset its cross-reference
    table gives (PDF 1.7, ISO 32000-1 sections 7.3.10 and 7.5.8), and the page draws only
    resources its own dictionary holds."""
    for p in rendered["paths"][:3] + rendered["a4"]:
        data = p.read_bytes()
        assert data.startswith(b"%PDF-1.") and data.rstrip().endswith(b"%%EOF")
        r = PdfReader(p, strict=True)
        seen: set[int] = set()
        missing: list[int] = []
        for key in ("/Root", "/Info"):
            _resolve_all(r.trailer.raw_get(key), r, seen, missing)
        assert missing == [], (p.name, missing)
        # each listed object starts where the cross-reference stream says
        offsets = r.xref[0]
        assert len(offsets) >= 10
        for num, off in offsets.items():
            assert data[off : off + 24].startswith(f"{num} 0 obj".encode()), (p.name, num, off)
        # the only pages object holds this one page
        assert r.trailer["/Root"]["/Pages"]["/Count"] == 1
        content = r.pages[0].get_contents().get_data()
        xobjects = r.pages[0]["/Resources"].get("/XObject", {})
        drawn = set(re.findall(rb"/([^\s/\[\]()<>{}%]+)\s+Do\b", content))
        assert {k[1:].encode() for k in xobjects} == drawn


def test_no_weasyprint_warnings(rendered):
    # the one environment warning allowed: this image lacks the HarfBuzz-Subset library,
    # so WeasyPrint subsets fonts with fontTools (slower, same output)
    msgs = [r.getMessage() for r in rendered["records"] if "HarfBuzz-Subset" not in r.getMessage()]
    assert msgs == []


def test_process_pool_path(tmp_path):
    sheets = [make_sheet(i) for i in range(4)]
    st: dict = {}
    paths = pdf.render_sheets(sheets, tmp_path, workers=2, chunk_size=2, stats=st)
    assert st["chunks"] == 2 and st["batched"] == 4
    assert [p.stem for p in paths] == [s.building_id for s in sheets]
    assert all(len(PdfReader(p).pages) == 1 for p in paths)


@pytest.mark.parametrize("how", ["stdin", "file"])
def test_a_script_without_a_main_guard_renders_with_workers(tmp_path, how):
    # A caller's script read from stdin, or a file without `if __name__ == "__main__":`, must not
    # run again in the render workers (forkserver children import the parent's __main__ first):
    # the marker file would then hold more than one line.
    import os
    import subprocess
    import sys

    marker = tmp_path / "ran.txt"
    script = (
        "from pathlib import Path\n"
        "from screening.render import pdf\n"
        "from tests.sheet_fixtures import make_sheet\n"
        f"with open({str(marker)!r}, 'a') as fh:\n"
        "    fh.write('x\\n')\n"
        f"paths = pdf.render_sheets([make_sheet(i) for i in range(4)], Path({str(tmp_path / 'out')!r}),\n"
        "                              workers=2, chunk_size=2)\n"
        "print(len(paths))\n"
    )
    root = str(templates_dir().parent)
    if how == "stdin":
        proc = subprocess.run(
            [sys.executable, "-"], input=script, capture_output=True, text=True, cwd=root, timeout=120
        )
    else:
        (tmp_path / "job.py").write_text(script, encoding="utf-8")
        proc = subprocess.run(
            [sys.executable, str(tmp_path / "job.py")],
            capture_output=True,
            text=True,
            cwd=root,
            timeout=120,
            env={**os.environ, "PYTHONPATH": root},
        )
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert proc.stdout.strip() == "4"
    assert marker.read_text().count("x") == 1
    assert len(list((tmp_path / "out").glob("*.pdf"))) == 4


def test_render_sheets_bad_arguments(tmp_path):
    with pytest.raises(ValueError, match=r"paper must be one of \['A4', 'Letter'\], got 'A3'"):
        pdf.render_sheets([], tmp_path, paper="A3")
    with pytest.raises(ValueError, match=r"workers must be an int >= 1, got 0"):
        pdf.render_sheets([], tmp_path, workers=0)
    with pytest.raises(ValueError, match=r"sheets\[0\] must be a SheetRecord with a str building_id, got dict"):
        pdf.render_sheets([{"building_id": 3}], tmp_path)


def test_sheet_view_with_missing_fields_is_complete():
    v = sv.sheet_view(extreme_sheets()[1], 0)
    assert v["actual_heating"] == "n/a" and v["excess_cost"] == "n/a" and v["place"] == ""
    with pytest.raises(ValueError, match=r"level must be 0..3, got 9"):
        sv.sheet_view(make_sheet(0), 9)


# --- ranking ------------------------------------------------------------------------


def test_ranking_pdf(tmp_path):
    rep = make_report(90)
    rep["rows"][0]["name"] = HOSTILE_NAME
    out = pdf.render_ranking(rep, tmp_path / "ranking.pdf")
    r = PdfReader(out)
    n = len(r.pages)
    assert n >= 4  # summary, at least two table pages for 90 rows, data issues
    assert r.metadata.title == "Heating screening ranking, run run-20260302-01"
    texts = [p.extract_text() for p in r.pages]
    first = texts[0]
    for s in [
        "Top ten",
        "By tier",
        display.fmt_num(rep["totals"]["excess_energy"]),
        display.fmt_money(rep["totals"]["excess_cost"]),
        "look closer",
    ]:
        assert s in first, s
    # nested counts (per tier / flag / data issue) are shown as their own lists, never as "n/a"
    assert "n/a" not in first
    n_high = rep["counts"]["per_flag"]["high_ratio"]
    assert any(ln.strip() == f"high_ratio {n_high}" for ln in first.splitlines()), first
    assert any(
        ln.strip() == f"estimated_reads {rep['counts']['per_data_issue']['estimated_reads']}"
        for ln in first.splitlines()
    )
    assert any(ln.strip() == "with data issues 13" for ln in first.splitlines())  # 90 rows, every 7th from 3
    table_pages = [t for t in texts if "Owlbrook Court" in t and "Top ten" not in t and "Data issues" not in t]
    assert len(table_pages) >= 2
    for t in table_pages:  # the header repeats on every page of the table (a header may wrap)
        assert "intensity" in t and "excess" in t and "cost" in t
    for i, t in enumerate(texts, 1):
        assert f"page {i} of {n}" in t
        assert "run run-20260302-01" in t
    assert "Data issues" in texts[-1] and "estimated_reads" in texts[-1]
    assert '<script>alert("x")</script>' in "".join(texts).replace("\n", "")
    # every ranked row's ratio appears, in rank order, in the table pages
    body = "\n".join(texts[1:])
    pos = [body.find(f"Owlbrook Court {k}") for k in range(1, 90)]
    assert all(p >= 0 for p in pos) and pos == sorted(pos)


def test_ranking_a4_and_empty(tmp_path):
    rep = make_report(0)
    out = pdf.render_ranking(rep, tmp_path / "r.pdf", paper="A4")
    r = PdfReader(out)
    assert (float(r.pages[0].mediabox.width), float(r.pages[0].mediabox.height)) == pytest.approx(A4, abs=0.5)
    assert "No buildings ranked." in r.pages[0].extract_text()
    with pytest.raises(ValueError, match=r"report must be a dict, got list"):
        pdf.render_ranking([], tmp_path / "x.pdf")


@pytest.mark.parametrize("paper", ["Letter", "A4"])
def test_ranked_table_pages_never_overflow(tmp_path, paper, monkeypatch):
    """Rows are wrapped and split into pages in Python (the text columns do not break by
    themselves): every page must hold its lines without spilling, so the page count is exactly
    summary + table pages + data issues, and every rank shows once, in order, under a header."""
    monkeypatch.setattr(rv, "MAX_ISSUE_LINES", 5)
    rep = make_report(300)
    rep["rows"][1]["name"] = "W" * 200  # wrapped to MAX_CELL_LINES lines, the last ending in …
    rep["rows"][2]["flags"] = ["high_ratio"] * 12
    # a summary as full as the demo's: eight flag kinds, tiers with their meanings
    rep["counts"]["per_flag"] = {f"flag_kind_{k}": 10 * k for k in range(8)}
    rep["tiers"] = [dict(t, meaning="strong evidence of excess heating and a large excess") for t in rep["tiers"]]
    out = pdf.render_ranking(rep, tmp_path / "r.pdf", paper=paper)
    view = rv.ranking_view(rep, paper)
    pages = view["table_pages"]
    budget = paging.ROWS_PER_PAGE[paper] - (view["header"]["lines"] - 1)
    for k, pg in enumerate(pages):
        assert pg["lines"] <= budget - (paging.FIRST_PAGE_LOSS if k == 0 else 0)
        assert sum(p["lines"] for p in pg["parts"]) == pg["lines"]
        for p in pg["parts"]:  # every block (or column) of a part as tall as the part
            texts = [c["text"] for c in p["cols"]] if p["cols"] else [p["a"], p["b"]]
            assert all(t.count("\n") + 1 == p["lines"] for t in texts)
            assert float(p["height"]) == pytest.approx(p["lines"] * paging.ROW_PT)
        assert sum(float(h) for h in pg["stripes"]) == pytest.approx(pg["lines"] * paging.ROW_PT)  # a stripe a row
    n_table = len(pages)
    texts = [p.extract_text() for p in PdfReader(out).pages]
    assert len(texts) == 1 + n_table + 1
    for t in texts[1 : 1 + n_table]:
        assert "intensity" in t and "excess" in t and "issues" in t
    ids = re.findall(r"\bB-(\d+)\b", "\n".join(texts[1 : 1 + n_table]))
    assert ids == [str(1000 + k) for k in range(300)]  # make_report: rank k+1 has id B-(1000+k)
    # the long name: wrapped, at most MAX_CELL_LINES lines, the last cut with …
    lines = "\n".join(p["a"] for p in pages[0]["parts"]).split("\n")
    w_lines = [w for ln in lines for w in ln.split() if w.startswith("WW")]  # split() splits at the spacing too
    assert len(w_lines) == paging.MAX_CELL_LINES and w_lines[-1].endswith("…")
    n_issues = len(rep["data_issues"])
    assert f"and {n_issues - 5} more in data_issues.csv" in texts[-1]
    assert sum(c[2] for c in paging.RANK_COLUMNS) == pytest.approx(99.5)  # 100% wraps the last float on A4


def test_spacing_reaches_a_distance_with_space_characters():
    """Fields of the ranked table are moved to their column by space characters (paging._spacing):
    their advances (from the font, as text_width) add up to the distance asked for, to within
    0.016 em (0.11 pt at 7.2 pt), and every one of them is whitespace to text extraction."""
    import numpy as np

    for bold in (False, True):
        for dist in np.linspace(0.4, 80.0, 4000):
            spaces, adv = paging._spacing(float(dist), bold)
            assert abs(adv - dist) <= 0.016, (bold, dist, adv)
            assert adv == pytest.approx(paging.text_width(spaces, 1.0, bold=bold), abs=1e-9)
            assert spaces.isspace() and len(spaces) <= dist / 0.9 + 5
    assert paging._spacing(0.0, False) == ("", 0.0) and paging._spacing(-3.0, False) == ("", 0.0)


def _table_geometry(path, paper):
    """Per table page of a rendered ranking.pdf: its words (pdfplumber) from the header down and
    the column edges [pt] of paging.RANK_COLUMNS."""
    side = 12 * 72 / 25.4
    width = {"Letter": 612.0, "A4": 595.28}[paper] - 2 * side
    edges = [side]
    for _key, _h, w, _r in paging.RANK_COLUMNS:
        edges.append(edges[-1] + width * w / 100)
    out = []
    with pdfplumber.open(path) as doc:
        for page in doc.pages:
            words = page.extract_words(x_tolerance=1.5, y_tolerance=1)
            head = [w for w in words if w["text"] == "intensity"]
            if head:
                out.append([w for w in words if w["top"] >= head[0]["top"] - 3 and w["bottom"] < page.height - 40])
    return out, edges


@pytest.mark.parametrize("paper", ["Letter", "A4"])
def test_ranked_table_columns_line_up(tmp_path, paper):
    """Set as lines of text with space characters, every column still lines up: on every line of
    every table page the left-aligned fields start 0.8 mm inside their column and the right-aligned
    ones end 0.8 mm inside it, to within 0.1 pt (pdfplumber's glyph boxes: the font's advances),
    the header and the rows set as one block per column (a name in Hebrew and one in CJK
    ideographs, drawn by fallback fonts) included."""
    rep = make_report(120)
    rep["rows"][4]["name"] = "בית ספר הגפן"
    # without a CJK font the ideographs would be .notdef boxes and pdfplumber would read none of the bold
    # face's text (tests/sheet_fixtures.scripts_without_font): then a Cyrillic name, drawn by DejaVu
    cjk = "chinese" not in scripts_without_font()
    rep["rows"][70]["name"] = "梅園会館 East" if cjk else "Дом культуры East"
    rep["rows"][9]["name"] = "Ashcombe Courtyard Residences North Wing"  # wraps
    out = pdf.render_ranking(rep, tmp_path / "r.pdf", paper=paper)
    view = rv.ranking_view(rep, paper)
    assert sum(1 for pg in view["table_pages"] for p in pg["parts"] if p["cols"]) == 2  # the two fallback rows
    pages, edges = _table_geometry(out, paper)
    assert len(pages) == len(view["table_pages"]) >= 2
    pad = 0.8 * 72 / 25.4
    checked = 0
    for words in pages:
        lines: dict[float, list[dict]] = {}
        for w in words:
            lines.setdefault(round(w["top"]), []).append(w)
        for top, ws in lines.items():
            for j, (_key, _h, _w, right) in enumerate(paging.RANK_COLUMNS):
                cell = [w for w in ws if edges[j] - 0.5 <= w["x0"] and w["x1"] <= edges[j + 1] + 0.5]
                if not cell:
                    continue
                checked += 1
                if right:
                    assert max(w["x1"] for w in cell) == pytest.approx(edges[j + 1] - pad, abs=0.1), (top, cell)
                else:
                    assert min(w["x0"] for w in cell) == pytest.approx(edges[j] + pad, abs=0.1), (top, cell)
    assert checked > 120 * 8


def test_ranked_table_text_reads_in_row_order(tmp_path):
    """Text extraction gives each row's fields on one line, left to right (with whitespace between
    them: the spacing characters are whitespace), and no other characters than the fields'."""
    rep = make_report(30)
    out = pdf.render_ranking(rep, tmp_path / "r.pdf")
    text = PdfReader(out).pages[1].extract_text()  # in drawing order: flags and issues are a second block
    with pdfplumber.open(out) as doc:
        placed = doc.pages[1].extract_text()  # by position
    assert "\t" not in text
    for extracted, by_position in ((text, False), (placed, True)):
        lines = [" ".join(ln.split()) for ln in extracted.splitlines()]
        for r in rep["rows"][:20]:
            start = f"{r['rank']} {r['building_id']} {r['name']} {r['use_type']} {r['tier']} {display.fmt_ratio(r['ratio'])}"
            line = next((ln for ln in lines if ln.startswith(start)), None)
            assert line is not None, (start, lines[:8])
            end = " ".join(
                [display.fmt_money(r["excess_cost"])] + (r["flags"] + r["data_issues"] if by_position else [])
            )
            assert line.endswith(end), (line, end)


def test_wrap_measures_the_font():
    """_wrap breaks after blanks and ; , / (a code too long for a line after a _), never wider than
    asked by the font's advance widths; a line of one character that does not fit still advances."""
    size = 7.2
    lines = paging.wrap("above_band; high_among_peers; envelope_defaulted", 70.0, size)
    assert lines == ["above_band;", "high_among_peers;", "envelope_defaulted"]
    assert all(paging.text_width(ln, size) <= 70.0 for ln in lines)
    assert paging.wrap("high_balance_point", 40.0, size) == ["high_", "balance_", "point"]
    assert paging.wrap("", 40.0, size) == [""]
    # widths by hand from the font: "B0010" is five glyphs of the condensed face
    assert paging.text_width("B0010", 10.0) == pytest.approx(29.0, abs=2.0)
    assert paging.text_width("漢", 10.0) == 10.0  # not in the font: 1 em
    assert paging.wrap("x" * 400, 20.0, size, max_lines=3)[-1].endswith("…")


def test_split_file_does_not_carry_other_sheets_resources(tmp_path):
    """WeasyPrint shares one resource dictionary between the pages of a chunk; a split file
    must hold only its own page's resources, so its size does not grow with the chunk.
    (A background gradient, for one, is a shared /Pattern that the split would copy.)"""
    sheets = [make_sheet(i) for i in range(8)]
    alone = pdf.render_sheets(sheets[:1], tmp_path / "one", workers=1)[0].stat().st_size
    in_chunk = pdf.render_sheets(sheets, tmp_path / "eight", workers=1)[0].stat().st_size
    # by hand: the other sheets' charts alone would add several times one sheet's size;
    # fonts subset over eight sheets' glyphs may add a little, hence 1.3
    assert in_chunk < 1.3 * alone, (alone, in_chunk)


def test_pages_are_still_written_when_the_fast_split_is_unavailable(tmp_path, monkeypatch, caplog):
    # the splitter reads pydyf internals; if a release changes them, the public API writes the pages
    def broken(self, document, pdf):
        raise AttributeError("'PDF' object has no attribute 'objects'")

    monkeypatch.setattr(pdfsplit.PageSplitter, "__call__", broken)
    sheets = [make_sheet(i) for i in range(3)]
    with caplog.at_level(logging.WARNING, logger="screening.render.pdfsplit"):
        paths = pdf.render_sheets(sheets, tmp_path, workers=1)
    assert "fast page split unavailable" in caplog.text
    for p, s in zip(paths, sheets):
        r = PdfReader(p)
        assert len(r.pages) == 1 and s.building_id in r.metadata.title
        assert s.building_id in r.pages[0].extract_text()


def test_a_bidi_override_in_a_name_does_not_reverse_the_title(tmp_path):
    """U+202E (right-to-left override) in a name would draw the rest of the title backwards;
    the sheet shows the name in its own order (issue 15)."""
    s = replace(make_sheet(0), building_id="B-BIDI", name="Kestrel \u202eRow Depot\u202c")
    assert sv.sheet_title(s).startswith("Kestrel Row Depot")
    (path,) = pdf.render_sheets_one_by_one([s], tmp_path)
    with pdfplumber.open(path) as doc:
        text = doc.pages[0].extract_text()
    assert "Kestrel Row Depot" in text and "topeD" not in text


# --- the sheet record -----------------------------------------------------------------


def test_the_sheet_record_is_frozen_and_refuses_unknown_fields():
    s = make_sheet(0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.name = "changed"  # the point: a frozen record refuses it
    assert replace(s, name="changed").name == "changed" and s.name != "changed"
    with pytest.raises(TypeError, match="colour"):
        SheetRecord.from_dict({"building_id": "B-1", "colour": "red"})
    assert SheetRecord.from_dict(s.to_dict()) == s
    bare = SheetRecord(building_id="B-2")  # every other field may be missing
    assert bare.flags == [] and bare.fit is None and sv.sheet_view(bare)["actual_heating"] == "n/a"


def test_outputs_fills_every_field_of_the_sheet_record():
    """outputs.sheet_records names every field in its one SheetRecord(...) call, so a field added to the
    record without a value from the results fails here (read from the source: no screening needed)."""
    from screening import outputs

    tree = ast.parse(textwrap.dedent(inspect.getsource(outputs.sheet_records)))
    calls = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "id", "") == "SheetRecord"]
    assert len(calls) == 1
    named = {k.arg for k in calls[0].keywords}
    assert named == {f.name for f in dataclasses.fields(SheetRecord)}


def test_render_rooms_import_only_the_rooms_listed_above_them():
    """screening/render/__init__ lists its rooms lowest first: each imports only rooms above it, and from the
    rest of the package only what sits below the output writers (never outputs, pipeline or runner)."""
    from pathlib import Path

    import screening.render as pkg

    order = re.findall(r"^- ``(\w+)``", pkg.__doc__ or "", flags=re.M)
    folder = Path(pkg.__file__).parent
    assert sorted(order) == sorted(p.stem for p in folder.glob("*.py") if p.stem != "__init__")
    allowed_outside = {"errors", "resources", "schema", "interrupts", "lifeline", "__version__"}
    for k, mod in enumerate(order):
        tree = ast.parse((folder / f"{mod}.py").read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if not isinstance(node, ast.ImportFrom) or not node.level:
                continue
            names = [node.module] if node.module else [a.name for a in node.names]
            if node.level == 1:
                assert all(n in order[:k] for n in names), (mod, names)
            else:
                assert all((n or "").split(".")[0] in allowed_outside for n in names), (mod, names)


@pytest.mark.parametrize("screening_children", [False, True])
def test_fork_server_preloads_the_screening_only_for_workers(screening_children):
    """A run without ``[run] workers`` children starts the fork server without polars and DuckDB, and
    ranking.pdf's renderer does not import them (about 0.25 CPU-s a run); with workers they are preloaded
    once, for every child. In a fresh process: the fork server is one per process."""
    import subprocess
    import sys

    script = (
        "from screening.render import pdf\n"
        "from tests.sheet_fixtures import loaded_modules\n"
        f"pdf.warm_up(screening={screening_children})\n"
        "b = pdf.Background(loaded_modules, ('polars', 'duckdb', 'weasyprint', 'screening.pipeline'))\n"
        "print(b.result())\n"
    )
    root = str(templates_dir().parent)
    proc = subprocess.run([sys.executable, "-"], input=script, capture_output=True, text=True, cwd=root, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    got = proc.stdout.strip().splitlines()[-1]
    if screening_children:
        assert got == "['duckdb', 'polars', 'screening.pipeline', 'weasyprint']"
    else:
        assert got == "['weasyprint']"
        # and what ranking.pdf's renderer imports (render_ranking imports the savings page) brings no polars
        check = (
            "import sys\nimport screening.render.pdf, screening.render.savings_page\nprint('polars' in sys.modules)\n"
        )
        proc = subprocess.run([sys.executable, "-"], input=check, capture_output=True, text=True, cwd=root, timeout=60)
        assert proc.returncode == 0 and proc.stdout.strip() == "False", proc.stderr[-2000:]
