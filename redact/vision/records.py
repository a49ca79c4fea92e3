"""Frozen records passed between stages: parallel NumPy arrays with checked shapes.

A change returns a new record; no stage writes into a record it was given.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from redact.vision.skeleton import NUM_KEYPOINTS


def _check(name: str, arr: np.ndarray, shape: tuple, dtype) -> np.ndarray:
    """Return arr as a read-only array of dtype, or raise naming expected and actual shapes."""
    a = np.ascontiguousarray(arr, dtype=dtype)
    if a.ndim != len(shape) or any(s is not None and s != d for s, d in zip(shape, a.shape)):
        want = "[" + ", ".join("N" if s is None else str(s) for s in shape) + "]"
        raise ValueError(f"{name}: expected shape {want}, got {list(a.shape)}")
    a.flags.writeable = False
    return a


@dataclass(frozen=True)
class Poses:
    """People found in one frame, in source pixel coordinates.

    boxes [N,4] float32 x1,y1,x2,y2; scores [N] float32 in 0..1;
    keypoints [N,17,3] float32 (x, y, confidence) in COCO-17 order.
    """

    boxes: np.ndarray
    scores: np.ndarray
    keypoints: np.ndarray

    def __post_init__(self) -> None:
        b = _check("boxes", self.boxes, (None, 4), np.float32)
        n = b.shape[0]
        object.__setattr__(self, "boxes", b)
        object.__setattr__(self, "scores", _check("scores", self.scores, (n,), np.float32))
        object.__setattr__(self, "keypoints", _check("keypoints", self.keypoints, (n, NUM_KEYPOINTS, 3), np.float32))

    def __len__(self) -> int:
        return int(self.boxes.shape[0])

    def select(self, index) -> Poses:
        """A new record with the rows picked by a boolean mask or integer index array."""
        return Poses(self.boxes[index], self.scores[index], self.keypoints[index])

    @staticmethod
    def empty() -> Poses:
        return Poses(np.zeros((0, 4)), np.zeros((0,)), np.zeros((0, NUM_KEYPOINTS, 3)))


@dataclass(frozen=True)
class Tracks:
    """People tracked in one frame: the tracker's view after an update.

    ids [M] int64 stable per tracker instance; boxes [M,4] float32; scores [M] float32;
    keypoints [M,17,3] float32 (smoothed for drawing where the tracker smooths);
    observed [M] bool: True when matched to a detection in this frame, False when coasting
    on prediction; misses [M] int32 consecutive frames without detection;
    margin [M] float32: extra margin (fraction of box size) to obscure, grows while coasting.
    hits [M] int32: frames in which the track has been observed so far (0 when unknown, e.g. rows
    read back from a package).
    """

    ids: np.ndarray
    boxes: np.ndarray
    scores: np.ndarray
    keypoints: np.ndarray
    observed: np.ndarray
    misses: np.ndarray
    margin: np.ndarray = field(default=None)  # type: ignore[arg-type]  # None: filled in by __post_init__
    hits: np.ndarray = field(default=None)  # type: ignore[arg-type]  # None: filled in by __post_init__

    def __post_init__(self) -> None:
        ids = _check("ids", self.ids, (None,), np.int64)
        m = ids.shape[0]
        object.__setattr__(self, "ids", ids)
        object.__setattr__(self, "boxes", _check("boxes", self.boxes, (m, 4), np.float32))
        object.__setattr__(self, "scores", _check("scores", self.scores, (m,), np.float32))
        object.__setattr__(self, "keypoints", _check("keypoints", self.keypoints, (m, NUM_KEYPOINTS, 3), np.float32))
        object.__setattr__(self, "observed", _check("observed", self.observed, (m,), np.bool_))
        object.__setattr__(self, "misses", _check("misses", self.misses, (m,), np.int32))
        margin = np.zeros(m, np.float32) if self.margin is None else self.margin
        object.__setattr__(self, "margin", _check("margin", margin, (m,), np.float32))
        hits = np.zeros(m, np.int32) if self.hits is None else self.hits
        object.__setattr__(self, "hits", _check("hits", hits, (m,), np.int32))

    def __len__(self) -> int:
        return int(self.ids.shape[0])

    def select(self, index) -> Tracks:
        """A new record with the rows picked by a boolean mask or integer index array."""
        return Tracks(self.ids[index], self.boxes[index], self.scores[index], self.keypoints[index],
                      self.observed[index], self.misses[index], self.margin[index], self.hits[index])

    @staticmethod
    def empty() -> Tracks:
        return Tracks(np.zeros(0, np.int64), np.zeros((0, 4)), np.zeros(0), np.zeros((0, NUM_KEYPOINTS, 3)),
                      np.zeros(0, bool), np.zeros(0, np.int32))
