"""Derived packages: a new signed, skeleton-only package made from a verified one under
de-identification options (redact.skeletons.privacy), whose log names the parent's signed statement.

`rewrite_skeleton_files` applies the options inside a staging package directory and keeps the
other files consistent with the new rows: tracks.json is rebuilt from them (new ids, counts of
the rows kept, times as written), people within a row are sorted by id (so their order does not
carry the old ids' order), and with relative time quality.jsonl and review.json are shifted too.
quality.jsonl and review.json hold per-frame measures and frame ranges, never track ids.

`derive_package` verifies the parent (signature, file set, hashes, log), copies its files except
envelope.json and log.jsonl, starts a new log whose first entry ("derive") records the SHA-256 of
the parent's exact DSSE payload bytes, its key id and log head, applies the options and signs.

CAUTION: these options lower but do not remove the risk of re-identification (gait alone
identifies people: GaitPT, arXiv 2308.10623); the derived data stay pseudonymised personal data
(GDPR Art. 4(5), Recital 26). Anyone holding both packages can match rows by frame index and
position, so new ids only separate exports from each other, not from their parent; and since
the tool numbers tracks in order of first appearance, that order still shows in any copy.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path

from redact import __version__, fsio
from redact.errors import InputError, OutputError, PackageError
from redact.formats import quality_jsonl, review_json, skeletons_jsonl, tracks_json
from redact.formats.tracks_json import TrackRecord
from redact.provenance.contents import VerifiedPackage
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.package import ENVELOPE, LOG, QUALITY, REVIEW, SKELETONS, TRACKS, write_package
from redact.provenance.predicate import Disclosure, ParentRecord, Predicate, ToolRecord
from redact.skeletons.privacy import PrivacyOptions, apply_privacy_file, parse_keypoints

#: Parent files not copied: the stored regions (redact.review.store.REGIONS) hold the people's
#: outlines in source pixels, which would undo coordinate options such as noise or relative units.
NOT_COPIED = ("regions.jsonl.gz",)


# ---- inside a staging directory ------------------------------------------------------------------

def _first_time_and_units(path: Path) -> float | None:
    """Stream time of the first row (None for an empty file); InputError when any row is not in pixels."""
    t0 = None
    try:
        with open(path, "rb") as f:
            for n, row in enumerate(skeletons_jsonl.read_stream(f), 1):
                if row.units != "pixels":
                    raise InputError(f"{SKELETONS} line {n}: coordinates are not in pixels (a de-identified "
                                     "package); the options apply to pixel coordinates only: derive from a "
                                     "package in pixels")
                if t0 is None:
                    t0 = row.t
    except PackageError as e:
        raise InputError(str(e)) from None
    return t0


def _write_via_temp(path: Path, chunks) -> None:
    with fsio.atomic_file(path, replace=True) as out:
        for c in chunks:
            out.write(c)


def _rows_pass(path: Path) -> tuple[list[TrackRecord], int]:
    """Sort people by id in every row, through the typed rows (streamed into a temporary file, kept
    only when a row changed); the tracks.json records rebuilt from the rows."""
    stats: dict[int, dict] = {}
    reordered = 0
    tmp = path.with_name(f".{path.name}.sorted-{os.getpid()}")
    try:
        with open(path, "rb") as f, open(tmp, "wb") as out:
            for row in skeletons_jsonl.read_stream(f):
                people = sorted(row.people, key=lambda p: p.id)
                if [p.id for p in people] != [p.id for p in row.people]:
                    row = replace(row, people=tuple(people))
                    reordered += 1
                out.write(skeletons_jsonl.encode_row(row))
                for p in row.people:
                    s = stats.get(p.id)
                    if s is None:
                        s = stats[p.id] = {"first_frame": row.frame, "first_t": row.t,
                                           "frames_observed": 0, "frames_predicted": 0}
                    s["last_frame"], s["last_t"] = row.frame, row.t
                    s["frames_observed" if p.observed else "frames_predicted"] += 1
        if reordered:
            os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.unlink(tmp)
    records = [TrackRecord(tid, s["first_frame"], s["last_frame"], s["frames_observed"], s["frames_predicted"],
                           s["first_t"], s["last_t"]) for tid, s in sorted(stats.items())]
    return records, reordered


def _retime_quality(path: Path, t0: float) -> int:
    """quality.jsonl with t relative to t0, through its typed lines (redact.formats.quality_jsonl)."""
    with open(path, "rb") as f:
        lines = list(quality_jsonl.read_quality(f))
    _write_via_temp(path, [quality_jsonl.encode_quality_line(replace(q, t=q.t - t0)) for q in lines])
    return len(lines)


def _retime_review(path: Path, t0: float) -> int:
    """review.json with t_start / t_end relative to t0, through its typed value (redact.formats.review_json)."""
    doc = review_json.decode_review(path.read_bytes())
    ranges = tuple(replace(r, t_start=r.t_start - t0, t_end=r.t_end - t0) for r in doc.ranges)
    _write_via_temp(path, [review_json.encode_review(replace(doc, ranges=ranges))])
    return len(ranges)


def rewrite_skeleton_files(pkg_dir: Path, options: PrivacyOptions, frame_size: tuple[int, int] | None,
                           fps: float | None) -> dict:
    """Apply the de-identification options to PKG_DIR/skeletons.jsonl and keep tracks.json (and, with
    relative time, quality.jsonl and review.json) consistent; returns the summary for the log.

    pkg_dir is a staging package directory (no envelope yet); frame_size (width, height) in px and
    fps are the source's. tracks.json is rebuilt from the new rows: the ids written there are the
    rows' ids, and frame counts and times count only the rows kept. Raises InputError when the rows
    are not in pixels or the options need a size / rate that is missing.
    """
    pkg_dir = Path(pkg_dir)
    skel = pkg_dir / SKELETONS
    if skel.is_symlink() or not skel.is_file():
        raise InputError(f"{skel}: missing; nothing to de-identify")
    tracks_in = None
    if (pkg_dir / TRACKS).is_file():
        tracks_in = len(tracks_json.decode_tracks((pkg_dir / TRACKS).read_bytes()))
    t0 = _first_time_and_units(skel)
    summary = apply_privacy_file(skel, skel, options, frame_size, fps)
    records, reordered = _rows_pass(skel)
    _write_via_temp(pkg_dir / TRACKS, [tracks_json.encode_tracks(records)])
    summary["rows_people_reordered"] = reordered
    summary["tracks_in"] = tracks_in
    summary["tracks_out"] = len(records)
    if options.relative_time and t0 is not None:
        summary["time_offset_removed"] = True
        if (pkg_dir / QUALITY).is_file():
            summary["quality_rows_retimed"] = _retime_quality(pkg_dir / QUALITY, t0)
        if (pkg_dir / REVIEW).is_file():
            summary["review_ranges_retimed"] = _retime_review(pkg_dir / REVIEW, t0)
    return summary


# ---- a derived package ----------------------------------------------------------------------------

@dataclass(frozen=True)
class DerivedPackage:
    """What derive wrote: the new package, its exact signed payload, and the parent it names."""

    path: Path
    payload: bytes
    key_id: str
    parent: dict
    privacy: dict
    summary: dict


def _source_geometry(predicate: Predicate) -> tuple[tuple[int, int] | None, float | None]:
    src = predicate.source
    size = (src.width, src.height) if src.width > 0 and src.height > 0 else None
    return size, src.fps_value


def _copy_verified(parent: VerifiedPackage, staging: Path) -> list[str]:
    """Copy the parent's package files except envelope and log through the verified package, so each
    is checked against its signed hash as it is read (the parent could change after verification)."""
    copied = []
    for name in sorted(parent.statement.files):
        if name in (ENVELOPE, LOG) or name in NOT_COPIED:
            continue
        dst = staging / name
        dst.parent.mkdir(parents=True, exist_ok=True)
        with parent.open(name) as f, open(dst, "xb") as out:
            shutil.copyfileobj(f, out, 1 << 20)
        copied.append(name)
    return copied


def derive(parent: Path, out: Path, trusted_keys: Sequence, signer, options: PrivacyOptions,
           disclosure: dict | None = None, archive: bool = False) -> DerivedPackage:
    """derive_package, returning what was written (payload, parent record, privacy summary)."""
    from redact.provenance.verify import verify_package

    parent, out = Path(parent), Path(out)
    if not isinstance(options, PrivacyOptions):
        raise InputError("derive needs de-identification options (a PrivacyOptions)")
    if os.path.lexists(out):
        raise OutputError(f"{out} already exists; choose a new name (packages are never overwritten)")
    if not out.parent.is_dir():
        raise OutputError(f"directory {out.parent} does not exist")
    p_res, o_res = parent.resolve(), out.resolve()
    if o_res == p_res or p_res in o_res.parents:
        raise OutputError(f"{out}: would write inside the parent package; choose a place outside it")
    verified = verify_package(parent, trusted_keys)  # VerificationFailed lists every finding
    pred = verified.predicate
    parent_rec = ParentRecord(verified.statement_sha256, verified.key_id,
                              None if pred.log is None else pred.log.head, pred.privacy)
    parent_privacy = pred.privacy
    dropped = parent_privacy.get("drop_keypoints")
    if isinstance(dropped, (list, tuple)) and dropped:
        # Keypoints the parent already dropped hold zeros: keep them dropped, or noise and
        # proportion normalisation would treat the zeros as positions.
        try:
            kept_dropped = parse_keypoints([str(k) for k in dropped])
        except InputError:
            raise InputError("the parent's privacy record names unknown dropped keypoints") from None
        options = replace(options, drop_keypoints=tuple(sorted(set(options.drop_keypoints) | set(kept_dropped))))
    frame_size, fps = _source_geometry(pred)

    try:
        partial = Path(tempfile.mkdtemp(prefix=f".{out.name}.derive-partial-", dir=out.parent))
    except OSError as e:
        raise OutputError(f"cannot write next to {out}: {e.strerror or e}") from None
    staging = partial / "package"  # created with the usual permissions (mkdtemp's are 0700)
    try:
        staging.mkdir()
        copied = _copy_verified(verified, staging)
        log = TransformLog(staging / LOG)
        log.append("derive", parent_statement_sha256=parent_rec.statement_sha256,
                   parent_key_id=parent_rec.key_id, parent_log_head=parent_rec.log_head,
                   parent_log_entries=None if pred.log is None else pred.log.entries, copied=copied,
                   not_copied=[n for n in NOT_COPIED if n in verified.statement.files],
                   note="new log; the parent's log stays with the parent package")
        summary = rewrite_skeleton_files(staging, options, frame_size, fps)
        record = options.to_record()
        log.append("privacy", **record, summary=summary)
        if disclosure:
            log.disclosure(**disclosure)
        # Carried from the parent as they are: what the source, model and run were.
        predicate = Predicate(source=pred.source, model=pred.model, parameters=pred.parameters, privacy=record,
                              disclosure=Disclosure.of(disclosure), review=pred.review, faults=pred.faults,
                              motion=pred.motion,
                              parent=parent_rec, tool=ToolRecord("redact", __version__), created=utc_now())
        payload = write_package(staging, out, predicate, signer, video=None, archive=archive)
    finally:
        shutil.rmtree(partial, ignore_errors=True)  # the package inside was moved away on success
    return DerivedPackage(out, payload, signer.key_id, parent_rec.to_json(), record, summary)


def derive_package(parent: Path, out: Path, trusted_keys: list, signer, options: PrivacyOptions,
                   disclosure: dict | None = None, archive: bool = False) -> bytes:
    """Verify PARENT (directory or .tar) with the trusted keys, then write OUT: its files under the
    de-identification options, a new log naming the parent's statement, signed by `signer`
    (OUT a directory, or a .tar with archive). Returns the new statement's exact payload bytes.

    Raises VerificationFailed (with every finding) for an invalid parent, InputError / OutputError
    for unusable options or paths; nothing is left at OUT on failure.
    """
    return derive(parent, out, trusted_keys, signer, options, disclosure, archive).payload
