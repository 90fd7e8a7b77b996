"""The sheet's view-model (pure): a sheet record turned into the strings and charts sheet.html.j2 prints.

``sheet_view(record, level)`` is everything a sheet shows at a shrink level (``paging.LIMITS``); the
owner's half is built by ``owner_verdict``, ``owner_steps``, ``confidence_line``, ``heat_source_text``,
``billed_text`` and ``plain_text``; ``sheet_title`` is the PDF's /Title.
"""

from __future__ import annotations

import datetime as _dt
import re
from collections.abc import Mapping
from typing import Any

from markupsafe import Markup

from . import charts
from .display import cut, finite, fmt_co2e, fmt_money, fmt_num, fmt_pct, fmt_ratio, one_line, ordinal, svg_img
from .paging import CONTENT_MM, LIMITS, MAX_LEVEL, text_width
from .record import SheetRecord

_PART_NAMES: dict[str | None, str] = {
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
            {"label": cut(label[:1].upper() + label[1:], 80), "explanation": cut(x.get("explanation"), n_chars)}
        )
    return shown, len(seq) - len(shown)


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
_FIG_COL_PT = (CONTENT_MM["A4"] / 4 - 2) * 72 / 25.4

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


def units_line(s: SheetRecord) -> str:
    """The footer's line saying what the sheet's energy units and t CO₂e mean."""
    seen = [u for u in (s.billed_unit, s.energy_unit) if u]
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


def billed_text(s: SheetRecord, key: str) -> str:
    """``<key>_billed`` in the bills' unit ("12,400 therms"), or the display energy when the unit is unknown."""
    unit = s.billed_unit
    v = getattr(s, f"{key}_billed")
    if unit and finite(v):
        return f"{fmt_num(v)} {_unit_words(unit, unit)}"
    return f"{fmt_num(getattr(s, _ENERGY_KEY.get(key, key)))} {s.energy_unit or ''}".rstrip()


def heat_source_text(s: SheetRecord) -> str:
    """ "natural gas, billed in therms, seasonal efficiency 80 %" or "electricity (heat pump, seasonal COP 1.94)"."""
    fuel = s.heating_fuel
    out = _FUEL_TEXT.get(fuel, str(fuel).replace("_", " ")) if fuel else ""
    eff = s.efficiency
    if finite(eff) and eff > 1:
        out += f" (heat pump, seasonal COP {eff:.2f})"
    elif finite(eff) and eff > 0:
        out += f", seasonal efficiency {100 * eff:.0f} %"
    if s.billed_unit:
        out += f", billed in {_unit_words(s.billed_unit, s.billed_unit)}"
    return out


def confidence_line(s: SheetRecord) -> str:
    """How sure the screen is, as one plain sentence (no statistics): from the fit, the flags, the envelope
    inputs and the peers. Levels: fairly sure, moderately sure, not very sure; not yet where data block."""
    if s.blocking or s.tier == "Fix data first":
        return "How sure the tool is: not yet: a problem in the data must be fixed before it can judge this building."
    fit = s.fit or {}
    given: list[str | None] = list(s.flag_codes) or [f.get("code") for f in s.flags or []]
    codes = set(given)
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
    elif finite(cv := fit.get("cv_rmse")) and cv <= _CLOSE_FIT_CV:
        good.append("the bills follow the weather closely")
    else:
        level -= 1
        bad.append("the bills follow the weather only loosely")
    if s.envelope_defaulted or "envelope_defaulted" in codes:
        level -= 1
        bad.append("the building's construction was not given, so what it should use is a broad estimate")
    if s.evidence_scale == "model band":
        level -= 1
        bad.append("there are too few similar buildings to compare it with")
    if s.span_kind in ("shifted", "uncovered") or "shifted_span" in codes:
        level -= 1
        bad.append("the bills do not cover the whole period asked for")
    if "base_at_grid_edge" in codes:
        level -= 1
        bad.append("the split between heating and other uses is uncertain")
    if s.needs_review:
        good.append("it stands well above similar buildings")
    word = "fairly sure" if level >= 3 else "moderately sure" if level == 2 else "not very sure"
    reasons = good + [("but " if good and i == 0 else "") + b for i, b in enumerate(bad)]
    return f"How sure the tool is: {word}" + (": " + "; ".join(reasons) if reasons else "") + "."


