"""Research exports that describe themselves, keep detections apart from predictions, and load in the
tools researchers use.

Outside references: NumPy's loader with allow_pickle=False (plain arrays only) reads the .npz;
PyAV/FFmpeg reads the source's frame size and rate and hashlib its SHA-256; pycocotools
(COCO.loadRes) reads the COCO results; py-motmetrics (motmetrics.io.loadtxt, MOTChallenge
"mot15-2D" layout of Milan et al., arXiv 1603.00831 §3.3, and its CLEAR-MOT / IDF1 metrics) reads
the MOT file; numpy.loadtxt reads the trajectory CSVs, whose columns are checked against the
documented layout (frame, then x, y of the 17 COCO-17 keypoints in the published order). People in
the clip come from scikit-image's stills (astronaut(): public domain, NASA; camera(): CC0, Lav
Varshney), pasted at known rectangles (tests/conftest.py).
"""

from __future__ import annotations

import base64
import hashlib
import json

import av
import numpy as np
import pytest
from click.testing import CliRunner

if not hasattr(np, "asfarray"):  # NumPy 2 removed np.asfarray, which motmetrics 1.4.0 still calls
    np.asfarray = lambda a, dtype=float: np.asarray(a, dtype=dtype)

import motmetrics as mm

from redact.cli import main
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.skeletons.export import FORMATS, export_package
from redact.vision.pose import PoseSettings

SEED = bytes(range(32))
# As published (cocodataset.org keypoint format), typed here independently of redact.vision.skeleton.
COCO_NAMES = ["nose", "left_eye", "right_eye", "left_ear", "right_ear", "left_shoulder", "right_shoulder",
              "left_elbow", "right_elbow", "left_wrist", "right_wrist", "left_hip", "right_hip",
              "left_knee", "right_knee", "left_ankle", "right_ankle"]


@pytest.fixture(scope="module")
def made(tmp_path_factory, crossing_clip):
    """A signed package of the crossing clip (two people, one through a dim stretch: the tracker
    predicts positions there), its public key and the rows as the standard json module reads them."""
    root = tmp_path_factory.mktemp("export-formats")
    signer = Signer.from_seed(SEED)
    result = process_video(crossing_clip.path, root / "out", signer,
                           ProcessSettings(pose=PoseSettings(input_long_side=320)))
    rows = [json.loads(line) for line in (result.package / "skeletons.jsonl").read_text().splitlines()]
    people = [(r["frame"], p) for r in rows for p in r["people"]]
    assert any(p["state"] == "predicted" for _, p in people), "the fixture needs predicted positions"
    return {"package": result.package, "key": signer.public_key, "rows": rows, "people": people,
            "source": crossing_clip.path, "root": root}


def test_npz_describes_itself_without_pickles(made, tmp_path):
    out = tmp_path / "tracks.npz"
    export_package(made["package"], "npz", out, trusted_keys=[made["key"]])
    with av.open(str(made["source"])) as c:
        stream = c.streams.video[0]
        width, height, rate = stream.width, stream.height, float(stream.average_rate)
    envelope = json.loads((made["package"] / "envelope.json").read_text())
    statement_sha = hashlib.sha256(base64.b64decode(envelope["payload"])).hexdigest()
    with np.load(out, allow_pickle=False) as z:  # plain arrays only, or this raises
        assert z["keypoint_names"].tolist() == COCO_NAMES
        assert (int(z["frame_width"]), int(z["frame_height"])) == (width, height)
        assert float(z["fps"]) == pytest.approx(rate)
        assert str(z["coordinate_units"]) == "pixels" and "top-left" in str(z["coordinate_system"])
        assert str(z["source_sha256"]) == hashlib.sha256(made["source"].read_bytes()).hexdigest()
        assert str(z["statement_sha256"]) == statement_sha
        assert bool(z["verified"]) is True
        meta = json.loads(str(z["metadata"]))  # the same description as one JSON object
        assert meta["frame_width"] == width and meta["statement_sha256"] == statement_sha
        assert meta["keypoint_names"] == COCO_NAMES and meta["coordinate_units"] == "pixels"
        # every row is kept, each flagged observed or predicted
        kept = sum(len(z[f"track_{t}_observed"]) for t in z["track_ids"])
        predicted = sum(int((~z[f"track_{t}_observed"]).sum()) for t in z["track_ids"])
    assert kept == len(made["people"]) and predicted == sum(p["state"] == "predicted" for _, p in made["people"])
    # unverified: the description is read from the statement, and says it was not verified
    export_package(made["package"], "npz", tmp_path / "u.npz")
    with np.load(tmp_path / "u.npz", allow_pickle=False) as z:
        assert bool(z["verified"]) is False and str(z["statement_sha256"]) == statement_sha


def test_npz_of_a_package_without_a_statement_says_unknown(tmp_path, made):
    bare = tmp_path / "bare"
    bare.mkdir()
    (bare / "skeletons.jsonl").write_bytes((made["package"] / "skeletons.jsonl").read_bytes())
    export_package(bare, "npz", tmp_path / "b.npz")
    with np.load(tmp_path / "b.npz", allow_pickle=False) as z:
        assert int(z["frame_width"]) == -1 and float(z["fps"]) == -1.0 and str(z["statement_sha256"]) == ""
        assert json.loads(str(z["metadata"]))["frame_width"] is None


