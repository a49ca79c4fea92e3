"""Derived packages (redact.skeletons.derive, `redact derive`) and export from verified / .tar packages.

The parent is made once by the real pipeline on the crossing clip (scikit-image stills:
astronaut() public domain NASA, camera() CC0 Lav Varshney; see tests/conftest.py).

Outside references:
- SHA-256 of the parent's payload: hashlib (FIPS 180-4) over the bytes that the standard-library
  base64 decoder takes out of envelope.json (DSSE envelope.md: `payload` is base64 of the exact
  signed bytes).
- securesystemslib (PyPI) DSSE Envelope verifies the derived package's envelope.
- COCO-17 keypoint names (cocodataset.org keypoint format): the first five are the head.
- numpy.load reads the .npz export; pycocotools COCO.loadRes reads the COCO results export.
"""

from __future__ import annotations

import base64
import hashlib
import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from redact.errors import InputError, OutputError, VerificationFailed
from redact.formats.tracks_json import TrackRecord, encode_tracks
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer, generate_key
from redact.provenance.verify import verify_package
from redact.redaction.quality import FrameQuality, ReviewRange, ReviewRules, encode_quality_line, review_document
from redact.skeletons import derive as dv
from redact.skeletons.export import export_package
from redact.skeletons.privacy import PrivacyOptions
from redact.skeletons.rows import encode_row
from redact.vision.records import Tracks

# As published in the COCO keypoint format (cocodataset.org), typed here independently.
COCO_HEAD = ["nose", "left_eye", "right_eye", "left_ear", "right_ear"]
PARENT_SEED = bytes(32)
NEW_SEED = bytes([7]) * 32
PASS = "derive test passphrase"
OPTIONS = PrivacyOptions(drop_keypoints="head", normalise_proportions=True, noise_px=1.5, keep_every=2,
                         new_ids=True, relative_time=True, seed=918273645)


def _rows(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_bytes().splitlines()]


def _payload(pkg_dir: Path) -> bytes:
    env = json.loads((pkg_dir / "envelope.json").read_bytes())
    return base64.b64decode(env["payload"])


def _walk_ints(obj, out: set) -> set:
    if isinstance(obj, bool):
        return out
    if isinstance(obj, int):
        out.add(obj)
    elif isinstance(obj, dict):
        for v in obj.values():
            _walk_ints(v, out)
    elif isinstance(obj, list):
        for v in obj:
            _walk_ints(v, out)
    return out


@pytest.fixture(scope="module")
def parent(crossing_clip, tmp_path_factory):
    d = tmp_path_factory.mktemp("derive")
    signer = Signer.from_seed(PARENT_SEED)
    result = process_video(crossing_clip.path, d / "out", signer, ProcessSettings())
    pub = d / "parent.public.pem"
    pub.write_bytes(signer.public_pem)
    return {"dir": d, "package": result.package, "signer": signer, "pub": pub}


@pytest.fixture(scope="module")
def derived(parent):
    out = parent["dir"] / "derived"
    new = Signer.from_seed(NEW_SEED)
    res = dv.derive(parent["package"], out, [parent["signer"].public_key], new, OPTIONS,
                    disclosure={"recipient": "a research group", "purpose": "gait study",
                                "date": "2025-06-01"})
    return {"result": res, "package": out, "signer": new}


@pytest.fixture(scope="module")
def derived_tar(parent, derived):
    """A .tar derived from the derived folder: tar output, then used as a .tar parent."""
    out = parent["dir"] / "derived2.tar"
    payload = dv.derive_package(derived["package"], out, [derived["signer"].public_key], derived["signer"],
                                PrivacyOptions(target_fps=5.0), archive=True)
    return {"package": out, "payload": payload}


