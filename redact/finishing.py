"""Everything after tracking for one frame, in frame order: decide what to obscure, look back,
render, encode, and write the frame's skeleton row, quality line and digest.

Per frame (redact.pipeline hands each tracked frame to `FrameFinisher.finish`, in its own thread):
1. `frame_record` runs the producers of the per-frame obscure record
   (redact.redaction.obscure): the plan's whole frame, or every person to obscure with their
   stick figures and then the plan's areas. Any exception makes it a failed frame instead:
   obscured whole, its error named (fail closed).
2. `LookBack.push` holds the frame back for the look-back window. A person new to the tracker
   is obscured in the held-back frames too, where they first appeared: a "lookback" region is
   added to each held-back frame's record (over its figures).
3. A frame leaving the window is rendered from its source image and final record alone
   (redact.redaction.render.render_record); an exception there too makes it a failed frame.
   Then it is encoded, its row, quality line and digest are written, and the record is handed
   to the optional `records` sink.

Rendering is thus delayed by the window, and so are rows and progress; their content and order
are what they would be without the delay.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, BinaryIO

import numpy as np

from redact.provenance import merkle
from redact.redaction.obscure import (
    BoxArea,
    ObscureRecord,
    ObscureRegion,
    Reason,
    add_people,
    add_plan,
    figures_for,
)
from redact.redaction.quality import QualityMonitor, encode_quality_line
from redact.redaction.regions import Region, RegionSettings, person_region
from redact.redaction.render import Obscurer, RenderSettings, obscure_all, render_record
from redact.redaction.unexplained import (
    Unexplained,
    UnexplainedHold,
    UnexplainedSettings,
    covered_mask,
    unexplained,
)
from redact.skeletons import rows
from redact.vision.boxes import intersections
from redact.vision.records import Tracks

if TYPE_CHECKING:
    from redact.media.video import Frame
    from redact.redaction.plan import FrameDecision
    from redact.vision.scene import FrameScene

#: Quality flag of a frame where a person a plan keeps visible is obscured because they overlap someone.
KEPT_OVERLAP_FLAG = "kept_overlap"


@dataclass(frozen=True)
class FrameWork:
    """One tracked frame handed to the finisher: tracks None when the frame failed (error says
    why); decision: the plan's decision for it, None without a plan; scene: what the motion net
    and light meter read of it (None when off or failed)."""

    frame: Frame
    tracks: Tracks | None
    decision: FrameDecision | None = None
    error: str | None = None
    scene: FrameScene | None = None


@dataclass
class RunStats:
    """Counts for the transform log: what was obscured where, and which frames failed.

    with_people / faults / lookback_frames: frame indices in the order met (lookback_frames may
    repeat a frame once per person added to it); reasons: regions obscured per reason kind."""

    with_people: list[int] = field(default_factory=list)
    person_frames: int = 0
    predicted_frames: int = 0
    faults: list[int] = field(default_factory=list)
    fault_reasons: dict[str, int] = field(default_factory=dict)
    lookback_frames: list[int] = field(default_factory=list)
    new_tracks: int = 0
    figure_frames: int = 0
    reasons: dict[str, int] = field(default_factory=dict)
    motion_frames: list[int] = field(default_factory=list)
    motion_areas: int = 0
    motion_flagged: int = 0
    motion_states: dict[str, int] = field(default_factory=dict)

    def people(self, index: int, tracks: Tracks) -> None:
        if len(tracks):
            self.with_people.append(index)
            self.person_frames += len(tracks)
            self.predicted_frames += int((~tracks.observed).sum())

    def fault(self, index: int, reason: str) -> None:
        self.faults.append(index)
        self.fault_reasons[reason] = self.fault_reasons.get(reason, 0) + 1

    def record(self, record: ObscureRecord) -> None:
        if len(record.figures):
            self.figure_frames += 1
        for kind, n in record.reason_counts().items():
            self.reasons[kind] = self.reasons.get(kind, 0) + n


def frame_record(work: FrameWork, style: RenderSettings, detect_every: int) -> ObscureRecord:
    """The producers of one frame's obscure record, in order (see the module doc). Raises on
    unusable tracks (the caller fails closed); work.tracks must not be None."""
    frame, tracks = work.frame, work.tracks
    assert tracks is not None
    h, w = frame.image.shape[:2]
    record = ObscureRecord(frame.index, w, h)
    decision = work.decision
    if decision is not None and decision.whole_frame:
        return add_plan(record, decision)
    people = tracks if decision is None else decision.obscure
    overlap = () if decision is None else decision.overlap_ids
    record = add_people(record, people, style.regions, overlap)
    record = record.with_figures(figures_for(people, style.draws_figures, style.figure_hold, detect_every))
    return record if decision is None else add_plan(record, decision)


@dataclass
class _Held:
    """A frame waiting in the look-back window."""

    frame: Frame
    tracks: Tracks | None
    record: ObscureRecord
    flags: tuple[str, ...]


def _touches_kept(region: ObscureRegion, held: _Held) -> bool:
    """Whether region reaches a person the plan keeps visible in the held frame."""
    kept, tracks = held.record.kept_ids, held.tracks
    if not kept or tracks is None:
        return False
    boxes = tracks.boxes[np.isin(tracks.ids, kept)]
    x0, y0, x1, y1 = region.geometry.rect
    return bool(len(boxes)) and bool(intersections(np.array([[x0, y0, x1, y1]], np.float64), boxes).max() > 0)


class LookBack:
    """Holds the last `frames` frames back; `push` adds one and returns those old enough to finish.

    A person new to the tracker gets a region (their box with the tracker's widest margin,
    `margin`) in every held-back frame's record. "New" means new to the tracker, not newly
    obscured: a person a plan keeps visible who starts to be obscured when they overlap someone
    (kept_overlap) was shown on purpose before, so the frames before are left as they are."""

    def __init__(self, frames: int, region_settings: RegionSettings, margin: float, stats: RunStats):
        self.frames = max(0, int(frames))
        self.region_settings = region_settings
        self.margin = float(margin)
        self.stats = stats
        self.pending: deque[_Held] = deque()
        self.seen: set[int] = set()

    def push(self, held: _Held, obscured: Tracks | None, frame_ids: Iterable[int],
             arrivals: Iterable[ObscureRegion] = ()) -> list[_Held]:
        """obscured: the people obscured in this frame (None for a failed frame); frame_ids: every
        track id of the frame, including people kept visible (they are not new later); arrivals:
        regions of movement first seen in this frame (redact.redaction.unexplained), obscured in
        the held-back frames as a new person is. Only the frame where movement is found carries
        its review flag: the frames before, where it is obscured in case it was already there,
        would otherwise flag up to the whole look-back before anyone entered."""
        new = [k for k, i in enumerate(obscured.ids.tolist()) if i not in self.seen] if obscured is not None else []
        self.seen.update(int(i) for i in frame_ids)
        if new and obscured is not None:
            self.stats.new_tracks += len(new)
            h, w = held.record.height, held.record.width
            for k in new:
                geom = person_region(obscured.boxes[k], obscured.keypoints[k], self.margin, (h, w),
                                     self.region_settings)
                if geom.empty:
                    continue
                state = "observed" if obscured.observed[k] else "predicted"
                region = ObscureRegion(geom, (Reason("lookback", int(obscured.ids[k]), state),))
                for item in self.pending:
                    item.record = item.record.add(region, over=True)
                    self.stats.lookback_frames.append(item.frame.index)
        for region in arrivals:
            for item in self.pending:
                if _touches_kept(region, item):
                    continue  # a person a plan keeps visible stays visible in the frames before
                item.record = item.record.add(region, over=True)
                self.stats.lookback_frames.append(item.frame.index)
        self.pending.append(held)
        out = []
        while len(self.pending) > self.frames:
            out.append(self.pending.popleft())
        return out

    def flush(self) -> list[_Held]:
        out = list(self.pending)
        self.pending.clear()
        return out


class MotionCover:
    """Obscures movement that no obscured or kept person explains (redact.redaction.unexplained),
    in frame order, and says which review flags the frame's scene reading raises.

    Flags: "unexplained_motion" (an unexplained area could be a missed person), "camera_moved"
    (the motion net is relearning the view after the camera moved; it cannot vouch for these
    frames), "lighting_change" (the whole frame changed at once), "dim" (the frame is much darker
    than this scene usually is). Learning at the start of a clip is not flagged: it is the same
    for every clip, and the detector's sweep covers the first frame.
    """

    def __init__(self, settings: UnexplainedSettings, fps: float, min_person_height: float,
                 regions: RegionSettings, stats: RunStats):
        self.settings = settings
        self.min_person_height = float(min_person_height)
        self.regions = regions
        self.stats = stats
        self.hold = UnexplainedHold(settings, fps)
        self._previous = np.zeros((0, 4), np.float32)
        self._relearning = False

    def __call__(self, work: FrameWork, record: ObscureRecord) -> Produced:
        """The record with motion regions added, this frame's flags, and its new movement for the look-back."""
        scene, stats = work.scene, self.stats
        fg = scene.foreground if scene is not None else None
        if fg is not None:
            stats.motion_states[fg.state] = stats.motion_states.get(fg.state, 0) + 1
        if record.fault is not None:  # obscured whole already; keep the hold in step
            self.hold.step(Unexplained.none())
            self._previous = np.zeros((0, 4), np.float32)
            return Produced(record)
        flags: list[str] = []
        if scene is not None and scene.light.relative_dim:
            flags.append("dim")
        if fg is None:
            return Produced(record, tuple(flags))
        if fg.state == "camera_moved":
            self._relearning = True
        elif fg.state == "ok":
            self._relearning = False
        if self._relearning:
            flags.append("camera_moved")
        elif fg.state == "lighting_change":
            flags.append("lighting_change")
        polygons: list[np.ndarray] = []
        rects: list[tuple[int, int, int, int]] = []
        for r in record.regions:
            g = r.geometry
            if isinstance(g, Region):
                polygons.extend(g.polygons)
            else:
                rects.append(g.rect)
        tracks, decision = work.tracks, work.decision
        if tracks is not None and decision is not None and decision.kept_ids:
            # a person a plan keeps visible explains their own movement; it is not to be obscured
            shape = (record.height, record.width)
            for k in np.flatnonzero(np.isin(tracks.ids, decision.kept_ids)):
                polygons.extend(person_region(tracks.boxes[k], tracks.keypoints[k], float(tracks.margin[k]),
                                              shape, self.regions).polygons)
        found = unexplained(fg, covered_mask(fg, polygons, rects, record.whole_frame), self.settings,
                            record.width, record.height, self.min_person_height)
        boxes = self.hold.step(found)
        for box in boxes:
            area = BoxArea.clipped(box, record.width, record.height)
            if not area.empty:
                record = record.add(ObscureRegion(area, (Reason("motion"),)))
        arrivals = []
        for box in found.boxes:
            if not len(self._previous) or intersections(box[None], self._previous).max() <= 0:
                area = BoxArea.clipped(box, record.width, record.height)
                if not area.empty:
                    arrivals.append(ObscureRegion(area, (Reason("motion", detail="look-back"),)))
        self._previous = found.boxes
        if len(boxes):
            stats.motion_frames.append(record.frame)
            stats.motion_areas += len(found.boxes)
        if found.flag.any():
            flags.append("unexplained_motion")
            stats.motion_flagged += 1
        return Produced(record, tuple(flags), tuple(arrivals))


