"""Synthetic moving-still clips with exact per-frame ground truth, for tests and the demo.

Real people come only from scikit-image's bundled stills, loaded from the installed package:
- `skimage.data.astronaut()`: Eileen Collins, NASA portrait, public domain (stated in
  scikit-image's `skimage/data/_fetchers.py` and its data README).
- `skimage.data.camera()`: a man with a film camera, CC0 1.0, photographer Lav Varshney (same source).
Each person is cut out of its still with a fixed hand-set polygon, scaled, and pasted along a
keyframed linear path over a generated background (wall/floor gradients, shapes, seeded noise).
A dim stretch darkens everything (background and people) inside one rectangle.

Ground truth is exact: the rectangle of the pasted person pixels and the face rectangle inside it,
per actor and frame, clipped to the frame; rectangles include any parts hidden by actors pasted
later (paint order = actor order). Rectangles are [x0, y0, x1, y1) integer pixels, x1/y1 exclusive.
Images are RGB uint8 [H, W, 3]. Rendering is deterministic (seeded noise, no clocks).
OpenCV, PyAV and redact.media.video are imported in the functions that use them, so that the
scene classes and ground truth load without them.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from dataclasses import dataclass, field
from fractions import Fraction
from functools import lru_cache
from pathlib import Path

import numpy as np

from redact.errors import InputError


@dataclass(frozen=True)
class Still:
    """A still of one person: polygon around the person and face rectangle, in still pixels (512×512)."""

    name: str
    licence: str
    polygon: tuple[tuple[int, int], ...]
    face: tuple[int, int, int, int]  # x0, y0, x1, y1 (exclusive), measured once by inspection


# Polygons and face rectangles were set by hand on a 32-px grid drawn over each still.
STILLS: dict[str, Still] = {
    "astronaut": Still(
        name="astronaut",
        licence="public domain (NASA); scikit-image skimage.data.astronaut()",
        # Hair, head, suit and arms; excludes the flag, the shuttle model and the helmet held at right.
        polygon=((228, 12), (276, 22), (302, 60), (300, 120), (270, 160), (302, 178), (332, 228),
                 (358, 298), (360, 342), (302, 360), (284, 420), (280, 511), (22, 511), (26, 330),
                 (40, 250), (70, 214), (114, 194), (124, 170), (164, 150), (154, 110), (150, 60),
                 (180, 24)),
        # Face from the hairline above the eyebrows (y≈48) to below the chin (y≈178), cheek to cheek.
        face=(164, 44, 270, 180),
    ),
    "camera": Still(
        name="camera",
        licence="CC0 1.0, photographer Lav Varshney; scikit-image skimage.data.camera()",
        # Head, coat, arms and hands with the camera; excludes the tripod legs and the background.
        polygon=((200, 62), (250, 68), (270, 108), (264, 136), (326, 136), (332, 176), (330, 226),
                 (292, 236), (290, 300), (250, 314), (160, 300), (150, 380), (150, 511), (0, 511),
                 (0, 228), (40, 170), (66, 150), (128, 116), (158, 100), (168, 76)),
        # Face in profile: hair top (y≈62) to chin (y≈200), back of the head to the nose tip.
        face=(156, 62, 262, 202),
    ),
}


def load_still(name: str) -> np.ndarray:
    """RGB uint8 [512, 512, 3] of a named scikit-image still (grey replicated to RGB)."""
    if name not in STILLS:
        raise InputError(f"unknown still {name!r}; choose from {sorted(STILLS)}")
    try:
        from skimage import data  # optional (a test extra), so imported on use
    except ImportError as e:
        raise InputError("scikit-image is needed for synthetic clips: pip install scikit-image") from e
    img = np.asarray(getattr(data, name)())
    if img.ndim == 2:
        img = np.repeat(img[:, :, None], 3, axis=2)
    return np.ascontiguousarray(img[:, :, :3], dtype=np.uint8)


@lru_cache(maxsize=4)
def _cutout(name: str) -> tuple[np.ndarray, np.ndarray, tuple[int, int, int, int]]:
    """(RGB [h,w,3], mask [h,w] bool, face rect) cropped to the person polygon's bounding box."""
    import cv2

    still = load_still(name)
    spec = STILLS[name]
    mask = np.zeros(still.shape[:2], np.uint8)
    cv2.fillPoly(mask, [np.array(spec.polygon, np.int32)], 1)
    ys, xs = np.nonzero(mask)
    y0, y1, x0, x1 = ys.min(), ys.max() + 1, xs.min(), xs.max() + 1
    fx0, fy0, fx1, fy1 = spec.face
    rgb = still[y0:y1, x0:x1].copy()
    m = mask[y0:y1, x0:x1].astype(bool)
    rgb.flags.writeable = m.flags.writeable = False
    return rgb, m, (fx0 - x0, fy0 - y0, fx1 - x0, fy1 - y0)


