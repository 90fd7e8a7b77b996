"""Typed parsing of text columns, with a reason for every value that fails.

Each ``parse_*`` function takes a polars String Series and returns
``(values, problem)`` where ``problem`` is a String Series holding, per row, ``None``
when the value is fine (or absent) and otherwise a short reason naming what was
expected. Nothing is guessed: a value that does not parse is a problem, never a
zero or a default.
"""

from __future__ import annotations

import datetime as _dt
import re
from collections.abc import Callable

import polars as pl

_TRUE = ["true", "t", "yes", "y", "1", "e", "est", "estimated"]
_FALSE = ["false", "f", "no", "n", "0", "a", "act", "actual", ""]
EXCEL_EPOCH = _dt.date(1899, 12, 30)


ISO_DATE = r"^\d{4}-\d{2}-\d{2}$"
#: an ISO timestamp: the date (group 1), ``T`` or a blank, HH:MM, optional seconds and fraction
_STAMP = r"^(\d{4}-\d{2}-\d{2})[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?$"
_MIDNIGHT = r"^\d{4}-\d{2}-\d{2}[T ]00:00(?::00(?:\.0+)?)?$"


# The date readers of the package, all here (one rule each):
# * iso_date / require_date: one date of a setting or an argument, strictly YYYY-MM-DD;
# * dates_in_format: a column in one declared strftime format (the weather contract, a mapped layout,
#   the degree-day periods file): nothing else is read;
# * parse_date: a column of an input file with the spreadsheet conventions (slash dates in an
#   order, serial numbers, midnight timestamps), each problem with its own reason.


def iso_date(value: object) -> _dt.date | None:
    """One ``YYYY-MM-DD`` date (surrounding blanks allowed), or None when the text is anything else.

    Stricter than :meth:`datetime.date.fromisoformat`, which also takes ``20251001`` and week
    dates; nothing after the day is allowed (no time, no note).
    """
    if not isinstance(value, str) or not re.match(ISO_DATE, value.strip()):
        return None
    try:
        return _dt.date.fromisoformat(value.strip())
    except ValueError:
        return None


def require_date(value: object, error: Callable[[object], Exception]) -> _dt.date:
    """``value`` as a date: a ``datetime.date`` as it is, else text read by :func:`iso_date`.

    Raises ``error(value)`` (the caller's exception, naming its setting or argument) otherwise.
    """
    if isinstance(value, _dt.date) and not isinstance(value, _dt.datetime):
        return value
    d = iso_date(value)
    if d is None:
        raise error(value)
    return d


def dates_in_format(s: pl.Series, fmt: str = "%Y-%m-%d", *, strip: bool = True) -> pl.Series:
    """Dates of a text column written in the strftime format ``fmt`` (null where a value is not one)."""
    return (s.str.strip_chars() if strip else s).str.to_date(fmt, strict=False)


class AmbiguousDates(ValueError):
    """Slash dates whose day/month order cannot be told apart and was not configured."""


def _nulls(name: str, n: int, dtype: type[pl.DataType] = pl.String) -> pl.Series:
    return pl.repeat(None, n, dtype=dtype, eager=True).rename(name)


def _merge(plain: pl.Series, fast: tuple[pl.Series, ...], rules: Callable[[pl.Series], tuple]) -> tuple:
    """The fast path's results where ``plain`` holds, the full rules' elsewhere.

    ``fast`` are the results for every row assuming each is plain; ``rules(mask)`` gives the full
    rules' results for the rows of the boolean ``mask`` (in order), each scattered back over the
    fast results (a value in canonical form needs none of the rules, so only the rest is worked).
    """
    if bool(plain.all()):
        return fast
    rest = ~plain
    idx = rest.arg_true()
    return tuple(f.clone().scatter(idx, r) for f, r in zip(fast, rules(rest)))


