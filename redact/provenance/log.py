"""The hash-chained transform log (`log.jsonl`): one JSON line per transform, tamper-evident.

Each line is a JSON object whose first four keys are, in this order,
    seq   – 0, 1, 2, … (line number − 1)
    prev  – lowercase hex SHA-256 of the previous line's exact bytes, newline included;
            for the first line, GENESIS = SHA-256 of the empty byte string (FIPS 180-4 vector
            e3b0c442…b855)
    time  – UTC time of the entry, "YYYY-MM-DDTHH:MM:SS.ffffffZ"
    kind  – what happened: decode, model, detection, tracking, redaction, fault, encode,
            package, disclosure, sign, … (lowercase word)
followed by the entry's own fields in sorted key order. The head is the SHA-256 of the last
line's bytes (GENESIS for an empty log) and goes into the signed statement, so removing,
reordering or editing any line is detected. A `disclosure` entry carries the disclosure record
(date, recipient, organisation, purpose, request_reference) as ordinary fields.
"""

from __future__ import annotations

import hashlib
import io
import os
import re
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, BinaryIO

from redact import jsonio
from redact.errors import OutputError, PackageError

GENESIS = hashlib.sha256(b"").hexdigest()
HEADER_KEYS = ("seq", "prev", "time", "kind")
DISCLOSURE_FIELDS = ("date", "recipient", "organisation", "purpose", "request_reference")
LINE_LIMIT = 1024 * 1024  # bytes per log line; common practice
MAX_FINDINGS = 20
_KIND = re.compile(r"[a-z][a-z0-9_-]{0,63}")
_TIME = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d{1,6})?Z")
_HEX64 = re.compile(r"[0-9a-f]{64}")


def utc_now() -> str:
    """The current UTC time in the log's format."""
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def encode_entry(seq: int, prev: str, time: str, kind: str, fields: dict[str, Any]) -> bytes:
    """One log line (UTF-8, newline-terminated) with the fixed key order."""
    if not _KIND.fullmatch(kind):
        raise ValueError(f"log entry kind {kind!r} must be a lowercase word")
    clash = set(fields) & set(HEADER_KEYS)
    if clash:
        raise ValueError(f"log entry field(s) {sorted(clash)} are reserved")
    head = jsonio.dumps({"seq": seq})[:-1] + b',"prev":' + jsonio.dumps(prev) + b',"time":' + jsonio.dumps(time) \
        + b',"kind":' + jsonio.dumps(kind)
    body = jsonio.dumps(fields)  # "{...}" sorted and compact; raises ValueError on NaN
    line = head + (b"," + body[1:] if len(body) > 2 else b"}") + b"\n"
    if len(line) > LINE_LIMIT:
        raise ValueError(f"log entry of {len(line)} bytes exceeds {LINE_LIMIT}")
    return line


def _is_canonical(d: dict, line: bytes) -> bool:
    """True when `line` is exactly what encode_entry writes for the parsed entry `d`."""
    try:
        fields = {k: v for k, v in d.items() if k not in HEADER_KEYS}
        return encode_entry(d["seq"], d["prev"], d["time"], d["kind"], fields) == bytes(line)
    except (TypeError, ValueError, KeyError):
        return False


def decode_entry(line: bytes, what: str = "log.jsonl line") -> dict:
    """One log line parsed strictly (RFC 7493), with the four header keys first and in order, and
    exactly the bytes encode_entry writes for it; PackageError otherwise. Does not check the chain."""
    d = jsonio.loads_object(line, what, LINE_LIMIT)
    if tuple(d)[:4] != HEADER_KEYS:
        raise PackageError(f"{what}: must start with the keys {', '.join(HEADER_KEYS)} in that order")
    if not _is_canonical(d, line):
        raise PackageError(f"{what}: not in the exact format this tool writes")
    return d


def read_entries(stream: BinaryIO, what: str = "log.jsonl") -> list[dict]:
    """Every entry of a log stream, each decoded strictly (decode_entry); the chain is check_chain's job."""
    return [decode_entry(line, f"{what} line {n}") for n, line in jsonio.iter_lines(stream, what, LINE_LIMIT)]


@dataclass(frozen=True)
class ChainReport:
    """What the chain checker found: entry count, head, the last entry, and every problem."""

    entries: int
    head: str
    last: dict | None
    kinds: tuple[str, ...]
    findings: tuple[str, ...]

    @property
    def ok(self) -> bool:
        return not self.findings


