"""Output folders: whole-folder swaps, the lock, leftovers of killed commands, kill -9 at several moments, and
concurrent commands into one folder."""
import json
import os
import random
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from chimeline.errors import OutputError
from chimeline.io import atomic
from chimeline.io.atomic import FolderLock, OutputSlot, check_target, recover_leftovers
from chimeline.io.runfiles import KIND_EVALUATION, KIND_RUN, FolderInput, kind_guard, with_manifest
from tests.helpers import ROOT, invoke, make_immutable


def snapshot(folder: Path) -> dict:
    """{relative path: bytes} of every file under ``folder`` ({} if it does not exist)."""
    if not folder.exists():
        return {}
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def debris(target: Path) -> list:
    """Entries beside ``target`` that chimeline makes while writing it (staging folders, old folders, the lock)."""
    return sorted(p.name for p in target.parent.iterdir() if p.name.startswith(f".{target.name}."))


def complete(folder: Path) -> bool:
    """The folder holds exactly the files its manifest lists (plus the manifest and the provenance record)."""
    m = json.loads((folder / "manifest.json").read_text())
    return set(snapshot(folder)) == set(m["files"]) | {"manifest.json", "provenance.json"}


def _files(tag, **extra):
    files = {"profile.json": json.dumps({"tag": tag}), "profile.csv": f"{tag}\n", "plots/a.png": b"\x89P", **extra}
    return with_manifest(files, KIND_RUN, [FolderInput("scan", "/x.las", "0" * 64)], "c" * 64, {"tag": tag})


def test_publish_replaces_the_whole_folder(tmp_path):
    out = tmp_path / "runs" / "a"
    with OutputSlot(out, guard=kind_guard(KIND_RUN)) as slot:
        slot.publish(_files("one", **{"evaluation.json": "{}"}))
    assert complete(out) and (out / "evaluation.json").exists()
    with OutputSlot(out, guard=kind_guard(KIND_RUN)) as slot:
        slot.publish(_files("two"))
    assert complete(out)
    assert not (out / "evaluation.json").exists()  # no stale file of the earlier run survives
    assert (out / "profile.csv").read_text() == "two\n" and debris(out) == []
    assert oct(out.stat().st_mode & 0o777) == oct(0o777 & ~atomic._umask())  # an ordinary folder, not 0700


@pytest.mark.parametrize("swap", ["exchange", "two renames"])
def test_swap_without_exchange_too(tmp_path, monkeypatch, swap):
    if swap == "two renames":
        monkeypatch.setattr(atomic, "exchange", lambda a, b: False)
    out = tmp_path / "a"
    for tag in ("one", "two"):
        with OutputSlot(out) as slot:
            slot.publish(_files(tag))
    assert (out / "profile.csv").read_text() == "two\n" and debris(out) == []


def test_a_failed_command_leaves_everything_as_it_was(tmp_path):
    out = tmp_path / "a"
    with OutputSlot(out) as slot:
        slot.publish(_files("one"))
    before = snapshot(out)
    with pytest.raises(RuntimeError):
        with OutputSlot(out):
            raise RuntimeError("a stage failed")
    assert snapshot(out) == before and debris(out) == []
    deep = tmp_path / "new" / "sub" / "run"
    with pytest.raises(RuntimeError):
        with OutputSlot(deep):
            assert deep.parent.is_dir()  # parents are made up front (the lock lives there) ...
            raise RuntimeError("a stage failed")
    assert not (tmp_path / "new").exists()  # ... and removed again: nothing written


def test_a_failing_write_leaves_the_earlier_folder(tmp_path, monkeypatch):
    out = tmp_path / "a"
    with OutputSlot(out) as slot:
        slot.publish(_files("one"))
    before = snapshot(out)

    def full(folder, files):
        (folder / "half").write_text("x")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(atomic, "_write_tree", full)
    with pytest.raises(OutputError, match="No space left on device"):
        with OutputSlot(out) as slot:
            slot.publish(_files("two"))
    assert snapshot(out) == before and debris(out) == []


