"""The rendered site: cautions and footer on every page, charts with id/summary/table,
offline assets, relative links, overview, methods, data quality and narrative pages."""
from __future__ import annotations

import importlib
import re
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote, urlsplit

import pandas as pd
import plotly.graph_objects as go
import pytest

from generator import charts
from generator.build import build_pages, prepare
from generator.pages import MODULES, SECTIONS, page_builders
from generator.pages.base import Chart, Page, Table
from generator.site import make_environment, render_page, root_prefix, site_info, cautions_for
from tests.conftest import TEST_KEY, build_fixed, env
from tests.progkit import make_programme


class _Tags(HTMLParser):
    """Collect (tag, attrs) of every start tag."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))


def tags_of(html: str) -> list[tuple[str, dict[str, str | None]]]:
    p = _Tags()
    p.feed(html)
    return p.tags


#: a 1x1 PNG (signature, IHDR, IDAT, IEND)
PNG_1PX = bytes.fromhex("89504e470d0a1a0a0000000d49484452000000010000000108060000001f15c489"
                        "0000000d49444154789c63f8ffff3f0005fe02fea7d6a4a70000000049454e44ae426082")


@pytest.fixture(scope="module")
def small_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Build a small programme with a narrative page and a sub-folder page link."""
    tmp = tmp_path_factory.mktemp("small")
    noise = [{"measurement_id": "M1", "date": "2025-03-04", "kind": "personal", "person_id": "E001",
              "group": "G1", "duration_h": 8, "laeq": 88.0}]
    root = make_programme(tmp / "prog", files={"noise.csv": noise, "people.csv": [
        {"person_id": "E001", "group": "G1", "sex": "M", "birth_date": "1980-05-01", "hire_date": "2010-01-01",
         "extra_col": "x"},
        {"person_id": "E002", "group": "G1", "sex": "F", "birth_date": "1990", "hire_date": "2015-03-01",
         "extra_col": "y"}]},
        pages={"about.md": "---\ntitle: About us\norder: 1\n---\nSee [methods](methods.html).\n\n"
                           "![plan](plan.png)\n",
               "methods.md": "---\ntitle: Our methods note\norder: 2\n---\nA page whose name is taken.\n"})
    (root / "pages" / "plan.png").write_bytes(PNG_1PX)
    (root / "pages" / "evil.svg").write_text("<svg onload='alert(1)'/>", encoding="utf-8")
    out = tmp / "site"
    build_fixed(root, out)
    return out


def _sites(small_site: Path, request: pytest.FixtureRequest) -> list[Path]:
    out = [small_site]
    try:
        out.append(request.getfixturevalue("built_example").out)
    except pytest.skip.Exception:
        pass
    return out


def test_every_section_has_a_builder() -> None:
    modules = {b.__module__.rsplit(".", 1)[-1] for b in page_builders()}
    for section, _ in SECTIONS:
        assert MODULES.get(section, section) in modules, section


def test_every_page_has_cautions_and_footer(small_site: Path, request: pytest.FixtureRequest) -> None:
    for site in _sites(small_site, request):
        pages = sorted(site.rglob("*.html"))
        assert len(pages) >= 4
        for page in pages:
            text = page.read_text(encoding="utf-8")
            assert 'class="cautions"' in text, page
            assert "caution-general" in text and "qualified audiologist or physician" in text, page
            assert 'class="site-footer"' in text and "fingerprint of the input files" in text, page
            assert re.search(r"built (\d{4}-\d{2}-\d{2}|not stamped)", text), page


def test_every_chart_has_id_summary_and_table(small_site: Path, request: pytest.FixtureRequest) -> None:
    n = 0
    for site in _sites(small_site, request):
        for page in sorted(site.rglob("*.html")):
            text = page.read_text(encoding="utf-8")
            figures = re.findall(r'<figure class="chart".*?</figure>', text, re.S)
            plots = re.findall(r'class="plotly-graph-div"', text)
            assert len(plots) == len(figures), page
            ids = []
            for fig in figures:
                m = re.search(r'<div id="([a-z][a-z0-9_-]*)" class="plotly-graph-div"', fig)
                assert m, (page, fig[:200])
                ids.append(m.group(1))
                summary = re.search(r'<p class="chart-summary"[^>]*>(.*?)</p>', fig, re.S)
                assert summary and summary.group(1).strip(), (page, m.group(1))
                assert "<details" in fig and "<table" in fig, (page, m.group(1))
                assert re.search(r'Plotly\.newPlot\(\s*"' + re.escape(m.group(1)) + '"', fig), (page, m.group(1))
                n += 1
            assert len(ids) == len(set(ids)), page
    assert n >= 1


