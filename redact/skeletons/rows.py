"""Skeleton rows as the stages hold them (redact.vision.records.Tracks) ↔ the skeletons.jsonl format.

The format itself (fields, fixed decimals, strict decoding) has one owner,
redact.formats.skeletons_jsonl; this module only converts between its typed `Row` and the
NumPy `Tracks` record the pipeline, the de-identification options and the exports work with.
Skeleton data is pseudonymised, not anonymous.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np

from redact.formats import skeletons_jsonl as fmt
from redact.formats.skeletons_jsonl import CONF_DECIMALS, COORD_DECIMALS, STATUS_FAULT, STATUS_OK, TIME_DECIMALS
from redact.vision.records import Tracks
from redact.vision.skeleton import NUM_KEYPOINTS

__all__ = ["CONF_DECIMALS", "COORD_DECIMALS", "STATUS_FAULT", "STATUS_OK", "TIME_DECIMALS", "FrameRow", "decode_row",
           "encode_row", "read_rows", "row_of", "tracks_of"]


@dataclass(frozen=True)
class FrameRow:
    """One parsed line of skeletons.jsonl; tracks holds the people of that frame, `row` the typed line
    (units, decimals and per-person centres included)."""

    frame: int
    pts: int | None
    t: float
    status: str
    tracks: Tracks
    row: fmt.Row | None = None


def row_of(frame: int, pts: int | None, t: float, tracks: Tracks, status: str = STATUS_OK,
           coord_decimals: int = COORD_DECIMALS, units: str = "pixels", centres: np.ndarray | None = None) -> fmt.Row:
    """The typed row for the people in `tracks` (centres [M,2] in frame fractions, or None)."""
    people = []
    boxes, kps, scores = tracks.boxes.tolist(), tracks.keypoints.tolist(), tracks.scores.tolist()
    cs = None if centres is None else np.asarray(centres, np.float64).reshape(-1, 2).tolist()
    for i, tid in enumerate(tracks.ids.tolist()):
        people.append(fmt.Person(int(tid), fmt.OBSERVED if tracks.observed[i] else fmt.PREDICTED, scores[i],
                                 tuple(boxes[i]), tuple(tuple(k) for k in kps[i]),
                                 None if cs is None else (cs[i][0], cs[i][1])))
    return fmt.Row(int(frame), None if pts is None else int(pts), float(t), status, tuple(people), units,
                   coord_decimals)


def encode_row(frame: int, pts: int | None, t: float, tracks: Tracks, status: str = STATUS_OK,
               coord_decimals: int = COORD_DECIMALS) -> bytes:
    """One skeleton row (pixels) as UTF-8 bytes ending in a newline."""
    return fmt.encode_row(row_of(frame, pts, t, tracks, status, coord_decimals))


def tracks_of(row: fmt.Row) -> Tracks:
    """The people of a typed row as a Tracks record (misses 0 and hits unknown: a row does not hold them)."""
    m = len(row.people)
    p = row.people
    return Tracks(np.array([x.id for x in p], np.int64),
                  np.array([x.box for x in p], np.float32).reshape(m, 4),
                  np.array([x.score for x in p], np.float32),
                  np.array([x.keypoints for x in p], np.float32).reshape(m, NUM_KEYPOINTS, 3),
                  np.array([x.observed for x in p], bool), np.zeros(m, np.int32))


def decode_row(line: bytes | str) -> FrameRow:
    """Parse one skeleton row strictly (redact.formats.skeletons_jsonl); PackageError when malformed."""
    row = fmt.decode_row(line)
    return FrameRow(row.frame, row.pts, row.t, row.status, tracks_of(row), row)


def read_rows(lines: Iterable[bytes | str]) -> Iterator[FrameRow]:
    """Parse skeletons.jsonl lines lazily, naming the line of any problem; a blank line is an error."""
    for row in fmt.read_rows(lines):
        yield FrameRow(row.frame, row.pts, row.t, row.status, tracks_of(row), row)
