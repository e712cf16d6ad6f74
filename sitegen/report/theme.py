"""Themes: a folder with ``templates/``, ``static/`` and ``theme.toml``.

A user theme overrides any template or static file of the default theme and
inherits the rest. A theme named in site.toml must lie inside the data folder; a
theme folder named on the command line (``--theme``) is the user's own choice and
may lie anywhere. Either way its files are read only when they lie inside the
theme's own folder (a link out of it is ignored), and its templates render in
Jinja2's sandbox (``pages.environment``): a theme cannot run code on the machine
that builds the site. A theme kept in the data folder cannot run code in readers'
browsers either: of its static files only style sheets, pictures and fonts are
published (``assets.write_static``), never scripts or pages.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sitegen.confine import is_inside, read_inside
from sitegen.errors import OutsideFolderError, SiteConfigError


def default_theme_dir() -> Path:
    """The default theme: ``themes/default`` at the top of a source checkout (and so in an editable install),
    shipped inside the package as ``sitegen/themes/default`` in a wheel (pyproject.toml maps the folder)."""
    package = Path(__file__).resolve().parent.parent  # the sitegen package folder
    shipped = package / "themes" / "default"
    if shipped.is_dir():
        return shipped
    return package.parent / "themes" / "default"


@dataclass(frozen=True, slots=True)
class Theme:
    """Template and static folders, most specific first, and the chart colours."""

    name: str
    template_dirs: tuple[Path, ...]
    static_dirs: tuple[Path, ...]
    charts_json: str  # chart colours per colour scheme, as JSON (kept as text so the theme is hashable)
    user_templates: bool = False  # a user theme has templates: render every page in the sandbox
    untrusted_static: Path | None = None  # the static folder of a theme kept in the data folder (no scripts)

    @property
    def sandboxed(self) -> bool:
        return self.user_templates

    @property
    def chart_colors(self) -> dict[str, Any]:
        colors: dict[str, Any] = json.loads(self.charts_json)
        return colors


def _read_theme_toml(folder: Path, shown: str) -> dict[str, Any]:
    path = folder / "theme.toml"
    if not os.path.lexists(path):
        return {}
    import tomllib  # noqa: PLC0415 - on the first theme.toml read (the default theme has one)

    try:
        return tomllib.loads(read_inside(path, folder, where="theme folder").decode("utf-8"))
    except OutsideFolderError as exc:
        raise SiteConfigError(f"theme file theme.toml in {shown} {exc.message}") from None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise SiteConfigError(f"theme file theme.toml in {shown} cannot be read: {exc}") from exc


def _user_theme(choice: str, data_dir: Path, trusted: Path | None) -> Path:
    """The user theme's folder: the one given on the command line, else site.toml's (inside the data folder)."""
    if trusted is not None:
        if not trusted.is_dir():
            raise SiteConfigError(f"the theme folder {trusted} given with --theme does not exist or is not a folder")
        return trusted.resolve()
    user = data_dir / choice
    if not is_inside(user, data_dir):
        raise SiteConfigError(
            f"site.toml: theme folder {choice!r} lies outside the data folder (a path to elsewhere or a link); "
            "it is not used",
            hint="keep the theme in the data folder, or name a folder you trust with sitegen build --theme FOLDER",
        )
    if not user.is_dir():
        raise SiteConfigError(
            f"site.toml: theme folder {choice!r} does not exist",
            hint='use theme = "default" or a folder relative to the data folder',
        )
    return user.resolve()


def load_theme(choice: str, data_dir: Path, trusted: Path | None = None) -> Theme:
    """The theme: ``trusted`` (a folder named on the command line), else the one named in site.toml:
    "default" or a folder path relative to (and inside) the data folder."""
    base = default_theme_dir()
    folders = [base]
    shown = choice
    if trusted is not None or choice not in ("", "default"):
        user = _user_theme(choice, data_dir, trusted)
        shown = str(trusted) if trusted is not None else choice
        folders.insert(0, user)
    charts: dict[str, Any] = {}
    for folder in reversed(folders):  # per colour scheme, key by key: a user theme may set one colour only
        for scheme, colours in _read_theme_toml(folder, shown).get("charts", {}).items():
            charts[scheme] = {**charts.get(scheme, {}), **colours} if isinstance(colours, dict) else colours
    templates = tuple(f / "templates" for f in folders if _folder_inside(f / "templates", f))
    return Theme(
        name=shown or "default",
        template_dirs=templates,
        static_dirs=tuple(f / "static" for f in folders if _folder_inside(f / "static", f)),
        charts_json=json.dumps(charts, sort_keys=True),
        user_templates=any(t.parent != base for t in templates),
        untrusted_static=next(
            (f / "static" for f in folders if f != base and trusted is None and _folder_inside(f / "static", f)), None
        ),
    )


def _folder_inside(path: Path, theme: Path) -> bool:
    return path.is_dir() and is_inside(path, theme)
