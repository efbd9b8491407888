"""Render page models to HTML: jinja2 environment, sanitised markdown, charts, cautions.

:func:`render_site` turns the pages of a :class:`~generator.pages.base.SiteContext` into a
mapping ``relative path -> bytes`` (pages, ``assets/plotly.min.js``, ``assets/style.css``,
``assets/tables.js``);
:mod:`generator.build` writes that mapping. Everything links relatively, so the site
works from ``file://``; no template loads anything from another host.
"""
from __future__ import annotations

from collections import defaultdict

import hashlib
import logging
import math
import os
import re
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any, Iterable
from urllib.parse import urlsplit

import jinja2
from jinja2.exceptions import SecurityError
from jinja2.sandbox import SandboxedEnvironment
import markdown as md
import nh3
import plotly.io as pio
from markupsafe import Markup, escape

from . import charts, clock
from . import __version__
from .pages import NARRATIVE, SECTIONS, section_title
from .findings import Findings, HcpsiteError
from .pages.base import Chart, Page, SiteContext
from .privacy import redact_pages
from .resources import content_dir, templates_dir

log = logging.getLogger(__name__)

pio.json.config.default_engine = "json"

PLOTLY_JS = "assets/plotly.min.js"
STYLE_CSS = "assets/style.css"
#: stock assets copied from the templates folder (a programme's own templates/ may override them).
TEMPLATE_ASSETS = {STYLE_CSS: "style.css", "assets/tables.js": "tables.js"}
CHART_CONFIG = {"displaylogo": False, "responsive": True}
#: Names every page template gets; a page's own context may not reuse them.
RESERVED = frozenset({"site", "nav", "root", "page", "charts", "chart_map", "cautions"})
_CHART_ID = re.compile(r"^[a-z][a-z0-9_-]*$")

#: HTML the markdown renderer may keep (everything else is removed by nh3).
ALLOWED_TAGS = frozenset({
    "a", "abbr", "b", "blockquote", "br", "caption", "code", "dd", "del", "details", "div",
    "dl", "dt", "em", "h1", "h2", "h3", "h4", "h5", "h6", "hr", "i", "img", "ins", "kbd", "li",
    "ol", "p", "pre", "s", "small", "span", "strong", "sub", "summary", "sup", "table", "tbody",
    "td", "tfoot", "th", "thead", "tr", "ul",
})
ALLOWED_ATTRIBUTES = {
    "a": {"href", "title"},
    "abbr": {"title"},
    "img": {"src", "alt", "title", "width", "height"},
    "td": {"colspan", "rowspan"},
    "th": {"colspan", "rowspan", "scope"},
    "ol": {"start"},
    **{f"h{i}": {"id"} for i in range(1, 7)},
}
LINK_SCHEMES = frozenset({"http", "https", "mailto"})


#: characters a browser drops from anywhere in a URL (tab, line feed, carriage return)
_URL_DROPPED = re.compile(r"[\t\n\r]")
#: characters a browser strips from both ends of a URL (C0 controls and space)
_URL_TRIM = "".join(chr(i) for i in range(0x21))


def _browser_url(value: str) -> str:
    """Return *value* as a browser reads it: tabs and newlines dropped, ends trimmed, ``\\`` as ``/``."""
    return _URL_DROPPED.sub("", value).strip(_URL_TRIM).replace("\\", "/")


def site_relative(value: str) -> bool:
    """True when *value* refers to a file inside the site: no scheme, no host, no leading ``/``, no ``..``."""
    url = _browser_url(value)
    if not url or url.startswith("/") or urlsplit(url).scheme:
        return False
    path = url.split("#", 1)[0].split("?", 1)[0]
    return ".." not in path.split("/")


