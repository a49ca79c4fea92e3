"""Redaction plan: who stays visible and what else is obscured when answering a request for footage.

A plan is a small JSON file (schema "redact-plan/1", documented in docs/plan-format.md) that the
operator writes after looking at the track sheet (redact.tracksheet). It is parsed strictly
(redact.jsonio: RFC 7493 rules, size limit), then validated against the video (its frame size,
frame count, duration) and, when known, the track ids; every problem is a one-line PlanError
naming the field, e.g. `plan: keep_visible[0]: unknown track id 7 (the video has tracks 1-5)`.

Per frame, `Plan.decide` says what to obscure: every tracked person except the kept ones
(the requester), a kept person too wherever their box overlaps another person's box by more
than `overlap_threshold` IoU (ids can swap when people cross, so showing a kept track there
could show someone else), the union of the plan's polygons, boxes and moving boxes active on that frame
(a bool mask [H, W]), and whether the whole frame is obscured. Data-protection guidance allows
answering an access request by masking other people: EDPB Guidelines 3/2019 on processing of
personal data through video devices, v2.0, §6.1; UK ICO guidance on video surveillance
(third parties obscured by blurring, masking or solid fill). Automated tracking still makes
mistakes: a person must review the redacted copy before disclosure.

Pixel rule (see docs/plan-format.md): coordinates are in pixels of the upright frame, origin at
the top-left corner of the top-left pixel, so pixel (column i, row j) covers [i, i+1) × [j, j+1)
and its centre is (i + 0.5, j + 0.5). A pixel is obscured when its centre lies inside the polygon
or on its edge, inside meaning a non-zero winding number (so self-intersecting outlines are
filled wholly). A box [x1, y1, x2, y2] with whole-number corners thus covers exactly the
columns x1..x2-1 and rows y1..y2-1, like the NumPy slice image[y1:y2, x1:x2].
"""

from __future__ import annotations

import hashlib
import math
import re
from collections.abc import Iterable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from redact import jsonio
from redact.errors import InputError, PackageError, PlanError, RedactError
from redact.ranges import RangeBuilder, format_ranges
from redact.redaction.moving_box import MovingBox, box_pixels, parse_moving_box
from redact.vision.costs import iou_matrix
from redact.vision.records import Tracks
from redact.vision.tracking import TrackIdSettings

PLAN_VERSION = "redact-plan/1"
#: Largest plan file accepted, in bytes (common practice: plans are hand-written, a few kB).
PLAN_SIZE_LIMIT = 1024 * 1024
#: Default overlap above which a kept person is obscured: IoU of the two track boxes (common
#: practice; 0.1 is a low bar, chosen to obscure early when people come close).
DEFAULT_OVERLAP_IOU = 0.1
#: Frame times are compared with this slack (seconds) to absorb rounding of decoded timestamps.
TIME_SLACK = 1e-6
MAX_ENTRIES = 10_000  # per list (common practice)
MAX_POINTS = 10_000  # per polygon (common practice)
MAX_LABEL = 200  # characters of a label
MAX_NOTE = 10_000  # characters of the note
_HEX64 = re.compile(r"[0-9a-f]{64}")

_TOP_KEYS = {"version", "note", "keep_visible", "overlap_threshold", "regions", "boxes", "moving_boxes",
             "obscure_frames", "track_sheet"}
_RANGE_KEYS = ("frames", "seconds")


def _err(path: str, msg: str) -> PlanError:
    return PlanError(f"plan: {path}: {msg}")


def format_ids(ids: Iterable[int]) -> str:
    """Sorted ids as compact ranges: [1,2,3,5] → "1-3, 5"."""
    return format_ranges(ids)


def _ids_phrase(ids: Iterable[int]) -> str:
    ids = list(ids)
    if not ids:
        return "the video has no tracks"
    return f"the video has track{'s' if len(ids) > 1 else ''} {format_ids(ids)}"