def owner_verdict(s: SheetRecord) -> str:
    """The owner's verdict: what to do, and what the waste costs a year, in plain words."""
    tier = s.tier or ""
    cur = s.currency or "$"
    cost = s.expected_recoverable_cost
    if tier in _OWNER_VERDICT_NO_COST and not (finite(cost) and cost > 0):
        head = _OWNER_VERDICT_NO_COST[tier]
    elif tier in _OWNER_VERDICT:
        head = _OWNER_VERDICT[tier].format(cost=fmt_money(cost, cur))
    else:
        head = plain_text(s.verdict or "No verdict.")
    if s.blocking or tier == "Fix data first" or not finite(s.actual_heating):
        return head
    used = billed_text(s, "actual_heating")
    money = f" ({fmt_money(s.heating_cost, cur)})" if finite(s.heating_cost) else ""
    low, high = s.expected_low_billed, s.expected_high_billed
    if not (s.billed_unit and finite(low) and finite(high)):
        low, high = s.expected_low, s.expected_high
    unit = (
        _unit_words(s.billed_unit, s.energy_unit or "")
        if s.billed_unit and finite(s.expected_low_billed)
        else s.energy_unit or ""
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
    from ..schema import DATA_ISSUES, FLAGS

    words = {**{c: i.text for c, i in DATA_ISSUES.items()}, **FLAGS}
    return re.sub(r"\b[a-z]+(?:_[a-z0-9]+)+\b", lambda m: words.get(m.group(0), m.group(0)), text)


def _span_words(s: SheetRecord) -> str:
    """'12 months', or the days of a shorter span judged (after a measure)."""
    try:
        days = (
            _dt.date.fromisoformat(str(s.period_end)[:10]) - _dt.date.fromisoformat(str(s.period_start)[:10])
        ).days + 1
    except ValueError:
        return "12 months"
    return "12 months" if days >= 360 else f"{days} days"


def owner_steps(s: SheetRecord, n: int) -> tuple[list[str], int]:
    """What to do next, plain: the data step names no code (the issues are listed in the engineer's block)."""
    steps = []
    issues = [x for x in s.data_issues or [] if x.get("code") != "end_days_filled"]
    first = next((x for x in issues if x.get("blocking")), issues[0] if issues else None)
    for t in s.next_steps or []:
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
    m: Mapping[str, Any] | None,
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
    if billed_unit and per_billed and finite(per_billed) and per_billed > 0:

        def conv(x):
            return x / per_billed if finite(x) else x

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
    what = cut(m.get("description") or "a measure", 120)
    if finite(avoided):
        verb = "saved" if avoided >= 0 else "used"
        sentence = (
            f"Since {what} on {m.get('event_date') or 'n/a'}, the building {verb} about "
            f"{fmt_num(abs(avoided))} {unit}"
            + (f" ({fmt_money(abs(m['cost']), cur)})" if finite(m.get("cost")) else "")
            + (" more" if avoided < 0 else "")
            + f" against what it would have used without it, over {len(periods)} billing period(s)"
        )
        if finite(lo) and finite(hi):
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


def sheet_view(s: SheetRecord, level: int = 0) -> dict[str, Any]:
    """Everything a sheet template shows, as display strings (plus chart SVG markup)."""
    if not 0 <= level <= MAX_LEVEL:
        raise ValueError(f"sheet_view: level must be 0..{MAX_LEVEL}, got {level!r}")
    lim = LIMITS[level]
    eu = s.energy_unit or ""
    cur = s.currency or "$"
    name = cut(s.name or s.building_id, lim["name"])
    place = ", ".join(str(p) for p in (s.address, s.city) if p)
    area = s.floor_area
    tr = s.tier_rank
    co2_v, co2_u = fmt_co2e(s.excess_co2e_kg)
    rco2_v, rco2_u = fmt_co2e(s.expected_recoverable_co2e_kg)

    # Charts carry only their geometry and tick labels (annotate=False): WeasyPrint draws
    # SVG text glyph by glyph, so axis titles and legends are printed as page text in the
    # caption instead (measured: DEVELOPERS.md "Rendering").
    periods = s.periods or []
    dd_unit = s.dd_unit or ""
    if periods:
        xs = [p.get("dd_per_day") for p in periods]
        ys = [p.get("use_per_day") for p in periods]
        # periods that start in the analysis window are drawn filled, earlier ones of the fit open
        span_start = str(s.period_start or "")
        recent = [bool(span_start) and str(p.get("start") or "") >= span_start for p in periods]
        chart1 = charts.scatter_chart(
            xs,
            ys,
            fit_line=s.fit_line,
            expected_line=s.expected_line,
            x_label="",
            y_label="",
            width=360,
            height=150,
            annotate=False,
            recent=recent,
        )
        dropped = sum(1 for x, y in zip(xs, ys) if not (finite(x) and finite(y)))
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
        annual = s.annual or []
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
    blocked = bool(s.blocking)
    chart2 = charts.peer_chart(
        s.peers or [],
        None if blocked else s.heating_intensity,
        s.peer_median_intensity,
        x_label="",
        width=300,
        height=136,
        annotate=False,
    )
    n_peers = len([v for v in (s.peers or []) if finite(v)])
    chart2_axes = f"across: heating per degree day [{(s.intensity_unit or '')}]"
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

    parts = s.ua_parts or []
    vals = [p.get("value") for p in parts]
    vmax = max([v for v in vals if finite(v) and v > 0], default=0.0)
    total = s.ua_total
    ua_parts = [
        {
            "part": _PART_NAMES.get(p.get("part"), cut(p.get("part"), 30)),
            "value": fmt_num(v),
            "pct": f"{100.0 * v / vmax:.1f}" if finite(v) and v > 0 and vmax > 0 else "0",
            "share": fmt_pct(v / total, 0) if finite(v) and v >= 0 and finite(total) and total > 0 else "",
        }
        for p, v in zip(parts, vals)
    ]

    # the UA and assumption tables are columns of newline-separated text (white-space: pre):
    # one box per column instead of one per cell, measured several times cheaper to lay out
    ua_rows = ua_parts + [{"part": "total", "value": fmt_num(total), "share": ""}]
    ua_bars = charts.bar_strip([v if finite(v) else None for v in vals] + [None])
    # value and share share one right-aligned column: the share is padded to the width of
    # "100%" with figure spaces (digit-wide in our font), so the values stay aligned
    ua_cols = {
        "names": "\n".join(one_line(r["part"], 24) for r in ua_rows),
        "nums": "\n".join(f"{r['value']}  {_share_cell(r['share'])}" for r in ua_rows),
        "bars": _strip_img(ua_bars, len(ua_rows)),
    }

    asm_all = s.assumptions or []
    assumptions = [
        {
            "name": cut(a.get("name"), 60),
            "value": fmt_num(a.get("value")) if not isinstance(a.get("value"), str) else cut(a["value"], 20),
            "unit": cut(a.get("unit"), 40),
            "origin": "given" if a.get("origin") == "given" else "default",
            "origin_class": "given" if a.get("origin") == "given" else "default",
        }
        for a in asm_all[: lim["asm"]]
    ]

    asm_cols = {
        "names": "\n".join(one_line(x["name"], 40) for x in assumptions),
        "nums": "\n".join(one_line(x["value"], 14) for x in assumptions),
        "units": "\n".join(one_line(x["unit"], 30) for x in assumptions),
        "origins": "\n".join(x["origin"] for x in assumptions),
    }

    fit = s.fit or {}
    if fit.get("method") == "regression":
        fit_text = (
            f"Fit: regression on {fmt_num(fit.get('n_periods'))} periods; R² {fmt_ratio(fit.get('r2'))}, "
            f"CV(RMSE) {fmt_pct(fit.get('cv_rmse'))}, NMBE {fmt_pct(fit.get('nmbe'))}; fitted balance point "
            f"{fmt_num(fit.get('fitted_base'))} {(s.temp_unit or '')}; slope {fmt_num(fit.get('slope'))} "
            f"{eu} per {(s.dd_unit or '')}; baseload {fmt_num(fit.get('baseload_per_day'))} {eu}/day."
        )
    else:
        fit_text = (
            "Fit: none (too few periods); heating taken as a default share of the metered total"
            f"; baseload {fmt_num(fit.get('baseload_per_day'))} {eu}/day."
        )
    fit_text += (
        f" Degree days {fmt_num(s.hdd)} {(s.dd_unit or '')} at base "
        f"{fmt_num(s.base_temperature)} {(s.temp_unit or '')}."
    )

    flags, flags_more = _items(s.flags, lim["flags"], lim["expl"])
    issues, issues_more = _items(s.data_issues, lim["issues"], lim["expl"])
    steps_all = list(s.next_steps or [])
    cautions_all = list(s.cautions or [])
    year = s.year_built

    # key figures: two groups of three pre-formatted lines (labels, values, units), the four
    # columns set by tab stops a quarter of the page wide (the tab-size in the per-paper
    # stylesheet): one line box per row instead of a table cell per figure (measured:
    # DEVELOPERS.md "Rendering"). Fields are cut so no field runs past its tab stop; the
    # peer percentile is printed with the peer chart's heading.
    def tabbed(fields, n):
        return "\t".join(one_line(f, n) for f in fields)

    blocked_figs = bool(s.blocking)
    not_judged = "not judged until the data are fixed"

    # each unit line's parts after the first are dropped, last first, until the line fits its quarter of
    # the narrower paper (A4) at the unit line's size: nothing is cut and no field runs past its tab stop
    def unit_line(parts, size=7.0):
        parts = [p for p in parts if p]
        while len(parts) > 1 and text_width(" · ".join(parts), size) > _FIG_COL_PT:
            parts.pop()
        return " · ".join(parts)

    cost = fmt_money(s.heating_cost, cur) if finite(s.heating_cost) else ""
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
                    "not judged" if blocked_figs else fmt_money(s.expected_recoverable_cost, cur),
                ],
                60,
            ),
        ),
        (
            "fu",
            tabbed(
                [
                    unit_line([cost, f"{fmt_num(s.actual_heating)} {eu}"]),
                    # its range is in the verdict sentence above
                    unit_line([f"{fmt_num(s.expected_heating)} {eu}"]),
                    not_judged
                    if blocked_figs
                    else unit_line([f"{fmt_money(s.excess_cost, cur)} a year", f"{fmt_num(s.excess_energy)} {eu}"]),
                    not_judged
                    if blocked_figs
                    else unit_line(["a year", billed_text(s, "expected_recoverable"), f"{rco2_v} {rco2_u} CO₂e"]),
                ],
                80,
            ),
        ),
    ]
    scale = _SCALE_TEXT.get(s.evidence_scale, "")
    if scale and s.evidence_scale == "blend" and finite(s.peer_weight):
        scale = scale.format(pct=round(100 * s.peer_weight))
    # a building whose data block a verdict has no kind of waste yet: its first step says what to fix
    kind = "" if s.blocking else plain_text(s.waste_kind or "")
    basis = _BASIS_TEXT.get(s.recoverable_basis)
    if basis and not s.blocking and finite(s.expected_recoverable_cost) and s.expected_recoverable_cost > 0:
        kind = (kind + " " if kind else "") + basis
    steps, steps_more = owner_steps(s, lim["steps"])
    sc = s.scores or {}
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
        f" Metered / expected {fmt_ratio(s.ratio)}, "
        f"{_BAND_TEXT.get(s.band_position, 'band position n/a')}; normal year "
        f"{fmt_num(s.normal_heating)} {eu}; {fmt_num(s.heating_intensity)} "
        f"{(s.intensity_unit or '')} (peers' median {fmt_num(s.peer_median_intensity)})."
    )
    per_billed = (
        s.actual_heating / s.actual_heating_billed
        if finite(s.actual_heating) and finite(s.actual_heating_billed) and s.actual_heating_billed
        else None
    )
    since = since_measure_view(s.since_measure, eu, billed_unit=s.billed_unit, per_billed=per_billed)
    rank, n_b = s.rank, s.n_buildings
    span_label = _span_words(s)
    is_blocked = bool(s.blocking) or s.tier == "Fix data first"
    return {
        "figs": figs,
        "level": level,
        "building_id": cut(s.building_id, 80),
        "name": name,
        "name_class": "vlong" if len(name) > 180 else ("long" if len(name) > 90 else ""),
        "place": cut(place, lim["name"]),
        "use_type": cut(s.use_type or "use type n/a", 40),
        "floor_area": f"{fmt_num(area)} {(s.area_unit or '')}",
        "year_built": str(int(year)) if finite(year) else "n/a",
        "station_id": cut(s.station_id or "n/a", 40),
        "period_start": s.period_start or "n/a",
        "span_label": span_label,
        "order_text": (f"audit order {rank} of {n_b}" if isinstance(rank, int) and isinstance(n_b, int) else ""),
        "period_end": s.period_end or "n/a",
        "span_note": _SPAN_NOTE.get(s.span_kind, ""),
        "run_date": s.run_date or "n/a",
        "run_id": cut(s.run_id, 60),
        "verdict": cut(owner_verdict(s), lim["text"]),
        "screen_verdict": cut(_codes_to_words(s.screen_verdict or s.verdict), lim["text"]),
        "kind": cut(kind, lim["text"]),
        "steps": [cut(t, lim["expl"]) for t in steps],
        "steps_more": steps_more,
        "confidence": cut(confidence_line(s), lim["text"]),
        "units_line": units_line(s),
        # an audit on record (events file): kept off the plan after a clean audit, or pinned by a finding;
        # a measure's note is in the verdict already
        "audit_note": (
            cut("On record: " + str(s.plan_note)[0].upper() + str(s.plan_note)[1:] + ".", lim["text"])
            if s.plan_note and not str(s.plan_note).startswith("measure of")
            else ""
        ),
        "heat_source": cut(heat_source_text(s), 160),
        "scores_text": scores_text,
        "since": since,
        "blocked": is_blocked,
        "tier": cut(s.tier, 24),
        "tier_rank": tr if isinstance(tr, int) else "?",
        "tier_rank_class": min(max(tr, 1), 5) if isinstance(tr, int) else 5,
        "needs_review": bool(s.needs_review),
        "energy_unit": eu,
        "actual_heating": fmt_num(s.actual_heating),
        "expected_heating": fmt_num(s.expected_heating),
        "expected_low": fmt_num(s.expected_low),
        "expected_high": fmt_num(s.expected_high),
        "ratio": fmt_ratio(s.ratio),
        "band_text": _BAND_TEXT.get(s.band_position, "band position n/a"),
        "heating_intensity": fmt_num(s.heating_intensity),
        "intensity_unit": s.intensity_unit or "",
        "peer_median_intensity": fmt_num(s.peer_median_intensity),
        "peer_percentile": ordinal(s.peer_percentile),
        "peer_group": cut(s.peer_group or "no group", 60),
        "normal_heating": fmt_num(s.normal_heating),
        "baseload": fmt_num(s.baseload),
        "excess_energy": fmt_num(s.excess_energy),
        "excess_cost": fmt_money(s.excess_cost, cur),
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
        "ua_unit": s.ua_unit or "",
        "effective_ua": fmt_num(s.effective_ua),
        "assumptions": assumptions,
        "assumptions_more": max(len(asm_all) - lim["asm"], 0),
        "ua_cols": ua_cols,
        "asm_cols": asm_cols,
        "fit_text": fit_text,
        "flags": flags,
        "flags_more": flags_more,
        "data_issues": issues,
        "data_issues_more": issues_more,
        "next_steps": [cut(t, lim["expl"]) for t in steps_all[: lim["steps"]]],
        "next_steps_more": max(len(steps_all) - lim["steps"], 0),
        "cautions": [cut(t, lim["caution_len"]) for t in cautions_all[: lim["cautions"]]],
    }


def sheet_title(s: SheetRecord) -> str:
    """The /Title of a sheet's PDF file."""
    return (
        f"{cut(s.name or s.building_id, 120)} ({cut(s.building_id, 80)}): "
        f"heating screening sheet, run {cut(s.run_id, 60)}"
    )