def _attribute_filter(tag: str, attr: str, value: str) -> str | None:
    """Keep links to anchors, to files of the site and to web pages (href only); drop the rest.

    An image (``src``) must be a file of the site: a reference with a scheme, a host or a
    leading ``/`` or ``\\`` (which browsers read as ``//``, another host) is removed.
    """
    if attr not in ("href", "src"):
        return value
    url = _browser_url(value)
    if attr == "href" and url.startswith("#"):
        return url
    if site_relative(url):
        return url
    if attr == "href" and urlsplit(url).scheme.lower() in LINK_SCHEMES and not url.startswith("/"):
        return url
    return None


def sanitise_html(html: str) -> str:
    """Return *html* with every tag, attribute and link scheme outside the allow-list removed."""
    return nh3.clean(html, tags=set(ALLOWED_TAGS), attributes={k: set(v) for k, v in ALLOWED_ATTRIBUTES.items()},
                     url_schemes=set(LINK_SCHEMES), attribute_filter=_attribute_filter,
                     strip_comments=True, link_rel="noopener noreferrer")


def render_markdown(text: str) -> str:
    """Return sanitised HTML for markdown *text* (tables, fenced code, heading ids)."""
    conv = _markdown()
    conv.reset()  # one converter per process: reset() forgets the last text (its link references too)
    return sanitise_html(conv.convert(text or ""))


@lru_cache(maxsize=1)
def _markdown() -> md.Markdown:
    """Return the one converter: tables, fenced code and heading ids (the extensions given as
    objects: by name, markdown would look them up among every installed package's entry points)."""
    from markdown.extensions.fenced_code import FencedCodeExtension
    from markdown.extensions.tables import TableExtension
    from markdown.extensions.toc import TocExtension
    return md.Markdown(extensions=[TableExtension(), FencedCodeExtension(), TocExtension()], output_format="html")


def _markdown_filter(text: str) -> Markup:
    """Jinja filter: sanitised markdown as markup."""
    return Markup(render_markdown(str(text)))  # made and sanitised by the program


def _table_rows(cells: Iterable[Iterable[tuple[Any, Any, str | None]]], root: str) -> Markup:
    """Jinja filter: the body rows of a table (``Table.cells``) as markup, every text escaped.

    One ``<tr>`` line per row; a cell is ``<td>`` (with ``class="..."`` when it has a class)
    holding its text, or a link ``<a href="ROOT+href">`` when it has an href. Written here and
    not as a loop in _table.html because a review's tables hold tens of thousands of cells,
    and a template loop costs several times more per cell; the markup is the same.
    """
    root_html = escape(root)
    lines = []
    for row in cells:
        tds = []
        for cls, text, href in row:
            head = f'<td class="{escape(cls)}">' if cls else "<td>"
            if href is not None:
                tds.append(f'{head}<a href="{root_html}{escape(href)}">{escape(text)}</a></td>')
            else:
                tds.append(f"{head}{escape(text)}</td>")
        lines.append(f"<tr>{''.join(tds)}</tr>\n")
    return Markup("".join(lines))  # every text above is escaped


def _num(value: Any, digits: int = 1, unit: str = "") -> str:
    """Jinja filter: a number with *digits* decimals (and a unit), a dash when missing."""
    if value is None:
        return "–"
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(f):
        return "–"
    text = f"{f:,.{digits}f}"
    return f"{text} {unit}".rstrip() if unit else text


def _date(value: Any) -> str:
    """Jinja filter: a date as YYYY-MM-DD, a dash when missing."""
    if value is None:
        return "–"
    try:
        import pandas as pd
        if pd.isna(value):
            return "–"
        return pd.Timestamp(value).strftime("%Y-%m-%d")
    except (TypeError, ValueError):
        return str(value)


#: the template syntax options of the environment (compiled templates depend on them)
_SYNTAX = {"keep_trailing_newline": True, "trim_blocks": True, "lstrip_blocks": True}
#: environment variable naming the folder for compiled templates; "off" compiles them on every build
TEMPLATE_CACHE_ENV = "HCPSITE_TEMPLATE_CACHE"


