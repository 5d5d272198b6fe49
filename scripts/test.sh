#!/usr/bin/env bash
# Set up the environment (first run only) and run the test suite. Extra arguments go to pytest.
# The report tests render in headless Chromium and read PDFs with pdftotext (Debian: chromium, poppler-utils).
SYSTEM_PACKAGES="libusb-1.0-0 chromium poppler-utils"
source "$(dirname "$0")/_env.sh"
cd "$ROOT"
set +e
"$VENV/bin/python" -m pytest "$@"
rc=$?
if [ "$rc" -eq 5 ]; then
  echo "no tests were collected: treating as a failure" >&2
  exit 1
fi
exit "$rc"