@dataclass(frozen=True)
class FrameSinks:
    """Where a finished frame goes: the encoder (image RGB uint8 [H,W,3], pts), the package's
    skeletons.jsonl, quality.jsonl and frames.sha256 (open binary files), progress(done, expected),
    and records(record) for whoever keeps the per-frame obscure records (None: nobody)."""

    encode: Callable[[np.ndarray, int], None]
    skeletons: BinaryIO
    quality: BinaryIO
    frames: BinaryIO
    expected: int
    progress: Callable[[int, int], None] | None = None
    records: Callable[[ObscureRecord], None] | None = None


@dataclass(frozen=True)
class Produced:
    """What a producer stage made of one frame: the record with its regions added, review flags
    for the frame, and regions new in this frame that the look-back also puts on the frames it
    still holds."""

    record: ObscureRecord
    flags: tuple[str, ...] = ()
    lookback: tuple[ObscureRegion, ...] = ()


#: A stage that adds to a frame's obscure record: (the tracked frame, its record so far) → Produced.
Producer = Callable[[FrameWork, ObscureRecord], Produced]


class FrameFinisher:
    """`finish(work)` once per tracked frame, in frame order, then `flush()` once at the end.

    producers: further stages that add regions to each frame's record after `frame_record`, in
    order (the motion net's MotionCover). Each sees every frame in order, failed ones included (so
    a stage with state stays in step; record.fault is set on a failed frame, whose record is the
    whole frame already); on a frame that has not failed, a producer that raises fails that frame
    closed; on a failed frame, what it raises or adds is ignored (it is obscured whole anyway).
    """

    def __init__(self, style: RenderSettings, detect_every: int, obscurer: Obscurer, lookback: LookBack,
                 monitor: QualityMonitor, stats: RunStats, sinks: FrameSinks, producers: tuple[Producer, ...] = ()):
        self.style, self.detect_every, self.obscurer = style, int(detect_every), obscurer
        self.lookback, self.monitor, self.stats, self.sinks = lookback, monitor, stats, sinks
        self.producers = tuple(producers)

    def finish(self, work: FrameWork) -> None:
        frame, tracks, decision, error = work.frame, work.tracks, work.decision, work.error
        h, w = frame.image.shape[:2]
        record: ObscureRecord | None = None
        if tracks is not None:
            try:
                record = frame_record(work, self.style, self.detect_every)
            except Exception as e:  # fail closed: whatever went wrong, this frame shows nobody
                tracks, error = None, type(e).__name__
        if tracks is None or record is None:
            tracks, record = None, ObscureRecord.failed(frame.index, w, h, error or "unknown")
        flags: tuple[str, ...] = ()
        arrivals: list[ObscureRegion] = []
        for produce in self.producers:
            try:
                made = produce(work, record)
            except Exception as e:  # fail closed, as above (a failed frame stays failed)
                if tracks is not None:
                    tracks, record = None, ObscureRecord.failed(frame.index, w, h, type(e).__name__)
                continue
            if tracks is not None:
                record = made.record
                flags += tuple(f for f in made.flags if f not in flags)
                arrivals.extend(made.lookback)
        obscured: Tracks | None = None
        frame_ids: list[int] = []
        if tracks is None:
            flags, arrivals = (), []
        else:
            obscured = tracks if decision is None else decision.obscure
            frame_ids = tracks.ids.tolist()
            if decision is not None and decision.overlap_ids:
                flags = (KEPT_OVERLAP_FLAG,) + flags
        for ready in self.lookback.push(_Held(frame, tracks, record, flags), obscured, frame_ids, arrivals):
            self._write(ready)

    def flush(self) -> None:
        for ready in self.lookback.flush():
            self._write(ready)

    def _write(self, held: _Held) -> None:
        frame, tracks, record, flags = held.frame, held.tracks, held.record, held.flags
        out = None
        if record.fault is None:
            try:
                out = render_record(frame.image, record, self.style, obscurer=self.obscurer)
            except Exception as e:  # fail closed, as above
                h, w = frame.image.shape[:2]
                record = ObscureRecord.failed(frame.index, w, h, type(e).__name__)
        if out is None:
            # A failed frame: uniform grey, with any look-back region added while it was held back
            # drawn over the grey as for any other frame.
            tracks, flags = None, ()
            try:
                out = render_record(frame.image, record, self.style, obscurer=self.obscurer)
            except Exception:  # the grey frame needs nothing but the image size
                out = obscure_all(frame.image)
            self.stats.fault(frame.index, record.fault or "unknown")
        else:
            assert tracks is not None
            self.stats.people(frame.index, tracks)
        self.stats.record(record)
        s = self.sinks
        s.encode(out, frame.pts if frame.pts is not None else frame.index)
        status = rows.STATUS_OK if tracks is not None else rows.STATUS_FAULT
        s.skeletons.write(rows.encode_row(frame.index, frame.pts, frame.t, tracks or Tracks.empty(), status))
        s.quality.write(encode_quality_line(self.monitor.observe(frame.index, frame.t, frame.image, tracks,
                                                                 fault=tracks is None, extra=flags)))
        s.frames.write(merkle.frame_digest_line(frame.digest))
        if s.records is not None:
            s.records(record)
        if s.progress is not None:
            s.progress(frame.index + 1, s.expected)

