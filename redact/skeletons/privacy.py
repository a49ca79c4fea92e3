"""Skeleton de-identification options applied to skeletons.jsonl rows, as a stream.

CAUTION: these options lower the risk of re-identifying people from skeleton data; they do
not remove it. Gait alone identifies people: GaitPT (arXiv 2308.10623) recognises people from
pose skeletons with 82.6 % accuracy on CASIA-B, and body height and limb ratios carry much
identity (arXiv 2402.08320). Whatever options are chosen, the output is pseudonymised personal
data (GDPR Art. 4(5) and Recital 26), not anonymous data: share it only under an agreement
and with the approval of the data-protection officer.

Order of operations on each person (pixels unless stated):
  1. normalise body proportions (every bone of `CANONICAL_BONES` takes a canonical length,
     joint directions unchanged); the box becomes the bounding box of the new keypoints,
     since the detector's box would give the person's height away;
  2. Gaussian noise of `noise_px` pixels on every keypoint x, y and box corner;
  3. coordinates: pixels, fractions of the frame, or per track (see `PrivacyOptions`);
  4. dropped keypoints set to x=0, y=0, confidence=0 (the 17-slot COCO layout is kept);
  5. rounding to `decimals` when the row is written.
Rows are thinned by `keep_every` or `target_fps`; track ids are replaced by random ids; time
may be made relative to the first row. Each filter counts what it removed (`PrivacyRun.summary`).

Rows written in frame or track units carry `"units":"frame"` or `"units":"track"` after
`"status"` (absent means pixels) and, for track units with the position kept, each person
carries `"centre":[x,y]` in fractions of the frame. The row format, extras included, has one
owner: redact.formats.skeletons_jsonl (`decode_row_extras` here reads the extras of a line).
"""

from __future__ import annotations

import math
import os
import secrets
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field, replace
from fractions import Fraction
from typing import Any, cast

import numpy as np

from redact.errors import InputError, PackageError
from redact.formats import skeletons_jsonl as fmt
from redact.skeletons.rows import COORD_DECIMALS, FrameRow, row_of
from redact.vision.records import Tracks
from redact.vision.skeleton import HEAD_KEYPOINTS, KEYPOINT_NAMES, NUM_KEYPOINTS

COORDINATE_MODES = ("pixels", "frame", "track")
#: Default decimals per coordinate mode: pixels as in rows.py; 5 decimals of a frame fraction
#: are 0.04 px on a 3840-px-wide frame; 4 decimals of a track scale (about a body height)
#: are below 0.1 px for a 1000-px-tall person (common practice: finer than detector noise).
DEFAULT_DECIMALS = {"pixels": COORD_DECIMALS, "frame": 5, "track": 4}
MAX_DECIMALS = 8
ID_SPACE = 2**31 - 1  # new ids are drawn from 1..ID_SPACE

MID_HIP = 17       # virtual node: midpoint of left_hip (11) and right_hip (12)
MID_SHOULDER = 18  # virtual node: midpoint of left_shoulder (5) and right_shoulder (6)

#: The tree used to normalise proportions: (parent, child, length as a fraction of body height),
#: parents before children, rooted at the mid-hip (which keeps its position). Fractions are the
#: Drillis & Contini (1966) segment lengths as reproduced in D. A. Winter, "Biomechanics and
#: Motor Control of Human Movement", Fig. 4.1 — FROM MEMORY, not re-checked against the book:
#: hip width 0.191 H, thigh 0.245 H, shank 0.246 H, shoulder width 0.259 H, upper arm 0.186 H,
#: forearm 0.146 H, shoulder height 0.818 H and hip height 0.530 H (trunk = 0.288 H). The head
#: lengths (mid-shoulder–nose 0.085 H between chin 0.870 H and eye 0.936 H heights, nose–eye
#: 0.035 H, eye–ear 0.045 H) are our rounded estimates (common practice, no source).
#: Why: body height and limb ratios identify people (arXiv 2402.08320).
CANONICAL_BONES: tuple[tuple[int, int, float], ...] = (
    (MID_HIP, 11, 0.0955), (MID_HIP, 12, 0.0955),
    (11, 13, 0.245), (12, 14, 0.245), (13, 15, 0.246), (14, 16, 0.246),
    (MID_HIP, MID_SHOULDER, 0.288),
    (MID_SHOULDER, 5, 0.1295), (MID_SHOULDER, 6, 0.1295),
    (5, 7, 0.186), (6, 8, 0.186), (7, 9, 0.146), (8, 10, 0.146),
    (MID_SHOULDER, 0, 0.085), (0, 1, 0.035), (0, 2, 0.035), (1, 3, 0.045), (2, 4, 0.045),
)
_BONE_SUM = sum(f for _, _, f in CANONICAL_BONES)
_NODE_NAMES = KEYPOINT_NAMES + ("mid_hip", "mid_shoulder")
_EPS = 1e-9


