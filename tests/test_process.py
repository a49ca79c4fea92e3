"""`redact process` end to end on moving-still clips with exact ground truth.

People come from scikit-image's stills (astronaut(): public domain, NASA; camera(): CC0, Lav
Varshney), pasted at known rectangles (tests/conftest.py). PyAV/FFmpeg decodes the outputs as the
outside reference; SSIM is scikit-image's structural_similarity.
"""

from __future__ import annotations

import json
from pathlib import Path

import av
import numpy as np
import pytest
from click.testing import CliRunner
from conftest import ScriptedEstimator
from skimage.metrics import structural_similarity

from redact.cli import main
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.skeletons.rows import read_rows

SEED = bytes(range(32))
MISS_FRAMES = set(range(12, 20))   # the detector "misses" everyone here: tracks must coast
FAULT_FRAMES = {5, 31}              # inference raises here: frames must come out fully obscured
# Slivers of a person narrower than this (pixels) at the frame edge are not checked: too small to
# recognise anyone or to measure SSIM on (common practice: SSIM's 7-pixel window needs room).
MIN_SIDE = 16


def decode_all(path: Path) -> tuple[list[np.ndarray], list[int], object]:
    """Every frame (RGB) and pts of a video, decoded by PyAV/FFmpeg (the outside reference)."""
    with av.open(str(path)) as c:
        s = c.streams.video[0]
        frames, pts = [], []
        for f in c.decode(s):
            frames.append(f.to_ndarray(format="rgb24"))
            pts.append(f.pts)
        return frames, pts, s.time_base


@pytest.fixture(scope="module")
def processed(crossing_clip, tmp_path_factory):
    out = tmp_path_factory.mktemp("processed") / "out"
    est = ScriptedEstimator(MISS_FRAMES, FAULT_FRAMES)
    result = process_video(crossing_clip.path, out, Signer.from_seed(SEED), ProcessSettings(), estimator=est)
    return crossing_clip, result


def _rows(result):
    with open(result.package / "skeletons.jsonl", "rb") as f:
        return list(read_rows(f))


