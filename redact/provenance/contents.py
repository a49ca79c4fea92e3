"""Reading a package's files after verification: every read is checked against the signed subject.

A package may change between `verify_package` and the moment a consumer (inspect, the report,
frame proofs, export, derive) reads one of its files. `VerifiedPackage.open` therefore copies
the member into a private temporary file while hashing it (streamed, bounded memory), compares
SHA-256 and size with the signed subject, and only then hands out the private copy: what a
consumer reads is exactly what was signed, or it gets VerificationFailed.

`UnverifiedPackage` is the same interface for a package read without a trusted key (inspect
without --trusted-key, the report of a package that failed verification): nothing it returns is
vouched for, and `verified` says so.
"""

from __future__ import annotations

import hashlib
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO, cast

from redact import jsonio
from redact.errors import PackageError, VerificationFailed
from redact.provenance.package import open_package
from redact.provenance.predicate import Predicate
from redact.provenance.signing import VerifiedSignature
from redact.provenance.statement import Statement, Subject

CHUNK = 1 << 20
SPOOL_BYTES = 8 * 1024 * 1024  # a member up to this size is held in memory, beyond on disk (common practice)


@dataclass(frozen=True)
class PackageContents:
    """A package and its parsed statement; `open` is the only way to read one of its files."""

    path: Path
    statement: Statement

    verified = False

    @property
    def predicate(self) -> Predicate:
        return self.statement.predicate

    @property
    def subjects(self) -> tuple[Subject, ...]:
        return self.statement.subjects

    @property
    def video_subject(self) -> Subject | None:
        return self.statement.video

    def has(self, name: str) -> bool:
        """True when the statement names `name` as a package file."""
        return name in self.statement.files

    def open(self, name: str):
        """A context manager giving a binary stream of package file `name` (see the subclasses)."""
        raise NotImplementedError

    def read_bytes(self, name: str, limit: int) -> bytes:
        """The whole file (refused beyond `limit` bytes), read through `open`."""
        with self.open(name) as f:
            data = f.read(limit + 1)
        if len(data) > limit:
            raise PackageError(f"{name}: exceeds the limit of {limit} bytes")
        return data

    def lines(self, name: str, line_limit: int = jsonio.DEFAULT_LINE_LIMIT) -> Iterator[tuple[int, bytes]]:
        """(line number, exact line bytes) of a JSON-lines file, read through `open`."""
        with self.open(name) as f:
            yield from jsonio.iter_lines(f, name, line_limit)


@dataclass(frozen=True)
class VerifiedPackage(PackageContents):
    """What a successful verification vouches for; `payload` is the exact signed statement bytes,
    `checked` says in words what was checked (for people)."""

    payload: bytes = b""
    key_id: str = ""  # the author: the key the log's signing entry names
    checked: tuple[str, ...] = field(default=())  # what was checked, in words, for reports
    signers: tuple[VerifiedSignature, ...] = field(default=())  # every key that signed, envelope order
    notes: tuple[str, ...] = field(default=())  # accepted but unsigned envelope details

    verified = True

    @property
    def statement_sha256(self) -> str:
        """SHA-256 of the exact signed payload (what a derived package names as its parent)."""
        return hashlib.sha256(self.payload).hexdigest()

    @contextmanager
    def open(self, name: str) -> Iterator[BinaryIO]:
        """A private copy of package file `name`, positioned at its start, whose SHA-256 and size were
        just checked against the signed subject; VerificationFailed when the file changed since."""
        want = self.statement.files.get(name)
        if want is None:
            raise PackageError(f"{name}: not a file named in the package's signed statement")
        snapshot = tempfile.SpooledTemporaryFile(max_size=SPOOL_BYTES)
        try:
            h, size = hashlib.sha256(), 0
            with open_package(self.path) as reader:
                if name not in reader.files:
                    raise VerificationFailed([f"{name}: missing from the package since it was verified"])
                with reader.open(name) as f:
                    while size <= want.bytes and (chunk := f.read(CHUNK)):
                        h.update(chunk)
                        size += len(chunk)
                        snapshot.write(chunk)
            if size != want.bytes or h.hexdigest() != want.sha256:
                raise VerificationFailed([f"{name}: changed after verification (SHA-256 or size differs from "
                                          "the signed statement); refusing to read it"])
            snapshot.seek(0)
            yield cast(BinaryIO, snapshot)
        finally:
            snapshot.close()


@dataclass(frozen=True)
class UnverifiedPackage(PackageContents):
    """A package read WITHOUT checking its signature: nothing here is vouched for. `files` are the
    files present now (safe names only); `has` and `open` go by them, not by the statement."""

    key_id_hint: str | None = None
    files: frozenset[str] = frozenset()

    def has(self, name: str) -> bool:
        return name in self.files

    @contextmanager
    def open(self, name: str) -> Iterator[BinaryIO]:
        """Package file `name` as it is now (read safely, never extracted); not checked against anything."""
        with open_package(self.path) as reader:
            if name not in reader.files:
                raise PackageError(f"{name}: missing from the package")
            with reader.open(name) as f:
                yield f


def read_unverified(path: Path) -> UnverifiedPackage:
    """The package at `path` with its statement parsed strictly but its signature NOT checked;
    PackageError when the statement cannot be read."""
    from redact.provenance.package import read_statement_unverified

    with open_package(Path(path)) as reader:
        statement, hint = read_statement_unverified(reader)
        return UnverifiedPackage(Path(path), statement, hint, frozenset(reader.files))
