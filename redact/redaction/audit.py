"""Independent audit of a redacted video: are faces or people still detectable in it?

Two detectors scan the video (RGB frames [H,W,3]):
- faces: the bundled BlazeFace-family face detector (MediaPipe, Apache-2.0; redact.vision.face), a
  different model family from the pose model that decided what to redact, so its blind spots
  are largely different (see models_manifest/face_detector.md). Its full-range variant sees a
  192×192 letterbox of what it is given, so a face 40 px wide in a 1280×720 frame becomes 6 px.
  The audit therefore scans the whole frame plus a grid of overlapping square tiles and merges
  the results (see `face_tiles` and `merge_detections`). On the demo clip (1280×720, every
  10th frame) the whole frame alone gave 29 face detections, whole frame plus tiles 76; on its
  redacted copy both gave 0;
- persons: the float32 pose model (YOLO11n-pose; processing runs its int8 copy by default) at a
  larger input than processing uses (960 px long side instead of 640), which finds smaller and
  partly hidden people.

The redaction draws light-grey stick figures on solid mid-grey regions, and the pose model does
"see" a person in some stick figures: on our redacted demo clip (demo_clips/ticket_hall.mp4,
style "figure", every 3rd frame scanned) it found 8 such persons, scores 0.27-0.55. These are
reported separately and do not fail the audit when the pixels under them are our own drawing
(see `on_fill`): a detection counts unless its box is ours and, for a person whose head
keypoints are confident, the patch around them is ours too, so a real head left outside a
filled region still counts. A box is ours when at least `fill_fraction` (0.6) of it is fill grey,
or, where figure lines crowd a small box (at 320×240 they are 2 px wide and the codec smears
them to 4), when at least `dense_fill_fraction` (0.25) is fill grey and at least
`drawing_fraction` (0.9) is fill grey, figure grey or a grey between them (neutral within twice
the tolerance, between fill − 3 × tolerance and figure + 3 × tolerance). A head patch, and a face
box (face detections go through the same test: a face the detector imagines in our drawing is
listed, not counted), can lie wholly on a figure's head lines, so there the drawing's greys
alone decide. Measured with the default tolerance (6 grey levels): stick-figure
detections on the demo had 0.73-0.89 of their boxes and 0.83-1.0 of their head patches on the
fill; one on the 320×240 held-out-style clip of tests/test_stride.py had 0.36 and 0.36, with
1.0 of both in the drawing's greys. Real people in the demo source and in the synthetic test
clips (including the grey-scale camera() still) had at most 0.023 of their person boxes, 0.055
of their head patches and 0.079 of their face boxes on the fill grey, and at most 0.24, 0.57 and
0.64 of them in the drawing's greys; a head patch on a small figure's head lines in a 320×240
clip (seed 1 of the crossing scene) had 0.10 fill grey and 1.0 in the drawing's greys. Rule and thresholds are
ours, set from those measurements, not published. The grey-scale camera() man pasted a third
over the fill (tests/test_audit.py) has 0.33 fill grey but only 0.79 of the drawing's greys, so
he counts. A person whose visible part is entirely light,
colourless grey and who stands half inside our fill would pass as ours, for the person check and
the face check alike; the human review before disclosure has to cover that case. A real person
standing in front of a flat wall of exactly that grey, with the head turned away, would be
missed by this rule; the face detector does not use it. Heavy blur leaves a body's outline, so
on a blurred copy the pose model may still find people (it did, scores 0.25-0.41, on a blurred
redaction of the 640×360 clip): the audit reports them, since a silhouette with clothing colours
and gait can identify someone.

A face is a person's for more than a moment: a face found in one scanned frame only (nothing
overlapping it, IoU > 0.3, in the scanned frame before or after) and scored below
`face_sure_score` (0.8) is listed as a single sighting, not counted. The face detector does
imagine faces in scene texture: on a correctly redacted 640×360 crossing clip it found one, scored
0.61, on a plain wall between two of our grey regions, whose two notice boards made the eyes, in
the last frame only. Real faces in the unredacted test clips and the demo score from 0.607 and
are found again in the next scanned frame (every 5th frame in tests/test_audit_clean.py). The
cost: a face left visible in a single frame, or in a clip scanned so sparsely that it is seen
once, and scored below 0.8, is listed (the terminal and `--json` show it) but does not fail the
audit; the human review before disclosure has to catch it.

With the source video, the same detectors run on it frame by frame (aligned by index), and each
source face is checked for a redacted-video face overlapping it (IoU > 0.3) in the same frame:
such a face "survived" the redaction.

A clean audit does not prove that nobody can be identified: heavy blur defeats a face detector
while acquaintances still recognise someone, and gait, clothing and context identify people
too. The audit supports human review before disclosure; it does not replace it.
"""

