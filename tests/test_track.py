"""Tracker lifecycle on synthetic people whose true paths are known exactly (built here)."""

from __future__ import annotations

import numpy as np
import pytest

from redact.errors import InputError
from redact.vision.records import Poses, Tracks
from redact.vision.skeleton import NUM_KEYPOINTS
from redact.vision.track import Tracker, TrackerConfig

FPS = 25.0
W, H = 60.0, 160.0  # synthetic person box size (px)
_REL = np.array([[0, -.42], [-.05, -.44], [.05, -.44], [-.1, -.42], [.1, -.42], [-.3, -.28], [.3, -.28],
                 [-.38, -.08], [.38, -.08], [-.4, .08], [.4, .08], [-.18, .05], [.18, .05],
                 [-.18, .25], [.18, .25], [-.18, .45], [.18, .45]])


def person(cx: float, cy: float, jitter: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Box [4] and keypoints [17,3] of a synthetic person centred at (cx, cy)."""
    box = np.array([cx - W / 2, cy - H / 2, cx + W / 2, cy + H / 2])
    kp = np.zeros((NUM_KEYPOINTS, 3))
    kp[:, 0] = cx + _REL[:, 0] * W
    kp[:, 1] = cy + _REL[:, 1] * H
    kp[:, 2] = 0.9
    if jitter is not None:
        kp[:, :2] += jitter
    return box, kp


def poses_of(people: list[tuple[np.ndarray, np.ndarray]]) -> Poses:
    if not people:
        return Poses.empty()
    return Poses(np.stack([b for b, _ in people]), np.full(len(people), 0.8), np.stack([k for _, k in people]))


def centre(box: np.ndarray) -> np.ndarray:
    return np.array([(box[0] + box[2]) / 2, (box[1] + box[3]) / 2])


@pytest.mark.parametrize("cost", ["iou", "oks", "iou+oks"])
def test_two_people_crossing_keep_their_ids(cost):
    # A walks right, B walks left 4 px lower, 15 px per frame; they pass each other between frames
    # 13 and 14, where nearest-previous-box matching swaps them (checked by disabling the
    # prediction), so only the constant-velocity motion model keeps the ids apart.
    tr = Tracker(TrackerConfig(cost=cost))
    who: dict[int, set[str]] = {}
    for f in range(40):
        a = (100 + 15 * f, 200.0)
        b = (500 - 15 * f, 204.0)
        out = tr.update(poses_of([person(*a), person(*b)]), f / FPS)
        assert len(out) == 2 and out.observed.all()
        for tid, box in zip(out.ids, out.boxes):
            c = centre(box)
            name = "A" if np.linalg.norm(c - a) < np.linalg.norm(c - b) else "B"
            who.setdefault(int(tid), set()).add(name)
    assert sorted(who) == [1, 2]
    assert all(len(v) == 1 for v in who.values()), who
    assert {s.id for s in tr.summary()} == {1, 2}


@pytest.mark.parametrize("k", [1, 5, 12])
def test_dropout_keeps_id_and_predicts_along_motion(k):
    cfg = TrackerConfig(max_coast_frames=12, base_margin=0.1, margin_growth=0.05, max_margin=0.5)
    tr = Tracker(cfg)
    vx, vy = 6.0, -2.0  # px per frame
    drop = range(10, 10 + k)
    margins = []
    last_kp = last_c = None  # set in every observed frame; frames 0-9 are always observed
    for f in range(30):
        truth = (80 + vx * f, 300 + vy * f)
        out = tr.update(poses_of([] if f in drop else [person(*truth)]), f / FPS)
        assert list(out.ids) == [1]
        if f in drop:
            assert not out.observed[0]
            assert out.misses[0] == f - 9
            # Constant velocity: the prediction follows the true path exactly.
            np.testing.assert_allclose(centre(out.boxes[0]), truth, atol=1e-3)
            # Keypoints move with the box: the last drawn (smoothed) keypoints shifted by the box motion.
            np.testing.assert_allclose(out.keypoints[0, :, :2], last_kp + (np.array(truth) - last_c), atol=1e-3)
            margins.append(float(out.margin[0]))
        else:
            assert out.observed[0] and out.misses[0] == 0
            assert out.margin[0] == pytest.approx(cfg.base_margin)
            last_kp, last_c = out.keypoints[0, :, :2].astype(np.float64), np.array(truth)
    expect = [min(0.1 + 0.05 * i, 0.5) for i in range(1, k + 1)]
    np.testing.assert_allclose(margins, expect, atol=1e-6)
    assert all(b >= a for a, b in zip(margins, margins[1:])) and margins[0] > cfg.base_margin
    (s,) = tr.summary()
    assert (s.frames_observed, s.frames_predicted, s.first_frame, s.last_frame) == (30 - k, k, 0, 29)


def test_track_retires_after_max_coast_frames():
    tr = Tracker(TrackerConfig(max_coast_frames=4))
    reported = []
    for f in range(12):
        people = [person(100 + 3 * f, 200)] if f < 5 else []
        reported.append(len(tr.update(poses_of(people), f / FPS)))
    # Observed in frames 0-4, coasting in 5-8 (4 frames), gone from frame 9 on.
    assert reported == [1] * 9 + [0] * 3
    (s,) = tr.summary()
    assert (s.frames_observed, s.frames_predicted, s.last_frame) == (5, 4, 8)
    assert s.last_t == pytest.approx(8 / FPS)


def test_zero_coast_drops_immediately():
    tr = Tracker(TrackerConfig(max_coast_frames=0))
    assert len(tr.update(poses_of([person(100, 100)]), 0.0)) == 1
    assert len(tr.update(poses_of([]), 0.04)) == 0


def test_frames_without_detection_do_not_retire_and_still_move():
    # poses=None (detection stride): reported as predicted with growing margin, no retirement.
    tr = Tracker(TrackerConfig(max_coast_frames=2))
    for f in range(3):
        tr.update(poses_of([person(100 + 4 * f, 200)]), f / FPS)
    for f in range(3, 13):
        out = tr.update(None, f / FPS)
        assert list(out.ids) == [1] and not out.observed[0] and out.misses[0] == f - 2
        np.testing.assert_allclose(centre(out.boxes[0]), (100 + 4 * f, 200), atol=1e-3)
    out = tr.update(poses_of([person(100 + 4 * 13, 200)]), 13 / FPS)
    assert list(out.ids) == [1] and out.observed[0]


def test_new_detection_is_reported_from_its_first_frame():
    tr = Tracker()
    tr.update(poses_of([person(100, 200)]), 0.0)
    out = tr.update(poses_of([person(102, 200), person(400, 200)]), 1 / FPS)
    assert list(out.ids) == [1, 2] and out.observed.all()
    np.testing.assert_allclose(out.boxes[1], person(400, 200)[0])


def test_variable_frame_rate_uses_seconds():
    # 100 px/s to the right, sampled at irregular times; coasting position uses real time.
    tr = Tracker(TrackerConfig(velocity_smoothing=1.0))
    ts = [0.0, 0.03, 0.08, 0.10, 0.17]
    for t in ts:
        tr.update(poses_of([person(50 + 100 * t, 200)]), t)
    out = tr.update(poses_of([]), 0.5)
    np.testing.assert_allclose(centre(out.boxes[0]), (100.0, 200.0), atol=1e-3)


def run(seed: int, config: TrackerConfig) -> list[Tracks]:
    rng = np.random.default_rng(seed)
    tr = Tracker(config)
    out = []
    for f in range(60):
        people = []
        for j in range(4):
            if rng.random() < 0.15:
                continue
            c = (80 + 90 * j + 3 * f * (-1) ** j + rng.normal(0, 2), 240 + rng.normal(0, 2))
            people.append(person(*c, jitter=rng.normal(0, 1.5, (NUM_KEYPOINTS, 2))))
        out.append(tr.update(poses_of(people), f / FPS))
    return out


def test_reruns_give_identical_output_and_ids_are_per_instance():
    a = run(5, TrackerConfig())
    b = run(5, TrackerConfig())  # a second instance: ids start again at 1 (no global counter)
    assert len(a) == len(b) == 60
    for x, y in zip(a, b):
        for field in ("ids", "boxes", "scores", "keypoints", "observed", "misses", "margin"):
            np.testing.assert_array_equal(getattr(x, field), getattr(y, field))
    assert min(int(t.ids.min()) for t in a if len(t)) == 1
    assert all(list(t.ids) == sorted(t.ids) for t in a)


def test_keypoints_are_smoothed_for_drawing():
    rng = np.random.default_rng(2)
    tr = Tracker(TrackerConfig(one_euro_min_cutoff=1.0, one_euro_beta=0.0))
    raw, drawn = [], []
    for f in range(150):
        b, k = person(200, 200, jitter=rng.normal(0, 2.0, (NUM_KEYPOINTS, 2)))
        out = tr.update(poses_of([(b, k)]), f / FPS)
        raw.append(k[:, :2])
        drawn.append(out.keypoints[0, :, :2])
        np.testing.assert_array_equal(out.boxes[0], b.astype(np.float32))  # boxes are never smoothed
    assert np.std(np.array(drawn)[30:], axis=0).mean() < 0.5 * np.std(np.array(raw)[30:], axis=0).mean()


def test_bad_time_frame_and_values_raise():
    tr = Tracker()
    tr.update(poses_of([person(100, 100)]), 1.0)
    with pytest.raises(InputError, match="increase"):
        tr.update(None, 1.0)
    with pytest.raises(InputError, match="frame index"):
        tr.update(None, 2.0, frame=0)
    b, k = person(100, 100)
    b[0] = np.nan
    with pytest.raises(InputError, match="NaN"):
        tr.update(poses_of([(b, k)]), 3.0)
    # A failed update changes nothing: the caller can go on with the same frame as "not detected".
    out = tr.update(None, 3.0)
    assert list(out.ids) == [1] and not out.observed[0] and out.misses[0] == 1
    with pytest.raises(InputError):
        TrackerConfig(cost="nope")
    with pytest.raises(InputError):
        TrackerConfig(base_margin=0.9, max_margin=0.5)


def test_explicit_frame_indices_go_into_summary():
    tr = Tracker()
    tr.update(poses_of([person(100, 100)]), 0.4, frame=10)
    tr.update(None, 0.44, frame=11)
    tr.update(poses_of([person(101, 100)]), 0.48, frame=12)
    (s,) = tr.summary()
    assert (s.first_frame, s.last_frame, s.frames_observed, s.frames_predicted) == (10, 12, 2, 1)
    assert (s.first_t, s.last_t) == (0.4, 0.48)


@pytest.mark.parametrize("established_hits, expected_id", [(3, 1), (1, 2)])
def test_established_track_is_matched_before_a_new_neighbour(established_hits, expected_id):
    """DeepSORT's matching order (Wojke et al. 2017): A walks right 10 px a frame; at frame 10 a
    duplicate box appears 12 px behind A (a new track, id 2); at frame 11 A's only detection lands
    exactly on the duplicate. Matched jointly (established_hits=1) the newcomer wins on cost; with
    established tracks first, A keeps id 1."""
    tr = Tracker(TrackerConfig(established_hits=established_hits))
    for f in range(10):
        tr.update(poses_of([person(100 + 10 * f, 200)]), f / FPS)
    out = tr.update(poses_of([person(200, 200), person(188, 200)]), 10 / FPS)
    assert out.ids.tolist() == [1, 2]
    out = tr.update(poses_of([person(188, 200)]), 11 / FPS)
    assert out.ids[out.observed].tolist() == [expected_id]


@pytest.mark.parametrize("misses, fallback_iou, same_id", [(8, 0.3, True), (8, 0.0, False), (1, 0.3, False)])
def test_lost_track_is_continued_by_overlap_only_after_a_long_loss(misses, fallback_iou, same_id):
    """SORT's IoU association (Bewley et al. 2016, IOU_min 0.3) as the last round: a person back
    where the track predicts, with a pose the gated pose cost rejects (keypoints scrambled by up to
    80 px), continues the track after 8 missed detections, but not after 1 (fallback_after=3),
    and never with the round off."""
    tr = Tracker(TrackerConfig(fallback_iou=fallback_iou))
    for f in range(10):
        tr.update(poses_of([person(200, 200)]), f / FPS)
    for f in range(10, 10 + misses):
        tr.update(Poses.empty(), f / FPS)
    scrambled = np.random.default_rng(0).uniform(-80, 80, (NUM_KEYPOINTS, 2))
    t = (10 + misses) / FPS
    box, kp = person(204, 200, jitter=scrambled)
    probe = Tracker(TrackerConfig(fallback_iou=0.0))  # the pose cost alone rejects this pair
    probe.update(poses_of([person(200, 200)]), 0.0)
    assert probe.update(poses_of([(box, kp)]), 1 / FPS).ids.tolist() == [1, 2]
    out = tr.update(poses_of([(box, kp)]), t)
    observed = out.ids[out.observed].tolist()
    assert (observed == [1]) == same_id, observed