def test_folders_of_another_kind_and_foreign_folders_are_refused(tmp_path):
    out = tmp_path / "a"
    with OutputSlot(out) as slot:
        slot.publish(_files("one"))
    with pytest.raises(OutputError, match=r"is a chimeline run folder .* writes an evaluation folder: choose another "
                                          r"--out, e.g. a-evaluation"):
        OutputSlot(out, guard=kind_guard(KIND_EVALUATION)).__enter__()
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("keep me")
    with pytest.raises(OutputError, match="not a chimeline folder"):
        OutputSlot(mine, guard=kind_guard(KIND_RUN)).__enter__()
    (tmp_path / "empty").mkdir()
    with OutputSlot(tmp_path / "empty", guard=kind_guard(KIND_RUN)) as slot:  # an empty folder is fine
        slot.publish(_files("e"))
    with pytest.raises(OutputError, match="the input lies inside the output folder"):
        OutputSlot(out, inputs=[out / "profile.csv"]).__enter__()
    assert debris(out) == [] and (mine / "notes.txt").read_text() == "keep me"


@pytest.mark.parametrize("text,phrase", [
    ("", "empty"), ("   ", "empty"), ("/", "root"), (".", "current folder"), ("..", "current folder"),
    ("a" * 300, "300 bytes"), ("x/" + "b" * 240, "keep it under"), ("a\x00b", "NUL"), ("d/" * 1950, "3800"),
])
def test_check_target_refuses(text, phrase, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(OutputError, match=phrase):
        check_target(text)


def test_check_target_for_files_written_into_a_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert check_target(".", replaced=False) == tmp_path  # synth writes into the current folder: fine
    with pytest.raises(OutputError, match="empty"):
        check_target("", replaced=False)


def test_the_lock_refuses_a_second_writer_and_is_removed(tmp_path):
    out = tmp_path / "a"
    first = FolderLock(out)
    first.acquire()
    assert (tmp_path / ".a.lock").read_text().split()[0] == str(os.getpid())
    with pytest.raises(OutputError, match=rf"another chimeline command \(process {os.getpid()}\) is writing"):
        FolderLock(out).acquire()
    first.release()
    assert not (tmp_path / ".a.lock").exists()
    (tmp_path / ".a.lock").write_text("12345 elsewhere\n")  # left by a killed process: not held by anyone
    second = FolderLock(out)
    second.acquire()
    second.release()
    assert debris(out) == []


def test_a_waiter_holding_a_removed_lock_file_opens_it_again(tmp_path, monkeypatch):
    """The race the inode check closes: a process opens the lock file, the holder removes it on release, the
    process then locks the removed inode; it must notice and lock the path again."""
    out = tmp_path / "a"
    real_flock = atomic.fcntl.flock
    calls = []

    def flock_after_release(fd, op):
        if not calls:  # the first attempt: the holder releases (removes the file) between our open and flock
            calls.append(fd)
            os.unlink(tmp_path / ".a.lock")
        return real_flock(fd, op)

    monkeypatch.setattr(atomic.fcntl, "flock", flock_after_release)
    lock = FolderLock(out)
    lock.acquire()
    assert calls and (tmp_path / ".a.lock").exists()  # locked a fresh file at the path, not the removed inode
    lock.release()


def test_exclusive_lock_file_where_flock_is_missing(tmp_path, monkeypatch):
    monkeypatch.setattr(atomic, "fcntl", None)
    out = tmp_path / "a"
    first = FolderLock(out)
    first.acquire()
    with pytest.raises(OutputError, match="if none is running, delete"):
        FolderLock(out).acquire()
    first.release()
    assert debris(out) == []


def test_a_kill_between_the_two_renames_is_repaired_by_the_next_command(tmp_path, monkeypatch):
    """Without renameat2 the swap takes two renames; a kill between them leaves no folder at the target. The next
    command puts the earlier folder back before anything else (the kill is simulated: the checkpoint raises, and
    nothing below it cleans up, as after a real kill)."""
    out = tmp_path / "a"
    with OutputSlot(out) as slot:
        slot.publish(_files("one"))
    before = snapshot(out)

    class Killed(BaseException):
        pass

    def die(name):
        if name == "swap-half":
            raise Killed

    monkeypatch.setattr(atomic, "exchange", lambda a, b: False)
    monkeypatch.setattr(atomic, "checkpoint", die)
    with pytest.raises(Killed):
        with OutputSlot(out) as slot:
            slot.publish(_files("two"))
    assert not out.exists()
    # in-process, the raise still removed the staging folder; a real kill leaves it (complete): put one back
    shutil.copytree(tmp_path / [n for n in debris(out) if n.endswith("old")][0], tmp_path / ".a.0123abcd.chimeline-tmp")
    assert sorted(n.split(".")[-1] for n in debris(out)) == ["chimeline-old", "chimeline-tmp"]
    done = recover_leftovers(out)
    assert snapshot(out) == before and debris(out) == [] and any("restored" in d for d in done)


# ---------------------------------------------------------------------------
# real processes: kill -9 and concurrency


@pytest.fixture(scope="module")
def earlier_run(small_scan, tmp_path_factory):
    """A finished run folder (template), and the command that makes it."""
    scan, _ = small_scan
    base = tmp_path_factory.mktemp("earlier")
    args = ["run", str(scan), "--set", "output.plots=false"]
    invoke(["-q", *args, "--out", base / "run", "--set", "profile.bin_width_deg=2"])
    return base / "run", args


def _spawn(args, out, **env):
    cmd = [sys.executable, "-m", "chimeline", *args, "--out", str(out)]
    e = dict(os.environ, **env)
    e["PYTHONPATH"] = os.pathsep.join([str(ROOT / "pipeline"), e.get("PYTHONPATH", "")])
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=e, text=True)


