"""HTML pages rendered with Jinja2 from :class:`FitReport` objects alone."""

from __future__ import annotations

import contextlib
import os
import re
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

import jinja2
import jinja2.runtime
from jinja2.exceptions import SecurityError
from jinja2.loaders import split_template_path
from jinja2.sandbox import SandboxedEnvironment
from markupsafe import Markup

from sitegen import __version__
from sitegen.confine import files_inside, read_inside
from sitegen.errors import OutsideFolderError, SiteConfigError
from sitegen.jsontext import compact
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
    from markdown_it.common.utils import escapeHtml  # noqa: PLC0415

    md = MarkdownIt("commonmark", {"html": False, "linkify": False, "typographer": False})
    default_validate = md.validateLink

    def validate(url: str) -> bool:
        # Raw HTML is off; links may only use harmless schemes (no javascript:, data:, vbscript:, file:).
        u = url.strip().lower()
        has_scheme = re.match(r"^[a-z][a-z0-9+.-]*:", u) is not None
        return default_validate(url) and (not has_scheme or u.startswith(_SAFE_SCHEMES))

    md.validateLink = validate  # type: ignore[method-assign]

    def image_as_link(_renderer: Any, tokens: Any, idx: int, *_: Any) -> str:
        # A picture would make every reader's browser fetch it (from anywhere): it becomes a plain link.
        token = tokens[idx]
        src = str(token.attrs.get("src", ""))
        alt = str(token.content or src)
        text = escapeHtml(f"image: {alt}")
        return f'<a href="{escapeHtml(src)}" class="image-link">{text}</a>' if src else text

    md.add_render_rule("image", image_as_link)
    return md


def render_markdown(text: str) -> Markup:
    """Markdown to HTML with raw HTML disabled and unsafe links dropped."""
    if not text:
        return Markup("")
    return Markup(_markdown().render(text))  # noqa: S704 - markdown-it escapes everything; html is off


def json_for_script(value: object) -> Markup:
    """JSON that is safe inside a ``<script>`` element: no ``<``, ``>`` or ``&`` survive unescaped."""
    text = compact(value)
    text = text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
    text = text.replace("\u2028", "\\u2028").replace("\u2029", "\\u2029")
    return Markup(text)  # noqa: S704 - escaped above


def slugify(text: str) -> str:
    """An id-safe version of a label."""
    return re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-") or "x"


def _show_char(value: str) -> str:
    return {"\t": "tab", ",": ",", ";": ";", "|": "|"}.get(value, value)


def _bytecode_cache(sandboxed: bool) -> jinja2.BytecodeCache | None:
    """Compiled templates kept in the user's cache folder (keyed by template source), if it is writable.

    Sandboxed code differs from plain code (every call and attribute goes through the sandbox) while the
    cache's key does not say which it is, so the two are kept in different folders.
    """
    from sitegen.cache import cache_dir  # noqa: PLC0415

    folder = cache_dir() / ("templates-sandboxed" if sandboxed else "templates")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return jinja2.FileSystemBytecodeCache(str(folder))


class _ThemeLoader(jinja2.BaseLoader):
    """Templates from the theme's folders, most specific first. A template file that leads outside its theme
    folder (a link to elsewhere) or is not a plain file is refused, never read."""

    def __init__(self, folders: tuple[Path, ...]) -> None:
        self.folders = folders

    def get_source(
        self,
        environment: jinja2.Environment,  # noqa: ARG002 - Jinja2's signature
        template: str,
    ) -> tuple[str, str, Callable[[], bool]]:
        pieces = split_template_path(template)  # refuses ".." and absolute names
        for folder in self.folders:
            path = folder.joinpath(*pieces)
            if not os.path.lexists(path):
                continue
            try:
                text = read_inside(path, folder, where="theme folder").decode("utf-8")
                mtime = path.stat().st_mtime_ns
            except OutsideFolderError as exc:
                raise SiteConfigError(f"theme template {template} {exc.message}", hint=_THEME_HINT) from None
            except UnicodeDecodeError as exc:
                raise SiteConfigError(f"theme template {template} is not UTF-8 text", hint=_THEME_HINT) from exc
            except OSError as exc:
                raise SiteConfigError(f"theme template {template} cannot be read: {exc.strerror or exc}") from exc

            def uptodate(path: Path = path, mtime: int = mtime) -> bool:
                try:
                    return path.stat().st_mtime_ns == mtime
                except OSError:
                    return False

            return text, str(path), uptodate
        raise jinja2.TemplateNotFound(template)

    def list_templates(self) -> list[str]:
        return sorted({rel for folder in self.folders for rel, _ in files_inside(folder)})


#: Bounds on what a sandboxed template's arithmetic may make (a user theme must not exhaust the build's memory).
_MAX_POWER_BITS = 4096
_MAX_REPEAT = 1_000_000


