"""Column mapping: the user's column names → ours, given explicitly; suggestions for the user to confirm.

Nothing here is applied at run time on its own: a run reads only the mapping written in
``[inputs.columns]`` or given with ``--columns``. ``ddscreen validate`` prints a suggestion
when required columns are missing, and ``ddscreen init --from`` writes one into a new config,
each line commented with how it was found.

Pure functions (no files).
"""

from __future__ import annotations

import difflib
import json
import re

from .errors import ConfigError

#: Other names people give our columns (lower case, words separated by one blank). Our own list of
#: everyday header words; a suggestion from it is always shown for confirmation.
#: the names a building id goes by in every file (buildings add "id", readings "account")
_BUILDING_ID_NAMES = (
    "building id",
    "bldg id",
    "building",
    "bldg",
    "building no",
    "building number",
    "building code",
    "site id",
    "site",
    "property id",
    "property code",
)

SYNONYMS: dict[str, dict[str, tuple[str, ...]]] = {
    "buildings": {
        "building_id": (*_BUILDING_ID_NAMES, "id"),
        "name": ("building name", "property name", "site name", "property", "description"),
        "station_id": ("station", "weather station", "station id", "station code", "wx station"),
        "use_type": ("use", "use type", "building type", "property type", "type", "primary use", "usage type"),
        "floor_area": (
            "floor area",
            "area",
            "gross floor area",
            "gfa",
            "gross area",
            "square feet",
            "sq ft",
            "sqft",
            "square footage",
            "size",
            "floor space",
        ),
        "year_built": ("year built", "built", "construction year", "year constructed", "built year"),
        "stories": ("floors", "storeys", "number of floors", "no of floors", "levels"),
        "heating_fuel": ("heating fuel", "heat fuel", "fuel", "primary heating fuel", "heating source", "heating type"),
        "heating_efficiency": ("efficiency", "boiler efficiency", "heating system efficiency"),
        "ua_total": ("ua", "ua value", "total ua", "heat loss coefficient", "envelope ua"),
        "balance_point": ("balance point temperature", "balance temperature", "balance temp"),
        "address": ("street address", "street"),
        "city": ("town",),
    },
    "readings": {
        "building_id": (*_BUILDING_ID_NAMES, "account"),
        "fuel": (
            "fuel",
            "fuel type",
            "energy type",
            "commodity",
            "utility",
            "utility type",
            "meter type",
            "service type",
            "energy source",
        ),
        "period_start": (
            "start date",
            "start",
            "from",
            "from date",
            "period start",
            "bill start",
            "service start",
            "begin",
            "begin date",
            "billing start",
            "start of period",
        ),
        "period_end": (
            "end date",
            "end",
            "to",
            "to date",
            "period end",
            "bill end",
            "service end",
            "through",
            "billing end",
            "end of period",
        ),
        "read_date": (
            "read date",
            "reading date",
            "meter read date",
            "date read",
            "date of read",
            "bill date",
            "statement date",
        ),
        "quantity": (
            "usage",
            "consumption",
            "use",
            "amount used",
            "volume",
            "qty",
            "reading",
            "total usage",
            "energy use",
            "units used",
        ),
        "unit": ("units", "uom", "unit of measure", "usage unit", "usage units", "measure"),
        "cost": (
            "amount",
            "charges",
            "total cost",
            "bill amount",
            "total charges",
            "total",
            "amount due",
            "cost usd",
            "charge",
        ),
        "meter_id": ("meter", "meter number", "meter id", "meter no", "meter code", "account number"),
        "estimated": ("estimate", "est", "estimated read", "estimated reading", "read type"),
    },
    "weather": {
        "station_id": ("station", "weather station", "station id", "station code", "site"),
        "date": ("day", "obs date", "observation date", "date time"),
        "t_min": ("min temp", "tmin", "low", "minimum temperature", "min temperature", "low temp", "daily low"),
        "t_max": ("max temp", "tmax", "high", "maximum temperature", "max temperature", "high temp", "daily high"),
        "t_mean": ("avg temp", "mean temp", "tavg", "average temperature", "mean temperature", "tmean", "average temp"),
    },
    "events": {
        "building_id": _BUILDING_ID_NAMES,
        "date": ("event date", "day", "date of visit", "visit date", "audit date", "install date", "installed"),
        "kind": ("event", "event type", "type", "what", "activity"),
        "finding": ("result", "outcome", "found", "audit result"),
        "mechanism": ("cause", "problem", "issue", "category"),
        "description": ("notes", "note", "comment", "comments", "details", "remarks"),
        "expected_savings": ("expected saving", "estimated savings", "savings estimate"),
        "cost": ("amount", "price", "measure cost", "installed cost", "total cost"),
    },
}

#: The columns each kind must have (after mapping). Readings need a start date, or a read date.
REQUIRED: dict[str, tuple[str, ...]] = {
    "buildings": ("building_id", "name", "station_id", "use_type", "floor_area", "heating_fuel"),
    "readings": ("building_id", "fuel", "period_start", "period_end", "quantity", "unit"),
    "weather": ("station_id", "date"),
    "events": ("building_id", "date", "kind"),
}