class _HasIdSettings(Protocol):
    """A run's settings (redact.pipeline.ProcessSettings), which carry their id-deciding part."""

    @property
    def ids(self) -> TrackIdSettings: ...


def ids_fingerprint(settings: TrackIdSettings | _HasIdSettings, model_sha256: str) -> str:
    """SHA-256 hex over every setting that decides track ids (redact.vision.tracking.TrackIdSettings:
    pose settings, tracker settings, coast time, detection stride, where the model looks, the
    motion net and light meter that steer it) and the model's hash. A track sheet and a run agree
    on ids only when these agree (and the source file is the same); render, encode and package
    settings do not matter."""
    ids = settings if isinstance(settings, TrackIdSettings) else settings.ids
    doc = {"pose": asdict(ids.pose), "tracker": asdict(ids.tracker), "coast_seconds": ids.coast_seconds,
           "detect_every": int(ids.detect_every), "search": asdict(ids.search), "scene": asdict(ids.scene),
           "model_sha256": model_sha256}
    return hashlib.sha256(jsonio.dumps(doc)).hexdigest()


# ---------------------------------------------------------------- geometry

def polygon_mask(points: np.ndarray, width: int, height: int) -> tuple[tuple[int, int, int, int], np.ndarray]:
    """Pixels of a width×height frame covered by a polygon, by the pixel rule of the module doc.

    points [K,2] float (x, y). Returns ((x0, y0, x1, y1), crop) where crop [y1-y0, x1-x0] bool
    holds the covered pixels of the rectangle columns x0..x1-1, rows y0..y1-1 (empty rectangle
    when nothing is covered). Inside = non-zero winding number (the winding-number test as in
    K. Hormann, A. Agathos, "The point in polygon problem for arbitrary polygons", Computational
    Geometry 20(3), 2001 — from memory), plus points on an edge.
    """
    p = np.asarray(points, np.float64).reshape(-1, 2)
    x0 = max(0, int(math.floor(p[:, 0].min() - 0.5)))
    x1 = min(width, int(math.ceil(p[:, 0].max() + 0.5)))
    y0 = max(0, int(math.floor(p[:, 1].min() - 0.5)))
    y1 = min(height, int(math.ceil(p[:, 1].max() + 0.5)))
    if x1 <= x0 or y1 <= y0:
        return (0, 0, 0, 0), np.zeros((0, 0), bool)
    xs = np.arange(x0, x1, dtype=np.float64) + 0.5
    out = np.zeros((y1 - y0, x1 - x0), bool)
    a = p
    b = np.roll(p, -1, axis=0)
    for r0 in range(y0, y1, 256):  # row chunks bound the memory of big polygons
        r1 = min(y1, r0 + 256)
        Y, X = np.meshgrid(np.arange(r0, r1, dtype=np.float64) + 0.5, xs, indexing="ij")
        wn = np.zeros(Y.shape, np.int64)
        edge = np.zeros(Y.shape, bool)
        for (ax, ay), (bx, by) in zip(a, b):
            cross = (bx - ax) * (Y - ay) - (X - ax) * (by - ay)
            wn += ((ay <= Y) & (by > Y) & (cross > 0)).astype(np.int64)
            wn -= ((by <= Y) & (ay > Y) & (cross < 0)).astype(np.int64)
            edge |= ((cross == 0) & (X >= min(ax, bx)) & (X <= max(ax, bx))
                     & (Y >= min(ay, by)) & (Y <= max(ay, by)))
        out[r0 - y0:r1 - y0] = (wn != 0) | edge
    return (x0, y0, x1, y1), out


# ---------------------------------------------------------------- records

@dataclass(frozen=True)
class FrameRange:
    """Inclusive range of frame indices (kind "frames") or of frame times in seconds ("seconds")."""

    kind: str
    start: float
    end: float

    def contains(self, frame: int, t: float) -> bool:
        if self.kind == "frames":
            return self.start <= frame <= self.end
        return self.start - TIME_SLACK <= t <= self.end + TIME_SLACK

    def record(self) -> dict:
        return {self.kind: [self.start, self.end]}


