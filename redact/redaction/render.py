"""Obscure every tracked person in a frame, and optionally draw their stick figures.

Images are RGB uint8 [H, W, 3], C-contiguous; masks bool [H, W]. Nothing here writes into an
array it was given: every step returns a new image.

Styles (our names): "figure" (solid grey fill with a stick figure on top), "blur", "pixelate",
"fill", and "background" (the empty scene behind people where it is known, solid fill elsewhere).
Blur and pixel blocks scale with each person's region so that faces become unrecognisable:
weak blurs and small pixel blocks can be undone or recognised by machine learning
(McPherson, Shokri, Shmatikov, "Defeating Image Obfuscation with Deep Learning", arXiv
1609.00408, 2016), so the defaults here are deliberately heavy. Automated redaction still
misses people: a person must review the output before disclosure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol

import cv2
import numpy as np

from redact.errors import RedactError
from redact.redaction.background import Background
from redact.redaction.obscure import FILL_GREY, ObscureRecord, ObscureRegion, WholeFrame, add_people, figures_for
from redact.redaction.regions import Region, RegionSettings
from redact.vision.records import Tracks
from redact.vision.skeleton import LINKS

STYLES: tuple[str, ...] = ("figure", "blur", "pixelate", "fill", "background")
#: One neutral light grey for every stick figure: no colour coding of people.
FIGURE_GREY = 235


def _check_image(image: np.ndarray) -> np.ndarray:
    a = np.asarray(image)
    if a.ndim != 3 or a.shape[2] != 3 or a.dtype != np.uint8:
        raise RedactError(f"render: expected an RGB uint8 image [H,W,3], got {list(a.shape)} {a.dtype}")
    return a


def _bounds(mask: np.ndarray) -> tuple[int, int, int, int] | None:
    """Bounding rectangle (x0, y0, x1, y1), exclusive ends, of a bool mask; None when empty."""
    x, y, w, h = cv2.boundingRect(mask.astype(np.uint8))
    return None if w == 0 or h == 0 else (x, y, x + w, y + h)


class Obscurer(Protocol):
    """One obscuring style: `apply` returns a new image with the masked pixels replaced.

    size is the region's characteristic size in pixels (its shorter side); by default the
    shorter side of the mask's bounding rectangle. `apply_into` does the same in place on an
    image the caller owns, touching only rect (x0, y0, x1, y1) where sub_mask [y1-y0, x1-x0] is
    set: the renderer's fast path, which never builds full-frame masks or copies.
    """

    def apply(self, image: np.ndarray, mask: np.ndarray, size: float | None = None) -> np.ndarray: ...

    def apply_into(self, out: np.ndarray, rect: tuple[int, int, int, int], sub_mask: np.ndarray,
                   size: float) -> None: ...


def _apply_copy(style, image: np.ndarray, mask: np.ndarray, size: float | None) -> np.ndarray:
    """`apply` in terms of `apply_into`: copy once, work inside the mask's bounding rectangle."""
    img, m, b, s = _region(image, mask, size)
    out = img.copy()
    if b is not None:
        x0, y0, x1, y1 = b
        style.apply_into(out, b, m[y0:y1, x0:x1], s)
    return out


def _region(image: np.ndarray, mask: np.ndarray, size: float | None):
    img = _check_image(image)
    m = np.asarray(mask, bool)
    if m.shape != img.shape[:2]:
        raise RedactError(f"render: mask {list(m.shape)} does not match image {list(img.shape[:2])}")
    b = _bounds(m)
    if b is None:
        return img, m, None, 0.0
    x0, y0, x1, y1 = b
    s = float(size) if size is not None else float(min(x1 - x0, y1 - y0))
    return img, m, b, s


class Fill:
    """Solid fill with one neutral grey level."""

    def __init__(self, grey: int = FILL_GREY):
        if not 0 <= int(grey) <= 255:
            raise RedactError(f"fill grey level must be within 0..255, got {grey}")
        self.grey = int(grey)

    def apply(self, image: np.ndarray, mask: np.ndarray, size: float | None = None) -> np.ndarray:
        return _apply_copy(self, image, mask, size)

    def apply_into(self, out, rect, sub_mask, size) -> None:
        x0, y0, x1, y1 = rect
        np.copyto(out[y0:y1, x0:x1], np.uint8(self.grey), where=sub_mask[:, :, None])


