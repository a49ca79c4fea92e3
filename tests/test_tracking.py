"""The one tracking loop (redact.vision.tracking) and the typed settings that decide track ids.

No outside reference applies to the loop itself (it wires our own detector and tracker); the
checks are on properties a plan depends on: failed frames come out as failures with their reason,
the ids after them are the ids of a run where those frames failed the same way, and inferring
several frames at once changes nothing. Frames are synthetic grey images; the estimator is a
scripted double returning boxes we choose.
"""

from __future__ import annotations

import dataclasses
from fractions import Fraction

import numpy as np

from redact.media.video import Frame
from redact.pipeline import ProcessSettings
from redact.redaction.plan import ids_fingerprint
from redact.redaction.render import RenderSettings
from redact.vision.pose import PoseSettings
from redact.vision.records import Poses
from redact.vision.track import TrackerConfig
from redact.vision.tracking import TrackIdSettings, TrackingPass, coast_frames


class _ByIndex:
    """One person walking right 4 px a frame; the frame index is read from the first pixel, so the
    answer does not depend on which thread calls first. Raises on the frames in `faults`."""

    concurrent = True

    def __init__(self, faults=()):
        self.faults = set(faults)

    def estimate(self, image):
        i = int(image[0, 0, 0])
        if i in self.faults:
            raise RuntimeError("injected")
        x = 10.0 + 4 * i
        kp = np.zeros((1, 17, 3), np.float32)
        kp[0, :, 0], kp[0, :, 1], kp[0, :, 2] = x + 10, 50, 0.9
        return Poses(np.array([[x, 20, x + 20, 80]], np.float32), np.array([0.9], np.float32), kp)


def _indexed_frames(n: int, corrupt=()):
    out = []
    for i in range(n):
        img = np.full((120, 160, 3), 90, np.uint8)
        img[0, 0, 0] = i
        img.flags.writeable = False
        out.append(Frame(i, i * 512, Fraction(1, 12800), i / 25, img, bytes(32), i in corrupt))
    return out


def _run(workers: int, faults=(), corrupt=(), n: int = 12):
    tp = TrackingPass(_ByIndex(faults), TrackIdSettings(), 25.0, workers)
    return [(t.frame.index, None if t.tracks is None else t.tracks.ids.tolist(), t.error)
            for t in tp.run(_indexed_frames(n, corrupt))], tp


def test_failed_frames_come_out_with_their_reason_and_ids_carry_on():
    out, tp = _run(1, faults={3}, corrupt={6})
    assert out[3] == (3, None, "RuntimeError")
    assert out[6] == (6, None, "RedactError")  # decoder-flagged damage
    assert all(ids == [1] for i, ids, _ in out if i not in (3, 6)), out
    assert [s.id for s in tp.summary()] == [1]


def test_frames_inferred_at_once_give_the_same_ids_and_failures():
    assert _run(1, faults={2, 5}, corrupt={8})[0] == _run(3, faults={2, 5}, corrupt={8})[0]


def test_coast_frames_follow_the_frame_rate():
    ids = TrackIdSettings(coast_seconds=1.5)
    assert ids.tracker_config(25.0).max_coast_frames == 38  # 37.5 rounded half to even: 38
    assert ids.tracker_config(10.0).max_coast_frames == 15
    assert coast_frames(1.5, 0.0) == 38  # unknown rate: 25 frames/s assumed
    assert ids.tracker.max_coast_frames == TrackerConfig().max_coast_frames  # the default is not changed


def test_run_settings_carry_exactly_their_id_settings():
    s = ProcessSettings(pose=PoseSettings(score_threshold=0.4), coast_seconds=2.0, detect_every=2,
                        render=RenderSettings(style="blur"), crf=30)
    assert s.ids == TrackIdSettings(PoseSettings(score_threshold=0.4), TrackerConfig(), 2.0, 2)
    assert ids_fingerprint(s, "0" * 64) == ids_fingerprint(s.ids, "0" * 64)


def test_every_id_setting_changes_the_fingerprint():
    base = TrackIdSettings()
    fp = ids_fingerprint(base, "0" * 64)
    from redact.vision.motion import MotionSettings
    from redact.vision.scene import SceneSettings
    from redact.vision.search import SearchSettings

    changed = {"pose": PoseSettings(nms_iou=0.5), "tracker": TrackerConfig(max_cost=0.7), "coast_seconds": 2.0,
               "detect_every": 3, "search": SearchSettings(full_every=2),
               "scene": SceneSettings(motion=MotionSettings(enabled=False))}
    assert set(changed) == {f.name for f in dataclasses.fields(TrackIdSettings)}
    for name, value in changed.items():
        assert ids_fingerprint(dataclasses.replace(base, **{name: value}), "0" * 64) != fp, name
