"""Builders of sheet records and ranking-report dicts for the rendering tests and benchmark.

All names, addresses, cities and stations are invented. Figures are made up but
self-consistent in the usual degree-day relation (expected heating = UA * 24 * HDD /
efficiency), so a reader of the rendered page sees plausible numbers. They are NOT check
values for any physics: the rendering tests only check that what goes in comes out.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np

from screening.render.record import SheetRecord

_USE_TYPES = ["office", "multifamily", "school", "retail", "warehouse", "lodging", "healthcare", "other"]
_STREETS = ["Quillmere Road", "Sandpiper Row", "Old Kiln Lane", "Harrowgate Way", "Lanternfield Ave"]
_CITIES = ["Fernhollow", "Brackwater", "Mistle Ridge", "Cold Ashby Flats"]
_TIERS = [("act now", 1), ("look closer", 2), ("watch", 3), ("in line", 4), ("cannot tell", 5)]


def make_sheet(i: int = 0, *, units: str = "IP", annual: bool = False, seed: int = 7) -> SheetRecord:
    """A realistic sheet record for building number ``i`` (deterministic for a given seed)."""
    return SheetRecord.from_dict(sheet_dict(i, units=units, annual=annual, seed=seed))


def sheet_dict(i: int = 0, *, units: str = "IP", annual: bool = False, seed: int = 7) -> dict[str, Any]:
    """The fields of :func:`make_sheet`'s record as a dict, for builders that change some of them."""
    rng = np.random.default_rng(seed + 1000 * i)
    si = units == "SI"
    area = float(rng.choice([12_500, 48_000, 96_400, 210_000, 7_800]))
    hdd = float(rng.uniform(4200, 6800))  # °F·day at the balance point
    ua = float(area * rng.uniform(0.12, 0.30))  # Btu/(h·°F)
    eff = 0.82
    expected = ua * 24 * hdd / eff / 1000  # kBtu
    ratio = float(rng.uniform(0.7, 1.9))
    actual = expected * ratio
    base_per_day = float(actual / 365 * rng.uniform(0.03, 0.18))
    slope = (actual - 365 * base_per_day) / hdd
    tier, rank = _TIERS[i % len(_TIERS)]
    intensity = actual * 1000 / (area * hdd)
    peers = sorted(float(v) for v in rng.lognormal(np.log(intensity * 0.85), 0.35, size=24)) + [intensity]
    peers.sort()
    median = float(np.median(peers))
    pct = float(100.0 * np.searchsorted(peers, intensity) / max(len(peers) - 1, 1))
    periods = []
    if not annual:
        dd_day = np.array([33, 30, 24, 15, 7, 1.5, 0.2, 0.5, 4, 12, 22, 30], float) * rng.uniform(0.85, 1.1)
        start = np.datetime64("2025-01-01")
        for m in range(12):
            s = start + np.timedelta64(30 * m, "D")
            days = 30 if m < 11 else 35
            use = base_per_day + slope * dd_day[m] * rng.uniform(0.9, 1.1)
            periods.append(
                {
                    "start": str(s),
                    "end": str(s + np.timedelta64(days - 1, "D")),
                    "days": days,
                    "use_per_day": float(use),
                    "dd_per_day": float(dd_day[m]),
                }
            )
    parts = {"walls": 0.22, "windows": 0.26, "roof": 0.12, "ground": 0.08, "infiltration": 0.2, "ventilation": 0.12}
    k_e = 0.293071 if si else 1.0  # kBtu -> kWh (for display only)
    k_ua = 0.5275 if si else 1.0  # Btu/(h·°F) -> W/K
    sheet = {
        "building_id": f"B-{1000 + i}",
        "name": f"{['Larkspur', 'Tidewell', 'Owlbrook', 'Quarry Hill', 'Emberly'][i % 5]} "
        f"{['Annex', 'Hall', 'Court', 'Centre', 'Works'][(i // 5) % 5]} {i}",
        "address": f"{10 + i} {_STREETS[i % len(_STREETS)]}",
        "city": _CITIES[i % len(_CITIES)],
        "use_type": _USE_TYPES[i % len(_USE_TYPES)],
        "floor_area": area * (0.092903 if si else 1.0),
        "area_unit": "m²" if si else "ft²",
        "year_built": int(rng.integers(1925, 2015)),
        "station_id": "WX-NORTHFIELD-03",
        "period_start": "2025-01-01",
        "period_end": "2025-12-31",
        "span_kind": "window",
        "run_date": "2026-03-02",
        "run_id": "run-20260302-01",
        "energy_unit": "kWh" if si else "kBtu",
        "temp_unit": "°C" if si else "°F",
        "dd_unit": "°C·day" if si else "°F·day",
        "intensity_unit": "Wh/m²·K·day" if si else "Btu/ft²·°F·day",
        "verdict": (
            "Heating use is well above what the envelope and the weather explain; check controls and setpoints first."
            if ratio > 1.2
            else "Heating use is in line with what the envelope and the weather explain."
        ),
        "tier": tier,
        "tier_rank": rank,
        "needs_review": ratio > 1.6,
        "actual_heating": actual * k_e,
        "expected_heating": expected * k_e,
        "expected_low": expected * 0.8 * k_e,
        "expected_high": expected * 1.25 * k_e,
        "expected_fixed_base": expected * 1.05 * k_e,
        "expected_modified": expected * 0.97 * k_e,
        "ratio": ratio,
        "band_position": "above" if ratio > 1.25 else ("below" if ratio < 0.8 else "within"),
        "heating_intensity": intensity * (5.678263 / 1.8 if si else 1.0),
        "peer_median_intensity": median * (5.678263 / 1.8 if si else 1.0),
        "peer_percentile": pct,
        "peer_group": f"{_USE_TYPES[i % len(_USE_TYPES)]}, same station",
        "normal_heating": actual * 0.97 * k_e,
        "baseload": base_per_day * 365 * k_e,
        "excess_energy": max(actual - expected, 0.0) * k_e,
        "excess_cost": max(actual - expected, 0.0) * 0.011,
        "currency": "$",
        "excess_co2e_kg": max(actual - expected, 0.0) * 0.0531,
        "hdd": hdd / (1.8 if si else 1.0),
        "base_temperature": 60.0 if not si else 15.6,
        "fit": {
            "method": "default share" if annual else "regression",
            "r2": None if annual else 0.94,
            "cv_rmse": None if annual else 0.081,
            "nmbe": None if annual else -0.004,
            "n_periods": 0 if annual else 12,
            "fitted_base": None if annual else 58.5,
            "slope": None if annual else slope * k_e,
            "baseload_per_day": base_per_day * k_e,
        },
        "effective_ua": ua * ratio * k_ua,
        "ua_unit": "W/K" if si else "Btu/h·°F",
        "ua_parts": [{"part": p, "value": ua * s * k_ua} for p, s in parts.items()],
        "ua_total": ua * k_ua,
        "assumptions": [
            {
                "name": "wall U-factor",
                "value": 0.09,
                "unit": "Btu/h·ft²·°F",
                "origin": "default",
                "source": "envelope defaults table, era 1960-1979",
            },
            {
                "name": "window U-factor",
                "value": 0.55,
                "unit": "Btu/h·ft²·°F",
                "origin": "given",
                "source": "portfolio file",
            },
            {"name": "air changes", "value": 0.5, "unit": "ach", "origin": "default", "source": "common practice"},
            {"name": "heating efficiency", "value": eff, "unit": "", "origin": "given", "source": "portfolio file"},
            {"name": "balance point", "value": 60.0, "unit": "°F", "origin": "default", "source": "common practice"},
            {
                "name": "window fraction",
                "value": 0.3,
                "unit": "",
                "origin": "default",
                "source": "envelope defaults table",
            },
        ],
        "periods": periods,
        "fit_line": None if annual else {"intercept": base_per_day * k_e, "slope": slope * k_e},
        "expected_line": None if annual else {"intercept": base_per_day * k_e, "slope": expected / hdd * k_e},
        "annual": (
            [
                {"year_label": "2023", "metered": actual * 1.04 * k_e, "expected": expected * k_e},
                {"year_label": "2024", "metered": actual * 0.98 * k_e, "expected": expected * 0.99 * k_e},
                {"year_label": "2025", "metered": actual * k_e, "expected": expected * k_e},
            ]
            if annual
            else []
        ),
        "peers": [p * (5.678263 / 1.8 if si else 1.0) for p in peers],
        "flags": (
            [
                {
                    "code": "high_ratio",
                    "explanation": "Metered heating is more than a quarter above the top of the expected band.",
                },
                {
                    "code": "high_balance_point",
                    "explanation": "The fitted balance point is several degrees above the assumed one.",
                },
            ]
            if ratio > 1.25
            else []
        ),
        "data_issues": (
            [{"code": "estimated_reads", "explanation": "Two of twelve readings are estimated by the utility."}]
            if i % 3 == 0
            else []
        ),
        "next_steps": [
            "Review thermostat schedules and setback settings.",
            "Compare the heating with the envelope after a walk-through.",
        ],
        "cautions": ["Defaults were used for the wall U-factor and air changes."],
        # the owner's half (issue 15): the bills' unit (therm: 100 kBtu), money, the screen's own sentence
        "heating_fuel": "natural_gas",
        "efficiency": eff,
        "blocking": False,
        "envelope_defaulted": i % 2 == 0,
        "flag_codes": ["above_band"] if ratio > 1.25 else [],
        "mechanisms": ["heat loss"] if ratio > 1.25 else [],
        "screen_verdict": f"Heating is {ratio:.2f}x the model's expectation (score 4.1 against 3.5).",
        "in_plan": rank == 1,
        "billed_unit": "therm",
        "actual_heating_billed": actual / 100,
        "expected_heating_billed": expected / 100,
        "expected_low_billed": expected * 0.8 / 100,
        "expected_high_billed": expected * 1.25 / 100,
        "excess_billed": max(actual - expected * 1.25, 0.0) / 100,
        "expected_recoverable_billed": max(actual - expected, 0.0) * 0.6 / 100,
        "expected_recoverable_energy": max(actual - expected, 0.0) * 0.6 * k_e,
        "expected_recoverable_cost": max(actual - expected, 0.0) * 0.6 * 0.011,
        "expected_recoverable_co2e_kg": max(actual - expected, 0.0) * 0.6 * 0.0531,
        "heating_cost": actual * 0.011,
        "scores": {
            "evidence_score": 4.1,
            "z_score": 2.2,
            "z_balance_point": 1.5,
            "z_intensity": 1.1,
            "z_yoy": 0.2,
            "yoy_change": 0.03,
        },
    }
    return sheet