@dataclass(frozen=True)
class Actor:
    """One pasted person. path: keyframes (t seconds, cx, cy, height_px) of the cut-out's box centre
    and height, interpolated linearly; the actor is absent before the first and after the last key.
    mirror flips the still left-right (e.g. to face the direction of travel)."""

    still: str
    path: tuple[tuple[float, float, float, float], ...]
    mirror: bool = False

    def __post_init__(self) -> None:
        if self.still not in STILLS:
            raise InputError(f"unknown still {self.still!r}; choose from {sorted(STILLS)}")
        keys = tuple(tuple(float(v) for v in k) for k in self.path)
        if not keys or any(len(k) != 4 for k in keys):
            raise InputError("an actor path needs keyframes of (t, cx, cy, height_px)")
        if any(b[0] <= a[0] for a, b in zip(keys, keys[1:])):
            raise InputError("actor keyframe times must increase")
        object.__setattr__(self, "path", keys)

    def at(self, t: float) -> tuple[float, float, float] | None:
        """(cx, cy, height_px) at time t, or None when the actor is not in the scene."""
        keys = self.path
        if t < keys[0][0] - 1e-9 or t > keys[-1][0] + 1e-9:
            return None
        for a, b in zip(keys, keys[1:]):
            if t <= b[0]:
                u = (t - a[0]) / (b[0] - a[0])
                return tuple(a[i] + u * (b[i] - a[i]) for i in (1, 2, 3))  # type: ignore[return-value]
        return keys[-1][1:]


@dataclass(frozen=True)
class SceneSpec:
    """A scene: size, rate, length, actors (in paint order), background kind, optional dim stretch.

    dim_region [x0, y0, x1, y1) is multiplied by dim_factor after pasting, during dim_seconds
    (start, end) only when that is given; blur is the sigma in pixels of a Gaussian blur of the
    whole picture (optics, focus), applied before noise; noise is the sigma of per-frame sensor
    noise (grey levels, seeded per frame).
    """

    width: int
    height: int
    fps: Fraction
    seconds: float
    actors: tuple[Actor, ...]
    background: str = "hall"
    dim_region: tuple[int, int, int, int] | None = None
    dim_factor: float = 0.3
    dim_seconds: tuple[float, float] | None = None
    blur: float = 0.0
    noise: float = 0.0
    seed: int = 0

    def __post_init__(self) -> None:
        object.__setattr__(self, "fps", Fraction(self.fps))
        object.__setattr__(self, "actors", tuple(self.actors))
        if self.width < 2 or self.height < 2 or self.fps <= 0 or self.seconds <= 0:
            raise InputError("a scene needs width, height >= 2 and positive fps and seconds")
        if self.background not in BACKGROUNDS:
            raise InputError(f"unknown background {self.background!r}; choose from {sorted(BACKGROUNDS)}")

    @property
    def frames(self) -> int:
        return int(round(self.seconds * self.fps))

    @property
    def time_base(self) -> Fraction:
        """1 / (fps numerator × 512): integer pts for every frame (512 per frame at 25 fps)."""
        return Fraction(1, self.fps.numerator * 512)

    def pts(self, index: int) -> int:
        return int(index * self.fps.denominator * 512)


