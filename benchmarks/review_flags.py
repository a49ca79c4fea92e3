"""How far a reviewer can trust the review flags: each flag's precision and recall on clips with known misses.

Truth comes from the construction of each clip (redact.media.synthetic knows the rectangle of every
pasted person in every frame; the people are scikit-image's astronaut(), public domain, NASA, and
camera(), CC0 1.0, Lav Varshney), not from the code under test. A frame *needs review* when

- a person in the picture (in full or in part) is not found by the model in it (no region of a
  person observed in that frame overlaps their rectangle with an IoU of 0.3 or more: the detector
  was made to miss them, they were just entering, or the model simply missed them) and is not
  hidden behind people who were (less than 80 % of their rectangle lies in those regions), or
- it lies in a dim stretch (the scene is darkened to 30 %; a reviewer must look at such footage
  whatever the model found).

Scenes (640×360, 25 fps, 10 s, people 110–150 px tall, sensor noise and mild blur, H.264 CRF 23):
- quiet: three walkers crossing, nothing scripted (every flag here is a false alarm unless the
  model really missed someone);
- misses: the same, with the detector made to miss one walker for 1.0 s and another for 0.6 s
  (detections lying mostly inside the walker's rectangle are dropped);
- entries: three walkers entering from the sides at 0.5 s, 3 s and 6 s;
- dim: the quiet walkers with the whole picture dimmed to 30 % from 3 s to 6 s.

Printed per scene: the share of frames inside review ranges (what a reviewer is sent to), the
share of missed and of dim frames inside them, the share of missed *stretches* (runs of
consecutive missed frames) that a range touches, and the share of frames far from any need
(more than `merge_gap` frames away) that are in ranges anyway (false alarms). Then per flag
(every flagged frame counts for each reason it carries): frames flagged and precision (share of
them within `merge_gap` frames of a frame that needs review).

In the four scenes the detector is the bundled default model on the whole frame every frame
through a wrapper (so the scripted misses are exact); the fifth, `demo`, is the demo clip
(demo_clips/ticket_hall.mp4, its truth rendered again from demo_clips/make_demo.py) through the
default estimator and search. Motion net, tracker and review rules are the defaults.
Usage: python benchmarks/review_flags.py [--seconds 10]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from collections import Counter
from fractions import Fraction
from pathlib import Path

import numpy as np

from redact.formats.quality_jsonl import read_quality
from redact.media import synthetic as syn
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.vision.boxes import box_areas, intersections, iou_matrix
from redact.vision.pose import PoseEstimator
from redact.vision.records import Poses

FPS = 25
W, H = 640, 360
DEMO = Path(__file__).resolve().parent.parent / "demo_clips" / "ticket_hall.mp4"


class ScriptedMisses:
    """The default estimator, made to miss chosen actors on chosen frames (one call per frame)."""

    def __init__(self, truths: list[syn.FrameTruth], misses: dict[int, set[int]]):
        self.inner = PoseEstimator.default()
        self.truths, self.misses, self.calls = truths, misses, 0

    def estimate(self, image) -> Poses:
        i = self.calls
        self.calls += 1
        poses = self.inner.estimate(image)
        gone = self.misses.get(i, set())
        if not gone or not len(poses):
            return poses
        rects = self.truths[i].person_rects[sorted(gone)].astype(np.float64)
        boxes = poses.boxes.astype(np.float64)
        inside = intersections(boxes, rects) / np.maximum(box_areas(boxes), 1.0)[:, None]
        keep = ~(inside > 0.5).any(axis=1)  # detections lying mostly on the scripted person
        return poses.select(np.flatnonzero(keep))


def _walker(k: int, t0: float, t1: float, height: float, leftwards: bool) -> syn.Actor:
    y = H * (0.5 + 0.13 * k)
    a, b = (-0.05 * W, 1.05 * W) if not leftwards else (1.05 * W, -0.05 * W)
    return syn.Actor(("astronaut", "camera")[k % 2], ((t0, a, y, height), (t1, b, y, height)), mirror=leftwards)


def scenes(seconds: float) -> dict[str, tuple[syn.SceneSpec, dict[int, set[int]]]]:
    """name -> (scene, scripted misses {frame: actor indices})."""
    walkers = tuple(_walker(k, -1.0 - k, seconds + 1.0 + k, 110 + 20 * k, k % 2 == 1) for k in range(3))
    base = dict(background="hall", noise=2.0, blur=0.8)
    quiet = syn.SceneSpec(W, H, Fraction(FPS), seconds, walkers, **base)
    misses: dict[int, set[int]] = {}
    for actor, (t0, t1) in ((0, (0.2 * seconds, 0.3 * seconds)), (1, (0.5 * seconds, 0.56 * seconds))):
        for f in range(int(t0 * FPS), int(t1 * FPS)):
            misses.setdefault(f, set()).add(actor)
    entering = tuple(_walker(k, t, t + 4.0, 110 + 20 * k, k % 2 == 1)
                     for k, t in enumerate((0.05 * seconds, 0.3 * seconds, 0.6 * seconds)))
    dim = syn.SceneSpec(W, H, Fraction(FPS), seconds, walkers, dim_region=(0, 0, W, H), dim_factor=0.3,
                        dim_seconds=(0.3 * seconds, 0.6 * seconds), **base)
    return {
        "quiet": (quiet, {}),
        "misses": (quiet, misses),
        "entries": (syn.SceneSpec(W, H, Fraction(FPS), seconds, entering, **base), {}),
        "dim": (dim, {}),
    }


def _observed(record) -> tuple[np.ndarray, np.ndarray]:
    """Regions of people the model observed in this frame: their bounding rectangles [K, 4] and
    the union of their pixels, bool [H, W]."""
    regions = [r.geometry for r in record.regions if not r.geometry.empty
               and any(why.kind == "person" and why.state == "observed" for why in r.reasons)]
    mask = np.zeros((record.height, record.width), bool)
    for g in regions:
        x0, y0, x1, y1 = g.rect
        mask[y0:y1, x0:x1] |= g.crop_mask()
    return np.array([g.rect for g in regions], np.float64).reshape(-1, 4), mask


def needs(records, truths, spec: syn.SceneSpec) -> tuple[np.ndarray, np.ndarray]:
    """bool [frames] missed, bool [frames] dim. A person is missed when no region of an observed
    person overlaps their rectangle with IoU >= 0.3 and less than 80 % of the rectangle lies in
    such regions (someone hidden behind a person who was found is obscured with them)."""
    missed = np.zeros(len(truths), bool)
    dim = np.zeros(len(truths), bool)
    for rec, truth in zip(records, truths):
        rects, mask = _observed(rec)
        for a in np.flatnonzero(truth.visible):
            x0, y0, x1, y1 = truth.person_rects[a]
            if len(rects) and iou_matrix(truth.person_rects[a][None].astype(np.float64), rects).max() >= 0.3:
                continue
            if (x1 - x0) * (y1 - y0) and mask[y0:y1, x0:x1].mean() < 0.8:
                missed[truth.frame] = True
        if spec.dim_seconds is not None:
            dim[truth.frame] = spec.dim_seconds[0] <= truth.t < spec.dim_seconds[1]
    return missed, dim


def _runs(x: np.ndarray) -> list[tuple[int, int]]:
    """[start, end] of every run of True."""
    out, start = [], None
    for i, v in enumerate(list(x) + [False]):
        if v and start is None:
            start = i
        elif not v and start is not None:
            out.append((start, i - 1))
            start = None
    return out


def run(spec, misses, work: Path, signer: Signer, clip: Path | None = None):
    """Process the scene (written to work/clip.mp4 unless `clip` is that scene already made) with
    the scripted estimator, or with the default estimator and search when misses is None."""
    if clip is None:
        clip = work / "clip.mp4"
        truths = syn.write_clip(spec, clip, crf=23)
    else:
        truths = [truth for _, truth in syn.render_scene(spec)]
    records = {}
    estimator = None if misses is None else ScriptedMisses(truths, misses)
    result = process_video(clip, work / "out", signer, ProcessSettings(), estimator=estimator,
                           records=lambda rec: records.setdefault(rec.frame, rec))
    with open(result.package / "quality.jsonl", "rb") as f:
        quality = list(read_quality(f))
    in_range = np.zeros(len(truths), bool)
    for r in result.review:
        in_range[r.frame_start:r.frame_end + 1] = True
    return truths, [records[i] for i in range(len(truths))], quality, in_range


def _demo_scene() -> syn.SceneSpec | None:
    """The demo's own scene (demo_clips/make_demo.py), whose rendering is the committed clip."""
    if not DEMO.is_file():
        return None
    sys.path.insert(0, str(DEMO.parent))
    import make_demo  # demo_clips/make_demo.py

    return make_demo.SCENE