def parse_float(
    s: pl.Series,
    *,
    decimal_comma: bool = False,
    min_value: float | None = None,
    max_value: float | None = None,
    min_exclusive: bool = False,
    what: str = "a number",
) -> tuple[pl.Series, pl.Series]:
    """Parse numbers; reject non-numeric, NaN, infinite and out-of-range values."""
    text = s.str.strip_chars()
    if decimal_comma:
        text = text.str.replace_all(r"\.", "").str.replace(",", ".", literal=True)
    text = text.str.strip_prefix("+")  # one leading '+' (as the anchored ``^\+``)
    values = text.cast(pl.Float64, strict=False)
    df = pl.DataFrame({"t": text, "v": values})
    rng = []
    if min_value is not None:
        rng.append(f"{'>' if min_exclusive else '≥'} {min_value:g}")
    if max_value is not None:
        rng.append(f"≤ {max_value:g}")
    expected = what + (" " + " and ".join(rng) if rng else "")
    bad_num = pl.col("t").is_not_null() & (pl.col("v").is_null() | pl.col("v").is_nan() | pl.col("v").is_infinite())
    cond = bad_num
    if min_value is not None:
        low = (pl.col("v") <= min_value) if min_exclusive else (pl.col("v") < min_value)
        cond = cond | (pl.col("v").is_not_null() & low)
    if max_value is not None:
        cond = cond | (pl.col("v").is_not_null() & (pl.col("v") > max_value))
    out = df.select(
        pl.when(cond).then(None).otherwise(pl.col("v")).alias("v"),
        pl.when(cond).then(pl.lit(f"expected {expected}")).otherwise(None).alias("p"),
    )
    return out["v"].rename(s.name), out["p"].rename(s.name)


def parse_int(s: pl.Series, **kw) -> tuple[pl.Series, pl.Series]:
    """Parse whole numbers (``12`` or ``12.0``); a fraction is a problem."""
    what = kw.pop("what", "a whole number")
    v, p = parse_float(s, what=what, **kw)
    frac = v.is_not_null() & (v != v.floor())
    p = pl.select(pl.when(frac).then(pl.lit(f"expected {what}")).otherwise(p)).to_series().rename(s.name)
    v = pl.select(pl.when(frac).then(None).otherwise(v)).to_series().cast(pl.Int64).rename(s.name)
    return v, p


def parse_bool(s: pl.Series) -> tuple[pl.Series, pl.Series]:
    """Parse true/false words (true/false, yes/no, 1/0, E/A for estimated/actual)."""
    # a value written as one of the words (lower case, no blanks) or empty needs no rewriting
    plain = s.is_in(_TRUE + _FALSE).fill_null(True)
    fast = (s.is_in(_TRUE).fill_null(False).rename(s.name), _nulls(s.name, len(s)))
    return _merge(plain, fast, lambda rows: _bool_rules(s.filter(rows)))


def _bool_rules(s: pl.Series) -> tuple[pl.Series, pl.Series]:
    t = s.str.strip_chars().str.to_lowercase()
    df = pl.DataFrame({"t": t})
    out = df.select(
        pl.when(pl.col("t").is_in(_TRUE))
        .then(True)
        .when(pl.col("t").is_in(_FALSE) | pl.col("t").is_null())
        .then(False)
        .otherwise(None)
        .alias("v"),
        pl.when(pl.col("t").is_not_null() & ~pl.col("t").is_in(_TRUE + _FALSE))
        .then(pl.lit("expected true or false"))
        .otherwise(None)
        .alias("p"),
    )
    return out["v"].rename(s.name), out["p"].rename(s.name)


def detect_date_order(s: pl.Series) -> str | None:
    """Tell the order of slash/dot dates in a column, or None when undecidable.

    Returns ``"mdy"`` when some first field exceeds 12, ``"dmy"`` when some second
    field does, None when every value fits both (ambiguous) or there are none.
    """
    if not bool(s.str.contains(r"[/.]").any()):  # no slash or dot dates at all (the usual ISO file)
        return None
    parts = s.drop_nulls().str.strip_chars().str.extract_groups(r"^(\d{1,2})[/.](\d{1,2})[/.](\d{2,4})$")
    a = parts.struct.field("1").cast(pl.Int64, strict=False).drop_nulls()
    b = parts.struct.field("2").cast(pl.Int64, strict=False).drop_nulls()
    if a.len() == 0:
        return None
    first_big = bool((a > 12).any())
    second_big = bool((b > 12).any())
    if first_big and not second_big:
        return "dmy"
    if second_big and not first_big:
        return "mdy"
    return None


