"""Shared assets: the Vega / Vega-Lite / vega-embed bundle, the theme's stylesheet and scripts.

Producing the JavaScript bundle with vl-convert takes over a second and about
130 MB the first time in a process, so it is reused from the previous build of
the same site when the versions match, else from the user's cache folder
(``$XDG_CACHE_HOME/sitegen`` or ``~/.cache/sitegen``), and made only when neither has it.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

from sitegen.cache import cache_dir
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


def _ask_bundle_version() -> str:
    import vl_convert as vlc  # noqa: PLC0415

    return (
        f"vl-convert {getattr(vlc, '__version__', '?')}; vega {vlc.get_vega_version()}; "
        f"vega-lite {vlc.get_vegalite_versions()[-1]}; vega-embed {vlc.get_vega_embed_version()}\n"
    )


def _bundle_text() -> str:
    import vl_convert as vlc  # noqa: PLC0415

    text: str = vlc.javascript_bundle()  # type: ignore[call-arg]  # the stub misses the default snippet
    return text


def _write_anew(path: Path, text: str) -> None:
    """A new file at ``path`` (the build folder's files are never rewritten in place; see publish.py)."""
    path.unlink(missing_ok=True)
    path.write_text(text, encoding="utf-8")


def _copy_anew(src: Path, dst: Path) -> None:
    dst.unlink(missing_ok=True)
    shutil.copyfile(src, dst)


def _read(path: Path) -> str | None:
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, ValueError):
        return None


def write_bundle(out: Path, previous: Path | None) -> tuple[str, str]:
    """Put the chart bundle into ``out`` (the site being built); returns the paths written."""
    version = bundle_version()
    target = out / BUNDLE
    written = (BUNDLE, BUNDLE_VERSION)
    target.parent.mkdir(parents=True, exist_ok=True)
    if previous is not None:
        old_bundle = previous / BUNDLE
        if _read(previous / BUNDLE_VERSION) == version and old_bundle.is_file():
            size = old_bundle.stat().st_size
            # ``out`` may already hold it (a build folder that held an earlier site of the same versions)
            if not (_read(out / BUNDLE_VERSION) == version and target.is_file() and target.stat().st_size == size):
                _copy_anew(old_bundle, target)
                _write_anew(out / BUNDLE_VERSION, version)
            return written
    _write_anew(out / BUNDLE_VERSION, version)
    key = "".join(c if c.isalnum() else "-" for c in version.strip())
    cached = cache_dir() / f"vega-bundle-{key}.js"
    if cached.is_file():
        _copy_anew(cached, target)
        return written
    text = _bundle_text()
    _write_anew(target, text)
    try:
        cached.parent.mkdir(parents=True, exist_ok=True)
        tmp = cached.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(cached)
    except OSError:
        pass  # the cache is an optimisation only
    return written


def write_static(out: Path, theme: Theme) -> list[str]:
    """Copy the theme's static files (user theme over default) into ``assets/``; returns the paths written."""
    dest = out / "assets"
    dest.mkdir(parents=True, exist_ok=True)
    written = []
    for folder in reversed(theme.static_dirs):
        for path in sorted(folder.rglob("*")):
            if path.is_file() and not path.name.startswith("."):
                rel = path.relative_to(folder)
                target = dest / rel
                target.parent.mkdir(parents=True, exist_ok=True)
                _copy_anew(path, target)
                written.append(f"assets/{rel.as_posix()}")
    return written