class _TemplateCache(jinja2.FileSystemBytecodeCache):
    """Compiled templates kept between builds (compiling the stock templates costs about 0.3 s a build).

    An entry is used only for the same template file with the same text (jinja checks a checksum
    of the source) under the same hcpsite, jinja and Python versions. A cache that cannot be read
    or written costs only the compiling: the build goes on.
    """

    def load_bytecode(self, bucket: Any) -> None:
        try:
            super().load_bytecode(bucket)
        except (OSError, EOFError, ValueError, TypeError):  # unreadable or damaged entry: compile again
            bucket.reset()

    def dump_bytecode(self, bucket: Any) -> None:
        try:
            super().dump_bytecode(bucket)
        except OSError:
            pass


def template_cache() -> jinja2.BytecodeCache | None:
    """Return the compiled-template cache: the folder named by HCPSITE_TEMPLATE_CACHE, else jinja's
    per-user folder in the temporary directory (readable by the user only), or None ("off", or no safe folder)."""
    where = os.environ.get(TEMPLATE_CACHE_ENV, "").strip()
    if where.lower() == "off":
        return None
    # what the compiled code depends on besides the template text: the versions and the options
    made_by = f"{__version__} {jinja2.__version__} {sorted(_SYNTAX.items())} autoescape sandboxed"
    pattern = "hcpsite-" + hashlib.sha256(made_by.encode()).hexdigest()[:16] + "-%s.cache"
    try:
        if where:
            os.makedirs(where, mode=0o700, exist_ok=True)
            return _TemplateCache(where, pattern)
        return _TemplateCache(pattern=pattern)  # jinja refuses a folder another user owns or can read
    except (OSError, RuntimeError):
        return None


def make_environment(template_dir: Path | None = None) -> jinja2.Environment:
    """Return the jinja2 environment: programme templates first, then the stock ones."""
    loaders: list[jinja2.BaseLoader] = []
    if template_dir is not None and Path(template_dir).is_dir():
        loaders.append(jinja2.FileSystemLoader(str(template_dir)))
    loaders.append(jinja2.FileSystemLoader(str(templates_dir())))
    env = SandboxedEnvironment(
        loader=jinja2.ChoiceLoader(loaders),
        bytecode_cache=template_cache(),
        autoescape=jinja2.select_autoescape(default=True, default_for_string=True),
        undefined=jinja2.StrictUndefined,
        **_SYNTAX,
    )
    env.filters["markdown"] = _markdown_filter
    env.filters["num"] = _num
    env.filters["date"] = _date
    env.filters["table_rows"] = _table_rows
    return env


def build_date() -> str:
    """Return the UTC build date from SOURCE_DATE_EPOCH, or 'not stamped'."""
    day = source_date()
    return day.isoformat() if day else "not stamped"


source_date = clock.source_date


def chart_html(chart: Chart) -> str:
    """Return the plot div and its script for *chart* (plotly.js is loaded by the page)."""
    return charts.figure_html(chart.figure, chart.id, chart.height, CHART_CONFIG)


@dataclass
class Caution:
    """One block of the cautions shown on every page."""

    id: str
    title: str
    html: Markup


def _split_title(text: str) -> tuple[str, str]:
    """Return (first '# ' heading, rest) of a markdown text."""
    lines = text.strip().splitlines()
    if lines and lines[0].startswith("# "):
        return lines[0][2:].strip(), "\n".join(lines[1:]).strip()
    return "", text.strip()


@lru_cache(maxsize=None)
def _caution_text(name: str) -> str:
    path = content_dir() / "cautions" / f"{name}.md"
    return path.read_text(encoding="utf-8")


