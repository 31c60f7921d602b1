# Sourced by the other scripts: make .venv with everything semisup needs (idempotent).
# torch is installed first and pinned to the CPU build so pip never pulls a CUDA build.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
py=${SEMISUP_PYTHON:-$(command -v python3.11 || command -v python3)}
venv="$root/.venv"
stamp="$venv/.semisup-installed"
if [ ! -x "$venv/bin/python" ]; then
  "$py" -m venv "$venv"
fi
if [ ! -f "$stamp" ] || [ "$root/pyproject.toml" -nt "$stamp" ]; then
  "$venv/bin/python" -m pip install -q --upgrade pip >/dev/null
  "$venv/bin/python" -m pip install -q "torch==2.13.0"
  "$venv/bin/python" -m pip install -q -e "$root[$1]"
  touch "$stamp"
fi
export PATH="$venv/bin:$PATH"
