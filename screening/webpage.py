"""index.html: the run as one self-contained page for a browser (a shared drive, an intranet).

One file, no remote fetch, no external script, stylesheet or font: the CSS and the script
(``templates/index.css``, ``templates/index.js``) are inlined, the distribution chart is the
SVG of ranking.pdf (``charts.ratio_histogram``) inline, and the buildings are JSON inside a
``<script type="application/json">`` element, with ``<``, ``>`` and ``&`` written as
``\\u003c``… so that no value can close the element. The page shows the run summary, this
quarter's audit plan and a table of every building that sorts and filters in the browser;
its state (sort and filters) lives in the URL's hash, e.g.
``index.html#sort=cost-desc&tier=Audit%20first&q=school``. Every text goes through jinja2's
autoescape (HTML) or ``textContent`` (the script), never markup built from data.

The same results give the same bytes (no clock, no random values in the page).
"""

from __future__ import annotations

import json
import math
from fractions import Fraction
from pathlib import Path
from typing import Any
from urllib.parse import quote

import jinja2
import numpy as np
import polars as pl
from markupsafe import Markup

from . import screen
from .outputs import Display
from .render import charts
from .render.display import STANDARD_CAUTION, fmt_money, fmt_num, fmt_pct
from .render.savings_page import hit_rate_lines
from .resources import templates_dir
from .wording import fmt

#: What the page's "look for" column says when the evidence names no mechanism but the use rose.
STEP_UP_KIND = "what changed"
#: … and when there is excess to recover but no mechanism stands out.
NOT_TOLD_APART = "not told apart"
#: The tiers whose buildings are worth a visit (screen.TIERS: the plan, then the ones after it).
VISIT_TIERS = tuple(name for name, _m in screen.TIERS[:2])

#: The link texts and files of the run's other outputs, shown at the top of the page.
OTHER_OUTPUTS = (
    ("ranking.pdf", "the portfolio report (PDF)"),
    ("ranking.xlsx", "the tables as a workbook"),
    ("ranking.csv", "the ranking (CSV)"),
    ("audit_plan.csv", "the audit plan (CSV)"),
    ("data_issues.csv", "data issues (CSV)"),
    ("rejects.csv", "rejected input rows (CSV)"),
)


#: What a JSON text inside a ``<script>`` element escapes beyond JSON itself: ``<``, ``>``, ``&`` (no value
#: can end the element or open a comment) and the two JavaScript line separators.
SCRIPT_ESCAPES = (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e"), ("\u2028", "\\u2028"), ("\u2029", "\\u2029"))


def json_for_script(obj: Any) -> Markup:
    """``obj`` as JSON that is safe inside a ``<script>`` element (:data:`SCRIPT_ESCAPES`)."""
    text = json.dumps(obj, ensure_ascii=False, sort_keys=True, separators=(",", ":"), allow_nan=False)
    for ch, esc in SCRIPT_ESCAPES:
        text = text.replace(ch, esc)
    return Markup(text)


def _env() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(templates_dir()),
        autoescape=jinja2.select_autoescape(
            enabled_extensions=("html", "j2", "xml"), default=True, default_for_string=True
        ),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )


def _href(path: str | None) -> str | None:
    """A relative file path as a URL path (sheet stems are already URL-safe; this keeps it so)."""
    return None if path is None else quote(path, safe="/")


def _kinds(mechanisms: list[str] | None, waste_kind: str | None) -> list[str]:
    if mechanisms:
        return list(mechanisms)
    return [STEP_UP_KIND] if "rose" in (waste_kind or "") else []


# ---------------------------------------------------------------- display texts over a column
# render.display's per-value formats (fmt_num, fmt_ratio, fmt_money) over a whole column: the same texts
# (tests/test_webpage.py compares them on awkward values). Here rather than in render.display, whose room
# imports nothing from the rest of the package; the exact rounding is wording.fmt's.


def _at_least(power: int) -> float:
    """The smallest float64 at or above 10**power exactly (10**power itself when exact)."""
    t = float(Fraction(10) ** power)
    return t if Fraction(t) >= Fraction(10) ** power else math.nextafter(t, math.inf)


#: The decade edges 10^-2 … 10^1 as floats compared exactly (``x >= edge`` exactly when x >= 10^k), for
#: the exponent of a value from 1e-3 to 100 (fmt_num's 3 significant digits).
_DECADE_EDGES = np.array([_at_least(k) for k in (-2, -1, 0, 1)])


def _floats(x: pl.Series) -> np.ndarray:
    """A numeric Series as float64 values, null as NaN."""
    return np.ascontiguousarray(x.cast(pl.Float64).fill_null(np.nan).to_numpy(), dtype=float)


