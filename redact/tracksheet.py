"""Track sheet: for the operator answering a request for footage, one picture per tracked person.

`make_track_sheet` runs decode → pose → tracker through the loop `redact process` runs
(redact.vision.tracking.TrackingPass with settings.ids, PoseEstimator.default(settings.pose,
settings.model_threads), as many frames at once), so its track ids are the ids a run with the
same settings assigns. The operator finds the requester's id(s) on the sheet and writes
them into a redaction plan (redact.redaction.plan); the sheet's plan-template.json carries the source hash
and settings fingerprint the plan needs.

The sheet shows unredacted people: it is SENSITIVE, stays under the operator's control, is never
put into a package, and should be deleted after use (its README.txt says so). Two passes over the
video: the first tracks, the second cuts crops of the original frames at each track's first,
middle and last observed frame; images are RGB uint8 [H, W, 3] until written as PNG.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from redact import fsio
from redact.errors import OutputError
from redact.pipeline import ProcessSettings, inference_workers
from redact.redaction.plan import PLAN_VERSION, ids_fingerprint
from redact.vision.pose import PoseEstimator
from redact.vision.tracking import TrackingPass

TRACKS_NAME = "tracks.json"
README_NAME = "README.txt"
TEMPLATE_NAME = "plan-template.json"
#: Height in pixels of each crop on a sheet image, and the margin around the box (fraction of its size).
CROP_HEIGHT = 160
CROP_MARGIN = 0.15
STRIP_HEIGHT = 58

README_TEXT = """\
SENSITIVE - UNREDACTED PEOPLE

This folder was written by `redact tracks`. Its pictures show people from the original footage
WITHOUT any redaction, so that the operator answering a request for footage can find the
requester's track id(s) and write them into a redaction plan (see plan-template.json and the
plan format documentation).

- It must not leave the operator's control: do not e-mail, upload or share it.
- It must never be put into a package or disclosed with the redacted copy.
- Delete it after use (once the redacted copy has been reviewed and the plan is final).

Track ids are only valid for this exact video file processed with the same detection and
tracking options; `redact process --plan` refuses a plan whose track sheet fingerprint does not
match its run. Automated tracking makes mistakes (a person can get two ids, or two people can
swap ids when they cross): check every picture, and review the redacted copy before disclosure.
"""


@dataclass
class _Seen:
    """Internal: one track's observations during the first pass."""

    frames: list[int] = field(default_factory=list)
    boxes: list[np.ndarray] = field(default_factory=list)