def test_derived_package_verifies_under_the_new_key_only(parent, derived):
    new_pub = derived["signer"].public_key
    v = verify_package(derived["package"], [new_pub])
    assert v.key_id == derived["signer"].key_id and v.video_subject is None  # skeleton-only
    with pytest.raises(VerificationFailed):
        verify_package(derived["package"], [parent["signer"].public_key])
    # Outside implementation: securesystemslib's DSSE Envelope verifies the derived envelope.
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
    from securesystemslib.dsse import Envelope
    from securesystemslib.signer import SSlibKey

    env = json.loads((derived["package"] / "envelope.json").read_bytes())
    theirs = Envelope.from_dict(env)
    key = SSlibKey.from_crypto(Ed25519PrivateKey.from_private_bytes(NEW_SEED).public_key(),
                               keyid=derived["signer"].key_id)
    assert key.keyid in theirs.verify([key], 1)
    assert not any(p.name.startswith(".") for p in parent["dir"].iterdir())  # no staging left


def test_log_starts_with_the_parent_statement_hash(parent, derived):
    log = _rows(derived["package"] / "log.jsonl")
    first = log[0]
    want = hashlib.sha256(_payload(parent["package"])).hexdigest()  # FIPS 180-4 via hashlib
    assert first["kind"] == "derive" and first["seq"] == 0
    assert first["parent_statement_sha256"] == want
    assert first["parent_key_id"] == parent["signer"].key_id
    parent_pred = json.loads(_payload(parent["package"]))["predicate"]
    assert first["parent_log_head"] == parent_pred["log"]["head"]
    # the parent's log is not copied: no entry of the parent's run is in the new log
    assert [e["kind"] for e in log] == ["derive", "privacy", "disclosure", "sign"]
    pred = json.loads(_payload(derived["package"]))["predicate"]
    assert pred["parent"]["statement_sha256"] == want and pred["parent"]["key_id"] == parent["signer"].key_id
    assert pred["disclosure"]["recipient"] == "a research group"


def test_predicate_records_every_option_and_carries_the_source(parent, derived):
    payload = _payload(derived["package"])
    pred = json.loads(payload)["predicate"]
    priv = pred["privacy"]
    assert priv == OPTIONS.to_record()
    assert priv["drop_keypoints"] == COCO_HEAD
    assert (priv["normalise_proportions"], priv["noise_px"], priv["keep_every"], priv["new_ids"],
            priv["relative_time"], priv["coordinates"], priv["decimals"]) == (True, 1.5, 2, True, True, "pixels", 2)
    assert priv["seeded"] is True and b"918273645" not in payload  # the seed itself is never recorded
    parent_pred = json.loads(_payload(parent["package"]))["predicate"]
    for k in ("source", "model", "parameters"):
        assert pred[k] == parent_pred[k]
    log_privacy = _rows(derived["package"] / "log.jsonl")[1]
    assert log_privacy["kind"] == "privacy" and log_privacy["drop_keypoints"] == COCO_HEAD
    assert log_privacy["summary"]["rows_in"] == parent_pred["source"]["frames"]


def test_new_ids_leave_no_trace_of_the_old_ones(parent, derived):
    old_rows = _rows(parent["package"] / "skeletons.jsonl")
    old_ids = {p["id"] for r in old_rows for p in r["people"]}
    rows = _rows(derived["package"] / "skeletons.jsonl")
    ids = {p["id"] for r in rows for p in r["people"]}
    tracks = json.loads((derived["package"] / "tracks.json").read_bytes())["tracks"]
    assert len(old_ids) >= 2 and len(ids) == len(old_ids)
    assert not ids & old_ids
    assert {t["id"] for t in tracks} == ids
    assert not {t["id"] for t in tracks} & old_ids
    for r in rows:  # people sorted by the new id, so their order does not follow the old ids
        assert [p["id"] for p in r["people"]] == sorted(p["id"] for p in r["people"])
    # No file maps new ids to old ones: no new id appears in the log or the signed predicate.
    recorded = set()
    for e in _rows(derived["package"] / "log.jsonl"):
        _walk_ints(e, recorded)
    _walk_ints(json.loads(_payload(derived["package"])), recorded)
    assert not recorded & ids


