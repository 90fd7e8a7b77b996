"""Rendering: one-page building sheets and the portfolio ranking report (PDF).

Layer 3 (orchestration): takes plain dicts (the sheet and report contracts documented
in ``DEVELOPERS.md "Rendering"``), formats every number itself, renders HTML with Jinja
(autoescaped, ``StrictUndefined``) and lays it out with WeasyPrint.

Speed: many sheets are laid out in one WeasyPrint document (a *chunk*), each sheet on
its own page; the page count is checked against the sheet count (each sheet's first page
carries an anchor ``sheet-<k>``), and WeasyPrint's PDF objects (pydyf) are written straight
into one file per page, each with its own ``/Title`` (:class:`_PageSplitter`; the chunk
itself is never serialized). A sheet that runs over one page
is re-rendered on its own at growing shrink levels. Chunks are shared by this process
and a pool of ``workers - 1`` children; each renderer keeps one ``FontConfiguration``,
one Jinja environment and the parsed stylesheets for its whole life.

Safety: every fetch goes through :class:`AssetFetcher`, which serves only files inside
``templates_dir()`` and ``data:`` URIs and refuses everything else (no network, no other
file). Output files are named by :func:`assign_filenames` and written atomically inside
``out_dir`` only.
"""

from __future__ import annotations

import atexit
import contextlib
import datetime as _dt
import gc
import hashlib
import logging
import math
import mimetypes
import multiprocessing
import os
import re
import tempfile
import time
import unicodedata
import zlib
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any, TypeGuard
from urllib.parse import unquote, urlsplit
from urllib.request import url2pathname

import jinja2
from markupsafe import Markup

from . import __version__, charts, interrupts, lifeline
from .errors import OutputError, RenderError
from .resources import templates_dir

__all__ = [
    "RenderError",
    "AssetFetcher",
    "safe_filename",
    "assign_filenames",
    "render_sheets",
    "render_ranking",
    "sheet_view",
    "fmt_num",
    "STANDARD_CAUTION",
    "PAPERS",
]

LOGGER = logging.getLogger(__name__)

PAPERS = {"Letter": "letter", "A4": "A4"}
# content width of a sheet [mm]: paper width minus the 12 mm side margins of sheet.css
_CONTENT_MM = {"Letter": 215.9 - 24, "A4": 210.0 - 24}

STANDARD_CAUTION = (
    "This page is a screening estimate from meter readings and weather, for information only: it is not an "
    "energy audit, a design heat-loss calculation or a code-compliance finding. Follow local codes and the legal "
    "minimum indoor temperatures for occupied spaces. Have combustion appliances and venting safety-tested by "
    "qualified people before and after any air sealing. Leave decisions on changes to licensed engineers or "
    "certified energy auditors."
)


# --------------------------------------------------------------------------------------
# file names


_WINDOWS_RESERVED = {
    "CON",
    "PRN",
    "AUX",
    "NUL",
    "CLOCK$",
    "CONIN$",
    "CONOUT$",
    *(f"COM{i}" for i in "0123456789¹²³"),
    *(f"LPT{i}" for i in "0123456789¹²³"),
}
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_MAX_READABLE = 60
_HASH_LEN = 10


def _id_hash(building_id: str, n: int = _HASH_LEN) -> str:
    return hashlib.sha256(building_id.encode("utf-8", "surrogatepass")).hexdigest()[:n]


def safe_filename(building_id: str) -> str:
    """Map a building id to a file stem that is safe on Linux, macOS and Windows.

    The readable part keeps ASCII letters, digits, ``.``, ``_`` and ``-`` (after NFKD
    folding of accents); every other run of characters becomes one ``_``; leading dots,
    dashes and underscores and trailing dots are stripped; it is cut to 60 characters.
    When that changed anything, or the result is empty or a Windows device name
    (CON, NUL, COM1 ... with any extension; then prefixed with ``id_``), ``-`` plus the first 10 hex digits of SHA-256 of the UTF-8 id
    is appended, so two ids that sanitize alike still get different stems. An id that is
    already safe is kept unchanged. Deterministic; no I/O.
    """
    if not isinstance(building_id, str):
        raise TypeError(f"building_id must be a str, got {type(building_id).__name__}: {building_id!r}")
    folded = unicodedata.normalize("NFKD", building_id).encode("ascii", "ignore").decode("ascii")
    readable = _UNSAFE.sub("_", folded).lstrip("._-").rstrip(". ")[:_MAX_READABLE].rstrip(". ")
    reserved = readable.split(".")[0].upper() in _WINDOWS_RESERVED
    if readable == building_id and readable and not reserved:
        return readable
    if reserved:  # Windows reserves "COM1" with any extension too: move the name off it
        readable = f"id_{readable}"
    return f"{readable or 'building'}-{_id_hash(building_id)}"


def assign_filenames(ids: Sequence[str]) -> dict[str, str]:
    """Safe, unique, deterministic file stems for a list of distinct building ids.

    Starts from :func:`safe_filename`; stems that are equal when compared without case
    (they would overwrite each other on Windows and macOS) all get the id's hash appended,
    and then longer hashes until no two stems collide. The result does not depend on the
    order of ``ids``.
    """
    ids = list(ids)
    seen: set[str] = set()
    for bid in ids:
        if bid in seen:
            raise ValueError(f"assign_filenames: building id {bid!r} appears more than once")
        seen.add(bid)
    stems = {bid: safe_filename(bid) for bid in sorted(ids)}
    n = _HASH_LEN
    while True:
        groups: dict[str, list[str]] = {}
        for bid, stem in stems.items():
            groups.setdefault(stem.casefold(), []).append(bid)
        clashes = [g for g in groups.values() if len(g) > 1]
        if not clashes:
            return {bid: stems[bid] for bid in ids}
        n += 6
        if n > 64:  # pragma: no cover - would need a SHA-256 collision
            raise RenderError(f"cannot give distinct file names to ids {clashes[0]!r}")
        for group in clashes:
            for bid in group:
                base = safe_filename(bid)
                if base != bid:  # strip the short hash again
                    base = base.rsplit("-", 1)[0]
                stems[bid] = f"{base}-{_id_hash(bid, n)}"


# --------------------------------------------------------------------------------------
# URL fetcher


def _fetcher_class():
    from weasyprint.urls import URLFetcher, URLFetcherResponse

    class _AssetFetcher(URLFetcher):
        """Serve only files inside ``root`` (the templates folder) and ``data:`` URIs.

        Everything else (http, https, ftp, file outside ``root``, devices) is refused
        before any I/O with ``ValueError``; with ``fatal=True`` (the default) WeasyPrint
        stops the render instead of drawing the page without the resource. Every URL asked
        for is recorded in ``self.requested`` and every refusal in ``self.refused``.
        """

        def __init__(self, root: Path | None = None, *, fatal: bool = True):
            super().__init__(timeout=2, allowed_protocols={"file", "data"}, allow_redirects=False, fail_on_errors=fatal)
            self.root = Path(root or templates_dir()).resolve()
            self.requested: list[str] = []
            self.refused: list[str] = []

        def fetch(self, url, headers=None):
            self.requested.append(url)
            scheme = url.split(":", 1)[0].lower() if ":" in url else ""
            if scheme == "data":
                return super().fetch(url, headers)
            if scheme == "file":
                parts = urlsplit(url)
                if parts.netloc in ("", "localhost"):
                    path = Path(url2pathname(unquote(parts.path))).resolve()
                    if path.is_relative_to(self.root) and path.is_file():
                        ctype = mimetypes.guess_type(path.name)[0] or "application/octet-stream"
                        return URLFetcherResponse(path.as_uri(), path.read_bytes(), {"Content-Type": ctype})
            self.refused.append(url)
            raise ValueError(f"refused to fetch {url[:200]!r}: only template assets and data: URIs are served")

    return _AssetFetcher


def AssetFetcher(root: Path | None = None, *, fatal: bool = True):  # noqa: N802 - used like a class
    """A :class:`weasyprint.urls.URLFetcher` serving only ``root`` (default templates_dir()) and ``data:``."""
    return _fetcher_class()(root, fatal=fatal)


# --------------------------------------------------------------------------------------
# number formatting (documented in DEVELOPERS.md "Rendering")


def _finite(x: object) -> TypeGuard[float]:
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
    return f"{x:.2f}" if _finite(x) and abs(x) < 1e6 else fmt_num(x)


def fmt_pct(x, digits: int = 1) -> str:
    return f"{100 * x:.{digits}f}%" if _finite(x) and abs(x) < 1e6 else fmt_num(x)


def fmt_money(x, currency: str = "$") -> str:
    if not _finite(x):
        return fmt_num(x)
    return f"{'-' if x < 0 else ''}{currency}{fmt_num(abs(x))}"


#: CO2e is kept in kg in the data files (ranking.csv, summary.json, the database) and shown in tonnes
#: in every rendered output (sheets, ranking.pdf), formatted as any other figure (fmt_num).
CO2E_UNIT = "t"


def fmt_co2e(kg) -> tuple[str, str]:
    """(value, unit) for display: always tonnes (``CO2E_UNIT``), rounded by :func:`fmt_num`
    (950 kg -> 0.95 t, 25,400 kg -> 25.4 t, 3,809,200 kg -> 3,809 t)."""
    return fmt_num(kg / 1000 if _finite(kg) else kg), CO2E_UNIT


def _ordinal(p) -> str:
    if not _finite(p):
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


def _cut(text, n: int) -> str:
    """Text for display: bidirectional controls removed, stacks of combining marks kept to two, at most
    ``n`` characters (then "…")."""
    text = _MARK_RUN.sub(r"\1", _BIDI_CONTROLS.sub("", "" if text is None else str(text)))
    return text if len(text) <= n else text[: n - 1].rstrip() + "…"


# --------------------------------------------------------------------------------------
# sheet view: the sheet dict turned into strings for the template