def test_coco_marks_each_state_and_leaves_predictions_out_by_default(made, tmp_path):
    from pycocotools.coco import COCO

    observed = [(f, p) for f, p in made["people"] if p["state"] == "observed"]
    out = tmp_path / "r.json"
    s = export_package(made["package"], "coco", out, trusted_keys=[made["key"]])
    results = json.loads(out.read_text())
    assert len(results) == len(observed) and {r["state"] for r in results} == {"observed"}
    assert s["predicted_left_out"] == len(made["people"]) - len(observed)
    gt = COCO(str(tmp_path / "r.gt.json"))
    assert len(gt.loadRes(str(out)).getAnnIds()) == len(observed)
    assert gt.dataset["info"]["predictions"] == "left out" and gt.dataset["info"]["keypoint_names"] == COCO_NAMES
    both = tmp_path / "all.json"
    export_package(made["package"], "coco", both, trusted_keys=[made["key"]], include_predicted=True)
    results = json.loads(both.read_text())
    assert len(results) == len(made["people"])
    want = sorted((f, p["id"], p["state"]) for f, p in made["people"])
    assert sorted((r["image_id"], r["track_id"], r["state"]) for r in results) == want


def test_mot_file_loads_in_py_motmetrics(made, tmp_path):
    out = tmp_path / "tracks.txt"
    s = export_package(made["package"], "mot", out, trusted_keys=[made["key"]])
    df = mm.io.loadtxt(str(out), fmt="mot15-2D")  # MOTChallenge layout; frames from 1, pixels from 1
    observed = [(f, p) for f, p in made["people"] if p["state"] == "observed"]
    assert len(df) == len(observed) == s["lines"]
    for f, p in observed:
        x1, y1, x2, y2 = p["box"]
        row = df.loc[(f + 1, p["id"])]
        assert row["X"] == pytest.approx(x1, abs=1e-3) and row["Y"] == pytest.approx(y1, abs=1e-3)
        assert row["Width"] == pytest.approx(x2 - x1, abs=1e-3) and row["Height"] == pytest.approx(y2 - y1, abs=1e-3)
        assert row["Confidence"] == pytest.approx(p["score"], abs=1e-6)
    # scored against itself as ground truth, every box matches under py-motmetrics' CLEAR-MOT and IDF1
    acc = mm.utils.compare_to_groundtruth(df, df, "iou", distth=0.5)
    summary = mm.metrics.create().compute(acc, metrics=["mota", "idf1", "num_switches"], name="self")
    assert summary["mota"].iloc[0] == pytest.approx(1.0) and summary["idf1"].iloc[0] == pytest.approx(1.0)
    assert summary["num_switches"].iloc[0] == 0
    with_pred = tmp_path / "all.txt"
    export_package(made["package"], "mot", with_pred, trusted_keys=[made["key"]], include_predicted=True)
    assert len(mm.io.loadtxt(str(with_pred), fmt="mot15-2D")) == len(made["people"])


def test_trajectory_csvs_have_the_documented_columns(made, tmp_path):
    out = tmp_path / "traj"
    s = export_package(made["package"], "trajectories", out, trusted_keys=[made["key"]])
    meta = json.loads((out / "metadata.json").read_text())
    # documented layout: frame, then x and y of each COCO-17 keypoint in the published order
    assert meta["columns"] == ["frame"] + [f"{n}_{a}" for n in COCO_NAMES for a in ("x", "y")]
    assert meta["predictions"].startswith("left out") and meta["statement_sha256"]
    by_track: dict[int, list] = {}
    for f, p in made["people"]:
        if p["state"] == "observed":
            by_track.setdefault(p["id"], []).append((f, p))
    assert sorted(x.name for x in out.iterdir()) == sorted(
        [f"trajectory_{t}.csv" for t in by_track] + ["metadata.json"])
    assert s["tracks"] == len(by_track)
    for tid, items in by_track.items():
        first = (out / f"trajectory_{tid}.csv").read_text().splitlines()[0]
        assert not first[0].isalpha()  # no header line
        table = np.loadtxt(out / f"trajectory_{tid}.csv", delimiter=",", ndmin=2)
        assert table.shape == (len(items), 35)
        assert table[:, 0].tolist() == [f for f, _ in items]
        want = np.array([[v for x, y, _ in p["kp"] for v in (x, y)] for _, p in items])
        np.testing.assert_allclose(table[:, 1:], want, atol=1e-3)
    # the folder is new: an existing one is refused, nothing half-written is left
    r = CliRunner().invoke(main, ["export", str(made["package"]), "--format", "trajectories", "--out", str(out)])
    assert r.exit_code == 2 and "already exists" in r.stderr
    assert not [x for x in tmp_path.iterdir() if x.name.startswith(".")]


def test_cli_formats_and_options(made, tmp_path):
    from redact.cli.cmd_export import EXPORT_FORMATS

    assert tuple(EXPORT_FORMATS) == FORMATS
    r = CliRunner().invoke(main, ["export", str(made["package"]), "--format", "mot", "--out", str(tmp_path / "m.txt"),
                                  "--include-predicted", "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["lines"] == len(made["people"])
    bad = CliRunner().invoke(main, ["export", str(made["package"]), "--format", "npz", "--out",
                                    str(tmp_path / "x.npz"), "--include-predicted"])
    assert bad.exit_code == 2 and bad.stderr.startswith("error:") and "--include-predicted" in bad.stderr
    left = CliRunner().invoke(main, ["export", str(made["package"]), "--format", "coco", "--out",
                                     str(tmp_path / "c.json")])
    assert left.exit_code == 0 and "left out" in left.stderr
    help_ = " ".join(CliRunner().invoke(main, ["export", "--help"]).output.split())
    assert "mot" in help_ and "trajectories" in help_ and "allow_pickle=False" in help_
