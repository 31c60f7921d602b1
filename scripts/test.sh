#!/usr/bin/env bash
# Set up .venv (first run only) and run the whole test suite on all cores.
set -euo pipefail
source "$(dirname "$0")/_setup.sh" test
cd "$root"
# The report test renders report.html in headless Chromium (Debian's chromium package). This
# script installs system packages only under CI (CI=true, run as root); anywhere else it says
# how to install Chromium and the rendering tests skip.
if ! command -v chromium >/dev/null 2>&1 && ! command -v chromium-browser >/dev/null 2>&1; then
  if [ "${CI:-}" = "true" ] && [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
    echo "CI: installing chromium for the report rendering test (system packages)..."
    (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium) \
      >/tmp/semisup-chromium-install.log 2>&1 \
      || echo "chromium could not be installed; see /tmp/semisup-chromium-install.log"
  else
    echo "note: chromium is not installed, so the report rendering tests will skip" \
         "(install it with 'apt-get install chromium' to run them)"
  fi
fi
python -m pytest -n "${SEMISUP_TEST_WORKERS:-auto}" -q "$@"