from __future__ import annotations

import contextlib
import itertools
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from redact.errors import InputError
from redact.ranges import frame_ranges
from redact.redaction.render import FIGURE_GREY, FILL_GREY
from redact.vision.boxes import greedy_nms, iou_matrix
from redact.vision.models import DEFAULT_FACE_MODEL, FLOAT_POSE_MODEL
from redact.vision.skeleton import HEAD_KEYPOINTS

Box = tuple[float, float, float, float]  # x1, y1, x2, y2 in frame pixels
Detection = tuple[Box, float]  # (box, score)



@dataclass(frozen=True)
class AuditSettings:
    """What the audit looks for and how hard.

    face_score: face detector score threshold; None = the model manifest's (0.6 for the
    full-range model, MediaPipe's min_score_thresh). face_grid: square tiles scanned besides
    the whole frame, (count along the long side, count along the short side);
    face_tile_overlap: share of a tile's side that neighbouring tiles overlap at least. Tiles
    are only scanned when larger than the model's input (192 px): smaller ones would only be
    upsampled. face_merge_iou / face_merge_containment: a face found in several windows is kept once (greedy by score;
    a box is dropped when its IoU with a kept box exceeds the first, or when that share of the
    smaller box lies inside a kept box: a face cut by a tile edge gives a partial box).
    pose_input_long_side / pose_score: the pose model's input long side (a multiple of 32) and
    person score threshold. head_confidence: keypoint confidence for a head keypoint to count.
    fill_grey / fill_tolerance / fill_fraction: the redaction fill level, how far (in grey
    levels, per channel) a decoded pixel may stray from it after H.264 coding, and the share of
    a box's pixels that makes a detection "on our fill" (see the module docstring).
    figure_grey / dense_fill_fraction / drawing_fraction: the stick figures' grey, and the
    second test for small boxes crowded with figure lines: this much fill grey and this much of
    the drawing's greys (fill, figure, or neutral greys between them).
    step: scan every step-th frame (1 = every frame). min_faces / min_persons: the audit fails
    when at least this many faces / persons are found over the whole video (1 = any at all).
    survive_iou: IoU above which a redacted-video face matches a source face in the same frame.
    face_sure_score: a face scored at least this counts even when seen in one scanned frame only;
    below it, a face counts when one overlapping it (IoU > survive_iou) is found in the scanned
    frame before or after (see the module doc).
    threads: onnxruntime threads (None = every core); speed only.
    """

    face_model: str = DEFAULT_FACE_MODEL
    face_score: float | None = None
    face_grid: tuple[int, int] = (3, 2)
    face_tile_overlap: float = 0.25
    face_merge_iou: float = 0.3
    face_merge_containment: float = 0.7
    pose_input_long_side: int = 960
    pose_score: float = 0.25
    head_confidence: float = 0.5
    fill_grey: int = FILL_GREY
    fill_tolerance: int = 6
    fill_fraction: float = 0.6
    figure_grey: int = FIGURE_GREY
    dense_fill_fraction: float = 0.25
    drawing_fraction: float = 0.9
    step: int = 1
    min_faces: int = 1
    min_persons: int = 1
    survive_iou: float = 0.3
    face_sure_score: float = 0.8
    threads: int | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "face_grid", tuple(int(v) for v in self.face_grid))
        if len(self.face_grid) != 2 or min(self.face_grid) < 1 or max(self.face_grid) > 16:
            raise InputError("face grid must be (tiles along the long side, along the short side), "
                             f"each 1..16, got {self.face_grid}")
        if self.face_score is not None and not 0.0 < self.face_score < 1.0:
            raise InputError(f"face score threshold must be between 0 and 1, got {self.face_score}")
        for name in ("face_tile_overlap",):
            if not 0.0 <= getattr(self, name) < 1.0:
                raise InputError(f"{name.replace('_', ' ')} must be in [0, 1), got {getattr(self, name)}")
        for name in ("face_merge_iou", "face_merge_containment", "head_confidence", "fill_fraction",
                     "dense_fill_fraction", "drawing_fraction", "survive_iou", "face_sure_score"):
            if not 0.0 < getattr(self, name) <= 1.0:
                raise InputError(f"{name.replace('_', ' ')} must be in (0, 1], got {getattr(self, name)}")
        if not 0.0 < self.pose_score < 1.0:
            raise InputError(f"pose score threshold must be between 0 and 1, got {self.pose_score}")
        if self.pose_input_long_side < 32 or self.pose_input_long_side % 32:
            raise InputError(f"pose input size must be a positive multiple of 32, got {self.pose_input_long_side}")
        if not 0 <= self.fill_grey <= 255 or not 0 <= self.figure_grey <= 255 or not 0 <= self.fill_tolerance <= 64:
            raise InputError("fill and figure grey must be within 0..255 and the tolerance within 0..64")
        if self.step < 1:
            raise InputError(f"frame step must be at least 1, got {self.step}")
        if self.min_faces < 1 or self.min_persons < 1:
            raise InputError("min faces and min persons must be at least 1")

    def record(self) -> dict:
        """The settings as plain JSON values (threads left out: speed only)."""
        d = asdict(self)
        d.pop("threads")
        d["face_grid"] = list(self.face_grid)
        return d