def test_tracks_json_counts_the_rows_kept(parent, derived):
    rows = _rows(derived["package"] / "skeletons.jsonl")
    assert [r["frame"] for r in rows] == list(range(0, 50, 2))  # keep_every=2 over the 50 frames
    assert rows[0]["t"] == 0.0
    want: dict[int, dict] = {}
    for r in rows:
        for p in r["people"]:
            w = want.setdefault(p["id"], {"frames": [], "observed": 0, "predicted": 0})
            w["frames"].append(r["frame"])
            w["observed" if p["state"] == "observed" else "predicted"] += 1
    tracks = json.loads((derived["package"] / "tracks.json").read_bytes())["tracks"]
    for t in tracks:
        w = want[t["id"]]
        assert (t["first_frame"], t["last_frame"]) == (w["frames"][0], w["frames"][-1])
        assert (t["frames_observed"], t["frames_predicted"]) == (w["observed"], w["predicted"])
    old = json.loads((parent["package"] / "tracks.json").read_bytes())["tracks"]
    assert sum(t["frames_observed"] + t["frames_predicted"] for t in tracks) < \
        sum(t["frames_observed"] + t["frames_predicted"] for t in old)


def test_dropped_head_keypoints_are_zero_everywhere(derived):
    rows = _rows(derived["package"] / "skeletons.jsonl")
    n = 0
    for r in rows:
        for p in r["people"]:
            assert p["kp"][:5] == [[0, 0, 0]] * 5
            assert any(c > 0 for _, _, c in p["kp"][5:])
            n += 1
    assert n > 0


def test_quality_and_review_hold_no_track_ids(parent):
    def keys(obj, out):
        if isinstance(obj, dict):
            for k, v in obj.items():
                out.add(k)
                keys(v, out)
        elif isinstance(obj, list):
            for v in obj:
                keys(v, out)
        return out

    found = set()
    for line in (parent["package"] / "quality.jsonl").read_bytes().splitlines():
        keys(json.loads(line), found)
    keys(json.loads((parent["package"] / "review.json").read_bytes()), found)
    assert "frame" in found and "reasons" in found
    assert not {k for k in found if k.lower() in ("id", "ids") or k.lower().endswith(("_id", "_ids"))
                or "track" in k.lower()}


def test_tar_parent_and_tar_output(derived, derived_tar):
    pub = derived["signer"].public_key
    v = verify_package(derived_tar["package"], [pub])
    assert hashlib.sha256(derived_tar["payload"]).hexdigest() == hashlib.sha256(v.payload).hexdigest()
    pred = v.predicate.to_json()
    # keypoints the parent dropped stay dropped in its children
    assert pred["privacy"]["drop_keypoints"] == COCO_HEAD and pred["privacy"]["target_fps"] == 5.0
    assert pred["parent"]["statement_sha256"] == hashlib.sha256(_payload(derived["package"])).hexdigest()
    third = derived_tar["package"].parent / "derived3"
    dv.derive_package(derived_tar["package"], third, [pub], derived["signer"], PrivacyOptions(decimals=1))
    first = _rows(third / "log.jsonl")[0]
    assert first["parent_statement_sha256"] == hashlib.sha256(derived_tar["payload"]).hexdigest()
    verify_package(third, [pub])


def test_tampered_parent_is_refused_and_nothing_is_written(parent, tmp_path):
    bad = tmp_path / "bad"
    shutil.copytree(parent["package"], bad)
    data = bytearray((bad / "skeletons.jsonl").read_bytes())
    data[100] = ord("7") if data[100] != ord("7") else ord("8")
    (bad / "skeletons.jsonl").write_bytes(bytes(data))
    out = tmp_path / "child"
    with pytest.raises(VerificationFailed) as e:
        dv.derive_package(bad, out, [parent["signer"].public_key], Signer.from_seed(NEW_SEED), OPTIONS)
    assert any("skeletons.jsonl" in f for f in e.value.findings)
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["bad"]


