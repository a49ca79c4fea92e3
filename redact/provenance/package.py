"""The skeleton-only package: layout, writing (sign, then atomic rename) and safe reading.

A package is a directory or one uncompressed .tar holding exactly the files named as
`package-file` subjects of its signed in-toto Statement (redact.provenance.statement), plus
`envelope.json`. The redacted video is a subject too (role `redacted-video`) but lives outside
the package; it is checked only when the verifier is given it.

Reading never extracts and never follows links: directory entries are opened with O_NOFOLLOW,
tar members are read in place; names that are absolute, contain `..`, `.`, empty segments,
backslashes, NUL or control characters are refused. Skeleton data is pseudonymised, not anonymous.
"""

from __future__ import annotations

import io
import os
import shutil
import stat
import tarfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from functools import partial
from pathlib import Path
from typing import BinaryIO, cast

from redact import fsio, jsonio
from redact.errors import OutputError, PackageError
from redact.hashing import sha256_file, sha256_stream
from redact.provenance import merkle, signing
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.predicate import PREDICATE_TYPE, LogRecord, Predicate
from redact.provenance.statement import ROLE_FILE, ROLE_VIDEO, Statement, Subject, parse_statement

__all__ = ["PREDICATE_TYPE", "ROLE_FILE", "ROLE_VIDEO", "write_package", "open_package", "check_name"]
ENVELOPE = "envelope.json"
SKELETONS = "skeletons.jsonl"
TRACKS = "tracks.json"
QUALITY = "quality.jsonl"
REVIEW = "review.json"
FRAMES = "frames.sha256"
LOG = "log.jsonl"
ENVELOPE_LIMIT = 16 * 1024 * 1024  # bytes; common practice
MAX_ENTRIES = 10_000  # files in a package; common practice
MAX_DEPTH = 8  # directory levels; common practice


def check_name(name: str) -> str | None:
    """Why a relative package path is unsafe, or None when it is a plain relative POSIX path."""
    if not isinstance(name, str) or not name:
        return "empty name"
    if "\x00" in name:
        return "NUL in name"
    if "\\" in name:
        return "backslash in name"
    if any(ord(c) < 0x20 or ord(c) == 0x7F for c in name):
        return "control character in name"
    if name.startswith("/") or (len(name) > 1 and name[1] == ":"):
        return "absolute path"
    parts = name.split("/")
    if ".." in parts:
        return "'..' in path (points outside the package)"
    if any(p in ("", ".") for p in parts):
        return "empty or '.' path segment"
    if len(parts) > MAX_DEPTH or len(name.encode("utf-8", "surrogateescape")) > 255:
        return "path too deep or too long"
    return None


class PackageReader:
    """Read-only view of a package: `files` maps safe relative names to sizes; `problems` lists unsafe entries."""

    kind = "package"

    def __init__(self) -> None:
        self.files: dict[str, int] = {}
        self.problems: list[str] = []

    def open(self, name: str) -> BinaryIO:
        raise NotImplementedError

    def read(self, name: str, limit: int) -> bytes:
        """The whole file, refusing one larger than `limit` before reading it."""
        size = self.files[name]
        if size > limit:
            raise PackageError(f"{name}: {size} bytes exceeds the limit of {limit} bytes")
        with self.open(name) as f:
            data = f.read(limit + 1)
        if len(data) != size:
            raise PackageError(f"{name}: changed while being read")
        return data

    def close(self) -> None:
        pass


