"""Shared assets: the Vega / Vega-Lite / vega-embed bundle, the theme's stylesheet and scripts.

Producing the JavaScript bundle with vl-convert takes over a second and about
130 MB, so it is made once per set of library versions, in a separate process,
and kept in the user's cache folder (``$XDG_CACHE_HOME/sitegen`` or
``~/.cache/sitegen``); each site gets a byte-for-byte copy.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

from sitegen.cache import cache_dir
from sitegen.confine import files_inside, read_inside
from sitegen.errors import OutsideFolderError
from sitegen.publish import write_new
from sitegen.report.theme import Theme

BUNDLE = "assets/vendor/vega-bundle.js"
BUNDLE_VERSION = "assets/vendor/vega-bundle.version"


def bundle_version() -> str:
    """Versions of the libraries inside the bundle.

    Asking vl-convert means loading its native library (a visible part of a small rebuild), so the
    answer is remembered in the user cache for each installed version of the package.
    """
    from sitegen.cache import read_record, write_record  # noqa: PLC0415
    from sitegen.versions import library_versions  # noqa: PLC0415

    installed = library_versions(("vl-convert-python",))["vl-convert-python"]
    name = "bundle-versions.json"
    known = read_record(name)
    if isinstance(known, dict) and isinstance(known.get(installed), str) and installed != "unknown":
        return str(known[installed])
    text = _ask_bundle_version()
    write_record(name, {installed: text})
    return text


_ASK_VERSION = (
    "import sys, vl_convert as v; sys.stdout.write("
    "f\"vl-convert {getattr(v, '__version__', '?')}; vega {v.get_vega_version()}; \""
    'f"vega-lite {v.get_vegalite_versions()[-1]}; vega-embed {v.get_vega_embed_version()}\\n")'
)
_ASK_BUNDLE = "import sys, vl_convert as v; sys.stdout.buffer.write(v.javascript_bundle().encode('utf-8'))"


def _ask(code: str) -> bytes:
    """Run ``code`` in a separate Python process and return what it wrote.

    The chart converter starts threads of its own when used; kept out of the build's process, a
    process pool forked from it can never inherit their locks (see executor.py).
    """
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"the chart converter failed: {done.stderr.decode('utf-8', 'replace')[-400:]}")
    return done.stdout


def _ask_bundle_version() -> str:
    return _ask(_ASK_VERSION).decode("utf-8")


def _read(path: Path) -> bytes | None:
    try:
        return path.read_bytes()
    except OSError:
        return None


def write_bundle(out: Path) -> tuple[str, str]:
    """Put the chart bundle into ``out`` (the site being built); returns the paths written.

    The bundle comes from the user cache, where it is made once per set of library versions; a copy
    already in ``out`` (a spare of the same versions) stays when it is byte for byte the cached one.
    """
    version = bundle_version().encode("utf-8")
    target = out / BUNDLE
    target.parent.mkdir(parents=True, exist_ok=True)
    key = "".join(c if c.isalnum() else "-" for c in version.decode("utf-8").strip())
    cached = cache_dir() / f"vega-bundle-{key}.js"
    text = _read(cached)
    if text is None:
        text = _ask(_ASK_BUNDLE)
        try:
            cached.parent.mkdir(parents=True, exist_ok=True)
            tmp = cached.with_suffix(f".{os.getpid()}.tmp")
            tmp.write_bytes(text)
            tmp.replace(cached)
        except OSError:
            pass  # the cache is an optimisation only
    if _read(target) != text:
        write_new(target, text)
    if _read(out / BUNDLE_VERSION) != version:
        write_new(out / BUNDLE_VERSION, version)
    return (BUNDLE, BUNDLE_VERSION)


BUILT_AT = "assets/built.js"


def write_built_at(out: Path, built_at: str) -> str:
    """``assets/built.js``: puts the build time into every page's ``[data-built-at]`` element.

    The time lives in this one small file (and build.json), so the pages themselves stay byte-identical
    between builds of the same input and need not be written again when only the time changed.
    """
    import json  # noqa: PLC0415

    shown = built_at.replace("T", " ").replace("+00:00", " UTC")
    text = (
        "(function () {\n"
        f"  var iso = {json.dumps(built_at)}, shown = {json.dumps(shown)};\n"
        '  document.querySelectorAll("[data-built-at]").forEach(function (el) {\n'
        '    el.textContent = shown; el.setAttribute("datetime", iso);\n'
        "  });\n"
        "})();\n"
    )
    target = out / BUILT_AT
    target.parent.mkdir(parents=True, exist_ok=True)
    target.unlink(missing_ok=True)  # a new file, never one rewritten in place
    target.write_text(text, encoding="utf-8")
    return BUILT_AT


#: What a theme kept in the data folder may publish: style sheets, pictures and fonts (no scripts, no pages).
UNTRUSTED_STATIC = (
    ".css",
    ".png",
    ".jpg",
    ".jpeg",
    ".gif",
    ".webp",
    ".svg",
    ".ico",
    ".woff",
    ".woff2",
    ".ttf",
    ".otf",
)


def write_static(out: Path, theme: Theme) -> list[str]:
    """Copy the theme's static files (user theme over default) into ``assets/``; returns the paths written."""
    dest = out / "assets"
    dest.mkdir(parents=True, exist_ok=True)
    written = []
    for folder in reversed(theme.static_dirs):
        for rel, path in files_inside(folder):  # a link out of the theme folder is never followed
            if folder == theme.untrusted_static and not rel.lower().endswith(UNTRUSTED_STATIC):
                continue  # a script or page from the data folder would run in every reader's browser
            try:
                data = read_inside(path, folder, where="theme folder")
            except OutsideFolderError:
                continue
            target = dest / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            write_new(target, data)
            written.append(f"assets/{rel}")
    return sorted(set(written))