class Blur:
    """Heavy Gaussian blur: sigma = fraction × region size (at least min_sigma pixels).

    A large sigma is applied as downscale (area average) → Gaussian of sigma 2 → bilinear
    upscale, which is fast and removes every detail finer than about the sigma. With the
    default fraction 0.25 the sigma is at least a quarter of any face inside the region.
    """

    def __init__(self, fraction: float = 0.25, min_sigma: float = 3.0):
        if not (fraction > 0 and min_sigma > 0):
            raise RedactError("blur fraction and min_sigma must be positive")
        self.fraction = float(fraction)
        self.min_sigma = float(min_sigma)

    def apply(self, image: np.ndarray, mask: np.ndarray, size: float | None = None) -> np.ndarray:
        return _apply_copy(self, image, mask, size)

    def apply_into(self, out, rect, sub_mask, size) -> None:
        x0, y0, x1, y1 = rect
        crop = out[y0:y1, x0:x1].copy()
        sigma = max(self.min_sigma, self.fraction * size)
        factor = max(1.0, sigma / 2.0)
        h, w = crop.shape[:2]
        sw, sh = max(1, round(w / factor)), max(1, round(h / factor))
        small = cv2.resize(crop, (sw, sh), interpolation=cv2.INTER_AREA)
        small_sigma = sigma / factor
        small = cv2.GaussianBlur(small, (0, 0), sigmaX=small_sigma, sigmaY=small_sigma,
                                 borderType=cv2.BORDER_REFLECT)
        # A second pass: one Gaussian of a small image leaves block traces after upscaling.
        small = cv2.GaussianBlur(small, (0, 0), sigmaX=small_sigma, sigmaY=small_sigma,
                                 borderType=cv2.BORDER_REFLECT)
        blurred = cv2.resize(small, (w, h), interpolation=cv2.INTER_LINEAR)
        np.copyto(out[y0:y1, x0:x1], blurred, where=sub_mask[:, :, None])


class Pixelate:
    """Replace the region by blocks of its average colour; block side = region size / blocks."""

    def __init__(self, blocks: float = 6.0, min_block: int = 8):
        if not (blocks > 0 and min_block >= 1):
            raise RedactError("pixelate blocks must be positive and min_block at least 1")
        self.blocks = float(blocks)
        self.min_block = int(min_block)

    def apply(self, image: np.ndarray, mask: np.ndarray, size: float | None = None) -> np.ndarray:
        return _apply_copy(self, image, mask, size)

    def apply_into(self, out, rect, sub_mask, size) -> None:
        x0, y0, x1, y1 = rect
        block = max(self.min_block, int(math.ceil(size / self.blocks)))
        crop = out[y0:y1, x0:x1].copy()
        h, w = crop.shape[:2]
        sw, sh = max(1, math.ceil(w / block)), max(1, math.ceil(h / block))
        small = cv2.resize(crop, (sw, sh), interpolation=cv2.INTER_AREA)
        big = cv2.resize(small, (w, h), interpolation=cv2.INTER_NEAREST)
        np.copyto(out[y0:y1, x0:x1], big, where=sub_mask[:, :, None])


class BackgroundFill:
    """Show the empty scene (redact.redaction.background) where it is valid; elsewhere the fallback style."""

    def __init__(self, background: Background, fallback: Obscurer | None = None):
        self.background = background
        self.fallback = fallback if fallback is not None else Fill()
        self._sized: dict[tuple[int, int], Background] = {}

    def _at(self, h: int, w: int) -> Background:
        if (h, w) not in self._sized:
            self._sized[(h, w)] = self.background.resized(h, w)
        return self._sized[(h, w)]

    def apply(self, image: np.ndarray, mask: np.ndarray, size: float | None = None) -> np.ndarray:
        return _apply_copy(self, image, mask, size)

    def apply_into(self, out, rect, sub_mask, size) -> None:
        x0, y0, x1, y1 = rect
        p = self._at(*out.shape[:2])
        valid = p.valid[y0:y1, x0:x1]
        self.fallback.apply_into(out, rect, sub_mask & ~valid, size)
        use_scene = sub_mask & valid
        np.copyto(out[y0:y1, x0:x1], p.image[y0:y1, x0:x1], where=use_scene[:, :, None])


