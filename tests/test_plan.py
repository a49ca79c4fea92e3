"""Redaction plan: strict parsing, field-naming errors, pixel rule, per-frame decisions, and the
end-to-end use through `process_video(..., plan=...)` / `redact process --plan`.

Outside references: OpenCV's cv2.pointPolygonTest (point in polygon, edge = 0), hashlib SHA-256
(FIPS 180-4), scikit-image's structural_similarity (SSIM), PyAV/FFmpeg decoding. Data-protection
background: EDPB Guidelines 3/2019 on video devices §6.1 (an access request may be answered by
masking other people); UK ICO video surveillance guidance (third parties obscured by blurring,
masking or solid fill). People in clips: skimage.data.astronaut() public domain (NASA),
skimage.data.camera() CC0 (Lav Varshney), pasted by tests/conftest.py.
"""

from __future__ import annotations

import base64
import hashlib
import json
from fractions import Fraction
from pathlib import Path
from types import SimpleNamespace

import cv2
import numpy as np
import pytest
from click.testing import CliRunner

from redact.errors import PlanError, RedactError
from redact.pipeline import ProcessSettings
from redact.redaction.plan import (
    DEFAULT_OVERLAP_IOU,
    PLAN_SIZE_LIMIT,
    PLAN_VERSION,
    format_ids,
    ids_fingerprint,
    load_plan,
    parse_plan,
    polygon_mask,
)
from redact.redaction.render import RenderSettings
from redact.vision.pose import PoseSettings
from redact.vision.records import Tracks

W, H = 320, 240
# A 2 s clip at 25 fps, as probe() reports it (the crossing clip of tests/conftest.py).
INFO = SimpleNamespace(width=W, height=H, frames=50, duration=2.0, fps=Fraction(25))
SHEET = {"source_sha256": "a" * 64, "settings_sha256": "b" * 64}


def plan_bytes(**fields) -> bytes:
    doc = {"version": PLAN_VERSION, **fields}
    return json.dumps(doc).encode()


def tracks(ids, boxes) -> Tracks:
    boxes = np.asarray(boxes, np.float32).reshape(-1, 4)
    m = len(ids)
    return Tracks(np.asarray(ids, np.int64), boxes, np.full(m, 0.9), np.zeros((m, 17, 3)), np.ones(m, bool),
                  np.zeros(m, np.int32))


# ---------------------------------------------------------------- pixel rule

def _reference_mask(points: np.ndarray) -> np.ndarray:
    """Pixel centres (i+0.5, j+0.5) inside or on the polygon, by cv2.pointPolygonTest (outside reference)."""
    contour = points.astype(np.float32).reshape(-1, 1, 2)
    out = np.zeros((H, W), bool)
    for j in range(H):
        for i in range(W):
            out[j, i] = cv2.pointPolygonTest(contour, (i + 0.5, j + 0.5), False) >= 0
    return out


def _full(points) -> np.ndarray:
    (x0, y0, x1, y1), crop = polygon_mask(np.asarray(points, np.float64), W, H)
    m = np.zeros((H, W), bool)
    m[y0:y1, x0:x1] = crop
    return m


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_polygon_pixels_match_opencv_point_in_polygon(seed):
    # Simple (star-shaped, non-self-intersecting) polygons with half-pixel vertices, which are
    # exact in float32 so OpenCV and we see the same polygon; some centres fall exactly on edges.
    rng = np.random.default_rng(seed)
    k = int(rng.integers(3, 9))
    ang = np.sort(rng.uniform(0, 2 * np.pi, k))
    rad = rng.uniform(10, 60, k)
    c = rng.uniform(60, 200, 2)
    pts = np.round((c + np.stack([np.cos(ang), np.sin(ang)], 1) * rad[:, None]) * 2) / 2
    pts = np.clip(pts, 0, [W, H])
    assert (_full(pts) == _reference_mask(pts)).all()


def test_axis_aligned_box_covers_exactly_the_numpy_slice():
    # The documented rule: whole-number corners [x1,y1,x2,y2] cover image[y1:y2, x1:x2].
    m = _full([[10, 20], [30, 20], [30, 40], [10, 40]])
    want = np.zeros((H, W), bool)
    want[20:40, 10:30] = True
    assert (m == want).all()


