"""Track sheet: same ids as `redact process`, pictures cut from the original footage, marked sensitive.

People in the clip: skimage.data.astronaut() public domain (NASA), skimage.data.camera() CC0 (Lav
Varshney), pasted at exact rectangles by tests/conftest.py. Outside references: PyAV/FFmpeg decodes
the source, Pillow reads the PNGs, scikit-image's structural_similarity compares crops.
"""

from __future__ import annotations

import json
from pathlib import Path

import av
import cv2
import numpy as np
import pytest
from click.testing import CliRunner
from conftest import ScriptedEstimator
from PIL import Image
from skimage.metrics import structural_similarity

from redact.cli import main
from redact.errors import OutputError
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.tracksheet import CROP_HEIGHT, CROP_MARGIN, README_NAME, make_track_sheet

SEED = bytes(range(32))


def _process_tracks(clip_path: Path, out: Path, settings: ProcessSettings, estimator=None) -> list[dict]:
    result = process_video(clip_path, out, Signer.from_seed(SEED), settings, estimator=estimator)
    return json.loads((result.package / "tracks.json").read_text())["tracks"]


def _key(t: dict) -> tuple:
    return (t["id"], t["first_frame"], t["last_frame"], t["frames_observed"])


def _source_frames(path: Path) -> list[np.ndarray]:
    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(c.streams.video[0])]


@pytest.fixture(scope="module")
def sheet(crossing_clip, tmp_path_factory):
    """The sheet written through the CLI with default options, plus its stdout JSON and stderr."""
    out = tmp_path_factory.mktemp("sheet") / "sheet"
    r = CliRunner().invoke(main, ["tracks", str(crossing_clip.path), "--out", str(out), "--json"])
    assert r.exit_code == 0, r.output
    return out, json.loads(r.stdout), r.stderr


def test_cli_sheet_ids_equal_those_of_redact_process(crossing_clip, sheet, tmp_path):
    out, doc, _ = sheet
    processed = _process_tracks(crossing_clip.path, tmp_path / "p", ProcessSettings())
    assert [_key(t) for t in doc["tracks"]] == [_key(t) for t in processed]
    assert len(processed) >= 2  # both people were tracked


def test_ids_match_with_faults_misses_and_a_detection_stride(crossing_clip, tmp_path):
    # Failed frames are skipped by both (the pipeline obscures them whole); frames without a
    # detection run (detect_every=2) are predicted by both.
    settings = ProcessSettings(detect_every=2)
    faults, misses = {3, 11}, {6, 7}
    items = make_track_sheet(crossing_clip.path, tmp_path / "s", settings, estimator=ScriptedEstimator(misses=misses, faults=faults))
    processed = _process_tracks(crossing_clip.path, tmp_path / "p", settings, estimator=ScriptedEstimator(misses=misses, faults=faults))
    assert [_key(t) for t in items] == [_key(t) for t in processed]
    assert [(t["first_t"], t["last_t"]) for t in items] == [(t["first_t"], t["last_t"]) for t in processed]


def test_sheet_files_readme_and_template(crossing_clip, sheet):
    out, doc, stderr = sheet
    items = doc["tracks"]
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(["README.txt", "tracks.json", "plan-template.json"] + [t["image"] for t in items])
    readme = (out / README_NAME).read_text()
    for phrase in ("SENSITIVE", "must not leave the operator's control", "never be put into a package",
                   "Delete it after use"):
        assert phrase in readme
    assert "SENSITIVE" in stderr and doc["sensitive"] is True
    tracks_doc = json.loads((out / "tracks.json").read_text())
    assert tracks_doc["sensitive"] is True and tracks_doc["tracks"] == items
    assert tracks_doc["source"]["frames"] == len(crossing_clip.truths)
    template = json.loads((out / "plan-template.json").read_text())
    assert template["track_sheet"]["source_sha256"] == tracks_doc["source"]["sha256"]
    assert template["track_sheet"]["settings_sha256"] == tracks_doc["settings_sha256"]
    for t in items:
        assert 0 <= t["first_frame"] <= t["last_frame"] < len(crossing_clip.truths)
        assert t["first_t"] == pytest.approx(t["first_frame"] / 25, abs=1e-6)  # 25 fps clip
        assert 1 <= len(t["shown"]) <= 3
    assert not any(p.name.startswith(".redact-tracks-partial") for p in out.parent.iterdir())


def test_pictures_are_crops_of_the_original_footage(crossing_clip, sheet):
    out, doc, _ = sheet
    src = _source_frames(crossing_clip.path)
    for t in doc["tracks"]:
        img = np.asarray(Image.open(out / t["image"]).convert("RGB"))  # Pillow reads our PNG
        assert img.shape[0] > CROP_HEIGHT and img.shape[2] == 3
        # The strip below the crops carries text (dark pixels on white).
        strip = img[CROP_HEIGHT + 16:]
        assert (strip < 100).any() and (strip > 250).mean() > 0.5
        x = 8
        for shown in t["shown"]:
            x1, y1, x2, y2 = shown["box"]
            mx, my = CROP_MARGIN * max(x2 - x1, 1.0), CROP_MARGIN * max(y2 - y1, 1.0)
            f = src[shown["frame"]]
            cx0, cy0 = max(0, int(np.floor(x1 - mx))), max(0, int(np.floor(y1 - my)))
            cx1, cy1 = min(f.shape[1], int(np.ceil(x2 + mx))), min(f.shape[0], int(np.ceil(y2 + my)))
            ref = f[cy0:cy1, cx0:cx1]
            w = int(round(ref.shape[1] * CROP_HEIGHT / ref.shape[0]))
            ref = cv2.resize(ref, (w, CROP_HEIGHT), interpolation=cv2.INTER_AREA)
            got = img[8:8 + CROP_HEIGHT, x:x + w]
            s = structural_similarity(ref.mean(axis=2), got.astype(float).mean(axis=2), data_range=255)
            assert s > 0.9, (t["id"], shown, s)  # unredacted source pixels of that frame
            # ... and it shows a person: the crop overlaps an actor's exact rectangle.
            truth = crossing_clip.truths[shown["frame"]]
            assert any(truth.visible[a] and min(x2, r[2]) > max(x1, r[0]) and min(y2, r[3]) > max(y1, r[1])
                       for a, r in enumerate(truth.person_rects))
            x += w + 8


def test_existing_out_dir_is_refused_and_nothing_is_left(crossing_clip, tmp_path):
    out = tmp_path / "sheet"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(OutputError, match="already exists"):
        make_track_sheet(crossing_clip.path, out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sheet"]
    assert [p.name for p in out.iterdir()] == ["keep.txt"]
    r = CliRunner().invoke(main, ["tracks", str(crossing_clip.path), "--out", str(out)])
    assert r.exit_code == 2 and r.stderr.startswith("error: ") and len(r.stderr.strip().splitlines()) == 1


def test_missing_input_is_a_one_line_error(tmp_path):
    r = CliRunner().invoke(main, ["tracks", str(tmp_path / "nope.mp4"), "--out", str(tmp_path / "s")])
    assert r.exit_code == 2 and r.stderr.startswith("error: ") and "Traceback" not in r.output
    assert not (tmp_path / "s").exists()


def test_help_has_an_example_and_the_caution():
    r = CliRunner().invoke(main, ["tracks", "--help"])
    assert r.exit_code == 0
    assert "Example:" in r.output and "redact tracks" in r.output and "SENSITIVE" in r.output
