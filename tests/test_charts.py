"""Tests of the SVG chart builders (screening.render.charts)."""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from screening.render import charts

SVG = "{http://www.w3.org/2000/svg}"


def parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)  # raises on anything that is not well-formed XML


# --- nice_ticks ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "lo, hi, n, expected",
    [
        (0, 37, 5, [0, 10, 20, 30, 40]),  # by hand: raw step 7.4 -> 10
        (0, 1.3, 4, [0, 0.5, 1.0, 1.5]),  # by hand: raw 0.325 -> 0.5
        (-3, 12, 5, [-5, 0, 5, 10, 15]),  # by hand: raw 3 -> 5
        (0, 9, 4, [0, 2.5, 5, 7.5, 10]),  # by hand: raw 2.25 -> 2.5
    ],
)
def test_nice_ticks_hand_values(lo, hi, n, expected):
    np.testing.assert_allclose(charts.nice_ticks(lo, hi, n), expected, atol=1e-12)


def test_nice_ticks_cover_range_with_round_steps():
    rng = np.random.default_rng(3)
    for lo, hi in rng.uniform(-1e6, 1e6, size=(200, 2)):
        t = charts.nice_ticks(float(lo), float(hi), 5)
        assert t[0] <= min(lo, hi) + 1e-6 and t[-1] >= max(lo, hi) - 1e-6
        step = t[1] - t[0]
        mant = step / 10 ** math.floor(math.log10(step))
        assert any(math.isclose(mant, m, rel_tol=1e-9) for m in (1, 2, 2.5, 5, 10))


def test_nice_ticks_bad_input_messages():
    with pytest.raises(ValueError, match=r"finite bounds, got lo=nan"):
        charts.nice_ticks(float("nan"), 1.0)
    with pytest.raises(ValueError, match=r"n >= 1, got n=0"):
        charts.nice_ticks(0.0, 1.0, 0)


def test_nice_ticks_equal_bounds_widen():
    t = charts.nice_ticks(5.0, 5.0)
    assert t[0] < 5.0 < t[-1]


# --- scatter ------------------------------------------------------------------------


def test_scatter_draws_one_circle_per_finite_point_and_both_lines():
    x = [30, 20, 10, None, 2, float("nan")]
    y = [900, 620, 330, 100, 140, 5]
    svg = charts.scatter_chart(
        x,
        y,
        fit_line={"intercept": 80, "slope": 27},
        expected_line={"intercept": 80, "slope": 22},
        x_label="dd",
        y_label="use",
    )
    root = parse(svg)
    # all period circles are one path, one "M" (move-to) per circle
    periods = [p for p in root.findall(f"{SVG}path") if p.get("class") == "periods"]
    assert len(periods) == 1 and periods[0].get("d").count("M") == 4  # 4 finite points
    assert len(root.findall(f"{SVG}circle")) == 1  # the legend marker
    dashed = [ln for ln in root.findall(f"{SVG}line") if ln.get("stroke-width") == "1.4"]
    assert len(dashed) == 4  # two data lines + two legend samples
    assert "2 period(s) not plotted" in svg


def test_unannotated_charts_keep_geometry_and_ticks_only():
    """annotate=False: no axis titles, legend or notes (the page prints them as text)."""
    x, y = [30, 20, 10], [900, 620, 330]
    kw = dict(
        fit_line={"intercept": 80, "slope": 27},
        expected_line={"intercept": 80, "slope": 22},
        x_label="XTITLE",
        y_label="YTITLE",
    )
    svg = charts.scatter_chart(x + [None], y + [5], annotate=False, **kw)
    root = parse(svg)
    texts = [t.text for t in root.iter(f"{SVG}text")]
    assert "XTITLE" not in svg and "YTITLE" not in svg and "not plotted" not in svg
    assert texts
    assert all(t.replace(".", "").replace("k", "").replace("-", "").isdigit() for t in texts)  # tick labels only
    lines = [ln for ln in root.findall(f"{SVG}line") if ln.get("stroke-width") == "1.4"]
    assert len(lines) == 2 and not root.findall(f"{SVG}circle")  # both data lines, no legend
    peer = parse(charts.peer_chart([1, 2, 3], 2.5, 2.0, x_label="XTITLE", annotate=False))
    ptexts = [t.text for t in peer.iter(f"{SVG}text")]
    assert "this building" in ptexts and "peer median" not in ptexts
    assert not any("group" in t for t in ptexts)
    ann = parse(charts.annual_chart(["2024"], [1.0], [2.0], y_label="YTITLE", annotate=False))
    assert "YTITLE" not in [t.text for t in ann.iter(f"{SVG}text")]
    assert "2024" in [t.text for t in ann.iter(f"{SVG}text")]


