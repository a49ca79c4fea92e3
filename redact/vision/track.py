"""Multi-person tracker: stable ids across frames, failing closed when a detection is lost.

The tracker owns only the lifecycle of a track: predict, match, hit, age, retire.
- Predict: constant velocity of the box centre (px/s, from frame times, so variable frame rates
  work); the box keeps its last observed size; keypoints move with the box centre.
- Match: Hungarian assignment (H. W. Kuhn, "The Hungarian method for the assignment problem",
  1955; scipy.optimize.linear_sum_assignment solves the same problem) on a cost from
  redact.vision.costs ("iou", "oks", "iou+oks"), with pairs above `max_cost` or below
  `min_iou` gated out. Gated entries get a large finite cost, so the solver first maximises the
  number of feasible pairs, then minimises their total cost; gated pairs are then dropped.
  Tracks with fewer than `established_hits` observations are matched in a second round, on the
  detections the established tracks left (DeepSORT's order, Wojke et al. 2017); tracks still
  unmatched may then take a leftover detection by box overlap alone (`fallback_iou`, SORT's
  association, Bewley et al. 2016). These rounds change which id a detection continues, never
  whether a person is reported.
- Hit: a matched track takes the detection's box and score (never smoothed: the obscured region
  follows the raw evidence); its keypoints go through the One Euro filter (redact.vision.smoothing)
  because they are drawn as stick figures. Matching uses the last detected (raw) keypoints,
  since the smoother lags behind motion. The centre velocity is an exponential average over
  observations (`velocity_smoothing` = weight of the newest one).
- Age: an unmatched track keeps being reported along its prediction (observed=False,
  "coasting") with a margin that grows each frame since its last observation, capped by
  `max_margin`. Fail closed: a lost detection is an unredacted person.
- Retire: only after more than `max_coast_frames` detection frames without a match.
- New: every unmatched detection starts a track reported from its first frame (no tentative state).

Frames with no detection run (`poses=None`, a detection stride) move every track along its
prediction and report it as predicted with a growing margin, but do NOT count toward retirement:
not looking is no evidence that the person left. With a stride of s frames, a lost track is
therefore reported for up to about `max_coast_frames * s` frames.

Reported per track (redact.vision.records.Tracks, rows sorted by id): boxes (observed: the detection
box; coasting: the predicted box), scores (the last detection score), keypoints (observed: the
smoothed keypoints with raw confidences; coasting: the last drawn keypoints moved with the box),
observed, misses (frames of any kind since the last observation) and margin.

Ids start at 1 and come from the tracker instance, so two runs over the same input give the
same ids. An update that raises leaves the tracker unchanged, so a caller that obscures a faulty
frame entirely can continue with `update(None, t)` for it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from redact.errors import InputError
from redact.formats.tracks_json import TrackRecord
from redact.vision.costs import COST_NAMES, iou_matrix, make_cost
from redact.vision.records import Poses, Tracks
from redact.vision.skeleton import NUM_KEYPOINTS
from redact.vision.smoothing import OneEuroParams, OneEuroState, one_euro_step

#: Cost given to gated pairs: far above any real cost (real costs lie in 0..1).
_GATED = 1e6


@dataclass(frozen=True)
class TrackerConfig:
    """Tracker settings. Margins are fractions of the box size (width and height) added on each side.

    cost: "iou", "oks" or "iou+oks"; iou_weight / oks_weight weigh the two terms of "iou+oks".
    max_cost: pairs costing more are never matched; min_iou: pairs overlapping less are never
    matched (0 disables). min_keypoint_conf: keypoints at or below it are ignored by OKS.
    max_coast_frames: detection frames a lost track is still reported (0 = drop at once).
    base_margin: margin of an observed track; margin_growth: added per frame since the last
    observation; max_margin: cap on the total. velocity_smoothing: weight of the newest velocity
    measurement (1 = no smoothing). established_hits: tracks observed fewer times are matched
    after the others, on the detections those left (1 = one joint assignment). fallback_iou: a
    track still unmatched then takes a leftover detection its predicted box overlaps by at least
    this IoU (0 = off; 0.3 is SORT's IOU_min, Bewley et al. 2016) when it has gone unmatched for
    fallback_after detection frames, this one included. One Euro parameters: Casiez et al. 2012
    (redact.vision.smoothing).
    Defaults are our own choices (no published source). velocity_smoothing was picked on the TUD
    validation in tests/test_track_motmetrics.py; the cost weights favour OKS because on real pose
    output of two people crossing (tests/test_process.py) box overlap alone swaps their ids while
    their poses still tell them apart.
    """

    cost: str = "iou+oks"
    iou_weight: float = 0.1
    oks_weight: float = 0.9
    max_cost: float = 0.8
    min_iou: float = 0.0
    min_keypoint_conf: float = 0.3
    max_coast_frames: int = 30
    base_margin: float = 0.1
    margin_growth: float = 0.05
    max_margin: float = 0.6
    velocity_smoothing: float = 0.2
    established_hits: int = 3
    fallback_iou: float = 0.3
    fallback_after: int = 3
    smooth_keypoints: bool = True
    one_euro_min_cutoff: float = 1.5
    one_euro_beta: float = 0.05
    one_euro_d_cutoff: float = 1.0

    def __post_init__(self) -> None:
        if self.cost not in COST_NAMES:
            raise InputError(f"unknown tracking cost {self.cost!r}; choose one of {', '.join(COST_NAMES)}")
        if not 0.0 <= self.max_cost <= 1.0:
            raise InputError(f"max_cost must be in 0..1, got {self.max_cost}")
        if not 0.0 <= self.min_iou <= 1.0:
            raise InputError(f"min_iou must be in 0..1, got {self.min_iou}")
        if int(self.max_coast_frames) != self.max_coast_frames or self.max_coast_frames < 0:
            raise InputError(f"max_coast_frames must be a whole number >= 0, got {self.max_coast_frames}")
        if not (0.0 <= self.base_margin <= self.max_margin and self.margin_growth >= 0.0):
            raise InputError("margins must satisfy 0 <= base_margin <= max_margin and margin_growth >= 0")
        if not 0.0 <= self.fallback_iou <= 1.0:
            raise InputError(f"fallback_iou must be in 0..1, got {self.fallback_iou}")
        if int(self.fallback_after) != self.fallback_after or self.fallback_after < 1:
            raise InputError(f"fallback_after must be a whole number >= 1, got {self.fallback_after}")
        if int(self.established_hits) != self.established_hits or self.established_hits < 1:
            raise InputError(f"established_hits must be a whole number >= 1, got {self.established_hits}")
        if not 0.0 < self.velocity_smoothing <= 1.0:
            raise InputError(f"velocity_smoothing must be in (0, 1], got {self.velocity_smoothing}")
        self.one_euro()  # validates the filter parameters

    def one_euro(self) -> OneEuroParams:
        return OneEuroParams(self.one_euro_min_cutoff, self.one_euro_beta, self.one_euro_d_cutoff)

    def margin_after(self, frames_unseen: int) -> float:
        """Margin of a track whose last observation was frames_unseen frames ago."""
        return min(self.base_margin + self.margin_growth * frames_unseen, self.max_margin)


#: One track over the whole run: the tracks.json record itself (redact.formats.tracks_json). Frames
#: are update-call numbers (or the frame indices the caller passed); first/last are the first and
#: last frames it was reported.
TrackSummary = TrackRecord


class _Track:
    """Internal mutable state of one live track (never handed out)."""

    __slots__ = ("id", "box", "t_obs", "velocity", "kps", "raw_kps", "score", "hits", "det_misses", "unseen",
                 "euro", "first_frame", "first_t", "last_frame", "last_t", "n_obs", "n_pred")

    def __init__(self, tid: int, box: np.ndarray, score: float, raw_kps: np.ndarray, kps: np.ndarray,
                 t: float, frame: int, euro: OneEuroState | None):
        self.id = tid
        self.box = box  # last observed box [4] float64
        self.t_obs = t
        self.velocity = np.zeros(2)  # centre velocity, px/s
        self.raw_kps = raw_kps  # last detected keypoints [17,3] float64, used for matching
        self.kps = kps  # last drawn keypoints [17,3] float64 (smoothed x,y; raw confidence)
        self.score = score
        self.hits = 1
        self.det_misses = 0  # consecutive detection frames without a match (drives retirement)
        self.unseen = 0  # consecutive frames of any kind since the last observation
        self.euro = euro
        self.first_frame, self.first_t = frame, t
        self.last_frame, self.last_t = frame, t
        self.n_obs, self.n_pred = 0, 0

    def shift_at(self, t: float) -> np.ndarray:
        """Predicted displacement [2] of the centre at time t since the last observation."""
        return self.velocity * (t - self.t_obs)

    def summary(self) -> TrackSummary:
        return TrackSummary(self.id, self.first_frame, self.last_frame, self.n_obs, self.n_pred,
                            self.first_t, self.last_t)


def _centres(boxes: np.ndarray) -> np.ndarray:
    return np.stack([(boxes[..., 0] + boxes[..., 2]) / 2, (boxes[..., 1] + boxes[..., 3]) / 2], axis=-1)


class Tracker:
    """Call `update(poses, t)` once per frame, in order; see the module docstring for the rules."""

    def __init__(self, config: TrackerConfig | None = None):
        self.config = config or TrackerConfig()
        c = self.config
        self._cost = make_cost(c.cost, c.iou_weight, c.oks_weight, c.min_keypoint_conf)
        self._euro = c.one_euro()
        self._live: list[_Track] = []
        self._done: list[TrackSummary] = []
        self._next_id = 1
        self._frame: int | None = None
        self._t: float | None = None

    # -- public -----------------------------------------------------------------------------

    def update(self, poses: Poses | None, t: float, frame: int | None = None) -> Tracks:
        """Advance to the frame at time t (seconds) and return every track to obscure there.

        poses None means no detection was run on this frame. frame defaults to the number of
        the update call (0, 1, 2, ...); when given it must increase. Raises InputError when
        time or frame does not increase or when a detection holds NaN or infinity.
        """
        t = float(t)
        if not math.isfinite(t) or (self._t is not None and t <= self._t):
            raise InputError(f"tracker: frame time must be finite and increase (got {t} after {self._t})")
        if frame is None:
            frame = 0 if self._frame is None else self._frame + 1
        elif self._frame is not None and frame <= self._frame:
            raise InputError(f"tracker: frame index must increase (got {frame} after {self._frame})")
        if poses is not None and not (np.isfinite(poses.boxes).all() and np.isfinite(poses.keypoints).all()):
            raise InputError("tracker: a detection holds NaN or infinity; the frame cannot be tracked")
        self._frame, self._t = int(frame), t

        observed: set[int] = set()
        if poses is not None:
            observed = self._match_and_update(poses, t, int(frame))
        return self._report(t, int(frame), observed)

    def summary(self) -> list[TrackSummary]:
        """Every track created so far (retired and live), sorted by id."""
        return sorted(self._done + [tr.summary() for tr in self._live], key=lambda s: s.id)

    # -- lifecycle ---------------------------------------------------------------------------

    def _predicted(self, t: float, raw: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Predicted boxes [T,4] and keypoints [T,17,3] of the live tracks at time t.

        raw: move the last detected keypoints (for matching) instead of the drawn, smoothed ones
        (the smoother lags behind motion, which would bias OKS).
        """
        n = len(self._live)
        boxes = np.zeros((n, 4))
        kps = np.zeros((n, NUM_KEYPOINTS, 3))
        for i, tr in enumerate(self._live):
            d = tr.shift_at(t)
            boxes[i] = tr.box + np.concatenate([d, d])
            kps[i] = tr.raw_kps if raw else tr.kps
            kps[i, :, :2] += d
        return boxes, kps

    def _assign(self, cost: np.ndarray, iou: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> list[tuple[int, int]]:
        """Hungarian assignment with gating among the given track rows and detection columns;
        returns (track row, detection column) pairs in the full matrices' indices."""
        from scipy.optimize import linear_sum_assignment

        if not len(rows) or not len(cols):
            return []
        c, o = cost[np.ix_(rows, cols)], iou[np.ix_(rows, cols)]
        allowed = (c <= self.config.max_cost) & (o >= self.config.min_iou)
        r_idx, c_idx = linear_sum_assignment(np.where(allowed, c, _GATED))
        return [(int(rows[r]), int(cols[k])) for r, k in zip(r_idx, c_idx) if allowed[r, k]]

    def _overlap_round(self, iou: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> list[tuple[int, int]]:
        """Assignment on box overlap alone, pairs below fallback_iou dropped (SORT's association)."""
        from scipy.optimize import linear_sum_assignment

        if not len(rows) or not len(cols):
            return []
        o = iou[np.ix_(rows, cols)]
        r_idx, c_idx = linear_sum_assignment(-o)
        return [(int(rows[r]), int(cols[k])) for r, k in zip(r_idx, c_idx) if o[r, k] >= self.config.fallback_iou]

    def _associate(self, cost: np.ndarray, iou: np.ndarray) -> list[tuple[int, int]]:
        """(track, detection) pairs for one frame, in three rounds.

        1. Established tracks, then 2. young ones on the detections left (the matching order of
        Wojke et al. 2017, DeepSORT): a stray detection beside a person, which starts a track of
        its own, must not then take that person's next detection from the person's own track.
        3. Box overlap alone (SORT's association, Bewley et al. 2016, IoU >= 0.3) for tracks lost
        fallback_after detections or more: a track that coasted drifts from its person (the
        velocity is a guess), so the pose cost can fail although the person is plainly back where
        it was headed. Not sooner: right after a miss the pose cost is reliable, and at a crossing
        box overlap is not.
        """
        n_tracks, n_dets = cost.shape
        cfg = self.config

        def left(pairs) -> np.ndarray:
            return np.array(sorted(set(range(n_dets)) - {c for _, c in pairs}), np.int64)

        young = np.array([tr.hits < cfg.established_hits for tr in self._live], bool)
        pairs = self._assign(cost, iou, np.nonzero(~young)[0], np.arange(n_dets))
        pairs += self._assign(cost, iou, np.nonzero(young)[0], left(pairs))
        if cfg.fallback_iou > 0:
            matched = {r for r, _ in pairs}
            lost = np.array([i for i, tr in enumerate(self._live)
                             if i not in matched and tr.det_misses + 1 >= cfg.fallback_after], np.int64)
            pairs += self._overlap_round(iou, lost, left(pairs))
        return pairs

    def _match_and_update(self, poses: Poses, t: float, frame: int) -> set[int]:
        det_boxes = poses.boxes.astype(np.float64)
        det_kps = poses.keypoints.astype(np.float64)
        pred_boxes, pred_kps = self._predicted(t, raw=True)
        cost = self._cost(pred_boxes, pred_kps, det_boxes, det_kps)
        pairs = self._associate(cost, iou_matrix(pred_boxes, det_boxes))

        matched_tracks = {r for r, _ in pairs}
        matched_dets = {c for _, c in pairs}
        for r, c in pairs:
            self._hit(self._live[r], det_boxes[c], float(poses.scores[c]), det_kps[c], t)
        survivors = []
        for i, tr in enumerate(self._live):
            if i not in matched_tracks:
                tr.det_misses += 1
                if tr.det_misses > self.config.max_coast_frames:
                    self._done.append(tr.summary())
                    continue
            survivors.append(tr)
        observed = {self._live[r].id for r, _ in pairs}
        for c in range(len(poses)):  # detection order, so ids are reproducible
            if c not in matched_dets:
                tr = self._new_track(det_boxes[c], float(poses.scores[c]), det_kps[c], t, frame)
                survivors.append(tr)
                observed.add(tr.id)
        self._live = survivors
        return observed

    def _smooth(self, state: OneEuroState | None, kps: np.ndarray, t: float) -> tuple[OneEuroState | None, np.ndarray]:
        if not self.config.smooth_keypoints:
            return None, kps.copy()
        state = one_euro_step(self._euro, state, kps[:, :2], t)
        out = kps.copy()
        out[:, :2] = state.x
        return state, out

    def _new_track(self, box, score, kps, t, frame) -> _Track:
        euro, drawn = self._smooth(None, kps, t)
        tr = _Track(self._next_id, box.copy(), score, kps.copy(), drawn, t, frame, euro)
        self._next_id += 1
        return tr

    def _hit(self, tr: _Track, box: np.ndarray, score: float, kps: np.ndarray, t: float) -> None:
        dt = t - tr.t_obs
        v_new = (_centres(box) - _centres(tr.box)) / dt
        a = self.config.velocity_smoothing
        tr.velocity = v_new if tr.hits == 1 else a * v_new + (1.0 - a) * tr.velocity
        tr.box, tr.score, tr.t_obs = box.copy(), score, t
        tr.raw_kps = kps.copy()
        tr.euro, tr.kps = self._smooth(tr.euro, kps, t)
        tr.hits += 1
        tr.det_misses = 0
        tr.unseen = 0

    def _report(self, t: float, frame: int, observed: set[int]) -> Tracks:
        live = sorted(self._live, key=lambda tr: tr.id)
        self._live = live
        boxes, kps = self._predicted(t)  # equals the observed box and keypoints for tracks hit at t
        obs = np.array([tr.id in observed for tr in live], bool)
        for tr, o in zip(live, obs):
            if o:
                tr.n_obs += 1
            else:
                tr.unseen += 1
                tr.n_pred += 1
            tr.last_frame, tr.last_t = frame, t
        return Tracks(
            ids=np.array([tr.id for tr in live], np.int64),
            boxes=boxes,
            scores=np.array([tr.score for tr in live]),
            keypoints=kps,
            observed=obs,
            misses=np.array([tr.unseen for tr in live], np.int32),
            margin=np.array([self.config.margin_after(tr.unseen) for tr in live]),
            hits=np.array([tr.n_obs for tr in live], np.int32),
        )
