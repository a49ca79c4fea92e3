"""A package summarised for people (`redact inspect`): source, model, key, counts, flagged ranges.

With trusted keys the package is verified first and every file is read through the verified
package (each read re-checked against its signed hash); without, the summary says it is
unverified. Imports only provenance and the foundations, so `inspect` runs without the vision stack.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from redact import jsonio
from redact.provenance.contents import PackageContents, read_unverified
from redact.provenance.package import ENVELOPE, REVIEW, SKELETONS
from redact.provenance.predicate import thaw

REVIEW_LIMIT = 64 * 1024 * 1024  # bytes; common practice
CAUTION = "Skeleton data is pseudonymised, not anonymous."


def _flagged_ranges(doc) -> list[dict]:
    """Flagged ranges from review.json: a list, or an object with a "ranges" (or "flagged") list of
    {"frame_start"|"start": frame, "frame_end"|"end": frame, "reasons": [str] | "reason": str}."""
    items = doc.get("ranges", doc.get("flagged", [])) if isinstance(doc, dict) else doc
    out = []
    for r in items if isinstance(items, list) else []:
        if not isinstance(r, dict):
            continue
        reason = r.get("reason")
        if reason is None and isinstance(r.get("reasons"), list):
            reason = ", ".join(str(x) for x in r["reasons"])
        start = r.get("frame_start", r.get("start"))
        end = r.get("frame_end", r.get("end"))
        out.append({"start": start, "end": end, "reason": "" if reason is None else str(reason)})
    return out


def open_contents(path: Path, trusted_keys: Sequence | None) -> PackageContents:
    """The package verified with `trusted_keys`, or read unverified when none are given."""
    if trusted_keys:
        from redact.provenance.verify import verify_package

        return verify_package(path, list(trusted_keys))
    return read_unverified(Path(path))


def summarise(contents: PackageContents) -> dict:
    """The summary of an opened package (see the module docstring)."""
    pred = contents.predicate
    frames = people = faults = 0
    ids: set = set()
    flagged: list[dict] = []
    if contents.has(SKELETONS):
        for n, line in contents.lines(SKELETONS):
            row = jsonio.loads_object(line, f"{SKELETONS} line {n}")
            frames += 1
            faults += row.get("status") == "fault"
            persons = row.get("people") if isinstance(row.get("people"), list) else []
            people += len(persons)
            ids.update(p.get("id") for p in persons if isinstance(p, dict) and isinstance(p.get("id"), int))
    if contents.has(REVIEW):
        flagged = _flagged_ranges(jsonio.loads(contents.read_bytes(REVIEW, REVIEW_LIMIT), REVIEW, REVIEW_LIMIT))
    key_id = getattr(contents, "key_id", None) if contents.verified else getattr(contents, "key_id_hint", None)
    return {
        "verified": contents.verified,
        "key_id": key_id,
        "source": pred.source.to_json(),
        "model": pred.model.to_json(),
        "privacy": thaw(pred.privacy),
        "tool": f"{pred.tool.name} {pred.tool.version}",
        "created": pred.created,
        "log_entries": None if pred.log is None else pred.log.entries,
        "counts": {"frames": frames, "people": people, "tracks": len(ids), "fault_frames": faults},
        "flagged": flagged,
        "files": sorted(set(contents.statement.files) | {ENVELOPE}),
        "caution": CAUTION,
    }


def summarise_package(path: Path, trusted_keys: Sequence | None = None) -> dict:
    """Summarise the package at `path`; with trusted keys it is verified first (VerificationFailed on
    any problem), without them the summary is marked unverified. Every file is parsed strictly."""
    return summarise(open_contents(path, trusted_keys))