# per shrink level: max items shown and max characters of each text
_LIMITS = [
    dict(name=300, text=600, expl=400, flags=8, issues=6, steps=6, cautions=3, asm=24, caution_len=300),
    dict(name=300, text=500, expl=260, flags=8, issues=5, steps=5, cautions=3, asm=24, caution_len=240),
    dict(name=160, text=300, expl=160, flags=5, issues=3, steps=4, cautions=2, asm=16, caution_len=200),
    dict(name=100, text=200, expl=110, flags=3, issues=2, steps=3, cautions=1, asm=10, caution_len=160),
]
MAX_LEVEL = len(_LIMITS) - 1

_PART_NAMES = {
    "walls": "walls",
    "windows": "windows",
    "roof": "roof",
    "ground": "ground floor",
    "infiltration": "air leakage",
    "ventilation": "ventilation air",
}
# looked up by a sheet record's field, which may be missing (None)
_SPAN_NOTE: dict[str | None, str] = {
    "window": "",
    "shifted": "moved to the months the readings cover",
    "uncovered": "readings do not cover the whole window",
}
_BAND_TEXT: dict[str | None, str] = {
    "below": "below the expected band",
    "within": "within the expected band",
    "above": "above the expected band",
}


def _items(seq, n_items, n_chars):
    """Flags or data issues for the engineer's block: a plain label (never the code) and the explanation."""
    seq = [x for x in (seq or []) if x.get("code") != "envelope_defaulted"]  # in the confidence line instead
    shown = []
    for x in seq[:n_items]:
        label = x.get("label") or ""
        if not label and x.get("blocking"):
            label = "Blocks a verdict"
        shown.append(
            {"label": _cut(label[:1].upper() + label[1:], 80), "explanation": _cut(x.get("explanation"), n_chars)}
        )
    return shown, len(seq) - len(shown)


def svg_img(svg: str, alt: str) -> Markup:
    """An ``<img>`` holding an SVG as a base64 ``data:`` URI.

    As an image the chart is parsed by WeasyPrint's SVG reader only, instead of adding
    each SVG node to the HTML cascade (measured: see DEVELOPERS.md "Rendering").
    """
    import base64

    data = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    return Markup('<img class="chart" alt="{}" src="data:image/svg+xml;base64,{}">').format(alt, data)


_CONTROL = re.compile(r"[\x00-\x1f\x7f\u2028\u2029]+")


def _one_line(text, n: int) -> str:
    """Text for one line of a ``white-space: pre`` column: no line breaks, at most ``n`` characters."""
    return _cut(_CONTROL.sub(" ", "" if text is None else str(text)), n)


def _strip_img(svg: str, rows: int) -> Markup:
    """A bar strip as an ``<img>`` exactly ``rows`` text lines high (see .bars in sheet.css)."""
    import base64

    data = base64.b64encode(svg.encode("utf-8")).decode("ascii")
    return Markup('<img class="bars" alt="bars" style="height: {}em" src="data:image/svg+xml;base64,{}">').format(
        f"{1.25 * rows:.2f}", data
    )


_FIGURE_SPACE = "\u2007"  # as wide as a digit


def _share_cell(share: str) -> str:
    """A percentage right-padded to the width of "100%" (figure spaces; "" -> blank of that width)."""
    if not share:
        return _FIGURE_SPACE * 3 + "   "  # three digits and three spaces ~ "100%" in our font
    return share.rjust(4, _FIGURE_SPACE)


#: a key figure's column: a quarter of A4's content width (186 mm) less a 2 mm gap [pt]
_FIG_COL_PT = (_CONTENT_MM["A4"] / 4 - 2) * 72 / 25.4

_SCALE_TEXT: dict[str | None, str] = {
    "peers": "its peers' spread",
    "model band": "the model's own band (too few peers)",
    "blend": "a blend of its peers' spread ({pct} %) and the model's own band",
}


# --------------------------------------------------------------------------------------
# the owner's half of a sheet: plain words, the bills' own unit, money (issue 15)

_FUEL_TEXT = {
    "natural_gas": "natural gas",
    "fuel_oil": "heating oil",
    "propane": "propane",
    "kerosene": "kerosene",
    "electricity": "electricity",
    "district_steam": "district steam",
    "district_hot_water": "district hot water",
}
#: how a billed unit reads in a sentence ("12,400 therms"); units not named here read as they are
#: What the energy units on a sheet mean, for the owner (one line in the footer; units in common use).
_UNIT_MEANING = {
    "kBtu": "kBtu = thousand British thermal units",
    "MMBtu": "MMBtu = million Btu",
    "kWh": "kWh = kilowatt-hour",
    "therm": "therm = 100,000 Btu of gas",
    "Dth": "dekatherm = 1,000,000 Btu",
    "ccf": "ccf = hundred cubic feet of gas",
    "Mcf": "Mcf = thousand cubic feet of gas",
    "m3": "m³ = cubic metre of gas",
    "gal": "gallon of oil or propane",
    "L": "litre of oil or propane",
    "lb": "lb = pound of steam",
    "Mlb": "Mlb = thousand pounds of steam",
}


def units_line(s: dict[str, Any]) -> str:
    """The footer's line saying what the sheet's energy units and t CO₂e mean."""
    seen = [u for u in (s.get("billed_unit"), s.get("energy_unit")) if u]
    parts = [_UNIT_MEANING[u] for u in dict.fromkeys(seen) if u in _UNIT_MEANING]
    return "Units: " + "; ".join([*parts, "t CO₂e = tonnes of carbon-dioxide equivalent"]) + "."


_UNIT_PLURAL = {"therm": "therms", "Dth": "dekatherms", "gal": "gallons", "L": "litres", "lb": "lb"}

#: The owner's verdict per tier: what to do, in plain words ({cost} = the expected recoverable cost a year).
_OWNER_VERDICT = {
    "Audit first": "Book an energy audit this quarter: this building likely wastes about {cost} of heating a year.",
    "Audit soon": "Worth an energy audit after this quarter's visits: likely waste about {cost} of heating a year.",
    "Watch": "Keep an eye on it: there is some excess ({cost} a year), less than an audit visit would cost.",
    "No action": "No action needed: heating is about what a building like this should use.",
    "Fix data first": "Fix the data first: the bills or the building's record have a problem, so the tool "
    "cannot judge this building yet.",
}
_OWNER_VERDICT_NO_COST = {
    "Audit first": "Book an energy audit this quarter: this building likely wastes heating.",
    "Audit soon": "Worth an energy audit after this quarter's visits: this building likely wastes heating.",
    "Watch": "Keep an eye on it: some excess, not yet worth a visit.",
}
#: Guideline 14's monthly calibration limit on CV(RMSE) (ASHRAE Guideline 14-2014, 15 % for monthly data):
#: below it the bills "follow the weather closely" in the confidence line
_CLOSE_FIT_CV = 0.15
# figures the owner's half must not print (the engineer's block has them): parentheses holding a statistic
_STAT_PAREN = re.compile(
    r"\s*\((?:[^()]*\((?:RMSE)\)[^()]*|[^()]*(?:R²|NMBE|\bz -?\d|score|heat-loss coefficient|balance point)[^()]*)\)"
)


def plain_text(text) -> str:
    """A sentence for the owner's half: statistics in parentheses (R², CV(RMSE), z, scores) taken out."""
    return _STAT_PAREN.sub("", "" if text is None else str(text))


def _unit_words(unit: str | None, fallback: str) -> str:
    return _UNIT_PLURAL.get(unit or "", unit or "") or fallback


#: the display-energy key beside each ``<key>_billed`` figure of a sheet record
_ENERGY_KEY = {"excess": "excess_energy", "expected_recoverable": "expected_recoverable_energy"}


def billed_text(s: dict[str, Any], key: str) -> str:
    """``<key>_billed`` in the bills' unit ("12,400 therms"), or the display energy when the unit is unknown."""
    unit = s.get("billed_unit")
    v = s.get(f"{key}_billed")
    if unit and _finite(v):
        return f"{fmt_num(v)} {_unit_words(unit, unit)}"
    return f"{fmt_num(s.get(_ENERGY_KEY.get(key, key)))} {s.get('energy_unit') or ''}".rstrip()


def heat_source_text(s: dict[str, Any]) -> str:
    """ "natural gas, billed in therms, seasonal efficiency 80 %" or "electricity (heat pump, seasonal COP 1.94)"."""
    fuel = s.get("heating_fuel")
    out = _FUEL_TEXT.get(fuel, str(fuel).replace("_", " ")) if fuel else ""
    eff = s.get("efficiency")
    if _finite(eff) and eff > 1:
        out += f" (heat pump, seasonal COP {eff:.2f})"
    elif _finite(eff) and eff > 0:
        out += f", seasonal efficiency {100 * eff:.0f} %"
    if s.get("billed_unit"):
        out += f", billed in {_unit_words(s['billed_unit'], s['billed_unit'])}"
    return out


def confidence_line(s: dict[str, Any]) -> str:
    """How sure the screen is, as one plain sentence (no statistics): from the fit, the flags, the envelope
    inputs and the peers. Levels: fairly sure, moderately sure, not very sure; not yet where data block."""
    if s.get("blocking") or s.get("tier") == "Fix data first":
        return "How sure the tool is: not yet: a problem in the data must be fixed before it can judge this building."
    fit = s.get("fit") or {}
    codes = set(s.get("flag_codes") or [f.get("code") for f in s.get("flags") or []])
    good, bad = [], []
    level = 3
    if fit.get("method") != "regression":
        level = 1
        bad.append(
            "there are too few bills, or bills too long, in the period judged to see how heating follows the weather"
        )
    elif "poor_fit" in codes:
        level = 1
        bad.append("heating does not follow the weather closely, so the figures are rough")
    elif _finite(fit.get("cv_rmse")) and fit["cv_rmse"] <= _CLOSE_FIT_CV:
        good.append("the bills follow the weather closely")
    else:
        level -= 1
        bad.append("the bills follow the weather only loosely")
    if s.get("envelope_defaulted") or "envelope_defaulted" in codes:
        level -= 1
        bad.append("the building's construction was not given, so what it should use is a broad estimate")
    if s.get("evidence_scale") == "model band":
        level -= 1
        bad.append("there are too few similar buildings to compare it with")
    if s.get("span_kind") in ("shifted", "uncovered") or "shifted_span" in codes:
        level -= 1
        bad.append("the bills do not cover the whole period asked for")
    if "base_at_grid_edge" in codes:
        level -= 1
        bad.append("the split between heating and other uses is uncertain")
    if s.get("needs_review"):
        good.append("it stands well above similar buildings")
    word = "fairly sure" if level >= 3 else "moderately sure" if level == 2 else "not very sure"
    reasons = good + [("but " if good and i == 0 else "") + b for i, b in enumerate(bad)]
    return f"How sure the tool is: {word}" + (": " + "; ".join(reasons) if reasons else "") + "."