def _iou(a, b) -> float:
    ix = max(0.0, min(a[2], b[2]) - max(a[0], b[0]))
    iy = max(0.0, min(a[3], b[3]) - max(a[1], b[1]))
    inter = ix * iy
    union = (a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter
    return inter / union if union > 0 else 0.0


def test_output_has_source_frame_count_and_timestamps(processed):
    clip, result = processed
    src, src_pts, src_tb = decode_all(clip.path)
    out, out_pts, out_tb = decode_all(result.video)
    assert len(out) == len(src) == result.frames
    assert out_pts == src_pts and out_tb == src_tb
    assert out[0].shape == src[0].shape


def test_every_face_and_body_is_obscured_in_every_frame(processed):
    """Including coasting frames (detector misses), faults, partly off-screen and dim people."""
    clip, result = processed
    src, _, _ = decode_all(clip.path)
    out, _, _ = decode_all(result.video)
    checked, failures = 0, []
    for i, truth in enumerate(clip.truths):
        for a in np.nonzero(truth.visible)[0]:
            for rect in (truth.face_rects[a], truth.person_rects[a]):
                x0, y0, x1, y1 = (int(v) for v in rect)
                if x1 - x0 < MIN_SIDE or y1 - y0 < MIN_SIDE:
                    continue  # a sliver at the frame edge (see MIN_SIDE)
                s = src[i][y0:y1, x0:x1].astype(np.float32)
                o = out[i][y0:y1, x0:x1].astype(np.float32)
                grey_s, grey_o = s.mean(axis=2), o.mean(axis=2)
                ssim = structural_similarity(grey_s, grey_o, data_range=255, win_size=7)
                if ssim >= 0.35:
                    failures.append(f"frame {i} actor {a} rect {rect.tolist()}: SSIM {ssim:.2f}")
                checked += 1
    assert not failures, failures
    assert checked > 100


def test_people_are_tracked_with_stable_ids(processed):
    """Each person keeps one id across the path, the same before and after the crossing.

    Frames where the two people overlap heavily (truth IoU > 0.3) are left out of the id count:
    there, which track box "belongs" to whom cannot be told from rectangles alone.
    """
    clip, result = processed
    frame_rows = _rows(result)
    ids_per_actor: dict[int, list[int]] = {}
    for row, truth in zip(frame_rows, clip.truths):
        if row.status != "ok" or _iou(truth.person_rects[0], truth.person_rects[1]) > 0.3:
            continue
        for a in np.nonzero(truth.visible & ~truth.partial)[0]:
            rect = truth.person_rects[a]
            best = max(range(len(row.tracks)), key=lambda k: _iou(row.tracks.boxes[k], rect), default=None)
            assert best is not None and _iou(row.tracks.boxes[best], rect) > 0.3, \
                f"frame {row.frame}: actor {a} has no track"
            ids_per_actor.setdefault(int(a), []).append(int(row.tracks.ids[best]))
    for a, ids in ids_per_actor.items():
        main_id = max(set(ids), key=ids.count)
        assert ids.count(main_id) / len(ids) >= 0.9, f"actor {a} changed id too often: {ids}"
        assert ids[-1] == main_id and ids[len(ids) // 4] == main_id, f"actor {a} lost its id: {ids}"


def test_missed_frames_coast_and_are_flagged(processed):
    _, result = processed
    frame_rows = {r.frame: r for r in _rows(result)}
    for i in sorted(MISS_FRAMES):
        r = frame_rows[i]
        assert len(r.tracks) >= 1 and not r.tracks.observed.any(), f"frame {i} should only have predicted people"
    review = json.loads((result.package / "review.json").read_text())
    flagged = {f for rng in review["ranges"] for f in range(rng["frames"][0], rng["frames"][1] + 1)}
    assert MISS_FRAMES <= flagged


def test_faults_are_fully_obscured_logged_and_flagged(processed):
    _, result = processed
    out, _, _ = decode_all(result.video)
    for i in FAULT_FRAMES:
        assert out[i].std() < 2.0, f"fault frame {i} is not uniformly obscured"
    assert set(result.fault_frames) == FAULT_FRAMES
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    faults = [e for e in log if e["kind"] == "fault"]
    assert len(faults) == 1 and faults[0]["frames"] == [[5, 5], [31, 31]]
    statuses = {r.frame: r.status for r in _rows(result)}
    assert {f for f, s in statuses.items() if s == "fault"} == FAULT_FRAMES


def test_rerun_gives_identical_skeleton_rows(processed, tmp_path):
    clip, result = processed
    again = process_video(clip.path, tmp_path / "again", Signer.from_seed(SEED), ProcessSettings(),
                          estimator=ScriptedEstimator(MISS_FRAMES, FAULT_FRAMES))
    for name in ("skeletons.jsonl", "tracks.json", "quality.jsonl", "review.json", "frames.sha256"):
        assert (again.package / name).read_bytes() == (result.package / name).read_bytes(), name


# ---------------------------------------------------------------- the CLI and bad input

def _leftovers(out: Path) -> list[str]:
    return sorted(p.name for p in out.iterdir()) if out.exists() else []


def test_cli_process_writes_and_verifies(crossing_clip, tmp_path, key):
    out = tmp_path / "cli-out"
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key),
                                  "--style", "blur", "--json", "--recipient", "R. Person", "--purpose", "test"])
    assert r.exit_code == 0, r.output
    summary = json.loads(r.stdout)
    assert summary["frames"] == len(crossing_clip.truths)
    assert _leftovers(out) == ["package", "redacted.mp4", "report.html"]  # the report by default
    assert summary["report"] == str(out / "report.html")
    assert [i["open"] for i in summary["open_first"]][:2] == [str(out / "report.html"), str(out / "redacted.mp4")]
    v = CliRunner().invoke(main, ["verify", str(out / "package"), "--trusted-key", str(key.with_name("t.public.pem")),
                                  "--source", str(crossing_clip.path), "--video", str(out / "redacted.mp4")])
    assert v.exit_code == 0, v.output


@pytest.mark.parametrize("name", ["missing", "directory", "text", "png", "empty", "zero_frames"])
def test_bad_inputs_get_one_line_errors_and_no_output(bad_inputs, tmp_path, key, name):
    out = tmp_path / "bad-out"
    r = CliRunner().invoke(main, ["process", str(bad_inputs[name]), "--out", str(out), "--signing-key", str(key)])
    assert r.exit_code == 2, r.output
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.output
    assert _leftovers(out) == []


def test_truncated_input_is_processed_as_far_as_it_decodes(bad_inputs, tmp_path, key):
    out = tmp_path / "trunc-out"
    r = CliRunner().invoke(main, ["process", str(bad_inputs["truncated"]), "--out", str(out), "--signing-key", str(key),
                                  "--json"])
    assert r.exit_code == 0, r.output
    summary = json.loads(r.stdout)
    assert summary["stopped_early"] and "warning" in r.stderr
    assert 0 < summary["frames"] < 50
    decoded, _, _ = decode_all(out / "redacted.mp4")
    assert len(decoded) == summary["frames"]


def test_output_that_would_overwrite_the_input_is_refused(crossing_clip, tmp_path, key):
    src = tmp_path / "redacted.mp4"
    src.write_bytes(crossing_clip.path.read_bytes())
    before = src.read_bytes()
    for out in (tmp_path, src):
        r = CliRunner().invoke(main, ["process", str(src), "--out", str(out), "--signing-key", str(key)])
        assert r.exit_code == 2 and "overwrite the input" in r.stderr, r.output
    assert src.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keys", "redacted.mp4"]


def test_unwritable_output_is_refused(crossing_clip, tmp_path, key):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(blocker / "sub"), "--signing-key", str(key)])
    assert r.exit_code == 2 and r.stderr.startswith("error: "), r.output


