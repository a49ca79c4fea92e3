"""What is known about a frame before the pose model looks at it: what moved, and how dim it is.

Both are read in frame order, on one small grey copy of the frame (redact.vision.motion's
analysis_grey), so they cost a few milliseconds and can run in the decoding thread ahead of
inference. The results steer the model (windows around moving blobs; contrast enhancement of
dim frames) and, later, what is obscured (moving areas that no tracked person explains).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from redact.vision.light import LightMeter, LightReading, LightSettings
from redact.vision.motion import Foreground, MotionDetector, MotionSettings, analysis_grey


@dataclass(frozen=True)
class SceneSettings:
    """The motion net's and the light meter's settings (recorded with every run)."""

    motion: MotionSettings = field(default_factory=MotionSettings)
    light: LightSettings = field(default_factory=LightSettings)


@dataclass(frozen=True)
class FrameScene:
    """One frame's reading: foreground (None when the motion net is off) and light."""

    foreground: Foreground | None
    light: LightReading

    @property
    def moving(self) -> np.ndarray:
        """[K, 4] source boxes of moving blobs (empty when the net is off or unreliable)."""
        if self.foreground is None:
            return np.zeros((0, 4), np.float32)
        return self.foreground.boxes


class SceneWatch:
    """Reads every frame of a clip in order; `read(image)` per frame."""

    def __init__(self, settings: SceneSettings, fps: float):
        self.settings = settings
        self.motion = MotionDetector(settings.motion, fps) if settings.motion.enabled else None
        self.light = LightMeter(settings.light, fps)

    def read(self, image: np.ndarray) -> FrameScene:
        grey, scale = analysis_grey(image, self.settings.motion.analysis_width)
        light = self.light.read(float(grey.mean(dtype=np.float64)))
        fg = self.motion.observe_grey(grey, scale) if self.motion is not None else None
        return FrameScene(fg, light)
