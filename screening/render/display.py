"""Display text for every rendered output: number formats, text cleaning, the standard caution.

Pure (layer 1 in spirit: strings in, strings out). Number formats are documented in DEVELOPERS.md
"Number formats (sheet and ranking)".
"""

from __future__ import annotations

import math
import re
from typing import TypeGuard

from markupsafe import Markup

STANDARD_CAUTION = (
    "This page is a screening estimate from meter readings and weather, for information only: it is not an "
    "energy audit, a design heat-loss calculation or a code-compliance finding. Follow local codes and the legal "
    "minimum indoor temperatures for occupied spaces. Have combustion appliances and venting safety-tested by "
    "qualified people before and after any air sealing. Leave decisions on changes to licensed engineers or "
    "certified energy auditors."
)


def finite(x: object) -> TypeGuard[float]:
    return x is not None and isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def fmt_num(x, *, sig: int = 3) -> str:
    """Format a number for a sheet: ``n/a`` for missing, ``∞`` for infinite, thousands
    separators and no decimals from 100 up, ``sig`` significant digits below 100,
    ``1.23e+12`` from one billion up."""
    if x is None or isinstance(x, bool):
        return "n/a"
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "n/a"
    if math.isnan(x):
        return "n/a"
    if math.isinf(x):
        return "∞" if x > 0 else "-∞"
    a = abs(x)
    if a >= 1e9:
        return f"{x:.2e}"
    if a >= 100:
        return f"{x:,.0f}"
    if a == 0:
        return "0"
    if a < 1e-3:
        return f"{x:.1e}"
    return f"{x:.{sig}g}"


def fmt_ratio(x) -> str:
    return f"{x:.2f}" if finite(x) and abs(x) < 1e6 else fmt_num(x)


def fmt_pct(x, digits: int = 1) -> str:
    return f"{100 * x:.{digits}f}%" if finite(x) and abs(x) < 1e6 else fmt_num(x)


def fmt_money(x, currency: str = "$") -> str:
    if not finite(x):
        return fmt_num(x)
    return f"{'-' if x < 0 else ''}{currency}{fmt_num(abs(x))}"


#: CO2e is kept in kg in the data files (ranking.csv, summary.json, the database) and shown in tonnes
#: in every rendered output (sheets, ranking.pdf), formatted as any other figure (fmt_num).
CO2E_UNIT = "t"


def fmt_co2e(kg) -> tuple[str, str]:
    """(value, unit) for display: always tonnes (``CO2E_UNIT``), rounded by :func:`fmt_num`
    (950 kg -> 0.95 t, 25,400 kg -> 25.4 t, 3,809,200 kg -> 3,809 t)."""
    return fmt_num(kg / 1000 if finite(kg) else kg), CO2E_UNIT


def ordinal(p) -> str:
    if not finite(p):
        return ""
    n = int(round(min(max(p, 0.0), 100.0)))
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix} percentile"


#: Bidirectional embedding, override and isolate controls (U+202A-U+202E, U+2066-U+2069): one in a
#: building's name would reverse or reorder the rest of a title or line, so no displayed text keeps
#: them (right-to-left names still show right to left: that comes from their letters, not from these).
_BIDI_CONTROLS = re.compile(r"[\u202a-\u202e\u2066-\u2069]")


#: Runs of more than two combining diacritical marks on one letter (U+0300-036F, U+1AB0-1AFF, U+1DC0-1DFF,
#: U+20D0-20FF, U+FE20-FE2F): no written language stacks more (Vietnamese stacks two), and a tall stack
#: would reach into the line above or below, so displayed text keeps the first two of a run.
_MARK_RUN = re.compile(
    r"([\u0300-\u036f\u1ab0-\u1aff\u1dc0-\u1dff\u20d0-\u20ff\ufe20-\ufe2f]{2})"
    r"[\u0300-\u036f\u1ab0-\u1aff\u1dc0-\u1dff\u20d0-\u20ff\ufe20-\ufe2f]+"
)


def cut(text, n: int) -> str:
    """Text for display: bidirectional controls removed, stacks of combining marks kept to two, at most
    ``n`` characters (then "…")."""
    text = _MARK_RUN.sub(r"\1", _BIDI_CONTROLS.sub("", "" if text is None else str(text)))
    return text if len(text) <= n else text[: n - 1].rstrip() + "…"


CONTROL_CHARS = re.compile(r"[\x00-\x1f\x7f\u2028\u2029]+")


def one_line(text, n: int) -> str:
    """Text for one line of a ``white-space: pre`` column: no line breaks, at most ``n`` characters."""
    return cut(CONTROL_CHARS.sub(" ", "" if text is None else str(text)), n)


def svg_img(svg: str, alt: str) -> Markup:
    """An ``<img>`` holding an SVG as a base64 ``data:`` URI.

    As an image the chart is parsed by WeasyPrint's SVG reader only, instead of adding
    each SVG node to the HTML cascade (measured: see DEVELOPERS.md "Rendering").
    """
    import base64

    data = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    return Markup('<img class="chart" alt="{}" src="data:image/svg+xml;base64,{}">').format(alt, data)