def test_bad_paths_and_options(parent, derived, tmp_path):
    key = [parent["signer"].public_key]
    with pytest.raises(OutputError, match="already exists"):
        dv.derive_package(parent["package"], derived["package"], key, derived["signer"], OPTIONS)
    with pytest.raises(OutputError, match="inside the parent"):
        dv.derive_package(parent["package"], parent["package"] / "x", key, derived["signer"], OPTIONS)
    with pytest.raises(InputError):
        dv.derive_package(parent["package"], tmp_path / "y", key, derived["signer"], None)
    # a parent in frame units cannot take pixel options again
    frame_pkg = tmp_path / "frame"
    dv.derive_package(parent["package"], frame_pkg, key, derived["signer"], PrivacyOptions(coordinates="frame"))
    with pytest.raises(InputError, match="pixels"):
        dv.derive_package(frame_pkg, tmp_path / "z", [derived["signer"].public_key], derived["signer"],
                          PrivacyOptions(noise_px=1.0))
    assert not (tmp_path / "z").exists() and not any(p.name.startswith(".") for p in tmp_path.iterdir())


def test_rewrite_keeps_tracks_quality_and_review_consistent(tmp_path):
    """A hand-built staging package whose stream time starts at 4 s and whose rows list people out of id order."""
    pkg = tmp_path / "staging"
    pkg.mkdir()
    kp = np.zeros((17, 3))
    kp[:, 0], kp[:, 1], kp[:, 2] = np.arange(17) * 3 + 50, np.arange(17) * 5 + 20, 0.9
    lines, qual = [], []
    for i in range(10):
        ids = [5, 2] + ([7] if i >= 4 else [])
        m = len(ids)
        tr = Tracks(np.array(ids), np.tile([40.0, 10.0, 110.0, 120.0], (m, 1)), np.full(m, 0.8),
                    np.repeat(kp[None], m, 0), np.array([True] * (m - 1) + [i % 2 == 0]), np.zeros(m, np.int32))
        lines.append(encode_row(100 + i, 100 + i, 4.0 + i / 25, tr))
        qual.append(encode_quality_line(FrameQuality(100 + i, 4.0 + i / 25, 90.5, 20.25, 300.0, m, m, 0, 0.9, 0)))
    (pkg / "skeletons.jsonl").write_bytes(b"".join(lines))
    (pkg / "quality.jsonl").write_bytes(b"".join(qual))
    (pkg / "review.json").write_bytes(review_document([ReviewRange(103, 106, 4.12, 4.24, ("dark",))], ReviewRules(), 10))
    (pkg / "tracks.json").write_bytes(encode_tracks([TrackRecord(2, 100, 109, 10, 0, 4.0, 4.36),
                                                     TrackRecord(5, 100, 109, 10, 0, 4.0, 4.36),
                                                     TrackRecord(7, 104, 109, 3, 3, 4.16, 4.36)]))
    opts = PrivacyOptions(new_ids=True, keep_every=3, relative_time=True, seed=3)
    s = dv.rewrite_skeleton_files(pkg, opts, (320, 240), 25.0)
    rows = _rows(pkg / "skeletons.jsonl")
    assert [r["frame"] for r in rows] == [100, 103, 106, 109]
    assert [r["t"] for r in rows] == pytest.approx([0.0, 0.12, 0.24, 0.36], abs=1e-9)
    ids = {p["id"] for r in rows for p in r["people"]}
    assert len(ids) == 3 and not ids & {2, 5, 7}
    for r in rows:
        assert [p["id"] for p in r["people"]] == sorted(p["id"] for p in r["people"])
    tracks = json.loads((pkg / "tracks.json").read_bytes())["tracks"]
    assert {t["id"] for t in tracks} == ids and [t["id"] for t in tracks] == sorted(ids)
    late = [t for t in tracks if t["first_frame"] == 106]  # the track that appears at frame 104
    assert len(late) == 1 and late[0]["last_frame"] == 109 and late[0]["first_t"] == pytest.approx(0.24)
    assert sum(t["frames_observed"] + t["frames_predicted"] for t in tracks) == sum(len(r["people"]) for r in rows)
    q = _rows(pkg / "quality.jsonl")
    assert len(q) == 10 and [x["t"] for x in q] == pytest.approx([i / 25 for i in range(10)], abs=1e-9)
    assert q[3]["luma_mean"] == 90.5 and q[3]["people"] == 2
    rv = json.loads((pkg / "review.json").read_bytes())
    assert rv["ranges"][0]["seconds"] == pytest.approx([0.12, 0.24]) and rv["ranges"][0]["frames"] == [103, 106]
    assert (s["rows_out"], s["tracks_in"], s["tracks_out"], s["quality_rows_retimed"]) == (4, 3, 3, 10)
    assert s["rows_people_reordered"] >= 1


