"""Fitting on pages (pure): paper sizes, the sheet's shrink levels, the ranked table cut into pages.

A sheet must fit one page: ``LIMITS`` says, per shrink level, how many items and characters the sheet
view shows; the renderer (``pdf``) tries level 0 for a whole chunk and re-renders a sheet that ran over
at levels 1..``MAX_LEVEL``, finding each sheet's first page with ``sheet_starts``. The ranked table of
ranking.pdf is wrapped to its columns with the bundled font's advance widths (``text_width``, ``wrap``)
and cut into pages here (``table_pages``), so each page repeats its header (DEVELOPERS.md "ranking.pdf:
the ranked table as text columns").
"""

from __future__ import annotations

import re
import unicodedata
from typing import Any

from ..resources import templates_dir
from .display import CONTROL_CHARS

PAPERS = {"Letter": "letter", "A4": "A4"}
# content width of a sheet [mm]: paper width minus the 12 mm side margins of sheet.css
CONTENT_MM = {"Letter": 215.9 - 24, "A4": 210.0 - 24}

# per shrink level: max items shown and max characters of each text
LIMITS = [
    dict(name=300, text=600, expl=400, flags=8, issues=6, steps=6, cautions=3, asm=24, caution_len=300),
    dict(name=300, text=500, expl=260, flags=8, issues=5, steps=5, cautions=3, asm=24, caution_len=240),
    dict(name=160, text=300, expl=160, flags=5, issues=3, steps=4, cautions=2, asm=16, caution_len=200),
    dict(name=100, text=200, expl=110, flags=3, issues=2, steps=3, cautions=1, asm=10, caution_len=160),
]
MAX_LEVEL = len(LIMITS) - 1