@dataclass(frozen=True)
class FrameTruth:
    """Exact truth for one frame. person_rects/face_rects [A,4] int32 [x0,y0,x1,y1) clipped to the
    frame (zeros when absent); visible [A] bool (any person pixel on screen); dimmed [A] bool
    (the person overlaps the dim stretch); partial [A] bool (cut by the frame edge)."""

    frame: int
    t: float
    person_rects: np.ndarray
    face_rects: np.ndarray
    visible: np.ndarray
    # None is replaced by all-False arrays in __post_init__
    dimmed: np.ndarray = field(default=None)  # type: ignore[arg-type]
    partial: np.ndarray = field(default=None)  # type: ignore[arg-type]

    def __post_init__(self) -> None:
        a = np.asarray(self.visible).shape[0]
        for name, dt, shape in (("person_rects", np.int32, (a, 4)), ("face_rects", np.int32, (a, 4)),
                                ("visible", np.bool_, (a,)), ("dimmed", np.bool_, (a,)), ("partial", np.bool_, (a,))):
            v = getattr(self, name)
            arr = np.zeros(shape, dt) if v is None else np.ascontiguousarray(v, dtype=dt)
            if arr.shape != shape:
                raise ValueError(f"{name}: expected shape {list(shape)}, got {list(arr.shape)}")
            arr.flags.writeable = False
            object.__setattr__(self, name, arr)


# ---------------------------------------------------------------- backgrounds

def _vertical_gradient(h: int, w: int, top, bottom) -> np.ndarray:
    u = np.linspace(0.0, 1.0, h, dtype=np.float32)[:, None, None]
    return np.broadcast_to((1 - u) * np.float32(top) + u * np.float32(bottom), (h, w, 3)).copy()


def _hall(w: int, h: int, rng: np.random.Generator) -> np.ndarray:
    """A hall: a warm wall with doors and notice boards, a tiled floor in perspective."""
    import cv2

    horizon = int(h * 0.62)
    img = np.empty((h, w, 3), np.float32)
    img[:horizon] = _vertical_gradient(horizon, w, (196, 186, 168), (170, 160, 142))
    img[horizon:] = _vertical_gradient(h - horizon, w, (120, 112, 104), (84, 78, 74))
    s = w / 1280.0
    for x in (0.08, 0.72):  # doors
        x0 = int(w * x)
        cv2.rectangle(img, (x0, int(horizon - 300 * s)), (x0 + int(110 * s), horizon), (108, 84, 62), -1)
    for x in (0.30, 0.46):  # notice boards
        x0 = int(w * x)
        cv2.rectangle(img, (x0, int(horizon - 250 * s)), (x0 + int(120 * s), int(horizon - 160 * s)),
                      (64, 92, 128), -1)
    cv2.rectangle(img, (0, horizon - max(1, int(6 * s))), (w, horizon), (90, 80, 70), -1)  # skirting
    vx = w // 2  # tile lines converge on a vanishing point above the horizon
    for k in range(-12, 13):
        cv2.line(img, (vx + int(k * 40 * s), horizon), (vx + int(k * 160 * s), h), (70, 65, 60), 1)
    y: float = horizon
    step = 8 * s
    while y < h:
        cv2.line(img, (0, int(y)), (w, int(y)), (70, 65, 60), 1)
        step *= 1.35
        y += step
    return img


def _plain(w: int, h: int, rng: np.random.Generator) -> np.ndarray:
    """A plain two-tone gradient."""
    return _vertical_gradient(h, w, (150, 160, 170), (90, 96, 100))


BACKGROUNDS = {"hall": _hall, "plain": _plain}


def render_background(spec: SceneSpec) -> np.ndarray:
    """The static background, RGB uint8 [H, W, 3], with seeded texture noise."""
    rng = np.random.default_rng(spec.seed)
    img = BACKGROUNDS[spec.background](spec.width, spec.height, rng)
    img += rng.normal(0.0, 3.0, size=img.shape[:2])[:, :, None].astype(np.float32)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


# ---------------------------------------------------------------- actors

