"""Reading a processed output folder for review, and writing a reviewed copy with its signed record.

An output folder (`redact process … --out OUT`) holds `redacted.mp4` and `package/`. Reviewing it
writes `OUT/review-N/` (N = 1, 2, …; nothing is ever overwritten) with a new `redacted.mp4`,
rendered again from the source, the stored regions and the corrections, and a new signed
`package/` whose log names the parent package's signed statement (SHA-256 of its exact payload
bytes), records every correction, every range's status and note, the reviewer and the time, and
whether every frame of the video was shown on screen. Everything is staged in a hidden folder and
renamed into place at the end, the package last.

The parent is verified first (signature, every file, the log, the redacted video); every file
read from it afterwards is re-hashed against its signed digest, since it could change between
verification and use.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import tempfile
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

from redact import __version__, jsonio
from redact.errors import InputError, OutputError, PackageError
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.package import ENVELOPE, ENVELOPE_LIMIT, FRAMES, LOG, REVIEW, open_package, write_package
from redact.provenance.predicate import Disclosure, ParentRecord, Predicate, ToolRecord, thaw
from redact.review.state import RangeReview, ReviewState

if TYPE_CHECKING:  # annotations only: nothing more is imported at run time
    from redact.provenance.contents import VerifiedPackage

VIDEO = "redacted.mp4"
PACKAGE = "package"
CORRECTIONS = "corrections.json"
REVIEW_DIR = re.compile(r"review-([1-9][0-9]{0,5})")
READ_LIMIT = 512 * 1024 * 1024  # bytes of one package file read whole (common practice)


@dataclass(frozen=True)
class LoadedOutput:
    """A verified output: where it is, the verified statement, and the files it holds (bytes re-hashed)."""

    folder: Path
    video: Path
    package: Path
    verified: VerifiedPackage
    files: dict[str, bytes]

    @property
    def predicate(self) -> Predicate:
        return self.verified.predicate

    @property
    def frames(self) -> int:
        return int(self.predicate.source.frames)

    @property
    def statement_sha256(self) -> str:
        return self.verified.statement_sha256

    def parent_record(self) -> ParentRecord:
        """What a package made from this one records as its parent."""
        log = self.predicate.log
        return ParentRecord(self.statement_sha256, self.verified.key_id, None if log is None else log.head,
                            thaw(self.predicate.privacy))

    def frame_digests(self) -> list[str]:
        return self.files[FRAMES].decode("ascii").split()

    def ranges(self) -> tuple[RangeReview, ...]:
        doc = jsonio.loads(self.files[REVIEW], REVIEW)
        out = []
        for r in doc.get("ranges", []) if isinstance(doc, dict) else []:
            out.append(RangeReview(int(r["frames"][0]), int(r["frames"][1]), tuple(str(x) for x in r["reasons"])))
        return tuple(out)

    def initial_state(self) -> ReviewState:
        """The review to start from: this copy's recorded review when it is itself a reviewed copy."""
        state = ReviewState(self.frames, self.ranges())
        rec = thaw(self.predicate.human_review)
        if isinstance(rec, dict) and isinstance(rec.get("ranges"), list) and len(rec["ranges"]) == len(state.ranges):
            ranges = tuple(RangeReview(r.start, r.end, r.reasons, str(x.get("status", "not_checked")),
                                       str(x.get("note", ""))) for r, x in zip(state.ranges, rec["ranges"]))
            state = ReviewState(self.frames, ranges, str(rec.get("reviewer", "")))
        if CORRECTIONS in self.files:
            doc = jsonio.loads_object(self.files[CORRECTIONS], CORRECTIONS)
            state = ReviewState(state.frames, state.ranges, state.reviewer,
                                {k: doc[k] for k in ("moving_boxes", "regions", "obscure_frames") if k in doc})
        return state


def load_output(folder: Path, trusted_keys: Sequence) -> LoadedOutput:
    """Verify FOLDER's package and redacted video with the trusted keys and read the package files."""
    from redact.provenance.verify import verify_package

    folder = Path(folder)
    video, pkg = folder / VIDEO, folder / PACKAGE
    if not folder.is_dir():
        raise InputError(f"{folder}: no such output folder")
    if not pkg.exists() and (folder / (PACKAGE + ".tar")).is_file():
        pkg = folder / (PACKAGE + ".tar")
    if not pkg.exists() or not video.is_file():
        raise InputError(f"{folder}: expected {VIDEO} and {PACKAGE}/ from `redact process` (or `redact review`)")
    verified = verify_package(pkg, trusted_keys, video=video)
    from redact.review.store import REGIONS

    if not verified.has(REGIONS):
        raise InputError(f"{pkg}: holds no stored regions ({REGIONS}); it was made by an older version: "
                         "process the video again to review it here")
    files = {}
    for name in sorted(verified.statement.files):  # every read re-hashed against the signed subject
        if name not in (ENVELOPE, LOG):
            files[name] = verified.read_bytes(name, READ_LIMIT)
    with open_package(pkg) as reader:  # the envelope is not a subject: its signatures were just checked
        files[ENVELOPE] = reader.read(ENVELOPE, ENVELOPE_LIMIT)
    return LoadedOutput(folder, video, pkg, verified, files)


