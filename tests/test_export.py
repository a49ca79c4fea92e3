"""Research export (redact.skeletons.export, `redact export`) of hand-built skeleton packages.

Outside references: numpy.load (PyPI `numpy`) reads the .npz; pycocotools (PyPI `pycocotools`)
COCO + loadRes reads the COCO keypoint results against the ground-truth file, and COCOeval scores
them; the COCO-17 keypoint names and the 19 1-based skeleton links are written out below as
published in the COCO keypoint format (cocodataset.org; person_keypoints annotations).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from redact.errors import InputError, OutputError, PackageError
from redact.skeletons import privacy as pv
from redact.skeletons.export import default_gt_path, export_package
from redact.skeletons.rows import encode_row, read_rows
from redact.vision.records import Tracks

# As published (cocodataset.org keypoint format), typed here independently of redact.vision.skeleton.
COCO_NAMES = ["nose", "left_eye", "right_eye", "left_ear", "right_ear", "left_shoulder", "right_shoulder",
              "left_elbow", "right_elbow", "left_wrist", "right_wrist", "left_hip", "right_hip",
              "left_knee", "right_knee", "left_ankle", "right_ankle"]
COCO_SKELETON = [[16, 14], [14, 12], [17, 15], [15, 13], [12, 13], [6, 12], [7, 13], [6, 7], [6, 8], [7, 9],
                 [8, 10], [9, 11], [2, 3], [1, 2], [1, 3], [2, 4], [3, 5], [4, 6], [5, 7]]


def make_rows(seed=0):
    """Frames 0..9: track 4 in every frame, track 9 in frames 3..7, frame 5 a fault row, frame 8 empty.
    Returns (lines, truth) with truth[(frame, id)] = (keypoints [17,3] as written, box, score)."""
    rng = np.random.default_rng(seed)
    lines, truth = [], {}
    for f in range(10):
        ids = [] if f == 8 else [4] + ([9] if 3 <= f <= 7 else [])
        # values as the rows write them: 2 decimals for x, y and 3 for confidence
        kps = np.concatenate([np.round(rng.uniform(20, 600, (len(ids), 17, 2)), 2),
                              np.round(rng.uniform(0, 1, (len(ids), 17, 1)), 3)], -1)
        boxes = np.round(np.concatenate([kps[..., :2].min(1), kps[..., :2].max(1)], -1), 2).reshape(-1, 4)
        scores = np.round(rng.uniform(0.3, 1, len(ids)), 3)
        tr = Tracks(np.array(ids, np.int64), boxes, scores, kps.reshape(-1, 17, 3), np.ones(len(ids), bool),
                    np.zeros(len(ids), np.int32))
        lines.append(encode_row(f, 512 * f, f / 25, tr, status="fault" if f == 5 else "ok"))
        for i, tid in enumerate(ids):
            truth[(f, tid)] = (kps[i], boxes[i], scores[i])
    return lines, truth


@pytest.fixture()
def package(tmp_path):
    lines, truth = make_rows()
    pkg = tmp_path / "package"
    pkg.mkdir()
    (pkg / "skeletons.jsonl").write_bytes(b"".join(lines))
    return pkg, truth


def test_npz_loads_back_and_matches(package, tmp_path):
    pkg, truth = package
    out = tmp_path / "tracks.npz"
    s = export_package(pkg, "npz", out)
    assert s["tracks"] == 2 and s["rows"] == 10 and s["person_frames"] == len(truth)
    with np.load(out) as z:  # allow_pickle=False (numpy's default): plain arrays only
        assert z["track_ids"].tolist() == [4, 9]
        assert z["frames"].tolist() == list(range(10))
        assert z["fault"].tolist() == [f == 5 for f in range(10)]
        assert str(z["units"]) == "pixels"
        for tid, frames in ((4, [f for f in range(10) if f != 8]), (9, [3, 4, 5, 6, 7])):
            kp = z[f"track_{tid}_keypoints"]
            assert kp.shape == (len(frames), 17, 3) and kp.dtype == np.float32
            assert z[f"track_{tid}_frames"].dtype == np.int64
            assert z[f"track_{tid}_frames"].tolist() == frames
            np.testing.assert_allclose(z[f"track_{tid}_times"], np.array(frames) / 25, atol=1e-9)
            for t, f in enumerate(frames):
                want_kp, want_box, want_score = truth[(f, tid)]
                np.testing.assert_array_equal(kp[t], want_kp.astype(np.float32))
                np.testing.assert_array_equal(z[f"track_{tid}_boxes"][t], want_box.astype(np.float32))
                assert z[f"track_{tid}_scores"][t] == np.float32(want_score)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["package", "tracks.npz"]  # no temp left


def test_coco_results_load_with_pycocotools(package, tmp_path):
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    pkg, truth = package
    out = tmp_path / "results.json"
    s = export_package(pkg, "coco", out, frame_size=(640, 480))
    gt_path = default_gt_path(out)
    assert gt_path.name == "results.gt.json" and s["results"] == len(truth)
    gt = COCO(str(gt_path))
    assert gt.loadCats(1)[0]["keypoints"] == COCO_NAMES
    assert gt.loadCats(1)[0]["skeleton"] == COCO_SKELETON
    assert sorted(gt.getImgIds()) == list(range(10))
    assert gt.loadImgs(3)[0]["width"] == 640 and gt.loadImgs(3)[0]["height"] == 480
    dt = gt.loadRes(str(out))
    anns = dt.loadAnns(dt.getAnnIds())
    assert len(anns) == len(truth)
    for a in anns:
        want_kp, _, want_score = truth[(a["image_id"], a["track_id"])]
        assert a["category_id"] == 1 and len(a["keypoints"]) == 51
        # the numbers as written in the package's rows (2 decimals x, y; 3 decimals confidence)
        np.testing.assert_allclose(a["keypoints"], want_kp.reshape(-1), rtol=0, atol=1e-9)
        assert a["score"] == pytest.approx(want_score, abs=1e-9)

    # Scored against a ground truth made of the same poses, COCOeval finds a perfect match (AP = 1).
    full = json.loads(gt_path.read_text())
    full["annotations"] = []
    for n, ((f, _tid), (kp, _, _)) in enumerate(sorted(truth.items()), 1):
        x0, y0 = kp[:, :2].min(0)
        x1, y1 = kp[:, :2].max(0)
        full["annotations"].append({
            "id": n, "image_id": f, "category_id": 1, "iscrowd": 0, "num_keypoints": 17,
            "area": float((x1 - x0) * (y1 - y0)), "bbox": [float(x0), float(y0), float(x1 - x0), float(y1 - y0)],
            "keypoints": [v for x, y, _ in kp.tolist() for v in (x, y, 2)]})
    gt2 = COCO()
    gt2.dataset = full
    gt2.createIndex()
    ev = COCOeval(gt2, gt2.loadRes(str(out)), "keypoints")
    ev.evaluate()
    ev.accumulate()
    ev.summarize()
    assert ev.stats[0] == pytest.approx(1.0)


def test_coco_refuses_non_pixel_units_and_npz_keeps_them(tmp_path):
    lines, _ = make_rows()
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    rows = list(read_rows(lines))
    opts = pv.PrivacyOptions(coordinates="track", keep_position=True)
    (pkg / "skeletons.jsonl").write_bytes(b"".join(pv.apply_privacy(rows, opts, (640, 480), 25.0,
                                                                     pv.scan_tracks(rows))))
    with pytest.raises(InputError, match="units"):
        export_package(pkg, "coco", tmp_path / "r.json")
    assert not (tmp_path / "r.json").exists() and not (tmp_path / "r.gt.json").exists()
    assert not any(p.name.startswith(".") for p in tmp_path.iterdir())
    export_package(pkg, "npz", tmp_path / "t.npz")
    with np.load(tmp_path / "t.npz") as z:
        assert str(z["units"]) == "track"
        assert z["track_9_centre"].shape == (5, 2)
        assert 0 <= z["track_9_centre"].min() and z["track_9_centre"].max() <= 1


def test_bad_inputs(package, tmp_path):
    pkg, _ = package
    out = tmp_path / "t.npz"
    out.write_bytes(b"x")
    with pytest.raises(OutputError, match="exists"):
        export_package(pkg, "npz", out)
    assert out.read_bytes() == b"x"
    export_package(pkg, "npz", out, force=True)
    with pytest.raises(OutputError, match="inside the package"):
        export_package(pkg, "npz", pkg / "t.npz")
    with pytest.raises(InputError, match="format"):
        export_package(pkg, "csv", tmp_path / "x.csv")
    with pytest.raises(InputError, match="not a package"):
        export_package(tmp_path / "nope", "npz", tmp_path / "y.npz")
    (pkg / "skeletons.jsonl").write_bytes(b'{"frame":0,"pts":0,"t":0.000000,"status":"ok","people":[]}\n'
                                          b'{"frame":0,"pts":0,"t":0.000000,"status":"ok","people":[]}\n')
    with pytest.raises(PackageError, match="line 2"):
        export_package(pkg, "npz", tmp_path / "z.npz")


def test_cli_export(package, tmp_path):
    from redact.cli import main

    pkg, truth = package
    runner = CliRunner()
    help_ = runner.invoke(main, ["export", "--help"])
    assert help_.exit_code == 0 and "pseudonymised" in help_.output and "Example" in help_.output
    out = tmp_path / "r.json"
    res = runner.invoke(main, ["export", str(pkg), "--format", "coco", "--out", str(out), "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)  # exactly one JSON document on stdout
    assert doc["results"] == len(truth) and doc["gt_out"].endswith("r.gt.json")
    assert "pseudonymised" in res.stderr
    again = runner.invoke(main, ["export", str(pkg), "--format", "coco", "--out", str(out)])
    assert again.exit_code == 2 and again.stderr.startswith("error:") and "Traceback" not in again.output
    npz = runner.invoke(main, ["export", str(pkg), "--format", "npz", "--out", str(tmp_path / "t.npz")])
    assert npz.exit_code == 0 and "2 tracks" in npz.stdout
    bad = runner.invoke(main, ["export", str(pkg), "--format", "npz", "--out", str(tmp_path / "u.npz"),
                               "--frame-size", "640x480"])
    assert bad.exit_code == 2 and "--frame-size" in bad.stderr