#: one name in each script a sheet must print (invented names): CJK (Chinese, Japanese, Korean), Devanagari,
#: emoji, Hebrew and Arabic, and a letter with a tall stack of combining marks
SCRIPT_NAMES = {
    "chinese": "北京朝阳办公楼 七号",
    "japanese": "東京ビル 三号館",
    "korean": "서울 타워 2동",
    "devanagari": "मुंबई भवन संख्या ४",
    "emoji": "Sunny Loft 🏢🔥",
    "hebrew_arabic": "בית ספר مدرسة",
    "stacked": "Ze\u0301\u0302\u0303\u0304\u0308\u030a\u0327\u0328\u0331 Hall",
}

#: The system font family (a part of its name, as ``fc-list : family`` prints it) each name of
#: ``SCRIPT_NAMES`` needs beyond the bundled face and DejaVu (README "Fonts"; .ci/run installs them).
SCRIPT_FONTS = {
    "chinese": "Noto Sans CJK",
    "japanese": "Noto Sans CJK",
    "korean": "Noto Sans CJK",
    "devanagari": "Devanagari",
    "emoji": "Noto Color Emoji",
}


def scripts_without_font() -> list[str]:
    """The keys of ``SCRIPT_NAMES`` whose font (``SCRIPT_FONTS``) this machine lacks. WeasyPrint draws such a
    name as .notdef boxes, and then pdfminer (pdfplumber, pypdf) reads no text of the bold face from any
    page of that document: seen on a machine without the fonts, 2026-12-03; pdfium reads it. Tests that
    read text keep those names out of the documents they read."""
    import os
    import shutil

    fams = os.popen("fc-list : family").read() if shutil.which("fc-list") else ""
    return [k for k, fam in SCRIPT_FONTS.items() if fam not in fams]