def test_existing_outputs_are_never_overwritten(crossing_clip, tmp_path, key):
    out = tmp_path / "o"
    (out / "package").mkdir(parents=True)
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key)])
    assert r.exit_code == 2 and "already exists" in r.stderr
    assert _leftovers(out) == ["package"]


def test_cli_process_with_privacy_options_is_signed_and_applied(crossing_clip, tmp_path, key):
    out = tmp_path / "private-out"
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key),
                                  "--drop-keypoints", "head", "--new-ids", "--quiet"])
    assert r.exit_code == 0, r.output
    rows = _rows(type("R", (), {"package": out / "package"}))
    people = [p for row in rows for p in row.tracks.keypoints]
    assert people and all((kp[:5] == 0).all() for kp in people)  # COCO-17 indices 0-4: nose, eyes, ears
    ids = {int(i) for row in rows for i in row.tracks.ids}
    tracks = json.loads((out / "package" / "tracks.json").read_text())["tracks"]
    assert ids == {t["id"] for t in tracks}
    v = CliRunner().invoke(main, ["verify", str(out / "package"), "--trusted-key", str(key.with_name("t.public.pem")),
                                  "--json"])
    assert v.exit_code == 0, v.output
    envelope = json.loads((out / "package" / "envelope.json").read_text())
    import base64
    statement = json.loads(base64.b64decode(envelope["payload"]))
    assert statement["predicate"]["privacy"]["new_ids"] is True


def test_cli_process_audit_is_recorded_in_the_log(crossing_clip, tmp_path, key):
    """`process --audit` runs redact.redaction.audit (an independent face detector, MediaPipe BlazeFace, and
    the pose model at a larger size) on its own output and the source, and logs the result."""
    out = tmp_path / "audited"
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key),
                                  "--audit", "--json", "--quiet"])
    assert r.exit_code == 0, r.output
    audit = json.loads(r.stdout)["audit"]
    assert audit["passed"] and audit["faces"] == 0 and audit["source_faces"] > 0 and audit["survived"] == 0
    log = [json.loads(line) for line in (out / "package" / "log.jsonl").read_text().splitlines()]
    assert [e["survived"] for e in log if e["kind"] == "audit"] == [0]


def test_missing_key_or_passphrase_are_one_line_errors(crossing_clip, tmp_path, key, monkeypatch):
    out = tmp_path / "nokey"
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key",
                                  str(tmp_path / "absent.pem")])
    assert r.exit_code == 2 and "no such key file" in r.stderr
    monkeypatch.delenv("REDACT_KEY_PASSPHRASE")
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(out), "--signing-key", str(key)], input="")
    assert r.exit_code == 2 and "REDACT_KEY_PASSPHRASE" in r.stderr.splitlines()[-1]
    assert not out.exists()


def _with_tags(src: Path, dst: Path) -> Path:
    """Remux src with PyAV, adding container tags a camera might write (invented values)."""
    with av.open(str(src)) as i, av.open(str(dst), "w", format="mp4") as o:
        o.metadata["title"] = "Camera 7, north entrance"
        o.metadata["comment"] = "operator J. Example"
        streams = {s.index: o.add_stream_from_template(s) for s in i.streams if s.type in ("video", "audio")}
        for pkt in i.demux(*[i.streams[k] for k in streams]):
            if pkt.dts is None:
                continue
            pkt.stream = streams[pkt.stream.index]
            o.mux(pkt)
    return dst


@pytest.mark.parametrize("keep", [False, True])
def test_audio_is_dropped_unless_asked_and_metadata_is_not_copied(clip_with_audio, tmp_path, keep):
    """PyAV/FFmpeg reopens the output: an audio stream only with include_audio; no source tags."""
    src = _with_tags(clip_with_audio.path, tmp_path / "tagged.mp4")
    with av.open(str(src)) as c:
        assert c.metadata.get("title") == "Camera 7, north entrance"  # the tags are really there
    result = process_video(src, tmp_path / "o", Signer.from_seed(SEED), ProcessSettings(include_audio=keep))
    with av.open(str(result.video)) as c:
        assert len(c.streams.audio) == (1 if keep else 0)
        assert not {"title", "comment", "creation_time", "encoder", "location"} & set(c.metadata)
        assert b"north entrance" not in result.video.read_bytes()
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    enc = [e for e in log if e["kind"] == "encode"][0]
    assert enc["audio"] == ("included" if keep else "dropped") and enc["container_metadata"] == "not copied"


def test_statement_follows_the_published_predicate_schema(processed):
    """The statement a run signs validates against docs/predicate.schema.json (jsonschema, draft 2020-12)."""
    from statement_schema import check_statement, envelope_payload

    _, result = processed
    st = check_statement(envelope_payload(result.package))
    assert st["predicate"]["parent"] is None and st["predicate"]["faults"]["frames"] == len(FAULT_FRAMES)
    assert st["predicate"]["source"]["frames"] == result.frames
