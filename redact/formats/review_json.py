"""review.json: the frame ranges a person must review first, and the rules that flagged them.

    {"frames": 300, "kind": "review ranges", "note": "…", "ranges": [{"explained": ["a person
     followed without being detected"], "frames": [31, 40], "reasons": ["coasting"], "seconds":
     [1.24, 1.6]}], "rules": {…}, "version": 2}

JSON with sorted keys, indented by two spaces, and a final newline; times rounded to 6 decimals.
Each range has the one shape every command shows flagged ranges in (`range_record`: review.json,
`process --json`, `inspect --json`, `audit --json`): inclusive frames, seconds, reason codes and
the same reasons in plain words (REASON_WORDS, also what the terminal and the report say).
Version 1 had frame_start, frame_end, t_start, t_end and reasons, and no words.
The ranges are a guide, not a clearance: a person must review the whole redacted video before any
disclosure. How frames are flagged: redact.redaction.quality.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from redact import jsonio
from redact.errors import PackageError

NAME = "review.json"
LIMIT = 64 * 1024 * 1024  # bytes; common practice
KIND = "review ranges"
VERSION = 2
REVIEW_NOTE = ("These ranges are where automated redaction is most likely to have missed someone. "
               "They are a guide, not a clearance: a person must review the whole redacted video "
               "before any disclosure.")
TIME_DECIMALS = 6
_RANGE_KEYS = {"frames", "seconds", "reasons", "explained"}

#: Each reason a range can be flagged for, in plain words.
REASON_WORDS: dict[str, str] = {
    "blurred": "blurred picture",
    "coasting": "a person followed without being detected",
    "count_drop": "fewer people detected than just before",
    "dark": "dark picture",
    "fault": "frame failed and was fully obscured",
    "kept_overlap": "a person left visible overlaps someone obscured",
    "low_confidence": "detector unsure of body points",
    "low_contrast": "low contrast",
    "dim": "much darker than this scene usually is",
    "unexplained_motion": "movement no tracked person explains (obscured anyway)",
    "camera_moved": "camera moved; the motion check is relearning the view",
    "lighting_change": "the whole picture changed at once (light)",
    # what the independent audit (redact.redaction.audit) finds
    "face": "a face found in the redacted video",
    "person": "a person found on picture pixels (not on the redaction's own fill)",
    "face_survived": "a face of the source is still there in the redacted video",
}


def in_words(reasons: Iterable) -> list[str]:
    """The plain words of each reason code (an unknown code is shown as it is)."""
    return [REASON_WORDS.get(str(r), str(r)) for r in reasons]


def range_record(first: int, last: int, t_first: float, t_last: float, reasons: Iterable) -> dict:
    """One flagged range in the shape used everywhere: {"frames": [first, last] (inclusive),
    "seconds": [t_first, t_last] (6 decimals), "reasons": [codes], "explained": [plain words]}."""
    if not (math.isfinite(t_first) and math.isfinite(t_last)):
        raise ValueError("review range times must be finite")
    codes = [str(r) for r in reasons]
    return {"frames": [int(first), int(last)],
            "seconds": [round(float(t_first), TIME_DECIMALS), round(float(t_last), TIME_DECIMALS)],
            "reasons": codes, "explained": in_words(codes)}
_KEYS = {"kind", "version", "note", "frames", "rules", "ranges"}


@dataclass(frozen=True)
class ReviewRange:
    """Frames frame_start..frame_end (inclusive), times t_start..t_end, with the sorted reasons."""

    frame_start: int
    frame_end: int
    t_start: float
    t_end: float
    reasons: tuple[str, ...]

    def as_record(self) -> dict:
        """This range in the shared shape (`range_record`)."""
        return range_record(self.frame_start, self.frame_end, self.t_start, self.t_end, self.reasons)

    def describe(self) -> str:
        """One line for people: frames, seconds and the reasons in plain words."""
        return (f"frames {self.frame_start}-{self.frame_end} ({self.t_start:.2f}-{self.t_end:.2f} s): "
                + "; ".join(in_words(self.reasons)))


@dataclass(frozen=True)
class ReviewFile:
    """The whole file: the ranges, the rules used (a JSON object of named thresholds), how many
    frames were looked at (None when unknown) and the note shown with them."""

    ranges: tuple[ReviewRange, ...]
    rules: Mapping[str, Any] = field(default_factory=dict)
    frames: int | None = None
    note: str = REVIEW_NOTE


def encode_review(doc: ReviewFile) -> bytes:
    """The review.json bytes (the only writer of the file)."""
    ranges = [r.as_record() for r in doc.ranges]
    body = {"kind": KIND, "version": VERSION, "note": doc.note, "frames": doc.frames, "rules": dict(doc.rules),
            "ranges": ranges}
    return jsonio.dumps_indented(body) + b"\n"


def decode_review(data: bytes, what: str = NAME) -> ReviewFile:
    """Parse review.json strictly and require the exact bytes encode_review writes; PackageError otherwise."""
    d = jsonio.loads_object(bytes(data), what, LIMIT)
    if set(d) != _KEYS or d["kind"] != KIND or d["version"] != VERSION:
        raise PackageError(f"{what}: expected a {KIND!r} document of version {VERSION} with the fields "
                           f"{', '.join(sorted(_KEYS))}")
    if not isinstance(d["note"], str) or not isinstance(d["rules"], dict) or not isinstance(d["ranges"], list):
        raise PackageError(f"{what}: note must be text, rules an object and ranges a list")
    frames = d["frames"]
    if frames is not None and (isinstance(frames, bool) or not isinstance(frames, int) or frames < 0):
        raise PackageError(f"{what}: frames must be a non-negative integer or null")
    ranges = []
    for i, r in enumerate(d["ranges"]):
        rw = f"{what}: range {i}"
        if not isinstance(r, dict) or set(r) != _RANGE_KEYS:
            raise PackageError(f"{rw}: must have exactly the fields {', '.join(sorted(_RANGE_KEYS))}")
        span, seconds = r["frames"], r["seconds"]
        if not (isinstance(span, list) and len(span) == 2
                and all(isinstance(v, int) and not isinstance(v, bool) and v >= 0 for v in span)):
            raise PackageError(f"{rw}: frames must be [first, last], non-negative integers")
        if span[1] < span[0]:
            raise PackageError(f"{rw}: the last frame is before the first")
        if not (isinstance(seconds, list) and len(seconds) == 2
                and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in seconds)):
            raise PackageError(f"{rw}: seconds must be [first, last], numbers")
        if not isinstance(r["reasons"], list) or not all(isinstance(x, str) and x for x in r["reasons"]):
            raise PackageError(f"{rw}: reasons must be a list of names")
        if r["explained"] != in_words(r["reasons"]):
            raise PackageError(f"{rw}: explained must be the reasons in words")
        ranges.append(ReviewRange(span[0], span[1], float(seconds[0]), float(seconds[1]), tuple(r["reasons"])))
    doc = ReviewFile(tuple(ranges), d["rules"], frames, d["note"])
    if encode_review(doc) != bytes(data):
        raise PackageError(f"{what}: not in the exact format this tool writes")
    return doc