def parse_keypoints(spec: Iterable[str | int] | str) -> tuple[int, ...]:
    """COCO-17 indices from names, indices or "head" (the five head keypoints); sorted, unique.

    Accepts a comma-separated string ("head,left_wrist,9") or an iterable of names/indices.
    """
    items = [s.strip() for s in spec.split(",") if s.strip()] if isinstance(spec, str) else list(spec)
    out: set[int] = set()
    for item in items:
        if isinstance(item, (int, np.integer)) and not isinstance(item, bool):
            idx = int(item)
        elif isinstance(item, str) and item.lower() == "head":
            out.update(HEAD_KEYPOINTS)
            continue
        elif isinstance(item, str) and item.isdigit():
            idx = int(item)
        elif isinstance(item, str) and item.lower() in KEYPOINT_NAMES:
            idx = KEYPOINT_NAMES.index(item.lower())
        else:
            raise InputError(f"drop_keypoints: unknown keypoint {item!r}; use COCO-17 names, 0..16 or 'head'")
        if not 0 <= idx < NUM_KEYPOINTS:
            raise InputError(f"drop_keypoints: index {idx} is outside 0..16")
        out.add(idx)
    return tuple(sorted(out))


@dataclass(frozen=True)
class PrivacyOptions:
    """Which de-identification steps to apply; every option is off by default.

    drop_keypoints: COCO-17 indices (names accepted) set to x=0, y=0, conf=0.
    normalise_proportions: rescale every bone of CANONICAL_BONES to its canonical length,
      keeping joint directions; body_height (output pixels) fixes one height for everyone,
      None keeps each person's apparent size in that frame (sum of bone lengths / sum of
      fractions), which removes limb ratios but keeps apparent height (and so, with camera
      geometry, some of the real height). Not allowed with coordinates="track" (that mode
      divides by the track's own size anyway).
    coordinates: "pixels"; "frame" = x / width, y / height (0..1 inside the frame);
      "track" = offsets from the person's box centre in that frame divided by the track's
      scale (median apparent body height over the track), so neither position nor size stays;
      keep_position (track mode only) keeps the box centre as "centre" in frame fractions.
    keep_every: keep the first row and every k-th row after it (by frame index); target_fps:
      the same on an even grid chosen from the rate: k is the smallest whole number with
      source fps / k <= target_fps (`rate_step`), so every time step is the same (25 -> 10 fps
      keeps every 3rd frame, 8.33 fps; slots of 1/target_fps would keep frames 0, 3, 5, 8, …,
      steps of 0.12 and 0.08 s, which trajectory models read as a change of speed).
    decimals: coordinate decimals (None: 2 for pixels, 5 for frame, 4 for track).
    noise_px: standard deviation in source pixels of Gaussian noise on x and y.
    new_ids: replace track ids with random ids in 1..2^31-1 (an injective mapping).
    relative_time: t and pts relative to the first row instead of stream time.
    seed: drives noise and new ids. None (the default) draws them from os.urandom / secrets.
      A seed makes the output reproducible, and anyone who knows it can regenerate the noise
      and subtract it (to within rounding) and undo the id mapping: it is for tests and
      internal reruns only, it is never recorded (`to_record` only says whether one was given),
      and the data steward must keep it secret or discard it.
    """

    drop_keypoints: tuple[int, ...] = ()
    normalise_proportions: bool = False
    body_height: float | None = None
    coordinates: str = "pixels"
    keep_position: bool = False
    keep_every: int = 1
    target_fps: float | None = None
    decimals: int | None = None
    noise_px: float = 0.0
    new_ids: bool = False
    relative_time: bool = False
    seed: int | None = field(default=None, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "drop_keypoints", parse_keypoints(self.drop_keypoints))
        if self.coordinates not in COORDINATE_MODES:
            raise InputError(f"coordinates: {self.coordinates!r} is not one of {', '.join(COORDINATE_MODES)}")
        if self.keep_position and self.coordinates != "track":
            raise InputError("keep_position: only applies to coordinates='track'")
        if self.body_height is not None:
            if not self.normalise_proportions:
                raise InputError("body_height: only applies with normalise_proportions")
            if not (math.isfinite(self.body_height) and self.body_height > 0):
                raise InputError(f"body_height: must be a positive number of pixels, got {self.body_height}")
            object.__setattr__(self, "body_height", float(self.body_height))
        if self.normalise_proportions and self.coordinates == "track" and self.body_height is not None:
            raise InputError("body_height: has no meaning with coordinates='track' (track units remove size)")
        if isinstance(self.keep_every, bool) or not isinstance(self.keep_every, (int, np.integer)) \
                or self.keep_every < 1:
            raise InputError(f"keep_every: must be an integer of at least 1, got {self.keep_every!r}")
        if self.target_fps is not None:
            if not (math.isfinite(self.target_fps) and self.target_fps > 0):
                raise InputError(f"target_fps: must be a positive number, got {self.target_fps}")
            if self.keep_every != 1:
                raise InputError("target_fps: give either keep_every or target_fps, not both")
            object.__setattr__(self, "target_fps", float(self.target_fps))
        if self.decimals is not None and (isinstance(self.decimals, bool) or not isinstance(self.decimals, int)
                                          or not 0 <= self.decimals <= MAX_DECIMALS):
            raise InputError(f"decimals: must be an integer in 0..{MAX_DECIMALS}, got {self.decimals!r}")
        if not (math.isfinite(self.noise_px) and self.noise_px >= 0):
            raise InputError(f"noise_px: must be a non-negative number of pixels, got {self.noise_px}")
        object.__setattr__(self, "noise_px", float(self.noise_px))
        if self.seed is not None and (isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0):
            raise InputError("seed: must be a non-negative integer")

    @property
    def effective_decimals(self) -> int:
        """Coordinate decimals actually written."""
        return DEFAULT_DECIMALS[self.coordinates] if self.decimals is None else self.decimals

    @property
    def units(self) -> str:
        """Units of the coordinates written: "pixels", "frame" or "track"."""
        return self.coordinates

    def to_record(self) -> dict:
        """Every option and its value, for the signed predicate. The seed is never included
        (it would make the noise and the id mapping removable); only whether one was given."""
        rec = {
            "caution": "pseudonymised personal data; these options lower but do not remove re-identification risk",
            "drop_keypoints": [KEYPOINT_NAMES[i] for i in self.drop_keypoints],
            "normalise_proportions": self.normalise_proportions,
            "body_height_px": self.body_height,
            "coordinates": self.coordinates,
            "keep_position": self.keep_position,
            "keep_every": int(self.keep_every),
            "target_fps": self.target_fps,
            "decimals": self.effective_decimals,
            "noise_px": self.noise_px,
            "new_ids": self.new_ids,
            "relative_time": self.relative_time,
            "seeded": self.seed is not None,
        }
        if self.normalise_proportions:
            rec["canonical_bones"] = [[_NODE_NAMES[p], _NODE_NAMES[c], f] for p, c, f in CANONICAL_BONES]
        return rec

    @classmethod
    def from_cli(cls, drop_keypoints: str | None = None, normalise_proportions: bool = False,
                 body_height: float | None = None, coordinates: str = "pixels", keep_position: bool = False,
                 keep_every: int = 1, target_fps: float | None = None, decimals: int | None = None,
                 noise_px: float = 0.0, new_ids: bool = False, relative_time: bool = False,
                 seed: int | None = None) -> PrivacyOptions:
        """Options from command-line values (drop_keypoints as "head,left_wrist,9"); raises InputError."""
        return cls(drop_keypoints=parse_keypoints(drop_keypoints or ""),
                   normalise_proportions=bool(normalise_proportions), body_height=body_height,
                   coordinates=coordinates, keep_position=bool(keep_position), keep_every=keep_every,
                   target_fps=target_fps, decimals=decimals, noise_px=noise_px, new_ids=bool(new_ids),
                   relative_time=bool(relative_time), seed=seed)

    @property
    def needs_scan(self) -> bool:
        """True when apply_privacy needs a first pass (`scan_tracks`) over the rows."""
        return self.coordinates == "track"


