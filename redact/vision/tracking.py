"""The one tracking loop: decoded frames → poses (several frames at once) → tracks, in frame order.

Track ids are what a redaction plan names ("keep track 3 visible"), so the operator's track sheet
(redact.tracksheet) and the run that applies the plan (redact.pipeline) must assign exactly the
same ids. Both therefore drive `TrackingPass` over the same frames with the same `TrackIdSettings`;
nothing else decides ids. `TrackIdSettings` holds exactly the settings that decide them, and
redact.redaction.plan.ids_fingerprint hashes it so that a plan made on a sheet with other settings
is refused.

Failing closed: a frame whose decoding was flagged as damaged, whose inference raised or whose
tracker update raised comes out with tracks None and the reason; the tracker is left as it was
(an update that raises changes nothing), so the following frames get the same ids whichever
caller runs the loop.
"""

from __future__ import annotations

from collections.abc import Generator, Iterable, Iterator
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Protocol

import numpy as np

from redact.errors import InputError, RedactError
from redact.media.stages import map_ahead
from redact.vision.finder import PersonFinder, SearchPlan
from redact.vision.pose import PoseEstimator, PoseSettings
from redact.vision.records import Poses, Tracks
from redact.vision.scene import FrameScene, SceneSettings, SceneWatch
from redact.vision.search import FrameSchedule, SearchScheduler, SearchSettings, TrackBoard
from redact.vision.track import Tracker, TrackerConfig, TrackSummary

if TYPE_CHECKING:
    from redact.media.video import Frame

#: Frame rate assumed when a source does not state one (common practice: PAL's 25 frames/s).
FALLBACK_FPS = 25.0


class Estimator(Protocol):
    """Anything that finds people in an RGB uint8 image [H, W, 3] (redact.vision.pose.PoseEstimator,
    test doubles). An estimator that may be called from several threads at once says so with a
    class attribute `concurrent = True`; without it, frames are inferred one at a time."""

    def estimate(self, image: np.ndarray) -> Poses: ...


@dataclass(frozen=True)
class TrackIdSettings:
    """Exactly the settings that decide track ids (with the model's hash and the source file).

    pose: detection settings; tracker: tracker settings (its max_coast_frames is replaced by
    coast_seconds at the source frame rate, see `tracker_config`); coast_seconds: how long a lost
    person is still reported; detect_every: the model runs on every k-th frame only; search: where
    the model looks in each frame (redact.vision.search); scene: the motion net and light meter,
    which steer the search (redact.vision.scene).
    """

    pose: PoseSettings = field(default_factory=PoseSettings)
    tracker: TrackerConfig = field(default_factory=TrackerConfig)
    coast_seconds: float = 1.5
    detect_every: int = 1
    search: SearchSettings = field(default_factory=SearchSettings)
    scene: SceneSettings = field(default_factory=SceneSettings)

    def __post_init__(self) -> None:
        if not 1 <= self.detect_every <= 10:
            raise InputError(f"detect-every must be between 1 and 10 frames, got {self.detect_every}")

    def tracker_config(self, fps: float) -> TrackerConfig:
        """The tracker configuration used at frame rate fps: coast time converted to frames."""
        return replace(self.tracker, max_coast_frames=coast_frames(self.coast_seconds, fps))


def coast_frames(coast_seconds: float, fps: float) -> int:
    """Frames a lost person is still reported: coast_seconds at fps (FALLBACK_FPS when unknown), rounded."""
    return int(round(coast_seconds * (fps or FALLBACK_FPS)))


def detect(estimator: Estimator, frame: Frame, detect_every: int) -> Poses | None:
    """The people in one decoded frame by the estimator alone (whole frame), or None on frames the
    stride skips; raises on a frame the decoder flagged as damaged."""
    if frame.corrupt:
        raise RedactError("the decoder reported damaged data in this frame")
    return estimator.estimate(frame.image) if frame.index % detect_every == 0 else None


@dataclass(frozen=True)
class TrackedFrame:
    """One frame after tracking: tracks None when the frame failed, error then names why
    (the exception's type name, for the log); scene: what the motion net and light meter read
    (None when that failed)."""

    frame: Frame
    tracks: Tracks | None
    error: str | None = None
    scene: FrameScene | None = None


@dataclass(frozen=True)
class _Scanned:
    """A decoded frame with what was read of it before inference, and its search schedule."""

    frame: Frame
    scene: FrameScene | None
    schedule: FrameSchedule


