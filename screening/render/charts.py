"""Small SVG chart builders for the building sheets and the ranking report.

Layer 1: pure functions, numbers in, an SVG string out; no files, no printing. Every
label is XML-escaped here, so a chart is safe to place in a page as markup.

Print design: black and greys only; series differ by shape and stroke (solid line,
dashed line, open circles, solid vs outlined bars), never by colour alone. Text uses the
small "ddscreen Sans" faces (regular and bold, cut from DejaVu Sans Condensed) that
the page stylesheets load, so a PDF embeds two small font subsets.

Why hand-written SVG rather than a charting library: see ``DEVELOPERS.md "Rendering"`` (measured
cost per sheet); the short version is that a chart here costs well under a millisecond
to build and adds a few dozen SVG elements for WeasyPrint to draw.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

import numpy as np

__all__ = ["nice_ticks", "fmt_tick", "scatter_chart", "annual_chart", "peer_chart", "ratio_histogram", "bar_strip"]

_FONT = 'font-family="ddscreen Sans, DejaVu Sans Condensed, sans-serif"'
# Advance widths [em] of the characters a tick label can hold, in the regular face of
# templates/fonts/ddscreen-sans.ttf (its hmtx table / unitsPerEm 2048; the font has no
# kerning tables; test_charts checks these against the file). Tick labels are placed one
# character at a time with them (see _label_run).
_ADVANCE_EM = {
    **dict.fromkeys("0123456789", 1172 / 2048),
    ".": 585 / 2048,
    "-": 665 / 2048,
    "+": 1544 / 2048,
    "e": 1134 / 2048,
    "k": 1067 / 2048,
    "M": 1590 / 2048,
}
INK = "#000"
MID = "#555"
LIGHT = "#bbb"
FAINT = "#e6e6e6"


def _arr(values) -> np.ndarray:
    """Float array with None turned into NaN."""
    if values is None:
        return np.zeros(0, float)
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def nice_ticks(lo: float, hi: float, n: int = 5) -> np.ndarray:
    """Round tick positions covering ``[lo, hi]`` with about ``n`` intervals.

    Steps are 1, 2, 2.5 or 5 times a power of ten (common practice for axis ticks).
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise ValueError(f"nice_ticks needs finite bounds, got lo={lo!r}, hi={hi!r}")
    if n < 1:
        raise ValueError(f"nice_ticks needs n >= 1, got n={n!r}")
    if hi < lo:
        lo, hi = hi, lo
    if hi == lo:
        pad = abs(lo) * 0.5 or 1.0
        lo, hi = lo - pad, hi + pad
    raw = (hi - lo) / n
    mag = 10.0 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw * 0.999)
    start = math.floor(lo / step + 1e-9) * step
    stop = math.ceil(hi / step - 1e-9) * step
    k = int(round((stop - start) / step))
    return start + step * np.arange(k + 1)


def fmt_tick(v: float) -> str:
    """Short tick label: 1.5, 20, 3k, 1.2M, 1e+12."""
    if not math.isfinite(v):
        return ""
    a = abs(v)
    if a == 0:
        return "0"
    if a >= 1e9 or a < 1e-3:
        return f"{v:.0e}"
    if a >= 1e6:
        return f"{v / 1e6:.3g}M"
    if a >= 1e4:
        return f"{v / 1e3:.3g}k"
    return f"{v:.4g}"


def _svg_open(width: float, height: float, title: str) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:g} {height:g}" '
        f'width="{width:g}" height="{height:g}" role="img"><title>{escape(title)}</title>'
    )


def _no_data(width: float, height: float, title: str, message: str) -> str:
    return (
        _svg_open(width, height, title)
        + f'<rect x="0.5" y="0.5" width="{width - 1:g}" height="{height - 1:g}" fill="none" '
        f'stroke="{LIGHT}" stroke-dasharray="3 3"/>'
        + f'<text x="{width / 2:g}" y="{height / 2:g}" text-anchor="middle" font-size="10" {_FONT} '
        f'fill="{MID}">{escape(message)}</text></svg>'
    )