@dataclass(frozen=True)
class AreaEntry:
    """A polygon or box of the plan: its field path, label, outline [K,2], optional range, and its
    covered pixels (rect x0,y0,x1,y1 and crop bool [y1-y0, x1-x0], computed once for the frame size)."""

    path: str
    label: str | None
    points: np.ndarray
    when: FrameRange | None
    rect: tuple[int, int, int, int]
    crop: np.ndarray
    source: dict  # the entry as written (for the record)


@dataclass(frozen=True)
class WholeFrameEntry:
    """A range of frames obscured entirely."""

    path: str
    label: str | None
    when: FrameRange
    source: dict


@dataclass(frozen=True)
class FrameDecision:
    """What to obscure in one frame.

    obscure: the tracks to obscure (every track, minus kept ones not overlapping others beyond
    the threshold); kept_ids: kept tracks left visible; overlap_ids: kept tracks obscured in this
    frame because they overlap someone (flag the frame for review); mask: bool [H, W] union of
    the plan's regions and boxes active on this frame, or None; whole_frame: obscure everything.
    area_entries / whole_entries: (field path, label) of each entry that made the mask / the
    whole frame, in plan order (the reasons of redact.redaction.obscure's plan regions).
    """

    obscure: Tracks
    kept_ids: tuple[int, ...]
    overlap_ids: tuple[int, ...]
    mask: np.ndarray | None
    whole_frame: bool
    area_entries: tuple[tuple[str, str | None], ...] = ()
    whole_entries: tuple[tuple[str, str | None], ...] = ()


class _Hits:
    """Frames each entry applied to, as inclusive ranges (each frame counted once)."""

    def __init__(self) -> None:
        self.ranges: dict[str, RangeBuilder] = {}

    def add(self, key: str, frame: int) -> None:
        self.ranges.setdefault(key, RangeBuilder()).add(frame)

    def summary(self, key: str) -> dict:
        r = self.ranges.get(key, RangeBuilder())
        return {"frames": r.count(), "ranges": [list(x) for x in r.ranges]}


