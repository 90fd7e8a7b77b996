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
from pathlib import Path
from typing import Any
from urllib.parse import quote

import jinja2
import polars as pl
from markupsafe import Markup

from . import screen
from .outputs import Display
from .render import charts
from .render.display import STANDARD_CAUTION, fmt_money, fmt_num, fmt_pct, fmt_ratio
from .render.savings_page import hit_rate_lines
from .resources import templates_dir

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


def json_for_script(obj: Any) -> Markup:
    """``obj`` as JSON that is safe inside a ``<script>`` element: ``<``, ``>``, ``&`` and the
    two JavaScript line separators escaped, so no value can end the element or open a comment."""
    text = json.dumps(obj, ensure_ascii=False, sort_keys=True, separators=(",", ":"), allow_nan=False)
    for ch, esc in (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e"), ("\u2028", "\\u2028"), ("\u2029", "\\u2029")):
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


def _num(x) -> float | None:
    """A finite number as float, else None (NaN, infinities, None, booleans)."""
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) else None


def _href(path: str | None) -> str | None:
    """A relative file path as a URL path (sheet stems are already URL-safe; this keeps it so)."""
    return None if path is None else quote(path, safe="/")


def _kinds(mechanisms: list[str] | None, waste_kind: str | None) -> list[str]:
    if mechanisms:
        return list(mechanisms)
    return [STEP_UP_KIND] if "rose" in (waste_kind or "") else []


def page_data(
    ranking: pl.DataFrame, results: pl.DataFrame, sheet_files: dict[str, str] | None, currency: str
) -> dict[str, Any]:
    """The JSON the page's script renders: one row per building in rank order, with raw numbers
    (for sorting) and display texts; ``sheet`` is the building's PDF relative to the page, or
    None when no sheets were written."""
    mech = results.select("building_id", "mechanisms")
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
    ).join(mech, on="building_id", how="left", maintain_order="left")
    tier_order = {name: i for i, (name, _m) in enumerate(screen.TIERS)}
    out = []
    for r in rows.iter_rows(named=True):
        kinds = _kinds(r["mechanisms"], r["waste_kind"])
        out.append(
            {
                "rank": r["rank"],
                "id": r["building_id"],
                "name": r["name"] or "",
                "tier": r["tier"] or "",
                "tier_order": tier_order.get(r["tier"], len(tier_order)),
                "use": r["use_type"] or "",
                "station": r["station_id"] or "",
                "fuel": r["heating_fuel"] or "",
                "ratio": _num(r["ratio"]),
                "ratio_text": fmt_ratio(r["ratio"]),
                "cost": _num(r["expected_recoverable_cost"]),
                "cost_text": fmt_money(r["expected_recoverable_cost"], currency),
                "excess": _num(r["excess_cost"]),
                "excess_text": fmt_money(r["excess_cost"], currency),
                "review": bool(r["needs_review"]),
                "kinds": kinds,
                # "not told apart" only where a visit is due or the evidence is strong (as in the audit plan)
                "kind_text": ", ".join(kinds)
                or (NOT_TOLD_APART if r["needs_review"] or r["tier"] in VISIT_TIERS else ""),
                "why": r["waste_kind"] or "",
                "flags": (r["flags"] or "").replace(";", ", "),
                "issues": (r["data_issues"] or "").replace(";", ", "),
                "sheet": _href((sheet_files or {}).get(r["building_id"])),
            }
        )
    return {"rows": out, "tiers": [name for name, _m in screen.TIERS]}


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


def render_index(
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
) -> str:
    """The page's HTML text (see the module docstring). ``max_rows`` > 0 keeps the buildings table to
    the first rows in rank order (the page says so; ranking.csv has all); ``workbook`` False leaves
    ranking.xlsx out of the links (it was not written)."""
    tdir = templates_dir()
    ratios = [x for x in results["ratio"].to_list() if _num(x) is not None]
    total = ranking.height
    if 0 < max_rows < total:
        ranking = ranking.head(max_rows)
    return (
        _env()
        .get_template("index.html.j2")
        .render(
            v=page_view(summary, plan, results, disp, currency, sheet_files),
            data=json_for_script(page_data(ranking, results, sheet_files, currency)),
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


def write_index(path: Path, **kwargs: Any) -> Path:
    """Write ``index.html`` (UTF-8, ``\\n`` line ends) with :func:`render_index`'s text."""
    Path(path).write_bytes(render_index(**kwargs).encode("utf-8"))
    return Path(path)