# the screen's tier names (screening.screen.TIERS) with their ranks
_REAL_TIERS = ["Audit first", "Audit soon", "Watch", "No action", "Fix data first"]


def since_measure(k: int = 9) -> dict[str, Any]:
    """A synthetic "since the measure" record (the events step's contract: display units, kBtu here; the
    sheet shows it in the bills' unit): k monthly periods."""
    periods = []
    for m in range(k):
        base = 90000.0 - 6000 * abs(m - 3)
        periods.append(
            {"start": f"2025-{m + 2:02d}-01", "end": f"2025-{m + 2:02d}-28", "baseline": base, "metered": base * 0.82}
        )
    avoided = sum(p["baseline"] - p["metered"] for p in periods)
    return {
        "event_date": "2025-01-20",
        "description": "roof insulation and new boiler controls",
        "periods": periods,
        "avoided_energy": avoided,
        "avoided_low_90": avoided * 0.7,
        "avoided_high_90": avoided * 1.3,
        "energy_unit": "kBtu",
        "cost": avoided * 0.011,
        "currency": "$",
    }


def sheet_kinds() -> dict[str, SheetRecord]:
    """One sheet per kind the layout must hold: each tier, annual-only, heat pump, steam, SI (A4), a
    measure's box, and a name in each script of ``SCRIPT_NAMES``. Keys name the kind; SI ones end in ``_si``."""
    out: dict[str, dict[str, Any]] = {}
    for k, tier in enumerate(_REAL_TIERS):
        s = sheet_dict(10 + k)
        s.update({"tier": tier, "tier_rank": k + 1, "building_id": f"K-TIER-{k + 1}"})
        if tier == "Fix data first":
            s.update(
                {
                    "blocking": True,
                    "data_issues": [
                        {
                            "code": "likely_unit_error",
                            "blocking": True,
                            "explanation": "metered heating is 148.377x the "
                            "expectation: check the units (therm against ccf or Mcf, kBtu against MMBtu) and the floor area",
                        }
                    ],
                    "next_steps": [
                        "Check the data first: likely_unit_error — correct the readings or the building "
                        "record and rerun."
                    ],
                    "excess_billed": None,
                    "expected_recoverable_cost": None,
                }
            )
        out[f"tier_{k + 1}"] = s
    s = sheet_dict(20, annual=True)
    s.update({"building_id": "K-ANNUAL", "tier": "Watch", "tier_rank": 3})
    out["annual"] = s
    s = sheet_dict(21)
    s.update(
        {
            "building_id": "K-HEATPUMP",
            "heating_fuel": "electricity",
            "efficiency": 1.94,
            "billed_unit": "kWh",
            **{
                k: s[k] * 100 / 3.412
                for k in (
                    "actual_heating_billed",
                    "expected_heating_billed",
                    "expected_low_billed",
                    "expected_high_billed",
                    "expected_recoverable_billed",
                )
            },
        }
    )
    out["heat_pump"] = s
    s = sheet_dict(22)
    s.update(
        {
            "building_id": "K-STEAM",
            "heating_fuel": "district_steam",
            "efficiency": 0.89,
            "billed_unit": "Mlb",
            **{
                k: s[k] / 10
                for k in (
                    "actual_heating_billed",
                    "expected_heating_billed",
                    "expected_low_billed",
                    "expected_high_billed",
                    "expected_recoverable_billed",
                )
            },
        }
    )
    out["steam"] = s
    s = sheet_dict(23)
    s.update({"building_id": "K-MEASURE", "since_measure": since_measure()})
    out["measure"] = s
    s = sheet_dict(24, units="SI")
    s.update({"building_id": "K-SI", "billed_unit": "m3", "tier": "Audit soon", "tier_rank": 2})
    out["plain_si"] = s
    s = sheet_dict(25, units="SI")
    s.update({"building_id": "K-MEASURE-SI", "since_measure": since_measure(14) | {"energy_unit": "kWh"}})
    out["measure_si"] = s
    for k, (key, name) in enumerate(SCRIPT_NAMES.items()):
        s = sheet_dict(30 + k)
        s.update({"building_id": f"K-NAME-{key}", "name": name})
        out[f"name_{key}"] = s
    return {k: SheetRecord.from_dict(v) for k, v in out.items()}


