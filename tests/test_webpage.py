"""index.html, the portfolio page (issue 16): a self-contained file, checked in a real headless browser.

The browser is Debian's ``chromium`` package, run as a subprocess with ``--headless --dump-dom``
(the DOM after the page's script ran) and ``--enable-logging=stderr --v=0`` (the page's console
messages, ``…:CONSOLE…`` lines, among them every uncaught error). The page also writes any script
error into ``#page-errors``. Without chromium these tests are skipped, except under CI (``CI`` set),
where they fail: ``.ci/run`` installs the package.
"""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path
from typing import ClassVar

import polars as pl
import pytest

from tests.conftest import cli, write_portfolio

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
needs_browser = pytest.mark.skipif(
    CHROMIUM is None and not os.environ.get("CI"),
    reason="chromium is not installed (Debian: apt-get install chromium); CI installs it and runs these tests",
)

# invented hostile building names: markup, a script, a closing script tag, an attribute break-out,
# a comment opener, a spreadsheet formula
HOSTILE = {
    "B01": "<script>document.documentElement.setAttribute('data-pwned','1')</script>",
    "B02": "</script><img src=x onerror=\"document.documentElement.setAttribute('data-pwned','2')\">",
    "B03": '<b>Hollin</b> & "School" </script><!--',
    "B04": "\" onmouseover=\"document.documentElement.setAttribute('data-pwned','4')\" x=\"",
    "B05": '=HYPERLINK("http://example.invalid","click me")',
}


# ---------------------------------------------------------------------------- helpers


class Node:
    def __init__(self, tag: str, attrs: dict[str, str | None], parent: Node | None):
        self.tag, self.attrs, self.parent, self.children, self.text_parts = tag, attrs, parent, [], []

    def text(self) -> str:
        return "".join(p if isinstance(p, str) else p.text() for p in self.text_parts)

    def iter(self):
        yield self
        for c in self.children:
            yield from c.iter()

    def find_all(self, tag: str | None = None, **attrs) -> list[Node]:
        return [
            n
            for n in self.iter()
            if (tag is None or n.tag == tag) and all(n.attrs.get(k.replace("_", "-")) == v for k, v in attrs.items())
        ]


class _Tree(HTMLParser):
    VOID: ClassVar[set[str]] = {
        "meta",
        "img",
        "br",
        "input",
        "link",
        "hr",
        "col",
        "source",
        "area",
        "base",
        "wbr",
        "path",
        "rect",
        "line",
        "circle",
    }

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.root = Node("#root", {}, None)
        self.cur = self.root

    def handle_starttag(self, tag, attrs):
        n = Node(tag, dict(attrs), self.cur)
        self.cur.children.append(n)
        self.cur.text_parts.append(n)
        if tag not in self.VOID:
            self.cur = n

    def handle_startendtag(self, tag, attrs):
        n = Node(tag, dict(attrs), self.cur)
        self.cur.children.append(n)
        self.cur.text_parts.append(n)

    def handle_endtag(self, tag):
        n = self.cur
        while n is not self.root and n.tag != tag:
            n = n.parent
        if n is not self.root:
            self.cur = n.parent

    def handle_data(self, data):
        self.cur.text_parts.append(data)


def parse(html: str) -> Node:
    t = _Tree()
    t.feed(html)
    t.close()
    return t.root