def test_self_intersecting_outline_is_filled_by_nonzero_winding():
    # A pentagram {5/2} winds twice around its centre (geometry, from memory): the centre pentagon
    # is inside by the non-zero rule (an even-odd rule would leave it open).
    ang = -np.pi / 2 + np.arange(5) * 4 * np.pi / 5
    pts = np.stack([160 + 80 * np.cos(ang), 120 + 80 * np.sin(ang)], 1)
    m = _full(pts)
    assert m[120, 160] and m[118:123, 157:163].all()
    assert not m[5, 5] and not m[235, 160]


def test_polygon_mask_clips_to_the_frame_and_is_empty_when_outside():
    rect, crop = polygon_mask(np.array([[300.0, 200.0], [320.0, 200.0], [320.0, 240.0]]), W, H)
    assert rect[2] <= W and rect[3] <= H and crop.any()


# ---------------------------------------------------------------- parsing errors

GOOD_REGION = {"points": [[10, 10], [50, 10], [50, 40]]}

BAD_PLANS = {
    # name: (plan bytes, the field path the one-line error must name)
    "extra_key": (plan_bytes(colour="red"), "plan: colour:"),
    "wrong_version": (json.dumps({"version": "redact-plan/2"}).encode(), "plan: version:"),
    "no_version": (b'{"keep_visible": []}', "plan: version:"),
    "keep_not_list": (plan_bytes(keep_visible=3, track_sheet=SHEET), "plan: keep_visible:"),
    "keep_id_string": (plan_bytes(keep_visible=["3"], track_sheet=SHEET), "plan: keep_visible[0]:"),
    "keep_id_bool": (plan_bytes(keep_visible=[1, True], track_sheet=SHEET), "plan: keep_visible[1]:"),
    "keep_id_twice": (plan_bytes(keep_visible=[2, 2], track_sheet=SHEET), "plan: keep_visible[1]:"),
    "keep_without_sheet": (plan_bytes(keep_visible=[1]), "plan: track_sheet:"),
    "sheet_bad_hash": (plan_bytes(track_sheet={"source_sha256": "xyz", "settings_sha256": "b" * 64}),
                       "plan: track_sheet.source_sha256:"),
    "two_points": (plan_bytes(regions=[{"points": [[1, 1], [20, 20]]}]), "plan: regions[0].points:"),
    "point_outside": (plan_bytes(regions=[GOOD_REGION, {"points": [[1, 1], [400, 20], [5, 30]]}]),
                      "plan: regions[1].points[1]:"),
    "point_not_pair": (plan_bytes(regions=[{"points": [[1, 1], [20], [5, 30]]}]), "plan: regions[0].points[1]:"),
    "region_extra_key": (plan_bytes(regions=[{**GOOD_REGION, "colour": "red"}]), "plan: regions[0].colour:"),
    "region_not_object": (plan_bytes(regions=[[1, 2, 3]]), "plan: regions[0]:"),
    "region_too_thin": (plan_bytes(regions=[{"points": [[10, 10], [40, 10.2], [10, 10.1]]}]), "plan: regions[0]:"),
    "seconds_beyond_clip": (plan_bytes(boxes=[{"box": [1, 1, 9, 9], "seconds": [1.5, 2.5]}]),
                            "plan: boxes[0].seconds[1]:"),
    "frames_beyond_clip": (plan_bytes(obscure_frames=[{"frames": [10, 50]}]), "plan: obscure_frames[0].frames[1]:"),
    "frames_not_whole": (plan_bytes(obscure_frames=[{"frames": [1.5, 3]}]), "plan: obscure_frames[0].frames[0]:"),
    "negative_seconds": (plan_bytes(obscure_frames=[{"seconds": [-1, 1]}]), "plan: obscure_frames[0].seconds[0]:"),
    "start_after_end": (plan_bytes(regions=[{**GOOD_REGION, "frames": [9, 3]}]), "plan: regions[0].frames:"),
    "both_ranges": (plan_bytes(boxes=[{"box": [1, 1, 9, 9], "frames": [0, 1], "seconds": [0, 1]}]),
                    "plan: boxes[0]:"),
    "whole_without_range": (plan_bytes(obscure_frames=[{"label": "x"}]), "plan: obscure_frames[0].frames:"),
    "box_inverted": (plan_bytes(boxes=[{"box": [30, 1, 9, 9]}]), "plan: boxes[0].box:"),
    "box_three_numbers": (plan_bytes(boxes=[{"box": [30, 1, 9]}]), "plan: boxes[0].box:"),
    "threshold_string": (plan_bytes(overlap_threshold="high"), "plan: overlap_threshold:"),
    "threshold_too_big": (plan_bytes(overlap_threshold=1.5), "plan: overlap_threshold:"),
    "note_number": (plan_bytes(note=5), "plan: note:"),
    "label_number": (plan_bytes(regions=[{**GOOD_REGION, "label": 7}]), "plan: regions[0].label:"),
    "regions_object": (plan_bytes(regions={"a": 1}), "plan: regions:"),
    # RFC 7493 (I-JSON) rules, enforced by redact.jsonio: duplicate names, NaN.
    "duplicate_key": (b'{"version":"redact-plan/1","note":"a","note":"b"}', "plan: duplicate key 'note'"),
    "nan": (b'{"version":"redact-plan/1","overlap_threshold":NaN}', "plan: NaN is not allowed"),
    "top_level_list": (b"[1,2]", "plan: expected a JSON object"),
}