@lru_cache(maxsize=64)
def _scaled(name: str, height_px: int, mirror: bool) -> tuple[np.ndarray, np.ndarray, tuple[int, int, int, int]]:
    """Cut-out scaled to height_px rows: (RGB, mask, face rect within it)."""
    import cv2

    rgb, mask, (fx0, fy0, fx1, fy1) = _cutout(name)
    s = height_px / rgb.shape[0]
    w = max(1, int(round(rgb.shape[1] * s)))
    interp = cv2.INTER_AREA if s < 1 else cv2.INTER_LINEAR
    img = cv2.resize(rgb, (w, height_px), interpolation=interp)
    m = cv2.resize(mask.astype(np.uint8), (w, height_px), interpolation=cv2.INTER_NEAREST).astype(bool)
    face = (int(math.floor(fx0 * s)), int(math.floor(fy0 * s)), int(math.ceil(fx1 * s)), int(math.ceil(fy1 * s)))
    if mirror:
        img, m = img[:, ::-1], m[:, ::-1]
        face = (w - face[2], face[1], w - face[0], face[3])
    return np.ascontiguousarray(img), np.ascontiguousarray(m), face


def _clip(r, w: int, h: int) -> tuple[int, int, int, int]:
    x0, y0, x1, y1 = max(r[0], 0), max(r[1], 0), min(r[2], w), min(r[3], h)
    return (x0, y0, x1, y1) if x1 > x0 and y1 > y0 else (0, 0, 0, 0)


def render_frame(spec: SceneSpec, index: int, background: np.ndarray | None = None) -> tuple[np.ndarray, FrameTruth]:
    """One frame: RGB uint8 [H, W, 3] and its FrameTruth."""
    W, H = spec.width, spec.height
    img = (render_background(spec) if background is None else background).copy()
    t = float(Fraction(index) / spec.fps)
    n = len(spec.actors)
    rects = np.zeros((n, 4), np.int32)
    faces = np.zeros((n, 4), np.int32)
    visible = np.zeros(n, bool)
    partial = np.zeros(n, bool)
    for a, actor in enumerate(spec.actors):
        pos = actor.at(t)
        if pos is None:
            continue
        cx, cy, hp = pos
        hp = int(round(hp))
        if hp < 2:
            continue
        cut, mask, face = _scaled(actor.still, hp, actor.mirror)
        ch, cw = mask.shape
        x0, y0 = int(round(cx - cw / 2)), int(round(cy - ch / 2))
        # paste the part that falls inside the frame
        sx0, sy0 = max(0, -x0), max(0, -y0)
        sx1, sy1 = min(cw, W - x0), min(ch, H - y0)
        if sx1 <= sx0 or sy1 <= sy0:
            continue
        m = mask[sy0:sy1, sx0:sx1]
        if not m.any():
            continue
        region = img[y0 + sy0:y0 + sy1, x0 + sx0:x0 + sx1]
        region[m] = cut[sy0:sy1, sx0:sx1][m]
        ys, xs = np.nonzero(m)
        rects[a] = (x0 + sx0 + xs.min(), y0 + sy0 + ys.min(), x0 + sx0 + xs.max() + 1, y0 + sy0 + ys.max() + 1)
        r = rects[a]  # the face rectangle never extends beyond the pasted person pixels
        faces[a] = _clip((max(x0 + face[0], r[0]), max(y0 + face[1], r[1]),
                          min(x0 + face[2], r[2]), min(y0 + face[3], r[3])), W, H)
        visible[a] = True
        fy, fx = np.nonzero(mask)
        full = (x0 + fx.min(), y0 + fy.min(), x0 + fx.max() + 1, y0 + fy.max() + 1)
        partial[a] = tuple(rects[a]) != full
    dimmed = np.zeros(n, bool)
    dim_now = spec.dim_seconds is None or spec.dim_seconds[0] - 1e-9 <= t < spec.dim_seconds[1] - 1e-9
    if spec.dim_region is not None and dim_now:
        dx0, dy0, dx1, dy1 = _clip(spec.dim_region, W, H)
        if dx1 > dx0:
            sub = img[dy0:dy1, dx0:dx1].astype(np.float32) * np.float32(spec.dim_factor)
            img[dy0:dy1, dx0:dx1] = np.clip(np.rint(sub), 0, 255).astype(np.uint8)
            dimmed = visible & (rects[:, 0] < dx1) & (rects[:, 2] > dx0) & (rects[:, 1] < dy1) & (rects[:, 3] > dy0)
    if spec.blur > 0:
        import cv2

        img = cv2.GaussianBlur(img, (0, 0), spec.blur)
    if spec.noise > 0:
        rng = np.random.default_rng([spec.seed, index])
        noise = rng.normal(0.0, spec.noise, img.shape[:2])[:, :, None].astype(np.float32)
        img = np.clip(img.astype(np.float32) + noise, 0, 255)
        img = np.rint(img).astype(np.uint8)
    return img, FrameTruth(index, t, rects, faces, visible, dimmed, partial)


