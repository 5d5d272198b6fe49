"""What C libraries write straight to the process's file descriptors 1 and 2 (open3d's RPly messages, for one),
captured instead of reaching the terminal."""
from __future__ import annotations

import os
import re
import sys
import tempfile
from contextlib import contextmanager

_ANSI = re.compile(r"\x1b\[[0-9;]*m")


@contextmanager
def captured_native_output(limit: int = 1 << 16):
    """Redirect descriptors 1 and 2 to a temporary file during the block; the list yielded receives the text
    (at most ``limit`` bytes, terminal colour codes removed) when the block ends."""
    received: list[str] = []
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (AttributeError, ValueError, OSError):
            pass
    saved = os.dup(1), os.dup(2)
    with tempfile.TemporaryFile() as sink:
        os.dup2(sink.fileno(), 1)
        os.dup2(sink.fileno(), 2)
        try:
            yield received
        finally:
            os.dup2(saved[0], 1)
            os.dup2(saved[1], 2)
            for fd in saved:
                os.close(fd)
            sink.seek(0)
            received.append(_ANSI.sub("", sink.read(limit).decode("utf-8", "replace")))
