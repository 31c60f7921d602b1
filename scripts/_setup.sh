# Sourced by the other scripts: make .venv with everything semisup needs (idempotent).
# torch is installed first and pinned to the CPU build so pip never pulls a CUDA build.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
py=${SEMISUP_PYTHON:-$(command -v python3.11 || command -v python3)}
venv="$root/.venv"
stamp="$venv/.semisup-installed-$1"
log="$venv/install.log"
if [ ! -x "$venv/bin/python" ]; then
  "$py" -m venv "$venv"
fi
if [ ! -f "$stamp" ] || [ "$root/pyproject.toml" -nt "$stamp" ]; then
  echo "setting up $venv (first run only; pip output in $log)..."
  if ! { "$venv/bin/python" -m pip install --upgrade pip \
         && "$venv/bin/python" -m pip install "torch==2.13.0" \
         && "$venv/bin/python" -m pip install -e "$root[$1]"; } >"$log" 2>&1; then
    tail -n 30 "$log" >&2
    echo "error: installing semisup's dependencies failed; the full pip output is in $log" >&2
    exit 1
  fi
  touch "$stamp"
fi
export PATH="$venv/bin:$PATH"