def render_scene(spec: SceneSpec) -> Iterator[tuple[np.ndarray, FrameTruth]]:
    """Every frame of the scene in order: (RGB uint8 [H, W, 3], FrameTruth)."""
    bg = render_background(spec)
    for i in range(spec.frames):
        yield render_frame(spec, i, bg)


def write_clip(spec: SceneSpec, path: str | Path, crf: int = 20, preset: str = "veryfast") -> list[FrameTruth]:
    """Render the scene to an H.264 MP4 with redact.media.video.VideoWriter (byte-reproducible settings);
    returns the per-frame truth."""
    from redact.media.video import VideoWriter

    truths = []
    with VideoWriter(path, spec.width, spec.height, spec.time_base, spec.fps, crf=crf, preset=preset,
                     reproducible=True) as w:
        for img, truth in render_scene(spec):
            w.write(img, spec.pts(truth.frame))
            truths.append(truth)
    return truths


def write_clip_with_audio(
    spec: SceneSpec, path: str | Path, tone_hz: float = 440.0, rate: int = 48000
) -> list[FrameTruth]:
    """Like write_clip, plus a mono AAC sine tone, muxed with PyAV (a source for audio-copy tests)."""
    import av

    truths = []
    with av.open(str(path), mode="w", format="mp4") as out:
        vs = out.add_stream("libx264", rate=spec.fps)
        vs.width, vs.height, vs.pix_fmt = spec.width + spec.width % 2, spec.height + spec.height % 2, "yuv420p"
        vs.time_base = spec.time_base
        aus = out.add_stream("aac", rate=rate, layout="mono")
        sample = 0
        for img, truth in render_scene(spec):
            even = np.pad(img, ((0, spec.height % 2), (0, spec.width % 2), (0, 0)), mode="edge")
            vf = av.VideoFrame.from_ndarray(even, format="rgb24")
            vf.pts, vf.time_base = spec.pts(truth.frame), spec.time_base
            for pk in vs.encode(vf):
                out.mux(pk)
            end = int(round((truth.frame + 1) / spec.fps * rate))
            tone = 0.3 * np.sin(2 * np.pi * tone_hz * np.arange(sample, end) / rate)
            af = av.AudioFrame.from_ndarray(tone.astype(np.float32)[None, :], format="fltp", layout="mono")
            af.sample_rate, af.pts, af.time_base = rate, sample, Fraction(1, rate)
            for pk in aus.encode(af):
                out.mux(pk)
            sample = end
            truths.append(truth)
        for s in (vs, aus):
            for pk in s.encode(None):
                out.mux(pk)
    return truths


# ---------------------------------------------------------------- bad inputs for tests

def write_text_file(path: str | Path) -> Path:
    """A small text file with a video extension (not a video)."""
    p = Path(path)
    p.write_text("this is a text file, not a video\n" * 20, encoding="ascii")
    return p


def write_png(path: str | Path, width: int = 64, height: int = 48) -> Path:
    """A small PNG still image (an image, not a video)."""
    from PIL import Image

    p = Path(path)
    img = np.zeros((height, width, 3), np.uint8)
    img[:, : width // 2] = (200, 40, 40)
    Image.fromarray(img).save(p, format="PNG")
    return p


def write_truncated(src: str | Path, dst: str | Path, fraction: float = 0.5) -> Path:
    """A copy of src cut after `fraction` of its bytes (a truncated download)."""
    data = Path(src).read_bytes()
    p = Path(dst)
    p.write_bytes(data[: int(len(data) * fraction)])
    return p


def write_zero_frame_video(path: str | Path, width: int = 64, height: int = 48) -> Path:
    """An AVI with a valid header and a video stream but no frames (MP4 drops empty tracks)."""
    import av

    p = Path(path)
    with av.open(str(p), mode="w", format="avi") as out:
        s = out.add_stream("mpeg4", rate=25)
        s.width, s.height, s.pix_fmt = width, height, "yuv420p"
        out.start_encoding()
    return p
