"""Applying a review (new copy + signed review record), disclosing again, and the report's review line.

Outside references: securesystemslib's DSSE Envelope verifies the new envelope (the DSSE
v1.0.2 reference implementation); hashlib SHA-256 (FIPS 180-4) of the parent's exact payload
bytes; PyAV/FFmpeg decodes the copies; the UK ICO video surveillance guidance lists the
disclosure fields (date, recipient, organisation, purpose). People in the clip:
skimage.data.astronaut() (public domain, NASA), skimage.data.camera() (CC0, Lav Varshney).
"""

from __future__ import annotations

import base64
import hashlib
import json

import av
import numpy as np
import pytest
from click.testing import CliRunner

from redact.cli import main
from redact.errors import InputError
from redact.media.video import probe
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer, load_private_key
from redact.provenance.verify import verify_package
from redact.report.document import make_report
from redact.review.disclose import disclose_again
from redact.review.outputs import apply_review, load_output

BOX = [150.0, 20.0, 230.0, 120.0]  # a fixed area to obscure on frames 5..9 (hand-picked, inside 320×240)


@pytest.fixture(scope="module")
def made(crossing_clip, tmp_path_factory):
    d = tmp_path_factory.mktemp("review-records")
    signer = Signer.from_seed(bytes(range(9, 41)))
    process_video(crossing_clip.path, d / "out", signer, ProcessSettings())
    parent = load_output(d / "out", [signer.public_key])
    state = parent.initial_state().updated({
        "reviewer": "Reviewer 7",
        "ranges": [{"status": "checked" if k else "corrected", "note": "looked at each frame"}
                   for k in range(len(parent.initial_state().ranges))],
        "corrections": {"regions": [{"label": "drawn during review", "frames": [5, 9],
                                     "points": [[BOX[0], BOX[1]], [BOX[2], BOX[1]], [BOX[2], BOX[3]],
                                                [BOX[0], BOX[3]]]}],
                        "obscure_frames": [{"frames": [30, 31]}]}}, probe(crossing_clip.path))
    state = state.watch([[0, 20]])  # not the whole video
    applied = apply_review(parent, state, crossing_clip.path, signer)
    return {"dir": d, "signer": signer, "parent": parent, "applied": applied, "clip": crossing_clip}


def log_of(pkg) -> list[dict]:
    return [json.loads(x) for x in (pkg / "log.jsonl").read_bytes().splitlines()]


def test_reviewed_package_verifies_and_names_its_parent(made):
    a = made["applied"]
    assert a.folder == made["dir"] / "out" / "review-1"
    v = verify_package(a.package, [made["signer"].public_key], video=a.video)
    log = log_of(a.package)
    first = log[0]
    assert first["kind"] == "review-parent"
    assert first["parent_statement_sha256"] == hashlib.sha256(made["parent"].verified.payload).hexdigest()
    assert v.predicate.parent.statement_sha256 == first["parent_statement_sha256"]
    assert v.predicate.human_review["reviewer"] == "Reviewer 7"
    # securesystemslib (DSSE reference implementation) accepts the new envelope's signature too.
    from securesystemslib.dsse import Envelope
    from securesystemslib.signer import SSlibKey

    env = Envelope.from_dict(json.loads((a.package / "envelope.json").read_bytes()))
    key = SSlibKey(made["signer"].key_id, "ed25519", "ed25519", {"public": made["signer"].public_key.raw.hex()})
    assert key.keyid in env.verify([key], 1)


def test_the_log_records_corrections_statuses_reviewer_time_and_coverage(made):
    log = {e["kind"]: e for e in log_of(made["applied"].package)}
    c = log["corrections"]
    assert c["count"] == 2 and c["entries"]["regions"][0]["frames"] == [5, 9]
    assert c["applied"]["regions[0]"]["ranges"] == [[5, 9]] and c["applied"]["obscure_frames[0]"]["frames"] == 2
    r = log["human-review"]
    assert r["reviewer"] == "Reviewer 7" and r["reviewed_at"].endswith("Z")
    assert [x["status"] for x in r["ranges"]][0] == "corrected" and r["ranges_checked"] == r["ranges_total"]
    assert r["whole_video_watched"] is False and r["frames_watched"] == 21
    assert r["frames_not_watched"] == [[21, made["parent"].frames - 1]]
    assert log["rerender"]["model"] == "not run" and log["sign"]["key_id"] == made["signer"].key_id


