"""Outputs that a failure or a kill never leaves half-written, mixed or stale.

Folders (``OutputSlot``): a command checks its target folder, takes its lock, builds the whole new folder
beside it (``.NAME.XXXXXXXX.chimeline-tmp``) and swaps it in as a whole: on Linux with one atomic
``renameat2(RENAME_EXCHANGE)``, elsewhere with two renames (the old folder aside as
``.NAME.XXXXXXXX.chimeline-old``, the new one in); then it deletes the old folder. A reader or a kill at any
moment finds the complete old folder or the complete new one, and no file of the old run survives in the new.
The next command into the same place removes a killed command's leftovers, or puts the old folder back if a
kill fell between the two renames.

Lock: ``.NAME.lock`` beside the target, held with ``fcntl.flock`` (an O_EXCL lock file where flock is missing).
The kernel releases a flock when its process dies, so a kill -9 leaves no stale lock; the file is removed on
release (a waiter that opened the removed file sees that its inode is gone and tries again).

Single files (``write_text``, ``atomic_path``): written beside the target, then renamed into place.
This module imports nothing heavy: the command line uses ``check_target`` for ``--out``.
"""
from __future__ import annotations

import ctypes
import errno
import json
import logging
import os
import re
import secrets
import shutil
import signal
import socket
import sys
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputError

try:
    import fcntl
except ImportError:  # not POSIX: the O_EXCL lock file below
    fcntl = None

#: what chimeline adds to a target's name for its staging folders and lock (".NAME.XXXXXXXX.chimeline-tmp")
SIBLING_EXTRA = len("..12345678.chimeline-tmp")
_KILL_ENV = "CHIMELINE_KILL_AT"
log = logging.getLogger(__name__)


def checkpoint(name: str) -> None:
    """Fault injection for the crash tests: with ``CHIMELINE_KILL_AT=name`` in the environment the process kills
    itself here with SIGKILL, exactly as ``kill -9`` would (no cleanup runs). Costs one environment lookup."""
    if os.environ.get(_KILL_ENV) == name:
        os.kill(os.getpid(), signal.SIGKILL)


def _show(path) -> str:
    s = os.fspath(path)
    return s if len(s) <= 90 else s[:40] + "..." + s[-40:]


# ---------------------------------------------------------------------------
# the target path


def _name_max(path: Path) -> int:
    p = path
    while True:
        try:
            if p.exists():
                return os.pathconf(p, "PC_NAME_MAX")
        except (OSError, ValueError, AttributeError):
            return 255
        if p == p.parent:
            return 255
        p = p.parent


def check_target(out, replaced: bool = True) -> Path:
    """The absolute output folder for ``out``, or an OutputError: empty or too long a name; with ``replaced`` (the
    folder is swapped in as a whole) also the file system root, the current folder or one containing it.
    No file system writes."""
    text = os.fspath(out) if out is not None else ""
    if not text.strip():
        raise OutputError("the output folder is empty (''): name a folder, e.g. --out runs/tk07")
    if "\x00" in text:
        raise OutputError(f"{_show(text)!r}: the output folder name contains a NUL character")
    p = Path(os.path.abspath(text))
    if len(os.fsencode(str(p))) > 3800:
        raise OutputError(f"{_show(text)}: the output path is {len(os.fsencode(str(p)))} bytes long; keep it under 3800")
    if replaced and p == Path(p.anchor):
        raise OutputError(f"{_show(text)}: the output folder cannot be the file system root")
    try:
        here = Path(os.path.realpath(os.getcwd()))
    except OSError:
        here = None
    real = Path(os.path.realpath(p))
    if replaced and here is not None and (real == here or real in here.parents):
        raise OutputError(f"{_show(text)}: is the current folder or contains it; the output folder is replaced as a "
                          f"whole: name a new subfolder (e.g. --out runs/tk07)")
    limit = _name_max(p)
    for part in p.parts[1:]:
        n = len(os.fsencode(part))
        if n > limit:
            raise OutputError(f"{_show(text)}: a folder name of {n} bytes; the file system allows {limit}")
    n = len(os.fsencode(p.name))
    if replaced and n + SIBLING_EXTRA > limit:
        raise OutputError(f"{_show(text)}: the folder name is {n} bytes long; keep it under {limit - SIBLING_EXTRA + 1} "
                          f"(chimeline builds the folder beside it under a longer name)")
    return p


def check_writable(out_dir) -> None:
    """Refuse an output folder inside a file or under a folder we cannot write."""
    out_dir = Path(out_dir)
    p = out_dir
    try:
        while not p.exists():
            if p == p.parent:
                break
            p = p.parent
    except OSError as exc:
        raise OutputError(f"{_show(out_dir)}: output path cannot be used: {exc.strerror or exc}") from None
    if not p.is_dir():
        raise OutputError(f"{_show(out_dir)}: output path is inside a file ({_show(p)})")
    if not os.access(p, os.W_OK | os.X_OK):
        raise OutputError(f"{_show(out_dir)}: output folder is not writable ({_show(p)})")


