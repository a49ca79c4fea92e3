"""Skeleton de-identification options (redact.skeletons.privacy) on small hand-built skeleton rows.

Outside references: the COCO keypoint format and OKS sigmas (cocodataset.org, pycocotools
cocoeval.py), pycocotools' COCOeval.computeOks (PyPI `pycocotools`), scipy.stats.kstest (PyPI
`scipy`) for the shape of the noise. Rows are built with redact.skeletons.rows.encode_row, never through
the video pipeline.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from redact.errors import InputError
from redact.skeletons import privacy as pv
from redact.skeletons.rows import decode_row, encode_row, read_rows
from redact.vision.records import Tracks
from redact.vision.skeleton import HEAD_KEYPOINTS, SIGMAS, oks

W, H = 640, 480

# A standing person facing the camera, pixel coordinates (x, y) in COCO-17 order; values are
# ours (hand-drawn, deliberately non-canonical proportions: long forearms, short thighs).
STANDING = np.array([
    [320, 100], [328, 92], [312, 92], [338, 96], [302, 96],          # head
    [350, 140], [290, 140], [365, 190], [275, 190], [372, 255], [268, 255],  # arms
    [340, 240], [300, 240], [343, 300], [297, 300], [345, 380], [295, 380],  # legs
], np.float64)


def pose(xy: np.ndarray, conf: float = 0.9) -> np.ndarray:
    """[17,2] → [17,3] with a constant confidence."""
    return np.concatenate([xy, np.full((17, 1), conf)], axis=1)


def box_of(kp: np.ndarray) -> np.ndarray:
    return np.array([kp[:, 0].min() - 5, kp[:, 1].min() - 5, kp[:, 0].max() + 5, kp[:, 1].max() + 5])


def tracks(ids, kps, observed=None) -> Tracks:
    kps = np.asarray(kps, np.float64).reshape(-1, 17, 3)
    m = len(ids)
    return Tracks(np.array(ids, np.int64), np.array([box_of(k) for k in kps]).reshape(m, 4),
                  np.full(m, 0.9), kps, np.ones(m, bool) if observed is None else np.array(observed),
                  np.zeros(m, np.int32))


def walking_lines(n_frames=20, ids=(3, 8), fps=25.0, t0=1000.0, pts0=90000, seed=0) -> list[bytes]:
    """Two people walking right, with small per-frame jitter; rows via encode_row (2-decimal pixels)."""
    rng = np.random.default_rng(seed)
    lines = []
    for f in range(n_frames):
        kps = []
        for j, _ in enumerate(ids):
            xy = STANDING * (1.0 - 0.3 * j) + np.array([4.0 * f + 60 * j, 20 * j]) + rng.normal(0, 1.5, (17, 2))
            kps.append(pose(xy))
        lines.append(encode_row(f, pts0 + 3600 * f, t0 + f / fps, tracks(list(ids), kps)))
    return lines


def rows_of(lines):
    return list(read_rows(lines))


def run(lines, options, fps=25.0):
    rows = rows_of(lines)
    scan = pv.scan_tracks(rows) if options.needs_scan else None
    r = pv.apply_privacy(rows, options, (W, H), fps, scan)
    out = list(r)
    assert r.finished
    return out, r.summary


def bone_lengths_and_units(kp):
    v = pv.bone_vectors(kp)
    length = np.linalg.norm(v, axis=-1)
    return length, v / length[..., None]


# ---- normalising proportions ----------------------------------------------------------------

@pytest.mark.parametrize("body_height", [170.0, None])
def test_normalised_bones_take_canonical_length_and_keep_direction(body_height):
    rng = np.random.default_rng(1)
    kps = np.stack([pose(STANDING * s + rng.normal(0, 8, (17, 2))) for s in (0.5, 1.0, 1.7)])
    new, degenerate = pv.normalise_proportions(kps, body_height)
    assert degenerate == 0
    old_len, old_dir = bone_lengths_and_units(kps)
    new_len, new_dir = bone_lengths_and_units(new)
    frac = np.array([f for _, _, f in pv.CANONICAL_BONES])
    h = np.full(3, body_height) if body_height else old_len.sum(-1) / frac.sum()
    np.testing.assert_allclose(new_len, frac[None, :] * h[:, None], rtol=0, atol=1e-6)
    np.testing.assert_allclose(new_dir, old_dir, rtol=0, atol=1e-9)  # every joint angle unchanged
    # the root (mid-hip) stays; confidences are untouched
    np.testing.assert_allclose((new[:, 11, :2] + new[:, 12, :2]) / 2, (kps[:, 11, :2] + kps[:, 12, :2]) / 2, atol=1e-9)
    np.testing.assert_array_equal(new[..., 2], kps[..., 2])
    # the hand-drawn pose had other proportions, so something moved
    assert np.abs(new - kps).max() > 1.0


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(-200, 200, allow_nan=False), min_size=34, max_size=34), st.floats(20, 500))
def test_normalisation_property_random_poses(offsets, height):
    kp = pose(STANDING + np.array(offsets).reshape(17, 2))[None]
    length, direction = bone_lengths_and_units(kp)
    if length.min() < 1e-3:  # a zero-length bone has no direction; covered by the next test
        return
    new, _ = pv.normalise_proportions(kp, height)
    new_len, new_dir = bone_lengths_and_units(new)
    frac = np.array([f for _, _, f in pv.CANONICAL_BONES])
    np.testing.assert_allclose(new_len[0], frac * height, atol=1e-6)
    np.testing.assert_allclose(new_dir, direction, atol=1e-6)


def test_zero_length_bone_is_counted_not_invented():
    xy = STANDING.copy()
    xy[9] = xy[7]  # left wrist on the left elbow
    new, degenerate = pv.normalise_proportions(pose(xy)[None], 170.0)
    assert degenerate == 1
    np.testing.assert_allclose(new[0, 9, :2], new[0, 7, :2], atol=1e-12)


def test_normalising_is_idempotent_and_oks_matches_pycocotools():
    """OKS with the published COCO sigmas (cocodataset.org; pycocotools cocoeval.py), ours
    cross-checked against pycocotools' COCOeval.computeOks on the same poses."""
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    kp = pose(STANDING)[None]
    once, _ = pv.normalise_proportions(kp)
    twice, _ = pv.normalise_proportions(once)
    np.testing.assert_allclose(twice, once, atol=1e-9)
    b = box_of(STANDING)
    area = float((b[2] - b[0]) * (b[3] - b[1]))
    ours = oks(once[0], kp[0], area)
    assert oks(twice[0], once[0], area) == pytest.approx(1.0, abs=1e-12)
    assert 0.0 < ours < 1.0  # proportions changed, the pose is still the same pose

    gt = COCO()
    gt.dataset = {
        "images": [{"id": 1, "width": W, "height": H}],
        "categories": [{"id": 1, "name": "person"}],
        "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "iscrowd": 0, "area": area,
                         "bbox": [b[0], b[1], b[2] - b[0], b[3] - b[1]], "num_keypoints": 17,
                         "keypoints": [v for x, y, _ in kp[0] for v in (float(x), float(y), 2)]}],
    }
    gt.createIndex()
    dt = gt.loadRes([{"image_id": 1, "category_id": 1, "score": 1.0,
                      "keypoints": [float(v) for v in once[0].reshape(-1)]}])
    ev = COCOeval(gt, dt, "keypoints")
    np.testing.assert_allclose(ev.params.kpt_oks_sigmas, SIGMAS)  # the same published sigmas
    ev._prepare()
    theirs = ev.computeOks(1, 1)
    assert theirs.shape == (1, 1)
    assert theirs[0, 0] == pytest.approx(ours, abs=1e-12)