# ---- pure geometry ---------------------------------------------------------------------------

def _with_midpoints(xy: np.ndarray) -> np.ndarray:
    """[M,17,2] → [M,19,2] with MID_HIP and MID_SHOULDER appended."""
    ext = np.empty((xy.shape[0], NUM_KEYPOINTS + 2, 2), np.float64)
    ext[:, :NUM_KEYPOINTS] = xy
    ext[:, MID_HIP] = (xy[:, 11] + xy[:, 12]) / 2.0
    ext[:, MID_SHOULDER] = (xy[:, 5] + xy[:, 6]) / 2.0
    return ext


def bone_vectors(keypoints: np.ndarray) -> np.ndarray:
    """Child minus parent for every bone of CANONICAL_BONES: keypoints [M,17,2+] → [M,18,2] float64."""
    ext = _with_midpoints(np.asarray(keypoints, np.float64)[..., :2])
    par = [p for p, _, _ in CANONICAL_BONES]
    chi = [c for _, c, _ in CANONICAL_BONES]
    return ext[:, chi] - ext[:, par]


def apparent_height(keypoints: np.ndarray) -> np.ndarray:
    """Each person's apparent body height in pixels: sum of bone lengths / sum of fractions. [M,17,2+] → [M]."""
    return np.linalg.norm(bone_vectors(keypoints), axis=-1).sum(-1) / _BONE_SUM


