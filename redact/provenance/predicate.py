"""The signed predicate of a skeleton package as a typed value, with one encoder and one strict parser.

A package's in-toto Statement v1 (in-toto/attestation spec/v1/statement.md) carries this
predicate under `predicateType` PREDICATE_TYPE. Its JSON Schema is docs/predicate.schema.json;
docs/predicate.md says what each field means. Every top-level key is always written (null where
a field does not apply), so a reader never has to guess whether a key was forgotten.

Writers build a `Predicate` and hand it to redact.provenance.package.write_package; readers get one
back from redact.provenance.statement.parse_statement after the signature has been checked over the
exact payload bytes. `parameters`, `privacy` and `plan` are recorded as the stages that own them
describe themselves (a read-only JSON object each); everything else is typed here.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any

from redact.errors import PackageError

# A TypeURI (in-toto spec/v1/field_types.md): "MAY be unresolvable", "SHOULD include a version".
# A URN in the project's own name claims nobody's domain; change it here and in the schema's const.
PREDICATE_TYPE = "urn:redact:skeleton-package:v1"
DISCLOSURE_FIELDS = ("date", "recipient", "organisation", "purpose", "request_reference")
TOP_LEVEL_KEYS = ("source", "model", "parameters", "privacy", "disclosure", "review", "faults", "motion", "plan",
                  "audit", "parent", "human_review", "tool", "created", "log")
_HEX64 = re.compile(r"[0-9a-f]{64}")
_FPS = re.compile(r"(0|[1-9][0-9]*)/[1-9][0-9]*")
# RFC 3339 date-time in UTC ("Z"), as in-toto's Timestamp field type requires.
_TIME = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d{1,9})?Z")


# ---- read-only JSON values -------------------------------------------------------------------

def freeze(value: Any) -> Any:
    """A deep read-only copy of a JSON value (objects become mappingproxy, arrays tuples)."""
    if isinstance(value, Mapping):
        return MappingProxyType({k: freeze(v) for k, v in value.items()})
    if isinstance(value, (list, tuple)):
        return tuple(freeze(v) for v in value)
    return value


def thaw(value: Any) -> Any:
    """Plain dicts and lists again, for json encoding."""
    if isinstance(value, Mapping):
        return {k: thaw(v) for k, v in value.items()}
    if isinstance(value, tuple):
        return [thaw(v) for v in value]
    return value


class _Fields:
    """Strict reading of one JSON object: each field taken once, by type; leftovers are refused."""

    def __init__(self, obj: Any, where: str) -> None:
        if not isinstance(obj, dict):
            raise PackageError(f"{where}: must be a JSON object")
        self.obj, self.where = obj, where
        self.used: set[str] = set()

    def _get(self, key: str, required: bool = True) -> Any:
        self.used.add(key)
        if key not in self.obj:
            if required:
                raise PackageError(f"{self.where}.{key}: missing")
            return None
        return self.obj[key]

    def _bad(self, key: str, what: str) -> PackageError:
        return PackageError(f"{self.where}.{key}: must be {what}")

    def text(self, key: str, nullable: bool = False, pattern: re.Pattern | None = None, what: str = "a string") -> Any:
        v = self._get(key)
        if v is None and nullable:
            return None
        if not isinstance(v, str) or (pattern is not None and not pattern.fullmatch(v)):
            raise self._bad(key, what + (" or null" if nullable else ""))
        return v

    def count(self, key: str, nullable: bool = False) -> Any:
        v = self._get(key)
        if v is None and nullable:
            return None
        if isinstance(v, bool) or not isinstance(v, int) or v < 0:
            raise self._bad(key, "a non-negative integer" + (" or null" if nullable else ""))
        return v

    def number(self, key: str) -> float:
        v = self._get(key)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
            raise self._bad(key, "a non-negative number")
        return float(v)

    def flag(self, key: str) -> bool:
        v = self._get(key)
        if not isinstance(v, bool):
            raise self._bad(key, "true or false")
        return v

    def object(self, key: str, nullable: bool = False) -> Any:
        v = self._get(key)
        if v is None and nullable:
            return None
        if not isinstance(v, dict):
            raise self._bad(key, "a JSON object" + (" or null" if nullable else ""))
        return v

    def done(self) -> None:
        extra = sorted(set(self.obj) - self.used)
        if extra:
            raise PackageError(f"{self.where}: unexpected field(s) {', '.join(extra)}")


# ---- the parts ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class SourceRecord:
    """The source video as it was read: SHA-256 and size of the bytes read, stream geometry and rate
    (fps an exact "num/den"), frames decoded, why decoding stopped early (None when it did not),
    and the RFC 6962 root over the per-frame digests (filled in by write_package)."""

    name: str
    sha256: str
    bytes: int
    duration: float
    fps: str
    frames: int
    width: int
    height: int
    stopped_early: str | None = None
    frames_root: str | None = None

    def to_json(self) -> dict:
        return {"name": self.name, "sha256": self.sha256, "bytes": self.bytes, "duration": self.duration,
                "fps": self.fps, "frames": self.frames, "width": self.width, "height": self.height,
                "stopped_early": self.stopped_early, "frames_root": self.frames_root}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.source") -> SourceRecord:
        f = _Fields(obj, where)
        r = cls(f.text("name"), f.text("sha256", pattern=_HEX64, what="64 lowercase hex digits"), f.count("bytes"),
                f.number("duration"), f.text("fps", pattern=_FPS, what='an exact rate "num/den"'), f.count("frames"),
                f.count("width"), f.count("height"), f.text("stopped_early", nullable=True),
                f.text("frames_root", nullable=True, pattern=_HEX64, what="64 lowercase hex digits"))
        f.done()
        return r

    def partial_warning(self) -> str | None:
        """The words a recipient must read first when the source was only partly decoded (None when
        it was decoded to its end): shown at the top of verify, inspect and the report."""
        if self.stopped_early is None:
            return None
        return (f"PARTIAL SOURCE: this package covers only the first {self.frames} frame(s) of {self.name}; "
                f"decoding stopped before the end of the file ({self.stopped_early}). Nothing after that point "
                "was redacted, tracked or checked, and people who appear only there are in neither this "
                "package nor the redacted video.")

    @property
    def fps_value(self) -> float | None:
        """The frame rate as a number (None when it is 0/1, i.e. unknown)."""
        num, den = (int(x) for x in self.fps.split("/"))
        return num / den if num else None


@dataclass(frozen=True)
class ModelRecord:
    """The pose model that made the skeletons: bundled model id, SHA-256 of its file, licence."""

    id: str
    sha256: str
    licence: str

    def to_json(self) -> dict:
        return {"id": self.id, "sha256": self.sha256, "licence": self.licence}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.model") -> ModelRecord:
        f = _Fields(obj, where)
        r = cls(f.text("id"), f.text("sha256", pattern=_HEX64, what="64 lowercase hex digits"), f.text("licence"))
        f.done()
        return r


@dataclass(frozen=True)
class Disclosure:
    """Who receives the material and why (EDPB Guidelines 3/2019; UK ICO video surveillance
    guidance): each field optional; only the fields given are written."""

    date: str | None = None
    recipient: str | None = None
    organisation: str | None = None
    purpose: str | None = None
    request_reference: str | None = None

    @classmethod
    def of(cls, fields: Mapping[str, str] | None) -> Disclosure:
        """From a mapping of disclosure fields (None or empty: no disclosure record)."""
        fields = dict(fields or {})
        unknown = sorted(set(fields) - set(DISCLOSURE_FIELDS))
        if unknown:
            raise PackageError(f"disclosure: unknown field(s) {', '.join(unknown)}")
        return cls(**{k: v for k, v in fields.items() if v is not None})

    def to_json(self) -> dict:
        return {k: getattr(self, k) for k in DISCLOSURE_FIELDS if getattr(self, k) is not None}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.disclosure") -> Disclosure:
        f = _Fields(obj, where)
        values = {k: f.text(k) for k in DISCLOSURE_FIELDS if k in obj}
        f.done()
        return cls(**values)


@dataclass(frozen=True)
class ReviewCounts:
    """How much was flagged for human review: ranges in review.json and frames flagged."""

    ranges: int
    flagged_frames: int

    def to_json(self) -> dict:
        return {"ranges": self.ranges, "flagged_frames": self.flagged_frames}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.review") -> ReviewCounts:
        f = _Fields(obj, where)
        r = cls(f.count("ranges"), f.count("flagged_frames"))
        f.done()
        return r


@dataclass(frozen=True)
class FaultCounts:
    """Frames that could not be processed and were written fully obscured."""

    frames: int

    def to_json(self) -> dict:
        return {"frames": self.frames}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.faults") -> FaultCounts:
        f = _Fields(obj, where)
        r = cls(f.count("frames"))
        f.done()
        return r


@dataclass(frozen=True)
class MotionCounts:
    """What the motion net obscured: whether it ran, frames with obscured moving areas, areas
    found, frames flagged for unexplained motion, and frames per motion state (ok, learning,
    camera_moved, lighting_change)."""

    enabled: bool
    frames_obscured: int
    areas: int
    frames_flagged: int
    states: Mapping[str, int]

    def __post_init__(self) -> None:
        object.__setattr__(self, "states", freeze(dict(self.states)))

    def to_json(self) -> dict:
        return {"enabled": self.enabled, "frames_obscured": self.frames_obscured, "areas": self.areas,
                "frames_flagged": self.frames_flagged, "states": thaw(self.states)}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.motion") -> MotionCounts:
        f = _Fields(obj, where)
        states = f.object("states")
        for k, v in states.items():
            if not isinstance(v, int) or isinstance(v, bool) or v < 0:
                raise PackageError(f"{where}.states.{k}: must be a non-negative integer")
        r = cls(f.flag("enabled"), f.count("frames_obscured"), f.count("areas"), f.count("frames_flagged"), states)
        f.done()
        return r


@dataclass(frozen=True)
class AuditRecord:
    """The independent scan of the redacted video (redact.redaction.audit), in totals: source_faces
    and survived are None when no source was scanned."""

    passed: bool
    faces: int
    persons: int
    source_faces: int | None = None
    survived: int | None = None

    @classmethod
    def of(cls, summary: Mapping[str, Any]) -> AuditRecord:
        """From redact.redaction.audit.audit_summary's dict."""
        return cls(bool(summary["passed"]), int(summary["faces"]), int(summary["persons"]),
                   None if summary.get("source_faces") is None else int(summary["source_faces"]),
                   None if summary.get("survived") is None else int(summary["survived"]))

    def to_json(self) -> dict:
        return {"passed": self.passed, "faces": self.faces, "persons": self.persons,
                "source_faces": self.source_faces, "survived": self.survived}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.audit") -> AuditRecord:
        f = _Fields(obj, where)
        r = cls(f.flag("passed"), f.count("faces"), f.count("persons"), f.count("source_faces", nullable=True),
                f.count("survived", nullable=True))
        f.done()
        return r