class Plan:
    """A validated redaction plan for one video size; `decide` once per frame, in order.

    Attributes are read-only by convention; `decide` records which entries applied to which frame
    (see `applied`). sha256 is of the exact file bytes.
    """

    def __init__(self, *, sha256: str, size: int, name: str, note: str | None, keep_visible: tuple[int, ...],
                 overlap_threshold: float, areas: tuple[AreaEntry, ...], whole: tuple[WholeFrameEntry, ...],
                 track_sheet: dict | None, width: int, height: int, moving: tuple[MovingBox, ...] = ()):
        self.sha256, self.size, self.name, self.note = sha256, size, name, note
        self.keep_visible = keep_visible
        self.keep_ids = frozenset(keep_visible)
        self.overlap_threshold = overlap_threshold
        self.areas, self.whole, self.moving = areas, whole, moving
        self.track_sheet = track_sheet
        self.width, self.height = width, height
        self._keep = np.array(sorted(self.keep_ids), np.int64)
        self._hits = _Hits()

    # -- checks the pipeline runs -------------------------------------------------------------

    def check_settings(self, settings: TrackIdSettings | _HasIdSettings, model_sha256: str) -> None:
        """At the start of a run: the track ids of the plan came from the same settings and model."""
        if self.track_sheet is None:
            return
        have = ids_fingerprint(settings, model_sha256)
        if self.track_sheet["settings_sha256"] != have:
            raise _err("track_sheet.settings_sha256",
                       "the track sheet was made with other detection/tracking settings or another model, "
                       "so its track ids may name other people; run `redact tracks` again with the same "
                       "options as this run and update the plan")

    def check_track_ids(self, known: Iterable[int]) -> None:
        """Every kept id must be a track of the video (raise naming the first one that is not)."""
        known = sorted(set(int(i) for i in known))
        for k, tid in enumerate(self.keep_visible):
            if tid not in known:
                raise _err(f"keep_visible[{k}]", f"unknown track id {tid} ({_ids_phrase(known)})")

    def check_end(self, track_ids: Iterable[int], source_sha256: str | None = None) -> None:
        """At the end of a run, before anything is renamed into place: the source is the one the
        track sheet was made from, and every kept id exists."""
        if self.track_sheet is not None and source_sha256 is not None \
                and self.track_sheet["source_sha256"] != source_sha256:
            raise _err("track_sheet.source_sha256",
                       f"the plan was made for another video (sha256 {self.track_sheet['source_sha256'][:12]}…), "
                       f"this one is {source_sha256[:12]}…")
        self.check_track_ids(track_ids)

    # -- per frame -----------------------------------------------------------------------------

    def decide(self, frame: int, t: float, tracks: Tracks, shape: tuple[int, ...]) -> FrameDecision:
        """What to obscure in frame `frame` at time t (seconds) of shape (H, W, ...); see FrameDecision.

        Raises RedactError when the frame size is not the plan's (the caller fails closed).
        """
        h, w = int(shape[0]), int(shape[1])
        if (h, w) != (self.height, self.width):
            raise RedactError(f"plan: checked for {self.width}×{self.height} frames, got {w}×{h}")
        frame = int(frame)
        whole = False
        whole_entries: list[tuple[str, str | None]] = []
        for e in self.whole:
            if e.when.contains(frame, t):
                whole = True
                whole_entries.append((e.path, e.label))
                self._hits.add(e.path, frame)
        mask = None
        area_entries: list[tuple[str, str | None]] = []
        for a in self.areas:
            if a.when is None or a.when.contains(frame, t):
                if mask is None:
                    mask = np.zeros((h, w), bool)
                x0, y0, x1, y1 = a.rect
                mask[y0:y1, x0:x1] |= a.crop
                area_entries.append((a.path, a.label))
                self._hits.add(a.path, frame)
        for m in self.moving:
            box = m.box_at(frame)
            if box is None:
                continue
            x0, y0, x1, y1 = box_pixels(box, w, h)
            if x1 > x0 and y1 > y0:
                if mask is None:
                    mask = np.zeros((h, w), bool)
                mask[y0:y1, x0:x1] = True
                area_entries.append((m.path, m.label))
                self._hits.add(m.path, frame)

        ids = tracks.ids
        kept = np.isin(ids, self._keep) if len(self._keep) else np.zeros(len(ids), bool)
        # A kept person whose box is unusable (NaN, infinite) cannot be placed: obscured, flagged.
        over = kept & ~np.isfinite(tracks.boxes).all(axis=1)
        if kept.any() and len(ids) > 1:
            iou = iou_matrix(tracks.boxes, tracks.boxes)
            np.fill_diagonal(iou, 0.0)
            over |= kept & ~(iou.max(axis=1) <= self.overlap_threshold)
        visible = kept & ~over & (not whole)
        for tid in ids[visible].tolist():
            self._hits.add(f"keep_visible:{tid}:visible", frame)
        for tid in ids[over].tolist():
            self._hits.add(f"keep_visible:{tid}:overlap", frame)
        obscure = tracks if not visible.any() else tracks.select(~visible)
        return FrameDecision(obscure, tuple(int(i) for i in ids[visible]), tuple(int(i) for i in ids[over]),
                             mask, whole, tuple(area_entries), tuple(whole_entries))

    # -- records -------------------------------------------------------------------------------

    def record(self) -> dict:
        """The plan as plain JSON values, for the transform log and the signed predicate."""
        return {
            "version": PLAN_VERSION, "sha256": self.sha256, "bytes": self.size, "note": self.note,
            "keep_visible": list(self.keep_visible), "overlap_threshold": self.overlap_threshold,
            "overlap_measure": "IoU of track boxes",
            "regions": [e.source for e in self.areas if e.path.startswith("regions")],
            "boxes": [e.source for e in self.areas if e.path.startswith("boxes")],
            "moving_boxes": [m.source for m in self.moving],
            "obscure_frames": [e.source for e in self.whole],
            "track_sheet": dict(self.track_sheet) if self.track_sheet else None,
        }

    def applied(self) -> dict:
        """Per entry, the frames it applied to so far: {"frames": count, "ranges": [[a, b], ...]}."""
        out: dict[str, Any] = {"keep_visible": {}}
        for k, tid in enumerate(self.keep_visible):
            out["keep_visible"][f"keep_visible[{k}]"] = {
                "id": tid, "visible": self._hits.summary(f"keep_visible:{tid}:visible"),
                "obscured_for_overlap": self._hits.summary(f"keep_visible:{tid}:overlap")}
        for e in self.areas + self.whole + self.moving:
            out[e.path] = {"label": e.label, **self._hits.summary(e.path)}
        return out


