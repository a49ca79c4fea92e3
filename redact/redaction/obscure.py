"""What to obscure in one frame, and why: the per-frame obscure record, made before rendering.

Rendering is a pure function of (source image, this record, fixed render settings and the
obscuring style): redact.redaction.render.render_record. Everything it needs is here — the
geometry of every area to obscure, the stick-figure keypoints to draw, the order — so a redacted
copy can be rendered again from the source and stored records without running any model, and a
stage that finds more to hide (a motion net, a reviewer's correction) only adds regions.

An `ObscureRecord` holds, for frame `frame` of size `width` × `height`:
- `under`: regions obscured first, in order (tracked people; motion);
- `figures`: keypoints [F,17,3] float32 (x, y, confidence) drawn as stick figures on top;
- `over`: regions obscured after the figures, in order (the plan's areas, a whole frame,
  look-back regions added when a person is first detected a few frames later);
- `kept_ids`: tracks a redaction plan leaves visible in this frame (nothing is drawn for them).

Each `ObscureRegion` is one geometry plus its reasons:
- `Region` (redact.redaction.regions): convex polygons clipped to the frame (a person's grown box
  and padded keypoint hull);
- `MaskArea`: a bool mask over a rectangle (a plan's polygons and boxes active in the frame,
  united, as the plan's pixel rule rasterises them);
- `BoxArea`: an axis-aligned rectangle of whole pixels;
- `WholeFrame`: everything, in uniform FILL_GREY whatever the style (fail closed).
Reasons (`Reason.kind`, one of REASON_KINDS): "person" (track_id, state observed/predicted;
detail "kept overlap" when a kept person is obscured because they overlap someone), "lookback"
(track_id), "plan" (entry: the plan field, label), "fault" (detail: the error), "motion",
"review" (entry: the correction). A region can have several reasons (the plan's areas united).

Records are frozen; `add` returns a new record. `to_dict` / `from_dict` convert to plain JSON
values and back without loss (floats as Python floats, masks as packed bits in base64), so a
stored record renders to the same bytes.
"""

from __future__ import annotations

import base64
import math
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from redact.errors import RedactError
from redact.redaction.regions import Region, RegionSettings, person_region
from redact.vision.records import Tracks
from redact.vision.skeleton import NUM_KEYPOINTS

if TYPE_CHECKING:
    from redact.redaction.plan import FrameDecision

#: Neutral mid grey of solid fills and of whole frames obscured because they failed.
FILL_GREY = 128
#: Why a region is obscured. "motion" and "review" are for the motion net and review corrections.
REASON_KINDS: tuple[str, ...] = ("person", "lookback", "plan", "fault", "motion", "review")
STATES: tuple[str, ...] = ("observed", "predicted")
KEPT_OVERLAP = "kept overlap"


class Geometry(Protocol):
    """An area of a frame: its clipped bounding rectangle (x0, y0, x1, y1; x1, y1 exclusive), a
    characteristic size in pixels (scales blur and pixel blocks) and its pixels over the rectangle."""

    @property
    def rect(self) -> tuple[int, int, int, int]: ...

    @property
    def size(self) -> float: ...

    @property
    def empty(self) -> bool: ...

    def crop_mask(self) -> np.ndarray: ...


def _rect_empty(rect: tuple[int, int, int, int]) -> bool:
    x0, y0, x1, y1 = rect
    return x1 <= x0 or y1 <= y0


@dataclass(frozen=True)
class MaskArea:
    """Pixels of a bool mask crop [y1-y0, x1-x0] over rect (x0, y0, x1, y1); size: the region's
    characteristic size (by default the rectangle's shorter side)."""

    rect: tuple[int, int, int, int]
    crop: np.ndarray
    size: float

    def __post_init__(self) -> None:
        x0, y0, x1, y1 = (int(v) for v in self.rect)
        crop = np.ascontiguousarray(self.crop, bool)
        if crop.shape != (max(0, y1 - y0), max(0, x1 - x0)):
            raise RedactError(f"mask area: crop {list(crop.shape)} does not match rect {[x0, y0, x1, y1]}")
        crop.flags.writeable = False
        object.__setattr__(self, "rect", (x0, y0, x1, y1))
        object.__setattr__(self, "crop", crop)
        object.__setattr__(self, "size", float(self.size))

    @staticmethod
    def from_mask(mask: np.ndarray) -> MaskArea:
        """The set pixels of a full-frame bool mask [H, W], over their bounding rectangle."""
        m = np.asarray(mask, bool)
        ys, xs = np.nonzero(m.any(axis=1))[0], np.nonzero(m.any(axis=0))[0]
        if not len(ys):
            return MaskArea((0, 0, 0, 0), np.zeros((0, 0), bool), 0.0)
        x0, y0, x1, y1 = int(xs[0]), int(ys[0]), int(xs[-1]) + 1, int(ys[-1]) + 1
        return MaskArea((x0, y0, x1, y1), m[y0:y1, x0:x1], float(min(x1 - x0, y1 - y0)))

    @property
    def empty(self) -> bool:
        return _rect_empty(self.rect) or not self.crop.any()

    def crop_mask(self) -> np.ndarray:
        return self.crop