@dataclass(frozen=True)
class FrameAudit:
    """What was found in one scanned frame (boxes in frame pixels, scores in 0..1).

    faces: faces in the audited video on real pixels (these count). persons: people the pose
    model found on real pixels (these count). on_fill / faces_on_fill: people and faces found on
    the redaction's own fill and figures (reported, not counted). faces_single: faces on real
    pixels seen in this scanned frame only and scored below face_sure_score (reported, not
    counted; see the module doc). source_faces: faces in the
    source's frame of the same index (None without a source); survived: indices into
    source_faces matched by a face here.
    """

    frame: int
    t: float
    faces: tuple[Detection, ...]
    persons: tuple[Detection, ...]
    on_fill: tuple[Detection, ...] = ()
    source_faces: tuple[Detection, ...] | None = None
    survived: tuple[int, ...] = ()
    faces_on_fill: tuple[Detection, ...] = ()
    faces_single: tuple[Detection, ...] = ()

    @property
    def has_findings(self) -> bool:
        return bool(self.faces or self.persons)

    @property
    def reasons(self) -> tuple[str, ...]:
        """Codes of what was found here (redact.redaction.reasons words them)."""
        return tuple(code for code, hit in (("face", self.faces), ("person", self.persons),
                                            ("face_survived", self.survived)) if hit)

    def as_dict(self) -> dict:
        def dets(items):
            return [{"box": [round(v, 1) for v in b], "score": round(s, 4)} for b, s in items]

        d = {"frame": self.frame, "t": round(self.t, 6), "faces": dets(self.faces), "persons": dets(self.persons),
             "persons_on_fill": dets(self.on_fill), "faces_on_fill": dets(self.faces_on_fill),
             "faces_single": dets(self.faces_single)}
        if self.source_faces is not None:
            d["source_faces"] = dets(self.source_faces)
            d["survived"] = list(self.survived)
        return d