def _resource_urls(html: str) -> list[tuple[str, str, str]]:
    out = []
    for tag, attrs in tags_of(html):
        for attr in ("src", "href", "data", "poster", "srcset", "action"):
            v = attrs.get(attr)
            if v is not None:
                out.append((tag, attr, v))
    return out


def test_no_page_loads_anything_from_another_host(small_site: Path, request: pytest.FixtureRequest) -> None:
    for site in _sites(small_site, request):
        for page in sorted(site.rglob("*.html")):
            text = page.read_text(encoding="utf-8")
            for tag, attr, url in _resource_urls(text):
                remote = bool(urlsplit(url).scheme) or url.startswith("//")
                if tag == "a" and attr == "href":
                    continue  # a plain link is allowed; it loads nothing by itself
                assert not remote, (page, tag, attr, url)
            assert "@import" not in text and not re.search(r"url\(\s*['\"]?(https?:)?//", text), page
        css = (site / "assets" / "style.css").read_text(encoding="utf-8")
        assert "url(" not in css and "@import" not in css and "@font-face" not in css


def test_relative_links_resolve_and_plotly_is_loaded_blocking(small_site: Path,
                                                              request: pytest.FixtureRequest) -> None:
    from plotly.offline import get_plotlyjs
    for site in _sites(small_site, request):
        assert (site / "assets" / "plotly.min.js").read_text(encoding="utf-8") == get_plotlyjs()
        for page in sorted(site.rglob("*.html")):
            text = page.read_text(encoding="utf-8")
            head = text.split("</head>", 1)[0]
            prefix = root_prefix(page.relative_to(site).with_suffix("").as_posix())
            assert f'<script src="{prefix}assets/plotly.min.js"></script>' in head, page
            for tag, attr, url in _resource_urls(text):
                parts = urlsplit(url)
                if parts.scheme or url.startswith(("#", "//")) or not parts.path:
                    continue
                target = (page.parent / unquote(parts.path)).resolve()
                assert target.is_file(), (page, url)
                assert site.resolve() in target.parents, (page, url)


def test_overview_lists_present_and_missing_files(small_site: Path) -> None:
    text = (small_site / "index.html").read_text(encoding="utf-8")
    assert "data/audiograms.csv" in text and "not supplied" in text
    # the table of every file read is on the data-quality page
    assert "data/noise.csv" in (small_site / "quality.html").read_text(encoding="utf-8")
    main = text.split('<main id="main">', 1)[1].split("</main>", 1)[0]
    for href in ("methods.html", "quality.html"):
        assert f'href="{href}"' in main


def test_quality_page_lists_findings_with_rows(small_site: Path) -> None:
    text = (small_site / "quality.html").read_text(encoding="utf-8")
    # the unknown column of people.csv is a warning of the reader; the missing key one of privacy
    assert "data/people.csv" in text and "extra_col" in text
    assert "privacy.id_key_env" not in text  # the key was set for this build
    assert re.search(r"<td>\d+ errors?|<td class=\"num\">0</td>", text)


def test_narrative_pages_are_rendered_and_cannot_take_a_section_name(small_site: Path) -> None:
    about = (small_site / "about.html").read_text(encoding="utf-8")
    assert "<h1>About us</h1>" in about and '<a href="methods.html"' in about
    assert '<img alt="plan" src="plan.png">' in about or '<img src="plan.png" alt="plan">' in about
    assert (small_site / "plan.png").read_bytes() == PNG_1PX
    assert not (small_site / "evil.svg").exists()
    note = (small_site / "page-methods.html").read_text(encoding="utf-8")
    assert "A page whose name is taken." in note
    methods = (small_site / "methods.html").read_text(encoding="utf-8")
    assert "Methods and sources" in methods
    index = (small_site / "index.html").read_text(encoding="utf-8")
    nav = index.split('<nav class="site-nav"', 1)[1].split("</nav>", 1)[0]
    titles = re.findall(r'<a href="[^"]+"[^>]*>([^<]+)</a>', nav)
    assert titles[0] == "Overview" and titles[1] == "About us"
    assert titles[-2:] == ["Methods", "Data quality"]