@dataclass(frozen=True)
class BoxArea:
    """Whole pixels columns x0..x1-1, rows y0..y1-1 (already clipped to the frame); size: the
    characteristic size (by default the shorter side)."""

    rect: tuple[int, int, int, int]
    size: float = -1.0

    def __post_init__(self) -> None:
        x0, y0, x1, y1 = (int(v) for v in self.rect)
        object.__setattr__(self, "rect", (x0, y0, x1, y1))
        size = float(self.size)
        object.__setattr__(self, "size", size if size >= 0 else float(max(0, min(x1 - x0, y1 - y0))))

    @staticmethod
    def clipped(box: np.ndarray | tuple[float, float, float, float], width: int, height: int) -> BoxArea:
        """The whole pixels a box x1,y1,x2,y2 (float pixels) touches, clipped to the frame."""
        x1, y1, x2, y2 = (float(v) for v in box)
        if not all(math.isfinite(v) for v in (x1, y1, x2, y2)):
            raise RedactError("a box to obscure is not finite; the frame cannot be redacted safely")
        return BoxArea((max(0, math.floor(x1)), max(0, math.floor(y1)),
                        min(width, math.ceil(x2)), min(height, math.ceil(y2))))

    @property
    def empty(self) -> bool:
        return _rect_empty(self.rect)

    def crop_mask(self) -> np.ndarray:
        x0, y0, x1, y1 = self.rect
        return np.ones((max(0, y1 - y0), max(0, x1 - x0)), bool)


@dataclass(frozen=True)
class WholeFrame:
    """The whole frame, in uniform FILL_GREY whatever the style."""

    rect: tuple[int, int, int, int] = (0, 0, 0, 0)
    size: float = 0.0

    @property
    def empty(self) -> bool:
        return False

    def crop_mask(self) -> np.ndarray:
        raise RedactError("a whole frame has no mask of its own; the renderer fills the frame")


@dataclass(frozen=True)
class Reason:
    """Why a region is obscured; see the module doc for each kind's fields."""

    kind: str
    track_id: int | None = None
    state: str | None = None
    entry: str | None = None
    label: str | None = None
    detail: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in REASON_KINDS:
            raise RedactError(f"unknown obscure reason {self.kind!r}; one of {', '.join(REASON_KINDS)}")
        if self.state is not None and self.state not in STATES:
            raise RedactError(f"track state must be one of {', '.join(STATES)}, got {self.state!r}")
        if self.track_id is not None:
            object.__setattr__(self, "track_id", int(self.track_id))


@dataclass(frozen=True)
class ObscureRegion:
    """One area to obscure and why (at least one reason)."""

    geometry: Region | MaskArea | BoxArea | WholeFrame
    reasons: tuple[Reason, ...]

    def __post_init__(self) -> None:
        if not isinstance(self.geometry, (Region, MaskArea, BoxArea, WholeFrame)):
            raise RedactError(f"unknown geometry {type(self.geometry).__name__}")
        reasons = tuple(self.reasons)
        if not reasons or not all(isinstance(r, Reason) for r in reasons):
            raise RedactError("an obscured region needs at least one Reason")
        object.__setattr__(self, "reasons", reasons)


def _no_figures() -> np.ndarray:
    return np.zeros((0, NUM_KEYPOINTS, 3), np.float32)


