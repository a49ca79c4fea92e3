"""The main job in one streaming pass: decode → pose → track → obscure → encode, plus the package.

`process_video` writes `OUT/redacted.mp4` and `OUT/package/` (or `OUT/package.tar`), both staged
under a hidden temporary folder in OUT and renamed into place only when everything succeeded:
the package last, so its presence means the run completed. Failing closed: a frame whose
inference, tracking or rendering raises is written fully obscured, logged and flagged; a model
that fails its hash check stops the run before any output exists.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from redact import __version__
from redact.errors import InputError, OutputError
from redact.media.stages import WriteBehind, read_ahead
from redact.provenance import package
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.predicate import (
    AuditRecord,
    Disclosure,
    FaultCounts,
    ModelRecord,
    Predicate,
    ReviewCounts,
    SourceRecord,
    ToolRecord,
)
from redact.ranges import frame_ranges
from redact.redaction.quality import QualityMonitor, ReviewRange, ReviewRules, encode_quality_line, review_document
from redact.redaction.render import RenderSettings, obscure_all, obscurer_for, render_frame
from redact.skeletons import rows
from redact.vision.pose import PoseEstimator, PoseSettings
from redact.vision.records import Tracks
from redact.vision.track import TrackerConfig
from redact.vision.tracking import TrackIdSettings, TrackingPass

VIDEO_NAME = "redacted.mp4"
#: Upper bound of frames inferred at once (common practice: beyond a few, ordering and memory cost more than they gain).
MAX_MODEL_FRAMES = 4
PACKAGE_NAME = "package"


@dataclass(frozen=True)
class ProcessSettings:
    """Every setting of a run; all of it is recorded in the log and the signed predicate.

    coast_seconds: how long a person whose detection is lost stays obscured along its predicted
    path (converted to frames with the source frame rate). lookback_seconds: when a person is first
    detected, the frames of this long before are obscured where the person stood, since people
    entering the picture (from an edge, out of shadow) are usually visible before they are
    detected; output is delayed by that many frames. detect_every: run the model on every k-th
    frame only and let the tracker carry people in between, with margins growing on frames
    without detection (faster; a person who appears between detections is found up to k-1
    frames late, which the look-back covers when k-1 frames fit in it). crf: x264 quality (lower = better).
    """

    pose: PoseSettings = field(default_factory=PoseSettings)
    tracker: TrackerConfig = field(default_factory=TrackerConfig)
    render: RenderSettings = field(default_factory=RenderSettings)
    review: ReviewRules = field(default_factory=ReviewRules)
    coast_seconds: float = 1.5
    lookback_seconds: float = 0.5
    detect_every: int = 1
    include_audio: bool = False
    archive: bool = False
    threads: int | None = None
    crf: int = 20
    background_samples: int = 32

    def __post_init__(self) -> None:
        if not 0 <= self.coast_seconds <= 60:
            raise InputError(f"coast time must be between 0 and 60 seconds, got {self.coast_seconds}")
        if not 0 <= self.lookback_seconds <= 10:
            raise InputError(f"look-back time must be between 0 and 10 seconds, got {self.lookback_seconds}")
        if not 1 <= self.detect_every <= 10:
            raise InputError(f"detect-every must be between 1 and 10 frames, got {self.detect_every}")
        if not 0 <= self.crf <= 51:
            raise InputError(f"crf must be between 0 and 51, got {self.crf}")

    @property
    def ids(self) -> TrackIdSettings:
        """The settings that decide track ids (a track sheet made with the same ones names the same people)."""
        return TrackIdSettings(self.pose, self.tracker, self.coast_seconds, self.detect_every)

    @property
    def model_threads(self) -> int:
        """onnxruntime intra-op threads of each model run: `threads` when given; with a detection
        stride every core but one (decoding, drawing and encoding dominate there and need a core of
        their own); else the cores divided among the frames inferred at once (model_frames)."""
        from redact.vision.models import default_threads

        if self.threads:
            return self.threads
        cores = default_threads()
        if self.detect_every > 1:
            return max(1, cores - 1)
        return max(1, cores // self.model_frames)

    @property
    def model_frames(self) -> int:
        """How many frames the model works on at once: with every frame detected and `threads` not
        given, one per core up to MAX_MODEL_FRAMES (on few cores, whole frames side by side keep the
        cores busier than one frame's operators split over threads: benchmarks/README.md); else 1."""
        from redact.vision.models import default_threads

        if self.threads or self.detect_every > 1:
            return 1
        return max(1, min(default_threads(), MAX_MODEL_FRAMES))

    def record(self) -> dict:
        """The settings as plain JSON values (for the log and the predicate).

        threads is recorded as the count actually used: onnxruntime's sums run in a different
        order with a different thread count, which can move a keypoint by one in the last decimal,
        so a byte-identical rerun needs the same count.
        """
        d = asdict(self)
        d["threads"] = self.model_threads
        d["model_frames"] = self.model_frames
        return d


@dataclass(frozen=True)
class ProcessResult:
    """What a run produced and where; review ranges are where a person must look first."""

    out_dir: Path
    video: Path
    package: Path
    frames: int
    tracks: int
    fault_frames: tuple[int, ...]
    review: tuple[ReviewRange, ...]
    seconds: float
    stopped_early: str | None
    key_id: str
    source_sha256: str
    audit: dict | None = None

    @property
    def fps(self) -> float:
        return self.frames / self.seconds if self.seconds > 0 else 0.0


def tracker_config_for(settings: ProcessSettings, fps: float) -> TrackerConfig:
    """The tracker configuration a run uses: coast time converted to frames at the source rate."""
    return settings.ids.tracker_config(fps)


def inference_workers(settings: ProcessSettings, estimator) -> int:
    """Frames to infer at once: settings.model_frames for an estimator that says it may be called
    from several threads at once (`concurrent`, as PoseEstimator), else 1 (test doubles that count
    their calls, for instance)."""
    return settings.model_frames if getattr(estimator, "concurrent", False) else 1


def _check_paths(source: Path, out_dir: Path, archive: bool) -> tuple[Path, Path]:
    video = out_dir / VIDEO_NAME
    pkg = out_dir / (PACKAGE_NAME + (".tar" if archive else ""))
    src = source.resolve()
    for target in (out_dir, video, pkg):
        if target.resolve() == src:
            raise OutputError(f"output {target} would overwrite the input; choose another --out")
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"--out {out_dir} exists and is not a directory")
    for target in (video, pkg):
        if os.path.lexists(target):
            raise OutputError(f"{target} already exists; choose a new --out (outputs are never overwritten)")
    return video, pkg