def owner_verdict(s: dict[str, Any]) -> str:
    """The owner's verdict: what to do, and what the waste costs a year, in plain words."""
    tier = s.get("tier") or ""
    cur = s.get("currency") or "$"
    cost = s.get("expected_recoverable_cost")
    if tier in _OWNER_VERDICT_NO_COST and not (_finite(cost) and cost > 0):
        head = _OWNER_VERDICT_NO_COST[tier]
    elif tier in _OWNER_VERDICT:
        head = _OWNER_VERDICT[tier].format(cost=fmt_money(cost, cur))
    else:
        head = plain_text(s.get("verdict") or "No verdict.")
    if s.get("blocking") or tier == "Fix data first" or not _finite(s.get("actual_heating")):
        return head
    used = billed_text(s, "actual_heating")
    money = f" ({fmt_money(s['heating_cost'], cur)})" if _finite(s.get("heating_cost")) else ""
    low, high = s.get("expected_low_billed"), s.get("expected_high_billed")
    if not (s.get("billed_unit") and _finite(low) and _finite(high)):
        low, high = s.get("expected_low"), s.get("expected_high")
    unit = (
        _unit_words(s.get("billed_unit"), s.get("energy_unit") or "")
        if s.get("billed_unit") and _finite(s.get("expected_low_billed"))
        else (s.get("energy_unit") or "")
    )
    need = f"about {fmt_num(low)}" if fmt_num(low) == fmt_num(high) else f"{fmt_num(low)} to {fmt_num(high)}"
    return (
        f"{head} Over the {_span_words(s)} it used {used}{money} for heating; a building like it in this weather "
        f"should need {need} {unit}."
    )


#: Where the "likely recoverable" figure comes from (screen.py's views), for the owner: it can exceed the
#: excess above the range, which is measured against this building's own estimate only.
_BASIS_TEXT: dict[str | None, str] = {
    "level": (
        "The likely recoverable figure compares its heating with what similar buildings use against their "
        "own estimates, weighted by how sure the evidence is."
    ),
    "step up": "The likely recoverable figure is the rise in its weather-corrected heating on last year, weighted "
    "by how sure the evidence is.",
    "fuel step": "The likely recoverable figure is the rise in its heating fuel's whole use on last year, weighted "
    "by how sure the evidence is.",
}


def _codes_to_words(text: Any) -> Any:
    """A data-issue or flag code in a sentence (``likely_unit_error``) as its plain text (schema)."""
    if not isinstance(text, str):
        return text
    from .schema import DATA_ISSUES, FLAGS

    words = {**{c: i.text for c, i in DATA_ISSUES.items()}, **FLAGS}
    return re.sub(r"\b[a-z]+(?:_[a-z0-9]+)+\b", lambda m: words.get(m.group(0), m.group(0)), text)


def _span_words(s: dict[str, Any]) -> str:
    """'12 months', or the days of a shorter span judged (after a measure)."""
    try:
        days = (
            _dt.date.fromisoformat(str(s.get("period_end"))[:10])
            - _dt.date.fromisoformat(str(s.get("period_start"))[:10])
        ).days + 1
    except ValueError:
        return "12 months"
    return "12 months" if days >= 360 else f"{days} days"


def owner_steps(s: dict[str, Any], n: int) -> tuple[list[str], int]:
    """What to do next, plain: the data step names no code (the issues are listed in the engineer's block)."""
    steps = []
    issues = [x for x in s.get("data_issues") or [] if x.get("code") != "end_days_filled"]
    first = next((x for x in issues if x.get("blocking")), issues[0] if issues else None)
    for t in s.get("next_steps") or []:
        t = str(t)
        if t.startswith("Check the data first:"):
            what = str(first.get("explanation") or "").rstrip(".") if first else ""
            more = (
                f" (see also the other {len(issues) - 1} problem(s) under 'Data issues' below)"
                if len(issues) > 1
                else ""
            )
            t = (
                "Fix the data first"
                + (f": {what}" if what else "")
                + more
                + ". Correct the readings or the building's record, then run the screening again."
            )
        steps.append(plain_text(t))
    return steps[:n], max(len(steps) - n, 0)


def since_measure_view(
    m: dict[str, Any] | None,
    paper_energy_unit: str = "",
    *,
    billed_unit: str | None = None,
    per_billed: float | None = None,
) -> dict[str, Any] | None:
    """The "since the measure" box: a small chart (metered bars, the baseline's dashed line, by billing period)
    and one sentence. ``m`` is the sheet record's ``since_measure`` (None or absent: no box). With
    ``billed_unit`` and ``per_billed`` (display-unit energy per billed unit) the figures are in the bills' unit."""
    if not m:
        return None
    if billed_unit and per_billed and _finite(per_billed) and per_billed > 0:

        def conv(x):
            return x / per_billed if _finite(x) else x

        m = {
            **m,
            "energy_unit": _unit_words(billed_unit, billed_unit),
            "avoided_energy": conv(m.get("avoided_energy")),
            "avoided_low_90": conv(m.get("avoided_low_90")),
            "avoided_high_90": conv(m.get("avoided_high_90")),
            "periods": [
                {**p, "baseline": conv(p.get("baseline")), "metered": conv(p.get("metered"))}
                for p in m.get("periods") or []
            ],
        }
    periods = list(m.get("periods") or [])
    labels = []
    for p in periods:
        start = str(p.get("start") or "")
        labels.append(start[5:7] + "/" + start[2:4] if len(start) >= 7 else "?")
    svg = charts.measure_chart(labels, [p.get("baseline") for p in periods], [p.get("metered") for p in periods])
    unit = m.get("energy_unit") or paper_energy_unit
    avoided, lo, hi = m.get("avoided_energy"), m.get("avoided_low_90"), m.get("avoided_high_90")
    cur = m.get("currency") or "$"
    what = _cut(m.get("description") or "a measure", 120)
    if _finite(avoided):
        verb = "saved" if avoided >= 0 else "used"
        sentence = (
            f"Since {what} on {m.get('event_date') or 'n/a'}, the building {verb} about "
            f"{fmt_num(abs(avoided))} {unit}"
            + (f" ({fmt_money(abs(m['cost']), cur)})" if _finite(m.get("cost")) else "")
            + (" more" if avoided < 0 else "")
            + f" against what it would have used without it, over {len(periods)} billing period(s)"
        )
        if _finite(lo) and _finite(hi):
            sentence += f" (likely between {fmt_num(lo)} and {fmt_num(hi)} {unit}, at 90 % confidence)"
        sentence += "."
    else:
        sentence = f"Since {what} on {m.get('event_date') or 'n/a'}: no saving can be stated yet."
    return {
        "chart": svg_img(svg, "metered against the baseline since the measure"),
        "sentence": sentence,
        "caption": f"Grey bars: metered per billing period [{unit}]; dashed line: the baseline (what the "
        "building would have used without the measure, in the same weather).",
    }