def test_export_from_derived_packages_matches_the_rows(derived, derived_tar, tmp_path):
    from pycocotools.coco import COCO

    pub = derived["signer"].public_key
    rows = _rows(derived["package"] / "skeletons.jsonl")
    s = export_package(derived["package"], "npz", tmp_path / "t.npz", trusted_keys=[pub])
    assert s["verified"] is True and s["key_id"] == derived["signer"].key_id
    with np.load(tmp_path / "t.npz") as z:
        assert sorted(z["track_ids"].tolist()) == sorted({p["id"] for r in rows for p in r["people"]})
        for r in rows:
            for p in r["people"]:
                fr = z[f"track_{p['id']}_frames"].tolist()
                k = fr.index(r["frame"])
                np.testing.assert_allclose(z[f"track_{p['id']}_keypoints"][k], np.array(p["kp"], np.float32))

    tar_rows = []
    with __import__("tarfile").open(derived_tar["package"]) as t:  # read the members with the stdlib
        tar_rows = [json.loads(line) for line in t.extractfile("skeletons.jsonl").read().splitlines()]
    out = tmp_path / "r.json"
    s = export_package(derived_tar["package"], "coco", tmp_path / "observed.json", trusted_keys=[pub])
    assert s["results"] == sum(p["state"] == "observed" for r in tar_rows for p in r["people"])  # the default
    s = export_package(derived_tar["package"], "coco", out, trusted_keys=[pub], include_predicted=True)
    assert s["results"] == sum(len(r["people"]) for r in tar_rows)
    gt = COCO(str(tmp_path / "r.gt.json"))
    assert gt.loadImgs(tar_rows[0]["frame"])[0]["width"] == 320  # the signed source size
    dt = gt.loadRes(str(out))
    want = {(r["frame"], p["id"]): p for r in tar_rows for p in r["people"]}
    anns = dt.loadAnns(dt.getAnnIds())
    assert len(anns) == len(want)
    for a in anns:
        np.testing.assert_allclose(a["keypoints"], np.array(want[(a["image_id"], a["track_id"])]["kp"]).reshape(-1),
                                   atol=1e-4)
    s = export_package(derived_tar["package"], "npz", tmp_path / "u.npz")  # unverified .tar read in place
    assert s["verified"] is False and s["rows"] == len(tar_rows)
    with pytest.raises(VerificationFailed):
        export_package(derived_tar["package"], "npz", tmp_path / "v.npz", trusted_keys=[Signer.from_seed(PARENT_SEED).public_key])
    assert not (tmp_path / "v.npz").exists()


# ---- command line ------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def keys(parent):
    d = parent["dir"] / "keys"
    d.mkdir()
    generate_key(d / "new.private.pem", d / "new.public.pem", PASS.encode())
    return d / "new.private.pem", d / "new.public.pem"


def _invoke(args, **env):
    from redact.cli import main

    return CliRunner().invoke(main, args, env={"REDACT_KEY_PASSPHRASE": PASS, **env})