def test_normalised_rows_through_the_stream():
    out, summary = run(walking_lines(5), pv.PrivacyOptions(normalise_proportions=True, body_height=150.0))
    frac = np.array([f for _, _, f in pv.CANONICAL_BONES])
    for line in out:
        kp = decode_row(line).tracks.keypoints
        length, _ = bone_lengths_and_units(kp)
        # rows keep 2 decimals: each end moves at most 0.005·√2 px, so a length by at most 0.0142 px
        np.testing.assert_allclose(length, np.broadcast_to(frac * 150.0, length.shape), atol=0.015)
    assert summary["bones_rescaled"] == 5 * 2 * len(pv.CANONICAL_BONES)
    # the detector's box (which gives the height away) is replaced by the keypoints' box
    tr = decode_row(out[0]).tracks
    np.testing.assert_allclose(tr.boxes[0, :2], tr.keypoints[0, :, :2].min(0), atol=0.011)


# ---- the other options ----------------------------------------------------------------------

def test_default_options_change_nothing():
    lines = walking_lines(6)
    out, summary = run(lines, pv.PrivacyOptions())
    assert out == lines  # byte-identical rows: every option is off by default
    assert summary["rows_in"] == summary["rows_out"] == 6


def test_dropped_keypoints_are_zero_and_the_rest_unchanged():
    lines = walking_lines(4)
    out, summary = run(lines, pv.PrivacyOptions(drop_keypoints=("head", "left_wrist")))
    dropped = list(HEAD_KEYPOINTS) + [9]
    for a, b in zip(lines, out):
        before, after = decode_row(a).tracks.keypoints, decode_row(b).tracks.keypoints
        assert np.all(after[:, dropped] == 0.0)
        keep = [i for i in range(17) if i not in dropped]
        np.testing.assert_array_equal(after[:, keep], before[:, keep])
    assert summary["keypoints_dropped"] == 4 * 2 * 6