def load(page: Path, state: str = "", *, tmp: Path) -> tuple[Node, str, list[str]]:
    """Open ``page#state`` in headless chromium: (the DOM after the script ran, its text, console lines)."""
    if CHROMIUM is None:
        pytest.fail("chromium is required under CI (.ci/run installs it)")
    url = page.resolve().as_uri() + (f"#{state}" if state else "")
    profile = tmp / f"chromium-profile-{len(list(tmp.glob('chromium-profile-*')))}"
    proc = subprocess.run(
        [
            CHROMIUM,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
            "--disable-extensions",
            f"--user-data-dir={profile}",
            "--enable-logging=stderr",
            "--v=0",
            "--dump-dom",
            url,
        ],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    console = [ln for ln in proc.stderr.splitlines() if ":CONSOLE" in ln or "Uncaught" in ln]
    return parse(proc.stdout), proc.stdout, console


def table_rows(dom: Node) -> list[tuple[str, list[str]]]:
    body = dom.find_all("tbody", id="building-rows")
    assert len(body) == 1
    return [(tr.attrs["data-id"], [td.text() for td in tr.find_all("td")]) for tr in body[0].find_all("tr")]


def errors_of(dom: Node) -> str:
    box = dom.find_all(id="page-errors")
    assert len(box) == 1
    return box[0].text().strip()


def _hostile_inputs(folder: Path):
    p = write_portfolio(folder)
    with open(p.buildings, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    for r in rows[1:]:
        r[1] = HOSTILE.get(r[0], r[1])
    with open(p.buildings, "w", newline="", encoding="utf-8") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)
    return p


@pytest.fixture(scope="module")
def site(tmp_path_factory) -> dict:
    """One run with sheets on the tiny portfolio whose names are hostile, one without sheets."""
    tmp = tmp_path_factory.mktemp("page")
    p = _hostile_inputs(tmp / "in")
    out, bare = tmp / "out", tmp / "bare"
    r = cli(p.args(out, tmp / "a.duckdb", "--quiet"))
    assert r.exit_code == 0, r.stderr
    r = cli(p.args(bare, tmp / "b.duckdb", "--quiet", "--no-sheets"))
    assert r.exit_code == 0, r.stderr
    return {"tmp": tmp, "out": out, "bare": bare, "ranking": pl.read_csv(out / "ranking.csv"), "portfolio": p}


# ---------------------------------------------------------------------------- the file itself


def test_every_run_writes_the_page_and_it_fetches_nothing(site):
    page = site["out"] / "index.html"
    html = page.read_text(encoding="utf-8")
    dom = parse(html)
    assert "index.html" in __import__("screening.runner", fromlist=["OUTPUT_NAMES"]).OUTPUT_NAMES
    # nothing from elsewhere: no external script, stylesheet, font, image or frame
    assert not dom.find_all("link") and not dom.find_all("iframe") and not dom.find_all("img")
    scripts = dom.find_all("script")
    assert len(scripts) == 2 and all("src" not in s.attrs for s in scripts)
    assert [s.attrs.get("type") for s in scripts] == ["application/json", None]
    assert not re.search(r"(?i)(src|href)\s*=\s*[\"']?(https?:|//)", html)
    assert "@import" not in html and "url(" not in html
    # the JSON holds no raw "<": nothing in it can end its element
    data_text = scripts[0].text()
    assert "<" not in data_text and ">" not in data_text
    data = json.loads(data_text)
    assert [r["id"] for r in data["rows"]] == site["ranking"]["building_id"].to_list()
    assert {r["id"]: r["name"] for r in data["rows"]}["B02"] == HOSTILE["B02"]
    # "look for": the mechanisms; "not told apart" only where a visit is due or the evidence is strong
    for r in data["rows"]:
        if not r["kinds"]:
            assert r["kind_text"] == (
                "not told apart" if r["review"] or r["tier"] in ("Audit first", "Audit soon") else ""
            )
        else:
            assert r["kind_text"] == ", ".join(r["kinds"])
    # the chart is the ranking's SVG, inline
    assert len(dom.find_all("svg")) == 1 and "Distribution of metered / expected ratios" in html


def test_the_same_results_give_the_same_bytes(site, tmp_path):
    r = cli(site["portfolio"].args(tmp_path / "again", tmp_path / "c.duckdb", "--quiet"))
    assert r.exit_code == 0, r.stderr
    assert (tmp_path / "again" / "index.html").read_bytes() == (site["out"] / "index.html").read_bytes()


def test_json_for_script_escapes_what_could_close_the_element():
    from screening.webpage import json_for_script

    text = str(json_for_script({"a": "</script><!-- & \u2028"}))
    assert text == '{"a":"\\u003c/script\\u003e\\u003c!-- \\u0026 \\u2028"}'
    assert json.loads(text) == {"a": "</script><!-- & \u2028"}


# ---------------------------------------------------------------------------- column-wise texts

#: awkward numbers for the column-wise formatters: missing, NaN, infinities, signed zeros, halves that round
#: to even (0.125 -> 0.12, 0.375 -> 0.38), values whose decimal text looks like a half but is not (2.675 is
#: 2.67499999…), the edges of every branch of fmt_num and fmt_ratio (1e-3, 100, 1e6, 1e9) and the floats
#: next to them, carries into the next decade (9.995, 99.95, 999999.995), the smallest and largest floats
AWKWARD = [
    None, float("nan"), float("inf"), float("-inf"), 0.0, -0.0, 0.125, 0.375, -0.125, 2.675, 1.005, 0.005,
    0.015, 0.0049999, 9.995, 99.95, 99.949999, 999.5, 1000.5, 2.5, 3.5, 999999.995, 999999.994, 1e6, -1e6,
    999999999.5, 999999999.4, 1e9, -1e9, 1e-3, 0.000999, 0.0009995, 0.0095, 0.00995, 5e-324,
    1.7976931348623157e308, -3.2e-12, 1234567.891, -1234.5, 12.345, 0.1 + 0.2, 1.5e-5, 1e-7,
]  # fmt: skip
#: currencies as [prices] currency allows them (1 to 8 characters, a symbol or a code)
CURRENCIES = ["$", "€", "£", "¥", "CHF ", "kr", "R$", "US$ ", "<&>\"'"]


def _awkward_values() -> list[float | None]:
    import math

    import numpy as np

    rng = np.random.default_rng(20)
    edges = [
        x
        for k in range(-5, 11)
        for m in (1.0, 0.5, 0.05, 0.005, 0.125, 0.375, 0.995, 0.9995, 0.99995, 2.5)
        for v in (m * 10.0**k,)
        for x in (v, math.nextafter(v, math.inf), math.nextafter(v, -math.inf))
    ]
    rand = np.concatenate(
        [
            rng.integers(0, 2**63, 3000, dtype=np.int64).view(np.float64),  # any float64 bit pattern
            rng.lognormal(0, 7, 3000),
            np.round(rng.uniform(0, 100, 3000), 2) + 0.005,  # near-halves at the second decimal
            rng.integers(0, 2**31, 3000) / 8.0,  # exact halves and quarters
        ]
    )
    values = AWKWARD + edges + rand.tolist()
    return values + [-v if v is not None else None for v in values]


def test_the_column_formatters_write_what_the_per_value_formatters_write():
    from screening.render.display import fmt_money, fmt_num, fmt_ratio
    from screening.webpage import fmt_money_col, fmt_num_col, fmt_ratio_col

    values = _awkward_values()
    col = pl.Series("x", values, dtype=pl.Float64)
    assert fmt_num_col(col).to_list() == [fmt_num(v) for v in values]
    assert fmt_ratio_col(col).to_list() == [fmt_ratio(v) for v in values]
    for cur in CURRENCIES:
        assert fmt_money_col(col, cur).to_list() == [fmt_money(v, cur) for v in values], cur
    # integers (a column of whole numbers) and an empty column
    ints = pl.Series("n", [0, -7, 100, 123456789, None], dtype=pl.Int64)
    assert fmt_money_col(ints, "$").to_list() == [fmt_money(v, "$") for v in ints.to_list()]
    assert fmt_ratio_col(pl.Series("x", [], dtype=pl.Float64)).to_list() == []


def test_the_decade_edges_are_exact():
    from fractions import Fraction

    from screening.webpage import _DECADE_EDGES

    for k, edge in zip((-2, -1, 0, 1), _DECADE_EDGES.tolist()):
        below = __import__("math").nextafter(edge, 0.0)
        assert Fraction(edge) >= Fraction(10) ** k > Fraction(below), k


def _rows_one_by_one(ranking: pl.DataFrame, results: pl.DataFrame, sheet_files, currency: str) -> dict:
    """The page's data as the per-building loop built it before issue 20 (the oracle of page_json)."""
    import math
    from urllib.parse import quote

    from screening import screen
    from screening.render.display import fmt_money, fmt_ratio
    from screening.webpage import NOT_TOLD_APART, STEP_UP_KIND, VISIT_TIERS

    def num(x):
        return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) else None

    def kinds_of(mechanisms, waste_kind):
        if mechanisms:
            return list(mechanisms)
        return [STEP_UP_KIND] if "rose" in (waste_kind or "") else []

    rows = ranking.join(
        results.select("building_id", "mechanisms"), on="building_id", how="left", maintain_order="left"
    )
    tier_order = {name: i for i, (name, _m) in enumerate(screen.TIERS)}
    out = []
    for r in rows.iter_rows(named=True):
        kinds = kinds_of(r["mechanisms"], r["waste_kind"])
        sheet = (sheet_files or {}).get(r["building_id"])
        out.append(
            {
                "rank": r["rank"],
                "id": r["building_id"],
                "name": r["name"] or "",
                "tier": r["tier"] or "",
                "tier_order": tier_order.get(r["tier"], len(tier_order)),
                "use": r["use_type"] or "",
                "station": r["station_id"] or "",
                "fuel": r["heating_fuel"] or "",
                "ratio": num(r["ratio"]),
                "ratio_text": fmt_ratio(r["ratio"]),
                "cost": num(r["expected_recoverable_cost"]),
                "cost_text": fmt_money(r["expected_recoverable_cost"], currency),
                "excess": num(r["excess_cost"]),
                "excess_text": fmt_money(r["excess_cost"], currency),
                "review": bool(r["needs_review"]),
                "kinds": kinds,
                "kind_text": ", ".join(kinds)
                or (NOT_TOLD_APART if r["needs_review"] or r["tier"] in VISIT_TIERS else ""),
                "why": r["waste_kind"] or "",
                "flags": (r["flags"] or "").replace(";", ", "),
                "issues": (r["data_issues"] or "").replace(";", ", "),
                "sheet": None if sheet is None else quote(sheet, safe="/"),
            }
        )
    return {"rows": out, "tiers": [name for name, _m in screen.TIERS]}


