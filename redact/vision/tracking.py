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

from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Protocol

from redact.errors import InputError, RedactError
from redact.media.stages import map_ahead
from redact.vision.pose import PoseSettings
from redact.vision.records import Poses, Tracks
from redact.vision.track import Tracker, TrackerConfig, TrackSummary

if TYPE_CHECKING:
    import numpy as np

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
    person is still reported; detect_every: the model runs on every k-th frame only.
    """

    pose: PoseSettings = field(default_factory=PoseSettings)
    tracker: TrackerConfig = field(default_factory=TrackerConfig)
    coast_seconds: float = 1.5
    detect_every: int = 1

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
    """The people in one decoded frame, or None on frames the stride skips; raises on a frame the
    decoder flagged as damaged. Independent of other frames, so frames may be detected in parallel."""
    if frame.corrupt:
        raise RedactError("the decoder reported damaged data in this frame")
    return estimator.estimate(frame.image) if frame.index % detect_every == 0 else None


@dataclass(frozen=True)
class TrackedFrame:
    """One frame after tracking: tracks None when the frame failed, error then names why
    (the exception's type name, for the log)."""

    frame: Frame
    tracks: Tracks | None
    error: str | None = None


class TrackingPass:
    """Runs frames through detection and the tracker; `run(frames)` yields one TrackedFrame per frame.

    workers: frames inferred at once (the caller decides, see redact.pipeline.inference_workers;
    it never changes the result). The tracker is created here, from the settings and the source
    frame rate, and stays readable for the end-of-run summary.
    """

    def __init__(self, estimator: Estimator, ids: TrackIdSettings, fps: float, workers: int = 1):
        self.estimator = estimator
        self.ids = ids
        self.config = ids.tracker_config(fps)
        self.tracker = Tracker(self.config)
        self.workers = max(1, int(workers))

    def run(self, frames: Iterable[Frame], ahead: int | None = None) -> Iterator[TrackedFrame]:
        """Each frame with its tracks, in order; `ahead` bounds the frames taken ahead of inference
        (media.stages.map_ahead; the pipeline shrinks it for large frames)."""
        every = self.ids.detect_every
        detected = map_ahead(lambda f: detect(self.estimator, f, every), frames, self.workers, ahead)
        for frame, poses, failed in detected:
            if failed is not None:
                yield TrackedFrame(frame, None, type(failed).__name__)
                continue
            try:
                tracks = self.tracker.update(poses, frame.t, frame.index)
            except Exception as e:  # fail closed: the caller obscures the whole frame
                yield TrackedFrame(frame, None, type(e).__name__)
                continue
            yield TrackedFrame(frame, tracks)

    def summary(self) -> list[TrackSummary]:
        return self.tracker.summary()