class DirectoryReader(PackageReader):
    """A package directory, walked without following symlinks."""

    kind = "directory"

    def __init__(self, root: Path) -> None:
        super().__init__()
        self.root = Path(root)
        self._walk(self.root, "", 0)

    def _walk(self, path: Path, prefix: str, depth: int) -> None:
        try:
            entries = sorted(os.scandir(path), key=lambda e: e.name)
        except OSError as e:
            self.problems.append(f"{prefix or '.'}: cannot list directory ({e.strerror})")
            return
        if depth and not entries:
            self.problems.append(f"{prefix.rstrip('/')}: unexpected empty directory")
        for entry in entries:
            name = prefix + entry.name
            if len(self.files) + len(self.problems) > MAX_ENTRIES:
                self.problems.append(f"more than {MAX_ENTRIES} entries; stopped listing")
                return
            why = check_name(name)
            if why:
                self.problems.append(f"{name!r}: unsafe name ({why})")
                continue
            st = entry.stat(follow_symlinks=False)
            if stat.S_ISLNK(st.st_mode):
                self.problems.append(f"{name}: symlink (links are not allowed in a package)")
            elif stat.S_ISDIR(st.st_mode):
                if depth + 1 >= MAX_DEPTH:
                    self.problems.append(f"{name}: directories nested too deep")
                else:
                    self._walk(Path(entry.path), name + "/", depth + 1)
            elif stat.S_ISREG(st.st_mode):
                self.files[name] = st.st_size
            else:
                self.problems.append(f"{name}: not a regular file (device, FIFO or socket)")

    def open(self, name: str) -> BinaryIO:
        if name not in self.files:
            raise PackageError(f"{name}: not a file of this package")
        fd = os.open(self.root / name, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        f = os.fdopen(fd, "rb")
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            f.close()
            raise PackageError(f"{name}: not a regular file")
        return f


class TarReader(PackageReader):
    """An uncompressed .tar package, read in place: members are never extracted to disk."""

    kind = "tar"

    def __init__(self, path: Path) -> None:
        super().__init__()
        self.path = Path(path)
        self._members: dict[str, tarfile.TarInfo] = {}
        try:
            self._tar = tarfile.open(self.path, mode="r:")
        except (tarfile.TarError, OSError) as e:
            raise PackageError(f"{self.path.name}: not a readable uncompressed tar archive ({e})") from None
        file_size = self.path.stat().st_size
        try:
            for m in self._tar:
                if m.offset_data + max(m.size, 0) > file_size:
                    self.problems.append(f"tar member {m.name!r}: extends past the end of the archive (truncated)")
                    continue
                if len(self._members) + len(self.problems) > MAX_ENTRIES:
                    self.problems.append(f"more than {MAX_ENTRIES} members; stopped listing")
                    break
                self._member(m)
        except (tarfile.TarError, OSError, UnicodeError) as e:
            self.problems.append(f"{self.path.name}: damaged tar archive ({e})")

    def _member(self, m: tarfile.TarInfo) -> None:
        name = m.name
        why = check_name(name)
        if why:
            self.problems.append(f"tar member {name!r}: unsafe name ({why})")
            return
        if m.issym() or m.islnk():
            self.problems.append(f"tar member {name}: link (links are not allowed in a package)")
        elif m.isdir():
            self.problems.append(f"tar member {name}: directory entries are not part of the package format")
        elif m.ischr() or m.isblk() or m.isfifo():
            self.problems.append(f"tar member {name}: device or FIFO")
        elif not m.isreg() or m.issparse():
            self.problems.append(f"tar member {name}: not a plain regular file")
        elif name in self._members:
            self.problems.append(f"tar member {name}: appears more than once")
        else:
            self._members[name] = m
            self.files[name] = m.size

    def open(self, name: str) -> BinaryIO:
        f = self._tar.extractfile(self._members[name])
        if f is None:
            raise PackageError(f"{name}: cannot be read from the archive")
        return cast(BinaryIO, f)

    def canonical_problem(self) -> str | None:
        """None when the .tar is byte-identical to the archive this tool writes for these members.

        Tar headers (times, owners, modes) and padding are not covered by the signature; requiring
        the canonical archive makes every byte of the .tar tamper-evident.
        """
        if self.problems:
            return None
        sink = _HashSink()
        names = sorted(self.files)
        # tarfile only calls write() on its output
        _write_tar(cast(BinaryIO, sink), [(n, self.files[n], partial(self.open, n)) for n in names])
        with open(self.path, "rb") as f:
            digest, _ = sha256_stream(f)
        if digest != sink.hexdigest():
            return f"{self.path.name}: not byte-identical to the archive this tool writes for these files " \
                   "(tar headers, order or padding were altered)"
        return None

    def close(self) -> None:
        self._tar.close()


class _HashSink(io.RawIOBase):
    """A write-only stream that only hashes what is written."""

    def __init__(self) -> None:
        import hashlib

        self._h = hashlib.sha256()

    def writable(self) -> bool:
        return True

    def write(self, b) -> int:
        self._h.update(b)
        return len(b)

    def hexdigest(self) -> str:
        return self._h.hexdigest()


def _file_opener(path: Path) -> Callable[[], BinaryIO]:
    return lambda: open(path, "rb")


def _write_tar(out: BinaryIO, items: list[tuple[str, int, Callable[[], BinaryIO]]]) -> None:
    """Deterministic USTAR stream: given order, mtime 0, owner 0/0 without names, mode 0644."""
    with tarfile.open(fileobj=out, mode="w|", format=tarfile.USTAR_FORMAT) as tar:
        for name, size, opener in items:
            info = tarfile.TarInfo(name)
            info.size, info.mtime, info.mode = size, 0, 0o644
            info.uid = info.gid = 0
            info.uname = info.gname = ""
            with opener() as f:
                tar.addfile(info, f)


@contextmanager
def open_package(path: Path) -> Iterator[PackageReader]:
    """A reader for a package directory or .tar; PackageError when it is neither."""
    path = Path(path)
    if path.is_dir():
        reader: PackageReader = DirectoryReader(path)
    elif path.is_file():
        reader = TarReader(path)
    else:
        raise PackageError(f"{path}: no such package (expected a directory or a .tar file)")
    try:
        yield reader
    finally:
        reader.close()


def _check_predicate(predicate: Predicate) -> Predicate:
    """The predicate as the strict parser reads it back: anything it would refuse is refused here."""
    if not isinstance(predicate, Predicate):
        raise OutputError("the predicate must be a redact.provenance.predicate.Predicate")
    if predicate.log is not None:
        raise OutputError("the predicate must not contain 'log'; write_package adds the log head")
    try:
        return Predicate.parse(jsonio.loads_object(jsonio.dumps(predicate.to_json()), "predicate"))
    except (TypeError, ValueError, PackageError) as e:
        raise OutputError(f"the predicate is not strict JSON of its schema: {e}") from None


def _frames_root(staging: Path, files: dict[str, int], predicate: Predicate) -> Predicate:
    """Fill in or cross-check source.frames_root from frames.sha256 (RFC 6962 root)."""
    if FRAMES not in files:
        return predicate
    with open(staging / FRAMES, "rb") as f:
        try:
            digests = merkle.read_frame_digests(f)
        except PackageError as e:
            raise OutputError(f"staging {e}") from None
    root = merkle.root(digests).hex()
    if predicate.source.frames_root not in (None, root):
        raise OutputError("predicate source.frames_root does not match frames.sha256")
    return predicate.with_frames_root(root)


def write_package(staging_dir: Path, final_path: Path, predicate: Predicate, signer: signing.Signer,
                  video: Path | None = None, archive: bool = False, clock: Callable[[], str] = utc_now) -> bytes:
    """Sign the files of `staging_dir` and move them into place as a package; returns the payload bytes.

    The staging directory is consumed: renamed to `final_path`, or written as a .tar to
    `final_path` (through a temporary name) and then removed. The signing step is logged before
    the statement is built, so the signed log head covers it; `clock` gives its time (tests pass
    a fixed one so that their packages are byte-identical from run to run).
    """
    staging, final = Path(staging_dir), Path(final_path)
    if staging.is_symlink() or not staging.is_dir():
        raise OutputError(f"staging directory {staging} does not exist")
    if os.path.lexists(final):
        raise OutputError(f"{final} already exists; refusing to overwrite a package")
    if not final.parent.is_dir():
        raise OutputError(f"directory {final.parent} does not exist")
    if os.path.lexists(staging / ENVELOPE):
        raise OutputError(f"staging directory already holds {ENVELOPE}")
    predicate = _check_predicate(predicate)
    first = DirectoryReader(staging)
    if first.problems:
        raise OutputError(f"staging directory: {first.problems[0]}")
    video_name = None
    if video is not None:
        video = Path(video)
        video_name = video.name
        if check_name(video_name) or video_name in first.files or video_name in (ENVELOPE, LOG):
            raise OutputError(f"video name {video_name!r} clashes with a package file or is unsafe")
        if not video.is_file():
            raise OutputError(f"redacted video {video} does not exist")

    predicate = _frames_root(staging, first.files, predicate)
    log = TransformLog(staging / LOG, clock=clock)
    log.append("sign", key_id=signer.key_id, predicate_type=PREDICATE_TYPE,
               files=sorted(set(first.files) | {LOG}), video=video_name, archive=bool(archive))
    reader = DirectoryReader(staging)  # again: the log has grown
    subjects = []
    for name in sorted(reader.files):
        digest, size = sha256_file(staging / name)
        subjects.append(Subject(name, digest, size, ROLE_FILE))
    if video is not None and video_name is not None:
        digest, size = sha256_file(video)
        subjects.append(Subject(video_name, digest, size, ROLE_VIDEO))
    payload = Statement(tuple(subjects), predicate.signed(LogRecord(log.head, log.entries))).encode()
    envelope = signing.sign_envelope(payload, signing.PAYLOAD_TYPE, signer)
    fsio.atomic_write(staging / ENVELOPE, signing.envelope_bytes(envelope), replace=True)

    if archive:
        names = sorted(set(reader.files) | {ENVELOPE})
        sizes = {n: (staging / n).stat().st_size for n in names}
        with fsio.atomic_file(final) as out:  # never replaces an existing file
            _write_tar(out, [(n, sizes[n], _file_opener(staging / n)) for n in names])
        shutil.rmtree(staging)
    else:
        fsio.rename_new(staging, final)
    return payload


def read_statement_unverified(reader: PackageReader) -> tuple[Statement, str | None]:
    """The statement and keyid hint of a package WITHOUT checking the signature (for `inspect`
    without keys and the report of a package that failed verification); parsed strictly."""
    if ENVELOPE not in reader.files:
        raise PackageError(f"{ENVELOPE} is missing")
    env = jsonio.loads_object(reader.read(ENVELOPE, ENVELOPE_LIMIT), ENVELOPE, ENVELOPE_LIMIT)
    try:
        payload = signing.b64decode_any(env.get("payload"))
    except ValueError as e:
        raise PackageError(f"{ENVELOPE}: payload is not base64 ({e})") from None
    sigs = env.get("signatures")
    hint = sigs[0].get("keyid") if isinstance(sigs, list) and sigs and isinstance(sigs[0], dict) else None
    return parse_statement(payload), hint if isinstance(hint, str) else None