@dataclass(frozen=True)
class AuditReport:
    """The audit of one video; `passed` is False when anything was found above the thresholds.

    frames: one record per scanned frame, in order. ranges: inclusive [first, last] frame
    indices of runs of scanned frames with findings (gaps up to `step` frames joined), each with
    the codes of what was found in it.
    source_faces / survived: totals over the source (None without a source). stopped_early:
    why decoding stopped before the end (a damaged file fails the audit: the unread frames
    were not checked).
    """

    video: str
    source: str | None
    width: int
    height: int
    frames_decoded: int
    frames: tuple[FrameAudit, ...]
    settings: dict
    models: tuple[dict, ...]
    faces: int
    persons: int
    persons_on_fill: int
    ranges: tuple[tuple[int, int, tuple[str, ...]], ...]
    source_faces: int | None
    survived: int | None
    stopped_early: str | None
    passed: bool

    @property
    def frames_scanned(self) -> int:
        return len(self.frames)

    @property
    def faces_on_fill(self) -> int:
        return sum(len(f.faces_on_fill) for f in self.frames)

    @property
    def faces_single(self) -> int:
        return sum(len(f.faces_single) for f in self.frames)

    def range_records(self) -> list[dict]:
        """The ranges in the shape every command uses (redact.formats.review_json.range_record)."""
        from redact.formats.review_json import range_record

        t_of = {f.frame: f.t for f in self.frames}
        return [range_record(a, b, t_of[a], t_of[b], why) for a, b, why in self.ranges]

    def as_dict(self) -> dict:
        """The whole report as one JSON-ready document; per-frame records only for frames with
        anything in them (findings, persons on the fill, or source faces)."""
        doc = audit_summary(self)
        doc["video"], doc["source"] = self.video, self.source
        doc["frames"] = [f.as_dict() for f in self.frames
                         if f.faces or f.persons or f.on_fill or f.faces_on_fill or f.faces_single
                         or f.source_faces]
        return doc


def audit_summary(report: AuditReport) -> dict:
    """A compact JSON-ready summary (no per-frame lists), e.g. for the transform log."""
    return {
        "passed": report.passed,
        "video": Path(report.video).name,
        "source": Path(report.source).name if report.source else None,
        "size": [report.width, report.height],
        "frames_decoded": report.frames_decoded,
        "frames_scanned": report.frames_scanned,
        "step": report.settings["step"],
        "faces": report.faces,
        "persons": report.persons,
        "persons_on_fill": report.persons_on_fill,
        "faces_on_fill": report.faces_on_fill,
        "faces_single": report.faces_single,
        "ranges": report.range_records(),
        "source_faces": report.source_faces,
        "survived": report.survived,
        "stopped_early": report.stopped_early,
        "models": [dict(m) for m in report.models],
        "settings": dict(report.settings),
    }


# ---------------------------------------------------------------- face scanning

def face_tiles(width: int, height: int, grid: tuple[int, int], overlap: float,
               model_side: int) -> list[tuple[int, int, int, int]]:
    """Square tiles (x, y, w, h) on a grid covering a width × height frame.

    grid = (tiles along the long side, tiles along the short side), so a portrait frame gets
    the transposed grid of a landscape one. The side is the larger of
    width / (cols − (cols − 1)·overlap) and the same for height, so neighbours overlap by at
    least `overlap` of a tile; tiles are spread evenly from edge to edge and cut to the frame.
    E.g. 1280×720 with (3, 2) and 0.25: six 512×512 tiles at x = 0, 384, 768 and y = 0, 208
    (a face then reaches the model 2.5 times larger than in the whole-frame pass). Returns []
    when the side would not exceed model_side.
    """
    cols, rows = grid if width >= height else (grid[1], grid[0])
    side = max(width / (cols - (cols - 1) * overlap), height / (rows - (rows - 1) * overlap))
    if side <= model_side or (cols == 1 and rows == 1):
        return []
    tw, th = int(round(min(side, width))), int(round(min(side, height)))
    xs = np.round(np.linspace(0, width - tw, cols)).astype(int)
    ys = np.round(np.linspace(0, height - th, rows)).astype(int)
    out: list[tuple[int, int, int, int]] = []
    for y in ys:
        for x in xs:
            if (int(x), int(y), tw, th) not in out:
                out.append((int(x), int(y), tw, th))
    return out