@dataclass(frozen=True)
class ParentRecord:
    """For a derived package: the parent's exact statement bytes (SHA-256), the key that signed it,
    its log head, and the parent's privacy record (None when the parent had none)."""

    statement_sha256: str
    key_id: str
    log_head: str | None
    privacy: Mapping[str, Any] | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "privacy", None if self.privacy is None else freeze(self.privacy))

    def to_json(self) -> dict:
        return {"statement_sha256": self.statement_sha256, "key_id": self.key_id, "log_head": self.log_head,
                "privacy": thaw(self.privacy)}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.parent") -> ParentRecord:
        f = _Fields(obj, where)
        hex64 = "64 lowercase hex digits"
        r = cls(f.text("statement_sha256", pattern=_HEX64, what=hex64), f.text("key_id"),
                f.text("log_head", nullable=True, pattern=_HEX64, what=hex64), f.object("privacy", nullable=True))
        f.done()
        return r


@dataclass(frozen=True)
class ToolRecord:
    """The program that wrote the package."""

    name: str
    version: str

    def to_json(self) -> dict:
        return {"name": self.name, "version": self.version}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.tool") -> ToolRecord:
        f = _Fields(obj, where)
        r = cls(f.text("name"), f.text("version"))
        f.done()
        return r


@dataclass(frozen=True)
class LogRecord:
    """The transform log at signing: SHA-256 of its last line's exact bytes and its entry count."""

    head: str
    entries: int

    def to_json(self) -> dict:
        return {"head": self.head, "entries": self.entries}

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate.log") -> LogRecord:
        f = _Fields(obj, where)
        r = cls(f.text("head", pattern=_HEX64, what="64 lowercase hex digits"), f.count("entries"))
        f.done()
        return r


