"""sitegen: fit straight lines to a folder of CSV datasets and publish a static report site.

``sitegen.build_site(data_dir, out_dir, **options)`` builds a site from Python (see :mod:`sitegen.api`).
"""

from __future__ import annotations

__version__ = "0.1.0"

from sitegen.api import DatasetOutcome, SiteResult, build_site  # light: the build loads on first use

__all__ = ["DatasetOutcome", "SiteResult", "__version__", "build_site"]
