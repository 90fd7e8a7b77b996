"""Fitting on pages (pure): paper sizes, the sheet's shrink levels, the ranked table cut into pages.

A sheet must fit one page: ``LIMITS`` says, per shrink level, how many items and characters the sheet
view shows; the renderer (``pdf``) tries level 0 for a whole chunk and re-renders a sheet that ran over
at levels 1..``MAX_LEVEL``, finding each sheet's first page with ``sheet_starts``. The ranked table of
ranking.pdf is wrapped to its columns with the bundled font's advance widths (``text_width``, ``wrap``)
and cut into pages here (``table_pages``), so each page repeats its header (DEVELOPERS.md "ranking.pdf:
the ranked table as text lines").
"""

from __future__ import annotations

import base64
import itertools
import math
import re
import unicodedata
from typing import Any

import numpy as np

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

# The ranked table is laid out per page as a header band and two `white-space: pre` blocks of
# text, each visual line holding every column of that line: WeasyPrint's cost goes with its line
# boxes (~0.25 ms CPU each, blank or not), and a line of all the columns makes ~5x fewer than a
# block per column (DEVELOPERS.md "ranking.pdf: the ranked table as text lines"). The text does not
# wrap by itself, so every field is wrapped here to its column's width, measured with the font's
# own advance widths (``text_width``); a row takes as many lines as its tallest field (at most
# ``MAX_CELL_LINES``). Each field is moved to its column by the font's space characters
# (``_spacing``, within 0.11 pt: the advances are exact, so the pen position is known), a
# right-aligned one by its own width less. Flags and data issues are set smaller: the second
# block. A row with text the face does not draw plainly (a character it lacks, drawn by a fallback
# font of unknown width, or a right-to-left one: ``_plain``) is set as before, one block per
# column. The rows are split into pages here, so each page repeats the header; the zebra (every
# second row) is the page's SVG background (``_stripes_uri``). RANK_COLUMNS: key, header, width %,
# right-aligned; widths add up to 99.5%, as 100% wrapped the last float on A4 by rounding.
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
_SMALL = ("flags", "data_issues")  # the columns set at _TABLE_PT["small"]: the second block (.tb) of a line
_CELL_PAD_MM = 0.8  # ranking.css: padding left and right of each column
COLUMN_CSS = [{"cls": f"k{j}", "width": w, "right": right} for j, (_k, _h, w, right) in enumerate(RANK_COLUMNS)]
# where the second block (.tb: flags and data issues) starts [% of the content width]
SMALL_LEFT_PCT = sum(w for key, _h, w, _r in RANK_COLUMNS[: [c[0] for c in RANK_COLUMNS].index(_SMALL[0])])


_ADVANCES: dict[bool, dict[int, float]] = {}


def _advances(bold: bool) -> dict[int, float]:
    """Advance width [em] of every character of the bundled face (regular or bold)."""
    adv = _ADVANCES.get(bold)
    if adv is None:
        from fontTools.ttLib import TTFont  # weasyprint's own dependency

        f = TTFont(
            str(templates_dir() / "fonts" / ("ddscreen-sans-bold.ttf" if bold else "ddscreen-sans.ttf")), lazy=True
        )
        upm, hmtx = f["head"].unitsPerEm, f["hmtx"]
        adv = _ADVANCES[bold] = {cp: hmtx[g][0] / upm for cp, g in f.getBestCmap().items()}
    return adv


def text_width(text: str, size: float, *, bold: bool = False) -> float:
    """Width [pt] of ``text`` in the report's font at ``size`` pt: the sum of its glyphs' advance
    widths (the fonts have no kerning or layout tables). A character the font lacks is drawn by a
    fallback font: counted as 1 em, about the widest (CJK ideographs)."""
    adv = _advances(bold)
    return size * sum(adv.get(ord(c), 0.0 if unicodedata.combining(c) else 1.0) for c in text)


_BREAK_AFTER = re.compile(r"(?<=[\s;,/])")  # a line may break after a blank, ; , or /


