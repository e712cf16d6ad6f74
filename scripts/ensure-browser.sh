#!/usr/bin/env bash
# The browser tests drive Debian's Chromium through Playwright; no browser is ever downloaded.
set -euo pipefail
if [ -x /usr/bin/chromium ]; then exit 0; fi
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null; then
  echo "Installing Debian's chromium for the browser tests..."
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null) \
    || echo "warning: could not install chromium; browser tests will be skipped"
else
  echo "warning: /usr/bin/chromium not found; browser tests will be skipped (apt-get install chromium)"
fi