# ---------------------------------------------------------------- parsing and validation

def _is_int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _type_name(v) -> str:
    return {dict: "an object", list: "a list", str: "a string", bool: "true/false", type(None): "null"}.get(
        type(v), "a number" if isinstance(v, (int, float)) else type(v).__name__)


def _want(cond: bool, path: str, what: str, v) -> None:
    if not cond:
        raise _err(path, f"expected {what}, got {_type_name(v)}")


def _keys(obj: dict, path: str, allowed: Iterable[str], required: Iterable[str] = ()) -> None:
    allowed = set(allowed)
    for k in obj:
        if k not in allowed:
            raise _err(f"{path}.{k}" if path else k, f"unknown key (allowed: {', '.join(sorted(allowed))})")
    for k in required:
        if k not in obj:
            raise _err(f"{path}.{k}" if path else k, "missing (required)")


def _list(v, path: str, limit: int = MAX_ENTRIES) -> list:
    _want(isinstance(v, list), path, "a list", v)
    if len(v) > limit:
        raise _err(path, f"{len(v)} entries; at most {limit} are allowed")
    return v


def _label(obj: dict, path: str) -> str | None:
    v = obj.get("label")
    if v is None:
        return None
    _want(isinstance(v, str), f"{path}.label", "a string", v)
    if len(v) > MAX_LABEL:
        raise _err(f"{path}.label", f"longer than {MAX_LABEL} characters")
    return v


def _range(obj: dict, path: str, info, required: bool) -> FrameRange | None:
    given = [k for k in _RANGE_KEYS if k in obj]
    if len(given) > 1:
        raise _err(path, "give either frames or seconds, not both")
    if not given:
        if required:
            raise _err(f"{path}.frames", "missing (give frames: [start, end] or seconds: [start, end])")
        return None
    kind = given[0]
    p = f"{path}.{kind}"
    v = obj[kind]
    _want(isinstance(v, list) and len(v) == 2, p, "a list [start, end]", v)
    for i, x in enumerate(v):
        if kind == "frames":
            _want(_is_int(x), f"{p}[{i}]", "a whole frame number", x)
        else:
            _want(_is_num(x), f"{p}[{i}]", "a number of seconds", x)
        if x < 0:
            raise _err(f"{p}[{i}]", f"{x} is negative")
    start, end = v
    if kind == "frames":
        last = int(info.frames) - 1
        if end > last:
            raise _err(f"{p}[1]", f"frame {end} is beyond the end of the clip (frames 0-{last})")
    else:
        dur = float(info.duration)
        if end > dur + TIME_SLACK:
            raise _err(f"{p}[1]", f"{end} s is beyond the end of the clip ({dur:.3f} s)")
    if start > end:
        raise _err(p, f"start {start} is after end {end}")
    return FrameRange(kind, start, end)


def _point(v, path: str, w: int, h: int) -> tuple[float, float]:
    _want(isinstance(v, list) and len(v) == 2 and all(_is_num(c) for c in v), path, "a point [x, y] of two numbers", v)
    x, y = float(v[0]), float(v[1])
    if not (0 <= x <= w and 0 <= y <= h):
        raise _err(path, f"({v[0]}, {v[1]}) lies outside the {w}×{h} frame (x must be within 0..{w}, y within 0..{h})")
    return x, y


