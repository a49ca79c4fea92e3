"""Milliseconds per frame of the pose engine: each bundled pose model (float32 and int8), each
input size, 1 and 2 threads, stages separately.

Prints one table measured side by side in one run (this machine has 2 noisy cores: compare rows
with each other, not with another run). Usage: python benchmarks/pose_speed.py [--repeats N]
"""

from __future__ import annotations

import argparse
import statistics
import time
from functools import partial

import numpy as np

from redact.vision.models import list_models, open_session
from redact.vision.pose import PoseEstimator, PoseSettings, decode

# (label, source width, source height, long side): 16:9 video at three sizes, and a square input.
CASES = [("720p @ 640x384", 1280, 720, 640), ("720p @ 480x288", 1280, 720, 480),
         ("720p @ 320x192", 1280, 720, 320), ("square @ 640x640", 640, 640, 640),
         ("720p @ 960x544 (audit)", 1280, 720, 960)]


def _median_ms(fn, repeats: int) -> float:
    fn()  # warm-up
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append((time.perf_counter() - t) * 1000)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=15)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    print(f"median of {args.repeats} runs, ms per frame")
    print(f"{'model':<18} {'case':<24} {'threads':>7} {'pre':>7} {'model':>8} {'post':>7} {'total':>8}")
    for entry in [m for m in list_models() if m.task == "pose"]:
        for threads in (1, 2):
            session = open_session(entry, threads=threads)
            for label, w, h, long_side in CASES:
                est = PoseEstimator(session, PoseSettings(input_long_side=long_side, score_threshold=0.01))
                image = rng.integers(0, 255, (h, w, 3), dtype=np.uint8)
                tensor, lb = est.preprocess(image)
                raw = est.infer(tensor)
                pre = _median_ms(partial(est.preprocess, image), args.repeats)
                model = _median_ms(partial(est.infer, tensor), args.repeats)
                post = _median_ms(partial(decode, raw, lb, est.settings), args.repeats)
                print(f"{entry.id:<18} {label:<24} {threads:>7} {pre:>7.1f} {model:>8.1f} {post:>7.1f} "
                      f"{pre + model + post:>8.1f}")

if __name__ == "__main__":
    main()
