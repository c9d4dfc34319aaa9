#!/usr/bin/env bash
# Fluxfence's test command on any machine, fresh or not: installs what the tests need, then
# runs pytest (arguments are passed on, e.g. `scripts/test.sh -m "not browser"`).
#   - Debian's Chromium for the browser tests, when /usr/bin/chromium is missing (never
#     `playwright install`: it downloads a browser of its own);
#   - the package with its test extras (pip install -e ".[test]").
set -euo pipefail
cd "$(dirname "$0")/.."

if [ ! -x /usr/bin/chromium ]; then
  echo "installing Debian's chromium for the browser tests ..."
  SUDO=""
  if [ "$(id -u)" != "0" ]; then SUDO="sudo"; fi
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium >/dev/null
fi

python3 -m pip install -q --disable-pip-version-check -e ".[test]"

# pytest's own closing line (passed / failed counts) stays the last thing printed
exec python3 -m pytest "$@"