def check_chain(stream: BinaryIO, what: str = "log.jsonl") -> ChainReport:
    """Check every line of a log: strict JSON, header keys in order, seq, prev links, time, kind."""
    findings: list[str] = []
    prev = GENESIS
    last = None
    kinds: list[str] = []
    n = 0

    def add(msg: str) -> None:
        if len(findings) < MAX_FINDINGS:
            findings.append(msg)
        elif len(findings) == MAX_FINDINGS:
            findings.append(f"{what}: further problems not listed")

    try:
        for n, line in jsonio.iter_lines(stream, what, LINE_LIMIT):
            digest = hashlib.sha256(line).hexdigest()
            try:
                d = jsonio.loads_object(line, f"{what} line {n}", LINE_LIMIT)
            except PackageError as e:
                add(str(e))
                prev, last = digest, None
                continue
            if tuple(d)[:4] != HEADER_KEYS:
                add(f"{what} line {n}: must start with the keys {', '.join(HEADER_KEYS)} in that order")
            if d.get("seq") != n - 1:
                add(f"{what} line {n}: seq is {d.get('seq')!r}, expected {n - 1} (a line was removed or reordered)")
            if d.get("prev") != prev:
                add(f"{what} line {n}: prev does not match the SHA-256 of the previous line "
                    f"(a line was removed, reordered or edited)")
            if not isinstance(d.get("time"), str) or not _TIME.fullmatch(d["time"]):
                add(f"{what} line {n}: time is not a UTC timestamp ending in Z")
            kind = d.get("kind")
            if not isinstance(kind, str) or not _KIND.fullmatch(kind):
                add(f"{what} line {n}: kind is missing or not a lowercase word")
            else:
                kinds.append(kind)
                if tuple(d)[:4] == HEADER_KEYS and not _is_canonical(d, line):
                    add(f"{what} line {n}: not in the exact format this tool writes")
            prev, last = digest, d
    except PackageError as e:
        add(str(e))
    if n == 0:
        add(f"{what}: the log is empty")
    return ChainReport(n, prev, last, tuple(kinds), tuple(findings))


class TransformLog:
    """Append-only writer of a hash-chained log file in a staging directory.

    An existing file is checked and continued (its chain must be intact). Each append writes
    and flushes one complete line, so an interrupted run leaves a valid prefix.
    """

    def __init__(self, path: Path, clock: Callable[[], str] = utc_now) -> None:
        self.path = Path(path)
        self._clock = clock
        self._seq = 0
        self._head = GENESIS
        if self.path.is_symlink():
            raise OutputError(f"{self.path} is a symlink; refusing to write the log through it")
        if self.path.exists():
            with open(self.path, "rb") as f:
                report = check_chain(f, self.path.name)
            if report.findings and not (report.entries == 0 and self.path.stat().st_size == 0):
                raise OutputError(f"cannot continue {self.path}: {report.findings[0]}")
            self._seq, self._head = report.entries, report.head

    @property
    def head(self) -> str:
        """Hex SHA-256 of the last line's bytes (GENESIS when the log is empty)."""
        return self._head

    @property
    def entries(self) -> int:
        return self._seq

    def append(self, kind: str, **fields: Any) -> dict:
        """Write one entry and return it as a dict (header keys first)."""
        try:
            line = encode_entry(self._seq, self._head, self._clock(), kind, fields)
        except (TypeError, ValueError) as e:
            raise OutputError(f"cannot record log entry {kind!r}: {e}") from None
        fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
        with os.fdopen(fd, "ab") as f:
            f.write(line)
            f.flush()
        self._seq += 1
        self._head = hashlib.sha256(line).hexdigest()
        return jsonio.loads_object(line, "log entry")

    def disclosure(self, **fields: Any) -> dict:
        """Record a disclosure (date, recipient, organisation, purpose, request_reference)."""
        unknown = set(fields) - set(DISCLOSURE_FIELDS)
        if unknown:
            raise OutputError(f"unknown disclosure field(s) {sorted(unknown)}; allowed: {', '.join(DISCLOSURE_FIELDS)}")
        return self.append("disclosure", **{k: v for k, v in fields.items() if v is not None})


def check_chain_bytes(data: bytes, what: str = "log.jsonl") -> ChainReport:
    """check_chain over an in-memory log."""
    return check_chain(io.BytesIO(data), what)
