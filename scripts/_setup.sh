# Sourced by the other scripts: make .venv with everything semisup needs (idempotent).
# torch is installed first and pinned to 2.13.0, the CPU build, so pip never pulls a CUDA build:
# - SEMISUP_TORCH_INDEX=URL installs torch from that wheel index (a CPU-only index, see
#   README "Set-up without a CUDA download") instead of the default one;
# - without it, a dry run first checks what the default index would serve and stops, saying
#   so, when that is a CUDA build (its nvidia-* packages are several GB).
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
py=${SEMISUP_PYTHON:-$(command -v python3.11 || command -v python3)}
venv="$root/.venv"
stamp="$venv/.semisup-installed-$1"
log="$venv/install.log"
torch_pin="torch==2.13.0"

_semisup_torch() {
  local pip=("$venv/bin/python" -m pip)
  if [ -n "${SEMISUP_TORCH_INDEX:-}" ]; then
    echo "installing $torch_pin from SEMISUP_TORCH_INDEX=$SEMISUP_TORCH_INDEX"
    "${pip[@]}" install --index-url "$SEMISUP_TORCH_INDEX" "$torch_pin"
    return
  fi
  if "$venv/bin/python" -c "import torch, sys; sys.exit(torch.__version__.split('+')[0] != '2.13.0')" \
      2>/dev/null; then
    return  # already there
  fi
  local report="$venv/torch-dry-run.json"
  "${pip[@]}" install --dry-run --ignore-installed --quiet --report "$report" "$torch_pin"
  if "$venv/bin/python" - "$report" <<'PY'
import json, sys
items = json.load(open(sys.argv[1], encoding="utf-8")).get("install", [])
names = [i["metadata"]["name"].lower() for i in items]
versions = [i["metadata"]["version"] for i in items if i["metadata"]["name"].lower() == "torch"]
cuda = any(n.startswith("nvidia-") for n in names) or any("+cu" in v for v in versions)
sys.exit(1 if cuda else 0)
PY
  then
    "${pip[@]}" install "$torch_pin"
  else
    echo "error: the default package index serves a CUDA build of $torch_pin (several GB of" \
         "nvidia-* packages); set SEMISUP_TORCH_INDEX to a CPU-only wheel index and run" \
         "again (see README, 'Set-up without a CUDA download')" >&2
    return 3
  fi
}

if [ ! -x "$venv/bin/python" ]; then
  "$py" -m venv "$venv"
fi
if [ ! -f "$stamp" ] || [ "$root/pyproject.toml" -nt "$stamp" ]; then
  echo "setting up $venv (first run only; pip output in $log)..."
  status=0
  { "$venv/bin/python" -m pip install --upgrade pip \
      && _semisup_torch \
      && "$venv/bin/python" -m pip install -e "$root[$1]"; } >"$log" 2>&1 || status=$?
  if [ "$status" -ne 0 ]; then
    tail -n 30 "$log" >&2
    echo "error: installing semisup's dependencies failed; the full pip output is in $log" >&2
    exit 1
  fi
  touch "$stamp"
fi
export PATH="$venv/bin:$PATH"