def _area(pts: np.ndarray, path: str, label, when, w: int, h: int, source: dict) -> AreaEntry:
    rect, crop = polygon_mask(pts, w, h)
    if not crop.any():
        raise _err(path, "covers no pixel centre (too thin or too small); draw it larger")
    return AreaEntry(path, label, pts, when, rect, crop, source)


def _region(v, path: str, info) -> AreaEntry:
    w, h = int(info.width), int(info.height)
    _want(isinstance(v, dict), path, "an object", v)
    _keys(v, path, ("points", "frames", "seconds", "label"), ("points",))
    pts_raw = _list(v["points"], f"{path}.points", MAX_POINTS)
    if len(pts_raw) < 3:
        raise _err(f"{path}.points", f"a polygon needs at least 3 points, got {len(pts_raw)}")
    pts = np.array([_point(p, f"{path}.points[{i}]", w, h) for i, p in enumerate(pts_raw)], np.float64)
    when = _range(v, path, info, required=False)
    return _area(pts, path, _label(v, path), when, w, h, dict(v))


def _box(v, path: str, info) -> AreaEntry:
    w, h = int(info.width), int(info.height)
    _want(isinstance(v, dict), path, "an object", v)
    _keys(v, path, ("box", "frames", "seconds", "label"), ("box",))
    b = v["box"]
    _want(isinstance(b, list) and len(b) == 4 and all(_is_num(c) for c in b), f"{path}.box",
          "a list [x1, y1, x2, y2] of four numbers", b)
    x1, y1 = _point(b[:2], f"{path}.box", w, h)
    x2, y2 = _point(b[2:], f"{path}.box", w, h)
    if not (x2 > x1 and y2 > y1):
        raise _err(f"{path}.box", f"expected x1 < x2 and y1 < y2, got {b}")
    pts = np.array([[x1, y1], [x2, y1], [x2, y2], [x1, y2]], np.float64)
    when = _range(v, path, info, required=False)
    return _area(pts, path, _label(v, path), when, w, h, dict(v))


def _whole(v, path: str, info) -> WholeFrameEntry:
    _want(isinstance(v, dict), path, "an object", v)
    _keys(v, path, ("frames", "seconds", "label"))
    when = _range(v, path, info, required=True)
    assert when is not None
    return WholeFrameEntry(path, _label(v, path), when, dict(v))


def _track_sheet(v) -> dict:
    _want(isinstance(v, dict), "track_sheet", "an object", v)
    _keys(v, "track_sheet", ("source_sha256", "settings_sha256"), ("source_sha256", "settings_sha256"))
    for k in ("source_sha256", "settings_sha256"):
        x = v[k]
        _want(isinstance(x, str), f"track_sheet.{k}", "a string", x)
        if not _HEX64.fullmatch(x):
            raise _err(f"track_sheet.{k}", "expected 64 lowercase hexadecimal digits (a SHA-256)")
    return {"source_sha256": v["source_sha256"], "settings_sha256": v["settings_sha256"]}