def _awkward_page_frames(n: int) -> tuple[pl.DataFrame, pl.DataFrame, dict[str, str]]:
    """A ranking of ``n`` invented buildings whose every column cycles through awkward values (cycles of
    different lengths and paces, so that 300 rows hold every pair of mechanisms, waste kind, tier and review)."""
    texts = [
        None, "", "Hollin School", '<b>"x"</b> & \\ </script><!--', "tab\there\nnew line\r\x00\x1f\x7f",
        "Åsgård Hall — 北 \u2028\u2029 🏫", "a;b;c", ";", "use rose 12%", "Audit first", "Audit soon", "Watch",
    ]  # fmt: skip
    mechanisms = [None, [], ["heat loss"], ["controls", "baseload"], [""], ['"q"', "<&>"]]
    numbers = AWKWARD + [3471.3, 4521090.49, 0.87, 1.5]
    tiers = [None, "Audit first", "Audit soon", "Watch", "No action", "Fix data first", "Unknown tier"]
    why = [None, "", "The use rose 40% in a year", "Likely heat loss", "Rose"]
    ids = [f"B{i:05d}" for i in range(n)]
    ranking = pl.DataFrame(
        {
            "rank": [None if i % 97 == 5 else i + 1 for i in range(n)],
            "building_id": ids,
            "name": [texts[i % len(texts)] for i in range(n)],
            "tier": [tiers[i % len(tiers)] for i in range(n)],
            "use_type": [texts[(i + 1) % len(texts)] for i in range(n)],
            "station_id": [texts[(i + 2) % len(texts)] for i in range(n)],
            "heating_fuel": [texts[(i + 3) % len(texts)] for i in range(n)],
            "ratio": [numbers[i % len(numbers)] for i in range(n)],
            "expected_recoverable_cost": [numbers[(i * 7) % len(numbers)] for i in range(n)],
            "excess_cost": [numbers[(i * 11 + 3) % len(numbers)] for i in range(n)],
            "needs_review": [(None, True, False)[(i // 6) % 3] for i in range(n)],
            "waste_kind": [why[(i // 2) % len(why)] for i in range(n)],  # every pair with a tier, mechanisms
            "flags": [texts[(i + 6) % len(texts)] for i in range(n)],
            "data_issues": [texts[(i + 5) % len(texts)] for i in range(n)],
        },
        schema_overrides={
            "rank": pl.Int64,
            **{c: pl.String for c in ("building_id", "name", "tier", "use_type", "station_id", "heating_fuel")},
            **{c: pl.Float64 for c in ("ratio", "expected_recoverable_cost", "excess_cost")},
            **{"needs_review": pl.Boolean, "waste_kind": pl.String, "flags": pl.String, "data_issues": pl.String},
        },
    )
    results = pl.DataFrame(  # one building missing from the results: no mechanisms at all
        {"building_id": ids[1:], "mechanisms": [mechanisms[i % len(mechanisms)] for i in range(1, n)]},
        schema={"building_id": pl.String, "mechanisms": pl.List(pl.String)},
    )
    paths = ["sheets/B1.pdf", "sheets/a b#?.pdf", "sheets/Åsgård.pdf", "sheets/100%.pdf", "x/~_.-y.pdf"]
    sheet_files = {b: paths[i % len(paths)] for i, b in enumerate(ids) if i % 4}
    return ranking, results, sheet_files


@pytest.mark.parametrize("n", [0, 1, 300])
@pytest.mark.parametrize("currency", ["$", "CHF ", "<&>\"'"])
def test_page_json_writes_the_bytes_of_the_per_building_loop(n, currency):
    """page_json (column-wise) against the loop it replaced, json-encoded as before: the same bytes for
    awkward texts (quotes, markup, control characters, line separators, emoji), missing values, mechanisms
    null, empty or odd, unknown tiers, awkward numbers and sheet paths that need quoting."""
    from screening.webpage import json_for_script, page_json

    ranking, results, sheet_files = _awkward_page_frames(n)
    for sheets in (sheet_files, None, {}):
        want = str(json_for_script(_rows_one_by_one(ranking, results, sheets, currency)))
        got = str(page_json(ranking, results, sheets, currency))
        assert got == want


def _page_inputs(n: int) -> dict:
    from screening.outputs import Display

    ranking, results, sheet_files = _awkward_page_frames(n)
    plan = ranking.head(3).select(
        pl.Series("visit", [1, 2, 3][: min(n, 3)], dtype=pl.Int64),
        "rank",
        "building_id",
        "name",
        "use_type",
        "expected_recoverable_cost",
        "waste_kind",
        "needs_review",
        pl.Series("cumulative_share", [0.2, 0.5, None][: min(n, 3)], dtype=pl.Float64),
    )
    results = results.join(ranking.select("building_id", "ratio"), on="building_id", how="left")
    return {
        "ranking": ranking,
        "results": results,
        "plan": plan,
        "summary": {"run_id": "r1", "counts": {"buildings": n}},
        "disp": Display("IP"),
        "currency": "$",
        "sheet_files": sheet_files,
        "max_rows": 200,
    }


def test_the_written_page_is_the_rendered_text_with_the_rows_json_inside(tmp_path):
    """write_index writes the bytes of render_index's text; the rows' JSON (spliced in as bytes) sits
    in the data element, whole, and the same inputs give the same bytes."""
    from screening.webpage import page_json, render_index, write_index

    kw = _page_inputs(300)
    text = render_index(**kw)
    write_index(tmp_path / "index.html", **kw)
    assert (tmp_path / "index.html").read_bytes() == text.encode("utf-8")
    data = str(page_json(kw["ranking"].head(200), kw["results"], kw["sheet_files"], "$"))
    assert text.count(data) == 1 and '<script type="application/json" id="page-data">' + data + "</script>" in text
    assert json.loads(data)["rows"][199]["id"] == "B00199" and "B00200" not in data
    assert render_index(**kw) == text


def test_a_page_mark_outside_the_data_element_is_refused(monkeypatch):
    """The rows go in where the template prints the mark: a second mark (here in the chart) is an error,
    not a page with the rows in the wrong place."""
    from screening import webpage

    monkeypatch.setattr(webpage.charts, "ratio_histogram", lambda _r: "<svg>" + webpage._DATA_MARK + "</svg>")
    with pytest.raises(RuntimeError, match="exactly once"):
        webpage.render_index(**_page_inputs(5))


# ---------------------------------------------------------------------------- in the browser


@needs_browser
def test_the_page_loads_without_errors_and_lists_every_building_in_rank_order(site):
    dom, _html, console = load(site["out"] / "index.html", tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    rows = table_rows(dom)
    assert [i for i, _ in rows] == site["ranking"]["building_id"].to_list()
    assert [int(c[0]) for _, c in rows] == site["ranking"]["rank"].to_list()
    shown = dom.find_all(id="shown-count")[0].text()
    assert shown.startswith(f"{site['ranking'].height} of {site['ranking'].height} buildings shown")
    # this quarter's plan, rendered by the template: audit_plan.csv's buildings in visit order
    plan = pl.read_csv(site["out"] / "audit_plan.csv")
    plan_rows = dom.find_all("section", id="plan")[0].find_all("tbody")[0].find_all("tr")
    assert len(plan_rows) == plan.height >= 1
    assert [tr.find_all("td")[2].find_all("span")[0].text() for tr in plan_rows] == plan["building_id"].to_list()


@needs_browser
def test_sorting_by_cost_and_filtering_by_tier_change_the_rows_as_the_ranking_says(site):
    rk = site["ranking"].with_columns(pl.col("expected_recoverable_cost").fill_nan(None))
    dom, _h, console = load(site["out"] / "index.html", "sort=cost-desc", tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    want = rk.sort(["expected_recoverable_cost", "rank"], descending=[True, False], nulls_last=True)
    got = table_rows(dom)
    assert [i for i, _ in got] == want["building_id"].to_list()
    assert got[0][0] == site["portfolio"].wasteful and got[0][1][7].startswith("$")

    tier = "No action"
    dom, _h, console = load(site["out"] / "index.html", "tier=No%20action&sort=ratio-asc", tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    want = rk.filter(pl.col("tier") == tier).sort(["ratio", "rank"], nulls_last=True)
    got = table_rows(dom)
    assert 0 < len(got) < rk.height
    assert [i for i, _ in got] == want["building_id"].to_list()
    assert {c[3] for _, c in got} == {tier}
    assert dom.find_all("select", id="f-tier")[0].find_all("option", value=tier)  # the filter shows the choice
    # the text search narrows further: one hostile name, found by a piece of its text
    dom, _h, console = load(site["out"] / "index.html", "q=" + "HYPERLINK", tmp=site["tmp"])
    assert console == [] and [i for i, _ in table_rows(dom)] == ["B05"]
    # a floor on the expected savings (nulls never pass it)
    dom, _h, console = load(site["out"] / "index.html", "min=1000&sort=rank-desc", tmp=site["tmp"])
    want = rk.filter(pl.col("expected_recoverable_cost") >= 1000).sort("rank", descending=True)
    assert console == [] and [i for i, _ in table_rows(dom)] == want["building_id"].to_list() != []


@needs_browser
def test_every_link_resolves_to_a_file_in_the_output_folder(site):
    out = site["out"]
    dom, _h, console = load(out / "index.html", tmp=site["tmp"])
    assert console == []
    hrefs = [a.attrs.get("href") for a in dom.find_all("a")]
    assert hrefs and all(h and "://" not in h and not h.startswith(("/", "#")) for h in hrefs)
    for h in hrefs:
        target = (out / h).resolve()
        assert target.is_file() and out.resolve() in target.parents, h
    index = pl.read_csv(out / "sheets_index.csv")
    rows = dom.find_all("tbody", id="building-rows")[0].find_all("tr")
    links = {tr.attrs["data-id"]: tr.find_all("a")[0].attrs["href"] for tr in rows}
    assert links == dict(zip(index["building_id"], index["file"]))
    # without sheets: no sheet links, and the page says why
    dom, _h, console = load(site["bare"] / "index.html", tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    assert not any(tr.find_all("a") for tr in dom.find_all("tbody", id="building-rows")[0].find_all("tr"))
    assert all((site["bare"] / a.attrs["href"]).is_file() for a in dom.find_all("a"))
    assert "no building sheets in this run" in dom.find_all("header")[0].text()


@needs_browser
def test_hostile_names_appear_as_text_and_run_nothing(site):
    dom, _html, console = load(site["out"] / "index.html", "sort=name-asc", tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    assert "data-pwned" not in dom.find_all("html")[0].attrs  # no payload ran
    assert not dom.find_all("img") and not any("onerror" in n.attrs or "onmouseover" in n.attrs for n in dom.iter())
    assert len(dom.find_all("script")) == 2  # none added
    names = {i: c[2] for i, c in table_rows(dom)}
    for bid, name in HOSTILE.items():
        assert names[bid] == name  # the exact text, shown
    assert dom.find_all("title")[0].text().startswith("Heating screening, run ")
    plan = dom.find_all("section", id="plan")[0].text()
    assert HOSTILE["B03"] in plan  # the template escaped it


@needs_browser
def test_a_script_error_is_seen_both_in_the_console_and_on_the_page(site, tmp_path):
    """The two detectors above can fail: a page whose data do not parse shows both."""
    broken = tmp_path / "index.html"
    html = (site["out"] / "index.html").read_text(encoding="utf-8")
    start = html.index('<script type="application/json" id="page-data">') + len(
        '<script type="application/json" id="page-data">'
    )
    broken.write_text(html[:start] + "{not json" + html[start:], encoding="utf-8")
    dom, _h, console = load(broken, tmp=site["tmp"])
    assert any("Uncaught" in ln for ln in console)
    assert errors_of(dom).startswith("Page error:")


@needs_browser
def test_clicking_a_column_title_and_choosing_a_tier_write_the_state_into_the_address(site, tmp_path):
    """The page's own controls (not only a loaded address): a script added to a copy of the page clicks
    the cost column's title, picks a tier, and writes the resulting address into the DOM."""
    html = (site["out"] / "index.html").read_text(encoding="utf-8")
    driver = (
        "<script>(function () {"
        "document.querySelector('button[data-sort=cost]').click();"
        "var t = document.getElementById('f-tier'); t.value = 'No action';"
        "t.dispatchEvent(new Event('change'));"
        "var o = document.createElement('pre'); o.id = 'test-out'; o.textContent = location.hash;"
        "document.body.appendChild(o); })();</script>"
    )
    copy = tmp_path / "index.html"
    copy.write_text(html.replace("</body>", driver + "</body>"), encoding="utf-8")
    dom, _h, console = load(copy, tmp=site["tmp"])
    assert console == [] and errors_of(dom) == ""
    assert dom.find_all(id="test-out")[0].text() == "#sort=cost-desc&tier=No%20action"
    rk = site["ranking"].with_columns(pl.col("expected_recoverable_cost").fill_nan(None))
    want = rk.filter(pl.col("tier") == "No action").sort(
        ["expected_recoverable_cost", "rank"], descending=[True, False], nulls_last=True
    )
    assert [i for i, _ in table_rows(dom)] == want["building_id"].to_list()


@needs_browser
def test_a_long_unbroken_name_wraps_instead_of_widening_the_page(tmp_path):
    """A 170-character name with no blank (invented) wraps in its cell: at 1280 px the building table
    fits its box, and at 1024 and 800 px the page itself never scrolls sideways (the table may, in its box)."""
    p = write_portfolio(tmp_path / "in")
    with open(p.buildings, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    rows[1][1] = "Northfieldcommunityrecreationandaquaticscentreannexwithattachedparkinggarage" * 2
    with open(p.buildings, "w", newline="", encoding="utf-8") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)
    out = tmp_path / "out"
    r = cli(p.args(out, tmp_path / "a.duckdb", "--quiet", "--no-sheets"))
    assert r.exit_code == 0, r.stderr
    probe = out / "probe.html"  # a copy of the page with a script that writes the widths into the DOM
    probe.write_text(
        (out / "index.html").read_text(encoding="utf-8")
        + (
            "<script>window.addEventListener('load',()=>{const t=document.querySelector('#building-rows')"
            ".closest('table');document.documentElement.setAttribute('data-widths',[t.scrollWidth,"
            "t.parentElement.clientWidth,document.documentElement.scrollWidth,"
            "document.documentElement.clientWidth].join(' '));});</script>"
        ),
        encoding="utf-8",
    )
    for width in (1280, 1024, 800):
        proc = subprocess.run(
            [
                CHROMIUM or "chromium",
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--no-first-run",
                f"--user-data-dir={tmp_path / f'profile-{width}'}",
                f"--window-size={width},800",
                "--dump-dom",
                probe.resolve().as_uri(),
            ],
            capture_output=True,
            text=True,
            timeout=120,
            check=False,
        )
        assert proc.returncode == 0, proc.stderr[-2000:]
        m = re.search(r'data-widths="(\d+) (\d+) (\d+) (\d+)"', proc.stdout)
        assert m, "the probe did not run"
        table, box, page, view = map(int, m.groups())
        assert page <= view, (width, page, view)
        if width == 1280:
            assert table <= box, (table, box)
