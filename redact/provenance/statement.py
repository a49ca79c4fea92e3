"""The in-toto Statement v1 of a package as a typed value, with one encoder and one strict parser.

in-toto/attestation spec/v1/statement.md: `_type` https://in-toto.io/Statement/v1, `subject` a
non-empty list of ResourceDescriptors (each with a `digest`), `predicateType` a TypeURI and
`predicate` an object. Ours: one subject per package file (annotations role "package-file") and
at most one for the redacted video (role "redacted-video"), each with its sha256 digest and size:

    {"name": "skeletons.jsonl", "digest": {"sha256": "<hex>"},
     "annotations": {"role": "package-file", "bytes": 1234}}

Sign bytes, not objects: `encode` gives the exact payload that is signed, and `parse_statement`
is only ever called on payload bytes whose signature has already been checked.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from redact import jsonio
from redact.errors import PackageError
from redact.provenance.predicate import PREDICATE_TYPE, Predicate
from redact.provenance.signing import STATEMENT_TYPE

ROLE_FILE = "package-file"
ROLE_VIDEO = "redacted-video"
STATEMENT_LIMIT = 16 * 1024 * 1024  # bytes; common practice, as the envelope limit
_HEX64 = re.compile(r"[0-9a-f]{64}")


def _name_problem(name: str) -> str | None:
    # Imported here: package.py imports this module.
    from redact.provenance.package import check_name

    return check_name(name)


@dataclass(frozen=True)
class Subject:
    """One signed artefact: its name, SHA-256 (hex), size in bytes and role."""

    name: str
    sha256: str
    bytes: int
    role: str = ROLE_FILE

    def to_json(self) -> dict:
        return {"name": self.name, "digest": {"sha256": self.sha256},
                "annotations": {"role": self.role, "bytes": self.bytes}}


@dataclass(frozen=True)
class Statement:
    """An in-toto Statement v1 over a package's files (and redacted video) with our predicate."""

    subjects: tuple[Subject, ...]
    predicate: Predicate

    predicate_type = PREDICATE_TYPE

    def to_json(self) -> dict:
        return {"_type": STATEMENT_TYPE, "subject": [s.to_json() for s in self.subjects],
                "predicateType": PREDICATE_TYPE, "predicate": self.predicate.to_json()}

    def encode(self) -> bytes:
        """The payload bytes that are signed (compact, sorted keys: redact.jsonio.dumps)."""
        if not self.subjects:
            raise ValueError("a statement needs at least one subject")
        return jsonio.dumps(self.to_json())

    @property
    def files(self) -> dict[str, Subject]:
        """Package-file subjects by name."""
        return {s.name: s for s in self.subjects if s.role == ROLE_FILE}

    @property
    def video(self) -> Subject | None:
        """The redacted-video subject, if the statement names one."""
        return next((s for s in self.subjects if s.role == ROLE_VIDEO), None)


def _subjects(items: Any, findings: list[str]) -> list[Subject]:
    if not isinstance(items, list) or not items:
        findings.append("statement: subject must be a non-empty list")
        return []
    out: list[Subject] = []
    seen: set[str] = set()
    videos = 0
    for i, s in enumerate(items):
        name = s.get("name") if isinstance(s, dict) else None
        label = f"statement subject {i} ({name!r})"
        if not isinstance(s, dict) or not isinstance(name, str):
            findings.append(f"statement subject {i}: malformed (needs name, digest, annotations)")
            continue
        bad = len(findings)
        extra = sorted(set(s) - {"name", "digest", "annotations"})
        if extra:
            findings.append(f"{label}: unexpected field(s) {', '.join(extra)}")
        why = _name_problem(name)
        if why:
            findings.append(f"{label}: unsafe name ({why})")
        if name in seen:
            findings.append(f"{label}: named twice")
        seen.add(name)
        digest = s.get("digest")
        if not isinstance(digest, dict) or set(digest) != {"sha256"} or not isinstance(digest.get("sha256"), str) \
                or not _HEX64.fullmatch(digest["sha256"]):
            findings.append(f"{label}: digest must be exactly {{sha256: 64 lowercase hex digits}}")
        ann = s.get("annotations")
        role = ann.get("role") if isinstance(ann, dict) else None
        size = ann.get("bytes") if isinstance(ann, dict) else None
        if isinstance(ann, dict) and set(ann) - {"role", "bytes"}:
            findings.append(f"{label}: unexpected annotation(s) {', '.join(sorted(set(ann) - {'role', 'bytes'}))}")
        if role not in (ROLE_FILE, ROLE_VIDEO):
            findings.append(f"{label}: annotations.role must be {ROLE_FILE!r} or {ROLE_VIDEO!r}")
        if not isinstance(size, int) or isinstance(size, bool) or size < 0:
            findings.append(f"{label}: annotations.bytes must be a non-negative integer")
        if role == ROLE_VIDEO:
            videos += 1
        if role == ROLE_FILE and name == "envelope.json":
            findings.append(f"{label}: the envelope cannot be its own subject")
        sha = digest.get("sha256") if isinstance(digest, dict) else None
        if len(findings) == bad and isinstance(sha, str) and isinstance(size, int) and isinstance(role, str):
            out.append(Subject(name, sha, size, role))
    if videos > 1:
        findings.append(f"statement: {videos} redacted-video subjects, at most 1 allowed")
    return out


def statement_findings(payload: bytes) -> tuple[Statement | None, list[str]]:
    """Parse payload bytes strictly as our Statement; (statement, []) or (None, every problem found)."""
    try:
        doc = jsonio.loads_object(payload, "statement", STATEMENT_LIMIT)
    except PackageError as e:
        return None, [str(e)]
    findings: list[str] = []
    if doc.get("_type") != STATEMENT_TYPE:
        findings.append(f"statement: _type is {doc.get('_type')!r}, expected {STATEMENT_TYPE}")
    if doc.get("predicateType") != PREDICATE_TYPE:
        findings.append(f"statement: predicateType is {doc.get('predicateType')!r}, expected {PREDICATE_TYPE}")
    extra = sorted(set(doc) - {"_type", "subject", "predicateType", "predicate"})
    if extra:
        findings.append(f"statement: unexpected field(s) {', '.join(extra)}")
    subjects = _subjects(doc.get("subject"), findings)
    predicate = None
    try:
        predicate = Predicate.parse(doc.get("predicate"))
        if predicate.log is None:
            findings.append("predicate.log: missing (a signed predicate records the log head)")
    except PackageError as e:
        findings.append(str(e))
    if findings or predicate is None:
        return None, findings
    return Statement(tuple(subjects), predicate), []


def parse_statement(payload: bytes) -> Statement:
    """The strict parser; PackageError listing every problem. Call it on verified payload bytes
    only (redact.provenance.verify), or to read a package explicitly marked unverified."""
    statement, findings = statement_findings(payload)
    if statement is None:
        raise PackageError("; ".join(findings))
    return statement
