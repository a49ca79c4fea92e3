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

import json
import os
import shutil
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path

from redact import __version__, jsonio
from redact.errors import InputError, OutputError, PackageError
from redact.provenance.contents import VerifiedPackage
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.package import ENVELOPE, LOG, QUALITY, REVIEW, SKELETONS, TRACKS, write_package
from redact.provenance.predicate import Disclosure, ParentRecord, Predicate, ToolRecord
from redact.skeletons.privacy import PrivacyOptions, apply_privacy_file, parse_keypoints

_PEOPLE = b'"people":['
_ROW_END = b"]}\n"
_SPLIT = b'},{"id":'


# ---- inside a staging directory ------------------------------------------------------------------

def _first_time_and_units(path: Path) -> float | None:
    """Stream time of the first row (None for an empty file); InputError when any row is not in pixels."""
    t0 = None
    with open(path, "rb") as f:
        for n, line in enumerate(f, 1):
            if b'"units":' in line:
                raise InputError(f"{SKELETONS} line {n}: coordinates are not in pixels (a de-identified "
                                 "package); the options apply to pixel coordinates only: derive from a "
                                 "package in pixels")
            if t0 is None:
                try:
                    t0 = float(json.loads(line)["t"])
                except (ValueError, KeyError, TypeError) as e:
                    raise InputError(f"{SKELETONS} line {n}: {e}") from None
    return t0


def _sort_people(line: bytes, people: list[dict]) -> bytes:
    """The row with its people sorted by id, rebuilt from the row's own bytes (numbers unchanged).

    Relies on the fixed layout written by redact.skeletons.rows / redact.skeletons.privacy: person objects hold only
    arrays, so consecutive people are separated by exactly `},{"id":`.
    """
    head, sep, rest = line.partition(_PEOPLE)
    if not sep or not rest.endswith(_ROW_END) or not rest.startswith(b'{"id":'):
        raise OutputError(f"{SKELETONS}: unexpected row layout; cannot reorder people")
    body = rest[len(b'{"id":'):-len(b"}" + _ROW_END)]
    parts = body.split(_SPLIT)
    if len(parts) != len(people):
        raise OutputError(f"{SKELETONS}: unexpected row layout; cannot reorder people")
    order = sorted(range(len(people)), key=lambda i: people[i]["id"])
    new = head + _PEOPLE + b'{"id":' + _SPLIT.join(parts[i] for i in order) + b"}" + _ROW_END
    check = json.loads(new)["people"]
    if check != [people[i] for i in order]:  # the rebuilt row must hold exactly the same people
        raise OutputError(f"{SKELETONS}: reordering people changed a row; refusing to write it")
    return new


def _tracks_doc(stats: dict[int, dict]) -> bytes:
    """tracks.json in the format the pipeline writes, rebuilt from rows; sorted by id."""
    doc = {"tracks": [{"id": tid, "first_frame": s["first_frame"], "last_frame": s["last_frame"],
                       "frames_observed": s["frames_observed"], "frames_predicted": s["frames_predicted"],
                       "first_t": round(s["first_t"], 6), "last_t": round(s["last_t"], 6)}
                      for tid, s in sorted(stats.items())]}
    return (json.dumps(doc, sort_keys=True, separators=(",", ":"), allow_nan=False) + "\n").encode()


def _write_via_temp(path: Path, chunks) -> None:
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "wb") as out:
            for c in chunks:
                out.write(c)
        os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.unlink(tmp)


def _rows_pass(path: Path) -> tuple[dict[int, dict], int]:
    """Sort people by id in every row (streamed into a temporary file, kept only when a row changed);
    per-track stats from the rows."""
    stats: dict[int, dict] = {}
    reordered = 0
    tmp = path.with_name(f".{path.name}.sorted-{os.getpid()}")
    try:
        with open(path, "rb") as f, open(tmp, "wb") as out:
            for line in f:
                d = json.loads(line)
                people = d["people"]
                ids = [p["id"] for p in people]
                if ids != sorted(ids):
                    line = _sort_people(line, people)
                    reordered += 1
                out.write(line)
                for p in people:
                    s = stats.get(p["id"])
                    if s is None:
                        s = stats[p["id"]] = {"first_frame": d["frame"], "first_t": d["t"],
                                              "frames_observed": 0, "frames_predicted": 0}
                    s["last_frame"], s["last_t"] = d["frame"], d["t"]
                    s["frames_observed" if p["state"] == "observed" else "frames_predicted"] += 1
        if reordered:
            os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.unlink(tmp)
    return stats, reordered


def _retime_quality(path: Path, t0: float) -> int:
    """quality.jsonl with t relative to t0; every line must re-encode to its own bytes first."""
    from redact.redaction.quality import FrameQuality, encode_quality_line

    out, n = [], 0
    with open(path, "rb") as f:
        for n, line in jsonio.iter_lines(f, QUALITY):
            d = jsonio.loads_object(line, f"{QUALITY} line {n}")
            try:
                q = FrameQuality(**{k: v for k, v in d.items() if k != "reasons"}, reasons=tuple(d["reasons"]))
            except (TypeError, KeyError) as e:
                raise PackageError(f"{QUALITY} line {n}: unexpected fields ({e})") from None
            if encode_quality_line(q) != line:
                raise PackageError(f"{QUALITY} line {n}: not in the format this tool writes; cannot shift its times")
            out.append(encode_quality_line(replace(q, t=q.t - t0)))
    _write_via_temp(path, out)
    return n


def _retime_review(path: Path, t0: float) -> int:
    """review.json with t_start / t_end relative to t0 (same layout as redact.redaction.quality.review_document)."""
    doc = jsonio.loads(path.read_bytes(), REVIEW)
    ranges = doc.get("ranges") if isinstance(doc, dict) else None
    if not isinstance(ranges, list):
        raise PackageError(f"{REVIEW}: no list of ranges; cannot shift its times")
    for r in ranges:
        for k in ("t_start", "t_end"):
            if isinstance(r, dict) and isinstance(r.get(k), (int, float)) and not isinstance(r.get(k), bool):
                r[k] = round(r[k] - t0, 6)
    data = (json.dumps(doc, sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")
    _write_via_temp(path, [data])
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
        doc = jsonio.loads((pkg_dir / TRACKS).read_bytes(), TRACKS)
        tracks_in = len(doc["tracks"]) if isinstance(doc, dict) and isinstance(doc.get("tracks"), list) else None
    t0 = _first_time_and_units(skel)
    summary = apply_privacy_file(skel, skel, options, frame_size, fps)
    stats, reordered = _rows_pass(skel)
    _write_via_temp(pkg_dir / TRACKS, [_tracks_doc(stats)])
    summary["rows_people_reordered"] = reordered
    summary["tracks_in"] = tracks_in
    summary["tracks_out"] = len(stats)
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
        if name in (ENVELOPE, LOG):
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
                   note="new log; the parent's log stays with the parent package")
        summary = rewrite_skeleton_files(staging, options, frame_size, fps)
        record = options.to_record()
        log.append("privacy", **record, summary=summary)
        if disclosure:
            log.disclosure(**disclosure)
        # Carried from the parent as they are: what the source, model and run were.
        predicate = Predicate(source=pred.source, model=pred.model, parameters=pred.parameters, privacy=record,
                              disclosure=Disclosure.of(disclosure), review=pred.review, faults=pred.faults,
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
