"""The report's templates (pipeline/export/_report.py, pipeline/export/templates/): names and cell
texts are escaped exactly once wherever they appear, a missing context key raises, the templates
load from the package's resources, and markup-like text in a table cell stays text.

The numbers come from the hand-built snapshot of test_export_snapshot_builder.py (arlib fits of
simulated data); the band, joint, quantile, tightness and counterpart histories added here are
invented (seeded draws), only there so that every section is drawn. The checks are structural:
what the parser reads back equals what went in — no reference values.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import os
import re
import subprocess
import sys
import zipfile
from collections.abc import Iterator
from html.parser import HTMLParser
from importlib import resources
from pathlib import Path

import duckdb
import jinja2
import numpy as np
import polars as pl
import pytest

from pipeline.export import export_universe
from pipeline.export._data import ReportData, gather
from pipeline.export._report import SECTIONS, environment, render_report, report_context
from pipeline.export._snapshot import open_snapshot
from serving import SCHEMA, BandHistory, JointHistory, QuantileHistory, StoredResult, Table
from tests.pipeline.test_export_snapshot_builder import build_snapshot

REPO = Path(__file__).resolve().parents[2]

HOSTILE = "<script>alert(1)</script> & \"double\" 'single'"
UNIVERSE = f"U {HOSTILE}"
# a name with a literal entity must come back with it (escaped once, not decoded on the way)
SERIES = (f"a{HOSTILE}", "b</td><td>x</td>", "c &amp; <i>d</i>")
MESSAGE = f"run said {HOSTILE}"
REASON = "</td><td>forged</td></tr><tr><td>cell & <b>bold</b>"

#: Every element the report's own markup uses; a name that escaped its text would add others.
TAGS = {"html", "head", "meta", "title", "style", "body", "header", "p", "h1", "h2", "h3", "aside",
        "strong", "nav", "ol", "li", "a", "main", "section", "dl", "dt", "dd", "div", "span",
        "table", "caption", "thead", "tbody", "tr", "th", "td", "footer", "script"}


# -- reading the HTML back (stdlib parser) ----------------------------------------------------------

@dataclasses.dataclass
class Element:
    tag: str
    attrs: dict[str, str]
    ancestors: tuple[int, ...]  # positions (in Page.elements) of the open elements around it
    parts: list[str] = dataclasses.field(default_factory=list)

    @property
    def text(self) -> str:
        """The text inside, directly or in children, character references decoded."""
        return "".join(self.parts)


class Page(HTMLParser):
    """Every element of the page with its attributes and text; scripts' contents."""

    VOID = frozenset({"meta", "br", "img", "link", "hr", "input"})

    def __init__(self, html: str) -> None:
        super().__init__(convert_charrefs=True)
        self.elements: list[Element] = []
        self.open: list[int] = []
        self.scripts: list[str] = []
        self.feed(html)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.elements.append(Element(tag, {k: v or "" for k, v in attrs}, tuple(self.open)))
        if tag not in self.VOID:
            self.open.append(len(self.elements) - 1)

    def handle_endtag(self, tag: str) -> None:
        assert self.open, tag
        el = self.elements[self.open.pop()]
        assert el.tag == tag, (el.tag, tag)
        if tag == "script":
            self.scripts.append(el.text)

    def handle_data(self, data: str) -> None:
        for k in self.open:
            if self.elements[k].tag not in ("html", "body", "main"):  # the whole page: not needed
                self.elements[k].parts.append(data)

    def find(self, tag: str, **attrs: str) -> list[Element]:
        """Elements `tag` with these attribute values (``data_field`` stands for ``data-field``)."""
        return [e for e in self.elements if e.tag == tag
                and all(e.attrs.get(k.replace("_", "-")) == v for k, v in attrs.items())]

    def inside(self, outer: Element, tag: str) -> list[Element]:
        """The `tag` elements within `outer`, in page order."""
        k = self.elements.index(outer)
        return [e for e in self.elements if e.tag == tag and k in e.ancestors]

    def facts(self) -> dict[str, str]:
        """At a glance: each <dt>'s text → the next <dd>'s text."""
        dl = self.find("dl", **{"class": "facts"})[0]
        return dict(zip((e.text for e in self.inside(dl, "dt")), (e.text for e in self.inside(dl, "dd")), strict=True))


def plotly_script(text: str) -> bool:
    """Plotly's own scripts: its config line, the library, or one chart's `Plotly.newPlot` call."""
    s = text.strip()
    return (s.startswith("window.PlotlyConfig") or "plotly.js v" in s[:200]
            or s.startswith("window.PLOTLYENV"))