def wrap(
    text: str,
    width: float,
    size: float,
    *,
    bold: bool = False,
    max_lines: int = MAX_CELL_LINES,
) -> list[str]:
    """``text`` as lines no wider than ``width`` pt: broken after blanks and ``; , /``, a word too
    long for a line broken after a ``_`` (flag codes) or else between characters; at most
    ``max_lines`` lines, the last then ending in …"""
    text = CONTROL_CHARS.sub(" ", text).strip()
    if not text:
        return [""]
    lines: list[str] = []
    adv = _advances(bold)

    def em(t: str) -> float:  # as text_width, in em (advances are multiples of 1/unitsPerEm: sums are exact)
        return sum(adv.get(ord(c), 0.0 if unicodedata.combining(c) else 1.0) for c in t)

    def fits(t: str) -> bool:
        return size * em(t.rstrip()) <= width

    line, line_em = "", 0.0  # the line so far and its width [em], trailing blanks included
    for tok in _BREAK_AFTER.split(text):
        if not tok:
            continue
        word = tok.rstrip()
        word_em = em(word)
        if not word or size * (line_em + word_em) <= width:
            line += tok
            line_em += word_em + em(tok[len(word) :])
            continue
        if line:
            lines.append(line.rstrip())
            line = ""
        while not fits(tok):  # a word wider than the column: cut it where it fills a line
            ends = list(itertools.accumulate(em(c) for c in tok))
            k = 1
            while k < len(tok) and size * ends[k] <= width:
                k += 1
            under = tok.rfind("_", 0, k)
            k = under + 1 if under > 0 else k
            lines.append(tok[:k])
            tok = tok[k:]
        line, line_em = tok, em(tok)
    if line.strip():
        lines.append(line.rstrip())
    if len(lines) > max_lines:
        last = lines[max_lines - 1]
        while last and not fits(last + "…"):
            last = last[:-1]
        lines = lines[: max_lines - 1] + [last.rstrip() + "…"]
    return lines


# The space characters of the bundled faces (all "Zs", so text extraction splits words at them):
# em spaces cover a distance but its last 0.6-1.5 em, which the nearest sum of up to three of the
# others (en, figure, ASCII, three-, four-per-em, medium mathematical, thin, six-per-em, hair)
# makes up to within 0.016 em (0.11 pt at 7.2 pt; test_report checks it).
_EM_SPACE = "\u2003"
_FINE_SPACES = " \u2002\u2007\u2004\u2005\u205f\u2009\u2006\u200a"
_FINE_MAX = 3
_SPACING: dict[bool, tuple[float, np.ndarray, list[str]]] = {}


def _spacing_table(bold: bool) -> tuple[float, np.ndarray, list[str]]:
    """The em space's advance [em], and every sum [em] of up to ``_FINE_MAX`` of the other spaces
    (ascending) with the fewest characters that make it."""
    table = _SPACING.get(bold)
    if table is None:
        adv = _advances(bold)
        chars = _EM_SPACE + _FINE_SPACES
        best: dict[float, str] = {}
        for k in range(_FINE_MAX + 1):
            for combo in itertools.combinations_with_replacement(chars, k):
                total = round(sum(adv[ord(c)] for c in combo), 9)
                if total not in best:  # k ascending: the first is the shortest
                    best[total] = "".join(combo)
        sums = sorted(best)
        table = _SPACING[bold] = (adv[ord(_EM_SPACE)], np.array(sums), [best[t] for t in sums])
    return table


def _spacing(dist: float, bold: bool) -> tuple[str, float]:
    """Space characters advancing about ``dist`` [em] (em spaces, then the nearest sum of up to
    ``_FINE_MAX`` finer ones), and their exact advance [em]. Nothing for ``dist`` <= 0."""
    if dist <= 0:
        return "", 0.0
    em, sums, spaces = _spacing_table(bold)
    n = max(0, math.ceil((dist - 1.5) / em))
    rest = dist - n * em
    k = int(np.searchsorted(sums, rest))
    if k == len(sums) or (k > 0 and rest - sums[k - 1] <= sums[k] - rest):
        k -= 1
    return _EM_SPACE * n + spaces[k], n * em + float(sums[k])