def _inside(path: Path, folder: Path) -> bool:
    a, b = Path(os.path.realpath(path)), Path(os.path.realpath(folder))
    return a == b or b in a.parents


# ---------------------------------------------------------------------------
# the lock


class FolderLock:
    """``.NAME.lock`` beside ``target``: one command at a time writes a folder; a second fails at once."""

    def __init__(self, target: Path):
        self.target = Path(target)
        self.path = self.target.parent / f".{self.target.name}.lock"
        self.fd = None

    def _busy(self, holder: str) -> OutputError:
        who = f"process {holder}" if holder else "another process"
        return OutputError(f"{_show(self.target)}: another chimeline command ({who}) is writing this folder; wait "
                           f"for it to finish or choose another --out (lock {_show(self.path)})")

    def acquire(self) -> None:
        try:
            if fcntl is None:
                self._acquire_exclusive()
            else:
                self._acquire_flock()
        except OSError as exc:
            raise OutputError(f"{_show(self.target)}: cannot lock the output folder: {exc.strerror or exc}") from None

    def _acquire_flock(self):
        for _ in range(20):
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                holder = os.read(fd, 200).decode("utf-8", "replace").split(" ")[0].strip()
                os.close(fd)
                if exc.errno in (errno.EAGAIN, errno.EACCES):
                    raise self._busy(holder) from None
                raise
            # the previous holder may have removed the file between our open and flock: then this inode is
            # no lock any more; open the path again
            mine = os.fstat(fd)
            try:
                now = os.stat(self.path, follow_symlinks=False)
            except FileNotFoundError:
                now = None
            if now is None or (now.st_ino, now.st_dev) != (mine.st_ino, mine.st_dev):
                os.close(fd)
                continue
            os.ftruncate(fd, 0)
            os.write(fd, f"{os.getpid()} {socket.gethostname()}\n".encode())
            self.fd = fd
            return
        raise self._busy("")

    def _acquire_exclusive(self):  # no flock (not POSIX): a lock file created with O_EXCL
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            try:
                holder = self.path.read_text(errors="replace").split(" ")[0].strip()
            except OSError:
                holder = ""
            raise OutputError(f"{_show(self.target)}: another chimeline command (process {holder or '?'}) is writing "
                              f"this folder; if none is running, delete {_show(self.path)}") from None
        os.write(fd, f"{os.getpid()} {socket.gethostname()}\n".encode())
        self.fd = fd

    def release(self) -> None:
        if self.fd is None:
            return
        try:
            os.unlink(self.path)  # before unlocking: a waiter then finds the inode gone and opens the path again
        except FileNotFoundError:
            pass
        os.close(self.fd)
        self.fd = None


# ---------------------------------------------------------------------------
# the atomic swap


def _renameat2():
    if not sys.platform.startswith("linux"):
        return None
    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    return fn


_AT_FDCWD = -100
_RENAME_EXCHANGE = 2
_RENAMEAT2 = _renameat2()


def exchange(a, b) -> bool:
    """Swap two existing paths in one atomic step (Linux renameat2 RENAME_EXCHANGE); False where unsupported."""
    if _RENAMEAT2 is None:
        return False
    if _RENAMEAT2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False  # old kernel or a file system without it: the two-rename swap
    raise OSError(err, os.strerror(err), os.fspath(b))


def _sibling(target: Path, kind: str) -> Path:
    return target.parent / f".{target.name}.{secrets.token_hex(4)}.chimeline-{kind}"


def _leftover_pattern(target: Path):
    return re.compile(rf"\.{re.escape(target.name)}\.[0-9a-f]{{8}}\.chimeline-(tmp|old)")


def _remove(path: Path) -> bool:
    """Delete a file or folder tree; False if some of it could not be deleted (read-only or immutable parts)."""
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        try:
            path.unlink()
        except OSError:
            pass
    return not os.path.lexists(path)


def _remove_old(old: Path, target: Path) -> None:
    if not _remove(old):
        log.warning("the earlier folder %s was replaced but parts of it could not be deleted; it is kept as %s "
                    "(delete it by hand)", target.name, old)


def recover_leftovers(target: Path) -> list[str]:
    """Clean up after a killed command into ``target`` (call with the lock held); returns what was done.

    Staging folders are removed; an old folder set aside by the two-rename swap is put back if the kill left no
    folder at ``target``, else removed.
    """
    target = Path(target)
    pat = _leftover_pattern(target)
    try:
        found = [target.parent / e.name for e in os.scandir(target.parent) if pat.fullmatch(e.name)]
    except OSError:
        return []
    done = []
    olds = [p for p in found if p.name.endswith("-old")]
    if olds and not os.path.lexists(target):
        keep = max(olds, key=lambda p: p.stat().st_mtime)
        os.rename(keep, target)
        found.remove(keep)
        done.append(f"restored the earlier folder from {keep.name}")
    for p in found:
        _remove(p)
        done.append(f"removed {p.name}")
    return done