def test_cli_derive_writes_a_package_that_verifies(parent, keys, tmp_path):
    private, public = keys
    out = tmp_path / "shared"
    r = _invoke(["derive", str(parent["package"]), "--trusted-key", str(parent["pub"]), "--signing-key", str(private),
                 "--out", str(out), "--drop-keypoints", "head,left_wrist", "--new-ids", "--target-fps", "10",
                 "--recipient", "lab", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)  # exactly one JSON document
    assert doc["parent"]["statement_sha256"] == hashlib.sha256(_payload(parent["package"])).hexdigest()
    assert doc["privacy"]["drop_keypoints"] == COCO_HEAD + ["left_wrist"] and "GaitPT" in r.stderr
    v = _invoke(["verify", str(out), "--trusted-key", str(public)])
    assert v.exit_code == 0 and v.stdout.startswith("VALID")
    e = _invoke(["export", str(out), "--trusted-key", str(public), "--format", "npz", "--out", str(tmp_path / "a.npz")])
    assert e.exit_code == 0 and (tmp_path / "a.npz").is_file()
    tar = tmp_path / "shared.tar"
    r = _invoke(["derive", str(out), "--trusted-key", str(public), "--signing-key", str(private), "--out", str(tar),
                 "--decimals", "1", "--archive"])
    assert r.exit_code == 0 and tar.is_file() and "derived package" in r.stdout
    e = _invoke(["export", str(tar), "--trusted-key", str(public), "--format", "coco", "--out", str(tmp_path / "c.json")])
    assert e.exit_code == 0 and (tmp_path / "c.gt.json").is_file()


def test_cli_derive_errors(parent, keys, tmp_path):
    private, public = keys
    base = ["derive", str(parent["package"]), "--signing-key", str(private)]
    cases = {
        "no option": (base + ["--trusted-key", str(parent["pub"]), "--out", str(tmp_path / "a")], 2, "no de-identification"),
        "wrong parent key": (base + ["--trusted-key", str(public), "--out", str(tmp_path / "b"), "--new-ids"], 1, "signature"),
        "bad keypoint": (base + ["--trusted-key", str(parent["pub"]), "--out", str(tmp_path / "c"),
                                 "--drop-keypoints", "tail"], 2, "--drop-keypoints"),
        "bad combination": (base + ["--trusted-key", str(parent["pub"]), "--out", str(tmp_path / "d"),
                                    "--keep-position"], 2, "--keep-position"),
        "exists": (base + ["--trusted-key", str(parent["pub"]), "--out", str(parent["package"].parent), "--new-ids"],
                   2, "already exists"),
    }
    for name, (args, code, words) in cases.items():
        r = _invoke(args)
        assert r.exit_code == code, (name, r.output)
        assert r.stderr.startswith("error:") and words in r.stderr, (name, r.stderr)
        assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.output, name
        assert r.stdout == "", name
    wrong = _invoke(base + ["--trusted-key", str(parent["pub"]), "--out", str(tmp_path / "e"), "--new-ids"],
                    REDACT_KEY_PASSPHRASE="wrong")
    assert wrong.exit_code == 2 and "passphrase" in wrong.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == []  # nothing written, no partial folder
    h = _invoke(["derive", "--help"])
    assert h.exit_code == 0 and "Example" in h.output and "GaitPT" in h.output and "2308.10623" in h.output
    assert "personal data" in h.output and "--noise-px" in h.output


def test_privacy_options_decorator_gives_none_when_all_off():
    import click

    from redact.cli.privacy_options import privacy_options

    seen = []

    @click.command()
    @privacy_options
    def cmd(privacy):
        seen.append(privacy)

    runner = CliRunner()
    assert runner.invoke(cmd, []).exit_code == 0 and seen[-1] is None
    assert runner.invoke(cmd, ["--noise-px", "2", "--coordinates", "track", "--keep-position"]).exit_code == 0
    assert seen[-1] == PrivacyOptions(noise_px=2.0, coordinates="track", keep_position=True)
    r = runner.invoke(cmd, ["--body-height", "170"])
    assert r.exit_code == 2 and "--body-height" in r.stderr and len(seen) == 2


def test_derived_statements_follow_the_published_predicate_schema(parent, derived, derived_tar):
    """Derived statements (folder and .tar) validate against docs/predicate.schema.json (jsonschema)."""
    from statement_schema import check_statement

    st = check_statement(_payload(derived["package"]))
    assert st["predicate"]["parent"]["statement_sha256"] == hashlib.sha256(_payload(parent["package"])).hexdigest()
    check_statement(derived_tar["payload"])