def merge_detections(boxes: np.ndarray, scores: np.ndarray, iou: float, containment: float) -> np.ndarray:
    """Greedy suppression over boxes [N,4] (x1,y1,x2,y2) and scores [N]; kept indices, best first.

    A box is dropped when its IoU with a kept box exceeds `iou` (the BlazeFace graph's 0.3) or
    when more than `containment` of the smaller box's area lies inside a kept box (the greedy
    loop is redact.vision.boxes.greedy_nms; this rule is the audit's own).
    """

    def suppress(ious, inter, kept_area, rest_areas):
        smaller = np.minimum(kept_area, rest_areas)
        cont = np.divide(inter, smaller, out=np.zeros_like(inter), where=smaller > 0)
        return (ious > iou) | (cont > containment)

    return greedy_nms(np.asarray(boxes, np.float64), np.asarray(scores, np.float64), suppress)


def scan_faces(detector, image: np.ndarray, settings: AuditSettings) -> tuple[Detection, ...]:
    """Faces in an RGB uint8 frame [H,W,3]: whole frame plus tiles, merged, clipped to the frame."""
    h, w = image.shape[:2]
    windows = [(0, 0, w, h)] + face_tiles(w, h, settings.face_grid, settings.face_tile_overlap,
                                          detector.spec.size)
    boxes, scores = [], []
    for x, y, tw, th in windows:
        crop = image if (tw, th) == (w, h) else np.ascontiguousarray(image[y:y + th, x:x + tw])
        found = detector.detect(crop)
        if len(found):
            boxes.append(found.boxes + np.array([x, y, x, y], np.float32))
            scores.append(found.scores)
    if not boxes:
        return ()
    b, s = np.concatenate(boxes), np.concatenate(scores)
    keep = merge_detections(b, s, settings.face_merge_iou, settings.face_merge_containment)
    b = b[keep]
    b[:, [0, 2]] = b[:, [0, 2]].clip(0, w)
    b[:, [1, 3]] = b[:, [1, 3]].clip(0, h)
    return tuple((_box(bb), float(ss)) for bb, ss in zip(b, s[keep]))


def _box(b) -> Box:
    return (float(b[0]), float(b[1]), float(b[2]), float(b[3]))


# ---------------------------------------------------------------- persons on the fill

def _box_pixels(image: np.ndarray, box) -> np.ndarray | None:
    """The pixels [h, w, 3] int16 of image [H,W,3] inside box (x1,y1,x2,y2, rounded outwards and
    clipped to the image), or None when no pixel lies inside."""
    h, w = image.shape[:2]
    x1, y1 = max(0, int(np.floor(box[0]))), max(0, int(np.floor(box[1])))
    x2, y2 = min(w, int(np.ceil(box[2]))), min(h, int(np.ceil(box[3])))
    if x2 <= x1 or y2 <= y1:
        return None
    return image[y1:y2, x1:x2].astype(np.int16)


def fill_share(image: np.ndarray, box, grey: int, tolerance: int) -> float:
    """Share of the pixels inside box (x1,y1,x2,y2) whose three channels all lie within
    `tolerance` of `grey`; 0.0 for a box with no pixels inside the image [H,W,3]."""
    crop = _box_pixels(image, box)
    if crop is None:
        return 0.0
    return float((np.abs(crop - grey) <= tolerance).all(axis=2).mean())


