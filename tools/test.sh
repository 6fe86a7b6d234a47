#!/usr/bin/env bash
# Set up everything the test suite needs on a fresh Debian machine and run it.
# Browser tests need Debian's Chromium: installed here when running as root,
# otherwise they are skipped with a note (CI runs as root and installs it).
set -euo pipefail
cd "$(dirname "$0")/.."
if ! command -v chromium >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
      chromium fonts-liberation >/dev/null
  else
    echo "note: Chromium is not installed; browser tests will be skipped" >&2
  fi
fi
python3 -m venv .venv
.venv/bin/pip install -q --disable-pip-version-check -e '.[test]'
exec .venv/bin/python -m pytest "$@"