class _Stats:
    """Counts for the transform log: what was obscured where, and which frames failed."""

    def __init__(self) -> None:
        self.with_people: list[int] = []
        self.person_frames = 0
        self.predicted_frames = 0
        self.faults: list[int] = []
        self.fault_reasons: dict[str, int] = {}
        self.lookback_frames: list[int] = []
        self.new_tracks = 0

    def people(self, index: int, tracks: Tracks) -> None:
        if len(tracks):
            self.with_people.append(index)
            self.person_frames += len(tracks)
            self.predicted_frames += int((~tracks.observed).sum())

    def fault(self, index: int, reason: str) -> None:
        self.faults.append(index)
        self.fault_reasons[reason] = self.fault_reasons.get(reason, 0) + 1


class _Lookback:
    """Holds the last few rendered frames back from the encoder; a newly detected person is
    obscured in them too, where they first appeared (box with the tracker's widest margin).

    "New" means new to the tracker, not newly obscured: a person a plan keeps visible who starts
    to be obscured when they overlap someone (kept_overlap) was shown on purpose before, so the
    frames before are left as they are."""

    def __init__(self, frames: int, obscurer, region_settings, margin: float):
        self.pending: deque = deque()
        self.frames = frames
        self.obscurer = obscurer
        self.region_settings = region_settings
        self.margin = margin
        self.seen: set[int] = set()

    def push(self, index: int, pts: int, image: np.ndarray, tracks: Tracks | None, stats: _Stats,
             frame_ids: Iterable[int]):
        """Add one rendered frame; returns the frames now old enough to encode, oldest first.

        tracks: the people obscured in this frame; frame_ids: every track id of the frame, including
        people kept visible (they are not new when they later have to be obscured)."""
        from redact.redaction.regions import person_region

        new = [k for k, i in enumerate(tracks.ids.tolist()) if i not in self.seen] if tracks is not None else []
        self.seen.update(int(i) for i in frame_ids)
        if new:
            stats.new_tracks += len(new)
            for k in new:
                region = person_region(tracks.boxes[k], tracks.keypoints[k], self.margin, image.shape,
                                       self.region_settings)
                if region.empty:
                    continue
                sub = region.crop_mask()
                for item in self.pending:
                    if not item[2].flags.writeable:
                        item[2] = item[2].copy()
                    self.obscurer.apply_into(item[2], region.rect, sub, region.size)
                    stats.lookback_frames.append(item[0])
        self.pending.append([index, pts, image])
        out = []
        while len(self.pending) > self.frames:
            out.append(self.pending.popleft())
        return out

    def flush(self):
        out = list(self.pending)
        self.pending.clear()
        return out


