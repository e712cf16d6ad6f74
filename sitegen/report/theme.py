"""Themes: a folder with ``templates/``, ``static/`` and ``theme.toml``.

A user theme overrides any template or static file of the default theme and
inherits the rest.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

from sitegen.errors import SiteConfigError


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

    @property
    def chart_colors(self) -> dict[str, Any]:
        colors: dict[str, Any] = json.loads(self.charts_json)
        return colors


def _read_theme_toml(folder: Path) -> dict[str, Any]:
    path = folder / "theme.toml"
    if not path.is_file():
        return {}
    import tomllib  # noqa: PLC0415 - only a theme of the user's own has this file

    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise SiteConfigError(f"theme file {path.name} in {folder.name} cannot be read: {exc}") from exc


@cache
def load_theme(choice: str, data_dir: Path) -> Theme:
    """The theme named in site.toml: "default", or a folder path relative to the data folder."""
    base = default_theme_dir()
    folders = [base]
    if choice not in ("", "default"):
        user = (data_dir / choice).resolve()
        if not user.is_dir():
            raise SiteConfigError(
                f"site.toml: theme folder {choice!r} does not exist",
                hint='use theme = "default" or a folder relative to the data folder',
            )
        folders.insert(0, user)
    charts: dict[str, Any] = {}
    for folder in reversed(folders):  # per colour scheme, key by key: a user theme may set one colour only
        for scheme, colours in _read_theme_toml(folder).get("charts", {}).items():
            charts[scheme] = {**charts.get(scheme, {}), **colours} if isinstance(colours, dict) else colours
    return Theme(
        name=choice or "default",
        template_dirs=tuple(f / "templates" for f in folders if (f / "templates").is_dir()),
        static_dirs=tuple(f / "static" for f in folders if (f / "static").is_dir()),
        charts_json=json.dumps(charts, sort_keys=True),
    )
