"""report.pdf: the HTML report printed to PDF by headless Chromium (its print CSS applies)."""
from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..errors import DependencyError, OutputError

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


def find_chromium() -> str | None:
    """The browser to print with: $CHIMELINE_CHROMIUM, else the first of BROWSERS on the PATH."""
    env = os.environ.get("CHIMELINE_CHROMIUM")
    if env:
        return env if shutil.which(env) else None
    for name in BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


def html_to_pdf(html_path, pdf_path, timeout: float = 180.0) -> None:
    """Print ``html_path`` to ``pdf_path``; one-line errors when Chromium is missing or fails."""
    exe = find_chromium()
    if exe is None:
        raise DependencyError("report.pdf needs Chromium (Debian/Ubuntu: sudo apt-get install chromium, or set "
                              "CHIMELINE_CHROMIUM); run without --pdf / output.pdf to skip it")
    html_path, pdf_path = Path(html_path).resolve(), Path(pdf_path).resolve()
    with tempfile.TemporaryDirectory(prefix="chimeline-chromium-") as profile:
        cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               f"--user-data-dir={profile}", "--no-pdf-header-footer", f"--print-to-pdf={pdf_path}",
               html_path.as_uri()]
        try:
            r = subprocess.run(cmd, capture_output=True, timeout=timeout)
        except subprocess.TimeoutExpired:
            raise OutputError(f"{pdf_path}: Chromium did not finish printing within {timeout:.0f} s") from None
        except OSError as exc:
            raise DependencyError(f"{exe}: cannot start Chromium ({exc})") from None
    if r.returncode != 0 or not pdf_path.exists() or pdf_path.stat().st_size == 0:
        tail = (r.stderr or b"").decode(errors="replace").strip().splitlines()
        raise OutputError(f"{pdf_path}: Chromium could not print the report (exit {r.returncode}"
                          f"{': ' + tail[-1][:160] if tail else ''})")


def pdf_bytes(html: str, timeout: float = 180.0) -> bytes:
    """report.pdf for the report's HTML text, printed in a temporary folder (the output folder is written whole
    by ``io.atomic.OutputSlot``). The creation and modification dates Chromium stamps are zeroed (same length,
    so the cross-reference offsets hold): the same report gives the same PDF; the time is in provenance.json."""
    with tempfile.TemporaryDirectory(prefix="chimeline-pdf-") as tmp:
        page = Path(tmp) / "report.html"
        page.write_text(html, encoding="utf-8")
        html_to_pdf(page, Path(tmp) / "report.pdf", timeout)
        raw = (Path(tmp) / "report.pdf").read_bytes()
    return re.sub(rb"/(CreationDate|ModDate) ?\(D:[0-9]+", lambda m: re.sub(rb"[0-9]", b"0", m.group(0)), raw)