class _FrameFinisher:
    """Everything after tracking for one frame, in frame order: obscure (failing closed), look
    back, hand to the encoder, write the skeleton row, the quality line and the frame digest."""

    def __init__(self, settings, background, obscurer, lookback, monitor, stats, encode, skel, qual, frames_out,
                 progress, expected: int):
        self.settings, self.background, self.obscurer = settings, background, obscurer
        self.lookback, self.monitor, self.stats, self.encode = lookback, monitor, stats, encode
        self.skel, self.qual, self.frames_out = skel, qual, frames_out
        self.progress, self.expected = progress, expected

    def _render(self, frame, tracks: Tracks, decision) -> tuple[np.ndarray, Tracks, tuple[str, ...]]:
        style = self.settings.render
        every = self.settings.detect_every
        if decision is None:
            out = render_frame(frame.image, tracks, style, background=self.background, obscurer=self.obscurer,
                               detect_every=every)
            return out, tracks, ()
        extra = ("kept_overlap",) if decision.overlap_ids else ()
        if decision.whole_frame:
            return obscure_all(frame.image), decision.obscure, extra
        out = render_frame(frame.image, decision.obscure, style, background=self.background, obscurer=self.obscurer,
                           detect_every=every)
        if decision.mask is not None:
            out = self.obscurer.apply(out, decision.mask)
        return out, decision.obscure, extra

    def finish(self, frame, tracks: Tracks | None, decision, error: str | None) -> None:
        extra: tuple[str, ...] = ()
        hidden = None
        if tracks is not None:
            try:
                out, hidden, extra = self._render(frame, tracks, decision)
                self.stats.people(frame.index, tracks)
            except Exception as e:  # fail closed: whatever went wrong, this frame shows nobody
                tracks, hidden, error = None, None, type(e).__name__
        if tracks is None:
            out = obscure_all(frame.image)
            self.stats.fault(frame.index, error or "unknown")
        status = rows.STATUS_OK if tracks is not None else rows.STATUS_FAULT
        pts = frame.pts if frame.pts is not None else frame.index
        frame_ids = tracks.ids.tolist() if tracks is not None else ()
        for _, ready_pts, ready in self.lookback.push(frame.index, pts, out, hidden, self.stats, frame_ids):
            self.encode(ready, ready_pts)
        self.skel.write(rows.encode_row(frame.index, frame.pts, frame.t, tracks or Tracks.empty(), status))
        self.qual.write(encode_quality_line(self.monitor.observe(frame.index, frame.t, frame.image, tracks,
                                                                 fault=tracks is None, extra=extra)))
        self.frames_out.write(frame.digest.hex().encode() + b"\n")
        if self.progress is not None:
            self.progress(frame.index + 1, self.expected)


def _build_background(source: Path, estimator: PoseEstimator, settings: ProcessSettings):
    """The empty scene from a first pass: sampled frames, people masked out (see redact.redaction.background)."""
    from redact.media.video import VideoReader
    from redact.redaction.background import BackgroundBuilder
    from redact.redaction.regions import people_mask

    builder = BackgroundBuilder(max_samples=settings.background_samples)
    with VideoReader(source, hash_file=False) as reader:
        for frame in reader.frames():
            if builder.wants_next():
                poses = estimator.estimate(frame.image)
                n = len(poses)
                as_tracks = Tracks(np.arange(n), poses.boxes, poses.scores, poses.keypoints,
                                   np.ones(n, bool), np.zeros(n, np.int32), np.full(n, 0.3, np.float32))
                mask = people_mask(as_tracks, frame.image.shape, settings.render.regions)
            else:
                mask = np.zeros(frame.image.shape[:2], bool)
            builder.add(frame.image, mask)
    return builder.build()