def _label_run(labels: Sequence[tuple[float, float, str, str]], font_size: float = 8) -> str:
    """Short labels ``(x, y, text, anchor)`` as ONE ``<text>`` node with a position per character.

    WeasyPrint draws each SVG ``<text>`` with its own style set-up, and a ``text-anchor`` of
    ``middle`` or ``end`` costs it a separate form XObject per node; here the anchoring is
    done in Python from the font's advance widths (``_ADVANCE_EM``) and every character gets
    its own ``x``/``y``, so all tick labels of an axis are one node (measured 14.5k fewer
    Python calls per sheet, DEVELOPERS.md "Rendering"). A label holding any other character
    is drawn as a ``<text>`` of its own, anchored by WeasyPrint.
    """
    xs: list[str] = []
    ys: list[str] = []
    chars: list[str] = []
    single: list[str] = []
    for x, y, text, anchor in labels:
        if not text:
            continue
        if any(c not in _ADVANCE_EM for c in text):
            single.append(
                f'<text x="{x:.1f}" y="{y:.1f}" text-anchor="{anchor}" font-size="{font_size:g}" '
                f"{_FONT}>{escape(text)}</text>"
            )
            continue
        widths = [_ADVANCE_EM[c] * font_size for c in text]
        pos = x - {"start": 0.0, "middle": sum(widths) / 2, "end": sum(widths)}[anchor]
        for c, w in zip(text, widths):
            xs.append(f"{pos:.2f}")
            ys.append(f"{y:.1f}")
            chars.append(c)
            pos += w
    run = (
        f'<text x="{" ".join(xs)}" y="{" ".join(ys)}" font-size="{font_size:g}" {_FONT}>{"".join(chars)}</text>'
        if chars
        else ""
    )
    return run + "".join(single)


class _Frame:
    """Linear mapping from data to the plot rectangle, and axis drawing."""

    def __init__(self, width, height, xlo, xhi, ylo, yhi, *, left=44, right=8, top=8, bottom=30):
        self.w, self.h = width, height
        self.x0, self.x1 = left, width - right
        self.y0, self.y1 = height - bottom, top  # y0 is the bottom pixel
        self.xlo, self.xhi, self.ylo, self.yhi = xlo, xhi, ylo, yhi

    def px(self, x):
        return self.x0 + (np.asarray(x, float) - self.xlo) / (self.xhi - self.xlo) * (self.x1 - self.x0)

    def py(self, y):
        return self.y0 - (np.asarray(y, float) - self.ylo) / (self.yhi - self.ylo) * (self.y0 - self.y1)

    def axes(self, xticks, yticks, xlabel, ylabel, *, xgrid=False, titles=True) -> str:
        """Grid, ticks, tick labels and (with ``titles``) the axis titles.

        Grid lines and tick marks are one ``<path>`` each: WeasyPrint draws every SVG
        node with its own style resolution, so fewer nodes draw faster.
        """
        out = []
        grid, marks, labels = [], [], []
        for t in yticks:
            y = float(self.py(t))
            grid.append(f"M{self.x0:.1f} {y:.1f}H{self.x1:.1f}")
            labels.append((self.x0 - 3, y + 3, fmt_tick(float(t)), "end"))
        for t in xticks:
            x = float(self.px(t))
            if xgrid:
                grid.append(f"M{x:.1f} {self.y0:.1f}V{self.y1:.1f}")
            marks.append(f"M{x:.1f} {self.y0:.1f}V{self.y0 + 3:.1f}")
            labels.append((x, self.y0 + 12, fmt_tick(float(t)), "middle"))
        out.append(_label_run(labels))
        if grid:
            out.insert(0, f'<path d="{"".join(grid)}" fill="none" stroke="{FAINT}" stroke-width="0.6"/>')
        marks.append(f"M{self.x0:.1f} {self.y1:.1f}V{self.y0:.1f}H{self.x1:.1f}")
        out.append(f'<path d="{"".join(marks)}" fill="none" stroke="{INK}" stroke-width="0.8"/>')
        if titles and xlabel:
            out.append(
                f'<text x="{(self.x0 + self.x1) / 2:.1f}" y="{self.h - 3:.1f}" text-anchor="middle" '
                f'font-size="8.5" {_FONT}>{escape(xlabel)}</text>'
            )
        if titles and ylabel:
            cy = (self.y0 + self.y1) / 2
            out.append(
                f'<text x="9" y="{cy:.1f}" text-anchor="middle" font-size="8.5" {_FONT} '
                f'transform="rotate(-90 9 {cy:.1f})">{escape(ylabel)}</text>'
            )
        return "".join(out)