LONG_NAME = (
    "The Extraordinarily Long-Named Municipal Community Recreation, Aquatics & Lifelong Learning "
    "Centre of Greater Fernhollow-upon-Brackwater, North Wing Annex Building, Including the "
    "Former Lantern Works Assembly Rooms and the Attached Seasonal Glasshouse Pavilion Block "
) * 2
HOSTILE_NAME = (
    '<script>alert("x")</script><img src="http://198.51.100.7/track.png"> Smith & Sons '
    "<b>bold</b> \u05d1\u05d9\u05ea \u05e1\u05e4\u05e8 \u0645\u062f\u0631\u0633\u0629"
)


def extreme_sheets() -> list[SheetRecord]:
    """Sheets that stress the layout: long text, many items, missing and extreme numbers."""
    out = []
    # 1. everything long and many
    s = sheet_dict(1)
    s["building_id"] = "../../etc/passwd\\CON" + "x" * 200
    s["name"] = LONG_NAME[:300]
    s["address"] = "Unit 4B, " + "Very Long Industrial Estate Service Road " * 4
    s["city"] = "Cold Ashby Flats-by-the-Marsh " * 3
    s["verdict"] = (
        "Heating use is far above what the envelope and weather explain, the fitted balance point is "
        "high, the baseload is large and two readings are estimated, so start with the controls. "
    ) * 2
    s["flags"] = [
        {
            "code": f"flag_{k}",
            "explanation": "An explanation that runs on for a while to use up space "
            "on the page and test wrapping of long lines in the flag list. " * 2,
        }
        for k in range(14)
    ]
    s["data_issues"] = [
        {
            "code": f"issue_{k}",
            "explanation": "A data issue explained at some length, again to "
            "use space and force the layout to shrink. " * 2,
        }
        for k in range(10)
    ]
    s["next_steps"] = ["A long next step that tells the reader what to check and why it matters here. " * 2] * 9
    s["cautions"] = ["A long caution about the defaults used in this estimate and their uncertainty. " * 2] * 5
    s["assumptions"] = s["assumptions"] * 4
    s["peers"] = list(np.linspace(0.5, 30, 400))
    out.append(s)
    # 2. every number missing, annual data with holes, no peers
    s = sheet_dict(2, annual=True)
    for k in [
        "floor_area",
        "year_built",
        "actual_heating",
        "expected_heating",
        "expected_low",
        "expected_high",
        "expected_fixed_base",
        "expected_modified",
        "ratio",
        "heating_intensity",
        "peer_median_intensity",
        "peer_percentile",
        "normal_heating",
        "baseload",
        "excess_energy",
        "excess_cost",
        "excess_co2e_kg",
        "hdd",
        "base_temperature",
        "effective_ua",
        "ua_total",
    ]:
        s[k] = None
    s["address"] = None
    s["city"] = None
    s["fit"] = {k: None for k in s["fit"]} | {"method": "default share"}
    s["ua_parts"] = [{"part": p["part"], "value": None} for p in s["ua_parts"]]
    s["annual"] = [{"year_label": "2025", "metered": None, "expected": None}]
    s["peers"] = []
    s["span_kind"] = "uncovered"
    s["building_id"] = "X-EMPTY"
    out.append(s)
    # 3. extreme values: huge, zero, negative, inf/nan
    s = sheet_dict(3)
    s.update(
        {
            "actual_heating": 1e12,
            "expected_heating": 0.0,
            "expected_low": -5.0,
            "expected_high": 1e15,
            "ratio": float("inf"),
            "heating_intensity": -3.2,
            "excess_energy": 1e12,
            "excess_cost": -1e9,
            "excess_co2e_kg": float("nan"),
            "floor_area": 0.0,
            "ua_total": 1e12,
            "effective_ua": -1.0,
        }
    )
    s["periods"] = [dict(p) for p in s["periods"]]
    s["periods"][0]["use_per_day"] = 1e12
    s["periods"][1]["dd_per_day"] = -40.0
    s["periods"][2]["use_per_day"] = None
    s["peers"] = [1e12, -3.2, 0.0, 5.0]
    s["ua_parts"][0]["value"] = -100.0
    s["building_id"] = "X-EXTREME"
    out.append(s)
    # 4. hostile markup everywhere text goes
    s = sheet_dict(4)
    s["name"] = HOSTILE_NAME
    s["address"] = '<a href="http://198.51.100.7/">click</a> & <style>@import url(http://198.51.100.7/x.css)</style>'
    s["city"] = "url(file:///etc/passwd)"
    s["verdict"] = '<img src="file:///etc/passwd"> {{ 7*7 }} {% raw %}'
    s["flags"] = [{"code": "<i>x</i>", "explanation": "<link rel=stylesheet href='http://198.51.100.7/a.css'>"}]
    s["use_type"] = "<svg onload=alert(1)>"
    s["building_id"] = "<b>X-HOSTILE</b>"
    out.append(s)
    return [SheetRecord.from_dict(s) for s in out]