def sheet_view(s: dict[str, Any], level: int = 0) -> dict[str, Any]:
    """Everything a sheet template shows, as display strings (plus chart SVG markup)."""
    if not 0 <= level <= MAX_LEVEL:
        raise ValueError(f"sheet_view: level must be 0..{MAX_LEVEL}, got {level!r}")
    lim = _LIMITS[level]
    eu = s.get("energy_unit") or ""
    cur = s.get("currency") or "$"
    name = _cut(s.get("name") or s.get("building_id"), lim["name"])
    place = ", ".join(str(p) for p in (s.get("address"), s.get("city")) if p)
    area = s.get("floor_area")
    tr = s.get("tier_rank")
    co2_v, co2_u = fmt_co2e(s.get("excess_co2e_kg"))
    rco2_v, rco2_u = fmt_co2e(s.get("expected_recoverable_co2e_kg"))

    # Charts carry only their geometry and tick labels (annotate=False): WeasyPrint draws
    # SVG text glyph by glyph, so axis titles and legends are printed as page text in the
    # caption instead (measured: DEVELOPERS.md "Rendering").
    periods = s.get("periods") or []
    dd_unit = s.get("dd_unit", "")
    if periods:
        xs = [p.get("dd_per_day") for p in periods]
        ys = [p.get("use_per_day") for p in periods]
        # periods that start in the analysis window are drawn filled, earlier ones of the fit open
        span_start = str(s.get("period_start") or "")
        recent = [bool(span_start) and str(p.get("start") or "") >= span_start for p in periods]
        chart1 = charts.scatter_chart(
            xs,
            ys,
            fit_line=s.get("fit_line"),
            expected_line=s.get("expected_line"),
            x_label="",
            y_label="",
            width=360,
            height=150,
            annotate=False,
            recent=recent,
        )
        dropped = sum(1 for x, y in zip(xs, ys) if not (_finite(x) and _finite(y)))
        chart1_title = "Heating use against the weather"
        chart1_axes = f"up: use per day [{eu}/day]; across: degree days per day [{dd_unit}/day]"
        circles = (
            "Grey circles: billing periods of the window; open circles: earlier periods of the fit."
            if any(recent) and not all(recent)
            else "Circles: billing periods."
        )
        chart1_caption = (
            circles + " Solid line: fitted to the meter data; dashed line: what the "
            "envelope (UA) and the weather predict."
            + (f" {dropped} period(s) not plotted (missing value)." if dropped else "")
        )
    else:
        annual = s.get("annual") or []
        chart1 = charts.annual_chart(
            [str(a.get("year_label")) for a in annual],
            [a.get("metered") for a in annual],
            [a.get("expected") for a in annual],
            y_label="",
            width=360,
            height=150,
            annotate=False,
        )
        chart1_title = "Metered against expected heating, by year"
        chart1_axes = f"up: heating per year [{eu}]"
        chart1_caption = (
            "Annual readings only, so no per-period fit. Grey bars: metered; dashed outlines: "
            "expected from the envelope (UA) and the weather."
        )
    # a building whose data block a verdict is not placed among its peers (its figure is the data's)
    blocked = bool(s.get("blocking"))
    chart2 = charts.peer_chart(
        s.get("peers") or [],
        None if blocked else s.get("heating_intensity"),
        s.get("peer_median_intensity"),
        x_label="",
        width=300,
        height=136,
        annotate=False,
    )
    n_peers = len([v for v in (s.get("peers") or []) if _finite(v)])
    chart2_axes = f"across: heating per degree day [{s.get('intensity_unit', '')}]"
    if n_peers:
        chart2_caption = (
            f"{n_peers} building(s) in the group"
            + ("" if blocked else ", this one included")
            + ": "
            + ("one grey tick each" if n_peers <= 80 else "grey bars count buildings")
            + "; dashed line: peer median; "
            + (
                "this building is not placed until its data problem is fixed."
                if blocked
                else "black triangle: this building."
            )
        )
    else:
        chart2_caption = "No peer group figures for this building."

    parts = s.get("ua_parts") or []
    vals = [p.get("value") for p in parts]
    vmax = max([v for v in vals if _finite(v) and v > 0], default=0.0)
    total = s.get("ua_total")
    ua_parts = [
        {
            "part": _PART_NAMES.get(p.get("part"), _cut(p.get("part"), 30)),
            "value": fmt_num(v),
            "pct": f"{100.0 * v / vmax:.1f}" if _finite(v) and v > 0 and vmax > 0 else "0",
            "share": fmt_pct(v / total, 0) if _finite(v) and v >= 0 and _finite(total) and total > 0 else "",
        }
        for p, v in zip(parts, vals)
    ]

    # the UA and assumption tables are columns of newline-separated text (white-space: pre):
    # one box per column instead of one per cell, measured several times cheaper to lay out
    ua_rows = ua_parts + [{"part": "total", "value": fmt_num(total), "share": ""}]
    ua_bars = charts.bar_strip([v if _finite(v) else None for v in vals] + [None])
    # value and share share one right-aligned column: the share is padded to the width of
    # "100%" with figure spaces (digit-wide in our font), so the values stay aligned
    ua_cols = {
        "names": "\n".join(_one_line(r["part"], 24) for r in ua_rows),
        "nums": "\n".join(f"{r['value']}  {_share_cell(r['share'])}" for r in ua_rows),
        "bars": _strip_img(ua_bars, len(ua_rows)),
    }

    asm_all = s.get("assumptions") or []
    assumptions = [
        {
            "name": _cut(a.get("name"), 60),
            "value": fmt_num(a.get("value")) if not isinstance(a.get("value"), str) else _cut(a["value"], 20),
            "unit": _cut(a.get("unit"), 40),
            "origin": "given" if a.get("origin") == "given" else "default",
            "origin_class": "given" if a.get("origin") == "given" else "default",
        }
        for a in asm_all[: lim["asm"]]
    ]

    asm_cols = {
        "names": "\n".join(_one_line(x["name"], 40) for x in assumptions),
        "nums": "\n".join(_one_line(x["value"], 14) for x in assumptions),
        "units": "\n".join(_one_line(x["unit"], 30) for x in assumptions),
        "origins": "\n".join(x["origin"] for x in assumptions),
    }

    fit = s.get("fit") or {}
    if fit.get("method") == "regression":
        fit_text = (
            f"Fit: regression on {fmt_num(fit.get('n_periods'))} periods; R² {fmt_ratio(fit.get('r2'))}, "
            f"CV(RMSE) {fmt_pct(fit.get('cv_rmse'))}, NMBE {fmt_pct(fit.get('nmbe'))}; fitted balance point "
            f"{fmt_num(fit.get('fitted_base'))} {s.get('temp_unit', '')}; slope {fmt_num(fit.get('slope'))} "
            f"{eu} per {s.get('dd_unit', '')}; baseload {fmt_num(fit.get('baseload_per_day'))} {eu}/day."
        )
    else:
        fit_text = (
            "Fit: none (too few periods); heating taken as a default share of the metered total"
            f"; baseload {fmt_num(fit.get('baseload_per_day'))} {eu}/day."
        )
    fit_text += (
        f" Degree days {fmt_num(s.get('hdd'))} {s.get('dd_unit', '')} at base "
        f"{fmt_num(s.get('base_temperature'))} {s.get('temp_unit', '')}."
    )

    flags, flags_more = _items(s.get("flags"), lim["flags"], lim["expl"])
    issues, issues_more = _items(s.get("data_issues"), lim["issues"], lim["expl"])
    steps_all = list(s.get("next_steps") or [])
    cautions_all = list(s.get("cautions") or [])
    year = s.get("year_built")

    # key figures: two groups of three pre-formatted lines (labels, values, units), the four
    # columns set by tab stops a quarter of the page wide (the tab-size in the per-paper
    # stylesheet): one line box per row instead of a table cell per figure (measured:
    # DEVELOPERS.md "Rendering"). Fields are cut so no field runs past its tab stop; the
    # peer percentile is printed with the peer chart's heading.
    def tabbed(fields, n):
        return "\t".join(_one_line(f, n) for f in fields)

    blocked_figs = bool(s.get("blocking"))
    not_judged = "not judged until the data are fixed"

    # each unit line's parts after the first are dropped, last first, until the line fits its quarter of
    # the narrower paper (A4) at the unit line's size: nothing is cut and no field runs past its tab stop
    def unit_line(parts, size=7.0):
        parts = [p for p in parts if p]
        while len(parts) > 1 and _text_width(" · ".join(parts), size) > _FIG_COL_PT:
            parts.pop()
        return " · ".join(parts)

    cost = fmt_money(s.get("heating_cost"), cur) if _finite(s.get("heating_cost")) else ""
    figs = [
        (
            "fk",
            tabbed(
                [
                    f"Heating used, {_span_words(s)}",
                    "Should need (middle)",
                    "Above the expected range",
                    "Likely recoverable",
                ],
                60,
            ),
        ),
        (
            "fv",
            tabbed(
                [
                    billed_text(s, "actual_heating"),
                    billed_text(s, "expected_heating"),
                    "not judged" if blocked_figs else billed_text(s, "excess"),
                    "not judged" if blocked_figs else fmt_money(s.get("expected_recoverable_cost"), cur),
                ],
                60,
            ),
        ),
        (
            "fu",
            tabbed(
                [
                    unit_line([cost, f"{fmt_num(s.get('actual_heating'))} {eu}"]),
                    # its range is in the verdict sentence above
                    unit_line([f"{fmt_num(s.get('expected_heating'))} {eu}"]),
                    not_judged
                    if blocked_figs
                    else unit_line(
                        [f"{fmt_money(s.get('excess_cost'), cur)} a year", f"{fmt_num(s.get('excess_energy'))} {eu}"]
                    ),
                    not_judged
                    if blocked_figs
                    else unit_line(["a year", billed_text(s, "expected_recoverable"), f"{rco2_v} {rco2_u} CO₂e"]),
                ],
                80,
            ),
        ),
    ]
    scale = _SCALE_TEXT.get(s.get("evidence_scale"), "")
    if scale and s.get("evidence_scale") == "blend" and _finite(s.get("peer_weight")):
        scale = scale.format(pct=round(100 * s["peer_weight"]))
    # a building whose data block a verdict has no kind of waste yet: its first step says what to fix
    kind = "" if s.get("blocking") else plain_text(s.get("waste_kind") or "")
    basis = _BASIS_TEXT.get(s.get("recoverable_basis"))
    if (
        basis
        and not s.get("blocking")
        and _finite(s.get("expected_recoverable_cost"))
        and s["expected_recoverable_cost"] > 0
    ):
        kind = (kind + " " if kind else "") + basis
    steps, steps_more = owner_steps(s, lim["steps"])
    sc = s.get("scores") or {}
    scores_text = ""
    if sc:
        scores_text = (
            f"Scores: evidence {fmt_num(sc.get('evidence_score'))} (peers z {fmt_num(sc.get('z_score'))}, "
            f"balance point z {fmt_num(sc.get('z_balance_point'))}, intensity z "
            f"{fmt_num(sc.get('z_intensity'))}); year on year {fmt_pct(sc.get('yoy_change'))} "
            f"(z {fmt_num(sc.get('z_yoy'))})."
        )
    scores_text += f" Judged against {scale}." if scale else ""
    scores_text += (
        f" Metered / expected {fmt_ratio(s.get('ratio'))}, "
        f"{_BAND_TEXT.get(s.get('band_position'), 'band position n/a')}; normal year "
        f"{fmt_num(s.get('normal_heating'))} {eu}; {fmt_num(s.get('heating_intensity'))} "
        f"{s.get('intensity_unit', '')} (peers' median {fmt_num(s.get('peer_median_intensity'))})."
    )
    per_billed = (
        s["actual_heating"] / s["actual_heating_billed"]
        if _finite(s.get("actual_heating")) and _finite(s.get("actual_heating_billed")) and s["actual_heating_billed"]
        else None
    )
    since = since_measure_view(s.get("since_measure"), eu, billed_unit=s.get("billed_unit"), per_billed=per_billed)
    rank, n_b = s.get("rank"), s.get("n_buildings")
    span_label = _span_words(s)
    is_blocked = bool(s.get("blocking")) or s.get("tier") == "Fix data first"
    return {
        "figs": figs,
        "level": level,
        "building_id": _cut(s.get("building_id"), 80),
        "name": name,
        "name_class": "vlong" if len(name) > 180 else ("long" if len(name) > 90 else ""),
        "place": _cut(place, lim["name"]),
        "use_type": _cut(s.get("use_type") or "use type n/a", 40),
        "floor_area": f"{fmt_num(area)} {s.get('area_unit', '')}",
        "year_built": str(int(year)) if _finite(year) else "n/a",
        "station_id": _cut(s.get("station_id") or "n/a", 40),
        "period_start": s.get("period_start") or "n/a",
        "span_label": span_label,
        "order_text": (f"audit order {rank} of {n_b}" if isinstance(rank, int) and isinstance(n_b, int) else ""),
        "period_end": s.get("period_end") or "n/a",
        "span_note": _SPAN_NOTE.get(s.get("span_kind"), ""),
        "run_date": s.get("run_date") or "n/a",
        "run_id": _cut(s.get("run_id"), 60),
        "verdict": _cut(owner_verdict(s), lim["text"]),
        "screen_verdict": _cut(_codes_to_words(s.get("screen_verdict") or s.get("verdict")), lim["text"]),
        "kind": _cut(kind, lim["text"]),
        "steps": [_cut(t, lim["expl"]) for t in steps],
        "steps_more": steps_more,
        "confidence": _cut(confidence_line(s), lim["text"]),
        "units_line": units_line(s),
        # an audit on record (events file): kept off the plan after a clean audit, or pinned by a finding;
        # a measure's note is in the verdict already
        "audit_note": (
            _cut("On record: " + str(s["plan_note"])[0].upper() + str(s["plan_note"])[1:] + ".", lim["text"])
            if s.get("plan_note") and not str(s["plan_note"]).startswith("measure of")
            else ""
        ),
        "heat_source": _cut(heat_source_text(s), 160),
        "scores_text": scores_text,
        "since": since,
        "blocked": is_blocked,
        "tier": _cut(s.get("tier"), 24),
        "tier_rank": tr if isinstance(tr, int) else "?",
        "tier_rank_class": min(max(tr, 1), 5) if isinstance(tr, int) else 5,
        "needs_review": bool(s.get("needs_review")),
        "energy_unit": eu,
        "actual_heating": fmt_num(s.get("actual_heating")),
        "expected_heating": fmt_num(s.get("expected_heating")),
        "expected_low": fmt_num(s.get("expected_low")),
        "expected_high": fmt_num(s.get("expected_high")),
        "ratio": fmt_ratio(s.get("ratio")),
        "band_text": _BAND_TEXT.get(s.get("band_position"), "band position n/a"),
        "heating_intensity": fmt_num(s.get("heating_intensity")),
        "intensity_unit": s.get("intensity_unit", ""),
        "peer_median_intensity": fmt_num(s.get("peer_median_intensity")),
        "peer_percentile": _ordinal(s.get("peer_percentile")),
        "peer_group": _cut(s.get("peer_group") or "no group", 60),
        "normal_heating": fmt_num(s.get("normal_heating")),
        "baseload": fmt_num(s.get("baseload")),
        "excess_energy": fmt_num(s.get("excess_energy")),
        "excess_cost": fmt_money(s.get("excess_cost"), cur),
        "excess_co2e": co2_v,
        "co2e_unit": co2_u,
        "chart1": svg_img(chart1, chart1_title),
        "chart1_title": chart1_title,
        "chart1_caption": chart1_caption,
        "chart1_axes": chart1_axes,
        "chart2": svg_img(chart2, "place among peers"),
        "chart2_axes": chart2_axes,
        "chart2_caption": chart2_caption,
        "ua_parts": ua_parts,
        "ua_total": fmt_num(total),
        "ua_unit": s.get("ua_unit", ""),
        "effective_ua": fmt_num(s.get("effective_ua")),
        "assumptions": assumptions,
        "assumptions_more": max(len(asm_all) - lim["asm"], 0),
        "ua_cols": ua_cols,
        "asm_cols": asm_cols,
        "fit_text": fit_text,
        "flags": flags,
        "flags_more": flags_more,
        "data_issues": issues,
        "data_issues_more": issues_more,
        "next_steps": [_cut(t, lim["expl"]) for t in steps_all[: lim["steps"]]],
        "next_steps_more": max(len(steps_all) - lim["steps"], 0),
        "cautions": [_cut(t, lim["caution_len"]) for t in cautions_all[: lim["cautions"]]],
    }


