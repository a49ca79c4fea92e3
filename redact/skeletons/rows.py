"""The skeleton row format: one JSON line per frame in `skeletons.jsonl`.

Numbers are written with fixed decimals by hand (not by json.dumps) so that reruns are
byte-identical: coordinates 2 decimals (pixels), confidences and scores 3, time 6.

    {"frame":12,"pts":6144,"t":0.480000,"status":"ok","people":[
      {"id":3,"state":"observed","score":0.912,"box":[x1,y1,x2,y2],"kp":[[x,y,c],…17]}]}

status is "ok", or "fault" for a frame that could not be processed and was fully obscured.
state is "observed" (matched to a detection in this frame) or "predicted" (coasting).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from redact.vision.records import Tracks
from redact.vision.skeleton import NUM_KEYPOINTS

STATUS_OK = "ok"
STATUS_FAULT = "fault"
COORD_DECIMALS = 2
CONF_DECIMALS = 3
TIME_DECIMALS = 6


def _num(x: float, decimals: int) -> str:
    """Fixed-decimal JSON number; NaN and infinities are refused (RFC 7493)."""
    x = float(x)
    if not math.isfinite(x):
        raise ValueError("non-finite number in a skeleton row")
    s = f"{x:.{decimals}f}"
    return "0" + s[2:] if s.startswith("-0") and float(s) == 0.0 else s  # no negative zero


@dataclass(frozen=True)
class FrameRow:
    """One parsed line of skeletons.jsonl; tracks holds the people of that frame."""

    frame: int
    pts: int | None
    t: float
    status: str
    tracks: Tracks


def encode_row(frame: int, pts: int | None, t: float, tracks: Tracks, status: str = STATUS_OK,
               coord_decimals: int = COORD_DECIMALS) -> bytes:
    """One skeleton row as UTF-8 bytes ending in a newline."""
    people = []
    for i in range(len(tracks)):
        box = ",".join(_num(v, coord_decimals) for v in tracks.boxes[i])
        kp = ",".join(
            f"[{_num(x, coord_decimals)},{_num(y, coord_decimals)},{_num(c, CONF_DECIMALS)}]"
            for x, y, c in tracks.keypoints[i]
        )
        state = "observed" if tracks.observed[i] else "predicted"
        people.append(
            f'{{"id":{int(tracks.ids[i])},"state":"{state}","score":{_num(tracks.scores[i], CONF_DECIMALS)},'
            f'"box":[{box}],"kp":[{kp}]}}'
        )
    pts_s = "null" if pts is None else str(int(pts))
    line = (f'{{"frame":{int(frame)},"pts":{pts_s},"t":{_num(t, TIME_DECIMALS)},"status":"{status}",'
            f'"people":[{",".join(people)}]}}\n')
    return line.encode("utf-8")


def _reject_constant(name: str):
    raise ValueError(f"non-finite number {name} is not allowed")


def _no_duplicates(pairs):
    keys = [k for k, _ in pairs]
    if len(keys) != len(set(keys)):
        raise ValueError(f"duplicate key in skeleton row: {sorted(k for k in keys if keys.count(k) > 1)[0]}")
    return dict(pairs)


def decode_row(line: bytes | str) -> FrameRow:
    """Parse one skeleton row strictly (no duplicate keys, no NaN); raises ValueError when malformed."""
    d = json.loads(line, object_pairs_hook=_no_duplicates, parse_constant=_reject_constant)
    people = d["people"]
    m = len(people)
    ids = np.array([p["id"] for p in people], np.int64)
    boxes = np.array([p["box"] for p in people], np.float32).reshape(m, 4)
    scores = np.array([p["score"] for p in people], np.float32)
    kps = np.array([p["kp"] for p in people], np.float32).reshape(m, NUM_KEYPOINTS, 3)
    observed = np.array([p["state"] == "observed" for p in people], bool)
    tracks = Tracks(ids, boxes, scores, kps, observed, np.zeros(m, np.int32))
    return FrameRow(int(d["frame"]), d["pts"], float(d["t"]), str(d["status"]), tracks)


def read_rows(lines: Iterable[bytes | str]) -> Iterator[FrameRow]:
    """Parse skeletons.jsonl lines lazily, skipping nothing: a blank line is an error."""
    for n, line in enumerate(lines, 1):
        try:
            yield decode_row(line)
        except (ValueError, KeyError, TypeError) as e:
            raise ValueError(f"skeletons.jsonl line {n}: {e}") from None
