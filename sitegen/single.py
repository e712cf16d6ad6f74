"""One self-contained HTML file from a built site, for small sites sent by e-mail.

``sitegen pack SITE -o report.html`` joins the index and every dataset page of a
built site into one file: stylesheet, page script and chart library inlined, each
dataset a section of its own (ids prefixed so they stay unique, headings one level
down), links between pages turned into links within the file, and links to
downloads (which a single file cannot carry) turned into plain text that names
the file in the full site. Larger sites should travel as a zip.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from sitegen.confine import read_inside
from sitegen.errors import OutsideFolderError, PackError
from sitegen.publish import MARKER
from sitegen.report.policy import meta, single_file_policy

MAX_DATASETS = 40  # beyond this a single page is too long to read; send the zip

_MAIN = re.compile(r"<main\b[^>]*>(.*)</main>", re.S)
_ARTICLE = re.compile(r'<article class="dataset"[^>]*>(.*)</article>', re.S)
_SECTION_DOWN = re.compile(r'<section aria-labelledby="h-down">.*?</section>', re.S)
_ID_ATTRS = re.compile(r'\b(id|for|aria-labelledby|aria-describedby|aria-controls|data-target)="([^"]+)"')
_HASH_LINK = re.compile(r'href="#([^"]+)"')
_DATASET_LINK = re.compile(
    r'href="(?:\.\./\.\./)?(?:\.\./)?datasets/([a-z0-9-]+)/index\.html"|href="\.\./([a-z0-9-]+)/index\.html"'
)
_LOCAL_LINK = re.compile(r'<a\b[^>]*\bhref="(?!#|https?:|mailto:)([^"]*)"[^>]*>(.*?)</a>', re.S)
_INDEX_LINK = re.compile(r'href="(?:\.\./\.\./)?index\.html(?:\?[^"#]*)?"')
_HEADING = re.compile(r"<(/?)h([1-5])\b")
_CHART_THEME = re.compile(r'<script type="application/json" id="chart-theme">.*?</script>', re.S)


def _script_text(js: str) -> str:
    """JavaScript that cannot end its <script> element early."""
    return js.replace("</script", "<\\/script").replace("<!--", "<\\!--")


def _prefixed(html: str, prefix: str) -> str:
    html = _ID_ATTRS.sub(lambda m: f'{m.group(1)}="{" ".join(prefix + v for v in m.group(2).split())}"', html)
    return _HASH_LINK.sub(lambda m: f'href="#{prefix}{m.group(1)}"', html)


def _internal_links(html: str) -> str:
    def dataset(m: re.Match[str]) -> str:
        return f'href="#ds-{m.group(1) or m.group(2)}"'

    html = _DATASET_LINK.sub(dataset, html)
    html = _INDEX_LINK.sub('href="#top"', html)
    # Downloads cannot travel inside one file: keep their names as text.
    return _LOCAL_LINK.sub(lambda m: f'<span class="file-ref">{m.group(2)}</span>', html)


def _demoted(html: str) -> str:
    return _HEADING.sub(lambda m: f"<{m.group(1)}h{int(m.group(2)) + 1}", html)


def _read(site: Path, rel: str) -> str:
    """A file of the site as text; a file that leads outside the site (a link put into it) is refused."""
    try:
        return read_inside(site / rel, site, where="site folder").decode("utf-8")
    except OutsideFolderError as exc:
        raise PackError(f"{rel} in {site} {exc.message}", hint="build the site again") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise PackError(f"{rel} in {site} cannot be read: {exc}", hint="build the site again") from exc


def _dataset_slugs(site: Path) -> list[str]:
    from sitegen.records import BuildRecord  # noqa: PLC0415

    try:
        return [e.dataset for e in BuildRecord.from_json(json.loads(_read(site, "build.json"))).datasets]
    except (OSError, ValueError) as exc:
        raise PackError(f"{site} has no readable build.json", hint="build the site again") from exc


def single_file(site: Path) -> str:
    """The whole site as one HTML document."""
    if not (site / MARKER).is_file() or not (site / "index.html").is_file():
        raise PackError(f"{site} is not a site built by sitegen", hint="run sitegen build first")
    slugs = _dataset_slugs(site)
    if len(slugs) > MAX_DATASETS:
        raise PackError(
            f"{site} has {len(slugs)} datasets, too many for one readable page (at most {MAX_DATASETS})",
            hint="send the site as a zip instead: sitegen pack SITE -o site.zip",
        )
    index = _read(site, "index.html")
    found = _MAIN.search(index)
    title = re.search(r"<title>(.*?)</title>", index, re.S)
    theme = _CHART_THEME.search(index)
    if found is None or title is None or theme is None:
        raise PackError("the site's pages do not have the structure a single file needs", hint="use the zip")
    parts = [_internal_links(_SECTION_DOWN.sub("", found.group(1)))]
    for slug in slugs:
        page = _read(site, f"datasets/{slug}/index.html")
        article = _ARTICLE.search(page)
        if article is None:
            raise PackError(f"the page of {slug} does not have the structure a single file needs")
        body = _SECTION_DOWN.sub("", article.group(1))
        body = _internal_links(_prefixed(_demoted(body), f"{slug}--"))
        parts.append(
            f'<article class="dataset" id="ds-{slug}" data-chart-scope="{slug}">{body}'
            '<p class="back"><a href="#top">Back to the list of datasets</a></p></article>'
        )
    css = _read(site, "assets/style.css")
    js = _read(site, "assets/site.js")
    bundle = _read(site, "assets/vendor/vega-bundle.js")
    if (site / "assets" / "built.js").is_file():  # the build time shown on each page
        js = _read(site, "assets/built.js") + "\n" + js
    safe_css = css.replace("</style", "<\\/style")
    footer = re.search(r'<footer class="wrap footer">.*?</footer>', index, re.S)
    foot = _internal_links(footer.group(0)) if footer else ""
    scripts = [_script_text(bundle), _script_text(js)]
    policy = meta(single_file_policy(scripts))  # its own two scripts, by hash; nothing from anywhere
    return (
        f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n{policy}'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{title.group(1)}</title>\n<style>\n{safe_css}\n</style>\n</head>\n"
        f'<body id="top">\n<main id="main" class="wrap single">\n'
        '<p class="note">This single file holds the whole report; '
        "the downloads named in it are in the full site.</p>\n"
        + "\n".join(parts)
        + f"\n</main>\n{foot}\n{theme.group(0)}\n<script>{scripts[0]}</script>\n"
        f"<script>{scripts[1]}</script>\n</body>\n</html>\n"
    )


def write_single_file(site: Path, target: Path) -> int:
    """Write the single-file report; returns its size in bytes."""
    if target.resolve().is_relative_to(site.resolve()):
        raise PackError("the report cannot be written inside the site it packs", hint="write it next to the site")
    text = single_file(site)
    tmp = target.with_name(f".{target.name}.partial")
    try:
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(target)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise PackError(f"cannot write {target}: {exc.strerror or exc}") from exc
    return target.stat().st_size
