"""Render a redacted copy again from the source, the stored regions and corrections: no model runs.

decode → each frame's stored obscure record (redact.review.store) plus the corrections (a
redaction plan: moving boxes, fixed areas, whole frames; redact.redaction.plan), added over
everything with reason "review" → render (redact.redaction.render.render_record, the pipeline's
own pure renderer) → encode. With no corrections the frames are the same as the original run's.
The source must be the signed one: its per-frame digests are compared with the package's
frames.sha256 while decoding, and its file hash at the end; nothing is moved into place unless
both match (fail closed). Corrections only ever add obscured pixels.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from redact.errors import InputError, RedactError
from redact.redaction.obscure import MaskArea, ObscureRecord, ObscureRegion, Reason, WholeFrame
from redact.redaction.render import RenderSettings, obscurer_for, render_record
from redact.review.store import StoredRegions
from redact.vision.records import Tracks


def render_settings(parameters: dict) -> RenderSettings:
    """The RenderSettings a run recorded in its signed parameters."""
    from redact.redaction.regions import RegionSettings

    r = dict(parameters.get("render") or {})
    regions = RegionSettings(**(r.pop("regions", None) or {}))
    try:
        return RenderSettings(**r, regions=regions)
    except TypeError as e:
        raise InputError(f"the package's render settings are not understood ({e})") from None


def with_corrections(record: ObscureRecord, plan, t: float) -> ObscureRecord:
    """The record with the corrections of `plan` active on its frame added over everything
    (reason "review"): the whole frame, or the union of the active areas."""
    if plan is None:
        return record
    d = plan.decide(record.frame, t, Tracks.empty(), (record.height, record.width, 3))
    why = (Reason("review", entry="corrections.json"),)
    if d.whole_frame:
        return record.add(ObscureRegion(WholeFrame(), why), over=True)
    if d.mask is not None:
        area = MaskArea.from_mask(d.mask)
        if not area.empty:
            return record.add(ObscureRegion(area, why), over=True)
    return record


@dataclass(frozen=True)
class RerenderResult:
    """What a re-render wrote: the video, its frame count, and the source checks that passed."""

    video: Path
    frames: int
    source_sha256: str
    corrected_frames: int


def rerender(source: Path, stored: StoredRegions, frame_digests: Sequence[str], source_sha256: str,
             parameters: dict, out_video: Path, plan=None,
             progress: Callable[[int, int], None] | None = None) -> RerenderResult:
    """Write `out_video` (a new file) from `source` + stored regions + the corrections `plan`.

    frame_digests: the package's frames.sha256 (hex per frame); source_sha256 the signed file hash;
    parameters: the signed run parameters (render style, crf). Raises InputError when the source
    is not the signed one; the output is written under a temporary name and renamed at the end.
    """
    from redact.media.stages import WriteBehind, read_ahead
    from redact.media.video import VideoReader, VideoWriter, probe

    style = render_settings(parameters)
    if style.style == "background":
        raise InputError("re-rendering a copy made with --style background is not supported yet (the empty "
                         "scene it shows is not stored); process the video again with a plan instead")
    obscurer = obscurer_for(style)
    info = probe(source)
    if (info.width, info.height) != (stored.width, stored.height):
        raise InputError(f"{source}: {info.width}×{info.height}, but the regions are for "
                         f"{stored.width}×{stored.height}: not the signed source")
    out_video = Path(out_video)
    if os.path.lexists(out_video):
        raise InputError(f"{out_video} already exists")
    tmp = out_video.with_name(f".{out_video.name}.partial-{os.getpid()}")
    total = len(stored.frames)
    corrected = 0
    n = 0
    try:
        with VideoReader(source, threads=0) as reader, \
                VideoWriter(tmp, info.width, info.height, info.time_base, info.fps,
                            crf=int(parameters.get("crf", 20)), colour=info.colour) as writer, \
                WriteBehind(writer.write, depth=4) as encoder:
            for frame in read_ahead(reader.frames(), depth=4):
                if n >= total:
                    raise InputError(f"{source}: more frames than the signed source ({total})")
                if frame.digest.hex() != frame_digests[n]:
                    raise InputError(f"{source}: frame {n} differs from the signed source (frames.sha256)")
                record = stored.records[n]
                fixed = with_corrections(record, plan, frame.t)
                corrected += fixed is not record
                encoder.submit(render_record(frame.image, fixed, style, obscurer=obscurer),
                               frame.pts if frame.pts is not None else frame.index)
                n += 1
                if progress is not None:
                    progress(n, total)
            encoder.close()
        if n != total:
            raise InputError(f"{source}: {n} frames decoded, the signed source has {total}")
        if reader.sha256 != source_sha256:
            raise InputError(f"{source}: SHA-256 {reader.sha256[:16]}… is not the signed source's")
        os.rename(tmp, out_video)
    except RedactError:
        raise
    finally:
        if os.path.lexists(tmp):
            os.unlink(tmp)
    return RerenderResult(out_video, n, source_sha256, corrected)
