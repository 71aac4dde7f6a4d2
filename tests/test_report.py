"""The self-contained HTML report of a saved view.

References: Fisher's iris as shipped with scikit-learn; its correlation-matrix
eigenvalues 2.9185 / 0.9140 (72.96 % / 22.85 %) are widely published (quoted
from memory) and checked against scikit-learn's PCA here. The Markdown checks
use the payloads of the OWASP XSS filter-evasion cheat sheet (script tags,
event-handler attributes, ``javascript:`` and ``data:`` URLs, entity-encoded
schemes).
"""

from __future__ import annotations

import html
import re
from datetime import datetime, timezone
from html.parser import HTMLParser

import plotly.offline
import pytest
from markdown_it import MarkdownIt
from sklearn.decomposition import PCA

from tests.app.conftest import iris_frame
from webapp.analysis import ENGINE_VERSION
from webapp.analysis.errors import OrdinateError
from webapp.analysis.recipe import Recipe
from webapp.web.app import create_app
from webapp.config import AppConfig
from webapp.web.report import (
    CAUTIONS,
    REPORT_FIGURES,
    build_report_html,
    render_note,
    report_filename,
    report_main,
    write_report,
)
from webapp.state import ViewState, to_query
from webapp.ui.view_model import build_view

MALICIOUS_NOTE = """# Findings

Batch **B-17** looks odd; see [the SOP](https://example.org/sop) and [our anchor](#provenance).

<script>alert(1)</script>

[x](javascript:alert(1)) and [y](JaVaScRiPt:alert(2)) and [z](&#106;avascript:alert(3))

<img src=x onerror=alert(1)>

![pixel](https://tracker.example/p.png) [d](data:text/html;base64,PHNjcmlwdD4=) [i](data:image/png;base64,AAAA)

[v](vbscript:msgbox(1)) [f](file:///etc/passwd) [p](//evil.example/x) <javascript:alert(4)>

[ref]

[ref]: javascript:alert(5)
"""

BUNDLE = re.compile(r'<script id="plotly-bundle">.*?</script>', re.S)


@pytest.fixture
def services(tmp_path):
    app = create_app(AppConfig(data_dir=tmp_path / "data", demo_dataset=None))
    return app.server.config["ordinate.services"]


@pytest.fixture
def iris(services):
    frame = iris_frame()
    frame.loc[7, "flower"] = "<img src=x onerror=alert(7)>"  # a label is user text too
    return services.store.add_bytes(frame.to_csv(index=False).encode("utf-8"), "iris.csv",
                                    title="Iris <reference> set")


def save(services, record, state: ViewState | None = None, **words):
    state = state or ViewState(dataset=record.token)
    words = {"title": "Iris check", "note": "", "author": "A. Analyst", **words}
    return services.store.save_view(record.token, to_query(state), content_hash=record.content_hash,
                                    engine_version=ENGINE_VERSION, **words)


def without_bundle(report: str) -> str:
    assert len(BUNDLE.findall(report)) == 1
    return BUNDLE.sub("", report)


def section(report: str, section_id: str) -> str:
    match = re.search(rf'<section id="{section_id}"[^>]*>(.*?)</section>', report, re.S)
    assert match, section_id
    return match.group(1)


class _Elements(HTMLParser):
    def __init__(self):
        super().__init__()
        self.elements: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.elements.append((tag, dict(attrs)))


def elements(fragment: str) -> list[tuple[str, dict]]:
    parser = _Elements()
    parser.feed(fragment)
    return parser.elements


# --- self-contained, with every part ------------------------------------------------------------


def test_report_is_self_contained_with_plotly_inline(services, iris):
    report = build_report_html(services, save(services, iris))
    assert report.startswith("<!DOCTYPE html>")
    bundle = BUNDLE.search(report).group(0)
    assert len(bundle) > len(plotly.offline.get_plotlyjs()) * 0.99
    rest = without_bundle(report)
    scripts = elements(rest)
    assert not [attrs for tag, attrs in scripts if tag == "script" and "src" in attrs]
    assert not re.search(r"<(link|img|iframe)\b", rest)  # nothing fetched when the file opens
    assert "Content-Security-Policy" in rest and "connect-src 'none'" in rest


def test_one_plot_div_per_figure(services, iris):
    report = without_bundle(build_report_html(services, save(services, iris)))
    assert report.count('class="plotly-graph-div"') == len(REPORT_FIGURES) == 5
    for key, _ in REPORT_FIGURES:
        assert report.count(f'id="figure-{key}"') == 1