# -- a snapshot whose names and texts are hostile -----------------------------------------------------

def rename(con: duckdb.DuckDBPyConnection, old: str, new: str, columns: tuple[str, ...]) -> None:
    """Replace the value `old` by `new` in every snapshot column named in `columns`."""
    found = con.sql("SELECT table_name, column_name FROM information_schema.columns").fetchall()
    for table, column in found:
        if column in columns:
            con.execute(f'UPDATE "{table}" SET "{column}" = ? WHERE "{column}" = ?', [new, old])


@pytest.fixture(scope="module")
def snap(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = build_snapshot(tmp_path_factory.mktemp("hostile") / "serving.duckdb",
                          {"plain": {"draws": 20, "skip_last": True}})
    con = duckdb.connect(str(path))
    try:
        rename(con, "plain", UNIVERSE, ("universe",))
        for old, new in zip(("alpha", "beta", "gamma"), SERIES, strict=True):
            rename(con, old, new, ("series", "source", "target", "caused", "causing"))
        con.execute("UPDATE runs SET message = ?", [MESSAGE])
        con.execute("UPDATE window_fits SET skip_reason = ? WHERE skip_reason IS NOT NULL", [REASON])
    finally:
        con.close()
    return path


@pytest.fixture(scope="module")
def data(snap: Path) -> ReportData:
    s = open_snapshot(snap)
    try:
        return gather(s, UNIVERSE)
    finally:
        s.close()


def invented_result(t: Table, ends: list, n: int, rng: np.random.Generator) -> StoredResult:
    """Invented values in [0, 30) for every column of declared result table `t` (three bands)."""
    band = t.fill == "band"
    lead = (len(ends), 3) if band else (len(ends),)
    values = {c.name: rng.uniform(0, 30, (*lead, *(n for _ in c.shape))) for c in t.columns if c.source}
    periods = ((1.0, 5.0), (5.0, 20.0), (20.0, float("inf"))) if band else ()
    return StoredResult(t.name, ends, periods, 100 if band else None, values)


def every_section(d: ReportData, estimator: str) -> ReportData:
    """`d` with invented band, joint, quantile, tightness and counterpart histories, so that every
    section is drawn (tails only for estimator "quantile")."""
    ends = d.connectedness["window_end"].to_list()
    w, n = len(ends), len(d.info.series)
    rng = np.random.default_rng(1)
    bands = BandHistory(ends=ends, periods=((1.0, 5.0), (5.0, 20.0), (20.0, float("inf"))),
                        total=rng.uniform(0, 30, (w, 3)), within=rng.uniform(0, 30, (w, 3)),
                        share=rng.uniform(0, 1, (w, 3)), to_others=rng.uniform(0, 30, (w, 3, n)),
                        from_others=rng.uniform(0, 30, (w, 3, n)), table=rng.uniform(0, 30, (w, 3, n, n)),
                        truncation=100)  # fmt: skip
    joint = JointHistory(ends=ends, total=rng.uniform(0, 60, w), generalized_total=rng.uniform(0, 60, w),
                         from_others=rng.uniform(0, 60, (w, n)))
    quantiles = QuantileHistory(ends=ends, quantiles=np.array([0.05, 0.5, 0.95]),
                                total=rng.uniform(0, 80, (w, 3)), to_others=rng.uniform(0, 80, (w, 3, n)),
                                from_others=rng.uniform(0, 80, (w, 3, n)), net=rng.uniform(-9, 9, (w, 3, n)),
                                table=rng.uniform(0, 80, (w, 3, n, n)))  # fmt: skip
    tightness = pl.DataFrame({"window_end": ends, "tightness": rng.uniform(0.01, 2, w),
                              "tightness_chosen": [True] * w})
    info = dataclasses.replace(d.info, config={**d.info.config, "estimator": estimator})
    results = {t.name: invented_result(t, ends, n, rng) for t in SCHEMA if t.fill}
    return dataclasses.replace(
        d, info=info, bands=bands, joint=joint, tightness=tightness, results=results,
        quantiles=quantiles if estimator == "quantile" else None,
        counterpart=(f"other {HOSTILE}", "tvp", [(e, float(v)) for e, v in zip(ends, rng.uniform(0, 60, w), strict=True)]),
    )  # fmt: skip


GENERATED = dt.datetime(2024, 1, 8, 9, 0, tzinfo=dt.UTC)


@pytest.fixture(scope="module", params=["exported", "every section, ols", "every section, quantile"])
def page(request: pytest.FixtureRequest, snap: Path, data: ReportData,
         tmp_path_factory: pytest.TempPathFactory) -> Page:
    """The report as the export writes it, and rendered with every section present."""
    if request.param == "exported":
        (path,) = export_universe(snap, UNIVERSE, tmp_path_factory.mktemp("out"), formats=("html",))
        return Page(path.read_text(encoding="utf-8"))
    estimator = request.param.rsplit(" ", 1)[-1]
    return Page(render_report(every_section(data, estimator), generated=GENERATED, version="0.1.0 <&>"))


# -- (1) names are escaped once, everywhere ---------------------------------------------------------

def test_hostile_names_are_text_everywhere(page: Page, data: ReportData) -> None:
    # no element but the report's own; no script but plotly's
    assert {e.tag for e in page.elements} <= TAGS, {e.tag for e in page.elements} - TAGS
    assert page.scripts and all(plotly_script(s) for s in page.scripts)
    # the texts come back exactly as they went in (a double escape would leave "&amp;" in them)
    title = f"Shock propagation in {UNIVERSE}"
    assert [e.text for e in page.find("title")] == [title]
    assert [e.text for e in page.find("h1")] == [title]
    facts = page.facts()
    assert facts["Universe"] == UNIVERSE
    assert facts["Series (transform)"] == ", ".join(f"{s} (log_return)" for s in SERIES)
    column_heads = [e.text for e in page.find("th", scope="col")]
    assert column_heads[:3] == list(SERIES)  # the spillover table's columns
    assert len(column_heads) % 3 == 0 and set(column_heads) == set(SERIES)  # and every other table's
    assert [e.text for e in page.find("th", scope="row")][:3] == list(SERIES)
    assert [e.attrs["data-target"] for e in page.find("tr") if "data-target" in e.attrs] == list(SERIES)
    assert [e.text for e in page.find("dd", data_field="message")] == [MESSAGE]
    note = f"The latest window ({data.report_date}) was not fitted"
    assert any(e.text.startswith(note) for e in page.find("p", **{"class": "note"}))


def test_every_section_is_drawn_by_the_augmented_data(data: ReportData) -> None:
    """The histories added by `every_section` reach every section (so the escaping checks above
    cover each template), and the names reach the tails table's heads."""
    for estimator, absent in (("ols", {"tails"}), ("quantile", set())):
        ctx = report_context(every_section(data, estimator), generated=GENERATED, version="v")
        assert set(ctx["sections"]) == {name for name, _ in SECTIONS} - absent
    page = Page(render_report(every_section(data, "quantile"), generated=GENERATED, version="v"))
    (tails,) = page.find("table", id="tails-table")
    assert all(f"net {s}" in tails.text for s in SERIES)
    assert {"cycles", "joint", "tails", "models", "shrinkage"} <= {e.attrs["id"] for e in page.find("section")}


def test_the_table_of_contents_lists_every_section_drawn(page: Page) -> None:
    """Every heading section of the page is in the contents, in page order, and every link lands
    on a section (the contents once listed only the first eight sections)."""
    links = [e.attrs["href"].removeprefix("#") for e in page.find("a") if e.attrs.get("href", "").startswith("#")]
    sections = [e.attrs["id"] for e in page.find("section") if "id" in e.attrs]
    assert links == sections


# -- (2) a key the template reads but the context lacks raises --------------------------------------

def section_keys(d: ReportData) -> Iterator[tuple[str, dict, str]]:
    ctx = report_context(d, generated=GENERATED, version="v")
    for name in ctx["sections"]:
        for key in ctx[name]:
            yield name, ctx, key


def test_a_missing_key_raises_in_every_section_template(data: ReportData) -> None:
    env = environment()
    assert env.undefined is jinja2.StrictUndefined
    checked = 0
    for estimator in ("ols", "quantile"):
        for name, ctx, key in section_keys(every_section(data, estimator)):
            if estimator == "quantile" and name not in ("glance", "tails"):
                continue  # the other templates skip what a quantile universe lacks (no Granger table)
            template = env.get_template(f"sections/{name}.html")
            template.render({name: ctx[name]})  # complete: renders
            partial = {k: v for k, v in ctx[name].items() if k != key}
            with pytest.raises(jinja2.UndefinedError):
                template.render({name: partial})
            checked += 1
    assert checked > 40
    # and the page itself, without one of its sections' data
    ctx = report_context(data, generated=GENERATED, version="v")
    del ctx["granger"]
    with pytest.raises(jinja2.UndefinedError):
        env.get_template("report.html").render(ctx)


# -- (3) the templates come from the package's resources --------------------------------------------

def test_templates_load_from_the_package_inside_a_zip(snap: Path, tmp_path: Path) -> None:
    """The packages imported from a zip file (so no template is a file beside `_report.py`): the
    report renders, read through importlib.resources."""
    archive = tmp_path / "code.zip"
    with zipfile.ZipFile(archive, "w") as zf:
        for package in ("pipeline", "serving", "charts", "arlib"):
            for path in sorted((REPO / package).rglob("*")):
                if path.is_file() and "__pycache__" not in path.parts:
                    zf.write(path, path.relative_to(REPO).as_posix())
    script = (
        "import sys; from pathlib import Path\n"
        "import pipeline.export._report as r\n"
        "from pipeline.export import export_universe\n"
        "assert r.__file__.startswith(sys.argv[1]), r.__file__\n"
        "assert not (Path(r.__file__).parent / 'templates').exists()\n"
        "(p,) = export_universe(sys.argv[2], sys.argv[3], sys.argv[4], formats=('html',))\n"
        "print(p)\n"
    )
    env = {k: v for k, v in os.environ.items() if not k.startswith("PYTEST_")}
    env["PYTHONPATH"] = str(archive)  # ahead of the editable install's finder
    proc = subprocess.run([sys.executable, "-c", script, str(archive), str(snap), UNIVERSE, str(tmp_path / "out")],
                          cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300, check=False)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    html = Path(proc.stdout.strip()).read_text(encoding="utf-8")
    assert [e.attrs["id"] for e in Page(html).find("section")] == [
        "glance", "connectedness", "spillovers", "responses", "decompositions", "granger", "health", "lineage"]


def test_only_the_chart_macro_marks_html_safe() -> None:
    """The one trusted-HTML path (pipeline/export/_report.py's docstring): plotly's output, through
    macros.html's `chart`. No other template marks a value safe or turns autoescaping off."""
    folder = resources.files("pipeline.export") / "templates"
    texts = {f"{d}{f.name}": f.read_text(encoding="utf-8")
             for d, node in (("", folder), ("sections/", folder / "sections"))
             for f in node.iterdir() if f.name.endswith(".html")}
    assert len(texts) == 2 + len(SECTIONS)  # report, macros and one per section
    marks = {name: re.findall(r"\|\s*safe\b|autoescape|Markup", text) for name, text in texts.items()}
    assert {name: m for name, m in marks.items() if m} == {"macros.html": ["|safe"]}
    assert '<div class="chart">{{ html|safe }}</div>' in texts["macros.html"]


def test_the_stylesheet_is_inserted_as_written(page: Page) -> None:
    """report.css goes in literally: not escaped (its quotes), not read as Jinja (its braces)."""
    css = (resources.files("pipeline.export") / "templates" / "report.css").read_text(encoding="utf-8")
    assert '"DejaVu Sans"' in css and "{ " in css
    (style,) = page.find("style")
    assert style.text.strip() == css.strip()


def test_template_names_cannot_leave_the_templates_folder() -> None:
    env = environment()
    for name in ("../_report.py", "sections/../../_report.py", "/etc/passwd", "sections//glance.html"):
        with pytest.raises(jinja2.TemplateNotFound):
            env.get_template(name)


# -- (4) markup-like text inside a table cell stays text ---------------------------------------------

def test_markup_in_a_cell_is_shown_as_text(page: Page, data: ReportData) -> None:
    # no cell anywhere inside another cell (the cycle-length and tails tables once nested them)
    cells = [k for k, e in enumerate(page.elements) if e.tag in ("td", "th")]
    assert not [page.elements[k] for k in cells if set(page.elements[k].ancestors) & set(cells)]
    # the skipped window's reason: a header row and one row of two cells, the reason as text
    (table,) = page.find("table", **{"class": "skipped"})
    assert len(page.inside(table, "tr")) == 2
    window_end, reason = page.inside(table, "td")
    assert window_end.attrs == {"class": "text"} and window_end.text == str(data.report_date)
    assert reason.attrs == {"class": "text"} and reason.text == REASON


def test_the_cell_macros_escape_their_text() -> None:
    macros = environment().get_template("macros.html").module
    text = str(macros.cell({"kind": "text", "text": "<td>1</td> & &amp;"}))
    assert text == '<td class="text">&lt;td&gt;1&lt;/td&gt; &amp; &amp;amp;</td>'
    num = str(macros.num(0.1 + 0.2, 2, cls="own"))
    assert num == '<td class="own" data-value="0.30000000000000004">0.30</td>'
    assert str(macros.num(None)) == '<td class="na">–</td>'
