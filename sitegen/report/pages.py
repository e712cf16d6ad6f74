"""HTML pages rendered with Jinja2 from :class:`FitReport` objects alone."""

from __future__ import annotations

import json
import os
import re
from collections.abc import Callable, Sequence
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
from sitegen.model import FitReport
from sitegen.report import charts, fmt, variation
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
    text = json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":"), sort_keys=True)
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


class _Sandbox(SandboxedEnvironment):
    """Jinja2's sandbox, with ``**`` and ``*`` bounded so that a template cannot build huge numbers or strings."""

    intercepted_binops = frozenset({"**", "*"})

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


def _label(column: str | None, units: dict[str, str]) -> str:
    if not column:
        return "x"
    return f"{column} ({units[column]})" if column in units else column


def sentence(r: FitReport) -> str:
    """The fit in plain words, followed by what contradicts the user's own declarations (unmet requirements,
    claims the data reject), so that the headline never reads as sound beside a contradicted claim."""
    text = _groups_sentence(r) if r.pooled_contrast else _fit_sentence(r)
    if r.requirements:
        unmet = [q for q in r.requirements if not q.met]
        if len(r.requirements) == 1:
            text += f" The declared requirement {r.requirements[0].name} is {'met' if not unmet else 'not met'}."
        elif unmet:
            text += (
                f" {len(unmet)} of {len(r.requirements)} declared requirements "
                f"{'is' if len(unmet) == 1 else 'are'} not met ({unmet_words(r)})."
            )
        else:
            text += f" All {len(r.requirements)} declared requirements are met."
    rejected = [c for c in r.claims if c.rejected]
    if rejected:
        names = "; ".join(f"“{c.claim}”" for c in rejected)
        text += f" The data contradict the declared claim{'s' if len(rejected) > 1 else ''} {names}."
    return text


def _groups_sentence(r: FitReport) -> str:
    """Per-group lines lead when their slopes differ; the pooled line is named only as a contrast."""
    g = r.groups
    if g is None:
        return _fit_sentence(r)
    units = dict(r.units)
    x = r.chart.x if r.chart and r.chart.x else "x"
    y_unit = f" {units[r.response]}" if r.response in units else ""
    per = f" per {units[x]}" if x in units else ""
    lvl = fmt.level(r.level)
    each = "; ".join(
        f"{line.group}: {fmt.num(line.slope)}{y_unit}{per} ({lvl} interval {fmt.num(line.slope_ci_low)} to "
        f"{fmt.num(line.slope_ci_high)}, {fmt.integer(line.n)} rows)"
        for line in g.lines
    )
    return (
        f"The slope of {r.response} on {x} differs between the groups of {g.column} "
        f"({fmt.p_phrase(g.p_value)}), so each group has its own line — slopes {each}. "
        f"The pooled line through all {fmt.integer(r.n)} rows is shown only as a contrast, not as the recommended "
        "line; the checks and flagged rows below are computed on it."
    )


def _fit_sentence(r: FitReport) -> str:
    """The fit stated in one plain sentence (two when the direction of the line is not established)."""
    units = dict(r.units)
    lvl = fmt.level(r.level)
    if "Intercept" in r.terms:
        share = (
            f"the model explains {fmt.percent(r.r_squared)} of the variation in {r.response} "
            f"(R² = {fmt.rsquared(r.r_squared)})"
        )
    else:
        share = (
            f"R² = {fmt.rsquared(r.r_squared)}, measured about zero because the model has no intercept "
            "(it cannot be compared with the R² of a model that has one)"
        )
    y_unit_text = f" {units[r.response]}" if r.response in units else ""
    if r.weights:
        fit_part = (
            f"{share}; fitted by weighted least squares (weights from column {r.weights}), the points scatter about "
            f"it by {fmt.num(r.residual_sd_y)}{y_unit_text} (the standard deviation of the plain residuals, "
            f"y − fitted; the weighted residual scale, {fmt.num(r.residual_std_error)}, is not in "
            f"{r.response}'s units)"
        )
    else:
        fit_part = (
            f"{share}, and the points scatter about it by {fmt.num(r.residual_std_error)}{y_unit_text}"
            " (the typical distance of a row from the line)"
        )
    chart = r.chart
    term = r.compare_term
    c = r.coefficient(term) if term else None
    straight = (
        chart is not None and chart.x is not None and term == chart.x and r.terms in (("Intercept", term), (term,))
    )
    if straight and c is not None and chart is not None and chart.x is not None:
        y_unit = f" {units[r.response]}" if r.response in units else ""
        x_unit = f" {units[chart.x]}" if chart.x in units else ""
        interval = f"{lvl} interval {fmt.num(c.ci_low)} to {fmt.num(c.ci_high)}"
        per = f"for each 1{x_unit} of {chart.x}"
        if c.ci_low > 0 or c.ci_high < 0:
            direction = "rises" if c.estimate > 0 else "falls"
            return (
                f"Across {fmt.integer(r.n)} rows, {r.response} {direction} by {fmt.num(abs(c.estimate))}{y_unit} "
                f"{per} ({interval}); {fit_part}."
            )
        return (
            f"Across {fmt.integer(r.n)} rows, the slope of {r.response} {per} is {fmt.num(c.estimate)}{y_unit}, "
            f"but its {interval} includes zero, so these data do not establish whether {r.response} rises or "
            f"falls with {chart.x}; {fit_part}."
        )
    return f"Across {fmt.integer(r.n)} rows fitted with {r.model}, {fit_part}."


