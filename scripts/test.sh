#!/usr/bin/env bash
# Set up .venv (first run only) and run the whole test suite on all cores.
set -euo pipefail
source "$(dirname "$0")/_setup.sh" test
cd "$root"
python -m pytest -n "${SEMISUP_TEST_WORKERS:-auto}" -q "$@"