def test_frame_relative_coordinates():
    lines = walking_lines(4)
    out, _ = run(lines, pv.PrivacyOptions(coordinates="frame"))
    for a, b in zip(lines, out):
        assert json.loads(b)["units"] == "frame"
        before, after = decode_row(a).tracks, decode_row(b).tracks
        xy = before.keypoints[..., :2]
        inside = (xy[..., 0] >= 0) & (xy[..., 0] <= W) & (xy[..., 1] >= 0) & (xy[..., 1] <= H)
        assert inside.all()
        assert after.keypoints[..., :2].min() >= 0.0 and after.keypoints[..., :2].max() <= 1.0
        np.testing.assert_allclose(after.keypoints[..., 0], xy[..., 0] / W, atol=0.6e-5)
        np.testing.assert_allclose(after.keypoints[..., 1], xy[..., 1] / H, atol=0.6e-5)
        np.testing.assert_allclose(after.boxes, before.boxes / [W, H, W, H], atol=0.6e-5)


def test_track_coordinates_remove_position_and_size():
    """The same walk, drawn twice as large elsewhere in the frame, gives the same track-unit rows."""
    small = STANDING * 0.5
    lines = []
    for f in range(6):
        a = pose(small + [10 + 3 * f, 40])
        b = pose(small * 2.0 + [200 + 6 * f, 10])  # same body, twice the size, other place
        lines.append(encode_row(f, f, f / 25, tracks([1, 2], [a, b])))
    out, _ = run(lines, pv.PrivacyOptions(coordinates="track", keep_position=True))
    for line in out:
        tr, ex = decode_row(line).tracks, pv.decode_row_extras(line)
        assert ex.units == "track"
        np.testing.assert_allclose(tr.keypoints[0], tr.keypoints[1], atol=1.5e-4)
        # the kept position is the box centre in frame fractions
        src = decode_row(lines[decode_row(line).frame]).tracks
        centre = np.stack([(src.boxes[:, 0] + src.boxes[:, 2]) / 2 / W, (src.boxes[:, 1] + src.boxes[:, 3]) / 2 / H], 1)
        np.testing.assert_allclose(ex.centres, centre, atol=1e-5)
    out2, _ = run(lines, pv.PrivacyOptions(coordinates="track"))
    assert all(pv.decode_row_extras(x).centres is None for x in out2)


def test_rate_reduction_keeps_the_stated_frames():
    lines = walking_lines(20)
    out, s = run(lines, pv.PrivacyOptions(keep_every=4))
    assert [decode_row(x).frame for x in out] == [0, 4, 8, 12, 16]
    assert s["rows_dropped_by_rate"] == 15
    # 25 fps → 5 fps keeps every fifth frame
    out, _ = run(lines, pv.PrivacyOptions(target_fps=5.0), fps=25.0)
    assert [decode_row(x).frame for x in out] == [0, 5, 10, 15]
    # 30 fps → at most 12 fps on an even grid: 30 / 2 = 15 is too fast, 30 / 3 = 10 is not (worked by
    # hand), so every third frame; slots of 1/12 s would have kept 0, 3, 5, 8, … (uneven steps)
    out, s = run(lines, pv.PrivacyOptions(target_fps=12.0), fps=30.0)
    assert [decode_row(x).frame for x in out] == [0, 3, 6, 9, 12, 15, 18]
    assert s["rate_step"] == 3 and s["fps_out"] == 10.0
    # the case: 25 fps → 10 fps keeps every third frame (8.33 fps), every time step 0.12 s
    out, s = run(lines, pv.PrivacyOptions(target_fps=10.0), fps=25.0)
    assert [decode_row(x).frame for x in out] == [0, 3, 6, 9, 12, 15, 18]
    assert np.allclose(np.diff([decode_row(x).t for x in out]), 3 / 25) and s["fps_out"] == pytest.approx(25 / 3)
    # exact ratios stay exact: 25 → 12.5 every second frame; 29.97 (NTSC, 30000/1001) → 10 every third
    assert pv.rate_step(25.0, 12.5) == 2 and pv.rate_step(30000 / 1001, 10.0) == 3 and pv.rate_step(25.0, 25.0) == 1


