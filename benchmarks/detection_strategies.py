"""Candidate scale-aware detection strategies on real pedestrians: recall, false detections, model time.

What it measures: for each way of feeding frames to the pose model, the fraction of the reference
people found (overall and by person height in the frame), the false detections, the number of
model calls and input pixels per frame, and the model's milliseconds per frame with onnxruntime on
1 and 2 threads, all strategies side by side in one run on the same frames.

Scenes (vtest frames 0–399 only, read at run time; licence and the reference rule in
recall_common.py; reference people = float32 model at a 1280 long side, score ≥ 0.5):
- native: vtest as decoded, 768×576 (people 62–122 px).
- 720p: each frame area-scaled by 0.65 (people about 40–80 px) and pasted at the centre of a
  1280×720 canvas whose remainder is the empty scene (per-pixel temporal median of frames 0–399,
  scaled the same) continued by mirror reflection at its edges, so the surround is static street
  texture with no people; sensor noise (sigma 2 grey levels) over the whole canvas, then H.264
  (libx264, CRF 23, preset veryfast) through redact.media.video, decoded back: a wide static view with
  the activity in one part, as a fixed camera sees it.
- 1080p: the same at scale 0.6 (people about 37–73 px) in 1920×1080.
- dim30 / dim47: native frames multiplied by 0.3, and by the factor that brings their mean BT.601
  luma to 47 (scene "dim" runs both); dim30-noisy: ×0.3, then sensor noise (sigma 3) and H.264
  CRF 28, as a camera records low light; each with and without CLAHE (Zuiderveld 1994; cv2.createCLAHE on the Y channel,
  clip 2, 8×8 tiles, common practice) applied to the detector input only (the motion detector
  sees the dim frame).

Strategies (default settings of redact.vision.pose unless stated: score ≥ 0.25, NMS IoU 0.6,
containment 0.85; results of several model calls are mapped back to frame pixels and merged with
redact.vision.pose.nms with the same IoU and containment):
- full@L: the whole frame at a long side of L (640 is today's default).
- tiles@T ov O: overlapping square tiles covering the frame, each enlarged to T×T model pixels
  so that a person of the scene's minimum height (h_min, given per scene; an installation would
  state it) reaches the model at --target-height px; O = overlap as a fraction of the tile.
  "+full" adds the full frame at 640.
- motion: MOG2 background subtraction (Zivkovic 2004, 2006; cv2.createBackgroundSubtractorMOG2
  with OpenCV's defaults, history 500, varThreshold 16, shadows detected and dropped) on the
  frame area-reduced to 320 px wide; foreground opened 3×3 and dilated twice; connected
  components of at least --min-blob small-frame pixels; each blob grown by half the assumed
  person height (the blob height, at least h_min) on every side; plus the previous frame's
  detections grown the same way; overlapping crops merged; each crop enlarged so its person
  height reaches the model at --target-height px (input long side at most 1280). "+full" adds
  the full frame at 640 every frame (never worse than today's default). "T<n>" = aimed at n px;
  "w<n>" = background subtraction on a frame reduced to n px wide instead of 320 (720p, 1080p).

Matching: a reference person is found when a detection has IoU ≥ 0.5 with it (one detection
each, best score first). A detection matching no reference person is false; it is counted as
"weak" when it matches a box the reference pass found at score 0.1–0.5 (often a real, partly
hidden person), "part" when at least a quarter of it lies on a reference box (a part or a
duplicate of someone) and "bg" otherwise (background).

Frames: recall and false detections are scored on every --stride-th frame (8), tiles only on
every --tile-stride-th (16; 40 on 1080p, where one frame takes over a hundred tiles); the
motion strategies run on every frame (they need the sequence) and are scored on the same frames.
Costs: "calls" = model calls per frame, "kpx" = thousands of model input pixels per frame (a
noise-free measure of work).

Timing: model milliseconds per frame = the sum of onnxruntime run() times of all the frame's
model calls (pre- and post-processing excluded; the motion step is timed separately), measured
on the timing frames (every --timing-every-th but the first) for 1 and 2 threads, every strategy
on the same frame one after another, --timing-repeats rounds (3) in rotated order, the least
round kept (the one least disturbed by other work). Two noisy, shared cores: compare within the
run; ratios to full@640 (int8) are printed. --timing-only skips scoring on the other frames.

Usage: python benchmarks/detection_strategies.py [--quick] [--scenes native,720p,1080p,dim,dim30-noisy]
(about 10 minutes on two idle cores with all scenes, much longer on shared ones; --quick about 3).
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import recall_common as rc

from redact.media.video import VideoReader, VideoWriter
from redact.redaction.quality import luma
from redact.vision.models import DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL, get_model, open_session
from redact.vision.pose import STRIDE, PoseEstimator, PoseSettings, decode, input_size_for, nms

BANDS = (35, 45, 55, 65, 75, 90, 110, 130)
MAX_CROP_SIDE = 1280


@dataclass(frozen=True)
class Job:
    """One model call: a frame rectangle [x0, x1) × [y0, y1) given to the model at a long side."""

    x0: int
    y0: int
    x1: int
    y1: int
    long_side: int


def _ceil32(v: float) -> int:
    return max(STRIDE, int(math.ceil(v / STRIDE)) * STRIDE)


def run_jobs(image: np.ndarray, jobs: list[Job], session, model: str) -> tuple[np.ndarray, np.ndarray, float]:
    """Every job through the model; boxes [N,4] and scores [N] in frame pixels after merging, and
    the summed model (onnxruntime run) time in ms."""
    boxes, scores, ms = [], [], 0.0
    settings = None
    for j in jobs:
        settings = PoseSettings(model=model, input_long_side=j.long_side)
        est = PoseEstimator(session, settings)
        tensor, lb = est.preprocess(image[j.y0:j.y1, j.x0:j.x1])
        t = time.perf_counter()
        raw = est.infer(tensor)
        ms += (time.perf_counter() - t) * 1000
        p = decode(raw, lb, settings)
        boxes.append(p.boxes.astype(np.float64) + np.array([j.x0, j.y0, j.x0, j.y0], np.float64))
        scores.append(p.scores)
    if not jobs:
        return np.zeros((0, 4)), np.zeros(0, np.float32), 0.0
    b, s = np.concatenate(boxes), np.concatenate(scores)
    if len(jobs) > 1 and len(b):
        keep = nms(b, s, settings.nms_iou, settings.containment)
        b, s = b[keep], s[keep]
    return b, s, ms


class Strategy:
    name = "?"
    stateful = False
    model = DEFAULT_POSE_MODEL
    clahe = False

    def plan(self, index: int, image: np.ndarray) -> list[Job]:
        raise NotImplementedError

    def observe(self, boxes: np.ndarray) -> None:
        pass


class FullFrame(Strategy):
    def __init__(self, long_side: int, model: str = DEFAULT_POSE_MODEL, clahe: bool = False):
        self.long_side, self.model, self.clahe = long_side, model, clahe
        self.name = f"full@{long_side}"

    def plan(self, index, image):
        h, w = image.shape[:2]
        return [Job(0, 0, w, h, self.long_side)]


class Tiles(Strategy):
    def __init__(self, side: int, overlap: float, gain: float, with_full: bool = False):
        self.side, self.overlap, self.gain, self.with_full = side, overlap, gain, with_full
        self.name = f"tiles@{side} ov{overlap:.2f}" + ("+full" if with_full else "")
        self._grid: dict[tuple[int, int], list[Job]] = {}

    def plan(self, index, image):
        h, w = image.shape[:2]
        if (w, h) not in self._grid:
            src = min(int(round(self.side / self.gain)), w, h)
            step = src * (1 - self.overlap)
            nx = max(1, math.ceil((w - src) / step) + 1)
            ny = max(1, math.ceil((h - src) / step) + 1)
            xs = np.linspace(0, w - src, nx).round().astype(int)
            ys = np.linspace(0, h - src, ny).round().astype(int)
            jobs = [Job(int(x), int(y), int(x) + src, int(y) + src, self.side) for y in ys for x in xs]
            if self.with_full:
                jobs.append(Job(0, 0, w, h, 640))
            self._grid[(w, h)] = jobs
        return self._grid[(w, h)]


class Motion(Strategy):
    stateful = True

    def __init__(self, target: float, h_min: float, min_blob: int, with_full: bool = False,
                 use_tracks: bool = True, model: str = DEFAULT_POSE_MODEL, clahe: bool = False, width: int = 320):
        self.target, self.h_min, self.min_blob, self.width = target, h_min, min_blob, width
        self.with_full, self.use_tracks, self.model, self.clahe = with_full, use_tracks, model, clahe
        self.name = ("motion" + ("+tracks" if use_tracks else "") + ("+full" if with_full else "")
                     + (f" w{width}" if width != 320 else ""))
        self.mog = cv2.createBackgroundSubtractorMOG2()
        self.prev = np.zeros((0, 4))
        self.motion_ms = 0.0
        self.frames = 0
        self.kernel = np.ones((3, 3), np.uint8)

    def _crop(self, x0, y0, x1, y1, person_h, w, h):
        ph = max(person_h, self.h_min)
        m = 0.5 * ph
        g = float(np.clip(self.target / ph, 0.25, self.target / self.h_min))
        return [max(0.0, x0 - m), max(0.0, y0 - m), min(float(w), x1 + m), min(float(h), y1 + m), g]

    def plan(self, index, image):
        t = time.perf_counter()
        h, w = image.shape[:2]
        sw = min(self.width, w)
        sc = sw / w
        small = cv2.resize(image, (sw, max(1, round(h * sc))), interpolation=cv2.INTER_AREA)
        fg = self.mog.apply(small)
        crops = []
        if index > 0:
            mask = (fg > 200).astype(np.uint8)  # 255 foreground, 127 shadow, 0 background
            mask = cv2.dilate(cv2.morphologyEx(mask, cv2.MORPH_OPEN, self.kernel), self.kernel, iterations=2)
            n, _, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
            for x, y, bw, bh, area in stats[1:]:
                if area >= self.min_blob:
                    crops.append(self._crop(x / sc, y / sc, (x + bw) / sc, (y + bh) / sc, bh / sc, w, h))
        if self.use_tracks:
            for b in self.prev:
                crops.append(self._crop(*b, b[3] - b[1], w, h))
        crops = _merge_crops(crops)
        jobs = []
        for x0, y0, x1, y1, g in crops:
            x0, y0, x1, y1 = int(math.floor(x0)), int(math.floor(y0)), int(math.ceil(x1)), int(math.ceil(y1))
            if x1 - x0 < 4 or y1 - y0 < 4:
                continue
            long_side = min(_ceil32(max(x1 - x0, y1 - y0) * g), MAX_CROP_SIDE)
            jobs.append(Job(x0, y0, x1, y1, long_side))
        if self.with_full:
            jobs.append(Job(0, 0, w, h, 640))
        self.motion_ms += (time.perf_counter() - t) * 1000
        self.frames += 1
        return jobs

    def observe(self, boxes):
        self.prev = np.asarray(boxes, np.float64).reshape(-1, 4)


def _merge_crops(crops: list[list[float]]) -> list[list[float]]:
    """Union crops that overlap by at least a fifth of the smaller one (the larger gain is kept)."""
    crops = [list(c) for c in crops]
    merged = True
    while merged and len(crops) > 1:
        merged = False
        for i in range(len(crops)):
            for j in range(i + 1, len(crops)):
                a, b = crops[i], crops[j]
                iw = min(a[2], b[2]) - max(a[0], b[0])
                ih = min(a[3], b[3]) - max(a[1], b[1])
                if iw <= 0 or ih <= 0:
                    continue
                small = min((a[2] - a[0]) * (a[3] - a[1]), (b[2] - b[0]) * (b[3] - b[1]))
                if iw * ih >= 0.2 * small:
                    crops[i] = [min(a[0], b[0]), min(a[1], b[1]), max(a[2], b[2]), max(a[3], b[3]), max(a[4], b[4])]
                    del crops[j]
                    merged = True
                    break
            if merged:
                break
    return crops


@dataclass
class Tally:
    found: list = field(default_factory=list)   # (height, found)
    weak: int = 0
    part: int = 0
    bg: int = 0
    frames: int = 0
    calls: int = 0
    in_px: float = 0.0
    ms: dict = field(default_factory=lambda: {1: [], 2: []})


# ---------------------------------------------------------------- scenes

def plate_of(frames_iter) -> np.ndarray:
    stack = np.stack(list(frames_iter))
    return np.median(stack, axis=0).astype(np.uint8)


def embed_canvas(plate: np.ndarray, scale: float, size: tuple[int, int]):
    """(static canvas, (ox, oy), scaled scene size): the scaled empty scene mirrored out to size."""
    W, H = size
    h0, w0 = plate.shape[:2]
    sw, sh = int(round(w0 * scale)), int(round(h0 * scale))
    small = cv2.resize(plate, (sw, sh), interpolation=cv2.INTER_AREA)
    ox, oy = (W - sw) // 2, (H - sh) // 2
    canvas = cv2.copyMakeBorder(small, oy, H - sh - oy, ox, W - sw - ox, cv2.BORDER_REFLECT_101)
    return canvas, (ox, oy), (sw, sh)


def embedded_frames(native: dict[int, np.ndarray], plate: np.ndarray, scale: float, size, tmp: Path):
    """Encode the embedded scene once (noise, H.264 CRF 23) and yield (index, frame) decoded back."""
    canvas, (ox, oy), (sw, sh) = embed_canvas(plate, scale, size)
    path = tmp / f"embedded_{size[0]}x{size[1]}.mp4"
    rng = np.random.default_rng(7)
    with VideoWriter(path, size[0], size[1], Fraction(1, 10), Fraction(10), crf=23, threads=1) as wr:
        for i in range(rc.VTEST_FRAMES):
            img = canvas.copy()
            img[oy:oy + sh, ox:ox + sw] = cv2.resize(native[i], (sw, sh), interpolation=cv2.INTER_AREA)
            noisy = img.astype(np.float32) + rng.normal(0, 2.0, img.shape).astype(np.float32)
            wr.write(np.clip(np.rint(noisy), 0, 255).astype(np.uint8), i)
    with VideoReader(path, hash_file=False, threads=1) as r:
        for f in r.frames():
            yield f.index, np.array(f.image)
    path.unlink()


def noisy_dim_frames(native: dict[int, np.ndarray], factor: float, tmp: Path):
    """Low light as a camera records it: darkened, sensor noise (sigma 3 grey levels), H.264 CRF 28."""
    h, w = native[0].shape[:2]
    path = tmp / "dim.mp4"
    rng = np.random.default_rng(11)
    with VideoWriter(path, w, h, Fraction(1, 10), Fraction(10), crf=28, threads=1) as wr:
        for i in range(rc.VTEST_FRAMES):
            noise = rng.normal(0, 3.0, native[i].shape).astype(np.float32)
            x = native[i].astype(np.float32) * np.float32(factor) + noise
            wr.write(np.clip(np.rint(x), 0, 255).astype(np.uint8), i)
    with VideoReader(path, hash_file=False, threads=1) as r:
        for f in r.frames():
            yield f.index, np.array(f.image)


# ---------------------------------------------------------------- the run

def evaluate(scene: str, frames_iter, refs: dict[int, rc.Reference], strategies: list[Strategy],
             strides: dict[str, int], timing: set[int], sessions, transform=None, repeats: int = 3,
             timing_only: bool = False) -> dict[str, Tally]:
    tallies = {id(s): Tally() for s in strategies}
    t0 = time.perf_counter()
    for idx, image in frames_iter:
        if transform is not None:
            image = transform(image)
        enhanced = None
        timed = []
        for s in strategies:
            stride = strides.get(s.name, strides["default"])
            if not s.stateful and (idx % stride or (timing_only and idx not in timing)):
                continue
            det_img = image
            if s.clahe:
                if enhanced is None:
                    enhanced = rc.clahe_luma(image)
                det_img = enhanced
            jobs = s.plan(idx, image)
            b, sc, _ = run_jobs(det_img, jobs, sessions[(s.model, 2)], s.model)
            s.observe(b)
            if idx % stride or idx not in refs or (timing_only and idx not in timing):
                continue
            t = tallies[id(s)]
            if idx in timing:
                timed.append((s, det_img, jobs))
            fs = rc.score_frame(b, sc, refs[idx])
            t.found += list(zip(fs.ref_heights.tolist(), fs.found.tolist()))
            t.weak += fs.false_weak
            t.part += fs.false_part
            t.bg += fs.false_background
            t.frames += 1
            t.calls += len(jobs)
            for j in jobs:
                iw, ih = input_size_for(j.x1 - j.x0, j.y1 - j.y0, j.long_side)
                t.in_px += iw * ih
        # Timing: every strategy of this frame, both thread counts, `repeats` rounds, the order
        # rotated each round; the least of the rounds is kept (the least disturbed by other work).
        best: dict[tuple[int, int], float] = {}
        for r in range(repeats if timed else 0):
            order = timed[r % len(timed):] + timed[:r % len(timed)]
            for threads in (1, 2):
                for s, det_img, jobs in order:
                    ms = run_jobs(det_img, jobs, sessions[(s.model, threads)], s.model)[2]
                    key = (id(s), threads)
                    best[key] = min(best.get(key, math.inf), ms)
        for (sid, threads), ms in best.items():
            tallies[sid].ms[threads].append(ms)
    print(f"  [{scene}: {time.perf_counter() - t0:.0f} s]", flush=True)
    return {s_id: t for s_id, t in tallies.items()}


def report(scene: str, strategies: list[Strategy], tallies: dict, note: str) -> None:
    print(f"\n== {scene}: {note}")
    all_h = np.concatenate([np.array([h for h, _ in tallies[id(s)].found]) for s in strategies if tallies[id(s)].found])
    edges = [e for e in BANDS if e <= all_h.max()] + [10_000]
    edges = [max(0, min(edges[0], int(all_h.min())))] + edges if all_h.min() < edges[0] else edges
    bands = [(a, b) for a, b in zip(edges, edges[1:]) if ((all_h >= a) & (all_h < b)).any()]
    hdr = (f"{'strategy':<26} {'model':<5} {'cl':<2} {'frm':>4} {'recall':>6} " +
           " ".join(f"{f'{a}-{b}' if b < 10_000 else f'{a}+':>7}" for a, b in bands) +
           f" {'false/100f wk/pt/bg':>20} {'calls':>5} {'kpx':>6} {'ms 1t':>7} {'ms 2t':>7}"
           f" {'x640 1t':>7} {'x640 2t':>7}")
    print(hdr)
    base = {}
    for s in strategies:
        t = tallies[id(s)]
        if s.name == "full@640" and s.model == DEFAULT_POSE_MODEL and s.clahe is False:
            base = {k: np.mean(v) for k, v in t.ms.items() if v}
    for s in strategies:
        t = tallies[id(s)]
        if not t.frames:
            continue
        h = np.array([x for x, _ in t.found])
        f = np.array([y for _, y in t.found], bool)
        rec = " ".join(f"{f[(h >= a) & (h < b)].mean():>7.3f}" if ((h >= a) & (h < b)).any() else f"{'-':>7}"
                       for a, b in bands)
        per = 100.0 / t.frames
        ms1 = np.mean(t.ms[1]) if t.ms[1] else float("nan")
        ms2 = np.mean(t.ms[2]) if t.ms[2] else float("nan")
        mdl = "int8" if s.model == DEFAULT_POSE_MODEL else "fp32"
        print(f"{s.name:<26} {mdl:<5} {'y' if s.clahe else '-':<2} {t.frames:>4} {f.mean():>6.3f} {rec} "
              f"{f'{t.weak * per:.0f}/{t.part * per:.0f}/{t.bg * per:.0f}':>20} {t.calls / t.frames:>5.1f} "
              f"{t.in_px / t.frames / 1000:>6.0f} {ms1:>7.1f} {ms2:>7.1f} "
              f"{ms1 / base.get(1, float('nan')):>7.2f} {ms2 / base.get(2, float('nan')):>7.2f}")
    for s in strategies:
        if isinstance(s, Motion) and s.frames:
            print(f"  {s.name} ({'int8' if s.model == DEFAULT_POSE_MODEL else 'fp32'}"
                  f"{', CLAHE' if s.clahe else ''}): motion step {s.motion_ms / s.frames:.1f} ms/frame "
                  f"(MOG2 at {s.width} px wide or less, blobs, crops; on every frame)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scenes", default="native,720p,1080p,dim,dim30-noisy")
    ap.add_argument("--target-height", type=float, default=130.0,
                    help="person height at model input to aim crops and tiles at (px); take it from "
                         "benchmarks/recall_by_height.py (default 130: where both models reached 99 %% "
                         "recall on whole degraded vtest frames when this script was written)")
    ap.add_argument("--min-blob", type=int, default=6, help="smallest motion blob, pixels of the 320-wide frame")
    ap.add_argument("--stride", type=int, default=8, help="score every N-th frame (default 8)")
    ap.add_argument("--tile-stride", type=int, default=16, help="tiles: every N-th frame (native, 720p)")
    ap.add_argument("--tile-stride-1080", type=int, default=40, help="tiles on the 1080p scene: every N-th frame")
    ap.add_argument("--timing-every", type=int, default=80,
                    help="time 1 and 2 threads on every N-th frame but the first (a multiple of every stride)")
    ap.add_argument("--timing-repeats", type=int, default=3, help="timing rounds per timing frame; the least is kept")
    ap.add_argument("--timing-only", action="store_true",
                    help="score and time the timing frames only (the motion strategies still run on every frame)")
    ap.add_argument("--skip-tiles", action="store_true", help="leave out the tile strategies (the costliest)")
    ap.add_argument("--quick", action="store_true", help="stride 40, tile strides 80, timing every 160, fewer tiles")
    args = ap.parse_args()
    if not rc.VTEST.exists():
        print(rc.vtest_missing_message())
        print("nothing to measure: this benchmark needs the vtest clip")
        return
    if args.quick:
        args.stride, args.tile_stride, args.tile_stride_1080, args.timing_every = 40, 80, 80, 160
    for v in (args.stride, args.tile_stride, args.tile_stride_1080):
        if args.timing_every % v:
            ap.error("--timing-every must be a multiple of every stride")
    scenes = args.scenes.split(",")
    T = args.target_height
    t0 = time.perf_counter()
    native = rc.read_vtest(range(rc.VTEST_FRAMES))
    eval_frames = list(range(0, rc.VTEST_FRAMES, args.stride))
    timing = {f for f in eval_frames if f % args.timing_every == 0 and f > 0}
    ref_est = rc.reference_estimator(2)
    t = time.perf_counter()
    refs = {f: rc.reference_of(ref_est, native[f]) for f in (sorted(timing) if args.timing_only else eval_frames)}
    ref_ms2 = (time.perf_counter() - t) * 1000 / len(refs)
    del ref_est
    ref_est1 = rc.reference_estimator(1)
    t = time.perf_counter()
    for f in sorted(timing):
        ref_est1.estimate(native[f])
    ref_ms1 = (time.perf_counter() - t) * 1000 / len(timing)
    del ref_est1
    hs = np.concatenate([rc.heights(r.people) for r in refs.values()])
    pct = np.percentile(hs, [0, 5, 25, 50, 75, 95, 100])
    hist = np.histogram(hs, bins=[60, 70, 80, 90, 100, 110, 130])[0]
    print(f"reference: float32 at {rc.REF_LONG_SIDE} (score >= {rc.REF_SCORE}) on {len(refs)} frames (every "
          f"{args.timing_every if args.timing_only else args.stride}th of 0-399): {len(hs)} people "
          f"({len(hs) / len(refs):.2f}/frame), "
          f"{sum(len(r.weak) for r in refs.values())} weak boxes; height px min/p5/p25/median/p75/p95/max "
          + "/".join(f"{v:.0f}" for v in pct))
    print("  heights 60-70/70-80/80-90/90-100/100-110/110-130 px: " + "/".join(str(v) for v in hist))
    print(f"  reference pass (pre + model + post, float32, 768x576 -> 1280x960): {ref_ms2:.0f} ms/frame on 2 threads, "
          f"{ref_ms1:.0f} ms/frame on 1 thread")
    sessions = {(m, th): open_session(get_model(m, "pose"), th) for m in (DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL)
                for th in (1, 2)}
    plate = plate_of(native[i] for i in range(0, rc.VTEST_FRAMES, 2))
    h_min_native = 60.0
    strides = {"default": args.stride}

    def native_iter():
        return ((i, native[i]) for i in range(rc.VTEST_FRAMES))

    if "native" in scenes:
        g = T / h_min_native
        strategies: list[Strategy] = [FullFrame(640), FullFrame(960), FullFrame(1280)]
        tile_sides = (640, 320) if args.quick else (320, 416, 512, 640)
        strategies += [] if args.skip_tiles else [Tiles(s, 0.25, g) for s in tile_sides]
        if not args.quick and not args.skip_tiles:
            strategies += [Tiles(640, 0.15, g), Tiles(640, 0.25, g, with_full=True)]
        strategies += [Motion(T, h_min_native, args.min_blob, use_tracks=False), Motion(T, h_min_native, args.min_blob),
                       Motion(T, h_min_native, args.min_blob, with_full=True)]
        if not args.quick:
            low = Motion(0.9 * T, h_min_native, args.min_blob, with_full=True)
            low.name += f" T{0.9 * T:.0f}"
            strategies.append(low)
        strategies += [FullFrame(640, FLOAT_POSE_MODEL), FullFrame(960, FLOAT_POSE_MODEL),
                       Motion(T, h_min_native, args.min_blob, with_full=True, model=FLOAT_POSE_MODEL)]
        st = dict(strides, **{s.name: max(args.tile_stride, args.stride) for s in strategies if isinstance(s, Tiles)})
        tal = evaluate("native", native_iter(), refs, strategies, st, timing, sessions,
                           repeats=args.timing_repeats, timing_only=args.timing_only)
        report("native 768x576", strategies, tal,
               f"h_min {h_min_native:.0f} px, tile/crop gain {g:.2f}, target {T:.0f} px")

    with tempfile.TemporaryDirectory(prefix="redact-bench-") as tmpd:
        for scene, scale, size in (("720p", 0.65, (1280, 720)), ("1080p", 0.6, (1920, 1080))):
            if scene not in scenes:
                continue
            canvas, (ox, oy), (sw, sh) = embed_canvas(plate, scale, size)
            sa = sw / native[0].shape[1]
            srefs = {f: r.scaled(sa, ox, oy) for f, r in refs.items()}
            h_min = round(h_min_native * sa)
            g = T / h_min
            strategies = [FullFrame(640), FullFrame(960), FullFrame(1280)]
            tiles = [] if args.skip_tiles else (
                [Tiles(640, 0.25, g)] + ([] if args.quick or scene == "1080p" else [Tiles(416, 0.25, g)]))
            strategies += tiles
            strategies += [Motion(T, h_min, args.min_blob), Motion(T, h_min, args.min_blob, with_full=True),
                           Motion(T, h_min, args.min_blob, width=size[0] // 2)]
            ts = args.tile_stride if scene == "720p" else args.tile_stride_1080
            st = dict(strides, **{s.name: max(ts, args.stride) for s in tiles})
            tal = evaluate(scene, embedded_frames(native, plate, sa, size, Path(tmpd)), srefs, strategies, st,
                           timing, sessions,
                           repeats=args.timing_repeats, timing_only=args.timing_only)
            report(f"{scene} {size[0]}x{size[1]} (vtest x{sa:.2f} at ({ox},{oy}))", strategies, tal,
                   f"h_min {h_min} px, gain {g:.2f}, tiles every {max(ts, args.stride)}th frame")

    dims = [d for d in ("dim30", "dim47", "dim30-noisy") if d in scenes or ("dim" in scenes and d != "dim30-noisy")]
    if dims:
        mean_luma = float(np.mean([luma(native[i]).mean() for i in range(0, rc.VTEST_FRAMES, 10)]))
        factors = {"dim30": 0.3, "dim47": 47.0 / mean_luma, "dim30-noisy": 0.3}
        for label in dims:
            factor = factors[label]
            strategies = []
            for cl in (False, True):
                strategies += [FullFrame(640, clahe=cl), FullFrame(960, clahe=cl),
                               Motion(T, h_min_native, args.min_blob, with_full=True, clahe=cl)]
            if label == "dim30-noisy":
                with tempfile.TemporaryDirectory(prefix="redact-bench-") as tmpd:
                    frames = noisy_dim_frames(native, factor, Path(tmpd))
                    tal = evaluate(label, frames, refs, strategies, strides, timing, sessions,
                                   repeats=args.timing_repeats, timing_only=args.timing_only)
                note = "then sensor noise sigma 3 and H.264 CRF 28; CLAHE column: applied to the detector input only"
            else:
                tal = evaluate(label, native_iter(), refs, strategies, strides, timing, sessions,
                               repeats=args.timing_repeats, timing_only=args.timing_only,
                               transform=lambda im, k=factor: rc.darken(im, k))
                note = "CLAHE column: applied to the detector input only"
            report(f"{label} native x{factor:.3f} (mean luma {mean_luma * factor:.0f}, from {mean_luma:.0f})",
                   strategies, tal, note)
    print(f"\ntotal {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