def test_the_new_copy_obscures_the_corrections(made):
    with av.open(str(made["applied"].video)) as c:
        frames = [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]
    x1, y1, x2, y2 = (int(v) for v in BOX)
    for k in range(5, 10):  # solid grey 128 inside the area (x264 keeps a flat area within a few levels)
        assert np.abs(frames[k][y1 + 2:y2 - 2, x1 + 2:x2 - 2].astype(int) - 128).mean() < 3, k
    for k in (30, 31):
        assert np.abs(frames[k].astype(int) - 128).mean() < 3, k


def test_report_shows_the_review_status_at_the_top(made):
    a = made["applied"]
    page = make_report(a.package, [made["signer"].public_key], video=a.video).html.decode()
    n = len(made["parent"].ranges())
    line = f"{n} of {n} ranges checked by Reviewer 7; 2 corrections; whole video watched: no (not watched in full)"
    assert line in page
    assert page.index('id="human-review"') < page.index('id="verification"')
    parent_page = make_report(made["parent"].package, [made["signer"].public_key]).html.decode()
    assert "Review: not reviewed" in parent_page


def test_disclose_again_writes_a_new_signed_record_without_reprocessing(made, tmp_path, monkeypatch):
    a = made["applied"]
    rec = disclose_again(a.folder, [made["signer"].public_key], made["signer"],
                         {"date": "2026-03-04", "recipient": "Second recipient", "organisation": "Org",
                          "purpose": "court order", "request_reference": "REF-9"})
    assert rec.path == a.folder / "disclosure-1"
    v = verify_package(rec.path, [made["signer"].public_key], video=a.video)  # the same redacted copy
    assert v.predicate.parent.statement_sha256 == hashlib.sha256(
        verify_package(a.package, [made["signer"].public_key]).payload).hexdigest()
    entry = [e for e in log_of(rec.path) if e["kind"] == "disclosure"][0]
    assert {k: entry[k] for k in ("date", "recipient", "organisation", "purpose", "request_reference")} == {
        "date": "2026-03-04", "recipient": "Second recipient", "organisation": "Org", "purpose": "court order",
        "request_reference": "REF-9"}
    env = json.loads((rec.path / "parent.envelope.json").read_bytes())
    assert base64.b64decode(env["payload"]) == verify_package(a.package, [made["signer"].public_key]).payload


