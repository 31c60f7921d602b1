#!/usr/bin/env bash
# Set up .venv (first run only) and run the whole pipeline on the bundled demo data.
set -euo pipefail
source "$(dirname "$0")/_setup.sh" test
cd "$root"
semisup demo --out "${1:-semisup-demo}"