@dataclass(frozen=True)
class ObscureRecord:
    """What to obscure in one frame, in rendering order (see the module doc)."""

    frame: int
    width: int
    height: int
    under: tuple[ObscureRegion, ...] = ()
    figures: np.ndarray = field(default_factory=_no_figures)
    over: tuple[ObscureRegion, ...] = ()
    kept_ids: tuple[int, ...] = ()

    def __post_init__(self) -> None:
        fig = np.ascontiguousarray(self.figures, np.float32)
        if fig.ndim != 3 or fig.shape[1:] != (NUM_KEYPOINTS, 3):
            raise RedactError(f"figures: expected shape [F, {NUM_KEYPOINTS}, 3], got {list(fig.shape)}")
        fig.flags.writeable = False
        object.__setattr__(self, "figures", fig)
        object.__setattr__(self, "under", tuple(self.under))
        object.__setattr__(self, "over", tuple(self.over))
        object.__setattr__(self, "kept_ids", tuple(int(i) for i in self.kept_ids))
        if int(self.width) < 1 or int(self.height) < 1:
            raise RedactError(f"obscure record: frame size {self.width}×{self.height} is empty")

    @staticmethod
    def failed(frame: int, width: int, height: int, error: str) -> ObscureRecord:
        """A frame that could not be processed: obscured whole (fail closed), the error named."""
        why = Reason("fault", detail=error)
        return ObscureRecord(frame, width, height, over=(ObscureRegion(WholeFrame(), (why,)),))

    def add(self, region: ObscureRegion, over: bool = False) -> ObscureRecord:
        """A new record with region appended under the figures (default) or over them."""
        if over:
            return replace(self, over=self.over + (region,))
        return replace(self, under=self.under + (region,))

    def with_figures(self, keypoints: np.ndarray) -> ObscureRecord:
        """A new record whose figures are keypoints [F,17,3]."""
        return replace(self, figures=keypoints)

    @property
    def regions(self) -> tuple[ObscureRegion, ...]:
        """Every region in rendering order."""
        return self.under + self.over

    @property
    def whole_frame(self) -> bool:
        return any(isinstance(r.geometry, WholeFrame) for r in self.regions)

    @property
    def fault(self) -> str | None:
        """The error of a failed frame, or None."""
        for r in self.regions:
            for why in r.reasons:
                if why.kind == "fault":
                    return why.detail or "unknown"
        return None

    def mask(self) -> np.ndarray:
        """bool [height, width]: every pixel some region obscures (the figures are drawn on top)."""
        m = np.zeros((self.height, self.width), bool)
        for r in self.regions:
            g = r.geometry
            if isinstance(g, WholeFrame):
                m[:] = True
                break
            if g.empty:
                continue
            x0, y0, x1, y1 = g.rect
            m[y0:y1, x0:x1] |= g.crop_mask()
        return m

    def reason_counts(self) -> dict[str, int]:
        """How many regions name each reason kind (a region with two kinds counts for both)."""
        out: dict[str, int] = {}
        for r in self.regions:
            for kind in sorted({why.kind for why in r.reasons}):
                out[kind] = out.get(kind, 0) + 1
        return out

    # -- plain JSON values ------------------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON values; from_dict gives an equal record (floats exact, masks as packed bits)."""
        return {"frame": int(self.frame), "width": int(self.width), "height": int(self.height),
                "under": [_region_dict(r) for r in self.under], "figures": self.figures.astype(float).tolist(),
                "over": [_region_dict(r) for r in self.over], "kept_ids": list(self.kept_ids)}

    @staticmethod
    def from_dict(d: dict[str, Any]) -> ObscureRecord:
        """The record to_dict wrote; raises RedactError when d is not one."""
        try:
            figures = np.array(d["figures"], np.float32).reshape(-1, NUM_KEYPOINTS, 3)
            return ObscureRecord(int(d["frame"]), int(d["width"]), int(d["height"]),
                                 tuple(_region_from(r) for r in d["under"]), figures,
                                 tuple(_region_from(r) for r in d["over"]), tuple(d["kept_ids"]))
        except (KeyError, TypeError, ValueError) as e:
            raise RedactError(f"obscure record: malformed ({type(e).__name__}: {e})") from None


def _reason_dict(r: Reason) -> dict[str, Any]:
    return {k: v for k, v in (("kind", r.kind), ("track_id", r.track_id), ("state", r.state), ("entry", r.entry),
                              ("label", r.label), ("detail", r.detail)) if v is not None}