def _share(x: np.ndarray, of: np.ndarray) -> str:
    return f"{x[of].mean():.0%}" if of.any() else "-"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--seconds", type=float, default=10.0)
    args = ap.parse_args()
    gap = ProcessSettings().review.merge_gap
    signer = Signer.from_seed(bytes(32))
    flagged_by: Counter = Counter()
    near_need: Counter = Counter()
    plan = {name: (spec, misses, None) for name, (spec, misses) in scenes(args.seconds).items()}
    demo = _demo_scene()
    if demo is not None:
        plan["demo"] = (demo, None, DEMO)
    print("frames in review ranges; needs found in them (frames, and stretches of consecutive frames):")
    print(f"{'scene':<8} {'frames':>6} {'in ranges':>9} {'ranges':>6} {'missed':>7} {'in ranges':>9}"
          f" {'stretches':>9} {'dim':>5} {'in ranges':>9} {'no need':>8} {'in ranges':>9}")
    with tempfile.TemporaryDirectory() as d:
        for name, (spec, misses, clip) in plan.items():
            work = Path(d) / name
            work.mkdir()
            truths, records, quality, in_range = run(spec, misses, work, signer, clip)
            missed, dim = needs(records, truths, spec)
            need = missed | dim
            near = np.convolve(need.astype(int), np.ones(2 * gap + 1, int), mode="same") > 0
            for q in quality:
                for r in q.reasons:
                    flagged_by[r] += 1
                    near_need[r] += int(near[q.frame])
            stretches = _runs(missed)
            hit = sum(1 for a, b in stretches if in_range[a:b + 1].any())
            print(f"{name:<8} {len(quality):>6} {in_range.mean():>9.0%} {len(_runs(in_range)):>6}"
                  f" {int(missed.sum()):>7} {_share(in_range, missed):>9} {hit:>4}/{len(stretches):<4}"
                  f" {int(dim.sum()):>5} {_share(in_range, dim):>9} {int((~near).sum()):>8}"
                  f" {_share(in_range, ~near):>9}", flush=True)
        print(f"\nper flag: frames flagged, and precision (share within {gap} frames of a frame that needs review):")
        for r in sorted(flagged_by):
            print(f"  {r:<20} {flagged_by[r]:>6} {near_need[r] / flagged_by[r]:>8.0%}")


if __name__ == "__main__":
    main()
