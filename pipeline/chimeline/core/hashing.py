"""SHA-256 of files (streamed) and of text."""
from __future__ import annotations

import hashlib
from pathlib import Path


def sha256_file(path, block: int = 8 << 20, stop=None) -> str:
    """Hex digest of a file; ``stop`` (a threading.Event) ends it early with "" (a caller that gave up)."""
    h = hashlib.sha256()
    with open(Path(path), "rb") as fh:
        for chunk in iter(lambda: fh.read(block), b""):
            if stop is not None and stop.is_set():
                return ""
            h.update(chunk)
    return h.hexdigest()


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