def test_advance_widths_match_the_font_file():
    """_ADVANCE_EM places tick labels character by character: it must be the regular face's
    own advance widths (hmtx / unitsPerEm, read here with fontTools), and the face must have
    no kerning that would move the characters apart."""
    from fontTools.ttLib import TTFont

    from screening.resources import templates_dir

    font = TTFont(templates_dir() / "fonts" / "ddscreen-sans.ttf")
    cmap, upm = font.getBestCmap(), font["head"].unitsPerEm
    for ch, em in charts._ADVANCE_EM.items():
        assert font["hmtx"][cmap[ord(ch)]][0] / upm == pytest.approx(em, abs=1e-9), ch
    assert "kern" not in font and "GPOS" not in font


def test_tick_labels_are_one_text_node_anchored_by_hand():
    """All tick labels of a chart are one <text> with an x and y per character; y labels end
    3 units left of the plot and x labels are centred on their ticks (by hand from the
    advance widths: "100" at font size 8 is 3 x 8 x 1172/2048 = 13.73 units wide)."""
    root = parse(
        charts.scatter_chart(
            [10, 20, 30],
            [100, 200, 300],
            fit_line=None,
            expected_line=None,
            x_label="",
            y_label="",
            width=360,
            height=170,
            annotate=False,
        )
    )
    texts = list(root.iter(f"{SVG}text"))
    assert len(texts) == 1
    t = texts[0]
    xs = [float(v) for v in t.get("x").split()]
    ys = [float(v) for v in t.get("y").split()]
    assert len(xs) == len(ys) == len(t.text) and t.get("text-anchor") is None
    digit = 8 * 1172 / 2048
    # the y labels come first, bottom up: "0", then "100" ... (nice_ticks(0, 300, 5) by hand: 0..300 step 100)
    assert t.text.startswith("0100200300")
    x0 = xs[0] + digit  # right edge of "0" = left edge of the plot - 3
    assert xs[1] + 3 * digit == pytest.approx(x0, abs=0.02)  # "100" ends where "0" ends
    assert [ys[1], ys[2], ys[3]] == [ys[1]] * 3  # one baseline per label
    # an x label of two digits is centred on its tick mark
    marks = [p for p in root.iter(f"{SVG}path") if p.get("stroke") == "#000" and "V" in p.get("d")][0]
    first_tick_x = float(marks.get("d").split("M")[1].split()[0])
    k = t.text.index("0", 10)  # the x axis starts with its "0" after the y labels
    assert xs[k] + digit / 2 == pytest.approx(first_tick_x, abs=0.02)


def test_labels_with_other_characters_keep_their_own_node():
    """A label the advance table does not cover (a year range here) is drawn by WeasyPrint's
    own anchoring, escaped."""
    root = parse(charts.annual_chart(["2024/25", "<b>"], [1.0, 2.0], [2.0, 2.0], y_label="", annotate=False))
    texts = {t.text: t for t in root.iter(f"{SVG}text")}
    assert texts["2024/25"].get("text-anchor") == "middle" and texts["<b>"].get("text-anchor") == "middle"


def test_scatter_line_is_clipped_inside_the_plot():
    svg = charts.scatter_chart(
        [0, 10],
        [0, 10],
        fit_line={"intercept": 0, "slope": 1e6},
        expected_line=None,
        x_label="x",
        y_label="y",
        width=300,
        height=200,
    )
    lines = [ln for ln in parse(svg).findall(f"{SVG}line") if ln.get("stroke-width") == "1.4"]
    for ln in lines:
        for k in ("y1", "y2"):
            assert 0 <= float(ln.get(k)) <= 200


def test_scatter_escapes_labels_and_handles_no_data():
    svg = charts.scatter_chart([1], [2], fit_line=None, expected_line=None, x_label="<b>&x", y_label="y")
    assert "&lt;b&gt;&amp;x" in svg and "<b>" not in svg
    parse(svg)
    empty = charts.scatter_chart([None], [None], fit_line=None, expected_line=None, x_label="x", y_label="y")
    assert "no period data" in empty
    parse(empty)


def test_scatter_length_mismatch_message():
    with pytest.raises(ValueError, match=r"differ in length: 2 != 1"):
        charts.scatter_chart([1, 2], [1], fit_line=None, expected_line=None, x_label="x", y_label="y")


# --- annual, peers, histogram -----------------------------------------------------