def _clip_line(intercept, slope, xlo, xhi, ylo, yhi):
    """End points of y = intercept + slope*x inside the box, or None."""
    if intercept is None or slope is None or not (math.isfinite(intercept) and math.isfinite(slope)):
        return None
    a, b = xlo, xhi
    if slope != 0:
        xa, xb = (ylo - intercept) / slope, (yhi - intercept) / slope
        a, b = max(a, min(xa, xb)), min(b, max(xa, xb))
    elif not (ylo <= intercept <= yhi):
        return None
    if a >= b:
        return None
    return (a, intercept + slope * a), (b, intercept + slope * b)


def scatter_chart(
    dd_per_day: Sequence[float | None],
    use_per_day: Sequence[float | None],
    *,
    fit_line: Mapping[str, Any] | None,
    expected_line: Mapping[str, Any] | None,
    x_label: str,
    y_label: str,
    width: float = 360,
    height: float = 200,
    annotate: bool = True,
    recent: Sequence[bool] | None = None,
) -> str:
    """Use per day against degree days per day, one circle per period.

    With ``recent`` (one flag per period), the flagged periods (those of the analysis
    window) are filled grey and the others (earlier periods of the fit) open, so a step
    up against the year before shows as two clouds; without it every circle is open.

    ``fit_line`` and ``expected_line`` are ``{"intercept", "slope"}`` in the same units
    (use per day = intercept + slope * degree days per day); the fitted line is drawn
    solid, the engineering expectation dashed. Non-finite points are left out and counted
    in a note. With ``annotate=False`` the axis titles, the legend and the note are left
    out (the page prints them as text beside the chart: SVG text is drawn glyph by glyph
    in WeasyPrint, which is the most expensive part of a chart); tick labels stay.
    """
    x, y = _arr(dd_per_day), _arr(use_per_day)
    if x.shape != y.shape:
        raise ValueError(f"dd_per_day and use_per_day differ in length: {x.size} != {y.size}")
    rec = np.zeros(x.shape, dtype=bool) if recent is None else np.asarray(recent, dtype=bool)
    if rec.shape != x.shape:
        raise ValueError(f"recent has {rec.size} flags for {x.size} periods")
    ok = np.isfinite(x) & np.isfinite(y)
    title = "Use per day against degree days per day"
    if not ok.any():
        return _no_data(width, height, title, "no period data to plot")
    xs, ys = x[ok], y[ok]
    xlo, xhi = min(0.0, float(xs.min())), float(xs.max())
    ylo, yhi = min(0.0, float(ys.min())), float(ys.max())
    for line in (fit_line, expected_line):
        if line and line.get("intercept") is not None and line.get("slope") is not None:
            ends = np.array([line["intercept"] + line["slope"] * xlo, line["intercept"] + line["slope"] * xhi])
            ends = ends[np.isfinite(ends)]
            # let the lines widen the y range a little, but never let a wild line flatten the points
            span = max(yhi - ylo, 1e-9)
            if ends.size:
                ylo = min(ylo, max(float(ends.min()), ylo - 0.25 * span))
                yhi = max(yhi, min(float(ends.max()), yhi + 0.25 * span))
    xt = nice_ticks(xlo, xhi, 5)
    yt = nice_ticks(ylo, yhi, 4)
    margins = {} if annotate else {"left": 32, "top": 6, "bottom": 16}
    f = _Frame(width, height, float(xt[0]), float(xt[-1]), float(yt[0]), float(yt[-1]), **({"top": 22} | margins))
    out = [_svg_open(width, height, title), f.axes(xt, yt, x_label, y_label, xgrid=True, titles=annotate)]
    legend = []
    for line, dash, label in (
        (expected_line, ' stroke-dasharray="5 3"', "engineering expectation"),
        (fit_line, "", "fitted to the meter data"),
    ):
        seg = _clip_line(line.get("intercept"), line.get("slope"), f.xlo, f.xhi, f.ylo, f.yhi) if line else None
        if seg:
            (xa, ya), (xb, yb) = seg
            out.append(
                f'<line x1="{float(f.px(xa)):.1f}" y1="{float(f.py(ya)):.1f}" x2="{float(f.px(xb)):.1f}" '
                f'y2="{float(f.py(yb)):.1f}" stroke="{INK}" stroke-width="1.4"{dash}/>'
            )
            legend.append((dash, label))
    px, py = f.px(xs), f.py(ys)
    rk = rec[ok]
    # all period circles of one kind as one path (one SVG node to draw), each circle of radius
    # 2.6 as four cubic Bezier quarters (control points at 0.55 r, the usual circle approximation):
    # WeasyPrint turns SVG arcs into Beziers in Python, measured 12.5k more Python calls
    # per sheet than writing the Beziers (DEVELOPERS.md "Rendering")
    for sel, fill, cls in ((~rk, "#fff", "periods"), (rk, MID, "periods recent")):
        if sel.any():
            out.append(
                f'<path class="{cls}" d="'
                + "".join(
                    f"M{a - 2.6:.1f} {b:.1f}c0-1.4 1.2-2.6 2.6-2.6s2.6 1.2 2.6 2.6-1.2 2.6-2.6 2.6-2.6-1.2-2.6-2.6z"
                    for a, b in zip(px[sel].tolist(), py[sel].tolist())
                )
                + f'" fill="{fill}" stroke="{INK}" stroke-width="1"/>'
            )
    dropped = int((~ok).sum())
    if not annotate:
        out.append("</svg>")
        return "".join(out)
    lx = f.x0 + 2
    out.append(
        f'<circle cx="{lx + 4:.1f}" cy="9" r="2.6" fill="#fff" stroke="{INK}"/>'
        f'<text x="{lx + 10:.1f}" y="12" font-size="8" {_FONT}>period</text>'
    )
    lx += 44
    for dash, label in legend:
        out.append(
            f'<line x1="{lx:.1f}" y1="9" x2="{lx + 16:.1f}" y2="9" stroke="{INK}" stroke-width="1.4"{dash}/>'
            f'<text x="{lx + 19:.1f}" y="12" font-size="8" {_FONT}>{escape(label)}</text>'
        )
        lx += 19 + 4.5 * len(label) + 8
    if dropped:
        out.append(
            f'<text x="{f.x1:.1f}" y="{f.y1 + 10:.1f}" text-anchor="end" font-size="7.5" {_FONT} '
            f'fill="{MID}">{dropped} period(s) not plotted (missing value)</text>'
        )
    out.append("</svg>")
    return "".join(out)


