"""redact.fsio: atomic writes, renames that never replace, output locks, stale staging folders.

Outside references: the Linux man pages rename(2) (plain rename replaces a file, and a folder when
the target is an empty folder; renameat2 RENAME_NOREPLACE fails with EEXIST instead), link(2)
(EEXIST when the new name exists) and flock(2) (locks taken through two open() calls conflict,
even in one process; a lock is released when its holder dies).
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import time

import pytest

from redact import fsio
from redact.errors import NoSpaceError, OutputError


@pytest.fixture(params=["renameat2", "link-fallback"])
def rename_mode(request, monkeypatch):
    """Run each rename test with the C library's renameat2 and with the portable fallback."""
    if request.param == "renameat2":
        if fsio._RENAMEAT2 is None:
            pytest.fail("renameat2 is expected in glibc 2.28+ (this machine's C library lacks it)")
    else:
        monkeypatch.setattr(fsio, "_RENAMEAT2", None)
    return request.param


def test_plain_rename_would_replace_what_rename_new_keeps(tmp_path, rename_mode):
    a, b = tmp_path / "a", tmp_path / "b"
    a.write_bytes(b"new")
    b.write_bytes(b"old")
    with pytest.raises(OutputError, match="already exists"):
        fsio.rename_new(a, b)
    assert b.read_bytes() == b"old" and a.read_bytes() == b"new"
    # rename(2): "If newpath already exists, it will be atomically replaced" - the behaviour avoided.
    c = tmp_path / "c"
    c.write_bytes(b"other")
    os.rename(c, a)
    assert a.read_bytes() == b"other"


def test_a_folder_never_replaces_an_empty_folder(tmp_path, rename_mode):
    src, dst = tmp_path / "staging", tmp_path / "package"
    src.mkdir()
    (src / "f").write_bytes(b"x")
    dst.mkdir()  # rename(2) would replace an empty folder here
    with pytest.raises(OutputError, match="already exists"):
        fsio.rename_new(src, dst)
    assert os.listdir(dst) == [] and (src / "f").exists()
    os.rmdir(dst)
    fsio.rename_new(src, dst)
    assert (dst / "f").read_bytes() == b"x" and not src.exists()


def test_rename_new_moves_a_file(tmp_path, rename_mode):
    a, b = tmp_path / "a", tmp_path / "b"
    a.write_bytes(b"data")
    fsio.rename_new(a, b)
    assert b.read_bytes() == b"data" and not a.exists()


def test_atomic_write_never_replaces_unless_asked(tmp_path):
    t = tmp_path / "report.html"
    fsio.atomic_write(t, b"one")
    with pytest.raises(OutputError, match="already exists"):
        fsio.atomic_write(t, b"two")
    assert t.read_bytes() == b"one"
    fsio.atomic_write(t, b"three", replace=True)
    assert t.read_bytes() == b"three"
    assert sorted(os.listdir(tmp_path)) == ["report.html"]  # no temporary name left


def test_an_error_inside_the_block_leaves_nothing(tmp_path):
    t = tmp_path / "out.json"
    with pytest.raises(RuntimeError), fsio.atomic_file(t) as f:
        f.write(b"half")
        raise RuntimeError("the writer failed")
    assert os.listdir(tmp_path) == []


def test_a_full_disk_is_one_no_space_error_naming_the_folder(tmp_path, monkeypatch):
    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(fsio.os, "fsync", full)
    with pytest.raises(NoSpaceError) as e:
        fsio.atomic_write(tmp_path / "x.bin", b"data")
    assert str(tmp_path) in str(e.value) and "no space left" in str(e.value)
    assert os.listdir(tmp_path) == []


def test_writes_to_dev_full_are_recognised_as_a_full_disk():
    # null(4): "Writes to the /dev/full device fail with an ENOSPC error."
    with pytest.raises(OSError) as e, open("/dev/full", "wb", buffering=0) as f:
        f.write(b"x")
    assert fsio.no_space(e.value)
    wrapped = RuntimeError("encoding failed")
    wrapped.__cause__ = e.value
    assert fsio.no_space(wrapped) and not fsio.no_space(RuntimeError("other"))


def test_a_second_lock_on_one_output_is_refused_and_the_file_goes_with_the_lock(tmp_path):
    first = fsio.lock_folder(tmp_path).acquire()
    assert (tmp_path / fsio.LOCK_NAME).exists()
    with pytest.raises(OutputError, match="another redact run is writing"):
        fsio.lock_folder(tmp_path).acquire()  # flock(2): a second open() conflicts, same process too
    first.release()
    assert not (tmp_path / fsio.LOCK_NAME).exists()
    with fsio.lock_folder(tmp_path):
        pass
    assert os.listdir(tmp_path) == []


def test_a_lock_on_a_new_name_lies_beside_it(tmp_path):
    target = tmp_path / "sheet"
    with fsio.lock_target(target) as lock:
        assert lock.path.parent == tmp_path and lock.path.name.startswith(".sheet")
        with pytest.raises(OutputError, match=str(target)):
            fsio.lock_target(target).acquire()
    assert os.listdir(tmp_path) == []


def test_the_lock_of_a_killed_process_is_free_again(tmp_path):
    code = ("import sys, time; from redact import fsio; fsio.lock_folder(sys.argv[1]).acquire(); "
            "print('locked', flush=True); time.sleep(600)")
    p = subprocess.Popen([sys.executable, "-c", code, str(tmp_path)], stdout=subprocess.PIPE, text=True)
    try:
        assert p.stdout.readline().strip() == "locked"
        with pytest.raises(OutputError):
            fsio.lock_folder(tmp_path).acquire()
    finally:
        p.send_signal(signal.SIGKILL)
        p.wait()
    with fsio.lock_folder(tmp_path):  # flock(2): released when the holder's descriptors close
        pass


def test_stale_staging_of_our_kind_is_removed_and_the_rest_mentioned(tmp_path):
    old, batch, new = (tmp_path / n for n in (".redact-partial-old", ".redact-batch-partial-x", ".redact-partial-new"))
    for d in (old, batch, new):
        d.mkdir()
        (d / "redacted.mp4").write_bytes(b"half")
    past = time.time() - 3600
    for d in (old, batch):
        os.utime(d, (past, past))
    future = time.time() + 3600  # changed after the lock was taken: a live run's, never removed
    os.utime(new, (future, future))
    (tmp_path / "package").mkdir()
    with fsio.lock_folder(tmp_path) as lock:
        removed, others = fsio.stale_staging(tmp_path, ".redact-partial-", lock.acquired_at)
    assert removed == [".redact-partial-old"]
    assert others == [".redact-batch-partial-x", ".redact-partial-new"]
    assert not old.exists() and batch.exists() and new.exists() and (tmp_path / "package").exists()
    notes = fsio.staging_notices(tmp_path, removed, others)
    assert len(notes) == 2 and ".redact-partial-old" in notes[0] and ".redact-batch-partial-x" in notes[1]
