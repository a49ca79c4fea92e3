"""review.json: the frame ranges a person must review first, and the rules that flagged them.

    {"frames": 300, "kind": "review ranges", "note": "…", "ranges": [{"frame_end": 40,
     "frame_start": 31, "reasons": ["coasting"], "t_end": 1.6, "t_start": 1.24}], "rules": {…},
     "version": 1}

JSON with sorted keys, indented by two spaces, and a final newline; times rounded to 6 decimals.
The ranges are a guide, not a clearance: a person must review the whole redacted video before any
disclosure. How frames are flagged: redact.redaction.quality.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from redact import jsonio
from redact.errors import PackageError

NAME = "review.json"
LIMIT = 64 * 1024 * 1024  # bytes; common practice
KIND = "review ranges"
VERSION = 1
REVIEW_NOTE = ("These ranges are where automated redaction is most likely to have missed someone. "
               "They are a guide, not a clearance: a person must review the whole redacted video "
               "before any disclosure.")
TIME_DECIMALS = 6
_RANGE_KEYS = {"frame_start", "frame_end", "t_start", "t_end", "reasons"}
_KEYS = {"kind", "version", "note", "frames", "rules", "ranges"}


@dataclass(frozen=True)
class ReviewRange:
    """Frames frame_start..frame_end (inclusive), times t_start..t_end, with the sorted reasons."""

    frame_start: int
    frame_end: int
    t_start: float
    t_end: float
    reasons: tuple[str, ...]


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
    ranges = []
    for r in doc.ranges:
        if not (math.isfinite(r.t_start) and math.isfinite(r.t_end)):
            raise ValueError("review range times must be finite")
        ranges.append({"frame_start": int(r.frame_start), "frame_end": int(r.frame_end),
                       "t_start": round(float(r.t_start), TIME_DECIMALS),
                       "t_end": round(float(r.t_end), TIME_DECIMALS), "reasons": list(r.reasons)})
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
        for k in ("frame_start", "frame_end"):
            if isinstance(r[k], bool) or not isinstance(r[k], int) or r[k] < 0:
                raise PackageError(f"{rw}: {k} must be a non-negative integer")
        if r["frame_end"] < r["frame_start"]:
            raise PackageError(f"{rw}: frame_end is before frame_start")
        for k in ("t_start", "t_end"):
            if isinstance(r[k], bool) or not isinstance(r[k], (int, float)):
                raise PackageError(f"{rw}: {k} must be a number")
        if not isinstance(r["reasons"], list) or not all(isinstance(x, str) and x for x in r["reasons"]):
            raise PackageError(f"{rw}: reasons must be a list of names")
        ranges.append(ReviewRange(r["frame_start"], r["frame_end"], float(r["t_start"]), float(r["t_end"]),
                                  tuple(r["reasons"])))
    doc = ReviewFile(tuple(ranges), d["rules"], frames, d["note"])
    if encode_review(doc) != bytes(data):
        raise PackageError(f"{what}: not in the exact format this tool writes")
    return doc
