"""The empty scene behind people (style "background"): the scene without its people, as a masked
temporal median.

Samples are spaced over the clip without knowing its length (keep every `stride`-th frame;
when the store is full, drop every second sample and double the stride), downscaled so that
memory stays bounded: at most max_samples × (max_side² × 3) bytes. Each pixel's median uses
only the samples in which no person region covered it, so a person who stands still in every
sample leaves that pixel *invalid*: the background holds no scene there and the renderer must fall
back to another obscuring style. A person the detector missed in a sample is outvoted by the
median only if they are absent from most samples: the background is a convenience, not a guarantee,
and the redacted video must still be reviewed by a person.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from redact.errors import RedactError


@dataclass(frozen=True)
class Background:
    """image [h, w, 3] uint8 RGB (zero where invalid); valid [h, w] bool: a clean sample existed."""

    image: np.ndarray
    valid: np.ndarray

    def __post_init__(self) -> None:
        img = np.ascontiguousarray(self.image, np.uint8)
        val = np.ascontiguousarray(self.valid, bool)
        if img.ndim != 3 or img.shape[2] != 3 or val.shape != img.shape[:2]:
            raise RedactError(f"background: expected image [h,w,3] and valid [h,w], got {list(img.shape)} "
                              f"and {list(val.shape)}")
        img = np.where(val[:, :, None], img, 0).astype(np.uint8)  # never keep pixels without a clean sample
        img.flags.writeable = False
        val.flags.writeable = False
        object.__setattr__(self, "image", img)
        object.__setattr__(self, "valid", val)

    def resized(self, height: int, width: int) -> Background:
        """The background at frame size. A pixel stays valid only if every pixel it draws from is valid."""
        h, w = self.valid.shape
        if (h, w) == (height, width):
            return self
        img = cv2.resize(self.image, (width, height), interpolation=cv2.INTER_LINEAR)
        cover = cv2.resize(self.valid.astype(np.float32), (width, height), interpolation=cv2.INTER_LINEAR)
        # Bilinear weights sum to one: full cover means no invalid neighbour contributed.
        return Background(img, cover >= 1.0 - 1e-4)


class BackgroundBuilder:
    """Collect spaced, downscaled samples with their person masks; `build()` the masked median.

    Call `wants_next()` before each frame (it is cheap) and `add(image, person_mask)` with every
    frame; frames the builder does not keep are only counted. image [H,W,3] uint8 RGB;
    person_mask [H,W] bool, True where any person's region is.
    """

    def __init__(self, max_samples: int = 32, max_side: int = 320, min_clean: int = 1):
        if max_samples < 2 or max_side < 8 or min_clean < 1:
            raise RedactError("background: need max_samples >= 2, max_side >= 8, min_clean >= 1")
        self.max_samples = int(max_samples)
        self.max_side = int(max_side)
        self.min_clean = int(min_clean)
        self._stride = 1
        self._seen = 0
        self._frames: list[np.ndarray] = []
        self._masks: list[np.ndarray] = []
        self._full_shape: tuple[int, int] | None = None
        self._small_shape: tuple[int, int] | None = None

    def wants_next(self) -> bool:
        """Whether the next frame given to add() will be kept as a sample."""
        return self._seen % self._stride == 0

    def add(self, image: np.ndarray, person_mask: np.ndarray) -> bool:
        """Count one frame; keep it as a sample when it falls on the stride. Returns True when kept."""
        keep = self.wants_next()
        self._seen += 1
        if not keep:
            return False
        img = np.asarray(image)
        mask = np.asarray(person_mask, bool)
        if img.ndim != 3 or img.shape[2] != 3 or img.dtype != np.uint8 or mask.shape != img.shape[:2]:
            raise RedactError(f"background: expected image [H,W,3] uint8 and mask [H,W], got {list(img.shape)} "
                              f"{img.dtype} and {list(mask.shape)}")
        if self._full_shape is None:
            h, w = img.shape[:2]
            s = min(1.0, self.max_side / max(h, w))
            self._full_shape = (h, w)
            self._small_shape = (max(1, round(h * s)), max(1, round(w * s)))
        elif img.shape[:2] != self._full_shape:
            raise RedactError("background: every frame must have the same size")
        sh, sw = self._small_shape  # type: ignore[misc]
        small = cv2.resize(img, (sw, sh), interpolation=cv2.INTER_AREA) if (sh, sw) != img.shape[:2] else img.copy()
        # A small pixel is "person" if any full-size pixel under it is, plus one pixel of safety
        # for the bilinear upscale that rendering applies.
        cover = cv2.resize(mask.astype(np.float32), (sw, sh), interpolation=cv2.INTER_AREA)
        small_mask = cv2.dilate((cover > 0).astype(np.uint8), np.ones((3, 3), np.uint8)) > 0
        self._frames.append(small)
        self._masks.append(small_mask)
        if len(self._frames) >= self.max_samples:  # thin out: keep every second sample
            self._frames = self._frames[::2]
            self._masks = self._masks[::2]
            self._stride *= 2
        return True

    @property
    def samples(self) -> int:
        return len(self._frames)

    def build(self) -> Background:
        """The masked per-pixel median of the kept samples, at the downscaled size."""
        if not self._frames:
            raise RedactError("background: no frames were given, so there is no empty-scene background")
        stack = np.stack(self._frames).astype(np.float32)  # [K, h, w, 3]
        masks = np.stack(self._masks)  # [K, h, w]
        stack[masks] = np.nan
        clean = (~masks).sum(axis=0)
        valid = clean >= self.min_clean
        med = np.zeros(stack.shape[1:], np.float32)
        if valid.any():
            med[valid] = np.nanmedian(stack[:, valid, :], axis=0)
        return Background(np.clip(np.round(med), 0, 255).astype(np.uint8), valid)