@pytest.mark.parametrize("moment", ["stream", "write", "swap", "swapped"])
def test_kill_9_leaves_the_earlier_run_intact_and_the_next_run_no_debris(earlier_run, tmp_path, moment):
    template, args = earlier_run
    out = tmp_path / "run"
    shutil.copytree(template, out)
    before = snapshot(out)
    p = _spawn(args, out, CHIMELINE_KILL_AT=moment)
    p.communicate(timeout=120)
    assert p.returncode == -9  # it really died by SIGKILL at that moment
    after = snapshot(out)
    if moment == "swapped":  # killed after the atomic exchange: the new run is complete in place
        assert after != before and complete(out)
    else:
        assert after == before  # the earlier run, byte for byte
    left = debris(out)
    assert left and all(n.endswith((".lock", ".chimeline-tmp")) for n in left)
    invoke(["-q", *args, "--out", out])  # the next run into the same place
    assert complete(out) and debris(out) == []
    assert json.loads((out / "profile.json").read_text())["profile"]["bin_width_deg"] == 1.0


def test_kill_9_at_random_moments(earlier_run, tmp_path):
    """Killed from outside at a random time (seeded): the folder is always one complete run, old or new."""
    template, args = earlier_run
    out = tmp_path / "run"
    shutil.copytree(template, out)
    before = snapshot(out)
    rnd = random.Random(1234)
    for _ in range(3):
        p = _spawn(args, out)
        time.sleep(rnd.uniform(0.3, 4.0))
        p.kill()
        p.communicate(timeout=60)
        now = snapshot(out)
        assert now == before or complete(out)
        before = now
    invoke(["-q", *args, "--out", out])
    assert complete(out) and debris(out) == []


