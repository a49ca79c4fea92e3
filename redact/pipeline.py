"""The main job in one streaming pass: decode → pose → track → obscure → encode, plus the package.

`process_video` writes `OUT/redacted.mp4` and `OUT/package/` (or `OUT/package.tar`), both staged
under a hidden temporary folder in OUT and renamed into place only when everything succeeded:
the package last, so its presence means the run completed. Failing closed: a frame whose
inference, tracking or rendering raises is written fully obscured, logged and flagged; a model
that fails its hash check stops the run before any output exists.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from redact import __version__, fsio
from redact.errors import InputError, NoSpaceError, OutputError, RedactError
from redact.finishing import FrameFinisher, FrameSinks, FrameWork, LookBack, MotionCover, RunStats
from redact.formats.tracks_json import encode_tracks
from redact.media.stages import WriteBehind, depth_for, read_ahead
from redact.provenance import package
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.predicate import (
    AuditRecord,
    Disclosure,
    FaultCounts,
    ModelRecord,
    MotionCounts,
    Predicate,
    ReviewCounts,
    SourceRecord,
    ToolRecord,
)
from redact.provenance.signing import Signer
from redact.ranges import frame_ranges
from redact.redaction.background import Background
from redact.redaction.obscure import ObscureRecord
from redact.redaction.quality import QualityMonitor, ReviewRange, ReviewRules, review_document
from redact.redaction.render import Obscurer, RenderSettings, obscurer_for
from redact.redaction.unexplained import UnexplainedSettings
from redact.vision.pose import PoseEstimator, PoseSettings
from redact.vision.records import Tracks
from redact.vision.scene import SceneSettings
from redact.vision.search import SearchSettings
from redact.vision.track import TrackerConfig, TrackSummary
from redact.vision.tracking import FALLBACK_FPS, Estimator, TrackedFrame, TrackIdSettings, TrackingPass

if TYPE_CHECKING:
    from redact.media.video import VideoInfo
    from redact.redaction.plan import Plan
    from redact.skeletons.privacy import PrivacyOptions
    from redact.vision.models import ModelEntry

VIDEO_NAME = "redacted.mp4"
#: Upper bound of frames inferred at once (common practice: beyond a few, ordering and memory cost more than they gain).
MAX_MODEL_FRAMES = 4
PACKAGE_NAME = "package"
STAGING_PREFIX = ".redact-partial-"


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
    search: SearchSettings = field(default_factory=SearchSettings)
    scene: SceneSettings = field(default_factory=SceneSettings)
    unexplained: UnexplainedSettings = field(default_factory=UnexplainedSettings)

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
        return TrackIdSettings(self.pose, self.tracker, self.coast_seconds, self.detect_every, self.search,
                               self.scene)

    def lookback_frames(self, fps: float) -> int:
        """Frames held back for the look-back at frame rate fps (FALLBACK_FPS when unknown)."""
        return int(round(self.lookback_seconds * (fps or FALLBACK_FPS)))

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
        """The settings as given, as plain JSON values (what a batch index compares between runs;
        a package records `effective` instead).

        threads is recorded as the count actually used: onnxruntime's sums run in a different
        order with a different thread count, which can move a keypoint by one in the last decimal,
        so a byte-identical rerun needs the same count.
        """
        d = asdict(self)
        d["threads"] = self.model_threads
        d["model_frames"] = self.model_frames
        return d

    def effective(self, fps: float) -> dict:
        """The settings as a run of a source at frame rate fps uses them, as plain JSON values.

        Computed once per run: the signed predicate's parameters are this, and the log's entries
        take their values from it. Differences from `record`: tracker.max_coast_frames is the coast
        time in frames at this rate (the tracker's own default is not used); render.figure says
        whether figures are drawn (always for style "figure"); lookback_window_frames is the
        look-back in frames.
        """
        d = self.record()
        d["tracker"] = asdict(self.ids.tracker_config(fps))
        d["render"]["figure"] = self.render.draws_figures
        d["lookback_window_frames"] = self.lookback_frames(fps)
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
    notices: tuple[str, ...] = ()  # one line each for the operator (e.g. stale staging folders removed)

    @property
    def fps(self) -> float:
        return self.frames / self.seconds if self.seconds > 0 else 0.0


def tracker_config_for(settings: ProcessSettings, fps: float) -> TrackerConfig:
    """The tracker configuration a run uses: coast time converted to frames at the source rate."""
    return settings.ids.tracker_config(fps)


def inference_workers(settings: ProcessSettings, estimator: object) -> int:
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
        raise OutputError(f"--out {out_dir} exists and is not a folder")
    for target in (video, pkg):
        if os.path.lexists(target):
            raise OutputError(f"{target} already exists; choose a new --out (outputs are never overwritten)")
    return video, pkg


def _build_background(source: Path, estimator: Estimator, settings: ProcessSettings) -> Background:
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


def process_video(source: str | Path, out_dir: str | Path, signer: Signer,
                  settings: ProcessSettings = ProcessSettings(),
                  disclosure: dict | None = None, privacy: PrivacyOptions | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  estimator: Estimator | None = None, audit: bool = False,
                  plan: str | Path | None = None,
                  records: Callable[[ObscureRecord], None] | None = None) -> ProcessResult:
    """Redact every person in `source` and write the signed skeleton package; see the module doc.

    signer: a redact.provenance.signing.Signer. disclosure: optional recipient/organisation/purpose/date/
    request_reference. privacy: optional redact.skeletons.privacy.PrivacyOptions applied to the skeleton
    rows. progress(frames_done, frames_expected) is called after each frame. estimator: a
    PoseEstimator to use instead of the bundled default (tests inject faults this way).
    audit: scan the redacted video (and the source) with the independent detectors of
    redact.redaction.audit before signing, and record the result in the log and the statement.
    plan: a redaction plan file (docs/plan-format.md): people to leave visible, extra regions and
    frames to obscure; validated before any output, its hash and every entry applied are logged.
    records: called with each frame's final obscure record (redact.redaction.obscure), in frame
    order, from the thread that renders; with the source and the render settings it is all it
    takes to render that frame again.
    """
    from redact.media.video import probe
    from redact.vision.models import get_model

    started = time.perf_counter()
    source, out_dir = Path(source), Path(out_dir)
    info = probe(source)  # InputError for missing / not a video / zero frames
    _check_paths(source, out_dir, settings.archive)
    entry = get_model(settings.pose.model, task="pose")
    plan_obj = None
    if plan is not None:
        from redact.redaction.plan import load_plan

        plan_obj = load_plan(plan, info)
        plan_obj.check_settings(settings.ids, entry.sha256)
    if estimator is None:
        estimator = PoseEstimator.default(settings.pose, settings.model_threads)  # hash check before output
    _check_memory(source, info, settings)

    created = fsio.make_folder(out_dir)
    try:
        with fsio.lock_folder(out_dir) as lock:  # before any work: a second run into OUT stops here
            video_final, pkg_final = _check_paths(source, out_dir, settings.archive)  # again, under the lock
            notices = fsio.staging_notices(out_dir, *fsio.stale_staging(out_dir, STAGING_PREFIX, lock.acquired_at))
            needed, free = _check_space(out_dir, info, settings)
            try:
                staging = Path(tempfile.mkdtemp(prefix=STAGING_PREFIX, dir=out_dir))
            except OSError as e:
                raise fsio.write_error(out_dir / STAGING_PREFIX, e) from None
            try:
                background = (_build_background(source, estimator, settings)
                              if settings.render.style == "background" else None)
                run = _Run(source, info, settings, entry, estimator, signer, plan_obj, background,
                           obscurer_for(settings.render, background),
                           disclosure, privacy, audit, progress, records, started)
                result = _run(run, _Outputs(out_dir, staging, video_final, pkg_final))
            except (RedactError, OSError) as e:
                if fsio.no_space(e):
                    raise NoSpaceError(out_dir, needed, free) from None
                if isinstance(e, OSError) and _inside(e.filename, out_dir):
                    raise OutputError(f"writing in {out_dir} failed: {e.strerror or e}") from None
                raise
            finally:
                shutil.rmtree(staging, ignore_errors=True)  # every worker thread has stopped by now
    except BaseException:
        if created:
            with contextlib.suppress(OSError):
                out_dir.rmdir()  # only when empty: a folder this run made and left nothing in
        raise
    return replace(result, notices=notices)


def _inside(name, folder: Path) -> bool:
    if not isinstance(name, str | os.PathLike):
        return False
    try:
        return Path(os.path.abspath(name)).is_relative_to(os.path.abspath(folder))
    except (TypeError, ValueError):
        return False


#: Bits per pixel of the redacted H.264 video assumed by the space estimate (common practice:
#: x264 at crf 20 stays near 0.1 bit per pixel on camera footage; obscured regions compress better).
VIDEO_BITS_PER_PIXEL = 0.1
#: Package bytes per frame assumed by the space estimate: a skeleton row of a few people, a quality
#: line and a frame digest (common practice, from the sizes of the test clips' packages).
PACKAGE_BYTES_PER_FRAME = 2500


def estimate_output_bytes(info: VideoInfo, settings: ProcessSettings) -> int:
    """Disk space a run needs in OUT, in bytes: the redacted video (the larger of the source size
    and VIDEO_BITS_PER_PIXEL per pixel), twice with the source audio carried over (a second file is
    written), the package (twice for an archive: the folder and the .tar exist together), 1 MB spare."""
    video = max(info.bytes, int(info.frames * info.width * info.height * VIDEO_BITS_PER_PIXEL / 8))
    if settings.include_audio and info.has_audio:
        video *= 2
    pkg = info.frames * PACKAGE_BYTES_PER_FRAME * (2 if settings.archive else 1)
    return video + pkg + 1_000_000


def _check_space(out_dir: Path, info: VideoInfo, settings: ProcessSettings) -> tuple[int, int | None]:
    """(bytes needed, bytes free); NoSpaceError before any work when OUT's file system lacks them."""
    needed = estimate_output_bytes(info, settings)
    try:
        free = fsio.free_bytes(out_dir)
    except OSError:
        return needed, None
    if free < needed:
        raise NoSpaceError(out_dir, needed, free)
    return needed, free


#: Memory of a run apart from its frames (interpreter, NumPy, OpenCV, onnxruntime with the pose
#: model, PyAV): measured with benchmarks/memory_by_resolution.py (about 250 MiB at 320×240).
BASE_MEMORY = 250 * 2**20
#: Frames the codecs hold, in RGB frame sizes: x264 keeps its look-ahead, B-frames and frame threads
#: (preset veryfast) and FFmpeg's decoder a frame per thread, each 1.5 bytes a pixel (YUV 4:2:0);
#: fitted to benchmarks/memory_by_resolution.py (within 10 % of the measured peak from 720p to 8K).
CODEC_FRAMES = 22


def frames_in_flight(info: VideoInfo, settings: ProcessSettings) -> int:
    """The most whole RGB frames a run holds at once outside the codecs: each queue between the
    threads (bounded by bytes, media.stages.depth_for) plus the one its consumer works on, the
    frames ahead of inference, the frame being drawn, and the look-back (lookback_seconds × fps
    frames, held back from the encoder, the only part that grows with the frame rate)."""
    frame = info.width * info.height * 3
    workers = settings.model_frames
    ahead = max(workers, depth_for(frame, 2 * workers))  # map_ahead never takes fewer than its workers
    return ((depth_for(frame, 4) + 1) + ahead + (depth_for(frame, 2) + 1) + 1
            + settings.lookback_frames(float(info.fps)) + (depth_for(frame, 4) + 1))


def estimate_memory_bytes(info: VideoInfo, settings: ProcessSettings) -> int:
    """Memory a run needs, in bytes: BASE_MEMORY + (frames_in_flight + CODEC_FRAMES) RGB frames.
    Independent of the clip's length; grows with the frame size (README has the measured table)."""
    return BASE_MEMORY + info.width * info.height * 3 * (frames_in_flight(info, settings) + CODEC_FRAMES)


def available_memory() -> int | None:
    """Bytes of memory available without swapping out others, plus free swap (Linux /proc/meminfo
    MemAvailable + SwapFree, proc(5)); None where that is not known."""
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            fields = dict(line.split(":", 1) for line in f if ":" in line)
        return (int(fields["MemAvailable"].split()[0]) + int(fields.get("SwapFree", "0 kB").split()[0])) * 1024
    except (OSError, KeyError, ValueError):
        return None


def _check_memory(source: Path, info: VideoInfo, settings: ProcessSettings) -> None:
    """InputError before any output when the machine cannot hold what the run needs (a run killed
    for memory halfway gives no message and leaves its staging folder behind)."""
    needed, free = estimate_memory_bytes(info, settings), available_memory()
    if free is not None and needed > free:
        raise InputError(f"{source}: a {info.width}×{info.height} run needs about {needed / 2**30:.1f} GiB of "
                         f"memory and {free / 2**30:.1f} GiB are available; close other programs, or scale the "
                         "video down first (memory grows with the frame size, not the length)")


def _place(video_tmp: Path, video_final: Path, signed: Path, pkg_final: Path) -> None:
    """Rename the video, then the package, into place, never over anything; the package last, so
    its presence means the run completed. A package that cannot be placed takes the video back."""
    fsio.rename_new(video_tmp, video_final)
    try:
        fsio.rename_new(signed, pkg_final)
    except BaseException:
        with contextlib.suppress(OSError):
            os.rename(video_final, video_tmp)
        raise


@dataclass(frozen=True)
class _Run:
    """Everything one run uses, prepared and checked before any output exists (see process_video)."""

    source: Path
    info: VideoInfo
    settings: ProcessSettings
    model: ModelEntry
    estimator: Estimator
    signer: Signer
    plan: Plan | None
    background: Background | None
    obscurer: Obscurer
    disclosure: dict | None
    privacy: PrivacyOptions | None
    audit: bool
    progress: Callable[[int, int], None] | None
    records: Callable[[ObscureRecord], None] | None
    started: float

    @property
    def fps(self) -> float:
        return float(self.info.fps)


@dataclass(frozen=True)
class _Outputs:
    """Where a run writes: the staging folder inside out_dir, and the final video and package paths."""

    out_dir: Path
    staging: Path
    video: Path
    package: Path

    @property
    def package_dir(self) -> Path:
        return self.staging / PACKAGE_NAME

    @property
    def video_tmp(self) -> Path:
        return self.staging / VIDEO_NAME


@dataclass(frozen=True)
class _Streamed:
    """What the streaming pass saw: frames decoded and written, the source's digest and size as
    read, whether decoding stopped early, per-frame counts, the review ranges and the tracks."""

    frames: int
    frames_written: int
    sha256: str
    bytes: int
    stopped_early: str | None
    corrupt_frames: int
    stats: RunStats
    monitor: QualityMonitor
    summaries: list[TrackSummary]
    search: dict


def _log_start(run: _Run, params: dict, log: TransformLog) -> None:
    """The log's first entries; every setting in them comes from params (ProcessSettings.effective)."""
    info, entry = run.info, run.model
    log.append("probe", **{k: v for k, v in info.as_dict().items() if k != "path"}, name=run.source.name)
    log.append("model", id=entry.id, sha256=entry.sha256, licence=entry.licence, runtime="onnxruntime-cpu",
               threads=params["threads"], frames_at_once=params["model_frames"])
    log.append("detection", **params["pose"], detect_every=params["detect_every"], search=params["search"],
               scene=params["scene"])
    log.append("tracking", **params["tracker"], coast_seconds=params["coast_seconds"])
    if run.background is not None:
        log.append("background", samples=params["background_samples"],
                   valid_fraction=round(float(run.background.valid.mean()), 4))


def _stream(run: _Run, out: _Outputs) -> _Streamed:
    """decode → pose → track → (plan) → obscure record → look-back → render → encode, plus the
    rows, quality lines and frame digests (redact.finishing)."""
    from redact.media.video import VideoReader, VideoWriter

    s, info, pkg_dir = run.settings, run.info, out.package_dir
    tracking = TrackingPass(run.estimator, s.ids, run.fps, inference_workers(s, run.estimator))
    monitor = QualityMonitor(s.review)
    stats = RunStats()
    lookback = LookBack(s.lookback_frames(run.fps), s.render.regions, tracking.config.max_margin, stats)
    n_frames = 0
    frame_bytes = info.width * info.height * 3  # queues hold at most QUEUE_BYTES of frames each (media.stages)
    from redact.review.store import REGIONS, RecordStore

    store = RecordStore(pkg_dir / REGIONS, info.width, info.height, s.render)  # for re-rendering (docs/review.md)
    with store, VideoReader(run.source, threads=0) as reader, \
            VideoWriter(out.video_tmp, info.width, info.height, info.time_base, info.fps, crf=s.crf,
                        colour=info.colour) as writer, \
            WriteBehind(writer.write, depth=depth_for(frame_bytes, 4)) as encoder, \
            open(pkg_dir / package.SKELETONS, "wb") as skel, \
            open(pkg_dir / package.QUALITY, "wb") as qual, \
            open(pkg_dir / package.FRAMES, "wb") as frames_out:
        sinks = FrameSinks(encoder.submit, skel, qual, frames_out, info.frames, run.progress,
                           _storing(store, run.records))
        producers = (MotionCover(s.unexplained, run.fps, s.search.windows.min_person_height, s.render.regions, stats),
                     ) if s.scene.motion.enabled else ()
        finisher = FrameFinisher(s.render, s.detect_every, run.obscurer, lookback, monitor, stats, sinks, producers)
        # Detection may run on several frames at once; tracking stays here, in frame order.
        # Obscure records, the look-back, rendering, rows and quality run in one thread behind,
        # overlapping the next inferences.
        # Closing the tracking pass stops and joins the inference and decoding threads (on every exit
        # path) before the reader closes its container: a decoder thread left inside FFmpeg can crash.
        with WriteBehind(finisher.finish, depth=depth_for(frame_bytes, 2)) as finishing, \
                contextlib.closing(tracking.run(read_ahead(reader.frames(), depth=depth_for(frame_bytes, 4)),
                                                ahead=depth_for(frame_bytes, 2 * tracking.workers))) as tracked:
            for item in tracked:
                finishing.submit(_decide(run.plan, item))
                n_frames += 1
        finisher.flush()
        encoder.close()
    return _Streamed(n_frames, writer.frames_written, reader.sha256, reader.bytes, reader.stopped_early,
                     reader.corrupt_frames, stats, monitor, tracking.summary(), tracking.search.record())


def _storing(store, records: Callable[[ObscureRecord], None] | None) -> Callable[[ObscureRecord], None]:
    """The records sink: each final obscure record stored (redact.review.store), then handed on."""
    def sink(record: ObscureRecord) -> None:
        store.write(record)
        if records is not None:
            records(record)
    return sink


def _decide(plan: Plan | None, item: TrackedFrame) -> FrameWork:
    """The plan's decision for one tracked frame; a decision that raises fails the frame (closed)."""
    if item.tracks is None or plan is None:
        return FrameWork(item.frame, item.tracks, None, item.error, item.scene)
    try:
        return FrameWork(item.frame, item.tracks, plan.decide(item.frame.index, item.frame.t, item.tracks,
                                                              item.frame.image.shape), scene=item.scene)
    except Exception as e:  # fail closed: the finisher obscures the whole frame
        return FrameWork(item.frame, None, None, type(e).__name__, item.scene)


def _run(run: _Run, out: _Outputs) -> ProcessResult:
    """The streaming pass and the packaging, inside the staging folder (see process_video)."""
    from redact.media.video import copy_audio

    s, info, plan, privacy = run.settings, run.info, run.plan, run.privacy
    pkg_dir, video_tmp = out.package_dir, out.video_tmp
    pkg_dir.mkdir()
    params = s.effective(run.fps)  # the one record of the settings used: log and predicate
    log = TransformLog(pkg_dir / package.LOG)
    _log_start(run, params, log)
    seen = _stream(run, out)
    stats, monitor = seen.stats, seen.monitor
    log.append("decode", frames=seen.frames, sha256=seen.sha256, bytes=seen.bytes,
               stopped_early=seen.stopped_early, corrupt_frames=seen.corrupt_frames)
    log.append("redaction", style=params["render"]["style"], figures=params["render"]["figure"],
               regions=params["render"]["regions"], frames_with_people=frame_ranges(stats.with_people),
               person_frames=stats.person_frames, predicted_person_frames=stats.predicted_frames,
               frames_with_figures=stats.figure_frames, regions_by_reason=dict(sorted(stats.reasons.items())),
               lookback_seconds=params["lookback_seconds"], lookback_window_frames=params["lookback_window_frames"],
               new_people=stats.new_tracks, lookback_frames=frame_ranges(sorted(set(stats.lookback_frames))))
    log.append("search", **seen.search)
    motion = _motion_counts(stats, s)
    log.append("motion", **motion.to_json(), frames=frame_ranges(stats.motion_frames),
               action="moving areas no tracked person explains are obscured; never skeleton rows")
    if stats.faults:
        log.append("fault", frames=frame_ranges(stats.faults), count=len(stats.faults),
                   reasons=stats.fault_reasons, action="frame fully obscured")
    review = monitor.ranges()
    (pkg_dir / package.REVIEW).write_bytes(review_document(review, s.review, seen.frames))
    log.append("review", rules=params["review"], ranges=len(review), flagged_frames=monitor.flagged)

    summaries = seen.summaries
    if plan is not None:  # before anything is renamed into place: a bad track id leaves no output
        plan.check_end([t.id for t in summaries], seen.sha256)
        log.append("plan", **plan.record(), applied=plan.applied())
    (pkg_dir / package.TRACKS).write_bytes(_tracks_json(summaries))
    if privacy is not None:
        _apply_privacy(pkg_dir, privacy, info, log)

    if s.include_audio and info.has_audio:
        with_audio = out.staging / ("audio-" + VIDEO_NAME)
        copy_audio(video_tmp, run.source, with_audio)
        os.replace(with_audio, video_tmp)
    log.append("encode", codec="h264", encoder="libx264", crf=params["crf"], frames=seen.frames_written,
               audio=("included" if (s.include_audio and info.has_audio)
                      else ("dropped" if info.has_audio else "none")),
               container_metadata="not copied", source_metadata_keys=list(info.metadata_keys),
               colour=info.colour.as_dict())
    audit_result = None
    if run.audit:
        from redact.redaction.audit import AuditSettings, audit_summary, audit_video

        audit_result = audit_summary(audit_video(video_tmp, run.source, AuditSettings(threads=s.threads)))
        log.append("audit", **audit_result)
    if run.disclosure:
        log.disclosure(**run.disclosure)

    entry = run.model
    predicate = Predicate(
        source=SourceRecord(name=run.source.name, sha256=seen.sha256, bytes=seen.bytes,
                            duration=round(info.duration, 6), fps=f"{info.fps.numerator}/{info.fps.denominator}",
                            frames=seen.frames, width=info.width, height=info.height,
                            stopped_early=seen.stopped_early),
        model=ModelRecord(entry.id, entry.sha256, entry.licence),
        parameters=params,
        privacy=privacy.to_record() if privacy is not None else {"options": "none"},
        disclosure=Disclosure.of(run.disclosure),
        review=ReviewCounts(len(review), monitor.flagged),
        faults=FaultCounts(len(stats.faults)),
        motion=motion,
        plan=None if plan is None else plan.record(),
        audit=None if audit_result is None else AuditRecord.of(audit_result),
        tool=ToolRecord("redact", __version__),
        created=utc_now(),
    )
    signed = out.staging / "signed"
    package.write_package(pkg_dir, signed, predicate, run.signer, video=video_tmp, archive=s.archive)
    _place(video_tmp, out.video, signed, out.package)  # the package last: its presence means the run completed
    return ProcessResult(out.out_dir, out.video, out.package, seen.frames, len(summaries), tuple(stats.faults),
                         tuple(review), time.perf_counter() - run.started, seen.stopped_early,
                         run.signer.key_id, seen.sha256, audit_result)


def _motion_counts(stats: RunStats, settings: ProcessSettings) -> MotionCounts:
    """What the motion net did over the run, for the log and the signed statement."""
    return MotionCounts(enabled=settings.scene.motion.enabled, frames_obscured=len(stats.motion_frames),
                        areas=stats.motion_areas, frames_flagged=stats.motion_flagged,
                        states=dict(sorted(stats.motion_states.items())))


def _tracks_json(summaries: list[TrackSummary]) -> bytes:
    """tracks.json from the tracker's summaries (written by redact.formats.tracks_json)."""
    return encode_tracks(summaries)


def _apply_privacy(pkg_dir: Path, privacy: PrivacyOptions, info: VideoInfo, log: TransformLog) -> None:
    """Rewrite skeletons.jsonl and tracks.json through the de-identification options (redact.skeletons.privacy)."""
    from redact.skeletons.derive import rewrite_skeleton_files

    summary = rewrite_skeleton_files(pkg_dir, privacy, (info.width, info.height), float(info.fps))
    log.append("privacy", **privacy.to_record(), summary=summary)