def test_variance_table_values_match_scikit_learn_and_published(services, iris):
    report = build_report_html(services, save(services, iris))
    table = section(report, "variance")
    frame = iris_frame()
    X = frame.iloc[:, 2:].to_numpy(dtype=float)
    Z = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    pca = PCA(n_components=4, svd_solver="full").fit(Z)
    cells = re.findall(r"<td>([^<]*)</td>", table)
    for a in range(4):
        assert f"{pca.explained_variance_[a]:.4f}" in cells
        assert f"{100 * pca.explained_variance_ratio_[a]:.2f}" in cells
    assert "2.9185" in cells and "72.96" in cells and "0.9140" in cells and "22.85" in cells  # published
    assert re.search(r'<tr class="kept"><th scope="row">PC1</th>', table)


def test_recipe_in_plain_words(services, iris):
    state = ViewState(dataset=iris.token, scaling="pareto", excluded=("F010",))
    report = build_report_html(services, save(services, iris, state))
    words = section(report, "recipe")
    recipe = Recipe(excluded_samples=("F010",), scaling="pareto")
    for sentence in recipe.describe():
        assert f"<li>{html.escape(sentence)}</li>" in words
    assert "Pareto-scaled" in words


def test_provenance_fields(services, iris):
    saved = save(services, iris, title="Week 12 <check>", author="Dr. O'Neil & team")
    report = build_report_html(services, saved)
    provenance = section(report, "provenance")
    saved_utc = datetime.fromtimestamp(saved.created, tz=timezone.utc).isoformat(timespec="seconds")
    for text in (iris.content_hash, "150 of 150", saved_utc, "Week 12 &lt;check&gt;", "Dr. O&#x27;Neil &amp; team",
                 "iris.csv", "Iris &lt;reference&gt; set", f"engine {ENGINE_VERSION}",
                 "4: sepal length (cm), sepal width (cm), petal length (cm), petal width (cm)"):
        assert text in provenance, text
    assert saved_utc.endswith("+00:00")
    assert "<title>Week 12 &lt;check&gt; · Ordinate report</title>" in report


def test_cautions_are_shown(services, iris):
    cautions = section(build_report_html(services, save(services, iris)), "cautions")
    for caution in CAUTIONS:
        assert caution.replace("'", "&#x27;") in cautions
    assert "not a release or rejection decision" in cautions
    assert "validated local procedures" in cautions
    assert "Share it only with people who are allowed to see the data" in cautions


def test_synthetic_label_travels_in_the_dataset_title(services):
    record = services.store.add_bytes(iris_frame().to_csv(index=False).encode(), "demo.csv",
                                      title="Oat dessert batches (synthetic demo data)")
    report = build_report_html(services, save(services, record))
    assert "Oat dessert batches (synthetic demo data)" in section(report, "provenance")
    assert "(synthetic demo data)" in report.split("</header>")[0]


# --- user text cannot become markup --------------------------------------------------------------


def test_malicious_note_renders_inert(services, iris):
    report = build_report_html(services, save(services, iris, note=MALICIOUS_NOTE))
    rest = without_bundle(report)
    assert "<script>alert" not in report
    assert not re.search(r"""href\s*=\s*["']?\s*(javascript|data|vbscript|file):""", rest, re.I)
    # No tag carries an event handler. (The text "onerror=" does appear, escaped, as the visible note text;
    # plotly.js itself contains "onerror=", hence the check without the bundle.)
    assert not re.search(r"<[^>]*\bon[a-z]+\s*=", rest)
    assert not [attrs for _, attrs in elements(rest) if any(name.startswith("on") for name in attrs)]
    note = section(report, "note")
    for tag, attrs in elements(note):
        assert tag in {"h2", "div", "h1", "p", "strong", "a"}, tag
        assert not [name for name in attrs if name.startswith("on") or name in ("src", "style")]
        if tag == "a":
            # an image becomes a plain link: nothing is loaded when the file opens
            assert attrs["href"] in ("https://example.org/sop", "#provenance", "https://tracker.example/p.png")
            assert attrs["rel"] == "noopener noreferrer"
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in note  # shown as text, not dropped silently
    assert "<strong>B-17</strong>" in note


def test_labels_and_titles_are_escaped_everywhere(services, iris):
    state = ViewState(dataset=iris.token, components=3)  # more components: more samples flagged
    report = without_bundle(build_report_html(services, save(services, iris, state, title="<b>bold</b>")))
    assert "<img" not in report and "<b>bold" not in report
    assert "&lt;b&gt;bold&lt;/b&gt;" in report


@pytest.mark.parametrize("markdown", [
    "[x](javascript:alert(1))",
    "[x](JAVASCRIPT:alert(1))",
    "[x](&#106;avascript:alert(1))",
    "[x](java%0ascript:alert(1))",
    "<javascript:alert(1)>",
    "[x](vbscript:msgbox(1))",
    "[x](data:text/html;base64,PHNjcmlwdD4=)",
    "[x](data:image/png;base64,AAAA)",
    "[x](file:///etc/passwd)",
    "[x](//evil.example/a)",
    "[x](relative/page.html)",
    "[x][r]\n\n[r]: javascript:alert(1)",
])
def test_unsafe_link_targets_stay_text(markdown):
    rendered = render_note(markdown)
    assert "<a " not in rendered and "href" not in rendered


