"""Recall of each bundled pose model against person height *at model input*, on degraded real people.

What it measures: the fraction of known people the int8 (default) and float32 models find, binned
by how tall the person is in the model's input tensor, and from that the smallest height at
which recall reaches 95 % and 99 %. This is what scale-aware detection must guarantee: a person
of the smallest height we promise to catch must reach the model at least that tall.

How:
- vtest (OpenCV's pedestrian sample, frames 0–399 only, read at run time; see recall_common.py
  for its licence and for the reference rule): every `--step`-th frame; reference people = the
  float32 model at a 1280 long side, score ≥ 0.5, on the native frame. Each whole frame is
  rescaled by 0.2–3 (area interpolation down, to people of about 12–60 px; bilinear up, to
  bigger and blurrier people), then degraded — Gaussian blur, sensor noise and H.264 (libx264
  via PyAV, CRF 23/29/35) over a run of three consecutive frames, the last kept — and given to
  the model at exactly its own size (letterbox scale 1, grey padding only), so the reference box
  scaled by the same factor is the person's height at model input.
- context: the same vtest people at ×1.25 (clean) given to the model as the whole frame, as a
  square window of 256–640 px centred on each person, and as the 640 window on a larger grey
  canvas: recall at a given height depends on what else fills the input.
- scikit-image stills, cut out by redact.media.synthetic and pasted at known heights (15–360 px) on a
  640×480 frame over a generated hall and over the empty vtest scene (temporal median), degraded
  the same way: `astronaut()` (public domain, NASA) and `camera()` (CC0 1.0, Lav Varshney), both
  loaded from the installed scikit-image. Their truth is the pasted rectangle (upper bodies).
- Degradation levels (clean, mild, moderate, heavy: recall_common.LEVELS) are cycled over the
  frames, so each scale sees every level; `--all-levels` runs every level on every frame (4×).
- A person is found when a detection (default settings: score ≥ 0.25, NMS IoU 0.6, containment
  0.85) has IoU ≥ 0.5 with its box, one detection per person, best score first.
- Both models see exactly the same inputs in the same run; their summed model time is printed as
  a ratio (2 noisy cores: compare within the run only).

Usage: python benchmarks/recall_by_height.py [--step 10] [--all-levels] [--threads 2]
(about 5–8 minutes on two shared cores with the defaults; --step 40 about 2).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import cv2
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import recall_common as rc

from redact.media.synthetic import Actor, SceneSpec, render_background, render_frame
from redact.vision.models import DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL, get_model, open_session
from redact.vision.pose import PAD_VALUE, STRIDE, PoseEstimator, PoseSettings, decode

EDGES = (15, 20, 25, 30, 35, 40, 45, 50, 60, 70, 80, 90, 100, 115, 130, 145, 160, 200, 250, 300, 400)
SCALES = (0.2, 0.25, 0.3, 0.35, 0.4, 0.45, 0.5, 0.6, 0.7, 0.85, 1.0, 1.25, 1.5, 1.75, 2.0, 2.5, 3.0)
CONTEXT_SCALE = 1.25
CONTEXT_WINDOWS = (256, 320, 416, 512, 640)
STILL_HEIGHTS = (15, 18, 22, 26, 30, 34, 38, 42, 47, 53, 60, 70, 80, 95, 110, 120, 130, 150, 175, 200, 250, 300, 360)
CANVAS = (640, 480)
MODELS = (DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL)


class Runner:
    """Both models on the same input; collects (source, level, height, found) per model and time."""

    def __init__(self, threads: int):
        self.sessions = {m: open_session(get_model(m, "pose"), threads) for m in MODELS}
        self.rows: dict[str, list[tuple[str, str, float, bool]]] = {m: [] for m in MODELS}
        self.ms = {m: 0.0 for m in MODELS}

    def run(self, image: np.ndarray, people: np.ndarray, others: np.ndarray, source: str, level: str) -> None:
        h, w = image.shape[:2]
        long_side = max(w, h)
        if long_side % STRIDE:
            raise ValueError(f"image long side {long_side} is not a multiple of {STRIDE}")
        ref = rc.Reference(people, others)
        for m in MODELS:
            est = PoseEstimator(self.sessions[m], PoseSettings(model=m, input_long_side=long_side))
            tensor, lb = est.preprocess(image)
            assert abs(lb.scale - 1.0) < 1e-9, lb  # height in the image == height at model input
            t = time.perf_counter()
            raw = est.infer(tensor)
            self.ms[m] += (time.perf_counter() - t) * 1000
            p = decode(raw, lb, est.settings)
            fs = rc.score_frame(p.boxes.astype(np.float64), p.scores, ref)
            self.rows[m] += [(source, level, float(hh), bool(f)) for hh, f in zip(fs.ref_heights, fs.found)]


def _level(k: int, si: int, all_levels: bool):
    return rc.LEVELS if all_levels else (rc.LEVELS[(k + si) % len(rc.LEVELS)],)


def vtest_part(runner: Runner, step: int, all_levels: bool, threads: int) -> np.ndarray | None:
    if not rc.VTEST.exists():
        print(rc.vtest_missing_message())
        return None
    sample = list(range(step - 1, rc.VTEST_FRAMES, step))
    frames = rc.read_vtest({i for f in sample for i in (f - 2, f - 1, f) if i >= 0})
    ref_est = rc.reference_estimator(threads)
    t = time.perf_counter()
    refs = {f: rc.reference_of(ref_est, frames[f]) for f in sample}
    ref_ms = (time.perf_counter() - t) * 1000 / len(sample)
    hs = np.concatenate([rc.heights(r.people) for r in refs.values()])
    print(f"vtest: {len(sample)} frames (every {step}th of 0-{rc.VTEST_FRAMES - 1}), {len(hs)} reference people "
          f"(float32 at {rc.REF_LONG_SIDE}, score >= {rc.REF_SCORE}), height px min/median/max "
          f"{hs.min():.0f}/{np.median(hs):.0f}/{hs.max():.0f}; reference {ref_ms:.0f} ms/frame")
    H, W = frames[sample[0]].shape[:2]
    for si, s in enumerate(SCALES):
        w2 = int(round(W * s / STRIDE)) * STRIDE
        sa = w2 / W
        h2 = int(round(H * sa))
        interp = cv2.INTER_AREA if sa < 1 else cv2.INTER_LINEAR
        for k, f in enumerate(sample):
            run = [cv2.resize(frames[i], (w2, h2), interpolation=interp) for i in (f - 2, f - 1, f) if i >= 0]
            for lev in _level(k, si, all_levels):
                img = rc.degrade(run, lev, seed=f * 100 + si)[-1]
                r = refs[f].scaled(sa)
                runner.run(img, r.people, r.weak, "vtest", lev.name)
    context_part(runner, frames, refs, sample[1::2])
    return np.median(np.stack([frames[f] for f in sample]), axis=0).astype(np.uint8)


def context_part(runner: Runner, frames: dict, refs: dict, sample: list[int]) -> None:
    """Same people at the same height at model input (vtest ×1.25, clean), different input canvases:
    the whole frame; a square window of each size centred on the person, alone; and the 640 window
    placed at the top left of a 1280×960 canvas of the library's grey padding value."""
    H, W = frames[sample[0]].shape[:2]
    w2, h2 = int(round(W * CONTEXT_SCALE)), int(round(H * CONTEXT_SCALE))
    for f in sample:
        up = cv2.resize(frames[f], (w2, h2), interpolation=cv2.INTER_LINEAR)
        r = refs[f].scaled(CONTEXT_SCALE)
        pad_h = (-h2) % STRIDE
        runner.run(np.pad(up, ((0, pad_h), (0, 0), (0, 0)), constant_values=PAD_VALUE), r.people, r.weak,
                   "context/full frame", "clean")
        for win in CONTEXT_WINDOWS + (-640,):
            side = abs(win)
            for j, b in enumerate(r.people):
                cx, cy = (b[0] + b[2]) / 2, (b[1] + b[3]) / 2
                x0 = int(np.clip(round(cx - side / 2), 0, w2 - side))
                y0 = int(np.clip(round(cy - side / 2), 0, h2 - side))
                if b[0] < x0 or b[1] < y0 or b[2] > x0 + side or b[3] > y0 + side:
                    continue
                crop = up[y0:y0 + side, x0:x0 + side]
                label = f"context/window {side}"
                if win < 0:
                    crop = np.pad(crop, ((0, 960 - side), (0, 1280 - side), (0, 0)), constant_values=PAD_VALUE)
                    label = f"context/window {side} on 1280x960 grey"
                off = np.array([x0, y0, x0, y0], np.float64)
                others = np.concatenate([np.delete(r.people, j, axis=0), r.weak]) - off
                runner.run(crop, r.people[j:j + 1] - off, others, label, "clean")