def test_precision():
    out, _ = run(walking_lines(2), pv.PrivacyOptions(decimals=0))
    for p in json.loads(out[0])["people"]:
        assert all(float(x) == round(float(x)) for x, y, c in p["kp"])
        assert "." not in json.dumps([k[:2] for k in p["kp"]])


def test_noise_has_the_stated_standard_deviation():
    """n = 300 frames × 2 people × 17 keypoints × 2 axes = 20 400 draws. The sample standard
    deviation has a standard error of about σ/√(2n) = 0.5 % (normal theory); we allow 4 %
    (8 standard errors). Rounding to 0.01 px adds 0.01²/12 px² of variance, negligible at σ = 2."""
    from scipy import stats

    lines = walking_lines(300)
    sigma = 2.0
    for seed in (7, None):
        out, s = run(lines, pv.PrivacyOptions(noise_px=sigma, seed=seed))
        before = np.stack([decode_row(x).tracks.keypoints for x in lines])
        after = np.stack([decode_row(x).tracks.keypoints for x in out])
        d = (after[..., :2] - before[..., :2]).astype(np.float64).reshape(-1)
        assert d.size == 20400 and s["noise_values"] == 300 * 2 * (17 * 2 + 4)
        assert abs(d.std() / sigma - 1.0) < 0.04
        assert abs(d.mean()) < 8 * sigma / math.sqrt(d.size)
        np.testing.assert_array_equal(after[..., 2], before[..., 2])  # confidences untouched
        if seed is not None:  # deterministic: the Kolmogorov–Smirnov test against N(0, σ) (scipy)
            assert stats.kstest(d / sigma, "norm").pvalue > 1e-3
    # the same seed reproduces, another seed does not
    a, _ = run(lines[:5], pv.PrivacyOptions(noise_px=sigma, seed=1))
    b, _ = run(lines[:5], pv.PrivacyOptions(noise_px=sigma, seed=1))
    c, _ = run(lines[:5], pv.PrivacyOptions(noise_px=sigma, seed=2))
    assert a == b and a != c


