"""The ranking report's view-model (pure): the report dict turned into the strings ranking.html.j2 prints.

The ranked table's wrapping and pages come from ``paging``; the report dict is documented in
DEVELOPERS.md "Ranking report dict".
"""

from __future__ import annotations

from typing import Any

from . import charts
from .display import cut, fmt_co2e, fmt_money, fmt_num, fmt_pct, fmt_ratio, one_line, svg_img
from .paging import PAPERS, table_header, table_pages

MAX_ISSUE_LINES = 1000  # data-issue lines in ranking.pdf; data_issues.csv has them all
PLAN_LINES = 10  # audit-plan rows on ranking.pdf's first page (the rest: audit_plan.csv)


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
        return cut("; ".join(c.strip() for c in codes if c.strip()), 200)

    rows = [
        {
            "rank": str(r.get("rank")) if isinstance(r.get("rank"), int) else "",
            "building_id": cut(r.get("building_id"), 40),
            "name": cut(r.get("name"), 80),
            "use_type": cut(r.get("use_type"), 20),
            "tier": cut(r.get("tier"), 20),
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
            {"label": cut(str(k) if codes else str(k).replace("_", " "), 40), "value": fmt_num(v)} for k, v in d.items()
        ]

    tiers_in = report.get("tiers")
    if not tiers_in and isinstance(nested.get("per_tier"), dict):
        tiers_in = [{"tier": k, "count": v} for k, v in nested["per_tier"].items()]
    omitted = report.get("rows_omitted")
    header = table_header(paper, eu)
    issues_in = report.get("data_issues") or []
    total = report.get("data_issues_total")
    issues_more = (total if isinstance(total, int) else len(issues_in)) - min(len(issues_in), MAX_ISSUE_LINES)
    return {
        "run": {
            k: cut(run.get(k, "n/a"), 60)
            for k in ("run_id", "as_of", "window_start", "window_end", "run_date", "version", "units")
        },
        "counts": count_rows(scalars),
        "per_flag": count_rows(nested.get("per_flag") or {}, codes=True),
        "per_data_issue": count_rows(nested.get("per_data_issue") or {}, codes=True),
        "tiers": [
            {
                "tier": cut(t.get("tier"), 24),
                "count": fmt_num(t.get("count")),
                "meaning": cut(t.get("meaning") or "", 80),
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
                "building_id": cut(p.get("building_id"), 40),
                "name": cut(p.get("name"), 60),
                "look_for": cut(
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
        "table_pages": table_pages(rows, paper, header_lines=header["lines"]),
        # the data issues of the table's buildings in its order (outputs.ranking_report); the count of those
        # not listed comes from the report's total when it has one (every building's issues)
        "data_issues_scope": f"Those of the {fmt_num(len(rows))} building(s) in the table above, in its order; "
        "data_issues.csv lists every building's."
        if isinstance(omitted, int) and omitted > 0
        else "",
        "data_issues": [
            {
                "rank": str(d.get("rank")) if isinstance(d.get("rank"), int) else "",
                "building_id": one_line(d.get("building_id"), 40),
                "name": one_line(d.get("name"), 80),
                "code": one_line(d.get("code"), 40),
                "explanation": cut(d.get("explanation"), 2000),
            }
            for d in issues_in[:MAX_ISSUE_LINES]
        ],
        "data_issues_more": fmt_num(issues_more) if issues_more > 0 else "",
    }
