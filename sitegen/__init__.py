"""sitegen: fit straight lines to a folder of CSV datasets and publish a static report site."""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__"]