def _crop(image: np.ndarray, box: np.ndarray) -> np.ndarray:
    """The box grown by CROP_MARGIN, clipped to the image, scaled to CROP_HEIGHT rows: RGB [h, w, 3]."""
    import cv2

    h, w = image.shape[:2]
    x1, y1, x2, y2 = (float(v) for v in box)
    mx, my = CROP_MARGIN * max(x2 - x1, 1.0), CROP_MARGIN * max(y2 - y1, 1.0)
    cx0, cy0 = max(0, int(np.floor(x1 - mx))), max(0, int(np.floor(y1 - my)))
    cx1, cy1 = min(w, int(np.ceil(x2 + mx))), min(h, int(np.ceil(y2 + my)))
    if cx1 <= cx0 or cy1 <= cy0:  # a predicted box can leave the frame; observed ones should not
        return np.full((CROP_HEIGHT, CROP_HEIGHT // 2, 3), 128, np.uint8)
    c = image[cy0:cy1, cx0:cx1]
    s = CROP_HEIGHT / c.shape[0]
    cw = max(1, min(4 * CROP_HEIGHT, int(round(c.shape[1] * s))))
    interpolation = cv2.INTER_AREA if s < 1 else cv2.INTER_LINEAR
    return cv2.resize(np.ascontiguousarray(c), (cw, CROP_HEIGHT), interpolation=interpolation)


def sheet_image(crops: list[np.ndarray], lines: list[str]) -> np.ndarray:
    """Crops side by side (8-px gaps) above a white strip with text lines: RGB uint8 [H, W, 3]."""
    import cv2

    gap = 8
    width = max(sum(c.shape[1] for c in crops) + gap * (len(crops) + 1), 360)
    out = np.full((CROP_HEIGHT + 2 * gap + STRIP_HEIGHT, width, 3), 255, np.uint8)
    out[:CROP_HEIGHT + 2 * gap] = 40
    x = gap
    for c in crops:
        out[gap:gap + CROP_HEIGHT, x:x + c.shape[1]] = c
        x += c.shape[1] + gap
    y = CROP_HEIGHT + 2 * gap + 17
    for line in lines:
        cv2.putText(out, line, (gap, y), cv2.FONT_HERSHEY_SIMPLEX, 0.45, (0, 0, 0), 1, cv2.LINE_AA)
        y += 18
    return out


def _write_png(path: Path, rgb: np.ndarray) -> None:
    import cv2

    ok, buf = cv2.imencode(".png", np.ascontiguousarray(rgb[:, :, ::-1]))
    if not ok:
        raise OutputError(f"cannot encode {path.name} as PNG")
    path.write_bytes(buf.tobytes())


def _json_bytes(doc) -> bytes:
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


def _track_pass(source: Path, settings: ProcessSettings, estimator, fps: float, progress=None, expected: int = 0):
    """First pass: every frame through redact.vision.tracking.TrackingPass, the loop the pipeline runs.

    Returns (tracker summaries, {id: _Seen}, frames decoded, source sha256, stopped_early).
    """
    from redact.media.video import VideoReader

    tracking = TrackingPass(estimator, settings.ids, fps, inference_workers(settings, estimator))
    seen: dict[int, _Seen] = {}
    with VideoReader(source, threads=0) as reader:
        n = 0
        for item in tracking.run(reader.frames()):
            n += 1
            if progress is not None:
                progress(n, expected)
            if item.tracks is None:  # a failed frame: nobody to picture
                continue
            tracks = item.tracks
            for k in np.nonzero(tracks.observed)[0]:
                s = seen.setdefault(int(tracks.ids[k]), _Seen())
                s.frames.append(item.frame.index)
                s.boxes.append(np.array(tracks.boxes[k], np.float64))
        sha, stopped = reader.sha256, reader.stopped_early
    return tracking.summary(), seen, n, sha, stopped


def _crop_pass(source: Path, wanted: dict[int, list[tuple[int, np.ndarray]]]) -> dict[int, list[np.ndarray]]:
    """Second pass: decode again and cut the crops; wanted maps frame index → [(track id, box)]."""
    from redact.media.video import VideoReader

    crops: dict[int, list[np.ndarray]] = {}
    with VideoReader(source, threads=0, hash_file=False) as reader:
        for frame in reader.frames():
            for tid, box in wanted.get(frame.index, []):
                crops.setdefault(tid, []).append(_crop(frame.image, box))
    return crops


#: A sheet is staged beside its folder in `.redact-tracks-partial-<16 hex of SHA-256 of its name>-*`;
#: ones left by runs that did not finish are removed by the next run for the same folder (they
#: hold unredacted pictures). The hash keeps one folder's prefix from being the start of another's.
STAGING_PREFIX = ".redact-tracks-partial-"


def make_track_sheet(source: str | Path, out_dir: str | Path, settings: ProcessSettings = ProcessSettings(),
                     estimator=None, progress=None) -> list[dict]:
    """Write a track sheet for `source` into the new folder out_dir; returns its track list.

    Each item: id, first_frame, last_frame, first_t, last_t, frames_observed, frames_predicted,
    image (file name in out_dir), shown (the frames on the picture, each {"frame", "box"}). estimator: a PoseEstimator
    to use instead of the bundled default (tests). progress(frames_done, frames_expected) is called
    after each frame of the tracking pass. Refuses an existing out_dir; writes into a
    hidden temporary folder beside it and renames it into place at the end.
    """
    from redact.media.video import probe
    from redact.vision.models import get_model

    source, out_dir = Path(source), Path(out_dir)
    info = probe(source)
    if os.path.lexists(out_dir):
        raise OutputError(f"{out_dir} already exists; choose a new --out (a track sheet is never overwritten)")
    entry = get_model(settings.pose.model, task="pose")
    if estimator is None:
        estimator = PoseEstimator.default(settings.pose, settings.model_threads)
    parent = out_dir.parent
    prefix = f"{STAGING_PREFIX}{hashlib.sha256(os.fsencode(out_dir.name)).hexdigest()[:16]}-"
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise fsio.write_error(parent, e) from None
    with fsio.lock_target(out_dir) as lock:  # a second sheet into the same folder stops here
        if os.path.lexists(out_dir):
            raise OutputError(f"{out_dir} already exists; choose a new --out (a track sheet is never overwritten)")
        fsio.stale_staging(parent, prefix, lock.acquired_at)  # sheets of runs that never finished: sensitive
        try:
            staging = Path(tempfile.mkdtemp(prefix=prefix, dir=parent))  # mode 0700
        except OSError as e:
            raise fsio.write_error(parent, e) from None
        try:
            items = _write_sheet(source, info, staging, settings, estimator, entry.sha256, progress)
            fsio.rename_new(staging, out_dir)  # never over a folder that appeared meanwhile
        except OSError as e:
            raise fsio.write_error(out_dir, e) from None
        finally:
            shutil.rmtree(staging, ignore_errors=True)
    return items


def _write_sheet(source: Path, info, staging: Path, settings: ProcessSettings, estimator, model_sha: str,
                 progress=None) -> list[dict]:
    (staging / README_NAME).write_text(README_TEXT, encoding="utf-8")  # first: the folder is marked at once
    fps = float(info.fps)
    summaries, seen, n_frames, sha, stopped = _track_pass(source, settings, estimator, fps, progress, info.frames)
    wanted: dict[int, list[tuple[int, np.ndarray]]] = {}
    shown: dict[int, list[dict]] = {}
    for tid, s in seen.items():
        picks = sorted({0, len(s.frames) // 2, len(s.frames) - 1})
        shown[tid] = [{"frame": s.frames[p], "box": [round(float(v), 1) for v in s.boxes[p]]} for p in picks]
        for p in picks:
            wanted.setdefault(s.frames[p], []).append((tid, s.boxes[p]))
    crops = _crop_pass(source, wanted)
    items = []
    for sm in summaries:
        name = f"track-{sm.id:04d}.png"
        lines = [f"track {sm.id}   {sm.first_t:.2f}-{sm.last_t:.2f} s   frames {sm.first_frame}-{sm.last_frame}",
                 f"observed in {sm.frames_observed} frames, predicted in {sm.frames_predicted}",
                 "SENSITIVE: unredacted - operator only"]
        _write_png(staging / name, sheet_image(crops.get(sm.id, []), lines))
        items.append({"id": sm.id, "first_frame": sm.first_frame, "last_frame": sm.last_frame,
                      "first_t": round(sm.first_t, 6), "last_t": round(sm.last_t, 6),
                      "frames_observed": sm.frames_observed, "frames_predicted": sm.frames_predicted,
                      "image": name, "shown": shown.get(sm.id, [])})
    fingerprint = ids_fingerprint(settings.ids, model_sha)
    doc = {"kind": "redact track sheet", "version": 1, "sensitive": True,
           "note": "SENSITIVE: for the operator only; never disclose or package; delete after use.",
           "source": {"name": source.name, "sha256": sha, "frames": n_frames, "width": info.width,
                      "height": info.height, "fps": f"{info.fps.numerator}/{info.fps.denominator}",
                      "duration": round(info.duration, 6), "stopped_early": stopped},
           "settings_sha256": fingerprint, "tracks": items}
    (staging / TRACKS_NAME).write_bytes(_json_bytes(doc))
    template = {"version": PLAN_VERSION, "note": "", "keep_visible": [],
                "track_sheet": {"source_sha256": sha, "settings_sha256": fingerprint},
                "regions": [], "boxes": [], "obscure_frames": []}
    (staging / TEMPLATE_NAME).write_bytes(_json_bytes(template))
    return items