def sheet_title(s: dict[str, Any]) -> str:
    """The /Title of a sheet's PDF file."""
    return (
        f"{_cut(s.get('name') or s.get('building_id'), 120)} ({_cut(s.get('building_id'), 80)}): "
        f"heating screening sheet, run {_cut(s.get('run_id'), 60)}"
    )


# --------------------------------------------------------------------------------------
# per-process renderer state (one FontConfiguration, one Jinja env, parsed CSS once)

_STATE: dict[str, Any] = {}


def _drop_state() -> None:
    """Release the font configuration while the interpreter is still whole (at exit)."""
    _STATE.clear()


atexit.register(_drop_state)


def _state() -> dict[str, Any]:
    if not _STATE:
        from weasyprint.text.fonts import FontConfiguration

        tdir = templates_dir()
        _STATE["tdir"] = tdir
        _STATE["font_config"] = FontConfiguration()
        _STATE["fetcher"] = AssetFetcher(tdir)
        _STATE["env"] = jinja2.Environment(
            loader=jinja2.FileSystemLoader(tdir),
            autoescape=jinja2.select_autoescape(
                enabled_extensions=("html", "j2", "xml"), default=True, default_for_string=True
            ),
            undefined=jinja2.StrictUndefined,
            trim_blocks=True,
            lstrip_blocks=True,
        )
        _STATE["css"] = {}
    return _STATE


def _stylesheets(name: str, paper: str) -> list:
    from weasyprint import CSS

    st = _state()
    key = (name, paper)
    if key not in st["css"]:
        if paper not in PAPERS:
            raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
        st["css"][key] = [
            CSS(
                filename=str(st["tdir"] / name),
                font_config=st["font_config"],
                url_fetcher=st["fetcher"],
                base_url=st["tdir"].as_uri() + "/",
            ),
            CSS(
                string=f"@page {{ size: {PAPERS[paper]}; }} .figs {{ tab-size: {_CONTENT_MM[paper] / 4:.2f}mm; }}",
                font_config=st["font_config"],
            ),
        ]
    return st["css"][key]


def _render_html(html: str, css_name: str, paper: str):
    from weasyprint import HTML

    st = _state()
    doc = HTML(string=html, base_url=st["tdir"].as_uri() + "/", url_fetcher=st["fetcher"])
    return doc.render(stylesheets=_stylesheets(css_name, paper), font_config=st["font_config"])


def _sheets_html(views: list[dict[str, Any]], title: str) -> str:
    tpl = _state()["env"].get_template("sheet.html.j2")
    return tpl.render(sheets=views, doc_title=title, standard_caution=STANDARD_CAUTION, version=__version__)


def _sheet_starts(doc, n: int) -> list[int] | None:
    """Page index where each sheet starts (from the ``sheet-<k>`` anchors), or None."""
    starts: dict[int, int] = {}
    for i, page in enumerate(doc.pages):
        for anchor in page.anchors:
            if anchor.startswith("sheet-") and anchor[6:].isdigit():
                starts.setdefault(int(anchor[6:]), i)
    if sorted(starts) != list(range(n)):
        return None
    return [starts[k] for k in range(n)]


def _atomic_write(data: bytes, target: Path) -> None:
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".pdf", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes the file private; outputs are for readers
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


_REF = re.compile(rb"(\d+) 0 R\b")
_NAME = re.compile(rb"/([^\s/\[\]()<>{}%]+)")


def _ref_number(ref: bytes) -> int:
    """The object number of an indirect reference such as ``b"12 0 R"``."""
    m = _REF.match(ref)
    if m is None:
        raise ValueError(f"not an indirect reference: {ref[:40]!r}")
    return int(m.group(1))


_PRUNED = ("XObject", "Pattern", "Shading", "ExtGState")  # per-name resources a page may not use