def test_markdown_it_default_allows_data_images_ours_does_not():
    # markdown-it-py's validateLink refuses javascript:, vbscript:, file: and data: except data:image/...;
    # our allow-list is stricter (only http, https, mailto and #anchors).
    payload = "[x](data:image/png;base64,AAAA)"
    assert 'href="data:image/png' in MarkdownIt("commonmark", {"html": False}).render(payload)
    assert "href" not in render_note(payload)


@pytest.mark.parametrize(("markdown", "href"), [
    ("[x](https://example.org/a?b=1&c=2)", "https://example.org/a?b=1&amp;c=2"),
    ("[x](HTTP://example.org)", "HTTP://example.org"),
    ("<mailto:qc@example.org>", "mailto:qc@example.org"),
    ("[x](#variance)", "#variance"),
])
def test_safe_links_work(markdown, href):
    assert f'<a href="{href}" rel="noopener noreferrer">' in render_note(markdown)


def test_raw_html_and_images_are_text():
    rendered = render_note('<img src=x onerror=alert(1)>\n\n![a](https://tracker.example/p.png)\n\n<b>x</b>')
    assert "<img" not in rendered and "<b>" not in rendered
    assert "&lt;img src=x onerror=alert(1)&gt;" in rendered


# --- failures, files, command line --------------------------------------------------------------------


def test_a_view_that_cannot_be_computed_gives_a_report_that_says_so(services):
    frame = iris_frame()
    frame["sepal width (cm)"] -= 3.2
    record = services.store.add_bytes(frame.to_csv(index=False).encode(), "shifted.csv")
    state = ViewState(dataset=record.token, transforms=(("sepal width (cm)", "log10"),))
    report = build_report_html(services, save(services, record, state))
    assert "Cannot apply log10 to &#x27;sepal width (cm)&#x27;" in section(report, "errors")
    assert 'class="plotly-graph-div"' not in report
    assert "Before you act on this report" in report


def test_engine_version_change_is_noted(services, iris):
    saved = services.store.save_view(iris.token, to_query(ViewState(dataset=iris.token)), title="old",
                                     content_hash=iris.content_hash, engine_version="0-old")
    assert "saved with engine 0-old" in section(build_report_html(services, saved), "notices")


def test_write_report_and_unknown_view(services, iris, tmp_path):
    saved = save(services, iris, title="Wöchentlich / weekly")
    path = write_report(services, saved.view_id, tmp_path / "out.html")
    assert path == tmp_path / "out.html"
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>") and "Wöchentlich / weekly" in text
    assert not list(tmp_path.glob(".report-*"))  # temporary file renamed into place
    with pytest.raises(OrdinateError, match="No saved view"):
        write_report(services, "D" * 24, tmp_path / "none.html")
    assert not (tmp_path / "none.html").exists()
    assert report_filename(services, saved) == "iris-Wochentlich-weekly-report.html"


def test_report_main(services, iris, tmp_path, capsys):
    saved = save(services, iris)
    data_dir = services.config.data_dir
    out = tmp_path / "report.html"
    assert report_main(data_dir, saved.view_id, out) == 0
    assert str(out) in capsys.readouterr().out
    assert 'id="figure-scores"' in out.read_text(encoding="utf-8")
    with pytest.raises(OrdinateError, match="No saved view"):
        report_main(data_dir, "E" * 24, tmp_path / "x.html")
    with pytest.raises(OrdinateError, match="not an Ordinate data directory"):
        report_main(tmp_path / "typo", saved.view_id, tmp_path / "y.html")
    assert not (tmp_path / "typo").exists()
    with pytest.raises(OrdinateError, match="does not exist"):
        report_main(data_dir, saved.view_id, tmp_path / "missing" / "z.html")


def test_a_scored_new_batch_is_summarised_with_its_escaped_labels(services, iris):
    batch = iris_frame().iloc[:4].copy()
    batch["flower"] = ["<b>N0</b>", "N1", "N2", "N3"]
    batch["petal length (cm)"] += 4.0  # every sample far off the model plane
    token = services.store.add_bytes(batch.to_csv(index=False).encode("utf-8"), "batch <2>.csv").token
    state = ViewState(dataset=iris.token, batch=token)
    report = without_bundle(build_report_html(services, save(services, iris, state)))
    diagnostics = section(report, "diagnostics")
    assert "New samples “batch &lt;2&gt;.csv” (the stars): 4 samples scored against this model" in diagnostics
    flagged = build_view(services, state, wait=True).batch.rows()
    assert flagged and f"{len(flagged)} above a limit for new samples" in diagnostics
    assert diagnostics.count("<tr><th scope=\"row\">") >= len(flagged)
    assert "<b>N0</b>" not in diagnostics  # labels are text, never markup