def unmet_words(r: FitReport) -> str:
    """The declared requirements not met, by name ("max_residual_sd, max_bias at 1"), or ""."""
    unmet = [q for q in r.requirements if not q.met]
    return ", ".join(q.name + (f" at {fmt.given(q.at)}" if q.at is not None else "") for q in unmet)


def _first_problem(r: FitReport) -> str:
    """The index's note under a dataset: unmet requirements first, then the first error or warning."""
    unmet = unmet_words(r)
    lead = f"Requirements not met: {unmet}." if unmet else ""
    for level in ("error", "warning"):
        for m in r.messages:
            if m.level == level:
                return f"{lead} {m.text}".strip()
    return lead


_DESCRIBED = {
    "fit.json": "every number on this page, at full precision",
    "coefficients.csv": "estimates with standard errors, tests and intervals",
    "observations.csv": "every row: data, fitted value, intervals and influence measures",
    "anova.csv": "the analysis of variance table",
    "lines.csv": "the other lines with their intervals",
    "calibration.csv": "inverse predictions with their intervals",
    "predictions.csv": "predicted values with their intervals",
    "agreement.csv": "the difference analysis: mean difference, limits of agreement and their intervals",
    "bias.csv": "the bias at each decision level with its interval",
    "readback.csv": "every calibration standard read back from the line",
    "weighting.csv": "the weightings compared and how well each reads the standards back",
}
_CHART_NAMES = {
    "chart-fit.svg": "the line and its bands",
    "chart-residual-by-x.svg": "residuals across the range of x",
    "chart-residual-by-fitted.svg": "residuals across the fitted values",
    "chart-residual-percent.svg": "residuals in percent of the fitted value",
    "chart-residual-order.svg": "residuals in CSV row order",
    "chart-shape.svg": "shape of the residuals' scatter",
    "chart-pull.svg": "each row's pull on the line",
}


def _downloads(r: FitReport, files: Sequence[str]) -> list[tuple[str, str, str]]:
    out: list[tuple[str, str, str]] = []
    for name, what in _DESCRIBED.items():
        if name in files:
            out.append((name, name, what))
    if "tables.xlsx" in files:
        out.append(("tables.xlsx", "tables.xlsx", "the tables above in one workbook, a sheet each"))
    original = r.source.rsplit("/", 1)[-1]
    out += [
        (f, f"original file ({original})", "the data file exactly as delivered")
        for f in files
        if f.startswith("source-")
    ]
    out += [
        (f, f, f"static image of the chart: {_CHART_NAMES[f]} (for print and mail)") for f in files if f in _CHART_NAMES
    ]
    return out


def render_dataset(
    ctx: SiteContext,
    r: FitReport,
    files: Sequence[str],
    prev: tuple[str, str] | None,
    nxt: tuple[str, str] | None,
) -> str:
    """The page of one dataset."""
    env = environment(ctx.theme)
    units = dict(r.units)
    cutoffs = dict(r.cutoffs)
    ok = r.status != "error"
    chart_specs = charts.dataset_charts(r) if ok else {}
    x_label = _label(r.chart.x if r.chart else None, units)
    fit_caption = (
        f"{r.response} against {x_label}: the fitted line, its {fmt.level(r.level)} confidence band for the mean "
        f"(darker) and prediction band for single readings (lighter)"
        + (", the line of equality y = x (where the methods would agree)" if r.purpose == "comparison" else "")
        + (", and the other lines listed below" if r.lines else "")
        + (
            f"; the pooled line is a contrast only: the slopes differ by {r.groups.column}, so each "
            f"{r.groups.column}'s own line is the one to use"
            if r.pooled_contrast and r.groups
            else ""
        )
        + ("; flagged rows are drawn as larger squares." if r.flagged else ".")
    )
    return _render(
        env,
        "dataset.html",
        **_common(ctx, "../../", "dataset"),
        r=r,
        charts=chart_specs,
        sentence=sentence(r) if ok else "",
        downloads=_downloads(r, files),
        prev={"dataset": prev[0], "title": prev[1]} if prev else None,
        next={"dataset": nxt[0], "title": nxt[1]} if nxt else None,
        cutoffs=cutoffs,
        x_label=x_label,
        fit_caption=fit_caption,
        pull_limit=charts.influence_limit(r) if ok else None,
        variation=variation.parts(r) if ok else (),
        resid_unit=units.get(r.chart.y, "") if r.chart else "",
    )


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
        level_text=fmt.level(levels[0]) if len(levels) == 1 else "confidence",
        mixed_levels=len(levels) > 1,
    )


def render_page(ctx: SiteContext, template: str, page: str, **values: Any) -> str:
    """Any other top-level page (e.g. the change report)."""
    return _render(environment(ctx.theme), template, **_common(ctx, "", page), **values)


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


def _render(env: jinja2.Environment, name: str, **values: Any) -> str:
    """Render a theme template; Jinja's errors (a user theme's typo) become a message naming file and line."""
    try:
        return _with_policy(env.get_template(name).render(**values))
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