# ---- the predicate -----------------------------------------------------------------------------

@dataclass(frozen=True)
class Predicate:
    """What a package's signature vouches for besides the file hashes (see the module docstring).

    `log` is None until write_package adds the log head at signing; a parsed (signed) predicate
    always has it. `parent` is set for derived, reviewed and disclosure-record packages; `plan` and
    `audit` for runs that had them; `human_review` for a copy reviewed with `redact review`.
    """

    source: SourceRecord
    model: ModelRecord
    parameters: Mapping[str, Any]
    privacy: Mapping[str, Any]
    disclosure: Disclosure
    review: ReviewCounts
    faults: FaultCounts
    tool: ToolRecord
    created: str
    plan: Mapping[str, Any] | None = None
    audit: AuditRecord | None = None
    parent: ParentRecord | None = None
    motion: MotionCounts | None = None
    log: LogRecord | None = field(default=None)
    human_review: Mapping[str, Any] | None = None  # a reviewed copy: as redact.review.outputs records it

    def __post_init__(self) -> None:
        object.__setattr__(self, "parameters", freeze(self.parameters))
        object.__setattr__(self, "privacy", freeze(self.privacy))
        object.__setattr__(self, "plan", None if self.plan is None else freeze(self.plan))
        object.__setattr__(self, "human_review", None if self.human_review is None else freeze(self.human_review))

    def to_json(self) -> dict:
        """Plain JSON values in the fixed key set (encode with redact.jsonio.dumps)."""
        return {
            "source": self.source.to_json(),
            "model": self.model.to_json(),
            "parameters": thaw(self.parameters),
            "privacy": thaw(self.privacy),
            "disclosure": self.disclosure.to_json(),
            "review": self.review.to_json(),
            "faults": self.faults.to_json(),
            "motion": None if self.motion is None else self.motion.to_json(),
            "plan": thaw(self.plan),
            "audit": None if self.audit is None else self.audit.to_json(),
            "parent": None if self.parent is None else self.parent.to_json(),
            "human_review": thaw(self.human_review),
            "tool": self.tool.to_json(),
            "created": self.created,
            "log": None if self.log is None else self.log.to_json(),
        }

    @classmethod
    def parse(cls, obj: Any, where: str = "predicate") -> Predicate:
        """The strict parser: every key of TOP_LEVEL_KEYS present, each field of its type, nothing
        else; raises PackageError naming the first bad field."""
        f = _Fields(obj, where)
        for k in TOP_LEVEL_KEYS:
            if k not in obj:
                raise PackageError(f"{where}.{k}: missing")

        def sub(key: str, parser, nullable: bool = False):
            v = f.object(key, nullable)
            return None if v is None else parser(v, f"{where}.{key}")

        p = cls(
            source=sub("source", SourceRecord.parse),
            model=sub("model", ModelRecord.parse),
            parameters=f.object("parameters"),
            privacy=f.object("privacy"),
            disclosure=sub("disclosure", Disclosure.parse),
            review=sub("review", ReviewCounts.parse),
            faults=sub("faults", FaultCounts.parse),
            motion=sub("motion", MotionCounts.parse, nullable=True),
            plan=f.object("plan", nullable=True),
            audit=sub("audit", AuditRecord.parse, nullable=True),
            parent=sub("parent", ParentRecord.parse, nullable=True),
            human_review=f.object("human_review", nullable=True),
            tool=sub("tool", ToolRecord.parse),
            created=f.text("created", pattern=_TIME, what="an RFC 3339 UTC time ending in Z"),
            log=sub("log", LogRecord.parse, nullable=True),
        )
        f.done()
        return p

    def signed(self, log: LogRecord) -> Predicate:
        """This predicate with the log head recorded at signing."""
        return replace(self, log=log)

    def with_frames_root(self, root: str) -> Predicate:
        """This predicate with source.frames_root set (the RFC 6962 root of frames.sha256)."""
        return replace(self, source=replace(self.source, frames_root=root))

    @property
    def stopped_early(self) -> str | None:
        """Why decoding of the source stopped before its end, or None: a package of a partly
        decoded source describes only the frames before that point."""
        return self.source.stopped_early
