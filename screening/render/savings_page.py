"""The savings page of ranking.pdf and the hit-rate lines of the portfolio page (issue 17).

Display strings only (layer 3, no files): ``savings_report`` gathers what a run knows about its
measures and audits into the ranking report's optional ``savings`` key; ``savings_view`` turns that
into the strings ``templates/ranking_savings.html.j2`` prints; ``hit_rate_lines`` gives the
portfolio page its short table.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from .display import cut, fmt_co2e, fmt_money, fmt_num, fmt_pct

if TYPE_CHECKING:
    import polars as pl

#: at most this many measures on the page (one page); the rest are in savings.csv
MAX_MEASURE_LINES = 25


def savings_report(table: pl.DataFrame | None, names: pl.DataFrame, summary: dict) -> dict[str, Any] | None:
    """The ranking report's ``savings`` key: ``{"measures": [...], "totals": {...}, "hit_rate": {...}}``.

    ``table`` is savings.csv's frame (``events.savings_table``, display units), ``names`` holds
    ``building_id, name``; ``summary`` the run's summary.json dict (its ``savings`` and
    ``audit_hit_rate``). None when the run had no events file.
    """
    import polars as pl  # (here: ranking.pdf's child renders savings_view without polars, 0.2 s less)

    if table is None and "audit_hit_rate" not in summary:
        return None
    rows: list[dict] = []
    if table is not None and table.height:
        rows = (
            table.join(names.select("building_id", "name"), on="building_id", how="left")
            .sort("event_date", "building_id")
            .select(
                "building_id",
                "name",
                pl.col("event_date").cast(pl.String),
                pl.col("report_start").cast(pl.String),
                pl.col("report_end").cast(pl.String),
                "avoided_energy",
                "avoided_low_90",
                "avoided_high_90",
                "avoided_cost",
                "avoided_co2e_kg",
                "meets_guideline14",
                "guideline14_note",
                "energy_unit",
                "currency",
            )
            .to_dicts()
        )
    return {"measures": rows, "totals": summary.get("savings"), "hit_rate": summary.get("audit_hit_rate")}


def savings_view(report: dict[str, Any]) -> dict[str, Any] | None:
    """Display strings of the savings page, or None (no ``savings`` in the report)."""
    s = report.get("savings")
    if not s:
        return None
    cur = report.get("currency") or "$"
    tot = s.get("totals") or {}
    eu = tot.get("energy_unit") or report.get("energy_unit") or ""
    measures = s.get("measures") or []
    lines = []
    for m in measures[:MAX_MEASURE_LINES]:
        ok = bool(m.get("meets_guideline14"))
        lo, hi = m.get("avoided_low_90"), m.get("avoided_high_90")
        lines.append(
            {
                "building": cut(m.get("building_id"), 30),
                "name": cut(m.get("name"), 40),
                "date": cut(m.get("event_date"), 10),
                "avoided": fmt_num(m.get("avoided_energy")) + ("" if ok else " *"),
                "interval": "n/a" if lo is None or hi is None else f"{fmt_num(lo)} to {fmt_num(hi)}",
                "cost": fmt_money(m.get("avoided_cost"), cur),
                "co2e": fmt_co2e(m.get("avoided_co2e_kg"))[0],
                "why": "" if ok else cut(m.get("guideline14_note"), 120),
            }
        )
    co2, co2_unit = fmt_co2e(tot.get("avoided_co2e_kg"))
    hr = s.get("hit_rate") or {}

    def groups(d: dict | None) -> list[dict]:
        return [
            {
                "label": cut(k, 30),
                "audited": fmt_num(v.get("audited")),
                "confirmed": fmt_num(v.get("confirmed")),
                "rate": fmt_pct(v.get("rate"), 0),
            }
            for k, v in (d or {}).items()
        ]

    return {
        "energy_unit": eu,
        "co2e_unit": co2_unit,
        "measures": lines,
        "more": fmt_num(len(measures) - MAX_MEASURE_LINES) if len(measures) > MAX_MEASURE_LINES else "",
        "any_failed": any(not m.get("meets_guideline14") for m in measures[:MAX_MEASURE_LINES]),
        "total": None
        if not tot
        else {
            "n": fmt_num(tot.get("measures_meeting_guideline14")),
            "of": fmt_num(tot.get("measures")),
            "avoided": fmt_num(tot.get("avoided_energy")),
            "u90": fmt_num(tot.get("avoided_u90")),
            "u68": fmt_num(tot.get("avoided_u68")),
            "cost": fmt_money(tot.get("avoided_cost"), cur),
            "co2e": co2,
        },
        "hit": None
        if not hr
        else {
            "audited": fmt_num(hr.get("audited_from_plan")),
            "confirmed": fmt_num(hr.get("confirmed")),
            "rate": fmt_pct(hr.get("rate"), 0) if hr.get("rate") is not None else "n/a",
            "off_plan": fmt_num(hr.get("audited_off_plan")),
            "no_run": fmt_num(hr.get("audits_without_an_earlier_run")),
            "by_mechanism": groups(hr.get("by_mechanism")),
            "by_quarter": groups(hr.get("by_quarter")),
        },
    }


def hit_rate_lines(summary: dict) -> dict[str, Any] | None:
    """The portfolio page's hit-rate box: overall, by mechanism and by quarter (plain numbers), or None."""
    hr = summary.get("audit_hit_rate")
    if not hr:
        return None

    def groups(d: dict | None) -> list[dict]:
        return [
            {
                "label": str(k),
                "audited": int(v["audited"]),
                "confirmed": int(v["confirmed"]),
                "rate": f"{100 * v['rate']:.0f} %",
            }
            for k, v in (d or {}).items()
        ]

    rate = hr.get("rate")
    return {
        "audited": int(hr.get("audited_from_plan") or 0),
        "confirmed": int(hr.get("confirmed") or 0),
        "rate": "n/a" if rate is None else f"{100 * rate:.0f} %",
        "off_plan": int(hr.get("audited_off_plan") or 0),
        "no_run": int(hr.get("audits_without_an_earlier_run") or 0),
        "by_mechanism": groups(hr.get("by_mechanism")),
        "by_quarter": groups(hr.get("by_quarter")),
    }