class StickFigure:
    """Draw COCO-17 links whose two keypoints both have confidence >= threshold.

    One neutral grey and one line width for everyone (width 0 = scaled to the frame: about
    1/200 of its shorter side, at least 2 px): nothing about the drawing tells people apart.
    """

    def __init__(self, threshold: float = 0.5, width: int = 0, grey: int = FIGURE_GREY):
        if not 0.0 <= threshold <= 1.0 or width < 0 or not 0 <= grey <= 255:
            raise RedactError("stick figure: threshold within 0..1, width >= 0, grey within 0..255")
        self.threshold = float(threshold)
        self.width = int(width)
        self.grey = int(grey)

    def line_width(self, shape: tuple[int, ...]) -> int:
        return self.width if self.width > 0 else max(2, round(min(shape[0], shape[1]) / 200))

    def draw(self, image: np.ndarray, keypoints: np.ndarray) -> np.ndarray:
        """A new image with figures for keypoints [M,17,3] (x, y, conf) drawn on it."""
        out = _check_image(image).copy()
        self.draw_into(out, keypoints)
        return out

    def draw_into(self, out: np.ndarray, keypoints: np.ndarray) -> None:
        """Draw figures for keypoints [M,17,3] straight into `out` (RGB uint8, writable)."""
        kp = np.asarray(keypoints, np.float64).reshape(-1, 17, 3)
        if not len(kp):
            return
        lw = self.line_width(out.shape)
        colour = (self.grey, self.grey, self.grey)
        lim = 4 * max(out.shape[0], out.shape[1])  # keep coordinates within int range; OpenCV clips lines
        # Rounded once for all keypoints (half to even, as Python's round), then plain ints per link.
        drawn = (np.isfinite(kp).all(axis=2) & (kp[:, :, 2] >= self.threshold)).tolist()
        xy = np.rint(np.clip(np.nan_to_num(kp[:, :, :2]), -lim, lim)).astype(np.int64).tolist()
        for pts, ok in zip(xy, drawn):
            for a, b in LINKS:
                if ok[a] and ok[b]:
                    cv2.line(out, tuple(pts[a]), tuple(pts[b]), colour, lw, lineType=cv2.LINE_AA)


@dataclass(frozen=True)
class RenderSettings:
    """How people are obscured and drawn.

    style: one of STYLES. figure: draw stick figures on top (always on for style "figure").
    regions: how far each region reaches (margins, keypoint threshold for the hull).
    figure_threshold: keypoint confidence needed at both ends of a drawn limb (common practice).
    figure_hold: a person no longer detected keeps their figure for this many missed detections,
    then only the obscured region stays (a stale pose drawn where a prediction puts it would show
    a person who may not be there; the region itself stays for the whole coast, failing closed).
    line_width: 0 = scaled to the frame. blur_fraction: blur sigma as a fraction of the region
    size. pixel_blocks: blocks across the region's shorter side.
    """

    style: str = "figure"
    figure: bool = False
    regions: RegionSettings = field(default_factory=RegionSettings)
    figure_threshold: float = 0.5
    figure_hold: int = 2
    line_width: int = 0
    blur_fraction: float = 0.25
    pixel_blocks: float = 6.0

    def __post_init__(self) -> None:
        if self.style not in STYLES:
            raise RedactError(f"unknown style {self.style!r}; choose one of: {', '.join(STYLES)}")
        if not 0.0 <= self.figure_threshold <= 1.0:
            raise RedactError(f"figure_threshold must be within 0..1, got {self.figure_threshold}")
        if int(self.figure_hold) != self.figure_hold or self.figure_hold < 0:
            raise RedactError(f"figure_hold must be a whole number >= 0, got {self.figure_hold}")
        if self.line_width < 0 or not self.blur_fraction > 0 or not self.pixel_blocks > 0:
            raise RedactError("line_width must be >= 0; blur_fraction and pixel_blocks must be positive")

    @property
    def draws_figures(self) -> bool:
        return self.style == "figure" or self.figure


