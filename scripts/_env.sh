# Sourced by demo.sh and test.sh: create .venv beside the repo and install chimeline into it.
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
PY="${PYTHON:-python3}"
VENV="$ROOT/.venv"
if [ ! -x "$VENV/bin/python" ]; then
  "$PY" -m venv "$VENV"
fi
STAMP="$VENV/.chimeline-installed"
if [ ! -f "$STAMP" ] || [ "$ROOT/pyproject.toml" -nt "$STAMP" ]; then
  "$VENV/bin/python" -m pip install -q --upgrade pip
  "$VENV/bin/python" -m pip install -q -e "$ROOT[test,e57]"
  touch "$STAMP"
fi
if ! "$VENV/bin/python" -c "import open3d" 2>/dev/null; then
  echo "open3d cannot load: on Debian/Ubuntu install libusb-1.0-0 (sudo apt-get install libusb-1.0-0)" >&2
  exit 1
fi