def test_new_ids_are_a_bijection_and_differ_between_exports():
    lines = []
    for f in range(12):  # ids 1..4 enter and leave at different times
        ids = [i for i in (1, 2, 3, 4) if i <= f // 3 + 1 and not (i == 1 and f > 8)]
        lines.append(encode_row(f, f, f / 25, tracks(ids, [pose(STANDING + 10 * i) for i in ids])))
    maps = []
    for _ in range(2):
        out, s = run(lines, pv.PrivacyOptions(new_ids=True))
        mapping: dict[int, int] = {}
        for a, b in zip(lines, out):
            old, new = decode_row(a).tracks, decode_row(b).tracks
            # the row order of people is kept, and so are their keypoints
            np.testing.assert_array_equal(old.keypoints, new.keypoints)
            for o, n in zip(old.ids.tolist(), new.ids.tolist()):
                assert mapping.setdefault(o, n) == n  # a function: one new id per old id
                assert 1 <= n <= pv.ID_SPACE
        assert sorted(mapping) == [1, 2, 3, 4]
        assert len(set(mapping.values())) == 4  # injective, hence a bijection onto its image
        assert s["tracks_renamed"] == 4
        maps.append(mapping)
    assert maps[0] != maps[1]  # unseeded: a fresh secure mapping per export


def test_relative_time():
    lines = walking_lines(5, t0=1000.0, pts0=90000)
    out, _ = run(lines, pv.PrivacyOptions(relative_time=True, keep_every=2))
    rows = [decode_row(x) for x in out]
    assert [r.t for r in rows] == pytest.approx([0.0, 0.08, 0.16])
    assert [r.pts for r in rows] == [0, 7200, 14400]


def test_every_output_row_reads_back_with_decode_row():
    opts = pv.PrivacyOptions(drop_keypoints="head", normalise_proportions=True, coordinates="track",
                             keep_position=True, keep_every=2, noise_px=1.0, new_ids=True, relative_time=True)
    out, s = run(walking_lines(10), opts)
    assert len(list(read_rows(out))) == 5 == s["rows_out"]


def test_encode_row_units_matches_encode_row_for_pixels():
    tr = tracks([5], [pose(STANDING)])
    assert pv.encode_row_units(3, 7, 0.12, tr, "ok", 2, "pixels") == encode_row(3, 7, 0.12, tr)


# ---- options, record, validation ------------------------------------------------------------

def test_record_names_every_option_and_never_the_seed():
    opts = pv.PrivacyOptions(drop_keypoints=[0, "left_eye"], noise_px=1.5, seed=12345, normalise_proportions=True)
    rec = opts.to_record()
    names = {f.name for f in dataclasses.fields(pv.PrivacyOptions)} - {"seed"}
    renamed = {"body_height": "body_height_px"}
    assert {renamed.get(n, n) for n in names} <= set(rec)
    assert rec["seeded"] is True and "12345" not in json.dumps(rec) and "12345" not in repr(opts)
    assert rec["drop_keypoints"] == ["nose", "left_eye"]
    assert rec["canonical_bones"][0] == ["mid_hip", "left_hip", 0.0955]
    assert pv.PrivacyOptions().to_record()["seeded"] is False


@pytest.mark.parametrize("kwargs, name", [
    ({"coordinates": "metres"}, "coordinates"),
    ({"keep_position": True}, "keep_position"),
    ({"keep_every": 0}, "keep_every"),
    ({"keep_every": 2, "target_fps": 5.0}, "target_fps"),
    ({"target_fps": -1.0}, "target_fps"),
    ({"noise_px": -0.1}, "noise_px"),
    ({"noise_px": float("nan")}, "noise_px"),
    ({"drop_keypoints": "head,left_tail"}, "drop_keypoints"),
    ({"drop_keypoints": [17]}, "drop_keypoints"),
    ({"decimals": 12}, "decimals"),
    ({"body_height": 170.0}, "body_height"),
    ({"seed": -3}, "seed"),
])
def test_invalid_options_name_the_option(kwargs, name):
    with pytest.raises(InputError, match=name):
        pv.PrivacyOptions(**kwargs)


def test_from_cli_and_stream_preconditions():
    opts = pv.PrivacyOptions.from_cli(drop_keypoints="head, right_ankle,9", coordinates="frame")
    assert opts.drop_keypoints == (0, 1, 2, 3, 4, 9, 16)
    rows = rows_of(walking_lines(2))
    with pytest.raises(InputError, match="frame_size"):
        pv.apply_privacy(rows, opts, None, 25.0)
    with pytest.raises(InputError, match="target_fps"):
        pv.apply_privacy(rows, pv.PrivacyOptions(target_fps=50.0), (W, H), 25.0)
    with pytest.raises(InputError, match="scan_tracks"):
        pv.apply_privacy(rows, pv.PrivacyOptions(coordinates="track"), (W, H), 25.0)


def test_apply_privacy_file_two_passes_and_atomic(tmp_path):
    src, dst = tmp_path / "skeletons.jsonl", tmp_path / "out.jsonl"
    src.write_bytes(b"".join(walking_lines(6)))
    s = pv.apply_privacy_file(src, dst, pv.PrivacyOptions(coordinates="track"), (W, H), 25.0)
    assert s["rows_out"] == 6 and len(list(read_rows(dst.read_bytes().splitlines(keepends=True)))) == 6
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.jsonl", "skeletons.jsonl"]
    src.write_bytes(b'{"frame":0}\n')
    with pytest.raises(InputError, match="line 1"):
        pv.apply_privacy_file(src, tmp_path / "bad.jsonl", pv.PrivacyOptions(), (W, H), 25.0)
    assert not any(p.name.startswith(".") or p.name == "bad.jsonl" for p in tmp_path.iterdir())


def test_new_ids_stay_injective_when_the_random_source_repeats():
    """Collisions in 1..2^31-1 are rare, so force them: a source that repeats must be redrawn."""
    lines = [encode_row(f, f, f / 25, tracks([1, 2, 3], [pose(STANDING)] * 3)) for f in range(3)]
    r = pv.apply_privacy(rows_of(lines), pv.PrivacyOptions(new_ids=True), (W, H), 25.0)
    r._new_id = iter([5, 5, 5, 6, 6, 7]).__next__  # test hook on the run's id source
    ids = [decode_row(x).tracks.ids.tolist() for x in r]
    assert ids == [[5, 6, 7]] * 3
