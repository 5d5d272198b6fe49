# Sourced by demo.sh and test.sh: install the system libraries a fresh Debian/Ubuntu machine lacks, create .venv
# beside the repo and install chimeline into it. The caller sets SYSTEM_PACKAGES before sourcing.
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
PY="${PYTHON:-python3}"
VENV="$ROOT/.venv"

# 1. system packages (Debian/Ubuntu): libusb-1.0-0 for open3d; the test run also needs chromium and poppler-utils
if command -v dpkg >/dev/null 2>&1; then
  missing=()
  for pkg in ${SYSTEM_PACKAGES:-}; do
    dpkg -s "$pkg" >/dev/null 2>&1 || missing+=("$pkg")
  done
  if [ "${#missing[@]}" -gt 0 ]; then
    if [ "$(id -u)" = 0 ]; then
      echo "first run: installing system packages ${missing[*]} with apt-get" >&2
      log="$(mktemp)"
      if ! { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}"; } >"$log" 2>&1; then
        cat "$log" >&2
        echo "apt-get could not install ${missing[*]}" >&2
        exit 1
      fi
      rm -f "$log"
    else
      echo "missing system packages; install them with: sudo apt-get install ${missing[*]}" >&2
      exit 1
    fi
  fi
fi

# 2. the virtual environment with chimeline and its Python packages
if [ ! -x "$VENV/bin/python" ]; then
  echo "first run: creating .venv and installing (about 2 min)" >&2
  "$PY" -m venv "$VENV"
fi
STAMP="$VENV/.chimeline-installed"
if [ ! -f "$STAMP" ] || [ "$ROOT/pyproject.toml" -nt "$STAMP" ]; then
  [ -f "$STAMP" ] && echo "pyproject.toml changed: updating .venv" >&2
  log="$VENV/install.log"
  if ! { "$VENV/bin/python" -m pip install -q --disable-pip-version-check --upgrade pip &&
         "$VENV/bin/python" -m pip install -q --disable-pip-version-check -e "$ROOT[test,e57]"; } >"$log" 2>&1; then
    cat "$log" >&2
    echo "installing chimeline into .venv failed (log above, also in $log)" >&2
    exit 1
  fi
  touch "$STAMP"
fi