@pytest.mark.parametrize("name", sorted(BAD_PLANS))
def test_bad_plans_get_one_line_errors_naming_the_field(name):
    data, field = BAD_PLANS[name]
    with pytest.raises(PlanError) as e:
        parse_plan(data, INFO)
    msg = str(e.value)
    assert msg.startswith(field), msg
    assert "\n" not in msg


def test_unknown_track_id_names_the_entry_and_the_ids_the_video_has():
    data = plan_bytes(keep_visible=[2, 7], track_sheet=SHEET)
    with pytest.raises(PlanError) as e:
        parse_plan(data, INFO, known_track_ids={1, 2, 3, 4, 5})
    assert str(e.value) == "plan: keep_visible[1]: unknown track id 7 (the video has tracks 1-5)"
    plan = parse_plan(data, INFO)  # ids unknown at load: checked at the end of the run
    with pytest.raises(PlanError, match=r"^plan: keep_visible\[1\]: unknown track id 7 \(the video has tracks 1-3, 9\)$"):
        plan.check_end([1, 2, 3, 9], SHEET["source_sha256"])
    with pytest.raises(PlanError, match=r"^plan: track_sheet.source_sha256: "):
        plan.check_end([1, 2, 7], "c" * 64)
    plan.check_end([1, 2, 7], SHEET["source_sha256"])  # passes


def test_plan_over_the_size_limit_is_refused(tmp_path):
    p = tmp_path / "big.json"
    p.write_bytes(plan_bytes(note="x" * (PLAN_SIZE_LIMIT + 10)))
    with pytest.raises(PlanError, match="limit"):
        load_plan(p, INFO)
    with pytest.raises(PlanError, match="no such file"):
        load_plan(tmp_path / "missing.json", INFO)


def test_sha256_is_of_the_exact_file_bytes(tmp_path):
    data = plan_bytes(note="request 17", regions=[GOOD_REGION]) + b"\n"
    p = tmp_path / "plan.json"
    p.write_bytes(data)
    plan = load_plan(p, INFO)
    # hashlib (FIPS 180-4) over the bytes as written, not a re-serialisation
    assert plan.sha256 == hashlib.sha256(data).hexdigest()
    rec = plan.record()
    assert rec["sha256"] == plan.sha256 and rec["bytes"] == len(data) and rec["note"] == "request 17"
    assert rec["regions"] == [GOOD_REGION] and rec["overlap_threshold"] == DEFAULT_OVERLAP_IOU
    json.dumps(rec, allow_nan=False)  # plain JSON values


def test_format_ids():
    assert format_ids([5, 1, 2, 3, 9, 10]) == "1-3, 5, 9-10"
    assert format_ids([4]) == "4" and format_ids([]) == ""


# ---------------------------------------------------------------- per-frame decisions

def test_kept_person_is_visible_apart_and_obscured_when_overlapping():
    plan = parse_plan(plan_bytes(keep_visible=[2], track_sheet=SHEET), INFO)
    # IoU arithmetic: [0,0,10,10] vs [9,0,19,10]: 10/190 = 0.053 < 0.1 → kept visible.
    d = plan.decide(0, 0.0, tracks([1, 2], [[9, 0, 19, 10], [0, 0, 10, 10]]), (H, W, 3))
    assert d.kept_ids == (2,) and d.overlap_ids == () and d.obscure.ids.tolist() == [1]
    assert d.mask is None and not d.whole_frame
    # [0,0,10,10] vs [5,0,15,10]: 50/150 = 0.333 > 0.1 → kept person obscured too, frame to review.
    d = plan.decide(1, 0.04, tracks([1, 2], [[5, 0, 15, 10], [0, 0, 10, 10]]), (H, W, 3))
    assert d.kept_ids == () and d.overlap_ids == (2,) and d.obscure.ids.tolist() == [1, 2]
    # Alone in the frame: visible.
    d = plan.decide(2, 0.08, tracks([2], [[0, 0, 10, 10]]), (H, W, 3))
    assert d.kept_ids == (2,) and len(d.obscure) == 0
    # Not in the frame: everyone obscured.
    d = plan.decide(3, 0.12, tracks([1, 3], [[0, 0, 10, 10], [50, 50, 60, 60]]), (H, W, 3))
    assert d.kept_ids == () and d.obscure.ids.tolist() == [1, 3]
    a = plan.applied()["keep_visible"]["keep_visible[0]"]
    assert a["id"] == 2 and a["visible"] == {"frames": 2, "ranges": [[0, 0], [2, 2]]}
    assert a["obscured_for_overlap"] == {"frames": 1, "ranges": [[1, 1]]}


