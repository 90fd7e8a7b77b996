"""The screening's sentences: flag explanations, the verdict and the kind of waste, over the whole portfolio.

:func:`screening.screen.screen` computes the numbers, the flags (``flag_codes``) and the supported mechanisms
(``mechanisms``); :func:`explain` turns them into ``flag_texts``, ``verdict`` and ``waste_kind`` with polars
expressions, one column at a time (no per-building Python loop). Numbers are printed by :func:`fmt`, which
gives exactly Python's ``f"{x:,.{digits}f}"`` (``"n/a"`` for a missing or non-finite value).
No files, no database; called by the orchestration (:func:`screening.pipeline.screen_frames`).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np
import polars as pl

from .screen import TEXT_INPUTS

if TYPE_CHECKING:
    from .config import Thresholds

#: Dekker's splitting constant for float64 (2**27 + 1): a = hi + lo with hi and lo of 26 bits each
#: (T. J. Dekker 1971, "A floating-point technique for extending the available precision", Numer. Math. 18)
_SPLIT = 134217729.0
#: the columns :func:`explain` adds, in the order they follow the screen's columns
TEXT_COLUMNS = ("flag_codes", "flag_texts", "verdict", "waste_kind", "mechanisms")

#: what to check for each kind of waste (the sheet's next steps and the kind-of-waste sentence)
MECHANISM_CHECKS = {
    "heat loss": "check outdoor air and dampers, the envelope and air leakage, and the plant's efficiency",
    "controls": "check setpoints, schedules and setbacks, heating in warm weather, and simultaneous heating "
    "and cooling",
    "baseload": "check hot water, recirculation and leaks",
}


def _split(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    c = _SPLIT * v
    hi = c - (c - v)
    return hi, v - hi


def _rounded(values: pl.Series, digits: int) -> tuple[pl.DataFrame, np.ndarray, np.ndarray]:
    """``|x|·10^digits`` rounded as Python's format rounds it (int64 ``k``), with ``ok`` (finite) and ``neg``
    (the sign bit) per value; also the values and where they reach 2**53 (left to Python)."""
    x = np.ascontiguousarray(values.cast(pl.Float64).fill_null(np.nan).to_numpy(), dtype=float)
    ok = np.isfinite(x)
    a = np.abs(np.where(ok, x, 0.0))
    scale = 10.0**digits
    p = a * scale
    ah, al = _split(a)
    sh, sl = _split(np.array(scale))
    err = ((ah * sh - p) + ah * sl + al * sh) + al * sl  # p + err == |x|·10^digits exactly
    n = np.rint(p)
    tie = np.abs(p - n) == 0.5
    n = np.where(tie & (err > 0), np.ceil(p), np.where(tie & (err < 0), np.floor(p), n))
    big = ok & (p >= 2.0**53)
    k = np.where(big, 0.0, n).astype(np.int64)
    return pl.DataFrame({"k": k, "ok": ok & ~big, "neg": np.signbit(x)}), x, big


def _text(k: pl.Expr, ok: pl.Expr, neg: pl.Expr, digits: int, groups: int = 6) -> pl.Expr:
    """The text of a rounded value ``k`` (an integer count of 10^-digits) with its sign; "n/a" where not ok.

    ``groups`` is the most groups of three digits any value of the column has (every branch of a polars
    ``when`` is computed for every row, so a column of small numbers gets the one branch it needs).
    """
    unit = 10**digits
    whole = k // unit

    def group(i: int) -> pl.Expr:  # the i-th group of three digits from the right, zero-padded
        return ((whole // 1000**i) % 1000).cast(pl.String).str.zfill(3)

    def upto(top: int) -> pl.Expr:  # the number written with `top` commas
        return pl.concat_str(
            [(whole // 1000**top).cast(pl.String)]
            + [e for i in range(top - 1, -1, -1) for e in (pl.lit(","), group(i))]
        )

    txt = upto(groups - 1)
    for top in range(groups - 2, -1, -1):
        txt = pl.when(whole < 1000 ** (top + 1)).then(upto(top)).otherwise(txt)
    num = pl.concat_str([pl.when(neg).then(pl.lit("-")).otherwise(pl.lit("")), txt])
    if digits:
        num = pl.concat_str([num, pl.lit("."), (k % unit).cast(pl.String).str.zfill(digits)])
    return pl.when(ok).then(num).otherwise(pl.lit("n/a"))


def _groups(r: pl.DataFrame, digits: int) -> int:
    """Groups of three digits in the largest whole part among the finite values of ``r`` (:func:`_rounded`)."""
    k = r.filter(pl.col("ok"))["k"].to_numpy()
    top = int(k.max()) // 10**digits if k.size else 0
    return max(1, (len(str(top)) + 2) // 3)


def fmt(values: pl.Series | Sequence[float | None] | np.ndarray, digits: int = 0) -> pl.Series:
    """Each value as ``f"{x:,.{digits}f}"`` (thousands separated by commas), ``"n/a"`` for null, NaN or ±inf.

    Vectorized and exact: Python rounds the exact binary value of ``x`` to ``digits`` decimals, ties to
    even. Here ``p = |x|·10^digits`` is rounded to the nearest integer (ties to even) and the rounding
    error of the product, exact by Dekker's two-product, decides the cases where ``p`` landed on a half.
    Values whose ``p`` reaches 2**53 (beyond any screening figure) are formatted by Python itself.
    """
    s = values if isinstance(values, pl.Series) else pl.Series(values, dtype=pl.Float64, strict=False)
    r, x, big = _rounded(s, digits)
    out = r.select(_text(pl.col("k"), pl.col("ok"), pl.col("neg"), digits, _groups(r, digits))).to_series()
    if big.any():
        idx = np.flatnonzero(big)
        out = out.scatter(idx, [f"{v:,.{digits}f}" for v in x[idx]])
    return out.alias(s.name)


def _g(v: float) -> str:
    """A setting as printed in a sentence (Python's ``:g``)."""
    return f"{v:g}"


def _f(v: float | None, digits: int = 0) -> str:
    """One scalar as :func:`fmt` prints it."""
    return fmt(pl.Series([v], dtype=pl.Float64), digits)[0]


def _num(e: pl.Expr) -> pl.Expr:
    return e.cast(pl.Float64)


def _lt(a: pl.Expr, b: pl.Expr | float) -> pl.Expr:
    """``a < b`` as Python compares floats: False where either side is null or NaN (polars orders NaN last)."""
    b = b if isinstance(b, pl.Expr) else pl.lit(b, dtype=pl.Float64)
    return ((_num(a) < _num(b)) & _num(a).is_not_nan() & _num(b).is_not_nan()).fill_null(False)


def _gt(a: pl.Expr, b: float) -> pl.Expr:
    return ((_num(a) > b) & _num(a).is_not_nan()).fill_null(False)


def _ge(a: pl.Expr, b: float) -> pl.Expr:
    return ((_num(a) >= b) & _num(a).is_not_nan()).fill_null(False)


def _is(col: str, value: str) -> pl.Expr:
    return (pl.col(col) == value).fill_null(False)


def _flag(col: str) -> pl.Expr:
    return pl.col(col).fill_null(False)


_FIELD = re.compile(r"\{(\w+)\}")


def _say(template: str, fields: Mapping[str, pl.Expr]) -> pl.Expr:
    """A sentence per row: ``template`` with each ``{name}`` replaced by the column expression ``fields[name]``."""
    pieces: list[pl.Expr] = []
    pos = 0
    for m in _FIELD.finditer(template):
        if m.start() > pos:
            pieces.append(pl.lit(template[pos : m.start()]))
        pieces.append(fields[m.group(1)])
        pos = m.end()
    if pos < len(template):
        pieces.append(pl.lit(template[pos:]))
    return pl.concat_str(pieces) if pieces else pl.lit("")


def _chain(cases: Sequence[tuple[pl.Expr, pl.Expr | str]], otherwise: pl.Expr | str) -> pl.Expr:
    """The first case whose condition holds (an if/elif chain)."""
    e = otherwise if isinstance(otherwise, pl.Expr) else pl.lit(otherwise, dtype=pl.String)
    for cond, v in reversed(cases):
        e = pl.when(cond).then(v if isinstance(v, pl.Expr) else pl.lit(v, dtype=pl.String)).otherwise(e)
    return e


def _texts_where(w: pl.DataFrame, cases: Sequence[tuple[pl.Expr, pl.Expr]]) -> pl.Series:
    """Per row, the texts of the cases whose condition holds, in the cases' order (a null text left out):
    ``concat_list(when(cond).then(text)).list.drop_nulls()``, each text made on its own rows only (a
    ``when`` makes every branch for every row, and most rows need one or two of the texts)."""
    rows = w.lazy().with_row_index("_row")
    long = pl.concat(
        [
            rows.filter(cond).select("_row", pl.lit(i, dtype=pl.UInt32).alias("_case"), text.alias("_text"))
            for i, (cond, text) in enumerate(cases)
        ]
    )
    lists = long.drop_nulls("_text").sort("_row", "_case").group_by("_row", maintain_order=True).agg("_text").collect()
    every = pl.DataFrame({"_row": pl.int_range(w.height, dtype=pl.UInt32, eager=True)})
    got = every.join(lists, on="_row", how="left", maintain_order="left")["_text"]
    return got.fill_null(pl.lit([], dtype=pl.List(pl.String)))


#: rows worded at a time: the sentences' temporaries (every number formatted, every clause) are several
#: times the frame's own size, so 10^6 buildings at once set a run's peak memory (issue 20)
EXPLAIN_ROWS = 65_536


def explain(
    out: pl.DataFrame,
    t: Thresholds,
    *,
    energy_factor: float,
    energy_unit: str,
    currency: str = "$",
    rows: int = EXPLAIN_ROWS,
) -> pl.DataFrame:
    """:func:`explain_rows` over ``rows`` rows at a time (each row's texts are its own), in order."""
    return pl.concat(
        [
            explain_rows(out.slice(k, rows), t, energy_factor=energy_factor, energy_unit=energy_unit, currency=currency)
            for k in range(0, max(out.height, 1), rows)
        ]
    )


def explain_rows(
    out: pl.DataFrame, t: Thresholds, *, energy_factor: float, energy_unit: str, currency: str = "$"
) -> pl.DataFrame:
    """Add ``flag_texts``, ``verdict`` and ``waste_kind`` to the frame :func:`screening.screen.screen` returned.

    ``t`` is the ``[thresholds]`` settings (:class:`screening.config.Thresholds`); ``energy_factor``, ``energy_unit`` the display conversion from kBtu
    (1 and "kBtu", or 0.29307107 and "kWh"); ``currency`` is printed before money. The screen's working
    columns (:data:`screening.screen.TEXT_INPUTS`, names starting with ``_``) are dropped; the text columns
    follow the screen's own (:data:`TEXT_COLUMNS`), then ``recoverable_basis``, as before the split.
    """
    si = energy_unit == "kWh"
    e = energy_factor
    c = pl.col

    num = {  # every number a sentence prints, formatted once for the whole portfolio
        "act": (c("actual_heating_kbtu") * e, 0),
        "ratio2": (c("ratio"), 2),
        "exp": (c("expected_heating_kbtu") * e, 0),
        "blo": (c("_band_low") * e, 0),
        "bhi": (c("_band_high") * e, 0),
        "int2": (c("heating_intensity"), 2),
        "pct": (c("peer_percentile"), 0),
        "pmed2": (c("peer_median_intensity"), 2),
        "bls": (100 * c("baseload_share"), 0),
        "bld": (100 * c("baseload_share_default"), 0),
        "fb1": (c("fitted_base_f"), 1),
        "r2_2": (c("r2"), 2),
        "cv1": (c("cv_rmse"), 1),
        "yoy": (100 * c("yoy_change"), 0),
        "zyoy1": (c("z_yoy"), 1),
        "score1": (c("evidence_score"), 1),
        "z1": (c("z_score"), 1),
        "zbp1": (c("z_balance_point"), 1),
        "zint1": (c("z_intensity"), 1),
        "cost": (c("expected_recoverable_cost"), 0),
        "yf": (100 * c("_yoy_fuel"), 0),
        "zf1": (c("_z_fuel"), 1),
        "ua1": (
            pl.when(c("ua_total").is_not_null() & (c("ua_total") != 0)).then(c("effective_ua_btu_h_f") / c("ua_total")),
            1,
        ),
        "tf1": (((c("fitted_base_f") - 32) / 1.8) if si else c("fitted_base_f"), 1),
        "du1": (  # the distance; which side of the engineering point is said in words ("rel" below)
            ((c("fitted_base_f") - c("balance_point_f")).abs() / 1.8)
            if si
            else (c("fitted_base_f") - c("balance_point_f")).abs(),
            1,
        ),
    }
    vals = out.select([x.cast(pl.Float64).alias(k) for k, (x, _) in num.items()])
    rounded = {k: _rounded(vals[k], d) for k, (_, d) in num.items()}
    if any(big.any() for _, _, big in rounded.values()):  # beyond 2**53: fmt leaves those to Python
        texts = pl.DataFrame([fmt(vals[k], d).alias(f"_t_{k}") for k, (_, d) in num.items()])
    else:  # one select: the columns are formatted in parallel
        parts_k = pl.concat(
            [r.select(pl.all().name.prefix(f"{k}.")) for k, (r, _, _) in rounded.items()], how="horizontal"
        )
        texts = parts_k.select(
            [
                _text(pl.col(f"{k}.k"), pl.col(f"{k}.ok"), pl.col(f"{k}.neg"), d, _groups(rounded[k][0], d)).alias(
                    f"_t_{k}"
                )
                for k, (_, d) in num.items()
            ]
        )
    w = out.hstack(texts)
    T = {k: c(f"_t_{k}") for k in num}

    # every field a sentence names: the formatted numbers, the settings it quotes, and the parts made below
    f: dict[str, pl.Expr] = {
        **T,
        "unit": pl.lit(energy_unit),
        "deg": pl.lit("°C" if si else "°F"),
        "peer_group": c("peer_group").cast(pl.String).fill_null("None"),
        "bp_high": pl.lit(_g(t.balance_point_high_f)),
        "r2_min": pl.lit(_g(t.r2_min)),
        "yoy_review": pl.lit(_f(100 * t.yoy_review)),
        "yoy_review_z": pl.lit(_g(t.yoy_review_z)),
        "review_score": pl.lit(_g(t.review_score)),
        "codes": c("data_issue_codes").list.join(", ").fill_null(""),
        # the controls mechanism is judged against the peers' fits: below the engineering point it is high for its peers
        "rel": pl.when(
            ((c("fitted_base_f") - c("balance_point_f")) >= 0).fill_null(False)
            & (c("fitted_base_f") - c("balance_point_f")).is_not_nan().fill_null(False)
        )
        .then(pl.lit("above the engineering balance point"))
        .otherwise(pl.lit("below the engineering one, high for its peers")),
        **{k.replace(" ", "_"): pl.lit(v) for k, v in MECHANISM_CHECKS.items()},
    }

    def say(template: str) -> pl.Expr:
        return _say(template, f)

    # the flags' explanations, in the flags' order
    flag_text = {
        "above_band": say(
            "Metered heating {act} {unit} is {ratio2}× the expected {exp} {unit}, above the expected band {blo}–{bhi}."
        ),
        "high_among_peers": say(
            "Heating intensity {int2} Btu/ft²·°F·day is at the {pct}th percentile of {peer_group} (median {pmed2})."
        ),
        "high_baseload": say(
            "Non-heating use is {bls} % of the heating fuel, against about {bld} % typical for the use type."
        ),
        "high_balance_point": say(
            "Heating starts below {fb1} °F outdoors (fitted balance point; above {bp_high} °F suggests high setpoints "
            "or controls that heat too early)."
        ),
        "poor_fit": say(
            "Use follows the weather poorly (R² {r2_2}, CV(RMSE) {cv1} %): irregular operation, controls or meter problems."
        ),
        "rising_use": say("Weather-normalized heating is up {yoy} % on the previous year."),
        "envelope_defaulted": say(
            "Every envelope value is a default for the use type and era: the expected range is wide."
        ),
        "shifted_span": say(
            "Readings do not cover the analysis window; the latest covered 12 months were compared instead, with the "
            "degree days of the same days."
        ),
        "base_at_grid_edge": say(
            "The bills fit best at a base of {fb1} °F, the edge of the bases searched: the building's balance point "
            "may lie beyond it, and its split of the fuel into heating and baseload is less certain."
        ),
    }
    flag_cases = [(_flag(f"_f_{k}"), x) for k, x in flag_text.items()]

    # the kind of waste: the supported mechanisms (screen's `mechanisms`, surest first) and what to check
    part = {
        "heat loss": say(
            "heat loss (the heating slope implies {ua1}× the envelope's heat-loss coefficient): {heat_loss}"
        ),
        "controls": say("controls (heating starts at {tf1} {deg} outdoors, {du1} {deg} {rel}): {controls}"),
        "baseload": say("non-heating use of the heating fuel ({bls} % of it, about {bld} % is typical): {baseload}"),
    }
    nth = [c("mechanisms").list.get(i, null_on_oob=True) for i in range(len(part))]
    # (at each place the first name it equals: the names are distinct, so the one it equals)
    part_cases = [((m == name).fill_null(False), x) for m in nth for name, x in part.items()]
    sup = t.mechanism_support
    step = _is("_view", "step up") & _ge(c("_w_step").fill_null(0), sup) & _ge(c("yoy_change").fill_null(0), t.yoy_rise)
    fstep = (
        _is("_view", "fuel step") & _ge(c("_w_fstep").fill_null(0), sup) & _ge(c("_yoy_fuel").fill_null(0), t.yoy_rise)
    )
    lead = _chain(
        [
            (
                step,
                say("Heating rose {yoy} % on last year: ask what changed (equipment, schedules, a failed component)"),
            ),
            (
                fstep,
                say(
                    "Use of the heating fuel rose {yf} % on last year, more than its heating explains: ask what changed "
                    "(heating in warm weather, hot water, a leak, a failed component)"
                ),
            ),
        ],
        "",
    )
    # computed once, read by several sentences
    w = w.with_columns(
        _texts_where(w, part_cases).alias("_parts"), lead.alias("_lead"), (step | fstep).alias("_has_lead")
    )
    f["lead"], f["parts"], f["parts_to"] = (
        c("_lead"),
        c("_parts").list.join("; and "),
        c("_parts").list.join("; and to "),
    )
    has_parts, has_lead = c("_parts").list.len() > 0, c("_has_lead")
    blocking = _flag("blocking")
    no_action = _is("tier", "No action")
    recoverable = ~no_action & _gt(c("expected_recoverable_kbtu").fill_null(0), 0)
    waste_kind = _chain(
        [
            (blocking, "Fix the data first; the bills cannot point to a kind of waste until then."),
            (
                has_parts & no_action,
                say(
                    "Expected savings too small for a visit; the bills point to {parts_to}, at the next routine visit."
                ),
            ),
            (has_parts & has_lead, say("{lead}. Likely {parts}.")),
            (has_parts, say("Likely {parts}.")),
            (has_lead, say("{lead}; the bills do not show which part of the heating rose.")),
            (
                _flag("_f_poor_fit") & _gt(c("ratio").fill_null(0), 1),
                say(
                    "Use does not follow the weather (R² {r2_2}): these bills cannot size an excess; check operation and meters first."
                ),
            ),
            (
                recoverable & _is("_view", "fuel step"),
                say(
                    "Use of the heating fuel rose {yf} % on last year, more than its heating explains; the bills do "
                    "not show where (heating in warm weather, hot water, a leak?)."
                ),
            ),
            (
                recoverable & ~_is("fit_method", "regression"),
                "Heating above what its peers' bills suggest; annual bills cannot show which part is in excess.",
            ),
            (recoverable, "Heating above what its peers' bills suggest; no single mechanism stands out in the bills."),
        ],
        "No excess worth a visit.",
    )

    # the verdict
    money_ok = c("expected_recoverable_cost").is_not_null() & (c("expected_recoverable_cost") != 0)
    f["money"] = pl.concat_str([pl.lit(currency), T["cost"]])
    in_plan, review = _flag("in_plan"), _flag("needs_review")
    plan = _chain(
        [
            (in_plan & ~review, " It is in this quarter's audit plan for its expected savings."),
            (in_plan, " It is in this quarter's audit plan."),
            (
                _flag("_hold") & c("tier").is_in(["Watch", "No action"]).fill_null(False),
                " A recent measure, or an audit on record that found nothing, keeps it off the plan (plan_note).",
            ),
            (
                review & c("tier").is_in(["Watch", "No action"]).fill_null(False),
                " Its expected savings are below the cost of a visit ([plan] audit_cost), so it is not planned.",
            ),
            (_is("tier", "Audit soon"), " Its expected savings are worth a visit after this quarter's plan."),
        ],
        "",
    )
    audit_end = _chain([(money_ok, say(" (expected recoverable about {money} a year)."))], ".")
    ratio = c("ratio")
    why = _chain(
        [
            (
                _is("fit_method", "regression") & _lt(c("r2"), t.r2_min),
                say(
                    "its use follows the weather poorly (R² {r2_2} against {r2_min}), so its level is no basis for a "
                    "verdict: check operation and meters"
                ),
            ),
            (
                _is("_view", "step up"),
                say("its rise on last year ({yoy} %, z {zyoy1}) is below {yoy_review} % at z {yoy_review_z}"),
            ),
            (
                _is("_view", "fuel step"),
                say(
                    "the rise is in its whole use of the heating fuel ({yf} % on last year, z {zf1} among the buildings "
                    "of its weather station), not in its weather-normalized heating"
                ),
            ),
            (
                _lt(ratio, t.min_excess_ratio),
                say("its heating is not above the model's central expectation ({ratio2}×)"),
            ),
        ],
        say("buildings like it spread this widely (evidence score {score1} against {review_score})"),
    )
    basis = _chain(
        [
            (_is("_view", "step up"), say("; it rose {yoy} % on last year")),
            (_is("_view", "fuel step"), say("; its use of the heating fuel rose {yf} % on last year")),
            (_lt(ratio, 1.0), "; its peers' bills put it above what buildings like it use"),
        ],
        "",
    )
    w = w.with_columns(
        why.alias("_why"),
        basis.alias("_basis"),
        plan.alias("_plan"),
        audit_end.alias("_audit_end"),
        f["money"].alias("_money"),
    )
    f.update({x: c(f"_{x}") for x in ("why", "basis", "plan", "audit_end", "money")})
    no_claim = no_action | ~money_ok
    not_listed = _chain(
        [
            (
                no_claim & _lt(ratio, 1.0) & _lt(c("actual_heating_kbtu"), c("_band_low")),
                say("Heating is below expectation ({ratio2}× expected): no sign of excess."),
            ),
            (
                no_claim
                & (_lt(ratio, t.min_excess_ratio) | (~_flag("_f_above_band") & ~_flag("_f_poor_fit")))
                & _lt(ratio, 1.0),
                say(
                    "Heating is {ratio2}× the central expectation, within the model's range and in line with its "
                    "peers; no excess worth a visit."
                ),
            ),
            (
                no_claim & (_lt(ratio, t.min_excess_ratio) | (~_flag("_f_above_band") & ~_flag("_f_poor_fit"))),
                say(
                    "Heating is in line with expectation ({ratio2}× expected) and with its peers; no excess worth a visit."
                ),
            ),
            (no_claim, say("Heating is {ratio2}× the expectation, but no excess can be counted on: {why}.")),
        ],
        say(
            "Heating is {ratio2}× the model's expectation{basis}: expected recoverable about {money} a year. The "
            "evidence is not strong enough for the audit list: {why}.{plan}"
        ),
    )
    verdict = _chain(
        [
            (
                blocking,
                say(
                    "A data problem ({codes}) must be fixed before this building can be judged; it takes no audit slot "
                    "until then."
                ),
            ),
            (
                _is("review_path", "step up"),
                say(
                    "Weather-normalized heating rose {yoy} % on the previous year, far beyond the portfolio's "
                    "year-on-year spread (z {zyoy1} against {yoy_review_z}); it is now {ratio2}× the expectation. "
                    "Something changed: recommend an audit{audit_end}{plan}"
                ),
            ),
            (
                review,
                say(
                    "Heating is {ratio2}× what this building should need and the evidence of excess is strong (score "
                    "{score1} against {review_score}: peers {z1}, balance point {zbp1}, intensity {zint1}): recommend "
                    "an audit{audit_end}{plan}"
                ),
            ),
            (ratio.is_null(), "No verdict: metered or expected heating is missing."),
        ],
        not_listed,
    )
    w = w.with_columns(
        _texts_where(w, flag_cases).alias("flag_texts"), verdict.alias("verdict"), waste_kind.alias("waste_kind")
    )
    keep = [x for x in out.columns if not x.startswith("_") and x not in (*TEXT_COLUMNS, "recoverable_basis")]
    return w.select(*keep, *TEXT_COLUMNS, "recoverable_basis")


__all__ = ["MECHANISM_CHECKS", "TEXT_COLUMNS", "TEXT_INPUTS", "explain", "fmt", "next_steps"]


def next_steps(
    flag_codes: list[str],
    data_issue_codes: list[str],
    *,
    slope_vs_envelope: float | None = None,
    mechanisms: list[str] | None = None,
    blocking: bool = False,
) -> list[str]:
    """Plain-language checks (printed on the sheet): a mechanism's checks only where its own evidence
    supports it (``mechanisms``, from the screen's ``mechanisms`` column); none while a data problem blocks.

    ``slope_vs_envelope`` is kept for callers of the earlier signature; it no longer adds advice.
    """
    steps = []
    # the last days of the window filled from the fit need no correction, only the next bill
    fix = sorted(set(data_issue_codes) - {"end_days_filled"})
    if fix:
        steps.append(
            "Check the data first: " + ", ".join(fix) + " — correct the readings or the building record and rerun."
        )
    if "end_days_filled" in data_issue_codes:
        steps.append(
            "The last days of the window had no reading yet and were filled from the building's "
            "weather fit: the next run uses the bill once it is read."
        )
    if blocking:
        return steps
    for m in mechanisms or []:
        steps.append(f"{m[0].upper()}{m[1:]}: {MECHANISM_CHECKS[m]}.")
    if "poor_fit" in flag_codes:
        steps.append(
            "Check operation and meters: irregular occupancy, manual controls, estimated or mis-assigned readings."
        )
    if "rising_use" in flag_codes:
        steps.append("Ask what changed since last year: equipment, occupancy, schedules, a failed component.")
    if not steps:
        steps.append("No check needed now; keep the readings coming and review next quarter.")
    return steps