def obscurer_for(settings: RenderSettings, background: Background | None = None) -> Obscurer:
    """The obscuring style named by settings.style. Style "background" needs the empty scene."""
    if settings.style in ("figure", "fill"):
        return Fill()
    if settings.style == "blur":
        return Blur(settings.blur_fraction)
    if settings.style == "pixelate":
        return Pixelate(settings.pixel_blocks)
    if background is None:
        raise RedactError("style 'background' needs the empty scene; build it first or choose another style")
    return BackgroundFill(background)


def obscure_all(image: np.ndarray) -> np.ndarray:
    """The whole frame in uniform neutral grey: used for frames that fail (fail closed)."""
    img = _check_image(image)
    return np.full(img.shape, FILL_GREY, np.uint8)


def _obscure_region(out: np.ndarray, region: ObscureRegion, ob: Obscurer) -> None:
    """Obscure one region of the record in place in out (RGB uint8, writable)."""
    g = region.geometry
    if isinstance(g, WholeFrame):
        out[...] = FILL_GREY
        return
    if g.empty:
        return
    if type(ob) is Fill and isinstance(g, Region):  # rasterised straight into the frame (same pixels as its mask)
        g.paint(out, (ob.grey,) * 3)
    else:
        ob.apply_into(out, g.rect, g.crop_mask(), g.size)


def render_record(image: np.ndarray, record: ObscureRecord, style: RenderSettings,
                  background: Background | None = None, obscurer: Obscurer | None = None) -> np.ndarray:
    """A new image: the record's regions under the figures obscured in order, its figures drawn
    (style.figure_threshold, style.line_width), then the regions over the figures in order.

    A pure function of its arguments: the same source image, record and style (with the same
    empty scene for style "background") give the same bytes (redact.redaction.obscure).
    image [H,W,3] uint8 RGB, never written into; pass `obscurer` to reuse one across frames (a
    BackgroundFill caches its resized scene). Raises RedactError on unusable input (the caller
    then obscures the whole frame: fail closed).
    """
    img = _check_image(image)
    if img.shape[:2] != (record.height, record.width):
        raise RedactError(f"render: the record is for {record.width}×{record.height} frames, "
                          f"got {img.shape[1]}×{img.shape[0]}")
    ob = obscurer if obscurer is not None else obscurer_for(style, background)
    out = np.ascontiguousarray(img).copy()
    for region in record.under:
        _obscure_region(out, region, ob)
    if len(record.figures):
        StickFigure(style.figure_threshold, style.line_width).draw_into(out, record.figures)
    for region in record.over:
        _obscure_region(out, region, ob)
    return out


def render_frame(image: np.ndarray, tracks: Tracks, style: RenderSettings,
                 background: Background | None = None, obscurer: Obscurer | None = None,
                 detect_every: int = 1) -> np.ndarray:
    """A new image: every tracked person's region obscured, then figures drawn when asked.

    The record of redact.redaction.obscure for these tracks alone (add_people, figures_for),
    rendered by render_record. image [H,W,3] uint8 RGB (never written into).
    detect_every: the detection stride, so that style.figure_hold counts missed detections
    rather than frames. Raises RedactError on unusable input; the caller then uses obscure_all
    (fail closed).
    """
    img = _check_image(image)
    record = ObscureRecord(0, img.shape[1], img.shape[0])
    record = add_people(record, tracks, style.regions)
    record = record.with_figures(figures_for(tracks, style.draws_figures, style.figure_hold, detect_every))
    return render_record(img, record, style, background, obscurer)