def context_table(rows) -> None:
    labels = sorted({src for m in MODELS for (src, _, _, _) in rows[m] if src.startswith("context/")},
                    key=lambda x: (len(x), x))
    print(f"\ncontext: vtest x{CONTEXT_SCALE} (people about 78-150 px at model input), clean; the same people "
          f"in different input canvases")
    bands = ((0, 100), (100, 120), (120, 1000))
    print(f"{'canvas':<38}" + "".join(f" | {m:>27}" for m in MODELS))
    print(f"{'':<38}" + "".join(" | " + " ".join(f"{f'{a}-{b}' if b < 1000 else f'{a}+':>6}" for a, b in bands)
                                  + f" {'all':>6}" for _ in MODELS))
    for lab in labels:
        line = f"{lab[8:]:<38}"
        for m in MODELS:
            sel = [(h, f) for (src, _, h, f) in rows[m] if src == lab]
            h = np.array([x for x, _ in sel])
            f = np.array([y for _, y in sel], bool)
            line += " | " + " ".join(f"{f[(h >= a) & (h < b)].mean():>6.2f}" if ((h >= a) & (h < b)).any()
                                     else f"{'-':>6}" for a, b in bands) + f" {f.mean():>6.2f}"
        print(line + f"   n={len(sel)}")