def test_overlap_threshold_is_strictly_more_than_and_settable():
    # [0,0,10,10] vs [5,0,15,10]: IoU exactly 1/3; "more than" 1/3 is not reached.
    plan = parse_plan(plan_bytes(keep_visible=[2], track_sheet=SHEET, overlap_threshold=0.5), INFO)
    d = plan.decide(0, 0.0, tracks([1, 2], [[5, 0, 15, 10], [0, 0, 10, 10]]), (H, W, 3))
    assert d.kept_ids == (2,)
    plan0 = parse_plan(plan_bytes(keep_visible=[2], track_sheet=SHEET, overlap_threshold=0), INFO)
    d = plan0.decide(0, 0.0, tracks([1, 2], [[9, 0, 19, 10], [0, 0, 10, 10]]), (H, W, 3))
    assert d.overlap_ids == (2,)
    d = plan0.decide(1, 0.04, tracks([1, 2], [[10, 0, 19, 10], [0, 0, 10, 10]]), (H, W, 3))  # touching: IoU 0
    assert d.kept_ids == (2,)


def test_kept_person_with_an_unusable_box_is_obscured():
    plan = parse_plan(plan_bytes(keep_visible=[2], track_sheet=SHEET), INFO)
    for ids, boxes in (([2], [[np.nan, 0, 10, 10]]), ([1, 2], [[100, 100, 110, 110], [np.nan, 0, 10, 10]])):
        d = plan.decide(0, 0.0, tracks(ids, boxes), (H, W, 3))
        assert 2 in d.obscure.ids.tolist() and d.kept_ids == ()


def test_regions_boxes_and_whole_frames_apply_in_their_ranges():
    plan = parse_plan(plan_bytes(
        keep_visible=[1], track_sheet=SHEET,
        regions=[{"points": [[10, 10], [40, 10], [40, 30], [10, 30]], "frames": [3, 5], "label": "screen"},
                 {"points": [[100, 100], [120, 100], [120, 110]]}],
        boxes=[{"box": [200, 50, 210, 60], "seconds": [0.2, 0.28]}],
        obscure_frames=[{"frames": [8, 8]}, {"seconds": [0.36, 0.4]}]), INFO)
    seen = {}
    for f in range(12):
        t = f / 25  # 25 fps: 0.2 s is frame 5, 0.28 s frame 7, 0.36 s frame 9, 0.4 s frame 10
        d = plan.decide(f, t, tracks([1], [[250, 150, 270, 200]]), (H, W, 3))
        seen[f] = d
        assert d.mask is not None and d.mask.shape == (H, W)
        assert d.mask[105, 115]  # the region without range: every frame
        assert d.mask[20, 20] == (3 <= f <= 5), f
        assert d.mask[55, 205] == (5 <= f <= 7), f
        assert d.whole_frame == (f in (8, 9, 10)), f
        assert d.kept_ids == (() if f in (8, 9, 10) else (1,)), f
    assert not seen[0].mask[45, 20] and not seen[4].mask[9, 20]  # just outside the first region
    a = plan.applied()
    assert a["regions[0]"] == {"label": "screen", "frames": 3, "ranges": [[3, 5]]}
    assert a["regions[1]"]["frames"] == 12 and a["boxes[0]"]["ranges"] == [[5, 7]]
    assert a["obscure_frames[0]"]["ranges"] == [[8, 8]] and a["obscure_frames[1]"]["ranges"] == [[9, 10]]
    plan.decide(11, 11 / 25, tracks([], []), (H, W, 3))  # the same frame again is not counted twice
    assert plan.applied()["regions[1]"]["frames"] == 12