def _write_tree(folder: Path, files: dict) -> None:
    """{relative path: str or bytes} into a fresh private folder (no renames needed there)."""
    for i, (rel, content) in enumerate(files.items()):
        dest = folder / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        with open(dest, "wb") as fh:
            fh.write(content.encode("utf-8") if isinstance(content, str) else content)
        if i == len(files) // 2:
            checkpoint("write")


def swap_in(stage: Path, target: Path) -> None:
    """Put the complete folder ``stage`` at ``target`` in one step; the old folder, if any, is deleted after."""
    checkpoint("swap")
    if not os.path.lexists(target):
        os.rename(stage, target)
        return
    if exchange(stage, target):
        checkpoint("swapped")  # the old folder now sits at the staging name
        _remove_old(stage, target)
        return
    old = _sibling(target, "old")
    os.rename(target, old)
    checkpoint("swap-half")
    os.rename(stage, target)
    _remove_old(old, target)


def _make_parents(folder: Path) -> list[Path]:
    """Create missing folders up to ``folder``; returns the ones created, deepest last."""
    missing = []
    p = folder
    while not p.exists():
        missing.append(p)
        p = p.parent
    created = []
    for q in reversed(missing):
        try:
            q.mkdir()
        except FileExistsError:
            if not q.is_dir():
                raise
            continue  # another command (a batch job into a sibling folder) made it meanwhile: not ours to remove
        created.append(q)
    return created


class OutputSlot:
    """The folder a command publishes: checked, locked and cleaned up before any work, swapped in at the end.

    ``guard(path)`` may refuse an existing folder (one of another kind); ``inputs`` must not lie inside the
    target (it is replaced as a whole). Use as a context manager; ``publish(files)`` once at the end. If the
    command fails, nothing is left: no staging folder, no lock, no parent folders it created.
    """

    def __init__(self, target, *, guard=None, inputs=()):
        self.target = check_target(target)
        self.guard = guard
        self.inputs = [Path(p) for p in inputs if p is not None]
        self.published = False
        self.recovered: list[str] = []
        self._created: list[Path] = []
        self._lock = None

    def _check_existing(self):
        t = self.target
        if t.is_symlink():
            raise OutputError(f"{_show(t)}: is a symbolic link; give the folder it points to, or a new folder")
        if t.exists() and not t.is_dir():
            raise OutputError(f"{_show(t)}: exists and is a file; the output must be a folder")
        if t.is_dir() and self.guard is not None:
            self.guard(t)

    def __enter__(self):
        t = self.target
        check_writable(t)
        self._check_existing()
        for p in self.inputs:
            if _inside(p, t):
                raise OutputError(f"{_show(p)}: the input lies inside the output folder {_show(t)}, which is replaced "
                                  f"as a whole; choose another --out")
        try:
            self._created = _make_parents(t.parent)
        except OSError as exc:
            self._remove_created()
            raise OutputError(f"{_show(t)}: output folder cannot be created: {exc.strerror or exc}") from None
        self._lock = FolderLock(t)
        try:
            self._lock.acquire()
            self.recovered = recover_leftovers(t)
            self._check_existing()  # a recovered folder is checked like any other
        except BaseException:
            self._lock.release()
            self._remove_created()
            raise
        return self

    def publish(self, files: dict) -> None:
        """Write ``files`` ({relative path: str or bytes}) into a staging folder and swap it in."""
        t = self.target
        stage = _sibling(t, "tmp")
        try:
            stage.mkdir()
            _write_tree(stage, files)
            swap_in(stage, t)
        except OSError as exc:
            _remove(stage)
            raise OutputError(f"{_show(t)}: cannot write the output folder: {exc.strerror or exc}") from None
        except BaseException:
            _remove(stage)
            raise
        self.published = True

    def _remove_created(self):
        for q in reversed(self._created):
            try:
                q.rmdir()
            except OSError:
                break

    def __exit__(self, *exc):
        if self._lock is not None:
            self._lock.release()
        if not self.published:
            self._remove_created()
        return False


# ---------------------------------------------------------------------------
# single files


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside ``target``; rename it into place on success."""
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
        os.close(fd)
    except OSError as exc:
        raise OutputError(f"{_show(target)}: cannot write here: {exc.strerror or exc}") from None
    tmp = Path(tmp)
    try:
        yield tmp
        if tmp.exists():
            os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the file ordinary permissions
        os.replace(tmp, target)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"{_show(target)}: cannot write: {exc.strerror or exc}") from None
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
    if hasattr(o, "tolist") and hasattr(o, "dtype"):  # numpy scalars and arrays, without importing numpy here
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


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