def _gathered(n: int, parts: list[tuple[np.ndarray, pl.Series]]) -> pl.Series:
    """One String Series of ``n`` values from ``parts`` (row positions, their texts) that cover each row once."""
    if not parts:
        return pl.Series([], dtype=pl.String)
    rows = np.concatenate([idx for idx, _t in parts])
    where = np.empty(n, dtype=np.int64)
    where[rows] = np.arange(rows.size)
    return pl.concat([t.cast(pl.String) for _idx, t in parts]).gather(where)


def _same(text: str, idx: np.ndarray) -> tuple[np.ndarray, pl.Series]:
    return idx, pl.Series([text], dtype=pl.String).new_from_index(0, idx.size)


def _num_parts(x: np.ndarray, rows: np.ndarray) -> list[tuple[np.ndarray, pl.Series]]:
    """:func:`~screening.render.display.fmt_num` (``sig`` = 3) of ``x[rows]`` [float64, NaN for missing], column-wise, as
    (row positions, texts) parts for :func:`_gathered`.

    The figures from 1e-3 to 1e9 in magnitude are rounded exactly as Python's format rounds them (the exact
    binary value, ties to even: :func:`screening.wording.fmt`); 3 significant digits are ``f"{x:.{k}f}"`` with
    ``k`` = 2 - the value's decade, trailing zeros and point removed (what the ``g`` format does). Values
    below 1e-3 or from 1e9 (rare: ``1.2e-05``, ``3.40e+09``) are formatted by :func:`~screening.render.display.fmt_num` itself.
    """
    v = x[rows]
    a = np.abs(v)
    finite = np.isfinite(v)
    parts = [_same("n/a", rows[np.isnan(v)]), _same("0", rows[a == 0])]
    parts += [_same("∞", rows[v == np.inf]), _same("-∞", rows[v == -np.inf])]
    whole = (a >= 100) & (a < 1e9)
    parts.append((rows[whole], fmt(pl.Series(v[whole], dtype=pl.Float64), 0)))
    sig = (a >= 1e-3) & (a < 100)
    decimals = 5 - np.searchsorted(_DECADE_EDGES, a, side="right")  # 2 - floor(log10 a), exact
    for k in np.unique(decimals[sig]):
        at = sig & (decimals == k)
        text = fmt(pl.Series(v[at], dtype=pl.Float64), int(k)).str.strip_chars_end("0").str.strip_chars_end(".")
        parts.append((rows[at], text))
    rare = finite & (a > 0) & ((a < 1e-3) | (a >= 1e9))
    parts.append((rows[rare], pl.Series([fmt_num(float(t)) for t in v[rare]], dtype=pl.String)))
    return parts


def fmt_num_col(x: pl.Series) -> pl.Series:
    """:func:`~screening.render.display.fmt_num` of every value of a numeric Series (3 significant digits), the same texts, column-wise."""
    v = _floats(x)
    return _gathered(v.size, _num_parts(v, np.arange(v.size))).alias(x.name)


def fmt_ratio_col(x: pl.Series) -> pl.Series:
    """:func:`~screening.render.display.fmt_ratio` of every value of a numeric Series, the same texts, column-wise: 2 decimals below
    1e6 in magnitude (``-0.00`` keeps its sign, as Python's format does), else :func:`fmt_num_col`."""
    v = _floats(x)
    two = np.isfinite(v) & (np.abs(v) < 1e6)
    rows = np.arange(v.size)
    parts = [(rows[two], fmt(pl.Series(v[two], dtype=pl.Float64), 2).str.replace_all(",", "", literal=True))]
    return _gathered(v.size, parts + _num_parts(v, rows[~two])).alias(x.name)


def fmt_money_col(x: pl.Series, currency: str = "$") -> pl.Series:
    """:func:`~screening.render.display.fmt_money` of every value of a numeric Series, the same texts, column-wise: ``-`` for a
    negative amount, ``currency``, then :func:`fmt_num_col` of the magnitude; ``n/a``/``∞`` as fmt_num."""
    v = _floats(x)
    ok = np.isfinite(v)
    texts = _gathered(v.size, _num_parts(np.where(ok, np.abs(v), v), np.arange(v.size)))
    frame = pl.DataFrame({"text": texts, "ok": ok, "neg": ok & (v < 0)})
    lead = pl.when("neg").then(pl.lit("-" + currency)).when("ok").then(pl.lit(currency)).otherwise(pl.lit(""))
    return frame.select(pl.concat_str([lead, pl.col("text")]).alias(x.name)).to_series()


