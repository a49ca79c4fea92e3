"""Every package file round-trips byte for byte through its one encoder and strict decoder
(redact.formats, redact.provenance.log, redact.provenance.merkle), and `derive` rewrites rows
through the typed path without changing a byte it has no reason to change.

The package is made once by the real pipeline on the crossing clip (scikit-image stills:
astronaut() public domain NASA, camera() CC0 Lav Varshney; see tests/conftest.py), then derived
in pixels, frame and track units. Outside references: the standard library's json module as an
independent parser (what our decoders read must be what it reads); RFC 7493 (I-JSON) for the
duplicate-key and NaN refusals.
"""

from __future__ import annotations

import base64
import json
from pathlib import Path

import pytest

from redact.errors import PackageError
from redact.formats import quality_jsonl, review_json, skeletons_jsonl, tracks_json
from redact.formats.skeletons_jsonl import Person, Row
from redact.pipeline import ProcessSettings, process_video
from redact.provenance import merkle, signing
from redact.provenance.log import HEADER_KEYS, decode_entry, encode_entry
from redact.skeletons.derive import derive_package
from redact.skeletons.privacy import PrivacyOptions

SEED = bytes(range(40, 72))  # a fixed test key (any 32 bytes are a valid RFC 8032 seed)
DERIVED = {
    "pixels": PrivacyOptions(new_ids=True, noise_px=1.5, seed=7),
    "frame": PrivacyOptions(coordinates="frame", drop_keypoints="head", seed=8),
    "track": PrivacyOptions(coordinates="track", keep_position=True, relative_time=True, seed=9),
}


@pytest.fixture(scope="module")
def packages(crossing_clip, tmp_path_factory):
    d = tmp_path_factory.mktemp("formats")
    signer = signing.Signer.from_seed(SEED)
    result = process_video(crossing_clip.path, d / "out", signer, ProcessSettings())
    out = {"process": result.package}
    for units, options in DERIVED.items():
        out[units] = d / f"derived-{units}"
        derive_package(result.package, out[units], [signer.public_key], signer, options)
    out["same"] = d / "derived-same"
    derive_package(result.package, out["same"], [signer.public_key], signer, PrivacyOptions())
    return out


def _lines(path: Path) -> list[bytes]:
    return path.read_bytes().splitlines(keepends=True)


@pytest.mark.parametrize("which", ["process", "pixels", "frame", "track"])
def test_skeleton_rows_round_trip(packages, which):
    lines = _lines(packages[which] / "skeletons.jsonl")
    assert lines and any(b'"people":[{' in x for x in lines), "no person in the rows: the test would prove little"
    for n, line in enumerate(lines, 1):
        row = skeletons_jsonl.decode_row(line, f"line {n}")
        assert skeletons_jsonl.encode_row(row) == line
        std = json.loads(line)  # the standard library's reading of the same bytes
        assert (row.frame, row.pts, row.status, row.units) == (std["frame"], std["pts"], std["status"],
                                                               std.get("units", "pixels"))
        assert row.t == std["t"] and len(row.people) == len(std["people"])
        for p, q in zip(row.people, std["people"]):
            assert (p.id, p.state, p.score, list(p.box)) == (q["id"], q["state"], q["score"], q["box"])
            assert [list(k) for k in p.keypoints] == q["kp"]
            assert (None if p.centre is None else list(p.centre)) == q.get("centre")
    units = {skeletons_jsonl.decode_row(x).units for x in lines}
    assert units == {"pixels" if which in ("process", "pixels") else which}
    if which == "track":
        assert all(p.centre is not None for x in lines for p in skeletons_jsonl.decode_row(x).people)