def head_patch(box, keypoints: np.ndarray, confidence: float) -> Box | None:
    """A square around the confident head keypoints (keypoints [17,3] x, y, conf), or None.

    Side = max(8 px, 0.2 × the person box's long side, 2 × the spread of those keypoints):
    about a head for a standing person (common practice for "head ≈ 1/7 of body height"; our
    choice, not a published rule).
    """
    kp = np.asarray(keypoints, np.float64)[list(HEAD_KEYPOINTS)]
    ok = kp[kp[:, 2] >= confidence]
    if not len(ok):
        return None
    cx, cy = ok[:, 0].mean(), ok[:, 1].mean()
    spread = float(max(np.ptp(ok[:, 0]), np.ptp(ok[:, 1]))) if len(ok) > 1 else 0.0
    side = max(8.0, 0.2 * max(box[2] - box[0], box[3] - box[1]), 2.0 * spread)
    return (cx - side / 2, cy - side / 2, cx + side / 2, cy + side / 2)


def drawing_share(image: np.ndarray, box, fill: int, figure: int, tolerance: int) -> float:
    """Share of the pixels inside box that could belong to our drawing: neutral grey (channels
    within 2 × tolerance of each other) between fill − 3 × tolerance and figure + 3 × tolerance
    (the fill, the figures' grey and their anti-aliased and codec-smeared blends)."""
    crop = _box_pixels(image, box)
    if crop is None:
        return 0.0
    lo, hi = min(fill, figure) - 3 * tolerance, max(fill, figure) + 3 * tolerance
    level = crop.mean(axis=2)
    neutral = (crop.max(axis=2) - crop.min(axis=2)) <= 2 * tolerance
    return float((neutral & (level >= lo) & (level <= hi)).mean())


def ours(image: np.ndarray, box, settings: AuditSettings, min_fill: float | None = None) -> bool:
    """Whether the pixels in box are our own drawing: mostly fill grey, or (where figure lines
    crowd a small box) at least `min_fill` fill grey (default: settings.dense_fill_fraction) and
    almost only the drawing's greys."""
    g, tol = settings.fill_grey, settings.fill_tolerance
    share = fill_share(image, box, g, tol)
    if share >= settings.fill_fraction:
        return True
    need = settings.dense_fill_fraction if min_fill is None else min_fill
    return share >= need and drawing_share(image, box, g, settings.figure_grey, tol) >= settings.drawing_fraction


def on_fill(image: np.ndarray, box, keypoints: np.ndarray | None, settings: AuditSettings) -> bool:
    """True when a detection most likely is our stick figure on our solid fill (see `ours`).

    The box must be ours and, if the detection has confident head keypoints, the patch around
    them too (so a real head left outside a filled region still counts). A head patch or a face
    box is small enough to lie wholly on a figure's head lines, so for them the drawing's greys
    alone can decide (no least share of fill). keypoints None (a face detection): the box alone
    decides.
    """
    if keypoints is None:
        return ours(image, box, settings, min_fill=0.0)
    if not ours(image, box, settings):
        return False
    head = head_patch(box, keypoints, settings.head_confidence)
    return head is None or ours(image, head, settings, min_fill=0.0)


# ---------------------------------------------------------------- the audit