def normalise_proportions(keypoints: np.ndarray, body_height: float | None = None) -> tuple[np.ndarray, int]:
    """Give every bone its canonical length, keeping its direction and the mid-hip position.

    keypoints [M,17,3] (x, y, conf) → ([M,17,3] float64, number of degenerate bones). Each bone
    (parent→child in CANONICAL_BONES) keeps its original direction and takes fraction × H, with
    H = body_height, or the person's apparent_height when None. A bone of zero length has no
    direction: its child is placed on its parent (length 0) and counted as degenerate.
    Confidences are unchanged. Cross-links not in the tree (e.g. shoulder–hip) follow.
    """
    kp = np.asarray(keypoints, np.float64)
    if kp.ndim != 3 or kp.shape[1:] != (NUM_KEYPOINTS, 3):
        raise ValueError(f"keypoints: expected shape [M, 17, 3], got {list(kp.shape)}")
    m = kp.shape[0]
    out = kp.copy()
    if m == 0:
        return out, 0
    ext = _with_midpoints(kp[..., :2])
    vec = bone_vectors(kp)
    length = np.linalg.norm(vec, axis=-1)  # [M, B]
    ok = length > _EPS
    unit = np.zeros_like(vec)
    np.divide(vec, length[..., None], out=unit, where=ok[..., None])
    height = np.full(m, float(body_height)) if body_height is not None else length.sum(-1) / _BONE_SUM
    new = ext.copy()  # the root MID_HIP keeps its place; every other node is rebuilt from its parent
    for b, (p, c, frac) in enumerate(CANONICAL_BONES):
        new[:, c] = new[:, p] + unit[:, b] * (frac * height)[:, None]
    out[..., :2] = new[:, :NUM_KEYPOINTS]
    return out, int((~ok).sum())