def test_disclose_cli_and_its_errors(made, tmp_path, monkeypatch):
    monkeypatch.setenv("REDACT_KEY_PASSPHRASE", "pass phrase 1")
    from redact.provenance.signing import generate_key

    generate_key(tmp_path / "k.pem", tmp_path / "k.pub", b"pass phrase 1")
    signer = load_private_key(tmp_path / "k.pem", b"pass phrase 1")
    # A folder signed by another key than the one trusted is refused (exit 1, verification failed).
    r = CliRunner().invoke(main, ["disclose", str(made["applied"].folder), "--trusted-key", str(tmp_path / "k.pub"),
                                  "--signing-key", str(tmp_path / "k.pem"), "--recipient", "X"])
    assert r.exit_code == 1 and "Traceback" not in r.output
    pub = tmp_path / "steward.pub"
    pub.write_bytes(made["signer"].public_pem)
    r = CliRunner().invoke(main, ["disclose", str(made["applied"].folder), "--trusted-key", str(pub),
                                  "--signing-key", str(tmp_path / "k.pem")])
    assert r.exit_code == 2 and "give the disclosure" in r.output and len(r.output.strip().splitlines()) == 1
    r = CliRunner().invoke(main, ["disclose", str(made["applied"].folder), "--trusted-key", str(pub),
                                  "--signing-key", str(tmp_path / "k.pem"), "--recipient", "Third", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["key_id"] == signer.key_id and doc["disclosure"]["recipient"] == "Third"
    verify_package(made["applied"].folder / "disclosure-2", [signer.public_key], video=made["applied"].video)


def test_review_of_a_folder_without_outputs_is_one_line_error(tmp_path):
    with pytest.raises(InputError, match="expected redacted.mp4 and package/"):
        load_output(tmp_path, [Signer.from_seed(bytes(32)).public_key])


def test_a_countersigned_reviewed_copy_verifies_with_both_keys_and_names_both_signers(made, tmp_path, monkeypatch):
    """The data-protection officer countersigns the reviewed package (`redact countersign`, DSSE
    envelope.md: several signatures over one PAE); `verify` names both; a tampered second
    signature fails (RFC 8032 §5.1.7 verification, here through the package verifier)."""
    from redact.provenance.signing import generate_key

    monkeypatch.setenv("REDACT_KEY_PASSPHRASE", "dpo pass phrase")
    generate_key(tmp_path / "dpo.pem", tmp_path / "dpo.pub", b"dpo pass phrase")
    dpo = load_private_key(tmp_path / "dpo.pem", b"dpo pass phrase")
    steward_pub = tmp_path / "steward.pub"
    steward_pub.write_bytes(made["signer"].public_pem)
    copy = tmp_path / "review-copy"
    import shutil

    shutil.copytree(made["applied"].folder, copy)
    r = CliRunner().invoke(main, ["countersign", str(copy / "package"), "--signing-key", str(tmp_path / "dpo.pem"),
                                  "--trusted-key", str(steward_pub)])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(main, ["verify", str(copy / "package"), "--trusted-key", str(steward_pub),
                                  "--trusted-key", str(tmp_path / "dpo.pub"), "--video", str(copy / "redacted.mp4"),
                                  "--json"])
    assert r.exit_code == 0, r.output
    signers = {s["key_id"] for s in json.loads(r.stdout)["signers"]}
    assert signers == {made["signer"].key_id, dpo.key_id}
    # With only the steward's key the DPO's signature cannot be checked: not valid.
    r = CliRunner().invoke(main, ["verify", str(copy / "package"), "--trusted-key", str(steward_pub)])
    assert r.exit_code == 1
    # The review step reads a countersigned copy when both keys are trusted.
    loaded = load_output(copy, [made["signer"].public_key, dpo.public_key])
    assert {s.key_id for s in loaded.verified.signers} == signers
    # One bit of the second signature flipped: verification fails and says which signature.
    env = json.loads((copy / "package" / "envelope.json").read_bytes())
    sig = bytearray(base64.b64decode(env["signatures"][1]["sig"]))
    sig[10] ^= 1
    env["signatures"][1]["sig"] = base64.b64encode(bytes(sig)).decode()
    (copy / "package" / "envelope.json").write_bytes(json.dumps(env, sort_keys=True, separators=(",", ":")).encode()
                                                     + b"\n")
    r = CliRunner().invoke(main, ["verify", str(copy / "package"), "--trusted-key", str(steward_pub),
                                  "--trusted-key", str(tmp_path / "dpo.pub")])
    assert r.exit_code == 1 and "signature 1" in r.output


def test_review_cli_bad_inputs_are_one_line_errors(made, tmp_path, clip_factory):
    """`redact review` refuses before serving anything: a folder without outputs, a source that is
    not the signed one (SHA-256 differs), a key that does not verify the package."""
    from tests.conftest import crossing_spec

    pub = tmp_path / "steward.pub"
    pub.write_bytes(made["signer"].public_pem)
    from redact.provenance.signing import generate_key

    generate_key(tmp_path / "k.pem", tmp_path / "k.pub", b"pass phrase 1")
    env = {"REDACT_KEY_PASSPHRASE": "pass phrase 1"}
    base = ["--trusted-key", str(pub), "--signing-key", str(tmp_path / "k.pem")]
    empty = tmp_path / "empty"
    empty.mkdir()
    other = clip_factory("other.mp4", crossing_spec(seed=5))
    for args, words, code in (
            ([str(empty), "--source", str(made["clip"].path)], "expected redacted.mp4 and package/", 2),
            ([str(made["dir"] / "out"), "--source", str(other.path)], "not the source this output was made from", 2)):
        r = CliRunner().invoke(main, ["review", *args, *base], env=env)
        assert r.exit_code == code and words in r.output, r.output
        assert "Traceback" not in r.output and len(r.output.strip().splitlines()) == 1
    r = CliRunner().invoke(main, ["review", str(made["dir"] / "out"), "--source", str(made["clip"].path),
                                  "--trusted-key", str(tmp_path / "k.pub"), "--signing-key", str(tmp_path / "k.pem")],
                           env=env)
    assert r.exit_code == 1 and "Traceback" not in r.output


def test_derive_leaves_the_stored_regions_out(made, tmp_path):
    """De-identified copies for researchers do not carry the outlines in source pixels (docs/review.md)."""
    from redact.skeletons.derive import derive
    from redact.skeletons.privacy import PrivacyOptions

    res = derive(made["parent"].package, tmp_path / "shared", [made["signer"].public_key], made["signer"],
                 PrivacyOptions(coordinates="frame"))
    v = verify_package(res.path, [made["signer"].public_key])
    assert "regions.jsonl.gz" not in v.statement.files and not (res.path / "regions.jsonl.gz").exists()
    assert log_of(res.path)[0]["not_copied"] == ["regions.jsonl.gz"]