def process_video(source: str | Path, out_dir: str | Path, signer, settings: ProcessSettings = ProcessSettings(),
                  disclosure: dict | None = None, privacy=None,
                  progress: Callable[[int, int], None] | None = None,
                  estimator: PoseEstimator | None = None, audit: bool = False,
                  plan: str | Path | None = None) -> ProcessResult:
    """Redact every person in `source` and write the signed skeleton package; see the module doc.

    signer: a redact.provenance.signing.Signer. disclosure: optional recipient/organisation/purpose/date/
    request_reference. privacy: optional redact.skeletons.privacy.PrivacyOptions applied to the skeleton
    rows. progress(frames_done, frames_expected) is called after each frame. estimator: a
    PoseEstimator to use instead of the bundled default (tests inject faults this way).
    audit: scan the redacted video (and the source) with the independent detectors of
    redact.redaction.audit before signing, and record the result in the log and the statement.
    plan: a redaction plan file (docs/plan-format.md): people to leave visible, extra regions and
    frames to obscure; validated before any output, its hash and every entry applied are logged.
    """
    from redact.media.video import probe
    from redact.vision.models import get_model

    started = time.perf_counter()
    source, out_dir = Path(source), Path(out_dir)
    info = probe(source)  # InputError for missing / not a video / zero frames
    video_final, pkg_final = _check_paths(source, out_dir, settings.archive)
    entry = get_model(settings.pose.model, task="pose")
    plan_obj = None
    if plan is not None:
        from redact.redaction.plan import load_plan

        plan_obj = load_plan(plan, info)
        plan_obj.check_settings(settings.ids, entry.sha256)
    if estimator is None:
        estimator = PoseEstimator.default(settings.pose, settings.model_threads)  # hash check before output
    tracker_cfg = tracker_config_for(settings, float(info.fps))
    background = _build_background(source, estimator, settings) if settings.render.style == "background" else None
    obscurer = obscurer_for(settings.render, background)

    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=".redact-partial-", dir=out_dir))
    except OSError as e:
        raise OutputError(f"cannot write to {out_dir}: {e.strerror or e}") from None
    try:
        return _run(source, info, out_dir, staging, video_final, pkg_final, signer, settings, tracker_cfg,
                    estimator, entry, obscurer, background, disclosure, privacy, progress, started, audit, plan_obj)
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def _run(source, info, out_dir, staging, video_final, pkg_final, signer, settings, tracker_cfg, estimator,
         entry, obscurer, background, disclosure, privacy, progress, started, audit, plan):
    """The streaming pass and the packaging, inside the staging folder (see process_video)."""
    from redact.media.video import VideoReader, VideoWriter, copy_audio

    pkg_dir = staging / PACKAGE_NAME
    pkg_dir.mkdir()
    video_tmp = staging / VIDEO_NAME
    log = TransformLog(pkg_dir / package.LOG)
    log.append("probe", **{k: v for k, v in info.as_dict().items() if k != "path"}, name=source.name)
    log.append("model", id=entry.id, sha256=entry.sha256, licence=entry.licence, runtime="onnxruntime-cpu",
               threads=settings.model_threads, frames_at_once=settings.model_frames)
    log.append("detection", **asdict(settings.pose), detect_every=settings.detect_every)
    log.append("tracking", **asdict(tracker_cfg), coast_seconds=settings.coast_seconds)
    if background is not None:
        log.append("background", samples=settings.background_samples,
                   valid_fraction=round(float(background.valid.mean()), 4))

    tracking = TrackingPass(estimator, settings.ids, float(info.fps), inference_workers(settings, estimator))
    monitor = QualityMonitor(settings.review)
    stats = _Stats()
    lookback = _Lookback(int(round(settings.lookback_seconds * float(info.fps or 25))), obscurer,
                         settings.render.regions, tracker_cfg.max_margin)
    n_frames = 0
    with VideoReader(source, threads=0) as reader, \
            VideoWriter(video_tmp, info.width, info.height, info.time_base, info.fps, crf=settings.crf) as writer, \
            WriteBehind(writer.write, depth=4) as encoder, \
            open(pkg_dir / package.SKELETONS, "wb") as skel, \
            open(pkg_dir / package.QUALITY, "wb") as qual, \
            open(pkg_dir / package.FRAMES, "wb") as frames_out:
        finisher = _FrameFinisher(settings, background, obscurer, lookback, monitor, stats, encoder.submit,
                                  skel, qual, frames_out, progress, info.frames)
        # Detection may run on several frames at once; tracking stays here, in frame order.
        # Rendering, the look-back, rows and quality run in one thread behind, overlapping the
        # next inferences.
        with WriteBehind(finisher.finish, depth=2) as finishing:
            for item in tracking.run(read_ahead(reader.frames(), depth=4)):
                frame, tracks, decision, error = item.frame, item.tracks, None, item.error
                if tracks is not None and plan is not None:
                    try:
                        decision = plan.decide(frame.index, frame.t, tracks, frame.image.shape)
                    except Exception as e:  # fail closed: the finisher obscures the whole frame
                        tracks, error = None, type(e).__name__
                finishing.submit(frame, tracks, decision, error)
                n_frames += 1
        for _, ready_pts, ready in lookback.flush():
            encoder.submit(ready, ready_pts)
        encoder.close()
    log.append("decode", frames=n_frames, sha256=reader.sha256, bytes=reader.bytes,
               stopped_early=reader.stopped_early, corrupt_frames=reader.corrupt_frames)
    log.append("redaction", style=settings.render.style, figures=settings.render.draws_figures,
               regions=asdict(settings.render.regions), frames_with_people=frame_ranges(stats.with_people),
               person_frames=stats.person_frames, predicted_person_frames=stats.predicted_frames,
               lookback_seconds=settings.lookback_seconds, new_people=stats.new_tracks,
               lookback_frames=frame_ranges(sorted(set(stats.lookback_frames))))
    if stats.faults:
        log.append("fault", frames=frame_ranges(stats.faults), count=len(stats.faults),
                   reasons=stats.fault_reasons, action="frame fully obscured")
    review = monitor.ranges()
    (pkg_dir / package.REVIEW).write_bytes(review_document(review, settings.review, n_frames))
    log.append("review", rules=asdict(settings.review), ranges=len(review), flagged_frames=monitor.flagged)

    summaries = tracking.summary()
    if plan is not None:  # before anything is renamed into place: a bad track id leaves no output
        plan.check_end([s.id for s in summaries], reader.sha256)
        log.append("plan", **plan.record(), applied=plan.applied())
    (pkg_dir / package.TRACKS).write_bytes(_tracks_json(summaries))
    if privacy is not None:
        _apply_privacy(pkg_dir, privacy, info, log)

    if settings.include_audio and info.has_audio:
        with_audio = staging / ("audio-" + VIDEO_NAME)
        copy_audio(video_tmp, source, with_audio)
        os.replace(with_audio, video_tmp)
    log.append("encode", codec="h264", encoder="libx264", crf=settings.crf, frames=writer.frames_written,
               audio=("included" if (settings.include_audio and info.has_audio)
                      else ("dropped" if info.has_audio else "none")),
               container_metadata="not copied", source_metadata_keys=list(info.metadata_keys))
    audit_result = None
    if audit:
        from redact.redaction.audit import AuditSettings, audit_summary, audit_video

        audit_result = audit_summary(audit_video(video_tmp, source, AuditSettings(threads=settings.threads)))
        log.append("audit", **audit_result)
    if disclosure:
        log.disclosure(**disclosure)

    predicate = Predicate(
        source=SourceRecord(name=source.name, sha256=reader.sha256, bytes=reader.bytes,
                            duration=round(info.duration, 6), fps=f"{info.fps.numerator}/{info.fps.denominator}",
                            frames=n_frames, width=info.width, height=info.height,
                            stopped_early=reader.stopped_early),
        model=ModelRecord(entry.id, entry.sha256, entry.licence),
        parameters=settings.record(),
        privacy=privacy.to_record() if privacy is not None else {"options": "none"},
        disclosure=Disclosure.of(disclosure),
        review=ReviewCounts(len(review), monitor.flagged),
        faults=FaultCounts(len(stats.faults)),
        plan=None if plan is None else plan.record(),
        audit=None if audit_result is None else AuditRecord.of(audit_result),
        tool=ToolRecord("redact", __version__),
        created=utc_now(),
    )
    signed = staging / "signed"
    package.write_package(pkg_dir, signed, predicate, signer, video=video_tmp, archive=settings.archive)
    os.rename(video_tmp, video_final)
    os.rename(signed, pkg_final)  # last: a package in place means the run completed
    return ProcessResult(out_dir, video_final, pkg_final, n_frames, len(summaries), tuple(stats.faults),
                         tuple(review), time.perf_counter() - started, reader.stopped_early,
                         signer.key_id, reader.sha256, audit_result)


def _tracks_json(summaries) -> bytes:
    """tracks.json: one object per track id, deterministic bytes."""
    doc = {"tracks": [{k: (round(v, 6) if isinstance(v, float) else v) for k, v in asdict(s).items()}
                      for s in summaries]}
    return (json.dumps(doc, sort_keys=True, separators=(",", ":"), allow_nan=False) + "\n").encode()


def _apply_privacy(pkg_dir: Path, privacy, info, log: TransformLog) -> None:
    """Rewrite skeletons.jsonl and tracks.json through the de-identification options (redact.skeletons.privacy)."""
    from redact.skeletons.derive import rewrite_skeleton_files

    summary = rewrite_skeleton_files(pkg_dir, privacy, (info.width, info.height), float(info.fps))
    log.append("privacy", **privacy.to_record(), summary=summary)