def _gaussian(n: int, random_bytes) -> np.ndarray:
    """n standard normal values by the Box–Muller transform of 53-bit uniforms from random_bytes(k)."""
    if n == 0:
        return np.zeros(0)
    pairs = (n + 1) // 2
    words = np.frombuffer(random_bytes(16 * pairs), dtype="<u8").reshape(pairs, 2)
    u = (words >> np.uint64(11)).astype(np.float64) * 2.0**-53  # [0, 1)
    r = np.sqrt(-2.0 * np.log1p(-u[:, 0]))                       # 1 - u in (0, 1]
    theta = 2.0 * np.pi * u[:, 1]
    return np.concatenate([r * np.cos(theta), r * np.sin(theta)])[:n]


# ---- first pass ------------------------------------------------------------------------------

@dataclass(frozen=True)
class TrackScan:
    """What a first pass over the rows learns: per-track scale (median apparent body height, px)."""

    scales: dict[int, float]
    rows: int


def scan_tracks(rows: Iterable[FrameRow]) -> TrackScan:
    """First pass for coordinates="track": each track's median apparent height (box diagonal
    when the skeleton is degenerate; 1.0 when both are zero)."""
    heights: dict[int, list[float]] = {}
    n = 0
    for row in rows:
        n += 1
        tr = row.tracks
        if len(tr) == 0:
            continue
        h = apparent_height(tr.keypoints)
        diag = np.hypot(tr.boxes[:, 2] - tr.boxes[:, 0], tr.boxes[:, 3] - tr.boxes[:, 1])
        h = np.where(h > _EPS, h, diag)
        for tid, v in zip(tr.ids.tolist(), h.tolist()):
            heights.setdefault(int(tid), []).append(v)
    scales = {}
    for tid, vs in heights.items():
        s = float(np.median(vs))
        scales[tid] = s if s > _EPS else 1.0
    return TrackScan(scales, n)


# ---- row encoding with units -----------------------------------------------------------------

def encode_row_units(frame: int, pts: int | None, t: float, tracks: Tracks, status: str, decimals: int,
                     units: str, centres: np.ndarray | None = None) -> bytes:
    """A skeleton row with `"units"` (omitted for pixels) and per-person `"centre"` [M,2], written by
    the one encoder of redact.formats.skeletons_jsonl; with units="pixels" and no centres the bytes
    are exactly encode_row's."""
    return fmt.encode_row(row_of(frame, pts, t, tracks, status, decimals, units, centres))


@dataclass(frozen=True)
class RowExtras:
    """The extras of one row: units ("pixels" when absent) and centres [M,2] (None when absent)."""

    units: str
    centres: np.ndarray | None


def decode_row_extras(line: bytes | str) -> RowExtras:
    """The `units` marker and per-person `centre` of a row (strict decoding); PackageError when malformed."""
    row = fmt.decode_row(line)
    has = [p.centre is not None for p in row.people]
    centres = np.array([p.centre for p in row.people], np.float64).reshape(-1, 2) if has and all(has) else None
    return RowExtras(row.units, centres)


def rate_step(fps: float, target_fps: float) -> int:
    """The whole-frame step that brings `fps` to at most `target_fps` on an even grid: the smallest
    k >= 1 with fps / k <= target_fps, in exact rational arithmetic (rates as written, e.g. 29.97)."""
    src = Fraction(fps).limit_denominator(100000)
    want = Fraction(target_fps).limit_denominator(100000)
    return max(1, math.ceil(src / want))


# ---- the stream ------------------------------------------------------------------------------