def cautions_for(rules: dict[str, Any]) -> list[Caution]:
    """Return the cautions: the general text, the headline rule set's, then short notes of the others."""
    out = []
    title, body = _split_title(_caution_text("general"))
    out.append(Caution("general", title or "Before you use these figures", Markup(render_markdown(body))))
    for i, rule in enumerate(rules.values()):
        title, body = _split_title(_caution_text(rule.caution))
        if i == 0:
            out.append(Caution(rule.id, title or rule.name, Markup(render_markdown(body))))
        else:
            first = body.split("\n\n", 1)[0] if body else ""
            out.append(Caution(rule.id, f"Compared with: {title or rule.name}",
                               Markup(render_markdown(first))))
    return out


def page_path(slug: str) -> str:
    """Return the output file of a page slug ('exposure/g1' -> 'exposure/g1.html')."""
    return f"{slug}.html"


def root_prefix(slug: str) -> str:
    """Return the relative prefix from a page back to the site root."""
    return "../" * slug.count("/")


def _nav_order(page: Page) -> tuple:
    order = {s: i for i, (s, _) in enumerate(SECTIONS)}
    if page.section == NARRATIVE:
        return (order["index"], 1, page.context.get("order", 0), page.slug)
    return (order.get(page.section, len(order)), 0, page.slug != page.section, page.slug)


def navigation(pages: Iterable[Page]) -> list[Page]:
    """Return the pages shown in the navigation: one per section in SECTIONS order, narrative after the overview."""
    out: list[Page] = []
    seen: set[str] = set()
    for p in sorted((p for p in pages if p.in_nav), key=_nav_order):
        if p.section != NARRATIVE:
            if p.section in seen:
                continue
            seen.add(p.section)
        out.append(p)
    return out


def check_pages(pages: list[Page]) -> None:
    """Raise ValueError on duplicate slugs, unsafe slugs or bad chart ids."""
    seen: set[str] = set()
    for p in pages:
        parts = p.slug.split("/")
        if not p.slug or any(not part or part in (".", "..") or part.startswith(".") for part in parts) \
                or p.slug.startswith("assets/") or "\\" in p.slug:
            raise ValueError(f"page slug {p.slug!r} is not a safe relative name")
        if p.slug in seen:
            raise ValueError(f"two pages have the slug {p.slug!r}")
        seen.add(p.slug)
        ids: set[str] = set()
        for c in p.charts:
            if not _CHART_ID.match(c.id):
                raise ValueError(f"chart id {c.id!r} on page {p.slug!r} must be lower-case letters, digits, - or _")
            if c.id in ids:
                raise ValueError(f"two charts on page {p.slug!r} have the id {c.id!r}")
            if not (c.summary or "").strip():
                raise ValueError(f"chart {c.id!r} on page {p.slug!r} has no summary sentence")
            ids.add(c.id)
        clash = RESERVED & set(p.context)
        if clash:
            raise ValueError(f"page {p.slug!r} context uses reserved names {sorted(clash)}")


def site_info(ctx: SiteContext) -> dict[str, Any]:
    """Return the values every page shows (title, organisation, period, footer)."""
    cfg = ctx.programme.config
    return {
        "title": cfg.title,
        "organisation": cfg.organisation,
        "period_start": cfg.period.start.isoformat(),
        "period_end": cfg.period.end.isoformat(),
        "version": __version__,
        "rules_name": ctx.headline.name if ctx.rules else "",
        "digest": (ctx.programme.digest or "")[:12],
        "build_date": build_date(),
        "note": cfg.site_url_note,
        "restricted": ctx.restricted,
        # the headline rule set's clauses and intervals, for page texts that cite them
        "clauses": defaultdict(str, ctx.headline.all_clauses() if ctx.rules else {}),
        "calibration_months": {"acoustic": ctx.headline.acoustic_calibration_months,
                               "exhaustive": ctx.headline.exhaustive_calibration_months} if ctx.rules else {},
    }