def _paired(
    labels: Sequence[str], a: Sequence[float | None], b: Sequence[float | None], what: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two series of one value per label, checked for length; with their finite values (for the axis)."""
    x, y = _arr(a), _arr(b)
    if not (len(labels) == x.size == y.size):
        raise ValueError(f"labels, {what} differ in length: {len(labels)}, {x.size}, {y.size}")
    vals = np.concatenate([x, y])
    return x, y, vals[np.isfinite(vals)]


def annual_chart(
    labels: Sequence[str],
    metered: Sequence[float | None],
    expected: Sequence[float | None],
    *,
    y_label: str,
    width: float = 360,
    height: float = 210,
    annotate: bool = True,
) -> str:
    """Metered (solid bar) against expected (outlined bar) heating, one pair per year.

    ``annotate=False`` leaves out the y-axis title and the legend (see :func:`scatter_chart`).
    """
    m, e, vals = _paired(labels, metered, expected, "metered and expected")
    title = "Metered against expected heating by year"
    if vals.size == 0:
        return _no_data(width, height, title, "no annual figures to plot")
    yt = nice_ticks(min(0.0, float(vals.min())), max(0.0, float(vals.max())), 4)
    n = len(labels)
    margins = {} if annotate else {"left": 32, "top": 6, "bottom": 16}
    f = _Frame(width, height, 0.0, float(n), float(yt[0]), float(yt[-1]), **({"top": 22} | margins))
    out = [_svg_open(width, height, title), f.axes([], yt, "", y_label, titles=annotate)]
    slot = (f.x1 - f.x0) / n
    bw = min(slot * 0.34, 40)
    zero = float(f.py(0.0))
    years: list[tuple[float, float, str, str]] = []
    for i, lab in enumerate(labels):
        cx = f.x0 + slot * (i + 0.5)
        for val, dx, style in (
            (m[i], -bw, f'fill="{MID}" stroke="{INK}"'),
            (e[i], 0.0, f'fill="#fff" stroke="{INK}" stroke-dasharray="3 2"'),
        ):
            if np.isfinite(val):
                yv = float(f.py(val))
                out.append(
                    f'<rect x="{cx + dx:.1f}" y="{min(yv, zero):.1f}" width="{bw:.1f}" '
                    f'height="{abs(zero - yv):.1f}" {style} stroke-width="0.9"/>'
                )
            else:
                out.append(
                    f'<text x="{cx + dx + bw / 2:.1f}" y="{zero - 3:.1f}" text-anchor="middle" font-size="7" '
                    f'{_FONT} fill="{MID}">n/a</text>'
                )
        years.append((cx, f.y0 + 12, str(lab), "middle"))
    out.append(_label_run(years))
    if not annotate:
        out.append("</svg>")
        return "".join(out)
    lx = f.x0 + 4
    out.append(
        f'<rect x="{lx:.1f}" y="4" width="12" height="8" fill="{MID}" stroke="{INK}"/>'
        f'<text x="{lx + 16:.1f}" y="11" font-size="8" {_FONT}>metered</text>'
        f'<rect x="{lx + 70:.1f}" y="4" width="12" height="8" fill="#fff" stroke="{INK}" '
        f'stroke-dasharray="3 2"/><text x="{lx + 86:.1f}" y="11" font-size="8" {_FONT}>expected</text>'
    )
    out.append("</svg>")
    return "".join(out)


def measure_chart(
    labels: Sequence[str],
    baseline: Sequence[float | None],
    metered: Sequence[float | None],
    *,
    width: float = 300,
    height: float = 110,
) -> str:
    """Since a measure: metered use (grey bars) against the baseline's prediction (a dashed step line),
    one slot per billing period after the measure. No titles or legend (the sheet prints them as text);
    tick labels only, ``labels`` under the slots (every second one when there are more than 12).
    """
    b, m, vals = _paired(labels, baseline, metered, "baseline and metered")
    title = "Metered against the baseline since the measure"
    if vals.size == 0:
        return _no_data(width, height, title, "no periods since the measure")
    yt = nice_ticks(min(0.0, float(vals.min())), max(0.0, float(vals.max())), 3)
    n = len(labels)
    f = _Frame(width, height, 0.0, float(n), float(yt[0]), float(yt[-1]), left=32, top=6, bottom=16)
    out = [_svg_open(width, height, title), f.axes([], yt, "", "", titles=False)]
    slot = (f.x1 - f.x0) / n
    bw = slot * 0.6
    zero = float(f.py(0.0))
    bars, steps, names = [], [], []
    for i, lab in enumerate(labels):
        cx = f.x0 + slot * (i + 0.5)
        if np.isfinite(m[i]):
            yv = float(f.py(m[i]))
            bars.append(f"M{cx - bw / 2:.1f} {zero:.1f}V{yv:.1f}H{cx + bw / 2:.1f}V{zero:.1f}Z")
        if np.isfinite(b[i]):
            yb = float(f.py(b[i]))
            steps.append(f"M{f.x0 + slot * i:.1f} {yb:.1f}H{f.x0 + slot * (i + 1):.1f}")
        if n <= 12 or i % 2 == 0:
            names.append((cx, f.y0 + 11, str(lab), "middle"))
    if bars:
        out.append(f'<path d="{"".join(bars)}" fill="{MID}" stroke="{INK}" stroke-width="0.6"/>')
    if steps:
        out.append(f'<path d="{"".join(steps)}" fill="none" stroke="{INK}" stroke-width="1.4" stroke-dasharray="4 2"/>')
    out.append(_label_run(names))
    out.append("</svg>")
    return "".join(out)


def peer_chart(
    peers: Sequence[float | None],
    value: float | None,
    median: float | None,
    *,
    x_label: str,
    width: float = 300,
    height: float = 240,
    max_ticks: int = 80,
    annotate: bool = True,
) -> str:
    """Where one building sits among its peer group on a single axis.

    Up to ``max_ticks`` peers are drawn as one grey tick each; larger groups as a
    histogram of 20 bins. The building is a black downward triangle with a label; the
    peer median a dashed vertical line. ``annotate=False`` leaves out the axis title, the
    "peer median" label and the group note (see :func:`scatter_chart`); the building's
    "this building" label stays.
    """
    p = _arr(peers)
    p = p[np.isfinite(p)]
    title = "Place among peers"
    v = float(value) if value is not None and math.isfinite(value) else None
    med = float(median) if median is not None and math.isfinite(median) else None
    if p.size == 0 and v is None:
        return _no_data(width, height, title, "no peer figures to plot")
    pts = np.concatenate([p, [v] if v is not None else [], [med] if med is not None else []])
    xt = nice_ticks(min(0.0, float(pts.min())), float(pts.max()), 4)
    margins = {} if annotate else {"top": 8, "bottom": 16}
    f = _Frame(width, height, float(xt[0]), float(xt[-1]), 0.0, 1.0, **({"left": 14, "right": 12, "top": 30} | margins))
    out = [_svg_open(width, height, title), f.axes(xt, [], x_label, "", titles=annotate)]
    if p.size <= max_ticks:
        xs = f.px(p).tolist()
        if xs:  # one tick per peer, all in one path
            out.append(
                '<path class="peers" d="'
                + "".join(f"M{a:.1f} {f.y0 - 1:.1f}V{f.y0 - 40:.1f}" for a in xs)
                + f'" fill="none" stroke="{MID}" stroke-width="1"/>'
            )
        note = f"{p.size} building(s) in the group, one tick each"
    else:
        counts, edges = np.histogram(p, bins=20, range=(f.xlo, f.xhi))
        hmax = float(counts.max()) or 1.0
        hpx = (f.y0 - f.y1 - 34) * counts / hmax
        bars = "".join(
            f"M{float(f.px(a)):.1f} {f.y0:.1f}v{-h:.1f}H{float(f.px(b)):.1f}V{f.y0:.1f}Z"
            for a, b, h in zip(edges[:-1].tolist(), edges[1:].tolist(), hpx.tolist())
            if h > 0
        )
        if bars:  # all bars in one path
            out.append(f'<path class="bins" d="{bars}" fill="{LIGHT}" stroke="{INK}" stroke-width="0.5"/>')
        note = f"{p.size} buildings in the group, bars count buildings"
    if med is not None:
        xm = float(f.px(med))
        xl = min(max(xm, f.x0 + 26), f.x1 - 26)
        out.append(
            f'<line x1="{xm:.1f}" y1="{f.y0:.1f}" x2="{xm:.1f}" y2="{f.y1 + 14:.1f}" stroke="{INK}" '
            f'stroke-width="1.2" stroke-dasharray="4 2"/>'
        )
        if annotate:
            out.append(
                f'<text x="{xl:.1f}" y="{f.y1 + 11:.1f}" text-anchor="middle" font-size="8" {_FONT}>peer median</text>'
            )
    if v is not None:
        xv = float(f.px(v))
        ty = f.y0 - 52
        anchor = "start" if xv < (f.x0 + f.x1) / 2 else "end"
        dx = 6 if anchor == "start" else -6
        out.append(
            f'<path d="M{xv - 6:.1f},{ty - 10:.1f} L{xv + 6:.1f},{ty - 10:.1f} L{xv:.1f},{ty:.1f} Z" '
            f'fill="{INK}"/><line x1="{xv:.1f}" y1="{ty:.1f}" x2="{xv:.1f}" y2="{f.y0:.1f}" stroke="{INK}" '
            f'stroke-width="2"/><text x="{xv + dx:.1f}" y="{ty - 12:.1f}" text-anchor="{anchor}" '
            f'font-size="8.5" font-weight="bold" {_FONT}>this building</text>'
        )
    if annotate:
        out.append(f'<text x="{f.x0:.1f}" y="10" font-size="7.5" {_FONT} fill="{MID}">{escape(note)}</text>')
    out.append("</svg>")
    return "".join(out)


def ratio_histogram(
    ratios: Sequence[float | None], *, width: float = 520, height: float = 200, step: float = 0.1, top: float = 3.0
) -> str:
    """Distribution of metered/expected ratios, bins of ``step`` from 0 to ``top`` plus one
    overflow bin; a dashed line marks ratio 1 (metered equals expected)."""
    if not (step > 0 and top > step):
        raise ValueError(f"ratio_histogram needs 0 < step < top, got step={step!r}, top={top!r}")
    r = _arr(ratios)
    r = r[np.isfinite(r)]
    title = "Distribution of metered / expected ratios"
    if r.size == 0:
        return _no_data(width, height, title, "no ratios to plot")
    nb = int(round(top / step))
    edges = np.linspace(0.0, top, nb + 1)
    counts = np.histogram(np.clip(r, 0.0, top - step / 2), bins=edges)[0]
    yt = nice_ticks(0.0, max(float(counts.max()), 1.0), 4)
    yt = yt[yt == np.round(yt)]
    f = _Frame(width, height, 0.0, top, 0.0, float(yt[-1]), top=14)
    xt = np.arange(0.0, top + 1e-9, 0.5)
    out = [_svg_open(width, height, title), f.axes(xt, yt, "metered / expected heating (ratio)", "buildings")]
    x0s, x1s, ys = f.px(edges[:-1]).tolist(), f.px(edges[1:]).tolist(), f.py(counts).tolist()
    out.append(
        "".join(
            f'<rect x="{a:.1f}" y="{c:.1f}" width="{b - a:.1f}" height="{f.y0 - c:.1f}" fill="{LIGHT}" '
            f'stroke="{INK}" stroke-width="0.6"/>'
            for a, b, c, n in zip(x0s, x1s, ys, counts)
            if n
        )
    )
    x1 = float(f.px(1.0))
    out.append(
        f'<line x1="{x1:.1f}" y1="{f.y0:.1f}" x2="{x1:.1f}" y2="{f.y1:.1f}" stroke="{INK}" stroke-width="1.2" '
        f'stroke-dasharray="4 2"/><text x="{x1 + 3:.1f}" y="{f.y1 + 8:.1f}" font-size="8" {_FONT}>'
        f"metered = expected</text>"
    )
    out.append(
        f'<text x="{f.x1:.1f}" y="{f.y1 + 8:.1f}" text-anchor="end" font-size="7.5" {_FONT} fill="{MID}">'
        f"last bar: ratio {top:g} and above, {int(counts[-1])} building(s) of the {r.size} plotted</text>"
    )
    out.append("</svg>")
    return "".join(out)


def bar_strip(values: Sequence[float | None], *, width: float = 100, row: float = 10, fill: float = 0.6) -> str:
    """Horizontal bars only (no text), one per value, scaled to the largest positive value.

    For a text table beside it: bar ``k`` sits in row ``k`` of height ``row``; the SVG
    is stretched to the table's line height by the page (``preserveAspectRatio="none"``).
    Missing, negative and non-finite values draw no bar. No text, so it is cheap to draw.
    """
    v = _arr(values)
    n = v.size
    height = max(n, 1) * row
    ok = np.isfinite(v) & (v > 0)
    vmax = float(v[ok].max()) if ok.any() else 0.0
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:g} {height:g}" width="{width:g}" '
        f'height="{height:g}" preserveAspectRatio="none"><title>bars</title>'
    ]
    if vmax > 0:
        pad = row * (1 - fill) / 2
        d = "".join(
            f"M0 {k * row + pad:.2f}h{width * float(v[k]) / vmax:.2f}v{row * fill:.2f}H0Z" for k in range(n) if ok[k]
        )
        out.append(f'<path d="{d}" fill="{MID}" stroke="{INK}" stroke-width="0.5"/>')
    out.append("</svg>")
    return "".join(out)
