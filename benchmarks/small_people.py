"""Small people at three resolutions: what the default search costs and what it buys, side by side.

For a generated clip of several walkers 40–80 px tall at 720p (the same scene scaled to 576p and
1080p), blurred, noised and H.264-compressed like CCTV (scikit-image stills: astronaut() public
domain, camera() CC0), this prints in one run, per resolution:
  (a)  end-to-end frames/s of process_video with the default settings (whole frame every 8th
       frame, windows around tracks and moving blobs, sweep, motion net);
  (a0) the same with the search of earlier releases (whole frame on every frame at the model's
       640 long side, no windows, no motion net): the old defaults;
  (b)  frames/s of the pose model alone on the whole frame at the default input size, frames
       inferred as the pipeline infers them (the compute the old defaults spend on the model);
and, for (a) and (a0), the share of person-frames whose exact pasted rectangle is at least 95 %
inside an obscured region (the run's per-frame records against the clip's construction).
Then the ratios a/a0 and a/b.

This machine has 2 noisy cores shared with other work: compare numbers within one run only.
Usage: python benchmarks/small_people.py [--seconds 12] [--sizes 1024x576 1280x720 1920x1080]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

import numpy as np

from redact.media import synthetic as syn
from redact.media.stages import map_ahead
from redact.media.video import VideoReader
from redact.pipeline import ProcessSettings, inference_workers, process_video
from redact.provenance.signing import Signer
from redact.vision.pose import PoseEstimator


def scene(width: int, height: int, seconds: float) -> syn.SceneSpec:
    """Five walkers 40–80 px tall at 720p (scaled with the frame), crossing back and forth."""
    s = height / 720.0
    actors = []
    for k, (hp, y, speed) in enumerate(((40, 0.38, 0.9), (50, 0.47, 0.7), (60, 0.56, 1.1), (70, 0.66, 0.6),
                                        (80, 0.78, 1.0))):
        pts, t, x, direction = [], 0.0, (0.1 + 0.18 * k) * width, 1 if k % 2 == 0 else -1
        while t <= seconds + 1e-9:
            pts.append((t, x, y * height, hp * s))
            t += 1.0
            x += direction * speed * 0.08 * width
            if not 0.04 * width < x < 0.96 * width:
                direction, x = -direction, min(max(x, 0.04 * width), 0.96 * width)
        actors.append(syn.Actor(("astronaut", "camera")[k % 2], tuple(pts), mirror=k % 2 == 1))
    return syn.SceneSpec(width, height, Fraction(25), seconds, tuple(actors), background="hall",
                         blur=1.0 * s, noise=3.0, seed=5)


def old_defaults(s: ProcessSettings) -> ProcessSettings:
    """The search before windows and the motion net: the whole frame on every frame."""
    search = replace(s.search, full_every=1, windows=replace(s.search.windows, enabled=False))
    scene = replace(s.scene, motion=replace(s.scene.motion, enabled=False))
    return replace(s, search=search, scene=scene)


def run(clip: Path, truths, settings: ProcessSettings, out: Path) -> tuple[float, float]:
    records = []
    t = time.perf_counter()
    result = process_video(clip, out, Signer.from_seed(bytes(32)), settings, records=records.append)
    fps = result.frames / (time.perf_counter() - t)
    hit = total = 0
    for rec, truth in zip(records, truths):
        m = rec.mask()
        for a in np.flatnonzero(truth.visible):
            x0, y0, x1, y1 = truth.person_rects[a]
            total += 1
            hit += m[y0:y1, x0:x1].mean() >= 0.95
    return fps, hit / max(1, total)


def model_alone(clip: Path, settings: ProcessSettings, sample: int = 100) -> float:
    images = []
    with VideoReader(clip, hash_file=False) as r:
        for f in r.frames():
            images.append(f.image)
            if len(images) >= sample:
                break
    est = PoseEstimator.default(settings.pose, settings.model_threads)
    est.estimate(images[0])
    t = time.perf_counter()
    for _ in map_ahead(est.estimate, images, inference_workers(settings, est)):
        pass
    return len(images) / (time.perf_counter() - t)


SIZES = ("1024x576", "1280x720", "1920x1080")


def compare(sizes=SIZES, seconds: float = 12.0) -> None:
    """Print the table of the module doc for each size "WxH"."""
    new = ProcessSettings()
    old = old_defaults(new)
    print(f"small people, {seconds:g} s at 25 fps, frames/s and share of person-frames hidden:")
    print(f"{'size':>10} {'(a) new':>9} {'(a0) old':>9} {'(b) model':>10} {'a/a0':>6} {'a/b':>6}"
          f" {'hidden new':>11} {'hidden old':>11}")
    with tempfile.TemporaryDirectory() as d:
        for size in sizes:
            w, h = (int(v) for v in size.split("x"))
            clip = Path(d) / f"small-{size}.mp4"
            truths = syn.write_clip(scene(w, h, seconds), clip, crf=28)
            a, cov_a = run(clip, truths, new, Path(d) / f"new-{size}")
            a0, cov_a0 = run(clip, truths, old, Path(d) / f"old-{size}")
            b = model_alone(clip, new)
            print(f"{size:>10} {a:9.1f} {a0:9.1f} {b:10.1f} {a / a0:6.2f} {a / b:6.2f} {cov_a:11.3f} {cov_a0:11.3f}",
                  flush=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seconds", type=float, default=12.0)
    ap.add_argument("--sizes", nargs="+", default=list(SIZES))
    args = ap.parse_args()
    compare(args.sizes, args.seconds)


if __name__ == "__main__":
    main()
