"""How a clip is searched for people, frame by frame: a schedule, and what the tracker last knew.

Per frame the model looks at (redact.vision.finder): windows around the people tracked a few
frames earlier and around this frame's moving blobs; the whole frame at the usual input size
every `full_every` frames (people large in the picture, new arrivals who do not move); and tiles
of a sweep at the smallest person's scale — all of them on the first frame and after the camera
moved (nothing is known yet), and otherwise a few per frame so that the whole frame is searched
again every `sweep_seconds` (someone who came in unseen and stands still).

Windows use the tracks of frame `index - HINT_LAG`, never of the frame just before: several
frames are inferred at once, and a fixed lag makes the result the same whatever their number
(DEVELOPERS.md, "Determinism"). People move little in HINT_LAG frames; the windows' context
covers it, and this frame's moving blobs point at the movers anyway.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field

import numpy as np

from redact.errors import InputError
from redact.vision.crops import CropSettings, Window, sweep_windows
from redact.vision.scene import FrameScene

#: Frames between the tracks a search uses and the frame searched (at least the most frames
#: inferred at once, redact.pipeline.MAX_MODEL_FRAMES, so no frame waits for one after it).
HINT_LAG = 4


@dataclass(frozen=True)
class SearchSettings:
    """What the model looks at, besides the windows' own settings (recorded with every run).

    full_every: the whole frame at the model's usual input size on every k-th frame (and on every
    frame while the motion net cannot be trusted: learning, camera moved, light changed).
    sweep_seconds: the whole frame is searched again at the smallest person's scale over this long,
    a few tiles per frame (0: only on the first frame and after the camera moved).
    """

    windows: CropSettings = field(default_factory=CropSettings)
    full_every: int = 8
    sweep_seconds: float = 30.0

    def __post_init__(self) -> None:
        if not 1 <= self.full_every <= 100:
            raise InputError(f"full-frame interval must be 1..100 frames, got {self.full_every}")
        if not (math.isfinite(self.sweep_seconds) and 0 <= self.sweep_seconds <= 3600):
            raise InputError(f"sweep time must be 0..3600 seconds, got {self.sweep_seconds}")


@dataclass(frozen=True)
class FrameSchedule:
    """What one frame's search includes besides windows: the whole frame, and which sweep tiles."""

    full: bool
    sweep: tuple[Window, ...] = ()


class SearchScheduler:
    """Decides each frame's FrameSchedule, in frame order (it remembers when the camera moved)."""

    def __init__(self, settings: SearchSettings, frame_w: int, frame_h: int, fps: float):
        self.settings = settings
        self.tiles = tuple(sweep_windows(frame_w, frame_h, settings.windows)) if settings.windows.enabled else ()
        fps = fps if fps and math.isfinite(fps) and fps > 0 else 25.0
        self.period = max(1, int(round(settings.sweep_seconds * fps)))
        self._start = 0

    def next(self, index: int, scene: FrameScene | None) -> FrameSchedule:
        s = self.settings
        fg = scene.foreground if scene is not None else None
        moved = fg is not None and fg.state == "camera_moved"
        if index == 0 or moved:
            self._start = index
            return FrameSchedule(True, self.tiles)
        full = (index % s.full_every == 0) or fg is None or not fg.reliable
        tiles: tuple[Window, ...] = ()
        if self.tiles and s.sweep_seconds > 0:
            step = (index - self._start) % self.period
            n = len(self.tiles)
            tiles = tuple(t for j, t in enumerate(self.tiles) if (j * self.period) // n == step)
        return FrameSchedule(full, tiles)


class TrackBoard:
    """Where the tracking loop posts each frame's person boxes, for the searches HINT_LAG frames on.

    `post(index, boxes)` must be called for every frame in order (the last known boxes for a
    frame that failed); `boxes_for(index)` waits until frame index - HINT_LAG has been posted."""

    def __init__(self) -> None:
        self._boxes: dict[int, np.ndarray] = {}
        self._posted = -1
        self._cond = threading.Condition()

    def post(self, index: int, boxes: np.ndarray) -> None:
        with self._cond:
            self._boxes[index] = np.asarray(boxes, np.float32).reshape(-1, 4)
            self._posted = max(self._posted, index)
            for old in [k for k in self._boxes if k < index - 2 * HINT_LAG]:
                del self._boxes[old]
            self._cond.notify_all()

    def boxes_for(self, index: int, timeout: float = 600.0) -> np.ndarray:
        want = index - HINT_LAG
        if want < 0:
            return np.zeros((0, 4), np.float32)
        with self._cond:
            if not self._cond.wait_for(lambda: self._posted >= want, timeout=timeout):
                raise RuntimeError(f"tracks of frame {want} never came")  # a bug, not bad input
            return self._boxes.get(want, np.zeros((0, 4), np.float32))