@dataclass
class SearchStats:
    """What the model looked at over a run: frames searched, whole-frame passes, windows, sweep
    tiles, and model input pixels of windows and tiles (for the log)."""

    frames: int = 0
    full: int = 0
    windows: int = 0
    sweep_tiles: int = 0
    window_pixels: int = 0
    enhanced: int = 0

    def add(self, plan: SearchPlan, sweep: int, enhanced: bool) -> None:
        self.frames += 1
        self.full += int(plan.full)
        self.windows += len(plan.windows) - sweep
        self.sweep_tiles += sweep
        self.window_pixels += plan.pixels
        self.enhanced += int(enhanced)

    def record(self) -> dict:
        return {"frames_searched": self.frames, "whole_frame_passes": self.full, "windows": self.windows,
                "sweep_tiles": self.sweep_tiles, "window_megapixels": round(self.window_pixels / 1e6, 3),
                "frames_enhanced": self.enhanced}


class TrackingPass:
    """Runs frames through the scene reading, detection and the tracker; `run(frames)` yields one
    TrackedFrame per frame.

    workers: frames inferred at once (the caller decides, see redact.pipeline.inference_workers;
    it never changes the result: searches use the tracks of HINT_LAG frames before). A bundled
    PoseEstimator is driven through redact.vision.finder (whole frame, windows, sweep); any other
    estimator (test doubles) sees whole frames only. The tracker is created here, from the
    settings and the source frame rate, and stays readable for the end-of-run summary.
    """

    def __init__(self, estimator: Estimator, ids: TrackIdSettings, fps: float, workers: int = 1):
        self.estimator = estimator
        self.ids = ids
        self.fps = fps
        self.config = ids.tracker_config(fps)
        self.tracker = Tracker(self.config)
        self.workers = max(1, int(workers))
        self.finder = PersonFinder(estimator, ids.search.windows) if isinstance(estimator, PoseEstimator) else None
        self.watch = SceneWatch(ids.scene, fps)
        self.board = TrackBoard()
        self.search = SearchStats()
        self._scheduler: SearchScheduler | None = None

    def _scan(self, frames: Iterable[Frame]) -> Iterator[_Scanned]:
        """Frames in order with their scene reading and schedule (sequential state lives here)."""
        for frame in frames:
            try:
                scene: FrameScene | None = self.watch.read(frame.image)
            except Exception:  # the reading only steers and adds; without it, search everything
                scene = None
            if self._scheduler is None:
                h, w = frame.image.shape[:2]
                self._scheduler = SearchScheduler(self.ids.search, w, h, self.fps)
            yield _Scanned(frame, scene, self._scheduler.next(frame.index, scene))

    def _detect(self, item: _Scanned) -> tuple[Poses | None, SearchPlan | None, int, bool]:
        frame = item.frame
        if self.finder is None:
            return detect(self.estimator, frame, self.ids.detect_every), None, 0, False
        if frame.corrupt:
            raise RedactError("the decoder reported damaged data in this frame")
        if frame.index % self.ids.detect_every:
            return None, None, 0, False
        h, w = frame.image.shape[:2]
        scene, schedule = item.scene, item.schedule
        moving = scene.moving if scene is not None else None
        plan = self.finder.plan(w, h, self.board.boxes_for(frame.index), moving, schedule.full, schedule.sweep)
        enhance = bool(scene is not None and scene.light.dim and self.ids.scene.light.enhance)
        return self.finder.find(frame.image, plan, enhance), plan, len(schedule.sweep), enhance

    def run(self, frames: Iterable[Frame], ahead: int | None = None) -> Generator[TrackedFrame, None, None]:
        """Each frame with its tracks, in order; `ahead` bounds the frames taken ahead of inference
        (media.stages.map_ahead; the pipeline shrinks it for large frames)."""
        detected = map_ahead(self._detect, self._scan(frames), self.workers, ahead)
        last = np.zeros((0, 4), np.float32)
        for item, found, failed in detected:
            frame, scene = item.frame, item.scene
            result: TrackedFrame
            if failed is not None or found is None:
                result = TrackedFrame(frame, None, type(failed).__name__ if failed else "unknown", scene)
            else:
                poses, plan, sweep, enhanced = found
                if plan is not None:
                    self.search.add(plan, sweep, enhanced)
                try:
                    tracks = self.tracker.update(poses, frame.t, frame.index)
                    last = tracks.boxes
                    result = TrackedFrame(frame, tracks, None, scene)
                except Exception as e:  # fail closed: the caller obscures the whole frame
                    result = TrackedFrame(frame, None, type(e).__name__, scene)
            self.board.post(frame.index, last)  # every frame, so no later search waits forever
            yield result

    def summary(self) -> list[TrackSummary]:
        return self.tracker.summary()
