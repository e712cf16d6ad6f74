"""HTML pages rendered with Jinja2 from :class:`FitReport` objects alone."""

from __future__ import annotations

import json
import re
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cache
from typing import TYPE_CHECKING, Any

import jinja2
from markupsafe import Markup

from sitegen import __version__
from sitegen.errors import SiteConfigError
from sitegen.model import FitReport
from sitegen.report import charts, fmt
from sitegen.report.dataset_view import Neighbour, unmet_words, view
from sitegen.report.theme import Theme
from sitegen.spec import SiteConfig

if TYPE_CHECKING:
    from markdown_it import MarkdownIt

_SAFE_SCHEMES = ("http:", "https:", "mailto:", "#", "/", "./", "../")


@cache
def _markdown() -> MarkdownIt:
    """The Markdown renderer, made on first use (most pages have no description to render)."""
    from markdown_it import MarkdownIt  # noqa: PLC0415

    md = MarkdownIt("commonmark", {"html": False, "linkify": False, "typographer": False})
    default_validate = md.validateLink

    def validate(url: str) -> bool:
        # Raw HTML is off; links may only use harmless schemes (no javascript:, data:, vbscript:, file:).
        u = url.strip().lower()
        has_scheme = re.match(r"^[a-z][a-z0-9+.-]*:", u) is not None
        return default_validate(url) and (not has_scheme or u.startswith(_SAFE_SCHEMES))

    md.validateLink = validate  # type: ignore[method-assign]
    return md


def render_markdown(text: str) -> Markup:
    """Markdown to HTML with raw HTML disabled and unsafe links dropped."""
    if not text:
        return Markup("")
    return Markup(_markdown().render(text))  # noqa: S704 - markdown-it escapes everything; html is off


def json_for_script(value: object) -> Markup:
    """JSON that is safe inside a ``<script>`` element: no ``<``, ``>`` or ``&`` survive unescaped."""
    text = json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":"), sort_keys=True)
    text = text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
    text = text.replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")
    return Markup(text)  # noqa: S704 - escaped above


def slugify(text: str) -> str:
    """An id-safe version of a label."""
    return re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-") or "x"


def _show_char(value: str) -> str:
    return {"\t": "tab", ",": ",", ";": ";", "|": "|"}.get(value, value)


def _bytecode_cache() -> jinja2.BytecodeCache | None:
    """Compiled templates kept in the user's cache folder (keyed by template source), if it is writable."""
    from sitegen.cache import cache_dir  # noqa: PLC0415

    folder = cache_dir() / "templates"
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return jinja2.FileSystemBytecodeCache(str(folder))


@cache
def environment(theme: Theme) -> jinja2.Environment:
    """The Jinja2 environment of a theme (user templates first, default after)."""
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader([str(d) for d in theme.template_dirs]),
        bytecode_cache=_bytecode_cache(),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    env.filters |= {
        "num": fmt.num,
        "integer": fmt.integer,
        "pvalue": fmt.pvalue,
        "p_phrase": fmt.p_phrase,
        "rsq": fmt.rsquared,
        "level": fmt.level,
        "percent": fmt.percent,
        "markdown": render_markdown,
        "tojson_safe": json_for_script,
        "slugify": slugify,
        "show_char": _show_char,
        "given": fmt.given,
    }
    return env


@dataclass(frozen=True, slots=True)
class SiteContext:
    """What every page needs to know about the site."""

    config: SiteConfig
    theme: Theme


def _common(ctx: SiteContext, root: str, page: str) -> dict[str, Any]:
    return {
        "site": ctx.config,
        "root": root,
        "page": page,
        "version": __version__,
        "chart_theme": ctx.theme.chart_colors,
    }


def _first_problem(r: FitReport) -> str:
    """The index's note under a dataset: unmet requirements first, then the first error or warning."""
    unmet = unmet_words(r)
    lead = f"Requirements not met: {unmet}." if unmet else ""
    for level in ("error", "warning"):
        for m in r.messages:
            if m.level == level:
                return f"{lead} {m.text}".strip()
    return lead


def render_dataset(
    ctx: SiteContext,
    r: FitReport,
    files: Sequence[str],
    prev: Neighbour | None,
    nxt: Neighbour | None,
) -> str:
    """The page of one dataset: ``dataset.html`` with its sections (report/sections.py) filled from the view."""
    chart_specs = charts.dataset_charts(r) if r.status != "error" else {}
    v = view(r, files, chart_specs, prev, nxt)
    return _render(environment(ctx.theme), "dataset.html", **_common(ctx, "../../", "dataset"), v=v, r=r)


def render_index(ctx: SiteContext, reports: Sequence[FitReport], tags: Sequence[dict[str, Any]]) -> str:
    """The comparison index of every dataset."""
    env = environment(ctx.theme)
    sections: dict[str, list[FitReport]] = {}
    for r in reports:
        sections.setdefault(r.section, []).append(r)
    counts = {s: sum(1 for r in reports if r.status == s) for s in ("ok", "warn", "error")}
    levels = sorted({r.level for r in reports})
    return _render(
        env,
        "index.html",
        **_common(ctx, "", "index"),
        reports=reports,
        sections=[{"name": k, "reports": v} for k, v in sorted(sections.items())],
        counts=counts,
        tags=tags,
        first_problem=_first_problem,
        level_text=fmt.level(levels[0]) if len(levels) == 1 else "stated",
    )


def render_page(ctx: SiteContext, template: str, page: str, **values: Any) -> str:
    """Any other top-level page (e.g. the change report)."""
    return _render(environment(ctx.theme), template, **_common(ctx, "", page), **values)


def _render(env: jinja2.Environment, name: str, **values: Any) -> str:
    """Render a theme template; Jinja's errors (a user theme's typo) become a message naming file and line."""
    try:
        return env.get_template(name).render(**values)
    except jinja2.TemplateSyntaxError as exc:
        where = f"{exc.filename or exc.name or name}, line {exc.lineno}"
        raise SiteConfigError(f"theme template {where}: {exc.message}", hint="fix the template") from exc
    except jinja2.TemplateError as exc:
        raise SiteConfigError(
            f"theme template {name} (or a template it uses) cannot be rendered: {exc.message}",
            hint="check the names the template uses against the default theme's templates",
        ) from exc