class _Detectors:
    """The two hash-checked models, opened once for a whole audit."""

    def __init__(self, settings: AuditSettings):
        from redact.vision.face import FaceDetector
        from redact.vision.models import get_model, open_session
        from redact.vision.pose import PoseEstimator, PoseSettings

        face_entry = get_model(settings.face_model, task="face-detection")
        if face_entry.task != "face-detection":
            raise InputError(f"model {face_entry.id} is not a face detector (task {face_entry.task})")
        pose_entry = get_model(FLOAT_POSE_MODEL, task="pose")
        self.face_score = float(settings.face_score if settings.face_score is not None
                                else face_entry.thresholds.get("score", 0.6))
        self.faces = FaceDetector(open_session(face_entry, settings.threads), score_threshold=self.face_score)
        self.poses = PoseEstimator(open_session(pose_entry, settings.threads),
                                   PoseSettings(input_long_side=settings.pose_input_long_side,
                                                score_threshold=settings.pose_score))
        self.models = tuple({"id": e.id, "sha256": e.sha256, "licence": e.licence, "task": e.task}
                            for e in (face_entry, pose_entry))
        self.settings = settings

    def faces_in(self, image: np.ndarray) -> tuple[Detection, ...]:
        """Every face found (the source is scanned with this too: nothing is gated there)."""
        return scan_faces(self.faces, image, self.settings)

    def faces_split(self, image: np.ndarray) -> tuple[tuple[Detection, ...], tuple[Detection, ...]]:
        """(faces on real pixels, faces on the redaction's own fill and figures)."""
        real: list[Detection] = []
        filled: list[Detection] = []
        for det in self.faces_in(image):
            (filled if on_fill(image, det[0], None, self.settings) else real).append(det)
        return tuple(real), tuple(filled)

    def persons_in(self, image: np.ndarray) -> tuple[tuple[Detection, ...], tuple[Detection, ...]]:
        """(persons on real pixels, persons on the redaction fill)."""
        poses = self.poses.estimate(image)
        real: list[Detection] = []
        filled: list[Detection] = []
        for box, score, kp in zip(poses.boxes, poses.scores, poses.keypoints):
            det = (_box(box), float(score))
            (filled if on_fill(image, box, kp, self.settings) else real).append(det)
        return tuple(real), tuple(filled)


def iou(a: Box, b: Box) -> float:
    """Intersection over union of two boxes (x1,y1,x2,y2); 0 when they do not overlap (redact.vision.boxes)."""
    return float(iou_matrix(np.array(a, np.float64), np.array(b, np.float64))[0, 0])


def survivors(source_faces: tuple[Detection, ...], faces: tuple[Detection, ...], threshold: float) -> tuple[int, ...]:
    """Indices of source faces overlapped (IoU > threshold) by any face of the audited frame."""
    if not source_faces or not faces:
        return ()
    overlap = iou_matrix(np.array([b for b, _ in source_faces]), np.array([b for b, _ in faces]))
    return tuple(int(i) for i in np.flatnonzero((overlap > threshold).any(axis=1)))


def finding_ranges(frames: tuple[FrameAudit, ...], step: int) -> tuple[tuple[int, int, tuple[str, ...]], ...]:
    """Inclusive (first, last, reasons) runs of scanned frames with findings; gaps up to `step`
    joined; reasons: the codes found anywhere in the run, in a fixed order."""
    hits = [f for f in frames if f.has_findings]
    out = []
    for a, b in frame_ranges((f.frame for f in hits), gap=max(1, step)):
        why = {code for f in hits if a <= f.frame <= b for code in f.reasons}
        out.append((a, b, tuple(c for c in ("face", "person", "face_survived") if c in why)))
    return tuple(out)


def _check_pair(video: Path, source: Path):
    """Probe both files; InputError unless they can be compared frame by frame."""
    from redact.media.video import probe

    vi, si = probe(video), probe(source)
    if video.resolve() == source.resolve():
        raise InputError(f"{video}: the redacted video and --source are the same file")
    if vi.frames != si.frames:
        raise InputError(f"{video} has {vi.frames} frames and {source} has {si.frames}; the audit compares "
                         "frames by index, so give the source this video was made from")
    # The encoder pads odd sizes by one row/column (redact.media.video.VideoWriter), on the right/bottom.
    if not (vi.width - si.width in (0, si.width & 1) and vi.height - si.height in (0, si.height & 1)):
        raise InputError(f"{video} is {vi.width}x{vi.height} and {source} is {si.width}x{si.height}; "
                         "the audit compares boxes in the same pixels, so the sizes must match")
    return vi, si