class _PageSplitter:
    """A ``write_pdf(finisher=...)`` that writes chosen pages of the chunk as one-page files.

    WeasyPrint hands the finisher the whole document as pydyf objects before it serializes
    them. Each picked page is written as a small PDF of its own: the page, its content, the
    resources its content names and every object those reach (fonts, chart forms), each
    object serialized once per chunk and copied as bytes under its original number; a
    cross-reference stream lists the objects present (``/Index`` ranges), so no reference
    needs rewriting. Each file gets its own catalog, page tree and ``/Title``. The chunk
    itself is never serialized (``pdf.write`` is replaced by a no-op), which with the split
    done here instead of by parsing the chunk again with pypdf saves ~10 ms per sheet
    (DEVELOPERS.md "Rendering").

    WeasyPrint shares one resource dictionary between all pages of a document; without the
    pruning each file would copy the chart forms and patterns of every sheet in the chunk.
    """

    def __init__(self, picks: Iterable[tuple[int, Path, str]]):
        self.picks = list(picks)

    def __call__(self, document, pdf) -> None:
        import pydyf

        objs = pdf.objects
        n_objs = len(objs)
        # the page tree's kids as object numbers, whether pydyf keeps them as (n, 0, "R") triples or as references
        page_numbers = [int(m) for m in _REF.findall(pydyf.Array(pdf.pages["Kids"]).data)]
        skip = {pdf.pages.number, pdf.catalog.number, *page_numbers}
        cache: dict[int, tuple[bytes, list[int]]] = {}

        raws: dict[int, bytes] = {}

        def body(n: int) -> tuple[bytes, list[int]]:
            """Serialized object ``n`` and the object numbers its dictionary refers to."""
            hit = cache.get(n)
            if hit is None:
                obj = objs[n]
                if isinstance(obj, pydyf.Stream):
                    head = pydyf.Dictionary(obj.extra).data
                    data = _stream_bytes(obj, raws.pop(n, None))
                else:
                    head = data = obj.data
                hit = cache[n] = (data, [int(m) for m in _REF.findall(head)])
            return hit

        for index, target, title in self.picks:
            page = objs[page_numbers[index]]
            res = objs[_ref_number(page["Resources"])]
            content = objs[_ref_number(page["Contents"])]
            raws[content.number] = raw = _raw_stream(content)  # to read the resource names it uses
            used = {m.decode("latin-1") for m in _NAME.findall(raw)}
            new_res = pydyf.Dictionary(
                {
                    k: (
                        pydyf.Dictionary({name: v2 for name, v2 in v.items() if name in used})
                        if k in _PRUNED and isinstance(v, dict)
                        else v
                    )
                    for k, v in res.items()
                }
            )
            info_n, res_n, xref_n = n_objs, n_objs + 1, n_objs + 2
            new_page = pydyf.Dictionary(page)
            new_page["Resources"] = f"{res_n} 0 R".encode()
            info = pydyf.Dictionary(
                {
                    "Title": pydyf.String(title),
                    "Creator": pydyf.String(f"ddscreen {__version__}"),
                    "Producer": pydyf.String(f"ddscreen via WeasyPrint {_weasyprint_version()}"),
                }
            )
            catalog = pydyf.Dictionary({k: v for k, v in pdf.catalog.items() if k in ("Type", "Pages", "Lang")})
            tree = pydyf.Dictionary({"Type": "/Pages", "Kids": pydyf.Array([page.number, 0, "R"]), "Count": 1})
            own = {
                pdf.pages.number: tree.data,
                pdf.catalog.number: catalog.data,
                page.number: new_page.data,
                info_n: info.data,
                res_n: new_res.data,
            }
            # every object reachable from the page's own dictionaries
            todo = [int(m) for m in _REF.findall(new_page.data + new_res.data)]
            seen: dict[int, bytes] = {}
            while todo:
                n = todo.pop()
                if n in seen or n in skip or n in own or not 0 < n < n_objs or objs[n].free == "f":
                    continue
                data, refs = body(n)
                seen[n] = data
                todo.extend(refs)
            seen.update(own)
            _atomic_write(_pdf_file(seen, root_n=pdf.catalog.number, info_n=info_n, xref_n=xref_n), target)
        pdf.write = lambda *args, **kwargs: None  # the chunk itself is not needed


def _pdf_file(objects: dict[int, bytes], *, root_n: int, info_n: int, xref_n: int) -> bytes:
    """A PDF 1.7 file of serialized objects under their own numbers, closed by a
    cross-reference stream (object ``xref_n``) whose ``/Index`` ranges list the numbers present:
    type-1 entries (byte offset), object 0 the head of the free list."""
    import pydyf

    out = [b"%PDF-1.7\n%\xf0\x9f\x96\xa4\n"]
    pos = len(out[0])
    offsets: dict[int, int] = {}
    for n in sorted(objects):
        chunk = b"%d 0 obj\n%s\nendobj\n" % (n, objects[n])
        offsets[n] = pos
        out.append(chunk)
        pos += len(chunk)
    offsets[xref_n] = pos
    index_ranges: list[int] = []
    rows = [b"\x00\x00\x00\x00\x00\xff\xff"]
    start: int | None = None
    prev = 0
    for n in [0, *sorted(offsets)]:
        if start is None:
            start = prev = n
        elif n == prev + 1:
            prev = n
        else:
            index_ranges += [start, prev - start + 1]
            start = prev = n
        if n:
            rows.append(b"\x01" + offsets[n].to_bytes(4, "big") + b"\x00\x00")
    assert start is not None  # the list starts with object 0, so the loop set it
    index_ranges += [start, prev - start + 1]
    xref = pydyf.Stream(
        [b"".join(rows)],
        pydyf.Dictionary(
            {
                "Type": "/XRef",
                "Size": xref_n + 1,
                "Index": pydyf.Array(index_ranges),
                "W": pydyf.Array([1, 4, 2]),
                "Root": f"{root_n} 0 R".encode(),
                "Info": f"{info_n} 0 R".encode(),
            }
        ),
        compress=True,
    )
    out.append(b"%d 0 obj\n%s\nendobj\nstartxref\n%d\n%%%%EOF\n" % (xref_n, xref.data, pos))
    return b"".join(out)


_ZLIB_LEVEL = 6  # pydyf uses 9: measured 2.9 -> 0.9 ms per sheet, files ~1% larger


def _raw_stream(obj) -> bytes:
    """The uncompressed bytes of a pydyf stream."""
    import pydyf

    data = pydyf.Stream(obj.stream).data  # b"<</Length n>>\nstream\n" + bytes + b"\nendstream"
    return data[data.index(b"\nstream\n") + 8 : -10]


def _stream_bytes(obj, raw: bytes | None = None) -> bytes:
    """A pydyf stream object serialized as pydyf does, but deflated at level ``_ZLIB_LEVEL``."""
    import pydyf

    if not obj.compress or "Filter" in obj.extra:
        return obj.data
    body = zlib.compress(_raw_stream(obj) if raw is None else raw, _ZLIB_LEVEL)
    extra = pydyf.Dictionary({**obj.extra, "Filter": "/FlateDecode", "Length": len(body)})
    return b"\n".join((extra.data, b"stream", body, b"endstream"))


def _weasyprint_version() -> str:
    import weasyprint

    return weasyprint.__version__


def _write_split(doc, picks: Iterable[tuple[int, Path, str]]) -> None:
    """Write chosen pages of a rendered WeasyPrint document as one-page files (see _PageSplitter).

    The splitter reads pydyf's objects, which are not a public API: if a WeasyPrint or pydyf
    release changes them, the pages are written through the public ``Document.copy`` and
    ``write_pdf`` instead (slower: fonts are subset once per page), with a warning in the log.
    """
    picks = list(picks)
    try:
        doc.write_pdf(finisher=_PageSplitter(picks))
    except (AttributeError, KeyError, TypeError, IndexError, ValueError) as exc:
        LOGGER.warning(
            "fast page split unavailable with this WeasyPrint/pydyf (%s: %s); writing pages one by one",
            type(exc).__name__,
            exc,
        )
        _write_pages_public(doc, picks)


def _write_pages_public(doc, picks: Iterable[tuple[int, Path, str]]) -> None:
    """One ``write_pdf`` per picked page through WeasyPrint's public API, each with its /Title."""
    for index, target, title in picks:
        one = doc.copy([doc.pages[index]])
        one.metadata.title = title
        one.metadata.generator = f"ddscreen {__version__}"
        _atomic_write(one.write_pdf(), target)


@contextlib.contextmanager
def _gc_paused():
    """Switch Python's cyclic garbage collector off while WeasyPrint lays out and writes.

    Layout allocates hundreds of thousands of small objects that live until the chunk is
    written; each automatic collection walks all of them again. Sampling the render with
    py-spy showed ~28% of the time in ``gc_collect_main`` (DEVELOPERS.md "Rendering"). The pause
    is bounded by one chunk; reference counting still frees everything acyclic and the
    collector, switched back on, cleans up the rest.
    """
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


def _render_one(sheet: dict[str, Any], target: Path, paper: str, start_level: int = 0) -> int:
    """Render one sheet alone, shrinking until it fits one page; returns the level used."""
    title = sheet_title(sheet)
    for level in range(start_level, MAX_LEVEL + 1):
        with _gc_paused():
            doc = _render_html(_sheets_html([sheet_view(sheet, level)], title), "sheet.css", paper)
            if len(doc.pages) == 1:
                _write_split(doc, [(0, target, title)])
                return level
        LOGGER.info("sheet %r needs %d pages at shrink level %d", sheet.get("building_id"), len(doc.pages), level)
    raise RenderError(
        f"sheet for building {sheet.get('building_id')!r} does not fit on one page "
        f"even at the smallest layout (level {MAX_LEVEL})"
    )


def _render_chunk(sheets: list[dict[str, Any]], targets: list[str], paper: str) -> dict[str, Any]:
    """Render a chunk of sheets as one document and split it; returns stats."""
    targets_p = [Path(t) for t in targets]
    interrupts.pause_point("render_chunk")  # test hook (DEVELOPERS.md "Test hooks")
    interrupts.raise_if_stopped()  # this process was told to stop: render nothing more
    cpu = time.thread_time()
    try:
        with _gc_paused():
            result = _render_chunk_inner(sheets, targets_p, paper)
        result["cpu_s"] = time.thread_time() - cpu  # this thread's CPU time, for the benchmark
        return result
    except BaseException as exc:  # FatalURLFetchingError is a BaseException
        if isinstance(exc, (RenderError, KeyboardInterrupt, SystemExit)):
            raise
        ids = ", ".join(repr(s.get("building_id")) for s in sheets[:3])
        raise RenderError(
            f"rendering sheets failed for the chunk starting with {ids}: {type(exc).__name__}: {exc}"
        ) from exc


def _render_chunk_inner(sheets: list[dict[str, Any]], targets_p: list[Path], paper: str) -> dict[str, Any]:
    """Lay out one chunk, split the one-page sheets off, re-render the others alone."""
    views = [sheet_view(s, 0) for s in sheets]
    doc = _render_html(_sheets_html(views, "ddscreen building sheets"), "sheet.css", paper)
    n = len(sheets)
    starts = _sheet_starts(doc, n)
    refit: list[int] = []
    if len(doc.pages) == n and starts == list(range(n)):
        good = list(range(n))
    elif starts is not None:
        ends = starts[1:] + [len(doc.pages)]
        good = [k for k in range(n) if ends[k] - starts[k] == 1]
        refit = [k for k in range(n) if ends[k] - starts[k] != 1]
    else:  # cannot tell which page is whose: every sheet on its own
        starts, good, refit = [], [], list(range(n))
    interrupts.raise_if_stopped()  # told to stop during the layout: write nothing
    if good:
        _write_split(doc, [(starts[k], targets_p[k], sheet_title(sheets[k])) for k in good])
    del doc
    levels = []
    for k in refit:
        interrupts.raise_if_stopped()
        levels.append(_render_one(sheets[k], targets_p[k], paper, 1))
    return {"batched": len(good), "refit": len(refit), "levels": levels}


