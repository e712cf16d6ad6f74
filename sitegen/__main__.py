"""``python -m sitegen``."""

from __future__ import annotations

from sitegen.cli import entrypoint

if __name__ == "__main__":
    entrypoint()