class _Overtime(Exception):  # noqa: N818 - not an error of the template's text: its rendering ran out of time
    """A user template rendered past its time bound (raised from the clock's signal, or a sandboxed call)."""


class _Deadline(threading.local):
    at = float("inf")  # monotonic seconds by which the page being rendered in this thread must be done


_DEADLINE = _Deadline()


@contextlib.contextmanager
def _time_bound(seconds: float | None) -> Iterator[None]:
    """End the rendering of a page after ``seconds`` by the clock (None: no bound).

    In the main thread a repeating timer signal interrupts any loop, however tight (a template's nested loops
    call nothing the sandbox sees); in another thread the sandbox checks the deadline at every call it makes.
    """
    if seconds is None:
        yield
        return
    _DEADLINE.at = time.monotonic() + seconds
    timer = threading.current_thread() is threading.main_thread() and hasattr(signal, "setitimer")
    before = None
    if timer:

        def alarm(_signum: int, _frame: object) -> None:
            if isinstance(sys.exc_info()[1], _Overtime):
                return  # the bound's exception is on its way out (Jinja2 rewrites its traceback to name the line)
            raise _Overtime

        before = signal.signal(signal.SIGALRM, alarm)
        signal.setitimer(signal.ITIMER_REAL, seconds, 0.1)  # and again every 0.1 s, should one be swallowed
    try:
        yield
    finally:
        _DEADLINE.at = float("inf")
        if timer:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, before)


class _Sandbox(SandboxedEnvironment):
    """Jinja2's sandbox, with ``**`` and ``*`` bounded so that a template cannot build huge numbers or strings,
    and every call checked against the page's time bound (:func:`_time_bound`)."""

    intercepted_binops = frozenset({"**", "*"})

    def call(self, __context: jinja2.runtime.Context, __obj: Any, *args: Any, **kwargs: Any) -> Any:
        if time.monotonic() > _DEADLINE.at:
            raise _Overtime
        return super().call(__context, __obj, *args, **kwargs)

    def call_binop(
        self,
        context: jinja2.runtime.Context,  # noqa: ARG002 - Jinja2's signature
        operator: str,
        left: Any,
        right: Any,
    ) -> Any:
        if operator == "**":
            big = isinstance(left, int) and isinstance(right, int) and right > 0 and abs(left) > 1
            if big and right * abs(left).bit_length() > _MAX_POWER_BITS:
                raise SecurityError("a power this large is not allowed in a theme template")
            return left**right
        if isinstance(left, int) and isinstance(right, str | list | tuple):
            left, right = right, left
        if isinstance(left, str | list | tuple) and isinstance(right, int) and len(left) * right > _MAX_REPEAT:
            raise SecurityError("repeating text or a list this many times is not allowed in a theme template")
        return left * right


_THEME_HINT = "fix the theme's template, or remove it to use the default theme's"


def check_theme(theme: Theme) -> None:
    """Compile every template of a user theme, so that a syntax error stops the build before anything is
    written (:class:`SiteConfigError` naming the template and line)."""
    load_templates(theme)


def load_templates(theme: Theme) -> None:
    """Load (compile, or read from the bytecode cache) every template of the theme into its environment; a
    syntax error raises :class:`SiteConfigError` naming the template and line."""
    env = environment(theme)
    loader = env.loader
    if loader is None:
        return
    for name in loader.list_templates():
        if name.endswith((".html", ".htm", ".xml", ".txt", ".j2", ".jinja")):
            try:
                env.get_template(name)
            except jinja2.TemplateSyntaxError as exc:
                raise _syntax_error(exc, name) from exc


def _syntax_error(exc: jinja2.TemplateSyntaxError, name: str) -> SiteConfigError:
    where = f"{exc.name or name}, line {exc.lineno}"
    return SiteConfigError(f"theme template {where}: {exc.message}", hint="fix the template")