def single_sightings(records: list[FrameAudit], settings: AuditSettings) -> tuple[FrameAudit, ...]:
    """The frame records with each face that is seen in its scanned frame only (no face
    overlapping it in the scanned frame before or after, on real pixels or not, nor in the
    source's frame when there is one) and scored below settings.face_sure_score moved from
    `faces` to `faces_single`."""
    out = []
    for i, rec in enumerate(records):
        near = [f for j in (i - 1, i + 1) if 0 <= j < len(records)
                for f in records[j].faces + records[j].faces_single + records[j].faces_on_fill]
        kept: list[Detection] = []
        single: list[Detection] = []
        for box, score in rec.faces:
            seen_again = any(iou(box, other) > settings.survive_iou for other, _ in near + list(rec.source_faces or ()))
            (kept if score >= settings.face_sure_score or seen_again else single).append((box, score))
        out.append(replace(rec, faces=tuple(kept), faces_single=tuple(single)) if single else rec)
    return tuple(out)


def audit_video(redacted: str | Path, source: str | Path | None = None, settings: AuditSettings = AuditSettings(),
                progress: Callable[[int, int], None] | None = None) -> AuditReport:
    """Scan `redacted` (every settings.step-th frame) for faces and persons; see the module doc.

    With `source`, the source's frame of the same index is scanned too and its faces are
    matched against the redacted frame's. progress(frames_done, frames_expected) is called after
    each decoded frame. Raises InputError for unusable files or a mismatched source, ModelError
    when a bundled model fails its hash check.
    """
    from redact.media.video import VideoReader, probe

    video = Path(redacted)
    src = Path(source) if source is not None else None
    info = _check_pair(video, src)[0] if src is not None else probe(video)
    det = _Detectors(settings)
    records: list[FrameAudit] = []
    decoded = 0
    with contextlib.ExitStack() as stack:
        reader = stack.enter_context(VideoReader(video, hash_file=False))
        sreader = stack.enter_context(VideoReader(src, hash_file=False)) if src is not None else None
        pairs = (itertools.zip_longest(reader.frames(), sreader.frames()) if sreader is not None
                 else ((f, None) for f in reader.frames()))
        for frame, sframe in pairs:
            if sreader is not None and (frame is None or sframe is None):
                short, long_ = (video, src) if frame is None else (src, video)
                raise InputError(f"{short} ends before {long_} (after {decoded} frames); the audit compares "
                                 "frames by index, so both must decode to the same number of frames")
            if frame.index % settings.step == 0:
                faces, faces_filled = det.faces_split(frame.image)
                persons, filled = det.persons_in(frame.image)
                s_faces = det.faces_in(sframe.image) if sframe is not None else None
                records.append(FrameAudit(
                    frame.index, frame.t, faces, persons, filled, s_faces,
                    survivors(s_faces, faces, settings.survive_iou) if s_faces is not None else (),
                    faces_filled))
            decoded += 1
            if progress is not None:
                progress(decoded, info.frames)
        stopped = reader.stopped_early
        if sreader is not None and sreader.stopped_early and not stopped:
            stopped = f"source: {sreader.stopped_early}"

    frames = single_sightings(records, settings)
    resolved = {**settings.record(), "face_score": det.face_score}
    n_faces = sum(len(f.faces) for f in frames)
    n_persons = sum(len(f.persons) for f in frames)
    return AuditReport(
        video=str(video), source=str(src) if src is not None else None, width=info.width, height=info.height,
        frames_decoded=decoded, frames=frames, settings=resolved, models=det.models,
        faces=n_faces, persons=n_persons, persons_on_fill=sum(len(f.on_fill) for f in frames),
        ranges=finding_ranges(frames, settings.step),
        source_faces=sum(len(f.source_faces or ()) for f in frames) if src is not None else None,
        survived=sum(len(f.survived) for f in frames) if src is not None else None,
        stopped_early=stopped,
        passed=n_faces < settings.min_faces and n_persons < settings.min_persons and stopped is None,
    )