@pytest.mark.parametrize("which", ["process", "pixels", "track"])
def test_tracks_quality_review_round_trip(packages, which):
    pkg = packages[which]
    data = (pkg / "tracks.json").read_bytes()
    tracks = tracks_json.decode_tracks(data)
    assert tracks and tracks_json.encode_tracks(tracks) == data
    assert [t.id for t in tracks] == [t["id"] for t in json.loads(data)["tracks"]]
    for line in _lines(pkg / "quality.jsonl"):
        q = quality_jsonl.decode_quality_line(line)
        assert quality_jsonl.encode_quality_line(q) == line
        assert q.frame == json.loads(line)["frame"] and list(q.reasons) == json.loads(line)["reasons"]
    data = (pkg / "review.json").read_bytes()
    doc = review_json.decode_review(data)
    assert review_json.encode_review(doc) == data
    assert [r.frame_start for r in doc.ranges] == [r["frames"][0] for r in json.loads(data)["ranges"]]


@pytest.mark.parametrize("which", ["process", "frame"])
def test_frames_log_and_envelope_round_trip(packages, which):
    pkg = packages[which]
    data = (pkg / "frames.sha256").read_bytes() if (pkg / "frames.sha256").exists() else None
    if data is not None:
        with open(pkg / "frames.sha256", "rb") as f:
            assert merkle.format_frame_digests(merkle.read_frame_digests(f)) == data
    for line in _lines(pkg / "log.jsonl"):
        e = decode_entry(line)
        fields = {k: v for k, v in e.items() if k not in HEADER_KEYS}
        assert encode_entry(e["seq"], e["prev"], e["time"], e["kind"], fields) == line
        assert e == json.loads(line)
    env = (pkg / "envelope.json").read_bytes()
    doc = json.loads(env)
    assert signing.envelope_bytes(doc) == env
    assert base64.b64decode(doc["payload"]).startswith(b'{"_type":"https://in-toto.io/Statement/v1"')


def test_derive_without_options_reproduces_the_rows_byte_for_byte(packages):
    for name in ("skeletons.jsonl", "quality.jsonl", "review.json", "frames.sha256"):
        assert (packages["same"] / name).read_bytes() == (packages["process"] / name).read_bytes(), name


def test_derive_reorders_people_through_the_typed_rows(packages):
    """New ids: each derived row holds the parent row's people (values read by the standard json module),
    renamed and sorted by their new id, with nothing else changed."""
    parent = [json.loads(x) for x in _lines(packages["process"] / "skeletons.jsonl")]
    child = [json.loads(x) for x in _lines(packages["pixels"] / "skeletons.jsonl")]
    assert [r["frame"] for r in child] == [r["frame"] for r in parent]
    for a, b in zip(parent, child):
        assert [p["id"] for p in b["people"]] == sorted(p["id"] for p in b["people"])
        assert sorted(p["state"] for p in a["people"]) == sorted(p["state"] for p in b["people"])
        assert (a["t"], a["status"], len(a["people"])) == (b["t"], b["status"], len(b["people"]))
    old_ids = {p["id"] for r in parent for p in r["people"]}
    assert not old_ids & {p["id"] for r in child for p in r["people"]}


# ---- strictness: named malformed lines, each refused by its decoder ------------------------------

ROW = (b'{"frame":3,"pts":1536,"t":0.120000,"status":"ok","people":[{"id":1,"state":"observed","score":0.900,'
       b'"box":[10.00,20.00,50.00,120.00],"kp":[' + b",".join([b"[1.00,2.00,0.500]"] * 17) + b"]}]}\n")


def test_the_reference_row_decodes():
    row = skeletons_jsonl.decode_row(ROW)
    assert row.people[0].box == (10.0, 20.0, 50.0, 120.0) and row.decimals == 2
    assert skeletons_jsonl.encode_row(row) == ROW