def _run_chunks(chunks: list[tuple[list, list]], paper: str, workers: int) -> list[dict[str, Any]]:
    """Render chunks on ``workers`` processes: this one (in a thread) and ``workers - 1`` children.

    This process takes chunks from the back of the list and the children from the front, one
    chunk in flight per child, so the work balances itself when the machine is shared. The
    parent renders too instead of waiting: one child fewer to start (importing WeasyPrint and
    warming a renderer is ~1 s of CPU per process, measured in DEVELOPERS.md "Rendering").
    """
    if workers == 1 or len(chunks) == 1:
        return [_render_chunk(c, t, paper) for c, t in chunks]
    import threading
    from collections import deque
    from concurrent.futures import FIRST_COMPLETED, wait

    results: list[Any] = [None] * len(chunks)
    todo = deque(range(len(chunks)))
    lock = threading.Lock()
    failed: list[BaseException] = []

    def take(front: bool) -> int | None:
        with lock:
            if failed or not todo:
                return None
            return todo.popleft() if front else todo.pop()

    def here() -> None:
        try:
            while (k := take(False)) is not None:
                results[k] = _render_chunk(*chunks[k], paper)
        except BaseException as exc:  # handed to the calling thread below
            with lock:
                failed.append(exc)

    ctx = multiprocessing.get_context("forkserver")
    # the fork server imports the renderer's heavy modules once; each child forks from it
    # (screening.lifeline first: there it makes the fork server die with this process)
    ctx.set_forkserver_preload(["screening.lifeline", "screening.report", "weasyprint", "pydyf"])
    n_children = min(workers - 1, len(chunks) - 1)
    with (
        _main_not_reimported(),
        ProcessPoolExecutor(
            max_workers=n_children, mp_context=ctx, initializer=_worker_init, max_tasks_per_child=100
        ) as pool,
    ):
        local = threading.Thread(target=here, name="ddscreen-render", daemon=True)
        local.start()
        in_flight: dict[Any, int] = {}
        try:
            while True:
                while len(in_flight) < n_children and (k := take(True)) is not None:
                    in_flight[pool.submit(_render_chunk, *chunks[k], paper)] = k
                if not in_flight:
                    break
                # short waits: a signal the kernel hands to another thread runs its handler here
                done, _ = wait(in_flight, timeout=_WAIT_S, return_when=FIRST_COMPLETED)
                for f in done:
                    results[in_flight.pop(f)] = f.result()
            while local.is_alive():
                local.join(_WAIT_S)
        except BaseException as exc:
            with lock:
                failed.append(exc)
            for f in in_flight:
                f.cancel()
            if isinstance(exc, KeyboardInterrupt):  # Ctrl-C or SIGTERM (errors.Interrupted)
                _stop_workers(pool)
        finally:
            local.join()
    if failed:
        raise failed[0]
    return results


# [s] how long the main thread blocks at a time while the renderers work. Python runs signal
# handlers in the main thread only, and a SIGINT/SIGTERM that the kernel delivers to another
# thread (the render thread, the pool's threads) does not wake a main thread blocked on a lock.
_WAIT_S = 0.2


def _stop_workers(pool: ProcessPoolExecutor) -> None:
    """End the pool's workers now, mid-chunk, and wait for them (the run was told to stop).

    Otherwise the pool's shutdown would wait for every chunk in flight, and a worker could
    still be writing into the run's temporary folder while the run removes it.
    """
    terminate = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    procs = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    if terminate is not None:
        terminate()
    for p in procs:
        try:
            p.terminate()
        except Exception:  # noqa: BLE001 - already gone, closed, or stopped while it was starting
            pass
    for p in procs:
        try:
            p.join(10)
        except Exception:  # noqa: BLE001
            pass


@contextlib.contextmanager
def _main_not_reimported():
    """Keep the render workers from running the caller's ``__main__`` module again.

    A forkserver (or spawn) child imports the parent's main module, by path or by its
    ``python -m`` name, before its first task. The workers need nothing from it, and a
    caller's script without an ``if __name__ == "__main__":`` guard (or one read from
    stdin) would run again in every child: for :func:`screening.runner.run`, a second run
    that finds the lock taken and a broken pool. While the pool lives (workers are started
    on demand and replaced after ``max_tasks_per_child``), ``__main__`` shows the
    multiprocessing machinery neither a file nor a spec; both are put back afterwards.
    """
    import sys

    main = sys.modules.get("__main__")
    if main is None:
        yield
        return
    saved: dict[str, Any] = {k: main.__dict__[k] for k in ("__file__", "__spec__") if k in main.__dict__}
    main.__dict__.pop("__file__", None)
    if "__spec__" in saved:
        main.__spec__ = None
    try:
        yield
    finally:
        main.__dict__.update(saved)


def _worker_init() -> None:
    # a worker dies with the main process, whatever ends it (screening/lifeline.py), and leaves
    # Ctrl-C to the main process, which stops the workers itself (_stop_workers)
    import signal

    lifeline.die_with_parent()
    lifeline.watch_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _state()
    gc.freeze()  # the modules and renderer state live as long as the worker: keep them out of collections


# --------------------------------------------------------------------------------------
# public API


def render_sheets(
    sheets: list[dict[str, Any]],
    out_dir: Path,
    *,
    paper: str = "Letter",
    workers: int = 2,
    chunk_size: int = 50,
    stats: dict[str, Any] | None = None,
    chunk_runner: Callable[[list[tuple[list, list]], str], list[dict[str, Any]]] | None = None,
) -> list[Path]:
    """Write one single-page PDF per sheet into ``out_dir`` (``<safe name>.pdf``).

    Parameters
    ----------
    sheets : list of sheet dicts (see DEVELOPERS.md "Rendering" for the keys).
    out_dir : an existing or creatable folder; nothing is written outside it.
    paper : "Letter" or "A4".
    workers : processes to use; 1 renders in this process.
    chunk_size : sheets per WeasyPrint document.
    stats : optional dict filled with counts (chunks, batched, refit, levels) and ``cpu_s``,
        the CPU time the renderers spent on the chunks (all processes; not their start-up).
    chunk_runner : renders the chunks elsewhere instead of ``workers`` processes here
        (``cluster.DaskChunks.render_chunks``: ``(chunks, paper)`` → each chunk's stats, in order).

    Returns
    -------
    The written paths, in the order of ``sheets``.
    """
    if paper not in PAPERS:
        raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
    if not isinstance(workers, int) or workers < 1:
        raise ValueError(f"workers must be an int >= 1, got {workers!r}")
    if not isinstance(chunk_size, int) or chunk_size < 1:
        raise ValueError(f"chunk_size must be an int >= 1, got {chunk_size!r}")
    for k, s in enumerate(sheets):
        if not isinstance(s, dict) or not isinstance(s.get("building_id"), str):
            raise ValueError(f"sheets[{k}] must be a dict with a str 'building_id', got {type(s).__name__}")
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the sheets folder {str(out_dir)!r}: {exc.strerror or exc}") from exc
    root = out_dir.resolve()
    names = assign_filenames([s["building_id"] for s in sheets])
    targets = []
    for s in sheets:
        t = root / f"{names[s['building_id']]}.pdf"
        if t.parent != root:  # pragma: no cover - safe_filename never yields a separator
            raise RenderError(f"file name for building {s['building_id']!r} leaves the output folder")
        targets.append(str(t))
    if not sheets:
        return []
    n = len(sheets)
    # an even split: a multiple of `workers` chunks of at most chunk_size sheets each, so no
    # worker is left with a short tail (100 sheets on 2 workers: 2 x 50; 120: 4 x 30)
    n_chunks = min(n, workers * math.ceil(n / (workers * chunk_size)))
    size = math.ceil(n / n_chunks)
    chunks = [(sheets[i : i + size], targets[i : i + size]) for i in range(0, n, size)]
    results = chunk_runner(chunks, paper) if chunk_runner is not None else _run_chunks(chunks, paper, workers)
    if stats is not None:
        stats.update(
            chunks=len(chunks),
            chunk_size=size,
            batched=sum(r["batched"] for r in results),
            refit=sum(r["refit"] for r in results),
            levels=[lv for r in results for lv in r["levels"]],
            cpu_s=sum(r["cpu_s"] for r in results),
        )
    return [Path(t) for t in targets]


