"""Determinism: two runs of `process_video` on the same input with the same settings write the same
bytes, and their signed statements name the same digests (timestamps and signatures aside).

The clip is the crossing scene of tests/conftest.py (astronaut(): public domain, NASA; camera():
CC0, Lav Varshney; loaded from the installed scikit-image). Outside reference: hashlib's SHA-256
(FIPS 180-4) for the file digests; the DSSE payload is read after the project verifier checks the
signature.
"""

from __future__ import annotations

import hashlib
import json

import pytest
from conftest import crossing_spec, make_clip

from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.provenance.verify import verify_package
from redact.skeletons.rows import read_rows

SEED = bytes(range(32))  # a fixed test key (RFC 8032 keys are any 32 bytes)
SAME_BYTES = ("skeletons.jsonl", "tracks.json", "quality.jsonl", "review.json", "frames.sha256")
# Statement fields that may differ between runs: when the statement was made, and the log head
# (the hash of the last log entry, which covers entry times). Log entries differ only in their
# time and so in the hash chain (prev).
VOLATILE_PREDICATE = {"created", "log"}
VOLATILE_LOG = {"time", "prev"}


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """The crossing scene, 1 s at 320×240, run twice with the default settings."""
    clip = make_clip(tmp_path_factory.mktemp("determinism"), "crossing.mp4", crossing_spec(seconds=1.0))
    signer = Signer.from_seed(SEED)
    runs = []
    for name in ("first", "second"):
        out = tmp_path_factory.mktemp("determinism") / name
        result = process_video(clip.path, out, signer, ProcessSettings())
        verified = verify_package(result.package, [signer.public_key], source=clip.path, video=result.video)
        runs.append((result, verified))
    return runs


def test_outputs_are_byte_identical(two_runs):
    (a, _), (b, _) = two_runs
    assert a.frames == b.frames == 25
    with open(a.package / "skeletons.jsonl", "rb") as f:
        rows = list(read_rows(f))
    assert sum(len(r.tracks) for r in rows) > 0, "nobody detected: the comparison would prove little"
    for name in SAME_BYTES:
        assert (a.package / name).read_bytes() == (b.package / name).read_bytes(), f"{name} differs between runs"


def test_statement_subjects_are_identical_and_match_the_files(two_runs):
    (a, va), (b, vb) = two_runs
    digests = []
    for result, verified in two_runs:
        by_name = {s.name: s.sha256 for s in verified.subjects}
        for name in SAME_BYTES:
            assert by_name[name] == hashlib.sha256((result.package / name).read_bytes()).hexdigest()  # FIPS 180-4
        digests.append({n: by_name[n] for n in SAME_BYTES})
    assert digests[0] == digests[1]
    pa = {k: v for k, v in va.predicate.to_json().items() if k not in VOLATILE_PREDICATE}
    pb = {k: v for k, v in vb.predicate.to_json().items() if k not in VOLATILE_PREDICATE}
    assert pa == pb
    assert va.predicate.log.entries == vb.predicate.log.entries
    assert va.key_id == vb.key_id == Signer.from_seed(SEED).key_id


def test_transform_logs_differ_only_in_time(two_runs):
    (a, _), (b, _) = two_runs

    def entries(result):
        lines = (result.package / "log.jsonl").read_bytes().splitlines()
        return [{k: v for k, v in json.loads(line).items() if k not in VOLATILE_LOG} for line in lines]

    ea, eb = entries(a), entries(b)
    assert len(ea) >= 5 and ea == eb
