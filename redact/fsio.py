"""Writing outputs safely: atomic writes, renames that never replace, output locks, stale staging.

Every output of the tool appears in one step, complete, under a name that did not exist before:
data goes to a hidden temporary name beside the target, is flushed to disk, and is then renamed
with an operation that FAILS when the target exists, so a run never overwrites what another run
(or a person) put there in the meantime, even in the last instant.

How the no-replace rename is done (Python's os module has no renameat2, so it is looked up in
the C library): Linux renameat2(2) with RENAME_NOREPLACE (glibc 2.28+; "Return an error if newpath
already exists", EEXIST), for files and folders alike. Where that is unavailable (another C
library, or a file system that answers EINVAL to the flag), a file is moved with link(2) then
unlink(2) (link fails with EEXIST when the new name exists, POSIX), and a folder with rename(2)
after a check, which rename(2) itself backs only for a non-empty target (ENOTEMPTY/EEXIST): the
output lock below closes that gap between runs of this tool.

Output locks: flock(2) on a lock file, exclusive and non-blocking, so a second run refuses at once
instead of mixing its files with the first run's; the kernel drops the lock when the process
dies, however it dies. The lock file is removed when the lock is released (it is re-checked after
locking, so a run that opened the file just before it was removed tries again with a new one).
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import secrets
import shutil
import stat
import time
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO

from redact.errors import NoSpaceError, OutputError

LOCK_NAME = ".redact.lock"  # inside a folder that a run writes into (process, batch)
_RENAME_NOREPLACE = 1  # linux/include/uapi/linux/fs.h
_AT_FDCWD = -100  # linux/include/uapi/linux/fcntl.h
_NO_SPACE = (errno.ENOSPC, errno.EDQUOT)


def _renameat2():
    """The C library's renameat2, or None where there is none."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):
        return None
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    fn.restype = ctypes.c_int
    return fn


_RENAMEAT2 = _renameat2()


def _exists_error(dst: Path) -> OutputError:
    return OutputError(f"{dst} already exists and was left as it is (outputs are never overwritten); "
                       "choose a new output name")


def rename_new(src: str | Path, dst: str | Path) -> None:
    """Rename the file or folder `src` to `dst` in one step, failing if `dst` exists.

    OutputError when `dst` exists (it is never touched) or the rename fails (e.g. another file
    system: temporary names must lie beside their target). Both names must be on one file system.
    """
    src, dst = Path(src), Path(dst)
    if _RENAMEAT2 is not None:
        if _RENAMEAT2(_AT_FDCWD, os.fsencode(src), _AT_FDCWD, os.fsencode(dst), _RENAME_NOREPLACE) == 0:
            return
        err = ctypes.get_errno()
        if err == errno.EEXIST:
            raise _exists_error(dst)
        if err not in (errno.EINVAL, errno.ENOSYS):
            raise _rename_error(src, dst, OSError(err, os.strerror(err), str(src)))
    try:
        if src.is_dir() and not src.is_symlink():
            if os.path.lexists(dst):
                raise _exists_error(dst)
            os.rename(src, dst)  # fails on a non-empty folder at dst; the lock covers the rest
        else:
            os.link(src, dst, follow_symlinks=False)
            os.unlink(src)
    except FileExistsError:
        raise _exists_error(dst) from None
    except OSError as e:
        if e.errno == errno.ENOTEMPTY:
            raise _exists_error(dst) from None
        raise _rename_error(src, dst, e) from None


def _rename_error(src: Path, dst: Path, e: OSError) -> OutputError:
    if e.errno in _NO_SPACE:
        return NoSpaceError(dst.parent)
    return OutputError(f"cannot move {src.name} into place at {dst}: {e.strerror or e}")


def temporary_name(target: str | Path) -> Path:
    """A hidden, unpredictable name beside `target` for data that becomes `target` when complete."""
    target = Path(target)
    return target.with_name(f".{target.name}.tmp-{secrets.token_hex(6)}")


@contextlib.contextmanager
def atomic_file(target: str | Path, *, replace: bool = False, mode: int = 0o644) -> Iterator[BinaryIO]:
    """Write `target` in one step: yields a binary file at a temporary name beside it; when the
    block ends without error the data is flushed to disk (fsync) and renamed to `target`, never
    replacing an existing file unless `replace` is true (then os.replace: the old file stays
    until the new one is complete). On any error, and on interruption, the temporary file is
    removed and `target` is untouched. Errors become OutputError (NoSpaceError for a full disk).
    """
    target = Path(target)
    if not replace and os.path.lexists(target):
        raise _exists_error(target)
    tmp = temporary_name(target)
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), mode)
    except OSError as e:
        raise write_error(target, e) from None
    done = False
    try:
        with os.fdopen(fd, "wb") as f:
            try:
                yield f
                f.flush()
                os.fsync(f.fileno())
            except OSError as e:
                if no_space(e):
                    raise NoSpaceError(target.parent) from None
                raise
        if replace:
            try:
                os.replace(tmp, target)
            except OSError as e:
                raise write_error(target, e) from None
        else:
            rename_new(tmp, target)
        done = True
    finally:
        if not done:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)


def atomic_write(target: str | Path, data: bytes, *, replace: bool = False, mode: int = 0o644) -> None:
    """Write `data` to `target` in one step (see atomic_file)."""
    with atomic_file(target, replace=replace, mode=mode) as f:
        f.write(data)