def _key(name: str) -> str:
    """A header name for comparison: lower case, a parenthesised unit removed, words by one blank."""
    t = re.sub(r"\(.*?\)|\[.*?\]", " ", str(name).strip().lower())
    t = t.replace("#", " no ").replace("%", " pct ")
    return " ".join(re.findall(r"[a-z0-9]+", t))


def suggest(header: list[str], kind: str) -> list[tuple[str, str, str]]:
    """Suggested ``(their name, our name, why)`` for columns of ``header`` not named as ours.

    Tried in order for each of our columns the header lacks: the same name but for case,
    blanks and punctuation; a common other name (:data:`SYNONYMS`); a close spelling
    (difflib ratio ≥ 0.85). Each of their columns is used at most once; a column already
    named as one of ours is never re-mapped.
    """
    from .config import column_names

    ours = column_names()[kind]
    names = [h for h in header if str(h).strip()]
    keys = {h: _key(h) for h in names}
    have = {h.strip().lower() for h in names} & set(ours)
    used = {h for h in names if h.strip().lower() in ours}
    out: list[tuple[str, str, str]] = []
    wanted = [c for c in ours if c not in have]
    if kind == "readings" and "period_start" not in have:
        wanted = ["period_start", "read_date"] + [c for c in wanted if c not in ("period_start", "read_date")]
    for stage in ("same", "synonym", "close"):
        for col in wanted:
            if col in {o for _, o, _ in out}:
                continue
            if col == "read_date" and "period_start" in {o for _, o, _ in out}:
                continue
            free = [h for h in names if h not in used]
            hit = None
            if stage == "same":
                hit = next((h for h in free if keys[h] == col.replace("_", " ")), None)
                why = "same name but for case, blanks or punctuation"
            elif stage == "synonym":
                syn = SYNONYMS.get(kind, {}).get(col, ())
                hit = next((h for s in syn for h in free if keys[h] == s), None)
                why = "a common name for it"
            else:
                cands = {keys[h]: h for h in free if keys[h]}
                close = difflib.get_close_matches(col.replace("_", " "), list(cands), n=1, cutoff=0.85)
                hit = cands[close[0]] if close else None
                why = "a close spelling"
            if hit is not None:
                used.add(hit)
                out.append((hit, col, why))
    order = {c: i for i, c in enumerate(ours)}
    return sorted(out, key=lambda t: order.get(t[1], 99))


def missing_after(header: list[str], kind: str, mapping: dict[str, str]) -> list[str]:
    """Our required columns still missing from ``header`` once ``mapping`` applies."""
    got = {mapping.get(h, h.strip().lower()) for h in header}
    got |= {v for k, v in mapping.items() if k.strip().lower() in {h.strip().lower() for h in header}}
    req = list(REQUIRED[kind])
    if kind == "readings" and "period_start" not in got and ("read_date" in got or "period_end" in got):
        req = [c for c in req if c not in ("period_start", "period_end")]
        if "read_date" not in got and "period_end" not in got:
            req.append("read_date")
    return [c for c in req if c not in got]


def best_kind(header: list[str]) -> tuple[str, list[tuple[str, str, str]], list[str]]:
    """The file kind a header fits best, with the suggested mapping and what is still missing."""
    best: tuple[tuple[bool, float, int], str, list[tuple[str, str, str]], list[str]] | None = None
    for kind in ("readings", "buildings", "weather"):
        sug = suggest(header, kind)
        miss = missing_after(header, kind, {t: o for t, o, _ in sug})
        found = len(REQUIRED[kind]) - len(miss)
        score = (len(miss) == 0, found / len(REQUIRED[kind]), found)
        if best is None or score > best[0]:
            best = (score, kind, sug, miss)
    assert best is not None  # the loop scored three kinds
    return best[1], best[2], best[3]


def toml_block(kind: str, pairs: list[tuple[str, str, str]], *, comments: bool = True) -> str:
    """``[inputs.columns.KIND]`` with one ``"their name" = "our name"`` line each (TOML, ready to paste)."""
    lines = [f"[inputs.columns.{kind}]"]
    for theirs, ours, why in pairs:
        lines.append(
            f"{json.dumps(theirs, ensure_ascii=False)} = {json.dumps(ours)}"
            + (f"   # {why}: check it" if comments and why else "")
        )
    return "\n".join(lines)


def parse_option(values: list[str] | None) -> dict[str, dict[str, str]]:
    """``--columns`` values: ``KIND:Their name=our_name,Other=ours`` (one kind per value; repeat the option).

    Names with a comma or ``=`` go in the config file instead.
    """
    out: dict[str, dict[str, str]] = {}
    for v in values or []:
        kind, sep, rest = v.partition(":")
        kind = kind.strip().lower()
        if not sep or kind not in REQUIRED:
            raise ConfigError(
                f"--columns {v!r}: expected KIND:Their name=our_name,… with KIND buildings, readings, weather or events"
            )
        for pair in rest.split(","):
            if not pair.strip():
                continue
            theirs, eq, ours = pair.partition("=")
            if not eq or not theirs.strip() or not ours.strip():
                raise ConfigError(f"--columns {v!r}: {pair.strip()!r} is not Their name=our_name")
            out.setdefault(kind, {})[theirs.strip()] = ours.strip()
    return out