def test_annual_bars_and_missing_values():
    svg = charts.annual_chart(["2024", "2025"], [100.0, None], [90.0, 95.0], y_label="kBtu")
    root = parse(svg)
    bars = [r for r in root.findall(f"{SVG}rect") if r.get("width") != "12"]
    assert len(bars) == 3  # three finite values; the missing one is written as n/a
    assert "n/a" in svg
    with pytest.raises(ValueError, match=r"differ in length: 1, 2, 2"):
        charts.annual_chart(["2025"], [1, 2], [1, 2], y_label="x")


def test_peer_chart_ticks_or_histogram():
    few = charts.peer_chart([1, 2, 3, 4], 3.5, 2.5, x_label="i")
    assert "4 building(s) in the group" in few and "this building" in few
    many = charts.peer_chart(list(np.linspace(0, 10, 300)), 9.0, 5.0, x_label="i")
    assert "300 buildings in the group" in many
    parse(few), parse(many)
    assert "no peer figures" in charts.peer_chart([], None, None, x_label="i")


def test_ratio_histogram_counts_match_numpy():
    rng = np.random.default_rng(5)
    r = rng.lognormal(0.1, 0.4, size=500)
    svg = charts.ratio_histogram(list(r) + [None, float("inf")])
    root = parse(svg)
    heights = [float(e.get("height")) for e in root.findall(f"{SVG}rect") if e.get("fill") == charts.LIGHT]
    # reference: numpy.histogram on the same bins, overflow folded into the last bin
    ref = np.histogram(np.clip(r, 0, 2.95), bins=np.linspace(0, 3, 31))[0]
    assert len(heights) == int((ref > 0).sum())
    # bar heights are proportional to the counts
    ratios = np.array(heights) / ref[ref > 0]
    np.testing.assert_allclose(ratios, ratios[0], rtol=1e-2)  # 0.1 px rounding in the SVG
    # the note counts the last bar's buildings (not all of them) and says how many are plotted
    assert f"last bar: ratio 3 and above, {ref[-1]} building(s) of the 500 plotted" in svg
    with pytest.raises(ValueError, match=r"0 < step < top, got step=0"):
        charts.ratio_histogram([1.0], step=0)


def test_fmt_tick():
    assert charts.fmt_tick(0) == "0"
    assert charts.fmt_tick(25000) == "25k"  # by hand
    assert charts.fmt_tick(1.5e6) == "1.5M"  # by hand
    assert charts.fmt_tick(2.5) == "2.5"
    assert charts.fmt_tick(1e12) == "1e+12"


def test_periods_of_the_window_are_filled_and_earlier_ones_open():
    root = parse(
        charts.scatter_chart(
            [5, 10, 15, 20],
            [50, 100, 150, 200],
            fit_line=None,
            expected_line=None,
            x_label="",
            y_label="",
            annotate=False,
            recent=[False, False, True, True],
        )
    )
    paths = {p.get("class"): p for p in root.iter(f"{SVG}path") if (p.get("class") or "").startswith("periods")}
    assert set(paths) == {"periods", "periods recent"}
    assert paths["periods"].get("fill") == "#fff" and paths["periods recent"].get("fill") == charts.MID
    assert paths["periods"].get("d").count("M") == 2 and paths["periods recent"].get("d").count("M") == 2
    plain = parse(
        charts.scatter_chart(
            [5, 10], [50, 100], fit_line=None, expected_line=None, x_label="", y_label="", annotate=False
        )
    )
    assert [p.get("class") for p in plain.iter(f"{SVG}path") if (p.get("class") or "").startswith("periods")] == [
        "periods"
    ]
    with pytest.raises(ValueError, match="recent has 1 flags for 2 periods"):
        charts.scatter_chart(
            [5, 10], [50, 100], fit_line=None, expected_line=None, x_label="", y_label="", recent=[True]
        )


def test_measure_chart_bars_and_baseline():
    """Since a measure: one bar per period with a metered value, one dashed baseline step per period."""
    svg = charts.measure_chart(["02/25", "03/25", "04/25"], [900.0, 840.0, None], [738.0, None, 600.0])
    bars = re.search(r'<path d="([^"]*)" fill="#555"', svg).group(1)
    assert bars.count("M") == 2  # periods 1 and 3 have a metered value
    steps = re.search(r'<path d="([^"]*)" fill="none" stroke="#000" stroke-width="1.4"', svg).group(1)
    assert steps.count("M") == 2  # periods 1 and 2 have a baseline
    assert "no periods since the measure" in charts.measure_chart([], [], [])
    with pytest.raises(ValueError, match="differ in length"):
        charts.measure_chart(["a"], [1.0, 2.0], [1.0])
