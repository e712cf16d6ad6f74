"""sitegen: fit straight lines to a folder of CSV datasets and publish a static report site.

``sitegen.build_site(data_dir, out_dir, **options)`` builds a site from Python (see :mod:`sitegen.api`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

if TYPE_CHECKING:
    from sitegen.api import DatasetOutcome, SiteResult, build_site

__all__ = ["DatasetOutcome", "SiteResult", "__version__", "build_site"]
_API = frozenset({"DatasetOutcome", "SiteResult", "build_site"})


def __getattr__(name: str) -> Any:
    """The Python API's names, loaded on first use: the command line (which imports this package first) does not
    pay for :mod:`sitegen.api` and its dataclasses (about 1 ms of a rebuild with nothing to do)."""
    if name in _API:
        from sitegen import api  # noqa: PLC0415

        return getattr(api, name)
    raise AttributeError(f"module 'sitegen' has no attribute {name!r}")