_PLAIN: dict[bool, frozenset[str]] = {}


def _plain(texts: list[str], *, bold: bool = False) -> bool:
    """True when every character of ``texts`` is drawn by the bundled face at its advance width
    (in the font, no combining mark, format or control character) and runs left to right. Other
    text is drawn by a fallback font of unknown width, or reordered by the bidirectional algorithm."""
    plain = _PLAIN.get(bold)
    if plain is None:
        plain = _PLAIN[bold] = frozenset(
            chr(cp)
            for cp in _advances(bold)
            if unicodedata.category(chr(cp)) not in ("Mn", "Me", "Cf", "Cc")
            and unicodedata.bidirectional(chr(cp)) not in ("R", "AL")
        )
    return all(plain.issuperset(t) for t in texts)


def _set_line(fields: list[tuple[str, float, bool]], size: float, bold: bool = False) -> str:
    """One visual line of a block: each ``(text, x [pt], right-aligned)`` field placed at ``x``
    from the block's left edge (its right end there if right-aligned), by space characters from
    where the line's text so far ends (its advance widths; the error does not add up along the line)."""
    out: list[str] = []
    pen = 0.0  # [em] where the text so far ends
    for text, x, right in fields:
        if not text:
            continue
        w = text_width(text, 1.0, bold=bold)
        spaces, adv = _spacing((x / size - w if right else x / size) - pen, bold)
        out += (spaces, text)
        pen += adv + w
    return "".join(out)


def _columns(paper: str) -> list[tuple[float, float, bool]]:
    """Each ranked-table column's text width [pt] (its share of the content width, the page less
    ranking.css's 12 mm side margins, less its padding and 0.5 pt to spare), and where its text
    goes [pt from the content's left edge]: the start of a left-aligned text (after its left
    padding), the end of a right-aligned one (before its right padding)."""
    content = CONTENT_MM[paper] * 72 / 25.4
    pad = _CELL_PAD_MM * 72 / 25.4
    out = []
    left = 0.0
    for _k, _h, w, right in RANK_COLUMNS:
        width = content * w / 100
        out.append((width - 2 * pad - 0.5, left + width - pad if right else left + pad, right))
        left += width
    return out


def table_header(paper: str, eu: str) -> dict[str, Any]:
    """The ranked table's header band: its lines and its text, set as one block (bold) or, with a
    character the face does not draw plainly, as one block per column (``cols``)."""
    cols = _columns(paper)
    cells = [
        wrap(h.format(eu=eu), w, _TABLE_PT["body"], bold=True)
        for (_k, h, _w, _r), (w, _x, _r2) in zip(RANK_COLUMNS, cols)
    ]
    n = max(len(c) for c in cells)
    if not _plain([ln for c in cells for ln in c], bold=True):
        return {"lines": n, "text": "", "cols": _column_texts([(n, cells)])}
    text = "\n".join(
        _set_line(
            [(c[i] if i < len(c) else "", x, right) for c, (_w, x, right) in zip(cells, cols)], _TABLE_PT["body"], True
        )
        for i in range(n)
    )
    return {"lines": n, "text": text, "cols": []}


def _column_texts(rows: list[tuple[int, list[list[str]]]]) -> list[dict[str, str]]:
    """Rows as one text per column (a row's fields padded with blank lines to its height)."""
    return [
        {"cls": f"k{j}", "text": "\n".join(ln for n, cells in rows for ln in cells[j] + [""] * (n - len(cells[j])))}
        for j in range(len(RANK_COLUMNS))
    ]