def no_space(e: BaseException | None) -> bool:
    """True when `e`, or an error it was raised from, says the disk or the quota is full."""
    seen = 0
    while e is not None and seen < 10:
        if isinstance(e, NoSpaceError) or getattr(e, "errno", None) in _NO_SPACE:
            return True
        e = e.__cause__ or e.__context__
        seen += 1
    return False


def write_error(target: str | Path, e: OSError) -> OutputError:
    """One OutputError for a failed write of `target`: NoSpaceError naming the folder when full."""
    target = Path(target)
    if no_space(e):
        return NoSpaceError(target.parent)
    return OutputError(f"cannot write {target}: {e.strerror or e}")


def make_folder(out_dir: str | Path) -> bool:
    """Create the output folder OUT (and its parents); True when this call created it (so a
    failed run may remove it again), False when it was there already."""
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True)
        return True
    except FileExistsError:
        if not out_dir.is_dir():
            raise OutputError(f"--out {out_dir} exists and is not a folder") from None
        return False
    except OSError as e:
        raise write_error(out_dir, e) from None


def free_bytes(folder: str | Path) -> int:
    """Bytes an unprivileged user may still write in `folder`'s file system (statvfs f_bavail)."""
    return shutil.disk_usage(folder).free


# ---- output locks ------------------------------------------------------------------------------

class OutputLock:
    """An exclusive lock on one output (see the module doc); use as a context manager.

    `acquired_at` (time.time()) is when the lock was taken: staging folders older than that were
    left by runs that ended without cleaning up (see stale_staging).
    """

    def __init__(self, path: Path, what: str):
        self.path = Path(path)
        self.what = what
        self.acquired_at = 0.0
        self._fd: int | None = None

    def acquire(self) -> OutputLock:
        try:
            import fcntl
        except ImportError:  # not POSIX: the no-replace renames still protect the outputs
            self.acquired_at = time.time()
            return self
        while True:
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o600)
            except FileNotFoundError:
                raise OutputError(f"directory {self.path.parent} does not exist") from None
            except OSError as e:
                raise write_error(self.path, e) from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                os.close(fd)
                raise OutputError(f"another redact run is writing {self.what}; wait for it to finish or "
                                  "choose another output") from None
            except OSError as e:
                os.close(fd)
                raise OutputError(f"cannot lock {self.what} ({self.path}): {e.strerror or e}") from None
            try:
                st = os.stat(self.path, follow_symlinks=False)
            except FileNotFoundError:
                st = None
            held = os.fstat(fd)
            if st is not None and (st.st_dev, st.st_ino) == (held.st_dev, held.st_ino):
                break
            os.close(fd)  # the previous holder removed this file as it released it: lock the new one
        self._fd = fd
        self.acquired_at = time.time()
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
            os.write(fd, f"{os.getpid()}\n".encode())  # for people: which process holds it
        return self

    def release(self) -> None:
        if self._fd is None:
            return
        with contextlib.suppress(OSError):
            os.unlink(self.path)  # while still locked: see acquire()
        os.close(self._fd)
        self._fd = None

    def __enter__(self) -> OutputLock:
        return self.acquire() if self._fd is None else self

    def __exit__(self, *exc) -> None:
        self.release()


def lock_folder(folder: str | Path) -> OutputLock:
    """The lock of a folder that a run writes into (its lock file lies inside); not yet taken."""
    folder = Path(folder)
    return OutputLock(folder / LOCK_NAME, f"into {folder}")


def lock_target(target: str | Path) -> OutputLock:
    """The lock of a new output file or folder (its lock file lies beside it); not yet taken."""
    target = Path(target)
    return OutputLock(target.with_name(f".{target.name}.redact-lock"), str(target))


# ---- stale staging -----------------------------------------------------------------------------

def _is_staging(name: str) -> bool:
    return name.startswith(".") and "-partial-" in name


def stale_staging(folder: str | Path, own_prefix: str, before: float) -> tuple[list[str], list[str]]:
    """Remove hidden staging folders `folder/<own_prefix>*` left by earlier runs; list the others.

    Call it holding the folder's lock: a staging folder of this kind is made only under that
    lock, so one last changed before the lock was taken (`before`, time.time()) belongs to a run
    that ended without cleaning up (killed, power loss). Only folders owned by this user are
    removed. Returns (removed names, other staging folders found and left alone: another kind of
    run, another user's, or newer than the lock) for the caller to mention.
    """
    removed: list[str] = []
    others: list[str] = []
    folder = Path(folder)
    try:
        names = sorted(os.listdir(folder))
    except OSError:
        return removed, others
    uid = os.getuid() if hasattr(os, "getuid") else None
    for name in names:
        if not _is_staging(name):
            continue
        p = folder / name
        try:
            st = os.lstat(p)
        except OSError:
            continue
        if not stat.S_ISDIR(st.st_mode):
            continue
        ours = name.startswith(own_prefix) and (uid is None or st.st_uid == uid) and st.st_mtime < before
        if ours:
            shutil.rmtree(p, ignore_errors=True)
            if not os.path.lexists(p):
                removed.append(name)
                continue
        others.append(name)
    return removed, others


def staging_notices(folder: str | Path, removed: list[str], others: list[str]) -> tuple[str, ...]:
    """One line each for the people running the tool about stale staging folders."""
    out = []
    if removed:
        out.append(f"removed {len(removed)} unfinished staging folder(s) left in {folder} by an earlier "
                   f"run that did not complete: {', '.join(removed)}")
    if others:
        out.append(f"{folder} holds unfinished staging folder(s) of another run or user, left as they are "
                   f"(delete them when no redact run is working there): {', '.join(others)}")
    return tuple(out)