@cache
def environment(theme: Theme) -> jinja2.Environment:
    """The Jinja2 environment of a theme (user templates first, default after).

    A theme with templates of the user's own renders in Jinja2's sandbox (no access to Python internals,
    bounded arithmetic); the default theme's templates are ours and render without it.
    """
    sandboxed = theme.sandboxed
    env = (_Sandbox if sandboxed else jinja2.Environment)(
        loader=_ThemeLoader(theme.template_dirs),
        bytecode_cache=_bytecode_cache(sandboxed),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
        # The default theme's templates are ours and do not change while sitegen runs: not looked at again
        # on every use (a user's theme is, so that a long-running watch sees its edits).
        auto_reload=sandboxed,
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
    first = r.first_message("error", "warning")
    return f"{lead} {first.text}".strip() if first else lead


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
    return _render(ctx, "dataset.html", **_common(ctx, "../../", "dataset"), v=v, r=r)


#: The index table's first rows, laid out at load; the others travel inside a ``<noscript>`` after the table:
#: shown as a second table without JavaScript, one text node with it, which site.js parses into detached rows at start
#: (about a tenth of a second for 5,000). Laying out 5,000 rows took seconds (bench/index_browser.py).
INDEX_WINDOW = 200


def _split_rows(
    sections: list[tuple[str, list[FitReport]]], size: int
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """The folder groups of the first ``size`` rows in page order, and the groups of the rows after them
    (a folder cut by the window is in both, its second part marked as continued)."""
    window: list[dict[str, Any]] = []
    rest: list[dict[str, Any]] = []
    left = size
    for name, members in sections:
        head, tail = members[:left], members[left:]
        left -= len(head)
        if head:
            window.append({"name": name, "reports": head, "continued": False})
        if tail:
            rest.append({"name": name, "reports": tail, "continued": bool(head)})
    return window, rest


def render_index(ctx: SiteContext, reports: Sequence[FitReport], tags: Sequence[dict[str, Any]]) -> str:
    """The comparison index of every dataset."""
    sections: dict[str, list[FitReport]] = {}
    for r in reports:
        sections.setdefault(r.section, []).append(r)
    counts = {s: sum(1 for r in reports if r.status == s) for s in ("ok", "warn", "error")}
    levels = sorted({r.level for r in reports})
    ordered = sorted(sections.items())
    window, rest = _split_rows(ordered, INDEX_WINDOW)
    return _render(
        ctx,
        "index.html",
        **_common(ctx, "", "index"),
        reports=reports,
        sections=[{"name": k, "reports": v} for k, v in ordered],
        window_sections=window,
        rest_sections=rest,
        window_size=INDEX_WINDOW,
        counts=counts,
        tags=tags,
        first_problem=_first_problem,
        level_text=fmt.level(levels[0]) if len(levels) == 1 else "confidence",
        mixed_levels=len(levels) > 1,
    )


def render_page(ctx: SiteContext, template: str, page: str, **values: Any) -> str:
    """Any other top-level page (e.g. the change report)."""
    return _render(ctx, template, **_common(ctx, "", page), **values)


def _with_policy(html: str) -> str:
    from sitegen.report.policy import with_policy  # noqa: PLC0415

    return with_policy(html)


def _template_line(exc: BaseException, env: jinja2.Environment) -> str:
    """``name, line N`` of the innermost template frame of an error raised while rendering (Jinja2 rewrites
    the traceback so that its frames name the template file and line)."""
    import traceback  # noqa: PLC0415 - only a failing template needs it

    loader = env.loader
    folders = loader.folders if isinstance(loader, _ThemeLoader) else ()
    found = ""
    for frame in traceback.extract_tb(exc.__traceback__):
        for folder in folders:
            if frame.filename.startswith(str(folder) + os.sep):
                found = f"{Path(frame.filename).relative_to(folder).as_posix()}, line {frame.lineno}"
    return found


def _render(ctx: SiteContext, name: str, **values: Any) -> str:
    """Render a theme template; Jinja's errors (a user theme's typo) become a message naming file and line, and
    a user theme's page is held to ``[limits] max_page_seconds``."""
    env = environment(ctx.theme)
    seconds = ctx.config.limits.max_page_seconds if ctx.theme.sandboxed else None
    try:
        # Loaded (and compiled) before the bound starts: the bound is for rendering, and a page that stopped while
        # its templates were compiling, on a busy machine, would not name the template line that runs too long.
        template = env.get_template(name)
        with _time_bound(seconds):
            html = template.render(**values)
        return _with_policy(html)
    except _Overtime as exc:
        where = _template_line(exc, env) or f"{name} (or a template it uses)"
        raise SiteConfigError(
            f"theme template {where} was stopped after {seconds:g} s, the time bound for rendering one page "
            "([limits] max_page_seconds in site.toml); nothing was written",
            hint="look for loops in the template that run far longer than the page needs",
        ) from None
    except jinja2.TemplateSyntaxError as exc:
        raise _syntax_error(exc, name) from exc
    except jinja2.TemplateError as exc:
        where = _template_line(exc, env) or f"{name} (or a template it uses)"
        raise SiteConfigError(
            f"theme template {where} cannot be rendered: {exc.message}",
            hint="check the names the template uses against the default theme's templates",
        ) from exc
    except (ArithmeticError, LookupError, TypeError, ValueError, AttributeError, RecursionError) as exc:
        if not isinstance(env, SandboxedEnvironment):
            raise  # the default theme's own templates: a bug of ours, reported as one
        where = _template_line(exc, env) or f"{name} (or a template it uses)"
        raise SiteConfigError(
            f"theme template {where} cannot be rendered: {type(exc).__name__}: {exc}", hint=_THEME_HINT
        ) from exc