def _block_texts(rows: list[tuple[int, list[list[str]]]], paper: str) -> tuple[str, str]:
    """Rows as the two blocks' texts (a line each): the columns in the body size, and from
    ``SMALL_LEFT_PCT`` on (the flags' padding in) the flags and data issues in the small size."""
    cols = _columns(paper)
    split = [c[0] for c in RANK_COLUMNS].index(_SMALL[0])
    origin = CONTENT_MM[paper] * 72 / 25.4 * SMALL_LEFT_PCT / 100 + _CELL_PAD_MM * 72 / 25.4  # .tb's padding
    a: list[str] = []
    b: list[str] = []
    for n, cells in rows:
        for i in range(n):
            line = [(c[i] if i < len(c) else "", x, right) for c, (_w, x, right) in zip(cells, cols)]
            a.append(_set_line(line[:split], _TABLE_PT["body"]))
            b.append(_set_line([(t, x - origin, right) for t, x, right in line[split:]], _TABLE_PT["small"]))
    return "\n".join(a), "\n".join(b)


STRIPE_FILL = "#f0f0f0"  # every second row's background (the zebra)


def _stripes_uri(heights: list[float]) -> str:
    """The rows' zebra as one SVG (a ``data:`` URI for the table's background, drawn 100% x 100%):
    every second row [pt, top to bottom] filled with ``STRIPE_FILL``; one image a page costs
    far less than a box a row (DEVELOPERS.md "ranking.pdf: the ranked table as text lines")."""
    total = sum(heights)
    tops = itertools.accumulate([0.0, *heights])
    path = "".join(f"M0 {top:g}h100v{h:g}h-100z" for k, (top, h) in enumerate(zip(tops, heights)) if k % 2)
    svg = (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="100" height="{total:g}" viewBox="0 0 100 {total:g}" '
        f'preserveAspectRatio="none"><path fill="{STRIPE_FILL}" d="{path}"/></svg>'
    )
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("ascii")).decode("ascii")


def table_pages(rows: list[dict[str, str]], paper: str, header_lines: int = 1) -> list[dict[str, Any]]:
    """The ranked rows cut into pages: per page its lines, each row's height [pt] (the stripes)
    and its parts, runs of rows set as two blocks of whole lines (``a``, ``b``) or, for rows
    with text the face does not draw plainly (``_plain``), as one text per column (``cols``)."""
    cols = _columns(paper)
    sizes = [_TABLE_PT["small"] if key in _SMALL else _TABLE_PT["body"] for key, _h, _w, _r in RANK_COLUMNS]
    wrapped = []
    for r in rows:
        cells = [wrap(r[key], w, size) for (key, _h, _w, _r), (w, _x, _r2), size in zip(RANK_COLUMNS, cols, sizes)]
        wrapped.append((max(len(c) for c in cells), cells, _plain([ln for c in cells for ln in c])))
    budget = ROWS_PER_PAGE[paper] - (header_lines - 1)
    pages: list[dict[str, Any]] = []
    i, first = 0, True
    while i < len(wrapped):
        room = budget - (FIRST_PAGE_LOSS if first else 0)
        chunk: list[tuple[int, list[list[str]], bool]] = []
        while i < len(wrapped) and (not chunk or sum(n for n, _c, _p in chunk) + wrapped[i][0] <= room):
            chunk.append(wrapped[i])
            i += 1
        parts: list[dict[str, Any]] = []
        for plain, run in itertools.groupby(chunk, key=lambda w: w[2]):
            run_rows = [(n, cells) for n, cells, _p in run]
            lines = sum(n for n, _c in run_rows)
            part: dict[str, Any] = {"lines": lines, "height": f"{lines * ROW_PT:g}", "a": "", "b": "", "cols": []}
            if plain:
                part["a"], part["b"] = _block_texts(run_rows, paper)
            else:
                part["cols"] = _column_texts(run_rows)
            parts.append(part)
        heights = [n * ROW_PT for n, _c, _p in chunk]
        pages.append(
            {
                "first": first,
                "lines": sum(n for n, _c, _p in chunk),
                "stripes": [f"{h:g}" for h in heights],
                "stripes_uri": _stripes_uri(heights),
                "parts": parts,
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