class PrivacyRun:
    """Iterate to get the new skeletons.jsonl lines (bytes); `summary` counts what changed.

    Single use; the summary is complete once iteration has finished (`finished` is True).
    """

    def __init__(self, rows: Iterable[FrameRow], options: PrivacyOptions, frame_size: tuple[int, int] | None,
                 fps: float | None, scan: TrackScan | None):
        o = options
        if o.coordinates == "frame" or o.keep_position:
            if frame_size is None or len(frame_size) != 2 or min(frame_size) <= 0:
                raise InputError(f"frame_size: coordinates={o.coordinates!r} needs the frame width and height")
        if o.target_fps is not None:
            if fps is None or not (math.isfinite(fps) and fps > 0):
                raise InputError("target_fps: needs the source frame rate")
            if o.target_fps > fps:
                raise InputError(f"target_fps: {o.target_fps} is above the source frame rate {fps}")
        if o.needs_scan and scan is None:
            raise InputError("coordinates: 'track' needs a first pass; call scan_tracks(rows) and pass scan=")
        self._rows = rows
        self._o = o
        self._size = None if frame_size is None else (float(frame_size[0]), float(frame_size[1]))
        self._fps = fps
        # fps was checked above whenever target_fps is given
        self._step = o.keep_every if o.target_fps is None else rate_step(cast(float, fps), o.target_fps)
        self._scan = scan
        self._started = False
        self.finished = False
        if o.seed is None:
            self._noise_bytes = os.urandom
            self._new_id = lambda: secrets.randbelow(ID_SPACE) + 1
        else:
            noise_ss, id_ss = np.random.SeedSequence(o.seed).spawn(2)
            noise_rng = np.random.Generator(np.random.PCG64(noise_ss))
            id_rng = np.random.Generator(np.random.PCG64(id_ss))
            self._noise_bytes = noise_rng.bytes
            self._new_id = lambda: int(id_rng.integers(1, ID_SPACE + 1))
        self.summary: dict[str, Any] = {
            "rows_in": 0, "rows_out": 0, "rows_dropped_by_rate": 0, "fault_rows_dropped_by_rate": 0,
            "people_out": 0, "keypoints_dropped": 0, "bones_rescaled": 0, "bones_degenerate": 0,
            "noise_values": 0, "tracks_renamed": 0, "units": o.units,
        }
        if o.target_fps is not None:
            self.summary.update(rate_step=self._step, fps_out=round(float(cast(float, fps)) / self._step, 6))

    def __iter__(self) -> Iterator[bytes]:
        if self._started:
            raise RuntimeError("a PrivacyRun can be iterated once")
        self._started = True
        return self._generate()

    def _keep(self, frame: int, first: int, state: dict) -> bool:
        return (frame - first) % self._step == 0

    def _generate(self) -> Iterator[bytes]:
        o, s = self._o, self.summary
        ids: dict[int, int] = {}
        used: set[int] = set()
        first_frame = t0 = pts0 = None
        rate_state: dict = {}
        drop = np.array(o.drop_keypoints, np.int64)
        for row in self._rows:
            s["rows_in"] += 1
            if first_frame is None:
                first_frame, t0, pts0 = row.frame, row.t, row.pts
            if not self._keep(row.frame, first_frame, rate_state):
                s["rows_dropped_by_rate"] += 1
                s["fault_rows_dropped_by_rate"] += int(row.status != "ok")
                continue
            tracks, centres = self._person_transform(row.tracks, drop)
            if o.new_ids and len(tracks):
                new = []
                for tid in tracks.ids.tolist():
                    if tid not in ids:
                        nid = self._new_id()
                        while nid in used:
                            nid = self._new_id()
                        ids[tid] = nid
                        used.add(nid)
                    new.append(ids[tid])
                tracks = replace(tracks, ids=np.array(new, np.int64))
            t, pts = row.t, row.pts
            if o.relative_time:
                t = t - cast(float, t0)  # set from the first row
                pts = None if pts is None or pts0 is None else pts - pts0
            s["rows_out"] += 1
            s["people_out"] += len(tracks)
            yield encode_row_units(row.frame, pts, t, tracks, row.status, o.effective_decimals, o.units, centres)
        s["tracks_renamed"] = len(ids)
        self.finished = True

    def _person_transform(self, tr: Tracks, drop: np.ndarray) -> tuple[Tracks, np.ndarray | None]:
        """Steps 1–4 of the module docstring for the people of one row."""
        o, s = self._o, self.summary
        m = len(tr)
        if m == 0:
            return tr, (np.zeros((0, 2)) if o.keep_position else None)
        kp = tr.keypoints.astype(np.float64)
        boxes = tr.boxes.astype(np.float64)
        kept = np.ones(NUM_KEYPOINTS, bool)
        kept[drop] = False
        if o.normalise_proportions:
            body = o.body_height if o.coordinates != "track" else None
            kp, degenerate = normalise_proportions(kp, body)
            s["bones_rescaled"] += m * len(CANONICAL_BONES) - degenerate
            s["bones_degenerate"] += degenerate
            if kept.any():
                xy = kp[:, kept, :2]
                boxes = np.concatenate([xy.min(1), xy.max(1)], axis=1)
        if o.noise_px > 0:
            z = _gaussian(m * NUM_KEYPOINTS * 2 + m * 4, self._noise_bytes) * o.noise_px
            kp[..., :2] += z[: m * NUM_KEYPOINTS * 2].reshape(m, NUM_KEYPOINTS, 2)
            boxes = boxes + z[m * NUM_KEYPOINTS * 2:].reshape(m, 4)
            boxes = np.concatenate([np.minimum(boxes[:, :2], boxes[:, 2:]), np.maximum(boxes[:, :2], boxes[:, 2:])], 1)
            s["noise_values"] += z.size
        centres = None
        if o.coordinates == "frame":
            w, h = cast(tuple[float, float], self._size)  # checked in __init__
            kp[..., 0] /= w
            kp[..., 1] /= h
            boxes = boxes / np.array([w, h, w, h])
        elif o.coordinates == "track":
            # Not checked in __init__ unless keep_position (only then are w, h used): without a
            # frame size this unpacking raises TypeError. Kept as it is (no behaviour change here).
            w, h = self._size  # type: ignore[misc]
            c = np.stack([(boxes[:, 0] + boxes[:, 2]) / 2, (boxes[:, 1] + boxes[:, 3]) / 2], 1)  # [M, 2]
            scans = cast(TrackScan, self._scan)  # checked in __init__ (needs_scan)
            scale = np.array([scans.scales.get(int(t), 0.0) for t in tr.ids.tolist()])
            if (scale <= 0).any():
                raise InputError("coordinates: a track is missing from the first pass; scan the same rows")
            kp[..., :2] = (kp[..., :2] - c[:, None, :]) / scale[:, None, None]
            boxes = (boxes - np.tile(c, 2)) / scale[:, None]
            if o.keep_position:
                centres = c / np.array([w, h])
        if drop.size:
            kp[:, drop] = 0.0
            s["keypoints_dropped"] += m * drop.size
        return replace(tr, boxes=boxes, keypoints=kp), centres