def test_a_second_run_into_a_locked_folder_fails_at_once_with_one_line(earlier_run, tmp_path):
    template, args = earlier_run
    out = tmp_path / "run"
    shutil.copytree(template, out)
    before = snapshot(out)
    lock = FolderLock(out)
    lock.acquire()  # another command is writing the folder
    try:
        p = _spawn(args, out)
        stdout, stderr = p.communicate(timeout=120)
    finally:
        lock.release()
    assert p.returncode == 2
    assert stderr.splitlines() == [stderr.strip()] and "another chimeline command" in stderr
    assert f"process {os.getpid()}" in stderr
    assert "read:" not in stdout  # refused before reading the scan
    assert snapshot(out) == before


def test_two_concurrent_runs_leave_one_complete_run(earlier_run, tmp_path):
    template, args = earlier_run
    out = tmp_path / "run"
    procs = [_spawn(args + ["--set", f"profile.bin_width_deg={w}"], out) for w in (1.0, 3.0)]
    results = [p.communicate(timeout=180) for p in procs]
    codes = [p.returncode for p in procs]
    assert set(codes) <= {0, 2} and 0 in codes
    for code, (_, err) in zip(codes, results):
        if code == 2:  # the loser says why, in one line, and wrote nothing
            assert len(err.strip().splitlines()) == 1 and "another chimeline command" in err
    assert complete(out) and debris(out) == []
    js = json.loads((out / "profile.json").read_text())
    winner = [w for w, c in zip((1.0, 3.0), codes) if c == 0]
    assert js["profile"]["bin_width_deg"] in winner


def test_an_earlier_run_with_an_undeletable_part_is_still_replaced(tmp_path, caplog):
    """The earlier run's plots/ cannot be deleted (immutable): the new run is swapped in complete anyway, and the
    old folder is kept aside with a warning (file-by-file moves once failed half-way here)."""
    out = tmp_path / "a"
    with OutputSlot(out) as slot:
        slot.publish(_files("one", **{"plots/old.png": b"old"}))
    if not make_immutable(out / "plots"):
        pytest.skip("chattr +i is not available here")
    try:
        with OutputSlot(out) as slot:
            slot.publish(_files("two"))
        assert complete(out) and not (out / "plots" / "old.png").exists()
        assert "could not be deleted" in caplog.text
        kept = [n for n in debris(out) if n.endswith("chimeline-tmp")]
        assert len(kept) == 1 and (tmp_path / kept[0] / "plots" / "old.png").exists()
    finally:
        for p in tmp_path.rglob("plots"):
            make_immutable(p, on=False)


def test_a_folder_nobody_may_write_into_is_refused_with_nothing_left(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    if not make_immutable(ro):
        pytest.skip("chattr +i is not available here")
    try:
        with pytest.raises(OutputError, match="output folder is not writable"):
            OutputSlot(ro / "sub" / "run").__enter__()
        assert list(ro.iterdir()) == []
    finally:
        make_immutable(ro, on=False)


def test_a_parent_made_meanwhile_by_a_sibling_job_is_not_an_error(tmp_path, monkeypatch):
    # two batch jobs publish tag/date1 and tag/date2 at once: both see tag/ missing, the other one makes it first
    parent = tmp_path / "fleet" / "TK-1"
    real_mkdir = Path.mkdir

    def racing_mkdir(self, *a, **kw):
        if self == parent and not self.exists():
            real_mkdir(self)  # the sibling job wins the race
        return real_mkdir(self, *a, **kw)

    monkeypatch.setattr(Path, "mkdir", racing_mkdir)
    with OutputSlot(parent / "2026-06-15", guard=kind_guard(KIND_RUN)) as slot:
        assert slot._created == [tmp_path / "fleet"]  # TK-1 is the sibling's: a failure here must not remove it
        slot.publish(with_manifest({"a.txt": "x"}, KIND_RUN, [], "0" * 64, {}))
    assert (parent / "2026-06-15" / "a.txt").read_text() == "x"