def _region_dict(r: ObscureRegion) -> dict[str, Any]:
    g = r.geometry
    out: dict[str, Any] = {"reasons": [_reason_dict(w) for w in r.reasons]}
    if isinstance(g, WholeFrame):
        out["whole_frame"] = True
    elif isinstance(g, Region):
        out["polygons"] = [p.astype(float).tolist() for p in g.polygons]
        out["rect"], out["size"] = list(g.rect), float(g.size)
    elif isinstance(g, MaskArea):
        out["mask"] = base64.b64encode(np.packbits(g.crop, axis=None).tobytes()).decode("ascii")
        out["rect"], out["size"] = list(g.rect), float(g.size)
    else:
        out["box"], out["size"] = list(g.rect), float(g.size)
    return out


def _region_from(d: dict[str, Any]) -> ObscureRegion:
    reasons = tuple(Reason(**w) for w in d["reasons"])
    geom: Region | MaskArea | BoxArea | WholeFrame
    if d.get("whole_frame"):
        geom = WholeFrame()
    elif "polygons" in d:
        polys = tuple(np.array(p, np.float64).reshape(-1, 2) for p in d["polygons"])
        x0, y0, x1, y1 = (int(v) for v in d["rect"])
        geom = Region(polys, (x0, y0, x1, y1), float(d["size"]))
    elif "mask" in d:
        x0, y0, x1, y1 = (int(v) for v in d["rect"])
        h, w = max(0, y1 - y0), max(0, x1 - x0)
        bits = np.unpackbits(np.frombuffer(base64.b64decode(d["mask"], validate=True), np.uint8), count=h * w)
        geom = MaskArea((x0, y0, x1, y1), bits.astype(bool).reshape(h, w), float(d["size"]))
    else:
        geom = BoxArea(tuple(int(v) for v in d["box"]), float(d["size"]))  # type: ignore[arg-type]
    return ObscureRegion(geom, reasons)


# -- producers: each takes a record and returns a new one with its regions added -------------------

def add_people(record: ObscureRecord, tracks: Tracks, settings: RegionSettings,
               overlap_ids: tuple[int, ...] = ()) -> ObscureRecord:
    """Every track's region (redact.redaction.regions.person_region) under the figures, in track order;
    regions wholly outside the frame add nothing. Raises RedactError on a non-finite box (the
    caller fails closed). overlap_ids: kept people obscured because they overlap someone."""
    shape = (record.height, record.width)
    under = list(record.under)
    for i in range(len(tracks)):
        geom = person_region(tracks.boxes[i], tracks.keypoints[i], float(tracks.margin[i]), shape, settings)
        if geom.empty:
            continue
        tid = int(tracks.ids[i])
        why = Reason("person", tid, "observed" if tracks.observed[i] else "predicted",
                     detail=KEPT_OVERLAP if tid in overlap_ids else None)
        under.append(ObscureRegion(geom, (why,)))
    return replace(record, under=tuple(under))


def figures_for(tracks: Tracks, draws: bool, hold: int, detect_every: int) -> np.ndarray:
    """Keypoints [F,17,3] of the people drawn as stick figures: none unless the style draws them;
    a person no longer detected keeps a figure for `hold` missed detections (misses count frames,
    so the hold is scaled by the detection stride)."""
    if not draws or not len(tracks):
        return _no_figures()
    held = tracks.misses < max(1, int(detect_every)) * (hold + 1)
    return tracks.keypoints[held]


def add_plan(record: ObscureRecord, decision: FrameDecision) -> ObscureRecord:
    """A plan's decision for the frame (redact.redaction.plan.Plan.decide): the whole frame over
    everything, or the union of its active areas over the figures; its kept ids noted."""
    out = replace(record, kept_ids=record.kept_ids + tuple(decision.kept_ids))
    if decision.whole_frame:
        reasons = tuple(Reason("plan", entry=p, label=lab) for p, lab in decision.whole_entries) or (Reason("plan"),)
        return out.add(ObscureRegion(WholeFrame(), reasons), over=True)
    if decision.mask is not None:
        area = MaskArea.from_mask(decision.mask)
        if not area.empty:
            reasons = tuple(Reason("plan", entry=p, label=lab) for p, lab in decision.area_entries) or (Reason("plan"),)
            out = out.add(ObscureRegion(area, reasons), over=True)
    return out
