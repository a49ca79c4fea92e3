"""tracks.json: one record per track id over the whole run (or over the rows a derived package kept).

    {"tracks":[{"first_frame":0,"first_t":0.0,"frames_observed":40,"frames_predicted":3,"id":1,
                "last_frame":42,"last_t":1.68},…]}

Compact JSON with sorted keys and a final newline; times rounded to 6 decimals (microseconds).
Track ids are pseudonyms: they link a person's rows, so the file is personal data too.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from redact import jsonio
from redact.errors import PackageError

NAME = "tracks.json"
LIMIT = 64 * 1024 * 1024  # bytes; common practice
TIME_DECIMALS = 6
_KEYS = ("id", "first_frame", "last_frame", "frames_observed", "frames_predicted", "first_t", "last_t")


@dataclass(frozen=True)
class TrackRecord:
    """One track: first/last frame index and time (s), frames it was observed and predicted in."""

    id: int
    first_frame: int
    last_frame: int
    frames_observed: int
    frames_predicted: int
    first_t: float
    last_t: float


def encode_tracks(tracks: Iterable[TrackRecord]) -> bytes:
    """The tracks.json bytes for these records, in the order given (the only writer of the file)."""
    items = []
    for r in tracks:
        for k in ("first_t", "last_t"):
            if not math.isfinite(getattr(r, k)):
                raise ValueError(f"track {r.id}: {k} is not finite")
        items.append({"id": int(r.id), "first_frame": int(r.first_frame), "last_frame": int(r.last_frame),
                      "frames_observed": int(r.frames_observed), "frames_predicted": int(r.frames_predicted),
                      "first_t": round(float(r.first_t), TIME_DECIMALS),
                      "last_t": round(float(r.last_t), TIME_DECIMALS)})
    return jsonio.dumps({"tracks": items}) + b"\n"


def decode_tracks(data: bytes, what: str = NAME) -> tuple[TrackRecord, ...]:
    """Parse tracks.json strictly and require the exact bytes encode_tracks writes; PackageError otherwise."""
    doc = jsonio.loads_object(data, what, LIMIT)
    if set(doc) != {"tracks"} or not isinstance(doc["tracks"], list):
        raise PackageError(f'{what}: expected {{"tracks": [...]}}')
    out = []
    for i, t in enumerate(doc["tracks"]):
        if not isinstance(t, dict) or set(t) != set(_KEYS):
            raise PackageError(f"{what}: track {i} must have exactly the fields {', '.join(_KEYS)}")
        for k in _KEYS[:5]:
            if isinstance(t[k], bool) or not isinstance(t[k], int) or t[k] < 0:
                raise PackageError(f"{what}: track {i} {k} must be a non-negative integer")
        for k in _KEYS[5:]:
            if not isinstance(t[k], float):
                raise PackageError(f"{what}: track {i} {k} must be a number with a decimal point")
        out.append(TrackRecord(*(t[k] for k in _KEYS)))
    records = tuple(out)
    if encode_tracks(records) != bytes(data):
        raise PackageError(f"{what}: not in the exact format this tool writes")
    return records