#: Each character a string value's JSON text escapes (``json.dumps(..., ensure_ascii=False)``: the quote,
#: the backslash and the control characters) and, for the page's script element, :data:`SCRIPT_ESCAPES`.
_STRING_ESCAPES = {
    **{ch: json.dumps(ch)[1:-1] for ch in ['"', "\\", *map(chr, range(0x20))]},
    **dict(SCRIPT_ESCAPES),
}
#: The characters :func:`_href` writes as they are (``urllib.parse.quote``'s unreserved ones and "/").
_URL_SAFE = r"^[A-Za-z0-9_.~/-]*$"


def _json_string(e: pl.Expr) -> pl.Expr:
    """A String column's values as JSON strings for the page's script (null stays null)."""
    text = e.str.replace_many(list(_STRING_ESCAPES), list(_STRING_ESCAPES.values()))
    return pl.concat_str([pl.lit('"'), text, pl.lit('"')])


def _json_number(x: pl.Series) -> pl.Series:
    """Finite floats as JSON numbers, byte for byte Python's ``repr``; ``null`` for null, NaN and ±inf.

    polars writes the same shortest round-trip digits as ``repr`` but values below 1e-4 in magnitude in
    its own way (``0.000015``, ``1.5e-7``): those (rare) are written by ``repr`` itself.
    """
    v = x.cast(pl.Float64)
    out = pl.select(pl.when(v.is_finite()).then(v.cast(pl.String)).otherwise(pl.lit("null"))).to_series()
    tiny = (v.abs() < 1e-4) & (v != 0)
    idx = tiny.fill_null(False).arg_true()
    if idx.len():
        out = out.scatter(idx, [repr(float(t)) for t in v.gather(idx).to_list()])
    return out


def _sheet_paths(building_id: pl.Series, sheet_files: dict[str, str] | None) -> pl.Series:
    """Each building's sheet as :func:`_href` writes it (null without one), looked up column-wise."""
    if not sheet_files:
        return pl.Series("sheet", [None] * building_id.len(), dtype=pl.String)
    files = pl.DataFrame(
        {"building_id": list(sheet_files), "sheet": list(sheet_files.values())},
        schema={"building_id": pl.String, "sheet": pl.String},
    )
    path = building_id.to_frame("building_id").join(files, on="building_id", how="left", maintain_order="left")["sheet"]
    odd = (~path.str.contains(_URL_SAFE)).fill_null(False).arg_true()  # rare: quote() itself
    if odd.len():
        path = path.scatter(odd, [_href(t) for t in path.gather(odd).to_list()])
    return path


def page_json(
    ranking: pl.DataFrame, results: pl.DataFrame, sheet_files: dict[str, str] | None, currency: str
) -> Markup:
    """The JSON the page's script renders (:func:`page_json_utf8` as text)."""
    return Markup(page_json_utf8(ranking, results, sheet_files, currency).decode("utf-8"))