def render_sheets_one_by_one(sheets: list[dict[str, Any]], out_dir: Path, *, paper: str = "Letter") -> list[Path]:
    """One WeasyPrint document per sheet, in this process: the slow baseline the
    benchmark compares against, and the fallback path for a single sheet."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    names = assign_filenames([s["building_id"] for s in sheets])
    paths = []
    for s in sheets:
        t = out_dir.resolve() / f"{names[s['building_id']]}.pdf"
        _render_one(s, t, paper, 0)
        paths.append(t)
    return paths


# --------------------------------------------------------------------------------------
# ranking report


# The ranked table is laid out as pages of side-by-side columns of newline-separated text
# (white-space: pre; one box per column and page instead of one per cell): measured
# ~8x cheaper than the <table> it replaced (DEVELOPERS.md "Rendering"). The text does not
# wrap by itself, so every field is wrapped here to its column's width, measured with the
# font's own advance widths (``_text_width``), and the other columns of that row get blank
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
_ROW_PT = 9.6
_ROWS_PER_PAGE = {paper: int((h - 30 * 72 / 25.4 - 40) // _ROW_PT) for paper, h in (("Letter", 792.0), ("A4", 841.89))}
_FIRST_PAGE_LOSS = 6
MAX_CELL_LINES = 6  # a field longer than this many lines ends its last line with "…"
_TABLE_PT = {"body": 7.2, "small": 6.6}  # ranking.css: .thead/.tbl font size; .k9/.k10 (flags, issues)
_CELL_PAD_MM = 0.8  # ranking.css: padding left and right of each column
_COLUMN_CSS = [{"cls": f"k{j}", "width": w, "right": right} for j, (_k, _h, w, right) in enumerate(RANK_COLUMNS)]
MAX_ISSUE_LINES = 1000  # data-issue lines in ranking.pdf; data_issues.csv has them all
PLAN_LINES = 10  # audit-plan rows on ranking.pdf's first page (the rest: audit_plan.csv)


_ADVANCES: dict[bool, dict[int, float]] = {}


def _text_width(text: str, size: float, *, bold: bool = False) -> float:
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


def _wrap(text: str, width: float, size: float, *, bold: bool = False, max_lines: int = MAX_CELL_LINES) -> list[str]:
    """``text`` as lines no wider than ``width`` pt: broken after blanks and ``; , /``, a word too
    long for a line broken after a ``_`` (flag codes) or else between characters; at most ``max_lines`` lines, the last then ending in …"""
    text = _CONTROL.sub(" ", text).strip()
    if not text:
        return [""]

    def fits(t: str) -> bool:
        return _text_width(t.rstrip(), size, bold=bold) <= width

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
    content = (_CONTENT_MM[paper]) * 72 / 25.4
    return [content * w / 100 - 2 * _CELL_PAD_MM * 72 / 25.4 - 0.5 for _k, _h, w, _r in RANK_COLUMNS]


def _table_header(paper: str, eu: str) -> list[dict[str, str]]:
    cols = [
        _wrap(h.format(eu=eu), w, _TABLE_PT["body"], bold=True)
        for (_k, h, _w, _r), w in zip(RANK_COLUMNS, _column_widths(paper))
    ]
    n = max(len(c) for c in cols)
    return [{"cls": f"k{j}", "text": "\n".join(c + [""] * (n - len(c)))} for j, c in enumerate(cols)]


def _table_pages(rows: list[dict[str, str]], paper: str, header_lines: int = 1) -> list[dict[str, Any]]:
    """The ranked rows cut into pages: per page the column texts (each row's fields wrapped to
    their column and padded with blank lines to the row's height) and each row's height [pt]."""
    widths = _column_widths(paper)
    sizes = [
        _TABLE_PT["small"] if key in ("flags", "data_issues") else _TABLE_PT["body"] for key, _h, _w, _r in RANK_COLUMNS
    ]
    wrapped = []
    for r in rows:
        cells = [_wrap(r[key], w, size) for (key, _h, _w, _r), w, size in zip(RANK_COLUMNS, widths, sizes)]
        wrapped.append((max(len(c) for c in cells), cells))
    budget = _ROWS_PER_PAGE[paper] - (header_lines - 1)
    pages: list[dict[str, Any]] = []
    i, first = 0, True
    while i < len(wrapped):
        room = budget - (_FIRST_PAGE_LOSS if first else 0)
        chunk: list[tuple[int, list[list[str]]]] = []
        while i < len(wrapped) and (not chunk or sum(n for n, _ in chunk) + wrapped[i][0] <= room):
            chunk.append(wrapped[i])
            i += 1
        pages.append(
            {
                "first": first,
                "lines": sum(n for n, _ in chunk),
                "stripes": [f"{n * _ROW_PT:g}" for n, _ in chunk],
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


def ranking_view(report: dict[str, Any], paper: str = "Letter") -> dict[str, Any]:
    """Display strings for ranking.html.j2 (``paper`` sets how many rows go on a table page)."""
    if paper not in PAPERS:
        raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
    run = report.get("run") or {}
    cur = report.get("currency") or "$"
    eu = report.get("energy_unit") or ""
    totals = report.get("totals") or {}
    co2_v, co2_u = fmt_co2e(totals.get("excess_co2e_kg"))

    def joined(v):  # flag and issue codes, "; " between them (a line may break there)
        if v is None:
            return ""
        codes = v.split(";") if isinstance(v, str) else [str(x) for x in v]
        return _cut("; ".join(c.strip() for c in codes if c.strip()), 200)

    rows = [
        {
            "rank": str(r.get("rank")) if isinstance(r.get("rank"), int) else "",
            "building_id": _cut(r.get("building_id"), 40),
            "name": _cut(r.get("name"), 80),
            "use_type": _cut(r.get("use_type"), 20),
            "tier": _cut(r.get("tier"), 20),
            "ratio": fmt_ratio(r.get("ratio")),
            "heating_intensity": fmt_num(r.get("heating_intensity")),
            "excess_energy": fmt_num(r.get("excess_energy")),
            "excess_cost": fmt_money(r.get("excess_cost"), cur),
            "expected_recoverable_cost": fmt_money(r.get("expected_recoverable_cost"), cur),
            "flags": joined(r.get("flags")),
            "data_issues": joined(r.get("data_issues")),
        }
        for r in report.get("rows") or []
    ]
    counts = report.get("counts") or {}
    scalars = {k: v for k, v in counts.items() if not isinstance(v, dict)}
    nested = {k: v for k, v in counts.items() if isinstance(v, dict)}

    def count_rows(d, codes=False):  # flag and issue codes stay as written (they match the table)
        return [
            {"label": _cut(str(k) if codes else str(k).replace("_", " "), 40), "value": fmt_num(v)}
            for k, v in d.items()
        ]

    tiers_in = report.get("tiers")
    if not tiers_in and isinstance(nested.get("per_tier"), dict):
        tiers_in = [{"tier": k, "count": v} for k, v in nested["per_tier"].items()]
    omitted = report.get("rows_omitted")
    header = _table_header(paper, eu)
    issues_in = report.get("data_issues") or []
    return {
        "run": {
            k: _cut(run.get(k, "n/a"), 60)
            for k in ("run_id", "as_of", "window_start", "window_end", "run_date", "version", "units")
        },
        "counts": count_rows(scalars),
        "per_flag": count_rows(nested.get("per_flag") or {}, codes=True),
        "per_data_issue": count_rows(nested.get("per_data_issue") or {}, codes=True),
        "tiers": [
            {
                "tier": _cut(t.get("tier"), 24),
                "count": fmt_num(t.get("count")),
                "meaning": _cut(t.get("meaning") or "", 80),
            }
            for t in tiers_in or []
        ],
        "rows_omitted": fmt_num(omitted) if isinstance(omitted, int) and omitted > 0 else "",
        "total_energy": fmt_num(totals.get("excess_energy")),
        "energy_unit": eu,
        "total_cost": fmt_money(totals.get("excess_cost"), cur),
        "audit_energy": fmt_num(totals["audit_list_excess_energy"]) if "audit_list_excess_energy" in totals else "",
        "audit_cost": fmt_money(totals["audit_list_excess_cost"], cur) if "audit_list_excess_cost" in totals else "",
        "total_co2e": co2_v,
        "co2e_unit": co2_u,
        "recoverable_cost": fmt_money(totals["expected_recoverable_cost"], cur)
        if "expected_recoverable_cost" in totals
        else "",
        "plan_cost": fmt_money(totals.get("audit_plan_expected_recoverable_cost"), cur),
        "intensity_unit": report.get("intensity_unit", ""),
        "chart": svg_img(charts.ratio_histogram(report.get("ratios") or []), "distribution of ratios"),
        "top": rows[:10],
        # this quarter's audit plan (ranking_report's "plan"): at most PLAN_LINES rows on the first page
        "plan": None
        if report.get("plan") is None
        else [
            {
                "visit": str(p.get("visit")),
                "rank": str(p.get("rank")),
                "building_id": _cut(p.get("building_id"), 40),
                "name": _cut(p.get("name"), 60),
                "look_for": _cut(
                    p.get("mechanisms")
                    or ("what changed" if "rose" in (p.get("waste_kind") or "") else "not told apart"),
                    26,
                ),
                "savings": fmt_money(p.get("expected_recoverable_cost"), cur),
                "share": fmt_pct(p.get("cumulative_share")),
            }
            for p in report["plan"][:PLAN_LINES]
        ],
        "plan_more": fmt_num(len(report.get("plan") or []) - PLAN_LINES)
        if len(report.get("plan") or []) > PLAN_LINES
        else "",
        "header": header,
        "table_pages": _table_pages(rows, paper, header_lines=header[0]["text"].count("\n") + 1),
        "data_issues": [
            {
                "building_id": _one_line(d.get("building_id"), 40),
                "name": _one_line(d.get("name"), 80),
                "code": _one_line(d.get("code"), 40),
                "explanation": _cut(d.get("explanation"), 2000),
            }
            for d in issues_in[:MAX_ISSUE_LINES]
        ],
        "data_issues_more": fmt_num(len(issues_in) - MAX_ISSUE_LINES) if len(issues_in) > MAX_ISSUE_LINES else "",
    }


def render_ranking(report: dict[str, Any], out_path: Path, *, paper: str = "Letter") -> Path:
    """Write the portfolio report (summary page, ranked table, data issues) to ``out_path``."""
    if paper not in PAPERS:
        raise ValueError(f"paper must be one of {sorted(PAPERS)}, got {paper!r}")
    if not isinstance(report, dict):
        raise ValueError(f"report must be a dict, got {type(report).__name__}")
    out_path = Path(out_path)
    view = ranking_view(report, paper)
    from .savings_page import savings_view  # the savings page (issue 17), when the report has "savings"

    view["savings"] = savings_view(report)
    title = f"Heating screening ranking, run {view['run']['run_id']}"
    html = (
        _state()["env"]
        .get_template("ranking.html.j2")
        .render(v=view, doc_title=title, standard_caution=STANDARD_CAUTION, version=__version__, columns=_COLUMN_CSS)
    )
    try:
        with _gc_paused():
            pdf = _render_html(html, "ranking.css", paper).write_pdf()
    except BaseException as exc:
        if isinstance(exc, (KeyboardInterrupt, SystemExit)):
            raise
        raise RenderError(f"rendering {str(out_path)!r} failed: {type(exc).__name__}: {exc}") from exc
    try:
        out_path.parent.mkdir(parents=True, exist_ok=True)
        _atomic_write(pdf, out_path)
    except OSError as exc:
        raise OutputError(f"cannot write {str(out_path)!r}: {exc.strerror or exc}") from exc
    return out_path
