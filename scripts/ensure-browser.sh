#!/usr/bin/env bash
# Make sure the browser tests (tests/test_browser.py) can run: they drive Debian's Chromium at
# /usr/bin/chromium through Playwright for Python. No browser is ever downloaded: Playwright's own
# browser download is never used, only the distribution's package.
# Usage: scripts/ensure-browser.sh [PYTHON]   (PYTHON defaults to .venv/bin/python)
set -euo pipefail
cd "$(dirname "$0")/.."
python="${1:-.venv/bin/python}"

if [ ! -x /usr/bin/chromium ]; then
  if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null; then
    echo "Installing Debian's chromium for the browser tests..."
    (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null) \
      || echo "warning: could not install chromium; the browser tests will be skipped"
  else
    echo "warning: /usr/bin/chromium not found; the browser tests will be skipped (as root: apt-get install chromium)"
  fi
fi

if [ -x "$python" ]; then
  if ! "$python" -c "import playwright.sync_api" 2>/dev/null; then
    echo "warning: Playwright for Python is missing from $python; install the test extras: pip install -e '.[test]'"
  fi
fi

if [ -x /usr/bin/chromium ]; then
  version=$(/usr/bin/chromium --headless=new --version 2>/dev/null || true)
  echo "browser tests will use ${version:-/usr/bin/chromium}"
fi
