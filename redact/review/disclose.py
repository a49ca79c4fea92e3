"""Disclose again: a new signed disclosure record for an existing (reviewed) output, without reprocessing.

The record is a small package of its own in `OUT/disclosure-N/` (so `redact verify` checks it like
any package): `parent.envelope.json` (the exact signed envelope of the output's package, so the
record can be checked against it on its own), `log.jsonl` (an entry naming the parent statement's
SHA-256 and the redacted video's, then the disclosure entry: date, recipient, organisation,
purpose, reference) and `envelope.json`, whose statement names the same redacted video as a
subject. Verify it with `redact verify OUT/disclosure-N --trusted-key KEY --video OUT/redacted.mp4`.
The UK ICO's video surveillance guidance asks for the date of disclosure, the recipient, their
organisation and the purpose to be recorded; each disclosure gets its own record.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path

from redact import __version__
from redact.errors import InputError, OutputError
from redact.provenance.log import TransformLog, utc_now
from redact.provenance.package import ENVELOPE, LOG, write_package
from redact.provenance.predicate import Disclosure, ToolRecord

PARENT_ENVELOPE = "parent.envelope.json"
DISCLOSURE_DIR = re.compile(r"disclosure-([1-9][0-9]{0,5})")


@dataclass(frozen=True)
class DisclosureRecord:
    path: Path
    key_id: str
    statement_sha256: str
    parent_statement_sha256: str
    disclosure: dict


def disclose_again(folder: Path, trusted_keys: Sequence, signer, disclosure: dict) -> DisclosureRecord:
    """Verify FOLDER (an output of `process` or `review`), then write FOLDER/disclosure-N/."""
    from redact.review.outputs import load_output

    if not disclosure or not any(disclosure.get(k) for k in ("recipient", "organisation", "purpose",
                                                               "request_reference")):
        raise InputError("give at least one of --recipient, --organisation, --purpose, --request-ref")
    out = load_output(Path(folder), trusted_keys)
    pred = out.predicate
    video_subject = out.verified.video_subject
    n = 1
    while os.path.lexists(out.folder / f"disclosure-{n}"):
        n += 1
    final = out.folder / f"disclosure-{n}"
    try:
        partial = Path(tempfile.mkdtemp(prefix=".redact-disclosure-partial-", dir=out.folder))
    except OSError as e:
        raise OutputError(f"cannot write to {out.folder}: {e.strerror or e}") from None
    try:
        staging = partial / "record"
        staging.mkdir()
        (staging / PARENT_ENVELOPE).write_bytes(out.files[ENVELOPE])
        log = TransformLog(staging / LOG)
        parent = {"statement_sha256": out.statement_sha256, "key_id": out.verified.key_id,
                  "package": out.package.name, "video_sha256": None if video_subject is None else video_subject.sha256,
                  "envelope_sha256": hashlib.sha256(out.files[ENVELOPE]).hexdigest()}
        log.append("disclose-again", **{f"parent_{k}": v for k, v in parent.items()},
                   human_review=pred.human_review is not None,
                   note="no reprocessing: the same redacted copy and package are disclosed again")
        log.disclosure(**disclosure)
        # The parent's description of the source, model and run, with the new disclosure; no
        # frames.sha256 travels in the record, so no frames root either.
        predicate = replace(pred, source=replace(pred.source, frames_root=None), disclosure=Disclosure.of(disclosure),
                            parent=out.parent_record(), tool=ToolRecord("redact", __version__), created=utc_now(),
                            log=None)
        payload = write_package(staging, final, predicate, signer, video=out.video)
    finally:
        shutil.rmtree(partial, ignore_errors=True)
    return DisclosureRecord(final, signer.key_id, hashlib.sha256(payload).hexdigest(), out.statement_sha256,
                            dict(disclosure))