def parse_date(
    s: pl.Series, *, date_order: str | None = None, min_date: _dt.date | None = None, max_date: _dt.date | None = None
) -> tuple[pl.Series, pl.Series]:
    """Parse dates: ISO ``YYYY-MM-DD`` (also ``YYYY/MM/DD``, and an ISO timestamp at midnight as its date;
    another time of day or any text after the date is a problem with its own reason),
    slash or dot dates in the configured day/month order, and spreadsheet serial numbers
    (days since 1899-12-30, 20000–80000).

    Raises
    ------
    AmbiguousDates
        Slash dates are present, ``date_order`` is not set, and the values do not
        show the order (every first and second field ≤ 12 in some rows and neither
        exceeds 12 consistently).
    """
    t = s.str.strip_chars()
    # a value already written YYYY-MM-DD (or empty) needs none of the other forms: those are read on the
    # rest only, which holds every slash date (the order, its detection and AmbiguousDates see them all)
    plain = t.str.contains(ISO_DATE).fill_null(True)
    # (cache=False: the same dates, read without the table of distinct values, which costs more here)
    fast = (t.str.to_date("%Y-%m-%d", strict=False, cache=False), *(2 * (pl.repeat(False, len(t), eager=True),)))
    value, timed, trailing = _merge(plain, fast, lambda rows: _date_rules(t.filter(rows), date_order))
    df = pl.DataFrame({"t": t, "v": value, "timed": timed, "trailing": trailing})
    cond = pl.col("t").is_not_null() & pl.col("v").is_null()
    expected = "a date (YYYY-MM-DD)"
    why = (
        pl.when(pl.col("timed"))
        .then(
            pl.lit(
                f"expected {expected}: a time of day other than midnight cannot be read as a day; give the date only"
            )
        )
        .when(pl.col("trailing"))
        .then(pl.lit(f"expected {expected} with nothing after it: remove the text after the date"))
        .otherwise(pl.lit(f"expected {expected}"))
    )
    if min_date is not None or max_date is not None:
        lo = min_date or _dt.date(1, 1, 1)
        hi = max_date or _dt.date(9999, 12, 31)
        rng = (pl.col("v") < lo) | (pl.col("v") > hi)
        out = df.select(
            pl.when(cond | rng.fill_null(False)).then(None).otherwise(pl.col("v")).alias("v"),
            pl.when(cond)
            .then(why)
            .when(rng.fill_null(False))
            .then(pl.lit(f"date out of range; expected {lo} to {hi}"))
            .otherwise(None)
            .alias("p"),
        )
    else:
        out = df.select(
            pl.when(cond).then(None).otherwise(pl.col("v")).alias("v"),
            pl.when(cond).then(why).otherwise(None).alias("p"),
        )
    return out["v"].rename(s.name), out["p"].rename(s.name)


def _date_rules(t: pl.Series, date_order: str | None) -> tuple[pl.Series, pl.Series, pl.Series]:
    """:func:`parse_date`'s forms for stripped values ``t``: (date or null, a time of day other than
    midnight, text after the date)."""
    any_sep = bool(t.str.contains(r"[/.]").any())  # else the slash and dot forms need no look
    # a timestamp at midnight is read as its date (callers say how in a notice: see midnight_stamps);
    # any other time of day, or any other text after the date, is a problem, never cut off
    stamp = t.str.extract(_STAMP, 1)
    midnight = t.str.contains(_MIDNIGHT).fill_null(False)
    day_text = pl.select(pl.when(midnight).then(stamp).otherwise(t)).to_series()
    if any_sep:
        day_text = day_text.str.replace(r"^(\d{4})/(\d{1,2})/(\d{1,2})$", "$1-$2-$3")
    iso = (
        pl.select(
            pl.when(day_text.str.contains(r"^\d{4}-\d{1,2}-\d{1,2}$").fill_null(False)).then(day_text).otherwise(None)
        )
        .to_series()
        .str.to_date("%Y-%m-%d", strict=False)
    )
    has_slash = t.str.contains(r"^\d{1,2}[/.]\d{1,2}[/.]\d{2,4}$").fill_null(False) if any_sep else None
    if has_slash is not None and bool(has_slash.any()):
        order = date_order or detect_date_order(t.filter(has_slash))
        if order is None:
            example = t.filter(has_slash)[0]
            raise AmbiguousDates(
                f'dates like {example!r} could be day/month or month/day; set date_order = "dmy" or "mdy" in the config'
            )
        fmt = {"mdy": "%m/%d/%Y", "dmy": "%d/%m/%Y", "ymd": "%Y/%m/%d"}[order]
        norm = t.str.replace_all(r"\.", "/")
        four = norm.str.contains(r"/\d{4}$").fill_null(False)
        slash4 = norm.str.to_date(fmt, strict=False)
        slash2 = norm.str.to_date(fmt.replace("%Y", "%y"), strict=False)
        slash = pl.select(pl.when(four).then(slash4).otherwise(slash2)).to_series()
    else:
        slash = pl.Series([None] * len(t), dtype=pl.Date)
    serial = t.cast(pl.Float64, strict=False)
    # NaN and infinities are not serial dates (and cannot be cast to whole days)
    serial = pl.select(pl.when(serial.is_finite()).then(serial).otherwise(None)).to_series()
    serial_ok = serial.is_not_null() & (serial >= 20000) & (serial <= 80000) & (serial == serial.floor())
    serial_days = pl.lit(serial.clip(20000, 80000).cast(pl.Int64))
    serial_date = (
        pl.select(pl.when(serial_ok).then(pl.lit(EXCEL_EPOCH) + pl.duration(days=serial_days)).otherwise(None))
        .to_series()
        .cast(pl.Date)
    )
    value = pl.select(pl.coalesce(iso, slash, serial_date)).to_series()
    timed = t.str.contains(_STAMP).fill_null(False) & ~midnight
    trailing = (
        (t.str.contains(r"^\d{4}[-/]\d{1,2}[-/]\d{1,2}") & ~t.str.contains(r"^\d{4}[-/]\d{1,2}[-/]\d{1,2}$")).fill_null(
            False
        )
        & ~midnight
        & ~timed
    )
    return value, timed, trailing