def parse_plan(data: bytes, info, known_track_ids: Iterable[int] | None = None, name: str = "plan") -> Plan:
    """Validate plan bytes against a video (info: redact.media.video.VideoInfo or anything with width,
    height, frames, duration). known_track_ids: the video's track ids when known (e.g. from the
    track sheet's tracks.json); when None, call `Plan.check_end` once the ids are known."""
    try:
        doc = jsonio.loads(bytes(data), "plan", PLAN_SIZE_LIMIT)
    except PackageError as e:
        raise PlanError(str(e)) from None
    if not isinstance(doc, dict):
        raise PlanError(f"plan: expected a JSON object at the top level, got {_type_name(doc)}")
    _keys(doc, "", _TOP_KEYS, ("version",))
    if doc["version"] != PLAN_VERSION:
        raise _err("version", f"expected {PLAN_VERSION!r}, got {doc['version']!r}")
    note = doc.get("note")
    if note is not None:
        _want(isinstance(note, str), "note", "a string", note)
        if len(note) > MAX_NOTE:
            raise _err("note", f"longer than {MAX_NOTE} characters")

    keep: list[int] = []
    for k, tid in enumerate(_list(doc.get("keep_visible", []), "keep_visible")):
        _want(_is_int(tid), f"keep_visible[{k}]", "a whole track id", tid)
        if tid < 1:
            raise _err(f"keep_visible[{k}]", f"track ids start at 1, got {tid}")
        if tid in keep:
            raise _err(f"keep_visible[{k}]", f"track id {tid} is listed twice")
        keep.append(tid)

    thr = doc.get("overlap_threshold", DEFAULT_OVERLAP_IOU)
    _want(_is_num(thr), "overlap_threshold", "a number", thr)
    if not 0.0 <= thr < 1.0:
        raise _err("overlap_threshold", f"must be within 0 (obscure at any overlap) and below 1, got {thr}")

    sheet = _track_sheet(doc["track_sheet"]) if "track_sheet" in doc else None
    if keep and sheet is None:
        raise _err("track_sheet", "required when keep_visible lists tracks: track ids only mean something for "
                                  "the video and settings they came from (copy it from the track sheet's "
                                  "plan-template.json)")

    areas = [_region(v, f"regions[{i}]", info) for i, v in enumerate(_list(doc.get("regions", []), "regions"))]
    areas += [_box(v, f"boxes[{i}]", info) for i, v in enumerate(_list(doc.get("boxes", []), "boxes"))]
    moving = [parse_moving_box(v, f"moving_boxes[{i}]", info)
              for i, v in enumerate(_list(doc.get("moving_boxes", []), "moving_boxes"))]
    whole = [_whole(v, f"obscure_frames[{i}]", info)
             for i, v in enumerate(_list(doc.get("obscure_frames", []), "obscure_frames"))]

    plan = Plan(sha256=hashlib.sha256(data).hexdigest(), size=len(data), name=name, note=note,
                keep_visible=tuple(keep), overlap_threshold=float(thr), areas=tuple(areas), whole=tuple(whole),
                track_sheet=sheet, width=int(info.width), height=int(info.height), moving=tuple(moving))
    if known_track_ids is not None:
        plan.check_track_ids(known_track_ids)
    return plan


def load_plan(path: str | Path, info, known_track_ids: Iterable[int] | None = None) -> Plan:
    """Read and validate a plan file (see parse_plan); the file is read once, with a size limit."""
    p = Path(path)
    try:
        if not p.is_file():
            raise PlanError(f"plan: {p}: no such file")
        with open(p, "rb") as f:
            data = f.read(PLAN_SIZE_LIMIT + 1)
    except OSError as e:
        raise PlanError(f"plan: {p}: cannot read ({e.strerror or e})") from None
    if len(data) > PLAN_SIZE_LIMIT:
        raise PlanError(f"plan: {p}: larger than the limit of {PLAN_SIZE_LIMIT} bytes")
    return parse_plan(data, info, known_track_ids, name=p.name)


def read_track_ids(tracks_json: str | Path) -> set[int]:
    """The track ids listed in a track sheet's (or a package's) tracks.json."""
    p = Path(tracks_json)
    try:
        data = p.read_bytes()
    except OSError as e:
        raise InputError(f"{p}: cannot read ({e.strerror or e})") from None
    try:
        doc = jsonio.loads_object(data, p.name)
    except PackageError as e:
        raise InputError(str(e)) from None
    tracks = doc.get("tracks")
    if not isinstance(tracks, list) or not all(isinstance(t, dict) and _is_int(t.get("id")) for t in tracks):
        raise InputError(f"{p}: expected {{\"tracks\": [{{\"id\": …}}, …]}}")
    return {int(t["id"]) for t in tracks}