def latest(folder: Path) -> Path:
    """FOLDER or its newest review-N subfolder that holds a package (the copy to review now)."""
    best, n = Path(folder), 0
    if Path(folder).is_dir():
        for p in Path(folder).iterdir():
            m = REVIEW_DIR.fullmatch(p.name)
            if m and int(m.group(1)) > n and (p / PACKAGE).exists():
                best, n = p, int(m.group(1))
    return best


def root_of(folder: Path) -> Path:
    """The process output folder a (possibly reviewed) copy belongs to."""
    folder = Path(folder)
    return folder.parent if REVIEW_DIR.fullmatch(folder.name) else folder


def next_review_dir(root: Path) -> Path:
    n = 1
    while os.path.lexists(root / f"review-{n}"):
        n += 1
    return root / f"review-{n}"


@dataclass(frozen=True)
class AppliedReview:
    """What applying a review wrote."""

    folder: Path
    video: Path
    package: Path
    key_id: str
    statement_sha256: str
    corrected_frames: int
    summary: dict


def apply_review(parent: LoadedOutput, state: ReviewState, source: Path, signer, reviewed_at: str | None = None,
                 progress: Callable[[int, int], None] | None = None) -> AppliedReview:
    """Re-render PARENT from SOURCE with the review's corrections and sign a new package (see module doc)."""
    import io

    from redact.media.video import probe
    from redact.review.rerender import rerender
    from redact.review.store import REGIONS, parse_regions

    info = probe(source)
    plan = state.plan(info)
    root = root_of(parent.folder)
    out = next_review_dir(root)
    try:
        staging = Path(tempfile.mkdtemp(prefix=".redact-review-partial-", dir=root))
    except OSError as e:
        raise OutputError(f"cannot write to {root}: {e.strerror or e}") from None
    try:
        pred = parent.predicate
        stored = parse_regions(io.BytesIO(parent.files[REGIONS]), parent.frames)
        video_tmp = staging / VIDEO
        result = rerender(Path(source), stored, parent.frame_digests(), pred.source.sha256,
                          thaw(pred.parameters), video_tmp, plan=plan, progress=progress)
        pkg = staging / PACKAGE
        pkg.mkdir()
        copied = []
        for name, data in parent.files.items():
            if name in (ENVELOPE, LOG, CORRECTIONS):
                continue
            (pkg / name).parent.mkdir(parents=True, exist_ok=True)
            (pkg / name).write_bytes(data)
            copied.append(name)
        plan_bytes = state.plan_bytes()
        if plan_bytes is not None:
            (pkg / CORRECTIONS).write_bytes(plan_bytes)
        when = reviewed_at or utc_now()
        log = TransformLog(pkg / LOG)
        video_subject = parent.verified.video_subject
        parent_rec = {"statement_sha256": parent.statement_sha256, "key_id": parent.verified.key_id,
                      "log_head": None if pred.log is None else pred.log.head,
                      "log_entries": None if pred.log is None else pred.log.entries,
                      "video_sha256": None if video_subject is None else video_subject.sha256}
        log.append("review-parent", **{f"parent_{k}": v for k, v in parent_rec.items()}, copied=sorted(copied),
                   note="new log; the parent's log stays with the parent package")
        log.append("corrections", count=state.correction_count,
                   sha256=None if plan_bytes is None else hashlib.sha256(plan_bytes).hexdigest(),
                   entries=None if plan is None else {k: plan.record()[k] for k in
                                                      ("moving_boxes", "regions", "obscure_frames")},
                   applied=None if plan is None else plan.applied(), corrected_frames=result.corrected_frames)
        review = state.record()
        log.append("human-review", **review, reviewed_at=when)
        log.append("rerender", frames=result.frames, source_sha256=result.source_sha256,
                   source_frames_checked="every frame digest matched frames.sha256",
                   regions_sha256=hashlib.sha256(parent.files[REGIONS]).hexdigest(), model="not run",
                   encoder="libx264", crf=int(pred.parameters.get("crf", 20)))
        summary = {k: review[k] for k in ("reviewer", "ranges_checked", "ranges_total", "corrections",
                                          "whole_video_watched", "frames_watched", "frames")}
        summary["ranges"] = review["ranges"]
        summary["reviewed_at"] = when
        summary["corrections_sha256"] = None if plan_bytes is None else hashlib.sha256(plan_bytes).hexdigest()
        predicate = replace(pred, source=replace(pred.source, frames_root=None), disclosure=Disclosure.of(None),
                            parent=parent.parent_record(), human_review=summary,
                            tool=ToolRecord("redact", __version__), created=utc_now(), log=None)
        signed = staging / "signed"
        payload = write_package(pkg, signed, predicate, signer, video=video_tmp)
        try:
            out.mkdir()
        except FileExistsError:
            raise OutputError(f"{out} appeared while rendering; apply again to write the next review-N") from None
        os.rename(video_tmp, out / VIDEO)
        os.rename(signed, out / PACKAGE)
    except PackageError as e:
        raise InputError(str(e)) from None
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return AppliedReview(out, out / VIDEO, out / PACKAGE, signer.key_id, hashlib.sha256(payload).hexdigest(),
                         result.corrected_frames, summary)
