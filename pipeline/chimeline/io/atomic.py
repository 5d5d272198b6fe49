"""Write-then-rename helpers: a failed run never leaves a half-written file."""
from __future__ import annotations

import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import OutputError


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside ``target``; rename it into place on success."""
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
        os.close(fd)
    except OSError as exc:
        raise OutputError(f"{target}: cannot write here: {exc.strerror or exc}") from None
    tmp = Path(tmp)
    try:
        yield tmp
        if tmp.exists():
            os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the file ordinary permissions
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m


def write_text(target, text: str) -> None:
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")


def json_text(obj) -> str:
    """JSON with two-space indent, numpy scalars and arrays as numbers and lists; NaN refused."""
    return json.dumps(obj, indent=2, allow_nan=False, default=_json_default) + "\n"


def write_json(target, obj) -> None:
    write_text(target, json_text(obj))


def _json_default(o):
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


@contextmanager
def staging_dir(out_dir):
    """A temporary folder next to ``out_dir``; its files are moved into ``out_dir`` on success.

    An existing ``out_dir`` keeps files the run does not produce; files the run
    produces replace their namesakes only after every output was written.
    """
    out_dir = Path(out_dir)
    parent = out_dir.parent if str(out_dir.parent) else Path(".")
    try:
        parent.mkdir(parents=True, exist_ok=True)
        stage = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".tmp", dir=parent))
    except OSError as exc:
        raise OutputError(f"{out_dir}: output folder cannot be created: {exc.strerror or exc}") from None
    try:
        yield stage
        try:
            out_dir.mkdir(parents=True, exist_ok=True)
            for p in sorted(stage.rglob("*")):
                rel = p.relative_to(stage)
                dest = out_dir / rel
                if p.is_dir():
                    dest.mkdir(parents=True, exist_ok=True)
                else:
                    dest.parent.mkdir(parents=True, exist_ok=True)
                    os.replace(p, dest)
        except OSError as exc:
            raise OutputError(f"{out_dir}: cannot move outputs into place: {exc.strerror or exc}") from None
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def check_writable(out_dir) -> None:
    """Refuse an output folder inside a file or under a folder we cannot write."""
    out_dir = Path(out_dir)
    p = out_dir
    while not p.exists():
        p = p.parent
    if not p.is_dir():
        raise OutputError(f"{out_dir}: output path is inside a file ({p})")
    if not os.access(p, os.W_OK | os.X_OK):
        raise OutputError(f"{out_dir}: output folder is not writable ({p})")


def write_files(folder, files: dict) -> None:
    """Write {relative path: str or bytes} into ``folder`` (each file written then renamed)."""
    folder = Path(folder)
    for rel, content in files.items():
        target = folder / rel
        if isinstance(content, str):
            write_text(target, content)
        else:
            with atomic_path(target) as tmp:
                tmp.write_bytes(content)