def midnight_stamps(s: pl.Series) -> pl.Series:
    """True where a date cell is a timestamp at midnight (``2025-10-31T00:00:00``, ``2025-10-31 00:00``),
    which :func:`parse_date` reads as its date."""
    if not bool(s.str.contains("00:00", literal=True).any()):  # the usual column: no stamp at all
        return pl.repeat(False, len(s), eager=True).rename(s.name)
    return s.str.strip_chars().str.contains(_MIDNIGHT).fill_null(False).rename(s.name)


def parse_choice(s: pl.Series, choices: list[str] | tuple[str, ...], *, what: str) -> tuple[pl.Series, pl.Series]:
    """Parse one of a fixed set of words (case-insensitive, blanks/dashes as ``_``)."""
    # written as the word itself (or empty): a word the rules would not rewrite (lower case, no blank or dash)
    words = [c for c in choices if c == c.lower() and not re.search(r"[\s\-]", c)]
    plain = s.is_in(words).fill_null(True)
    fast = (s, _nulls(s.name, len(s)))
    return _merge(plain, fast, lambda rows: _choice_rules(s.filter(rows), choices, what))


def _choice_rules(s: pl.Series, choices: list[str] | tuple[str, ...], what: str) -> tuple[pl.Series, pl.Series]:
    t = s.str.strip_chars().str.to_lowercase().str.replace_all(r"[\s\-]+", "_")
    df = pl.DataFrame({"t": t})
    ok = pl.col("t").is_in(list(choices))
    out = df.select(
        pl.when(ok).then(pl.col("t")).otherwise(None).alias("v"),
        pl.when(pl.col("t").is_not_null() & ~ok)
        .then(pl.lit(f"unknown {what}; expected one of {', '.join(choices)}"))
        .otherwise(None)
        .alias("p"),
    )
    return out["v"].rename(s.name), out["p"].rename(s.name)


#: Currency symbols removed from amounts of money (with a notice); elsewhere they reject the value.
CURRENCY_SYMBOLS = "$€£¥"
_GROUPED = {",": ",", ".": r"\.", " ": "[ \u00a0\u202f]", "'": "[’']"}
#: the characters each ``_GROUPED`` pattern matches
_GROUPED_CHARS = {",": ",", ".": ".", " ": " \u00a0\u202f", "'": "’'"}