def page_json_utf8(
    ranking: pl.DataFrame, results: pl.DataFrame, sheet_files: dict[str, str] | None, currency: str
) -> bytes:
    """The JSON the page's script renders, safe inside its ``<script>`` element, as UTF-8: the bytes of
    :func:`json_for_script` for ``{"rows": [...], "tiers": [...]}``, built column by column with polars
    expressions (no per-building loop, no ``json.dumps`` of the rows).

    One row per building in rank order, with raw numbers (for sorting; null where not finite) and display
    texts: ``rank``, ``id``, ``name``, ``tier``, ``tier_order`` (its place in screen.TIERS), ``use``,
    ``station``, ``fuel``, ``ratio`` and ``ratio_text``, ``cost`` and ``cost_text`` (expected recoverable
    cost), ``excess`` and ``excess_text``, ``review``, ``kinds`` (the mechanisms; "what changed" where the
    use rose without one), ``kind_text`` ("not told apart" where none, if a visit is due or the evidence is
    strong, as in the audit plan), ``why``, ``flags``, ``issues``, and ``sheet``: the building's PDF relative
    to the page, null when no sheets were written.
    """
    tiers = [name for name, _m in screen.TIERS]
    rows = ranking.select(
        "rank",
        "building_id",
        "name",
        "tier",
        "use_type",
        "station_id",
        "heating_fuel",
        "ratio",
        "expected_recoverable_cost",
        "excess_cost",
        "needs_review",
        "waste_kind",
        "flags",
        "data_issues",
    ).join(results.select("building_id", "mechanisms"), on="building_id", how="left", maintain_order="left")
    rows = rows.with_columns(
        _json_number(rows["ratio"]).alias("ratio_json"),
        _json_number(rows["expected_recoverable_cost"]).alias("cost_json"),
        _json_number(rows["excess_cost"]).alias("excess_json"),
        fmt_ratio_col(rows["ratio"]).alias("ratio_text"),
        fmt_money_col(rows["expected_recoverable_cost"], currency).alias("cost_text"),
        fmt_money_col(rows["excess_cost"], currency).alias("excess_text"),
        _sheet_paths(rows["building_id"], sheet_files).alias("sheet"),
    )

    def text(c: str) -> pl.Expr:  # a text shown as is ("" for missing)
        return _json_string(pl.col(c).cast(pl.String).fill_null(""))

    def listed(c: str) -> pl.Expr:  # "a;b" shown as "a, b"
        return _json_string(pl.col(c).cast(pl.String).fill_null("").str.replace_all(";", ", ", literal=True))

    mech = pl.col("mechanisms")
    has = (mech.list.len() > 0).fill_null(False)
    rose = pl.col("waste_kind").fill_null("").str.contains("rose", literal=True)
    review = pl.col("needs_review").fill_null(False)
    kinds = pl.when(has).then(mech.list.join(", ")).when(rose).then(pl.lit(STEP_UP_KIND)).otherwise(pl.lit(""))
    visit = review | pl.col("tier").is_in(VISIT_TIERS).fill_null(False)
    fields = {
        "rank": pl.col("rank").cast(pl.String).fill_null("null"),
        "id": _json_string(pl.col("building_id").cast(pl.String)).fill_null("null"),
        "name": text("name"),
        "tier": text("tier"),
        "tier_order": pl.col("tier")
        .replace_strict(tiers, list(range(len(tiers))), default=len(tiers), return_dtype=pl.Int64)
        .fill_null(len(tiers))
        .cast(pl.String),
        "use": text("use_type"),
        "station": text("station_id"),
        "fuel": text("heating_fuel"),
        "ratio": pl.col("ratio_json"),
        "ratio_text": _json_string(pl.col("ratio_text")),
        "cost": pl.col("cost_json"),
        "cost_text": _json_string(pl.col("cost_text")),
        "excess": pl.col("excess_json"),
        "excess_text": _json_string(pl.col("excess_text")),
        "review": pl.when(review).then(pl.lit("true")).otherwise(pl.lit("false")),
        "kinds": pl.when(has)
        .then(pl.concat_str([pl.lit("["), mech.list.eval(_json_string(pl.element())).list.join(","), pl.lit("]")]))
        .when(rose)
        .then(pl.lit(json.dumps([STEP_UP_KIND])))
        .otherwise(pl.lit("[]")),
        "kind_text": _json_string(
            pl.when(kinds != "").then(kinds).when(visit).then(pl.lit(NOT_TOLD_APART)).otherwise(pl.lit(""))
        ),
        "why": text("waste_kind"),
        "flags": listed("flags"),
        "issues": listed("data_issues"),
        "sheet": _json_string(pl.col("sheet")).fill_null("null"),
    }
    parts: list[pl.Expr] = []
    for i, key in enumerate(sorted(fields)):  # json.dumps(sort_keys=True)
        parts += [pl.lit(("{" if i == 0 else ",") + json.dumps(key) + ":"), fields[key]]
    parts.append(pl.lit("}"))
    objects = rows.select(pl.concat_str(parts).alias("row")).to_series().str.join(",").cast(pl.Binary)[0]
    return b'{"rows":[' + objects + b'],"tiers":' + str(json_for_script(tiers)).encode("utf-8") + b"}"