# The ranked table is laid out as pages of side-by-side columns of newline-separated text
# (white-space: pre; one box per column and page instead of one per cell): measured
# ~8x cheaper than the <table> it replaced (DEVELOPERS.md "Rendering"). The text does not
# wrap by itself, so every field is wrapped here to its column's width, measured with the
# font's own advance widths (``text_width``), and the other columns of that row get blank
# lines; a row takes as many lines as its tallest field (at most ``MAX_CELL_LINES``). The rows
# are split into pages here, so each page repeats the header, and a stripe per row (zebra)
# lies behind the text. RANK_COLUMNS: key, header, width %, right-aligned; widths add up to
# 99.5%, as 100% wraps the last float on A4 by rounding.
RANK_COLUMNS = [
    ("rank", "#", 4.5, True),
    ("building_id", "id", 6.5, False),
    ("name", "name", 12.5, False),
    ("use_type", "use", 8.0, False),
    ("tier", "tier", 9.0, False),
    ("ratio", "ratio", 6.0, True),
    ("heating_intensity", "intensity", 7.2, True),
    ("expected_recoverable_cost", "exp. savings", 9.5, True),
    ("excess_cost", "excess cost", 8.5, True),
    ("flags", "flags", 15.8, False),
    ("data_issues", "data issues", 12.0, False),
]
# Lines per table page. Content heights: page height minus the 14 + 16 mm margins of
# ranking.css (Letter 792 pt, A4 841.89 pt); one line is the 9.6 pt line of .tbl; the header
# band (one line), the page's bottom border and a safety margin take 40 pt; the first table page
# also carries the section title and its note (58 pt). A header of more lines takes them off
# every page. Checked by test_report's page counts.
ROW_PT = 9.6
ROWS_PER_PAGE = {paper: int((h - 30 * 72 / 25.4 - 40) // ROW_PT) for paper, h in (("Letter", 792.0), ("A4", 841.89))}
FIRST_PAGE_LOSS = 6
MAX_CELL_LINES = 6  # a field longer than this many lines ends its last line with "…"
_TABLE_PT = {"body": 7.2, "small": 6.6}  # ranking.css: .thead/.tbl font size; .k9/.k10 (flags, issues)
_CELL_PAD_MM = 0.8  # ranking.css: padding left and right of each column
COLUMN_CSS = [{"cls": f"k{j}", "width": w, "right": right} for j, (_k, _h, w, right) in enumerate(RANK_COLUMNS)]


_ADVANCES: dict[bool, dict[int, float]] = {}


def text_width(text: str, size: float, *, bold: bool = False) -> float:
    """Width [pt] of ``text`` in the report's font at ``size`` pt: the sum of its glyphs' advance
    widths (the fonts have no kerning or layout tables). A character the font lacks is drawn by a
    fallback font: counted as 1 em, about the widest (CJK ideographs)."""
    adv = _ADVANCES.get(bold)
    if adv is None:
        from fontTools.ttLib import TTFont  # weasyprint's own dependency

        f = TTFont(
            str(templates_dir() / "fonts" / ("ddscreen-sans-bold.ttf" if bold else "ddscreen-sans.ttf")), lazy=True
        )
        upm, hmtx = f["head"].unitsPerEm, f["hmtx"]
        adv = _ADVANCES[bold] = {cp: hmtx[g][0] / upm for cp, g in f.getBestCmap().items()}
    return size * sum(adv.get(ord(c), 0.0 if unicodedata.combining(c) else 1.0) for c in text)


_BREAK_AFTER = re.compile(r"(?<=[\s;,/])")  # a line may break after a blank, ; , or /


def wrap(text: str, width: float, size: float, *, bold: bool = False, max_lines: int = MAX_CELL_LINES) -> list[str]:
    """``text`` as lines no wider than ``width`` pt: broken after blanks and ``; , /``, a word too
    long for a line broken after a ``_`` (flag codes) or else between characters; at most ``max_lines`` lines, the last then ending in …"""
    text = CONTROL_CHARS.sub(" ", text).strip()
    if not text:
        return [""]

    def fits(t: str) -> bool:
        return text_width(t.rstrip(), size, bold=bold) <= width

    lines: list[str] = []
    line = ""
    for tok in _BREAK_AFTER.split(text):
        if not tok:
            continue
        if fits(line + tok):
            line += tok
            continue
        if line:
            lines.append(line.rstrip())
            line = ""
        while not fits(tok):  # a word wider than the column: cut it where it fills a line
            k = 1
            while k < len(tok) and fits(tok[: k + 1]):
                k += 1
            under = tok.rfind("_", 0, k)
            k = under + 1 if under > 0 else k
            lines.append(tok[:k])
            tok = tok[k:]
        line = tok
    if line.strip():
        lines.append(line.rstrip())
    if len(lines) > max_lines:
        last = lines[max_lines - 1]
        while last and not fits(last + "…"):
            last = last[:-1]
        lines = lines[: max_lines - 1] + [last.rstrip() + "…"]
    return lines


def _column_widths(paper: str) -> list[float]:
    """Each ranked-table column's text width [pt] on ``paper``: its share of the content width
    (the page less ranking.css's 12 mm side margins) less its padding, and 0.5 pt to spare."""
    content = (CONTENT_MM[paper]) * 72 / 25.4
    return [content * w / 100 - 2 * _CELL_PAD_MM * 72 / 25.4 - 0.5 for _k, _h, w, _r in RANK_COLUMNS]


def table_header(paper: str, eu: str) -> list[dict[str, str]]:
    cols = [
        wrap(h.format(eu=eu), w, _TABLE_PT["body"], bold=True)
        for (_k, h, _w, _r), w in zip(RANK_COLUMNS, _column_widths(paper))
    ]
    n = max(len(c) for c in cols)
    return [{"cls": f"k{j}", "text": "\n".join(c + [""] * (n - len(c)))} for j, c in enumerate(cols)]


def table_pages(rows: list[dict[str, str]], paper: str, header_lines: int = 1) -> list[dict[str, Any]]:
    """The ranked rows cut into pages: per page the column texts (each row's fields wrapped to
    their column and padded with blank lines to the row's height) and each row's height [pt]."""
    widths = _column_widths(paper)
    sizes = [
        _TABLE_PT["small"] if key in ("flags", "data_issues") else _TABLE_PT["body"] for key, _h, _w, _r in RANK_COLUMNS
    ]
    wrapped = []
    for r in rows:
        cells = [wrap(r[key], w, size) for (key, _h, _w, _r), w, size in zip(RANK_COLUMNS, widths, sizes)]
        wrapped.append((max(len(c) for c in cells), cells))
    budget = ROWS_PER_PAGE[paper] - (header_lines - 1)
    pages: list[dict[str, Any]] = []
    i, first = 0, True
    while i < len(wrapped):
        room = budget - (FIRST_PAGE_LOSS if first else 0)
        chunk: list[tuple[int, list[list[str]]]] = []
        while i < len(wrapped) and (not chunk or sum(n for n, _ in chunk) + wrapped[i][0] <= room):
            chunk.append(wrapped[i])
            i += 1
        pages.append(
            {
                "first": first,
                "lines": sum(n for n, _ in chunk),
                "stripes": [f"{n * ROW_PT:g}" for n, _ in chunk],
                "cols": [
                    {
                        "cls": f"k{j}",
                        "text": "\n".join(ln for n, cells in chunk for ln in cells[j] + [""] * (n - len(cells[j]))),
                    }
                    for j in range(len(RANK_COLUMNS))
                ],
            }
        )
        first = False
    return pages


def sheet_starts(doc, n: int) -> list[int] | None:
    """Page index where each sheet starts (from the ``sheet-<k>`` anchors), or None."""
    starts: dict[int, int] = {}
    for i, page in enumerate(doc.pages):
        for anchor in page.anchors:
            if anchor.startswith("sheet-") and anchor[6:].isdigit():
                starts.setdefault(int(anchor[6:]), i)
    if sorted(starts) != list(range(n)):
        return None
    return [starts[k] for k in range(n)]
