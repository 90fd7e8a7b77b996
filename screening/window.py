"""The analysis window: the 12 months that end with the last complete calendar quarter."""

from __future__ import annotations

import datetime as _dt


def quarter_end_before(as_of: _dt.date) -> _dt.date:
    """Last day of the last calendar quarter that ended strictly before ``as_of``."""
    q_start_month = 3 * ((as_of.month - 1) // 3) + 1
    this_q_start = _dt.date(as_of.year, q_start_month, 1)
    return this_q_start - _dt.timedelta(days=1)


def analysis_window(as_of: _dt.date) -> tuple[_dt.date, _dt.date]:
    """(start, inclusive end) of the 12 months ending at ``quarter_end_before(as_of)``.

    >>> analysis_window(_dt.date(2026, 10, 15))
    (datetime.date(2025, 10, 1), datetime.date(2026, 9, 30))
    """
    end = quarter_end_before(as_of)
    start = add_months(end + _dt.timedelta(days=1), -12)
    return start, end


def quarter_label(window_end: _dt.date) -> str:
    """Label of the quarter that ends on ``window_end``, e.g. ``2026-Q3``."""
    return f"{window_end.year}-Q{(window_end.month - 1) // 3 + 1}"


def add_months(d: _dt.date, months: int) -> _dt.date:
    """``d`` shifted by whole months (day clipped to the month's length)."""
    m = d.month - 1 + months
    y = d.year + m // 12
    m = m % 12 + 1
    import calendar

    day = min(d.day, calendar.monthrange(y, m)[1])
    return _dt.date(y, m, day)