def number_text(
    s: pl.Series, *, decimal_comma: bool = False, thousands: str = "", money: bool = False, share: bool = False
) -> tuple[pl.Series, pl.Series, dict[str, int]]:
    """Spreadsheet number formats to plain number text, before :func:`parse_float`.

    * a currency symbol before or after the number (``$1,855.76``, ``12,5 €``) is removed in a
      ``money`` column; elsewhere the value gets a problem;
    * a trailing percent sign (``85%``) is divided by 100 in a ``share`` column; elsewhere a problem;
    * digits grouped by ``thousands`` in threes (``1,485``, ``1 485``) lose the separator; with no
      ``thousands`` set, ``1,485`` (decimal point) is a problem that says which setting reads it.

    Returns (text, problem or null, counts of values changed: ``currency``, ``percent``, ``thousands``).
    Values with none of these are returned unchanged.
    """
    # every rule needs one of these characters (a symbol, '%', ',' or the thousands separator): the
    # values without any are returned as they are with no problem, the rules run on the rest only
    marks = CURRENCY_SYMBOLS + "%," + _GROUPED_CHARS.get(thousands, "")
    plain = ~s.str.contains(f"[{marks}]").fill_null(False)
    counts = {"currency": 0, "percent": 0, "thousands": 0}
    if bool(plain.all()):
        return s, _nulls(s.name, len(s)), counts
    fast = (s, _nulls(s.name, len(s)))

    def rules(rows: pl.Series) -> tuple[pl.Series, pl.Series]:
        out, problem, n = _number_rules(
            s.filter(rows), decimal_comma=decimal_comma, thousands=thousands, money=money, share=share
        )
        counts.update(n)
        return out, problem

    out, problem = _merge(plain, fast, rules)
    return out, problem, counts


def _number_rules(
    s: pl.Series, *, decimal_comma: bool, thousands: str, money: bool, share: bool
) -> tuple[pl.Series, pl.Series, dict[str, int]]:
    t = s.str.strip_chars()
    dec = "," if decimal_comma else "."
    sym = f"[{re.escape(CURRENCY_SYMBOLS)}]"
    cur = t.str.contains(f"^[-+]?\\s*{sym}|{sym}$").fill_null(False)
    pct = t.str.contains(r"%$").fill_null(False)
    body = t.str.replace(f"^([-+]?)\\s*{sym}\\s*", "$1").str.replace(f"\\s*{sym}$", "").str.replace(r"\s*%$", "")
    d = re.escape(dec)
    counts = {"currency": 0, "percent": 0, "thousands": 0}
    if thousands:
        g = _GROUPED[thousands]
        grouped = body.str.contains(f"^[-+]?\\d{{1,3}}({g}\\d{{3}})+({d}\\d*)?$").fill_null(False)
        body = pl.select(pl.when(grouped).then(body.str.replace_all(g, "")).otherwise(body)).to_series()
        problem_grouped = pl.Series([False] * len(s), dtype=pl.Boolean)
    else:
        grouped = pl.Series([False] * len(s), dtype=pl.Boolean)
        problem_grouped = (
            body.str.contains(r"^[-+]?\d{1,3}(,\d{3})+(\.\d*)?$").fill_null(False)
            if not decimal_comma
            else body.str.contains(r"^[-+]?\d{1,3}(\.\d{3})+(,\d*)?$").fill_null(False)
        )
        if decimal_comma:  # 1.234,5 is read as before (the dots dropped); only say so for money without ','
            problem_grouped = pl.Series([False] * len(s), dtype=pl.Boolean)
    problem = pl.select(
        pl.when(cur & pl.lit(not money))
        .then(pl.lit("a currency symbol in a column that is not an amount of money"))
        .when(pct & pl.lit(not share))
        .then(pl.lit("a percent sign in a column that is not a share"))
        .when(problem_grouped & body.str.contains(r"\.").fill_null(False))
        .then(s.str.strip_chars() + pl.lit(': a thousands separator; set [reading] thousands = ","'))
        .when(pl.lit(not decimal_comma) & body.str.contains(r"^[-+]?\d+,\d+$").fill_null(False) & ~problem_grouped)
        .then(s.str.strip_chars() + pl.lit(": a decimal comma; set [reading] decimal_comma = true"))
        .when(problem_grouped)
        .then(
            s.str.strip_chars()
            + pl.lit(
                ': a thousands separator (or a decimal comma); set [reading] thousands = "," (or decimal_comma = true)'
            )
        )
        .otherwise(None)
    ).to_series()
    if share and bool(pct.any()):
        num = (body.str.replace(",", ".", literal=True) if decimal_comma else body).cast(pl.Float64, strict=False)
        scaled = (num / 100.0).cast(pl.String)
        if decimal_comma:
            scaled = scaled.str.replace(".", ",", literal=True)
        body = pl.select(pl.when(pct & num.is_not_null()).then(scaled).otherwise(body)).to_series()
    ok = problem.is_null()
    counts["currency"] = int((cur & ok).sum()) if money else 0
    counts["percent"] = int((pct & ok).sum()) if share else 0
    counts["thousands"] = int((grouped & ok).sum())
    out = pl.select(pl.when(cur | pct | grouped).then(body).otherwise(s)).to_series().rename(s.name)
    return out, problem.rename(s.name), counts