def apply_privacy(rows: Iterable[FrameRow], options: PrivacyOptions, frame_size: tuple[int, int] | None = None,
                  fps: float | None = None, scan: TrackScan | None = None) -> PrivacyRun:
    """New skeletons.jsonl lines from rows under the options: iterate the result for bytes, then read
    `.summary`. frame_size (width, height) px is needed for frame coordinates and keep_position, fps
    for target_fps, scan (`scan_tracks` over the same rows) for track coordinates. Raises InputError
    up front."""
    return PrivacyRun(rows, options, frame_size, fps, scan)


def apply_privacy_file(src, dst, options: PrivacyOptions, frame_size: tuple[int, int] | None = None,
                       fps: float | None = None) -> dict:
    """Read skeletons.jsonl at src (twice when a first pass is needed), write dst via a temporary name
    and rename; return the summary."""
    from pathlib import Path

    from redact import fsio
    from redact.skeletons.rows import read_rows

    src, dst = Path(src), Path(dst)
    scan = None
    try:
        if options.needs_scan:
            with open(src, "rb") as f:
                scan = scan_tracks(read_rows(f))
        with open(src, "rb") as f, fsio.atomic_file(dst, replace=True) as out:
            run = apply_privacy(read_rows(f), options, frame_size, fps, scan)
            for line in run:
                out.write(line)
    except (ValueError, PackageError) as e:  # a malformed row (read_rows names the line)
        raise InputError(f"{src}: {e}") from None
    return dict(run.summary)