def render_page(env: jinja2.Environment, page: Page, common: dict[str, Any], nav: list[Page]) -> str:
    """Render one page to HTML text."""
    root = root_prefix(page.slug)
    charts = [{"id": c.id, "title": c.title, "summary": c.summary, "table": c.table,
               "html": Markup(chart_html(c))} for c in page.charts]  # program-made plot div
    entries = [{"title": p.title if p.section == NARRATIVE else section_title(p.section),
                "href": root + page_path(p.slug), "section": p.section,
                "current": (p.slug == page.slug) or (p.section == page.section and p.section != NARRATIVE)}
               for p in nav]
    context = dict(page.context)
    context.update(common, root=root, page=page, nav=entries, charts=charts,
                   chart_map={c["id"]: c for c in charts})
    return env.get_template(page.template).render(**context)


def render_site(ctx: SiteContext, pages: list[Page] | None = None) -> dict[str, bytes]:
    """Return every output file of the site as relative path -> bytes."""
    pages = list(ctx.pages if pages is None else pages)
    if not ctx.restricted:
        dropped = [p.slug for p in pages if p.restricted]
        if dropped:
            log.info("public build: %d restricted pages left out", len(dropped))
        pages = [p for p in pages if not p.restricted]
        # one path for free text: every text a public page shows loses ids, names and birth dates
        redact_pages(pages, ctx.redact)
    check_pages(pages)
    env = make_environment(ctx.programme.template_dir)
    nav = navigation(pages)
    common = {"site": site_info(ctx), "cautions": cautions_for(ctx.rules)}
    files: dict[str, bytes] = {}
    for page in sorted(pages, key=lambda p: p.slug):
        try:
            files[page_path(page.slug)] = render_page(env, page, common, nav).encode("utf-8")
        except Exception as exc:
            problem = user_template_error(exc, ctx.programme.template_dir)
            if problem is None:
                raise
            raise problem from None
    files[PLOTLY_JS] = plotly_js()
    for path, name in sorted(TEMPLATE_ASSETS.items()):
        text, _, _ = env.loader.get_source(env, name)  # type: ignore[union-attr]
        files[path] = text.encode("utf-8")
    return files


@lru_cache(maxsize=1)
def plotly_js() -> bytes:
    """Return the bundled plotly.js library."""
    from plotly.offline import get_plotlyjs
    return get_plotlyjs().encode("utf-8")


def user_template_error(exc: BaseException, template_dir: Path | None) -> HcpsiteError | None:
    """Return the user's mistake in a template of the programme's templates/ folder, or None.

    A syntax error, an undefined name, a missing included template or a failing expression
    whose innermost template frame is a file of *template_dir* is reported as
    ``templates/NAME:line:: error: ...``; anything else is left to the caller (a fault of
    the stock templates stays a fault of hcpsite). Sandbox refusals are left to the caller.
    """
    if template_dir is None or isinstance(exc, SecurityError):
        return None
    root = Path(template_dir)

    def rel(filename: str | None) -> str | None:
        if not filename:
            return None
        try:
            return "templates/" + Path(filename).resolve().relative_to(root.resolve()).as_posix()
        except (ValueError, OSError):
            return None

    where: tuple[str, int | None] | None = None
    if isinstance(exc, jinja2.TemplateSyntaxError):
        path = rel(exc.filename)
        if path is not None:
            where = (path, exc.lineno)
        what = f"template syntax: {exc.message}"
    else:
        tb = exc.__traceback__
        while tb is not None:
            path = rel(tb.tb_frame.f_code.co_filename)
            if path is not None:
                where = (path, tb.tb_lineno)  # innermost frame in a programme template wins
            tb = tb.tb_next
        if isinstance(exc, jinja2.TemplateNotFound):
            what = f"template not found: {exc.name}"
        elif isinstance(exc, jinja2.UndefinedError):
            what = f"template: {exc.message}"
        else:
            what = f"template: {type(exc).__name__}: {exc}"
    if where is None:
        return None
    findings = Findings()
    findings.error(where[0], where[1], None, what)
    return HcpsiteError(f"{where[0]}: the programme's template cannot be rendered; fix it or remove it "
                        "to use the stock template", findings)