@pytest.mark.parametrize("name,line,expect", [
    ("duplicate key (RFC 7493)", ROW.replace(b'"frame":3,', b'"frame":3,"frame":4,'), "duplicate key"),
    ("NaN (RFC 7493)", ROW.replace(b'"score":0.900', b'"score":NaN'), "NaN"),
    ("negative zero", ROW.replace(b"[10.00,", b"[-0.00,"), "exact format"),
    ("space after a comma", ROW.replace(b'"pts":1536,', b'"pts":1536, '), "exact format"),
    ("keys reordered", ROW.replace(b'"frame":3,"pts":1536,', b'"pts":1536,"frame":3,'), "exact format"),
    ("unknown field", ROW.replace(b'"status":"ok",', b'"status":"ok","who":"x",'), "unexpected field"),
    ("mixed decimals", ROW.replace(b"[10.00,20.00,", b"[10.00,20.0,"), "exact format"),
    ("16 keypoints", ROW.replace(b"[1.00,2.00,0.500],", b"", 1), "17 keypoints"),
    ("unknown state", ROW.replace(b'"observed"', b'"seen"'), "state"),
    ("centre in pixel units", ROW.replace(b'"box":[10.00,20.00,50.00,120.00],',
                                          b'"box":[10.00,20.00,50.00,120.00],"centre":[0.10000,0.20000],'), "centre"),
    ("units pixels written out", ROW.replace(b'"status":"ok",', b'"status":"ok","units":"pixels",'), "units"),
    ("no final newline", ROW[:-1], "exact format"),
])
def test_malformed_rows_are_refused(name, line, expect):
    with pytest.raises(PackageError, match=expect):
        skeletons_jsonl.decode_row(line)


def test_one_negative_zero_rule():
    """A value that rounds to zero is written without its sign in every fixed-decimal file."""
    person = Person(1, "observed", 0.9, (-0.001, 0.0, 1.0, 1.0), ((-0.004, -0.0, -0.0004),) * 17)
    line = skeletons_jsonl.encode_row(Row(0, 0, -0.0000001, "ok", (person,)))
    assert b"-0" not in line and b'"t":0.000000' in line
    q = quality_jsonl.FrameQuality(0, -0.0, -0.001, 0.0, 0.0, 0, 0, 0, -0.0001, 0)
    assert b"-0" not in quality_jsonl.encode_quality_line(q)


def test_other_files_refuse_what_they_would_not_write():
    good = tracks_json.encode_tracks([tracks_json.TrackRecord(1, 0, 9, 8, 2, 0.0, 0.36)])
    with pytest.raises(PackageError, match="exactly the fields"):
        tracks_json.decode_tracks(b'{"tracks":[{"id":1}]}\n')
    with pytest.raises(PackageError, match="exact format"):
        tracks_json.decode_tracks(good.replace(b"\n", b""))
    line = quality_jsonl.encode_quality_line(quality_jsonl.FrameQuality(1, 0.04, 50.0, 9.0, 20.0, 1, 1, 0, 0.8, 0))
    with pytest.raises(PackageError, match="exact format"):
        quality_jsonl.decode_quality_line(line.replace(b'"luma_mean":50.00', b'"luma_mean":50.0'))
    with pytest.raises(PackageError, match="fields"):
        quality_jsonl.decode_quality_line(b'{"frame":0,"luma":0.5}\n')
    doc = review_json.encode_review(review_json.ReviewFile((review_json.ReviewRange(3, 2, 0.1, 0.1, ("dark",)),)))
    with pytest.raises(PackageError, match="last frame is before the first"):
        review_json.decode_review(doc)
    good = review_json.encode_review(review_json.ReviewFile((review_json.ReviewRange(2, 3, 0.1, 0.1, ("dark",)),)))
    with pytest.raises(PackageError, match="reasons in words"):  # the words must be the reasons' own
        review_json.decode_review(good.replace(b'"dark picture"', b'"fine picture"'))
    with pytest.raises(PackageError, match="review ranges"):
        review_json.decode_review(b'{"ranges": []}\n')
    entry = encode_entry(0, "00" * 32, "2025-01-01T00:00:00.000000Z", "decode", {"frames": 3})
    with pytest.raises(PackageError, match="exact format"):
        decode_entry(entry.replace(b'"frames":3', b'"frames": 3'))