def page_view(
    summary: dict[str, Any],
    plan: pl.DataFrame,
    results: pl.DataFrame,
    disp: Display,
    currency: str,
    sheet_files: dict[str, str] | None,
) -> dict[str, Any]:
    """Display texts for the summary and the audit plan (everything the template prints)."""
    counts, totals = summary.get("counts") or {}, summary.get("totals") or {}
    per_tier = counts.get("per_tier") or {}
    window = summary.get("window") or ["", ""]
    plan_rows = [
        {
            "visit": str(p["visit"]),
            "rank": str(p["rank"]),
            "building_id": p["building_id"],
            "name": p["name"] or "",
            "use": p["use_type"] or "",
            "savings": fmt_money(p["expected_recoverable_cost"], currency),
            "look_for": ", ".join(_kinds(p["mechanisms"], p["waste_kind"])) or NOT_TOLD_APART,
            "why": p["waste_kind"] or "",
            "strong": "yes" if p["needs_review"] else "no",
            "share": fmt_pct(p["cumulative_share"]) if p["cumulative_share"] is not None else "n/a",
            "sheet": _href((sheet_files or {}).get(p["building_id"])),
        }
        for p in plan.join(
            results.select("building_id", "mechanisms"), on="building_id", how="left", maintain_order="left"
        ).iter_rows(named=True)
    ]
    return {
        "run_id": str(summary.get("run_id", "")),
        "as_of": str(summary.get("as_of", "")),
        "window_start": str(window[0]),
        "window_end": str(window[1]),
        "units": str(summary.get("units", "")),
        "counts": [
            ("buildings", fmt_num(counts.get("buildings"))),
            ("strong evidence of excess (needs review)", fmt_num(counts.get("needs_review"))),
            ("with data issues", fmt_num(counts.get("with_data_issues"))),
            ("rejected input rows", fmt_num(counts.get("rejected_rows"))),
        ],
        "tiers": [
            {"tier": name, "meaning": meaning, "count": fmt_num(per_tier.get(name, 0))}
            for name, meaning in screen.TIERS
        ],
        "totals": [
            ("excess over the expected range, cost per year", fmt_money(totals.get("excess_cost"), currency)),
            ("excess energy per year", f"{fmt_num(totals.get('excess_energy'))} {disp.energy_unit}"),
            ("expected recoverable cost per year", fmt_money(totals.get("expected_recoverable_cost"), currency)),
            (
                "of which this quarter's audit plan",
                fmt_money(totals.get("audit_plan_expected_recoverable_cost"), currency),
            ),
        ],
        "plan": plan_rows,
        "currency": currency,
        "energy_unit": disp.energy_unit,
        "hit_rate": hit_rate_lines(summary),  # issue 17: the list's own hit rate (None without audits)
    }


#: Where the buildings' JSON goes in the rendered page: the template is rendered with this mark as ``data``
#: and the page split there, so that the rows (megabytes) go from polars to the file as UTF-8 bytes, never
#: through a Python string, the template or ``str.encode``. Every text from the data is HTML-escaped
#: (``<`` as ``&lt;``), so only the template, the stylesheet, the script or the chart could hold the mark.
_DATA_MARK = "<!--ddscreen:page-data-->"


def _index_parts(
    *,
    ranking: pl.DataFrame,
    results: pl.DataFrame,
    plan: pl.DataFrame,
    summary: dict[str, Any],
    disp: Display,
    currency: str,
    sheet_files: dict[str, str] | None,
    max_rows: int = 0,
    workbook: bool = True,
) -> tuple[str, bytes, str]:
    """The page as (text before the buildings' JSON, the JSON as UTF-8, text after it): :func:`render_index`.
    ``max_rows`` > 0 keeps the buildings table to the first rows in rank order (the page says so; ranking.csv
    has all); ``workbook`` False leaves ranking.xlsx out of the links (it was not written)."""
    tdir = templates_dir()
    ratios = results["ratio"].filter(results["ratio"].is_finite()).to_list()
    total = ranking.height
    if 0 < max_rows < total:
        ranking = ranking.head(max_rows)
    text = (
        _env()
        .get_template("index.html.j2")
        .render(
            v=page_view(summary, plan, results, disp, currency, sheet_files),
            data=Markup(_DATA_MARK),
            chart=Markup(charts.ratio_histogram(ratios)),
            css=Markup((tdir / "index.css").read_text(encoding="utf-8")),
            script=Markup((tdir / "index.js").read_text(encoding="utf-8")),
            outputs=[(f, text) for f, text in OTHER_OUTPUTS if workbook or f != "ranking.xlsx"],
            workbook=workbook,
            rows_left_out=ranking.height < total,
            rows_shown=fmt_num(ranking.height),
            rows_total=fmt_num(total),
            sheets=sheet_files is not None,
            caution=STANDARD_CAUTION,
        )
    )
    head, mark, tail = text.partition(_DATA_MARK)
    if not mark or _DATA_MARK in tail:
        raise RuntimeError(f"index.html: the template must print the mark {_DATA_MARK!r} exactly once")
    return head, page_json_utf8(ranking, results, sheet_files, currency), tail


def render_index(**kwargs: Any) -> str:
    """The page's HTML text (see the module docstring); the arguments are :func:`_index_parts`'s."""
    head, data, tail = _index_parts(**kwargs)
    return head + data.decode("utf-8") + tail


def write_index(path: Path, **kwargs: Any) -> Path:
    """Write ``index.html`` (UTF-8, ``\\n`` line ends): :func:`render_index`'s text, the buildings' JSON
    written as the bytes polars made."""
    head, data, tail = _index_parts(**kwargs)
    with open(path, "wb") as f:
        f.write(head.encode("utf-8"))
        f.write(data)
        f.write(tail.encode("utf-8"))
    return Path(path)
