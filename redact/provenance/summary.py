"""A package summarised for people (`redact inspect`): source, model, key, counts, flagged ranges.

With trusted keys the package is verified first and every file is read through the verified
package (each read re-checked against its signed hash); without, the summary says it is
unverified. Imports only provenance and the foundations, so `inspect` runs without the vision stack.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from redact.formats import review_json, skeletons_jsonl
from redact.provenance.contents import PackageContents, read_unverified
from redact.provenance.package import ENVELOPE, REVIEW, SKELETONS
from redact.provenance.predicate import thaw

CAUTION = "Skeleton data is pseudonymised, not anonymous."


def open_contents(path: Path, trusted_keys: Sequence | None) -> PackageContents:
    """The package verified with `trusted_keys`, or read unverified when none are given."""
    if trusted_keys:
        from redact.provenance.verify import verify_package

        return verify_package(path, list(trusted_keys))
    return read_unverified(Path(path))


def summarise(contents: PackageContents) -> dict:
    """The summary of an opened package (see the module docstring)."""
    pred = contents.predicate
    frames = people = observed = faults = 0
    ids: set[int] = set()
    flagged: list[dict] = []
    if contents.has(SKELETONS):
        for n, line in contents.lines(SKELETONS, skeletons_jsonl.LINE_LIMIT):
            row = skeletons_jsonl.decode_row(line, f"{SKELETONS} line {n}")
            frames += 1
            faults += row.status == skeletons_jsonl.STATUS_FAULT
            people += len(row.people)
            observed += sum(1 for p in row.people if p.observed)
            ids.update(p.id for p in row.people)
    if contents.has(REVIEW):
        doc = review_json.decode_review(contents.read_bytes(REVIEW, review_json.LIMIT))
        flagged = [r.as_record() for r in doc.ranges]  # the one shape of a flagged range
    key_id = getattr(contents, "key_id", None) if contents.verified else getattr(contents, "key_id_hint", None)
    return {
        "verified": contents.verified,
        "stopped_early": pred.source.stopped_early,
        "warnings": [w for w in (pred.source.partial_warning(),) if w],
        "key_id": key_id,
        "source": pred.source.to_json(),
        "model": pred.model.to_json(),
        "privacy": thaw(pred.privacy),
        "tool": f"{pred.tool.name} {pred.tool.version}",
        "created": pred.created,
        "log_entries": None if pred.log is None else pred.log.entries,
        # people: every person row; detections: matched to a detection in that frame ("observed");
        # predicted: positions the tracker carried on between detections (coasting).
        "counts": {"frames": frames, "people": people, "detections": observed, "predicted": people - observed,
                   "tracks": len(ids), "fault_frames": faults},
        "flagged": flagged,
        "files": sorted(set(contents.statement.files) | {ENVELOPE}),
        "caution": CAUTION,
    }


def summarise_package(path: Path, trusted_keys: Sequence | None = None) -> dict:
    """Summarise the package at `path`; with trusted keys it is verified first (VerificationFailed on
    any problem), without them the summary is marked unverified. Every file is parsed strictly."""
    return summarise(open_contents(path, trusted_keys))