def stills_part(runner: Runner, plate: np.ndarray | None, all_levels: bool, per_height: int) -> None:
    W, H = CANVAS
    backgrounds = {"hall": render_background(SceneSpec(W, H, 10, 1.0, (), background="hall", seed=3))}
    if plate is not None:
        backgrounds["vtest-plate"] = cv2.resize(plate, (W, H), interpolation=cv2.INTER_AREA)
    rng = np.random.default_rng(12)
    for bi, (bname, bg) in enumerate(backgrounds.items()):
        for hi, hp in enumerate(STILL_HEIGHTS):
            cw, ch = int(hp * 0.85) + 12, hp + 12
            ncol, nrow = max(1, W // cw), max(1, H // ch)
            per_frame = min(ncol * nrow, 12)
            nframes = max(1, -(-per_height // per_frame))
            for k in range(nframes):
                cells = rng.permutation(ncol * nrow)[:per_frame]
                actors = []
                for a, c in enumerate(cells):
                    cx = (c % ncol + 0.5) * (W / ncol) + rng.uniform(-0.05, 0.05) * cw
                    cy = (c // ncol + 0.5) * (H / nrow) + rng.uniform(-0.05, 0.05) * ch
                    dx = 0.03 * hp * (1 if a % 2 else -1)
                    still = ("astronaut", "camera")[(a + k) % 2]
                    path = ((0.0, cx - 2 * dx, cy, hp), (0.2, cx, cy, hp))
                    actors.append(Actor(still, path, mirror=bool((a + k + hi) % 3 == 0)))
                spec = SceneSpec(W, H, 10, 0.3, tuple(actors), seed=k)
                run, truth = [], None
                for i in range(3):
                    img, truth = render_frame(spec, i, bg)
                    run.append(img)
                for lev in _level(k + bi, hi, all_levels):
                    img = rc.degrade(run, lev, seed=1000 * bi + 10 * hi + k)[-1]
                    rects = truth.person_rects[truth.visible].astype(np.float64)
                    runner.run(img, rects, np.zeros((0, 4)), f"stills/{bname}", lev.name)


def table(rows, label: str) -> dict[str, tuple[float | None, float | None]]:
    """Print recall per height bucket for each model; return the 95 % / 99 % heights per model."""
    print(f"\n{label}: recall by person height at model input (IoU >= {rc.MATCH_IOU})")
    head = f"{'height px':>11}" + "".join(f" | {m:>27}" for m in MODELS)
    print(head + "\n" + f"{'':>11}" + "".join(f" | {'n':>5} {'recall':>7} {'95% low':>7} {'miss':>5}" for _ in MODELS))
    per = {m: [] for m in MODELS}
    for lo, hi in zip(EDGES, EDGES[1:]):
        line = f"{lo:>4}-{hi:<6}"
        for m in MODELS:
            sel = [f for (_, _, h, f) in rows[m] if lo <= h < hi]
            n, k = len(sel), int(sum(sel))
            per[m].append((lo, n, k))
            line += (f" | {n:>5} {k / n:>7.3f} {rc.wilson_low(k, n):>7.3f} {n - k:>5}" if n
                     else f" | {'-':>5} {'':>7} {'':>7} {'':>5}")
        print(line)
    out = {}
    for m in MODELS:
        out[m] = tuple(_threshold(per[m], q) for q in (0.95, 0.99))
        tail = tuple(_tail_threshold(per[m], q) for q in (0.95, 0.99))
        print(f"{m}: recall >= 95 % from {_fmt(out[m][0])}, >= 99 % from {_fmt(out[m][1])} (every bucket "
              f"from there up, n >= 20); all people at least h tall: >= 95 % from {_fmt(tail[0])}, "
              f">= 99 % from {_fmt(tail[1])} (tails of >= 100 people)")
    return out


def _tail_threshold(buckets, q: float, min_n: int = 100):
    """Lowest edge h such that, for h and every higher edge h' with at least min_n people at least
    h' tall, those people are found with recall >= q (one miss in a small top bucket does not decide)."""
    for i in range(len(buckets)):
        ok = True
        for j in range(i, len(buckets)):
            n = sum(b[1] for b in buckets[j:])
            k = sum(b[2] for b in buckets[j:])
            if n >= min_n and k / n < q:
                ok = False
                break
        if ok and sum(b[1] for b in buckets[i:]) >= min_n:
            return buckets[i][0]
    return None


def _threshold(buckets, q: float, min_n: int = 20):
    ok = [(lo, n == 0 or n < min_n or k / n >= q) for lo, n, k in buckets]
    valid = [lo for lo, n, k in buckets if n >= min_n]
    if not valid:
        return None
    for i, (lo, _) in enumerate(ok):
        if all(g for _, g in ok[i:]) and lo <= max(valid):
            return lo
    return None


def _fmt(v) -> str:
    return "(not reached)" if v is None else f"{v} px"


def level_table(rows, label: str) -> None:
    bands = ((0, 30), (30, 45), (45, 60), (60, 80), (80, 130), (130, 1000))
    print(f"\n{label}: recall by degradation level and height band")
    print(f"{'model':<18} {'level':<9}" + "".join(f" {f'{a}-{b}':>11}" for a, b in bands))
    for m in MODELS:
        for lev in rc.LEVELS:
            line = f"{m:<18} {lev.name:<9}"
            for a, b in bands:
                sel = [f for (_, level, h, f) in rows[m] if level == lev.name and a <= h < b]
                line += f" {np.mean(sel):>5.3f}/{len(sel):<5}" if sel else f" {'-':>11}"
            print(line)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--step", type=int, default=10, help="every N-th vtest frame of 0-399 (default 10)")
    ap.add_argument("--all-levels", action="store_true", help="every degradation level on every frame (4x time)")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--stills-per-height", type=int, default=24, help="pasted people per height per background")
    args = ap.parse_args()
    t0 = time.perf_counter()
    runner = Runner(args.threads)
    plate = vtest_part(runner, args.step, args.all_levels, args.threads)
    vt = {m: [r for r in rows if r[0] == "vtest"] for m, rows in runner.rows.items()}
    stills_part(runner, plate, args.all_levels, args.stills_per_height)
    st = {m: [r for r in runner.rows[m] if r[0].startswith("stills")] for m in MODELS}
    if plate is not None:
        table(vt, "vtest rescaled (real pedestrians)")
        level_table(vt, "vtest rescaled")
    table(st, "scikit-image stills pasted (astronaut public domain, camera CC0)")
    level_table(st, "stills")
    if plate is not None:
        context_table(runner.rows)
        table({m: [r for r in rows if not r[0].startswith("context")] for m, rows in runner.rows.items()},
              "all sources pooled (vtest and stills)")
    a, b = runner.ms[DEFAULT_POSE_MODEL], runner.ms[FLOAT_POSE_MODEL]
    print(f"\nmodel time over the same inputs, {args.threads} threads: {DEFAULT_POSE_MODEL} {a / 1000:.1f} s, "
          f"{FLOAT_POSE_MODEL} {b / 1000:.1f} s, ratio int8/float32 {a / b:.2f}")
    print(f"total {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