def test_decide_refuses_another_frame_size():
    plan = parse_plan(plan_bytes(), INFO)
    with pytest.raises(RedactError):
        plan.decide(0, 0.0, tracks([], []), (480, 640, 3))


def test_settings_fingerprint_guards_the_track_ids():
    s = ProcessSettings()
    fp = ids_fingerprint(s, "0" * 64)
    # What changes ids changes the fingerprint; how people are drawn does not.
    assert ids_fingerprint(ProcessSettings(pose=PoseSettings(score_threshold=0.4)), "0" * 64) != fp
    assert ids_fingerprint(ProcessSettings(coast_seconds=3.0), "0" * 64) != fp
    assert ids_fingerprint(s, "1" * 64) != fp
    assert ids_fingerprint(ProcessSettings(render=RenderSettings(style="blur"), crf=30), "0" * 64) == fp
    plan = parse_plan(plan_bytes(keep_visible=[1], track_sheet={"source_sha256": "a" * 64, "settings_sha256": fp}),
                      INFO)
    plan.check_settings(s, "0" * 64)
    with pytest.raises(PlanError, match=r"^plan: track_sheet.settings_sha256: "):
        plan.check_settings(ProcessSettings(coast_seconds=3.0), "0" * 64)


# ---------------------------------------------------------------- end to end (wired by the pipeline)

SEED = bytes(range(32))
MIN_SIDE = 16  # as tests/test_process.py: slivers at the frame edge are not checked
KEEP_ACTOR, OTHER_ACTOR = 0, 1  # astronaut (public domain, NASA) is the requester; camera man (CC0) is not
REGION = [[130, 4], [200, 4], [214, 34], [118, 34]]  # a trapezoid on the wall, frames 6-14
REGION_FRAMES = (6, 14)
WHOLE_FRAMES = (47, 48)


def _decode(path: Path) -> list[np.ndarray]:
    import av

    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(c.streams.video[0])]


