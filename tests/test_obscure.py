"""The per-frame obscure record (redact.redaction.obscure) and rendering as a pure function of it.

The end-to-end check: a run's frames, as handed to the encoder, are rendered again from the
decoded source and the run's own records after a JSON round trip, and must be the same bytes
(hashlib SHA-256, FIPS 180-4). The clip is the crossing scene of tests/conftest.py (astronaut():
public domain, NASA; camera(): CC0, Lav Varshney; loaded from the installed scikit-image).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
from conftest import ScriptedEstimator

import redact.finishing
import redact.media.video as video
from redact.errors import RedactError
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.redaction.obscure import (
    FILL_GREY,
    BoxArea,
    MaskArea,
    ObscureRecord,
    ObscureRegion,
    Reason,
    WholeFrame,
    add_people,
)
from redact.redaction.regions import RegionSettings
from redact.redaction.render import RenderSettings, obscurer_for, render_frame, render_record
from redact.skeletons.rows import read_rows
from redact.vision.records import Tracks

SEED = bytes(range(32))
FAULTS = {7, 30}  # estimator calls (= frames, one frame at a time) that raise
PLAN = {"version": "redact-plan/1",
        "boxes": [{"label": "poster", "box": [10, 4, 80, 30], "frames": [3, 20]}],
        "regions": [{"label": "notice", "points": [[130, 4], [200, 4], [214, 34], [118, 34]], "frames": [10, 14]}],
        "obscure_frames": [{"label": "door open", "frames": [40, 41]}]}


def _sha(img: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(img).tobytes()).hexdigest()


@pytest.fixture(scope="module")
def recorded(crossing_clip, tmp_path_factory):
    """The crossing clip processed (blur, a plan, two failed frames) with every record and every
    encoder input kept."""
    d = tmp_path_factory.mktemp("obscure")
    plan = d / "plan.json"
    plan.write_text(json.dumps(PLAN))
    encoded: dict[int, str] = {}
    real = video.VideoWriter.write

    def write(self, image, pts):
        encoded[pts] = _sha(image)
        return real(self, image, pts)

    records: list[ObscureRecord] = []
    settings = ProcessSettings(render=RenderSettings(style="blur", figure=True), threads=1)
    mp = pytest.MonkeyPatch()
    mp.setattr(video.VideoWriter, "write", write)
    try:
        result = process_video(crossing_clip.path, d / "out", Signer.from_seed(SEED), settings,
                               estimator=ScriptedEstimator(faults=FAULTS), plan=plan, records=records.append)
    finally:
        mp.undo()
    return crossing_clip, settings, result, records, encoded


def test_records_come_one_per_frame_in_order_with_every_reason(recorded):
    clip, _, result, records, _ = recorded
    assert [r.frame for r in records] == list(range(result.frames)) and result.frames == 50
    kinds = {w.kind for r in records for reg in r.regions for w in reg.reasons}
    # "motion" only where something moves outside every person's region (redact.finishing.MotionCover;
    # tests/test_hidden_people.py has a clip where only the motion net finds anyone)
    assert {"person", "lookback", "plan", "fault"} <= kinds <= {"person", "lookback", "plan", "fault", "motion"}
    assert {r.frame for r in records if r.fault} == FAULTS
    assert all(r.fault == "RuntimeError" for r in records if r.frame in FAULTS)
    plan_whole = [r.frame for r in records if r.whole_frame and not r.fault]
    assert plan_whole == [40, 41]
    labels = {w.label for r in records for reg in r.over for w in reg.reasons if w.kind == "plan"}
    assert labels == {"poster", "notice", "door open"}
    people = [w for r in records for reg in r.under for w in reg.reasons if w.kind == "person"]
    assert people and all(w.track_id is not None and w.state in ("observed", "predicted") for w in people)
    assert sum(len(r.figures) > 0 for r in records) > 10  # figures are drawn (style blur with figures)


def test_rendering_again_from_stored_records_gives_the_encoded_bytes(recorded):
    clip, settings, result, records, encoded = recorded
    obscurer = obscurer_for(settings.render)
    stored = [json.loads(json.dumps(r.to_dict())) for r in records]  # what a store would keep
    with video.VideoReader(clip.path, hash_file=False) as reader:
        frames = list(reader.frames())
    assert len(frames) == len(stored) == len(encoded)
    for frame, doc in zip(frames, stored):
        again = render_record(frame.image, ObscureRecord.from_dict(doc), settings.render, obscurer=obscurer)
        assert _sha(again) == encoded[frame.pts], f"frame {frame.index} renders differently from its record"


def test_failed_frames_are_grey_and_their_rows_say_fault(recorded):
    clip, settings, result, records, _ = recorded
    with open(result.package / "skeletons.jsonl", "rb") as f:
        status = {r.frame: r.status for r in read_rows(f)}
    assert {f for f, s in status.items() if s != "ok"} == FAULTS
    img = np.zeros((clip.spec.height, clip.spec.width, 3), np.uint8)
    for r in records:
        if r.frame in FAULTS and len(r.over) == 1:  # nothing added by the look-back: plain grey
            assert (render_record(img, r, settings.render) == FILL_GREY).all()


def test_a_producer_or_the_renderer_raising_fails_that_frame_closed(crossing_clip, tmp_path, monkeypatch):
    real_add, real_render = redact.finishing.add_people, redact.finishing.render_record

    def add_people_failing(record, *a, **k):
        if record.frame == 5:
            raise ValueError("injected in a producer")
        return real_add(record, *a, **k)

    def render_failing(image, record, *a, **k):
        if record.frame == 9 and record.fault is None:
            raise KeyError("injected in the renderer")
        return real_render(image, record, *a, **k)

    monkeypatch.setattr(redact.finishing, "add_people", add_people_failing)
    monkeypatch.setattr(redact.finishing, "render_record", render_failing)
    records: list[ObscureRecord] = []
    result = process_video(crossing_clip.path, tmp_path / "out", Signer.from_seed(SEED),
                           ProcessSettings(threads=1, lookback_seconds=0.0), records=records.append)
    assert {r.frame: r.fault for r in records if r.fault} == {5: "ValueError", 9: "KeyError"}
    assert set(result.fault_frames) == {5, 9}
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    fault = next(e for e in log if e["kind"] == "fault")
    assert fault["reasons"] == {"ValueError": 1, "KeyError": 1} and fault["frames"] == [[5, 5], [9, 9]]


# ---------------------------------------------------------------- the record and the renderer alone

def _scene(h: int = 120, w: int = 160) -> np.ndarray:
    rng = np.random.default_rng(4)
    return rng.integers(0, 256, (h, w, 3), dtype=np.uint8)


def test_each_geometry_obscures_exactly_its_pixels():
    img = _scene()
    fill = RenderSettings(style="fill")
    mask = np.zeros((120, 160), bool)
    mask[30:50, 60:70] = True
    mask[45:60, 65:90] = True
    for geom, covered in ((BoxArea((10, 20, 40, 35)), np.s_[20:35, 10:40]),
                          (MaskArea.from_mask(mask), mask)):
        rec = ObscureRecord(0, 160, 120).add(ObscureRegion(geom, (Reason("motion"),)))
        out = render_record(img, rec, fill)
        expect = img.copy()
        expect[covered] = FILL_GREY
        assert np.array_equal(out, expect)
    whole = ObscureRecord(0, 160, 120).add(ObscureRegion(WholeFrame(), (Reason("review", entry="c1"),)), over=True)
    assert (render_record(img, whole, RenderSettings(style="blur")) == FILL_GREY).all()


def test_regions_over_the_figures_cover_them_and_regions_under_do_not():
    img = np.full((120, 160, 3), 60, np.uint8)
    kp = np.zeros((1, 17, 3), np.float32)
    kp[0, :, 0], kp[0, :, 1], kp[0, :, 2] = np.linspace(20, 140, 17), 60, 0.9
    box = ObscureRegion(BoxArea((0, 40, 160, 80)), (Reason("motion"),))
    base = ObscureRecord(0, 160, 120).with_figures(kp)
    style = RenderSettings(style="fill")
    under, over = render_record(img, base.add(box), style), render_record(img, base.add(box, over=True), style)
    assert (over[40:80] == FILL_GREY).all()
    assert (under[40:80] != FILL_GREY).any(axis=2).any()  # the figure is drawn on top


def test_render_frame_is_the_record_of_its_tracks():
    img = _scene()
    kp = np.zeros((2, 17, 3), np.float32)
    kp[:, :, 0] = np.linspace(30, 60, 17)
    kp[1, :, 0] += 60
    kp[:, :, 1], kp[:, :, 2] = 60, 0.9
    tr = Tracks(np.array([1, 2]), np.array([[25, 30, 65, 100], [85, 30, 125, 100]]), np.array([0.9, 0.8]), kp,
                np.array([True, False]), np.array([0, 1], np.int32), np.array([0.1, 0.15], np.float32))
    style = RenderSettings(style="pixelate", figure=True)
    rec = add_people(ObscureRecord(0, 160, 120), tr, RegionSettings()).with_figures(tr.keypoints)
    assert np.array_equal(render_frame(img, tr, style), render_record(img, rec, style))
    assert [(w.track_id, w.state) for reg in rec.under for w in reg.reasons] == [(1, "observed"), (2, "predicted")]
    assert ObscureRecord.from_dict(json.loads(json.dumps(rec.to_dict()))).to_dict() == rec.to_dict()


def test_bad_records_are_refused():
    with pytest.raises(RedactError, match="unknown obscure reason"):
        Reason("sunshine")
    with pytest.raises(RedactError, match="figures"):
        ObscureRecord(0, 10, 10, figures=np.zeros((1, 5, 3)))
    with pytest.raises(RedactError, match="at least one Reason"):
        ObscureRegion(BoxArea((0, 0, 2, 2)), ())
    with pytest.raises(RedactError, match="malformed"):
        ObscureRecord.from_dict({"frame": 0})
    rec = ObscureRecord(0, 160, 120)
    with pytest.raises(RedactError, match="for 160×120 frames"):
        render_record(np.zeros((10, 10, 3), np.uint8), rec, RenderSettings())


def test_added_producers_see_every_frame_in_order_and_fail_closed():
    """A producer stage plugged into the finisher (as a motion net would be): its regions are
    rendered, it sees failed frames too, and one that raises fails only that frame."""
    import io
    from fractions import Fraction

    from redact.finishing import FrameFinisher, FrameSinks, FrameWork, LookBack, Produced, RunStats
    from redact.media.video import Frame
    from redact.redaction.quality import QualityMonitor

    img = _scene()
    img.flags.writeable = False
    frames = [Frame(i, i * 512, Fraction(1, 12800), i / 25, img, bytes(32)) for i in range(6)]
    seen: list[tuple[int, str | None]] = []

    def motion(work, record):
        seen.append((work.frame.index, record.fault))
        return Produced(record.add(ObscureRegion(BoxArea((20, 10, 60, 30)), (Reason("motion", detail="blob"),))))

    def flaky(work, record):
        if work.frame.index in (2, 4):
            raise ZeroDivisionError("injected")
        return Produced(record)

    encoded: list[np.ndarray] = []
    records: list[ObscureRecord] = []
    skel = io.BytesIO()
    stats = RunStats()
    style = RenderSettings(style="fill")
    sinks = FrameSinks(lambda image, pts: encoded.append(image), skel, io.BytesIO(), io.BytesIO(), 6,
                       records=records.append)
    finisher = FrameFinisher(style, 1, obscurer_for(style), LookBack(2, RegionSettings(), 0.6, stats),
                             QualityMonitor(), stats, sinks, producers=(motion, flaky))
    for f in frames:
        finisher.finish(FrameWork(f, None, None, "Injected") if f.index == 4 else FrameWork(f, Tracks.empty()))
    finisher.flush()
    assert seen == [(0, None), (1, None), (2, None), (3, None), (4, "Injected"), (5, None)]
    assert [r.fault for r in records] == [None, None, "ZeroDivisionError", None, "Injected", None]
    assert stats.faults == [2, 4] and stats.fault_reasons == {"ZeroDivisionError": 1, "Injected": 1}
    for k in (0, 1, 3, 5):
        expect = img.copy()
        expect[10:30, 20:60] = FILL_GREY
        assert np.array_equal(encoded[k], expect)
        assert records[k].reason_counts() == {"motion": 1}
    assert (encoded[2] == FILL_GREY).all() and (encoded[4] == FILL_GREY).all()
    rows_status = [json.loads(line)["status"] for line in skel.getvalue().splitlines()]
    assert rows_status == ["ok", "ok", "fault", "ok", "fault", "ok"]
