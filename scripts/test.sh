#!/usr/bin/env bash
# Set up .venv (first run only) and run the whole test suite on all cores.
set -euo pipefail
source "$(dirname "$0")/_setup.sh" test
cd "$root"
# The report test renders report.html in headless Chromium. Install it from the system packages
# when we are root and it is missing; without it that one test skips and says why.
if ! command -v chromium >/dev/null 2>&1 && [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
  echo "installing chromium for the report rendering test (system packages)..."
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium) \
    >/tmp/semisup-chromium-install.log 2>&1 \
    || echo "chromium could not be installed; see /tmp/semisup-chromium-install.log"
fi
python -m pytest -n "${SEMISUP_TEST_WORKERS:-auto}" -q "$@"