def _iou(a, b) -> float:
    ix = max(0.0, min(a[2], b[2]) - max(a[0], b[0]))
    iy = max(0.0, min(a[3], b[3]) - max(a[1], b[1]))
    u = (a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - ix * iy
    return ix * iy / u if u > 0 else 0.0


def _others_masks(rows, keep_id: int | None, shape) -> dict[int, np.ndarray]:
    """Per frame, where the run obscured people other than the kept one, recomputed from its own
    rows: each other track's region (redact.redaction.regions.person_region, margin from its frames since
    the last observation by TrackerConfig.margin_after), and for a new track its first region at
    the widest margin over the look-back frames before it (redact.pipeline's look-back).
    Dilated by 3 px for codec bleed. Used only to choose which pixels to compare; keep_id None
    gives everyone's regions."""
    from redact.pipeline import ProcessSettings
    from redact.redaction.regions import RegionSettings, person_region
    from redact.vision.track import TrackerConfig

    cfg, rs = TrackerConfig(), RegionSettings()
    back = int(round(ProcessSettings().lookback_seconds * 25)) + 1
    masks = {r.frame: np.zeros(shape[:2], bool) for r in rows}
    unseen: dict[int, int] = {}
    seen: set[int] = set()
    for r in rows:
        for k, tid in enumerate(r.tracks.ids.tolist()):
            unseen[tid] = 0 if r.tracks.observed[k] else unseen.get(tid, 0) + 1
            if tid == keep_id:
                continue
            reg = person_region(r.tracks.boxes[k], r.tracks.keypoints[k], cfg.margin_after(unseen[tid]), shape, rs)
            if not reg.empty:
                masks[r.frame] |= reg.mask(shape)
            if tid not in seen:
                first = person_region(r.tracks.boxes[k], r.tracks.keypoints[k], cfg.max_margin, shape, rs)
                for f in range(max(0, r.frame - back), r.frame):
                    if not first.empty:
                        masks[f] |= first.mask(shape)
            seen.add(tid)
    kernel = np.ones((7, 7), np.uint8)
    return {f: cv2.dilate(m.astype(np.uint8), kernel).astype(bool) for f, m in masks.items()}


def _edge_probes(poly, d: float):
    """(inside, outside) points d pixels from each edge's midpoint along its normal."""
    p = np.asarray(poly, float)
    c = p.mean(axis=0)
    out = []
    for a, b in zip(p, np.roll(p, -1, axis=0)):
        m = (a + b) / 2
        n = np.array([b[1] - a[1], a[0] - b[0]])
        n /= np.linalg.norm(n)
        if np.dot(c - m, n) < 0:
            n = -n  # make n point inwards
        out.append((m + d * n, m - d * n))
    return out


def _grey(img, x, y) -> float:
    return float(img[int(y), int(x)].astype(float).mean())


def _write_plan(clip, sheet_dir: Path) -> tuple[Path, int, list[dict]]:
    """A track sheet and a plan keeping the astronaut visible, as an operator would write them."""
    from redact.tracksheet import make_track_sheet
    from redact.vision.models import get_model

    sheet = make_track_sheet(clip.path, sheet_dir / "sheet")
    template = json.loads((sheet_dir / "sheet" / "plan-template.json").read_text())
    # The template binds the ids to this file (hashlib, FIPS 180-4) and to these settings.
    assert template["track_sheet"]["source_sha256"] == hashlib.sha256(clip.path.read_bytes()).hexdigest()
    assert template["track_sheet"]["settings_sha256"] == ids_fingerprint(ProcessSettings(), get_model().sha256)

    # The requester's id, as the operator would pick it from the sheet: the track whose pictured
    # boxes match the astronaut's exact rectangle best.
    def match(item) -> float:
        return float(np.mean([_iou(sh["box"], clip.truths[sh["frame"]].person_rects[KEEP_ACTOR])
                              for sh in item["shown"]]))
    best = max(sheet, key=match)
    assert match(best) > 0.5
    plan_doc = {**template, "note": "test request", "keep_visible": [best["id"]],
                "regions": [{"label": "notice board", "points": REGION, "frames": list(REGION_FRAMES)}],
                "boxes": [{"label": "poster", "box": [10, 4, 80, 30], "seconds": [1.6, 1.96]}],
                "obscure_frames": [{"frames": list(WHOLE_FRAMES)}]}
    plan_path = sheet_dir / "plan.json"
    plan_path.write_text(json.dumps(plan_doc, indent=1))
    return plan_path, best["id"], sheet


@pytest.fixture(scope="module")
def planned(crossing_clip, tmp_path_factory):
    """The crossing clip processed with a plan that keeps the astronaut visible (wired by the pipeline)."""
    from redact.pipeline import process_video
    from redact.provenance.signing import Signer

    d = tmp_path_factory.mktemp("planned")
    plan_path, keep_id, _ = _write_plan(crossing_clip, d)
    result = process_video(crossing_clip.path, d / "out", Signer.from_seed(SEED), ProcessSettings(), plan=plan_path)
    return crossing_clip, plan_path, keep_id, result


def test_end_to_end_keep_one_person_visible(planned):
    from skimage.metrics import structural_similarity

    from redact.skeletons.rows import read_rows

    clip, plan_path, keep_id, result = planned
    src, out = _decode(clip.path), _decode(result.video)
    assert len(out) == len(src) == len(clip.truths)
    with open(result.package / "skeletons.jsonl", "rb") as f:
        rows = list(read_rows(f))
    review = json.loads((result.package / "review.json").read_text())

    def flagged_for_overlap(frame: int) -> bool:
        return any(r["frames"][0] <= frame <= r["frames"][1] and "kept_overlap" in r["reasons"]
                   for r in review["ranges"])

    def ssim(a, b) -> float:
        return structural_similarity(a.astype(float).mean(axis=2), b.astype(float).mean(axis=2),
                                     data_range=255, win_size=7)

    # Frames where the kept track's box overlaps another track's box (from the run's own rows;
    # boxes are rounded to 0.01 px there, hence the 0.01 band around the threshold).
    overlap, apart = set(), set()
    for row in rows:
        ids = row.tracks.ids.tolist()
        if keep_id not in ids:
            continue
        k = ids.index(keep_id)
        m = max((_iou(row.tracks.boxes[k], row.tracks.boxes[j]) for j in range(len(ids)) if j != k), default=0.0)
        if m > DEFAULT_OVERLAP_IOU + 0.01:
            overlap.add(row.frame)
        elif m < DEFAULT_OVERLAP_IOU - 0.01:
            apart.add(row.frame)
    crossing = {t.frame for t in clip.truths if t.visible.all()
                and _iou(t.person_rects[0], t.person_rects[1]) > 0.3}
    assert crossing and crossing <= overlap, (sorted(crossing), sorted(overlap))

    others = _others_masks(rows, keep_id, src[0].shape)
    face_checked, failures = 0, []
    for i, truth in enumerate(clip.truths):
        if WHOLE_FRAMES[0] <= i <= WHOLE_FRAMES[1]:
            assert out[i].std() < 2.0, f"frame {i} should be obscured entirely"
            continue
        # 1. Every other person is obscured in every frame (SSIM < 0.35, as tests/test_process.py).
        if truth.visible[OTHER_ACTOR]:
            for rect in (truth.face_rects[OTHER_ACTOR], truth.person_rects[OTHER_ACTOR]):
                x0, y0, x1, y1 = (int(v) for v in rect)
                if x1 - x0 >= MIN_SIDE and y1 - y0 >= MIN_SIDE:
                    s = ssim(src[i][y0:y1, x0:x1], out[i][y0:y1, x0:x1])
                    if s >= 0.35:
                        failures.append(f"frame {i}: other person visible (SSIM {s:.2f})")
        # 2. The kept person's face equals the source where they are apart from everyone.
        fx0, fy0, fx1, fy1 = (int(v) for v in truth.face_rects[KEEP_ACTOR])
        if not truth.visible[KEEP_ACTOR] or fx1 - fx0 < MIN_SIDE or fy1 - fy0 < MIN_SIDE:
            continue
        if i in overlap:  # 3. crossing: the kept person is obscured too, and the frame is flagged
            if ssim(src[i][fy0:fy1, fx0:fx1], out[i][fy0:fy1, fx0:fx1]) >= 0.35:
                failures.append(f"frame {i}: kept person visible while overlapping")
            if not flagged_for_overlap(i):
                failures.append(f"frame {i}: overlap not flagged for review")
            continue
        # Pixels of the kept face that no other person's region reaches (most of it, when apart).
        free = ~others[i][fy0:fy1, fx0:fx1]
        if i in apart and not truth.partial[KEEP_ACTOR] and free.mean() >= 0.5:
            d = np.abs(src[i][fy0:fy1, fx0:fx1].astype(float) - out[i][fy0:fy1, fx0:fx1].astype(float)).mean(axis=2)
            diff = float(d[free].mean())
            if diff >= 6:  # codec tolerance: two H.264 generations at crf 20
                failures.append(f"frame {i}: kept face differs from the source (mean abs diff {diff:.1f})")
            face_checked += 1
    assert not failures, failures
    # At least a quarter second of frames compared. Fewer than the ~15 apart frames: when the crossing
    # starts, a partly hidden person found there for the first time is obscured by the look-back
    # over the 0.5 s before, where they were first seen, and that region can cover the kept face.
    assert face_checked >= 6, face_checked

    # 4. The polygon is obscured exactly in its frame range: probes 3 px inside / outside each edge.
    people = _others_masks(rows, None, src[0].shape)
    probed = {"in_range_inside": 0, "in_range_outside": 0, "out_of_range_inside": 0}
    for i in range(len(clip.truths)):
        if WHOLE_FRAMES[0] <= i <= WHOLE_FRAMES[1]:
            continue
        active = REGION_FRAMES[0] <= i <= REGION_FRAMES[1]
        for inside, outside in _edge_probes(REGION, 3.0):
            for (x, y), is_inside in ((inside, True), (outside, False)):
                if not (0 <= x < W and 0 <= y < H) or people[i][int(y), int(x)]:
                    continue
                s, o = _grey(src[i], x, y), _grey(out[i], x, y)
                if is_inside and active:
                    assert abs(o - 128) <= 12 and abs(s - 128) > 30, (i, x, y, s, o)  # the fill grey
                    probed["in_range_inside"] += 1
                elif is_inside:
                    assert abs(o - s) <= 12, (i, x, y, s, o)
                    probed["out_of_range_inside"] += 1
                elif active:
                    assert abs(o - s) <= 12, (i, x, y, s, o)
                    probed["in_range_outside"] += 1
    assert min(probed.values()) >= 5, probed

    # 5. The plan's hash and what it applied are in the log and the signed predicate.
    data = plan_path.read_bytes()
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    entries = [e for e in log if e["kind"] == "plan"]
    assert len(entries) == 1 and entries[0]["sha256"] == hashlib.sha256(data).hexdigest()
    applied = entries[0]["applied"]
    assert applied["regions[0]"]["frames"] == REGION_FRAMES[1] - REGION_FRAMES[0] + 1
    assert applied["obscure_frames[0]"]["ranges"] == [list(WHOLE_FRAMES)]
    assert applied["boxes[0]"]["ranges"] == [[40, 49]]  # 1.6-1.96 s at 25 fps
    env = json.loads((result.package / "envelope.json").read_text())
    statement = json.loads(base64.b64decode(env["payload"]))
    assert statement["predicate"]["plan"]["sha256"] == hashlib.sha256(data).hexdigest()


def test_rerun_with_the_same_plan_is_reproducible(planned, tmp_path):
    """Issue 8: the same source, plan, model and settings give byte-identical skeleton rows and the
    same redacted-region log (log entries compared without their time and chain fields)."""
    from redact.pipeline import process_video
    from redact.provenance.signing import Signer

    clip, plan_path, _, first = planned
    again = process_video(clip.path, tmp_path / "again", Signer.from_seed(SEED), ProcessSettings(), plan=plan_path)
    for name in ("skeletons.jsonl", "tracks.json", "review.json", "quality.jsonl", "frames.sha256"):
        assert (again.package / name).read_bytes() == (first.package / name).read_bytes(), name

    def entries(result):
        log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
        return {e["kind"]: {k: v for k, v in e.items() if k not in ("seq", "prev", "time")}
                for e in log if e["kind"] in ("plan", "redaction", "review")}
    a, b = entries(first), entries(again)
    assert set(a) == {"plan", "redaction", "review"} and a == b


def test_decisions_and_counters_are_deterministic():
    data = plan_bytes(keep_visible=[2], track_sheet=SHEET, regions=[{**GOOD_REGION, "seconds": [0.1, 0.3]}])
    runs = []
    for _ in range(2):
        plan = parse_plan(data, INFO)
        masks = []
        for f in range(20):
            off = 3 * f
            d = plan.decide(f, f / 25, tracks([1, 2], [[off, 0, off + 10, 10], [30, 0, 40, 10]]), (H, W, 3))
            masks.append((d.kept_ids, d.overlap_ids, None if d.mask is None else d.mask.tobytes()))
        runs.append((masks, json.dumps(plan.applied(), sort_keys=True), json.dumps(plan.record(), sort_keys=True)))
    assert runs[0] == runs[1]
    applied = json.loads(runs[0][1])
    # Track 1 ([3f, 0, 3f+10, 10]) passes track 2 ([30, 0, 40, 10]); overlap width w gives
    # IoU = 10w / (200 - 10w) = w / (20 - w) > 0.1 for w >= 2, i.e. frames 8-12 (w = 4, 7, 10, 7, 4).
    assert applied["keep_visible"]["keep_visible[0]"]["obscured_for_overlap"] == {"frames": 5, "ranges": [[8, 12]]}
    assert applied["keep_visible"]["keep_visible[0]"]["visible"] == {"frames": 15, "ranges": [[0, 7], [13, 19]]}
    # 0.1-0.3 s at 25 fps: frames 3 (0.12 s) to 7 (0.28 s).
    assert applied["regions[0]"]["ranges"] == [[3, 7]]


# ---------------------------------------------------------------- bad plans through the CLI

def _valid_sheet(clip_path: Path) -> dict:
    from redact.vision.models import get_model

    return {"source_sha256": hashlib.sha256(clip_path.read_bytes()).hexdigest(),
            "settings_sha256": ids_fingerprint(ProcessSettings(), get_model().sha256)}


CLI_BAD = {
    "unknown_track_id": (lambda s: {"keep_visible": [99], "track_sheet": s}, "plan: keep_visible[0]: unknown track id 99"),
    "two_point_polygon": (lambda s: {"regions": [{"points": [[1, 1], [9, 9]]}]}, "plan: regions[0].points:"),
    "time_beyond_clip": (lambda s: {"obscure_frames": [{"seconds": [1.0, 9.0]}]}, "plan: obscure_frames[0].seconds[1]:"),
    "wrong_type": (lambda s: {"keep_visible": "1", "track_sheet": s}, "plan: keep_visible:"),
    "extra_key": (lambda s: {"keep_visible": [], "people": [1]}, "plan: people:"),
    "other_settings": (lambda s: {"keep_visible": [1], "track_sheet": {**s, "settings_sha256": "0" * 64}},
                       "plan: track_sheet.settings_sha256:"),
}


@pytest.mark.parametrize("name", sorted(CLI_BAD))
def test_cli_bad_plan_is_one_line_error_and_no_output(crossing_clip, tmp_path, key, name):
    from redact.cli import main

    make, field = CLI_BAD[name]
    plan_path = tmp_path / "plan.json"
    plan_path.write_text(json.dumps({"version": PLAN_VERSION, **make(_valid_sheet(crossing_clip.path))}))
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key),
                                  "--plan", str(plan_path), "--quiet"])
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: " + field), r.stderr
    assert "Traceback" not in r.output
    assert (sorted(p.name for p in out.iterdir()) if out.exists() else []) == []
