"""Is this frame dim — for the clip it belongs to, not only by an absolute threshold?

The detector misses people in poor light. A fixed luma threshold (redact.redaction.quality's
`dark`) catches night footage but not a scene that falls from its usual brightness to half of it
(a light switched off, a cloud, an iris closing): those frames are dim *for this camera*. The
meter keeps the brightest frame mean of the last `reference_seconds` as the scene's reference and
calls a frame dim when its mean luma (ITU-R BT.601) falls below `relative` × that reference, or
below `dark` outright. It reads frames in order, before the model looks at them, so that the
model's input can be contrast-enhanced on dim frames (never the redacted video).
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

from redact.errors import InputError


@dataclass(frozen=True)
class LightSettings:
    """When a frame counts as dim. Defaults are common practice (no published source).

    dark: absolute mean luma (0..255) below which a frame is dim. relative: a frame whose mean
    luma is below this fraction of the reference is dim. reference_seconds: how far back the
    reference (the brightest frame mean) reaches. enhance: contrast-enhance the detector's view
    of dim frames (CLAHE on luma, redact.vision.finder.enhance_for_detection); off by default
    because it did not measurably raise recall on dimmed, noisy, compressed real footage
    (benchmarks/README.md, "Dim footage").
    """

    dark: float = 40.0
    relative: float = 0.6
    reference_seconds: float = 30.0
    enhance: bool = False

    def __post_init__(self) -> None:
        if not (math.isfinite(self.dark) and 0 <= self.dark <= 255):
            raise InputError(f"dark threshold must be 0..255, got {self.dark}")
        if not (math.isfinite(self.relative) and 0 < self.relative < 1):
            raise InputError(f"relative dimness must be between 0 and 1, got {self.relative}")
        if not (math.isfinite(self.reference_seconds) and self.reference_seconds > 0):
            raise InputError(f"reference time must be positive, got {self.reference_seconds}")


@dataclass(frozen=True)
class LightReading:
    """One frame: its mean luma, the scene reference it was compared with, and the verdicts:
    relative_dim (below `relative` × reference) and dark (below the absolute threshold)."""

    luma: float
    reference: float
    relative_dim: bool
    dark: bool

    @property
    def dim(self) -> bool:
        return self.relative_dim or self.dark


class LightMeter:
    """Feed the mean luma of each frame, in order; `read` says whether that frame is dim."""

    def __init__(self, settings: LightSettings, fps: float):
        self.settings = settings
        fps = fps if fps and math.isfinite(fps) and fps > 0 else 25.0
        self._window = max(1, int(round(settings.reference_seconds * fps)))
        self._max: deque[tuple[int, float]] = deque()  # (frame number, luma), decreasing luma
        self._n = 0

    def read(self, luma: float) -> LightReading:
        """The reading of the next frame given its mean luma (0..255)."""
        n = self._n
        self._n += 1
        while self._max and self._max[-1][1] <= luma:
            self._max.pop()
        self._max.append((n, luma))
        while self._max[0][0] <= n - self._window:
            self._max.popleft()
        reference = self._max[0][1]
        s = self.settings
        return LightReading(luma, reference, luma < s.relative * reference, luma < s.dark)