def test_methods_page_shows_rule_values_and_clauses(small_site: Path) -> None:
    text = (small_site / "methods.html").read_text(encoding="utf-8")
    # 29 CFR 1910.95(b)(1) Table G-16: 90 dB(A) for 8 hours; 5 dB exchange rate (App. A)
    assert "29 CFR 1910.95(b)(1)" in text
    row = re.search(r"<td>exchange rate</td><td>dB</td>(.*?)</tr>", text, re.S)
    assert row, "exchange rate row missing"
    # OSHA 5 dB (29 CFR 1910.95 App. A), NIOSH 3 dB (NIOSH 98-126), EU 3 dB (energy equivalence)
    assert re.findall(r'<td class="num">([^<]*)</td>', row.group(1)) == ["5", "3", "3"]


def test_subfolder_page_gets_relative_root(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        ctx = prepare(root)
    build_pages(ctx)
    assert root_prefix("exposure/g1") == "../" and root_prefix("index") == ""
    fig = charts.bar(["a", "b"], [1.0, 2.0])
    page = Page(slug="exposure/g1", title="G1", template="narrative.html", section="narrative",
                context={"body": "x", "order": 9, "source": "s"},
                charts=[Chart("exposure-g1-1", fig, "Two bars.", Table(["k"], [["a"]]))])
    env_ = make_environment(None)
    common = {"site": site_info(ctx), "cautions": cautions_for(ctx.rules)}
    html = render_page(env_, page, common, [p for p in ctx.pages if p.in_nav])
    assert '<link rel="stylesheet" href="../assets/style.css">' in html
    assert 'href="../index.html"' in html and 'href="../methods.html"' in html


def test_table_from_frame_formats_cells() -> None:
    df = pd.DataFrame({"group": ["A", "B"], "lex": [85.04, float("nan")], "n": [3, 12],
                       "day": pd.to_datetime(["2025-03-04", None]), "ok": [True, False]})
    t = charts.table_from_frame(df, {"group": "Group", "lex": "LEX,8h", "n": "People", "day": "Date", "ok": "OK"},
                                {"n": "d"})
    assert t.columns == ["Group", "LEX,8h", "People", "Date", "OK"]
    assert t.rows == [["A", "85.0", "3", "2025-03-04", "yes"], ["B", "–", "12", "–", "no"]]
    assert t.classes == ["", "num", "num", "", ""]


def test_box_from_stats_draws_precomputed_quartiles() -> None:
    stats = pd.DataFrame({"label": ["G1", "G2"], "q1": [80.0, 82.0], "median": [84.0, 85.0],
                          "q3": [88.0, 89.0], "lowerfence": [75.0, 79.0], "upperfence": [93.0, 95.0]})
    fig = charts.box_from_stats(stats)
    (trace,) = fig.data
    assert list(trace["q1"]) == [80.0, 82.0] and list(trace["median"]) == [84.0, 85.0]
    assert "y" not in trace  # no raw points are sent to the page
    charts.reference_lines(fig, {"action": 85.0, "limit": 90.0, "unset": None})
    assert sorted(s["y0"] for s in fig.layout["shapes"]) == [85.0, 90.0]


def test_site_template_is_the_default_and_small() -> None:
    import plotly.io as pio
    assert pio.templates.default == charts.TEMPLATE_NAME
    fig = charts.line([2021, 2022], {"a": [1.0, 2.0]})
    assert len(pio.to_json(fig.layout["template"])) < 2000
    assert go.Figure().layout.template.layout.colorway == tuple(charts.PALETTE)


def test_programme_templates_override_stock_ones(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", pages={"about.md": "---\ntitle: About\n---\nbody text\n"})
    (root / "templates").mkdir()
    (root / "templates" / "narrative.html").write_text(
        '{% extends "base.html" %}{% block content %}<p class="own">OWN {{ body|markdown }}</p>{% endblock %}\n',
        encoding="utf-8")
    build_fixed(root, tmp_path / "site")
    text = (tmp_path / "site" / "about.html").read_text(encoding="utf-8")
    assert '<p class="own">OWN <p>body text</p>' in text
    assert 'class="cautions"' in text  # the stock base.html still carries the cautions


def test_public_build_leaves_restricted_pages_out(tmp_path: Path) -> None:
    from generator.site import render_site
    root = make_programme(tmp_path / "p")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        ctx = prepare(root)
    ctx.pages.append(Page(slug="people/x", title="x", template="narrative.html", section="narrative",
                          context={"body": "secret", "order": 0, "source": "s"}, restricted=True))
    assert "people/x.html" not in render_site(ctx)
    ctx.restricted = True
    files = render_site(ctx)
    assert "people/x.html" in files and b"Restricted build" in files["people/x.html"]


def test_quality_page_codes_person_ids_in_messages(tmp_path: Path) -> None:
    from generator.pages import quality
    root = make_programme(tmp_path / "p")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        ctx = prepare(root)
    ctx.programme.findings.warning("data/noise.csv", 7, "person_id", "person E001 measured twice")
    (page,) = quality.build(ctx)
    rows = page.context["findings_table"].rows
    hit = [r for r in rows if r[1] == "data/noise.csv"]
    assert hit and hit[0][3] == f"person {ctx.code('E001')} measured twice" and hit[0][4] == "7"
    ctx.restricted = True
    (page,) = quality.build(ctx)
    assert any(r[3] == "person E001 measured twice" for r in page.context["findings_table"].rows)


def test_overview_headline_shows_the_compliance_summary(built_example) -> None:
    summary = built_example.context.results.compliance.summary
    text = built_example.html("index")
    tiles = dict((label, value) for value, label in re.findall(
        r'<span class="tile-value"[^>]*>([^<]+)</span><span class="tile-label">(?:<a [^>]*>)?([^<]+)', text))
    assert tiles["People in the programme&#39;s scope"] == f"{summary['in_scope']:,}"
    assert tiles["Open actions"] == f"{summary['open_actions_total']:,}"
    assert tiles["People in the records"] == f"{len(built_example.context.programme.table('people')):,}"


def test_quality_page_caps_the_groups_and_keeps_the_counts(tmp_path: Path) -> None:
    from generator.pages import quality
    root = make_programme(tmp_path / "p")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        ctx = prepare(root)
    n = quality.GROUPS_SHOWN + 30
    before = len(list(ctx.programme.findings))
    for i in range(n):  # distinct messages without a key: one group each
        ctx.programme.findings.warning("data/noise.csv", i + 2, f"col{i}", f"odd value {i}")
    ctx.programme.findings.error("data/people.csv", 3, "sex", "not one of M, F")
    (page,) = quality.build(ctx)
    table = page.context["findings_table"]
    assert len(table.rows) == quality.GROUPS_SHOWN and table.rows[0][0] == "error"  # errors first
    assert f"Showing {quality.GROUPS_SHOWN:,} of" in table.caption
    counts = {r[0]: r for r in page.context["counts_table"].rows}
    assert counts["data/noise.csv"][2] >= n and page.context["n_warnings"] + page.context["n_errors"] == before + n + 1
    ctx.restricted = True
    (page,) = quality.build(ctx)
    assert len(page.context["findings_table"].rows) >= n + 1


def test_review_running_header_escapes_the_title_for_css(tmp_path: Path) -> None:
    # the title goes into a CSS string of the review's page margin boxes: it must neither end the
    # string nor the style element (CSS Syntax Level 3, 4.3.7: "\" + hex digits + space is one code point)
    title = 'Works "North" \\ plant </style><script>alert(1)</script>'
    root = make_programme(tmp_path / "p", config={"title": title})
    build_fixed(root, tmp_path / "site")
    html = (tmp_path / "site" / "review.html").read_text(encoding="utf-8")
    style = html.split("<style>", 1)[1].split("</style>", 1)[0]
    assert "<script>alert" not in html and "</style><script>" not in style
    assert ('@top-left { content: "Works \\22 North\\22  \\5c  plant \\3c /style>\\3c script>alert(1)\\3c /script>"; '
            in style), style[:2000]
    assert '@top-right { content: "2025-01-01 to 2025-12-31";' in style


def test_markdown_converter_is_reset_between_texts() -> None:
    # one converter serves every text of a build; each text must render as a fresh converter renders it
    # (the markdown library itself is the oracle), heading ids included (no "-1" carried over)
    import markdown as md

    from generator.site import render_markdown, sanitise_html

    # a link reference defined in one text must not resolve in the next
    texts = ["# Noise\n\n## Noise\n\nsee [the survey][s]\n\n[s]: survey.html", "# Noise\n\nsee [the survey][s]",
             "# Noise\n\n| a | b |\n|---|---|\n| 1 | 2 |", "```\ncode\n```", "", "# Noise"]
    for text in texts * 2:
        fresh = md.Markdown(extensions=["tables", "fenced_code", "toc"], output_format="html")
        assert render_markdown(text) == sanitise_html(fresh.convert(text))
    render_markdown("[s]: survey.html")
    assert "href" not in render_markdown("see [the survey][s]")


def _render(template_dir: Path, name: str, **values: object) -> str:
    from generator.site import make_environment

    return make_environment(template_dir).get_template(name).render(**values)


def test_compiled_templates_are_reused_only_for_the_same_text(tmp_path: Path, monkeypatch) -> None:
    # compiled templates are kept between builds; jinja's own compiler is the oracle for the output
    import os
    import stat

    import jinja2

    from generator.site import TEMPLATE_CACHE_ENV, make_environment

    cache = tmp_path / "cache"
    monkeypatch.setenv(TEMPLATE_CACHE_ENV, str(cache))
    own = tmp_path / "templates"
    own.mkdir()
    (own / "note.html").write_text("<p>{{ text }}</p>{% for i in items %}\n  [{{ i }}]\n{% endfor %}\n", encoding="utf-8")
    values = {"text": "a < b", "items": [1, 2]}
    first = _render(own, "note.html", **values)
    plain = jinja2.Environment(autoescape=True, keep_trailing_newline=True, trim_blocks=True, lstrip_blocks=True,
                               loader=jinja2.FileSystemLoader(str(own)))
    assert first == plain.get_template("note.html").render(**values)
    assert first.startswith("<p>a &lt; b</p>") and first.endswith("[2]\n")
    files = sorted(cache.iterdir())
    assert len(files) == 1
    assert stat.S_IMODE(os.stat(cache).st_mode) == 0o700 and stat.S_IMODE(os.stat(files[0]).st_mode) & 0o077 == 0

    # a second build loads the compiled template: it renders without compiling
    def refuse(*args: object, **kwargs: object) -> None:
        raise AssertionError("compiled again")
    with monkeypatch.context() as m:
        m.setattr(jinja2.Environment, "compile", refuse)
        assert _render(own, "note.html", **values) == first
    # a changed text is compiled again, not taken from the cache
    (own / "note.html").write_text("<b>{{ text }}</b>\n", encoding="utf-8")
    assert _render(own, "note.html", **values) == "<b>a &lt; b</b>\n"
    # a damaged entry is compiled again
    for f in cache.iterdir():
        f.write_bytes(b"not a compiled template")
    assert _render(own, "note.html", **values) == "<b>a &lt; b</b>\n"
    # a cache that cannot be made (a file where the folder should be) or is switched off: the build goes on
    blocked = tmp_path / "blocked"
    blocked.write_text("x", encoding="utf-8")
    monkeypatch.setenv(TEMPLATE_CACHE_ENV, str(blocked))
    assert make_environment(own).bytecode_cache is None
    assert _render(own, "note.html", **values) == "<b>a &lt; b</b>\n"
    monkeypatch.setenv(TEMPLATE_CACHE_ENV, "off")
    assert make_environment(own).bytecode_cache is None


def test_a_read_only_template_cache_does_not_stop_a_build(tmp_path: Path, monkeypatch) -> None:
    # a cache folder that refuses writes (read-only medium): the template is compiled and the build goes on
    import errno

    import jinja2.bccache

    from generator.site import TEMPLATE_CACHE_ENV

    def read_only(*args: object, **kwargs: object) -> None:
        raise OSError(errno.EROFS, "Read-only file system")
    cache = tmp_path / "ro"
    monkeypatch.setenv(TEMPLATE_CACHE_ENV, str(cache))
    monkeypatch.setattr(jinja2.bccache.tempfile, "NamedTemporaryFile", read_only)
    own = tmp_path / "t"
    own.mkdir()
    (own / "x.html").write_text("{{ v }}\n", encoding="utf-8")
    assert _render(own, "x.html", v="ok") == "ok\n"
    assert list(cache.iterdir()) == []