def make_report(n_rows: int = 60, *, units: str = "IP", seed: int = 11) -> dict[str, Any]:
    """A ranking-report dict with ``n_rows`` ranked buildings."""
    rng = np.random.default_rng(seed)
    si = units == "SI"
    rows, issues = [], []
    ratios = np.sort(rng.lognormal(0.1, 0.3, size=n_rows))[::-1]
    for r in range(n_rows):
        tier = _TIERS[min(r * 5 // max(n_rows, 1), 4)][0]
        ex = float(max(ratios[r] - 1, 0) * rng.uniform(2e5, 2e6))
        flags = ["high_ratio"] if ratios[r] > 1.25 else []
        di = ["estimated_reads"] if r % 7 == 3 else []
        rows.append(
            {
                "rank": r + 1,
                "building_id": f"B-{1000 + r}",
                "name": f"Owlbrook Court {r}",
                "use_type": _USE_TYPES[r % 8],
                "tier": tier,
                "ratio": float(ratios[r]),
                "heating_intensity": float(rng.uniform(2, 14)),
                "excess_energy": ex,
                "excess_cost": ex * 0.011,
                "flags": flags,
                "data_issues": di,
            }
        )
        if di:
            issues.append(
                {
                    "building_id": f"B-{1000 + r}",
                    "name": f"Owlbrook Court {r}",
                    "code": "estimated_reads",
                    "explanation": "Two of twelve readings are estimated by the utility.",
                }
            )
    tiers = [{"tier": t, "count": sum(1 for x in rows if x["tier"] == t)} for t, _ in _TIERS]
    return {
        "run": {
            "run_id": "run-20260302-01",
            "as_of": "2026-03-01",
            "window_start": "2025-01-01",
            "window_end": "2025-12-31",
            "run_date": "2026-03-02",
            "version": "0.1.0",
            "units": "SI" if si else "IP",
        },
        # the shape screening.runner's summary gives: scalars plus nested per-tier/flag/issue dicts
        "counts": {
            "buildings": n_rows,
            "needs_review": 3,
            "with_data_issues": len(issues),
            "blocked_by_data": 2,
            "rejected_rows": 0,
            "per_tier": {t["tier"]: t["count"] for t in tiers},
            "per_flag": {"high_ratio": sum(1 for x in rows if x["flags"])},
            "per_data_issue": {"estimated_reads": len(issues)} if issues else {},
        },
        "tiers": tiers,
        "rows_total": n_rows,
        "rows_omitted": 0,
        "totals": {
            "excess_energy": float(sum(x["excess_energy"] for x in rows)),
            "excess_cost": float(sum(x["excess_cost"] for x in rows)),
            "excess_co2e_kg": float(sum(x["excess_energy"] for x in rows) * 0.0531),
        },
        "rows": rows,
        "ratios": [float(v) for v in ratios],
        "data_issues": issues,
        "energy_unit": "kWh" if si else "kBtu",
        "intensity_unit": "Wh/m²·K·day" if si else "Btu/ft²·°F·day",
        "currency": "$",
    }


def clone(d: dict[str, Any]) -> dict[str, Any]:
    return copy.deepcopy(d)


def loaded_modules(names: tuple[str, ...]) -> list[str]:
    """Which of ``names`` this process has imported (called in a render child by tests/test_report.py)."""
    import sys

    return sorted(n for n in names if n in sys.modules)
