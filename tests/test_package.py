"""Package writing and hardened reading (layout, closed file set, tar safety, strict JSON).

`build_package` here is also used by test_verify_tamper.py and test_cli_verify.py: it makes a
small synthetic package by hand (no video pipeline).
"""

import hashlib
import io
import json
import os
import re
import tarfile
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from redact import jsonio
from redact.errors import OutputError, PackageError
from redact.formats.quality_jsonl import FrameQuality, encode_quality_line
from redact.formats.review_json import ReviewFile, ReviewRange, encode_review
from redact.formats.tracks_json import TrackRecord, encode_tracks
from redact.provenance import merkle, package, signing
from redact.provenance.log import TransformLog
from redact.provenance.predicate import (
    Disclosure,
    FaultCounts,
    LogRecord,
    ModelRecord,
    Predicate,
    ReviewCounts,
    SourceRecord,
    ToolRecord,
)
from redact.provenance.summary import summarise_package
from redact.skeletons.rows import encode_row
from redact.vision.records import Tracks

SEED = bytes(range(32))  # a fixed test key (not a published vector; any 32 bytes are a valid seed)
N_FRAMES = 6


def FIXED_CLOCK() -> str:
    """Log time of every entry of the hand-made packages, so they are the same bytes on every run."""
    return "2025-01-01T00:00:00.000000Z"



def synthetic_rows() -> bytes:
    out = []
    for f in range(N_FRAMES):
        m = 2 if f < 4 else 1
        kp = np.zeros((m, 17, 3), np.float32) + np.arange(17, dtype=np.float32)[None, :, None] + f
        tracks = Tracks(np.arange(1, m + 1), np.tile([[10, 20, 50, 120]], (m, 1)), np.full(m, 0.9), kp,
                        np.ones(m, bool), np.zeros(m, np.int32))
        out.append(encode_row(f, f * 512, f / 25.0, tracks, status="fault" if f == 5 else "ok"))
    return b"".join(out)


def build_package(root: Path, signer: signing.Signer, *, archive: bool = False, video: bool = True,
                  name: str = "package", stopped_early: str | None = None) -> dict:
    """A complete signed package from small synthetic files; returns its paths and payload."""
    root.mkdir(parents=True, exist_ok=True)
    source = root / "source.bin"
    source.write_bytes(b"synthetic source video bytes\n" * 50)
    red = root / "redacted.mp4"
    red.write_bytes(b"synthetic redacted video\n" * 40)
    staging = root / f".{name}.staging"
    staging.mkdir()
    digests = [hashlib.sha256(f"frame {i}".encode()).digest() for i in range(N_FRAMES)]
    (staging / package.SKELETONS).write_bytes(synthetic_rows())
    (staging / package.TRACKS).write_bytes(encode_tracks([TrackRecord(1, 0, 5, 6, 0, 0.0, 0.2),
                                                          TrackRecord(2, 0, 3, 4, 0, 0.0, 0.12)]))
    (staging / package.QUALITY).write_bytes(b"".join(
        encode_quality_line(FrameQuality(i, i / 25, 50.0, 10.0, 100.0, 2 if i < 4 else 1, 1, 0, 0.9, 0))
        for i in range(N_FRAMES)))
    (staging / package.REVIEW).write_bytes(encode_review(ReviewFile((ReviewRange(4, 5, 0.16, 0.2, ("track lost",)),),
                                                                    {"merge_gap": 5}, N_FRAMES)))
    (staging / package.FRAMES).write_bytes(merkle.format_frame_digests(digests))
    log = TransformLog(staging / package.LOG, clock=FIXED_CLOCK)
    log.append("decode", frames=N_FRAMES)
    log.append("redaction", style="blur", frames=[0, N_FRAMES - 1])
    predicate = test_predicate(
        SourceRecord(name="source.bin", sha256=hashlib.sha256(source.read_bytes()).hexdigest(),
                     bytes=source.stat().st_size, duration=0.24, fps="25/1", frames=N_FRAMES,
                     width=64, height=48, frames_root=merkle.root(digests).hex(), stopped_early=stopped_early))
    final = root / (f"{name}.tar" if archive else name)
    payload = package.write_package(staging, final, predicate, signer, video=red if video else None, archive=archive,
                                    clock=FIXED_CLOCK)
    return {"path": final, "source": source, "video": red, "payload": payload, "predicate": predicate,
            "digests": digests}


def test_predicate(source: SourceRecord | None = None, **changes) -> Predicate:
    """A small typed predicate for hand-made packages (no video pipeline)."""
    source = source or SourceRecord("source.bin", "ab" * 32, 100, 0.24, "25/1", N_FRAMES, 64, 48)
    p = Predicate(source=source, model=ModelRecord("test-model", "00" * 32, "test"), parameters={"style": "blur"},
                  privacy={}, disclosure=Disclosure(), review=ReviewCounts(1, 2), faults=FaultCounts(1),
                  tool=ToolRecord("redact", "0.1.0"), created="2025-01-01T00:00:00Z")
    return replace(p, **changes)


test_predicate.__test__ = False  # a helper, not a test


@pytest.fixture
def signer():
    return signing.Signer.from_seed(SEED)


def test_directory_layout_and_statement(tmp_path, signer):
    p = build_package(tmp_path, signer)
    final = p["path"]
    files = sorted(os.listdir(final))
    assert files == sorted(["skeletons.jsonl", "tracks.json", "quality.jsonl", "review.json", "frames.sha256",
                            "log.jsonl", "envelope.json"])
    assert not (tmp_path / ".package.staging").exists()
    env = json.loads((final / "envelope.json").read_bytes())
    assert env["payloadType"] == "application/vnd.in-toto+json"
    assert base64_payload(env) == p["payload"]
    st = json.loads(p["payload"])
    assert st["_type"] == "https://in-toto.io/Statement/v1"  # in-toto Statement v1
    assert st["predicateType"] == package.PREDICATE_TYPE
    by_name = {s["name"]: s for s in st["subject"]}
    assert set(by_name) == set(files) - {"envelope.json"} | {"redacted.mp4"}
    for name in set(files) - {"envelope.json"}:
        data = (final / name).read_bytes()
        assert by_name[name]["digest"]["sha256"] == hashlib.sha256(data).hexdigest()
        assert by_name[name]["annotations"] == {"role": "package-file", "bytes": len(data)}
    assert by_name["redacted.mp4"]["annotations"]["role"] == "redacted-video"
    assert by_name["redacted.mp4"]["digest"]["sha256"] == hashlib.sha256(p["video"].read_bytes()).hexdigest()
    lines = (final / "log.jsonl").read_bytes().splitlines(keepends=True)
    assert st["predicate"]["log"] == {"head": hashlib.sha256(lines[-1]).hexdigest(), "entries": len(lines)}
    last = json.loads(lines[-1])
    assert last["kind"] == "sign" and last["key_id"] == signer.key_id
    assert st["predicate"]["source"]["frames_root"] == merkle.root(p["digests"]).hex()
    assert p["predicate"].log is None  # the caller's predicate is not changed


def base64_payload(env):
    return signing.b64decode_any(env["payload"])


def test_tar_layout(tmp_path, signer):
    p = build_package(tmp_path, signer, archive=True)
    with tarfile.open(p["path"]) as tar:
        members = tar.getmembers()
    assert sorted(m.name for m in members) == [m.name for m in members]
    assert {m.name for m in members} >= {"envelope.json", "log.jsonl", "skeletons.jsonl"}
    assert all(m.isreg() and m.mtime == 0 and m.uid == 0 and m.mode == 0o644 for m in members)
    assert sorted(os.listdir(tmp_path)) == ["package.tar", "redacted.mp4", "source.bin"]  # no staging, no temp


def test_writer_refuses(tmp_path, signer):
    p = build_package(tmp_path, signer)
    staging = tmp_path / "s"
    staging.mkdir()
    (staging / "a.json").write_bytes(b"{}")
    with pytest.raises(OutputError, match="already exists"):
        package.write_package(staging, p["path"], test_predicate(), signer)
    with pytest.raises(OutputError, match="must not contain 'log'"):
        package.write_package(staging, tmp_path / "p2", test_predicate(log=LogRecord("00" * 32, 1)), signer)
    with pytest.raises(OutputError, match="strict JSON"):
        package.write_package(staging, tmp_path / "p2", test_predicate(parameters={"x": float("inf")}), signer)
    with pytest.raises(OutputError, match="must be a redact.provenance.predicate.Predicate"):
        package.write_package(staging, tmp_path / "p2", {"source": {}}, signer)  # a dict is not a predicate
    os.symlink(tmp_path / "source.bin", staging / "link")
    with pytest.raises(OutputError, match="symlink"):
        package.write_package(staging, tmp_path / "p2", test_predicate(), signer)
    os.unlink(staging / "link")
    (staging / package.FRAMES).write_bytes(merkle.format_frame_digests([b"\x01" * 32]))
    bad_root = replace(test_predicate().source, frames_root="00" * 32)
    with pytest.raises(OutputError, match="frames_root"):
        package.write_package(staging, tmp_path / "p2", test_predicate(source=bad_root), signer)
    assert not (tmp_path / "p2").exists()
    assert not (staging / "log.jsonl").exists()  # a refused write leaves the staging directory as it was


@pytest.mark.parametrize("name,ok", [
    ("skeletons.jsonl", True), ("events/labels.json", True), ("../x", False), ("a/../b", False),
    ("/etc/passwd", False), ("C:/x", False), ("a\\b", False), ("a\x00b", False), ("", False), ("./a", False),
    ("a//b", False), ("a/", False), ("tab\there", False), ("..", False),
])
def test_check_name(name, ok):
    assert (package.check_name(name) is None) == ok


def tar_with(path: Path, members: list[tuple[tarfile.TarInfo, bytes]]) -> Path:
    with tarfile.open(path, "w", format=tarfile.GNU_FORMAT) as tar:
        for info, data in members:
            info.size = len(data) if info.isreg() else 0
            tar.addfile(info, io.BytesIO(data) if info.isreg() else None)
    return path


def info(name, type_=tarfile.REGTYPE, linkname=""):
    i = tarfile.TarInfo(name)
    i.type = type_
    i.linkname = linkname
    return i


@pytest.mark.parametrize("member,expect", [
    (info("../x"), "'..'"),
    (info("/abs"), "absolute"),
    (info("ok/../../x"), "'..'"),
    (info("link", tarfile.SYMTYPE, "/etc/passwd"), "link"),
    (info("hard", tarfile.LNKTYPE, "a.json"), "link"),
    (info("dev", tarfile.CHRTYPE), "device"),
    (info("fifo", tarfile.FIFOTYPE), "FIFO"),
    (info("dir", tarfile.DIRTYPE), "directory"),
    (info("a\\b"), "backslash"),
])
def test_tar_reader_flags_unsafe_members(tmp_path, member, expect):
    path = tar_with(tmp_path / "t.tar", [(info("a.json"), b"{}"), (member, b"x")])
    with package.open_package(path) as r:
        assert "a.json" in r.files and len(r.files) == 1
        assert any(expect in p for p in r.problems), r.problems
    assert sorted(os.listdir(tmp_path)) == ["t.tar"]  # nothing was extracted


def test_tar_reader_flags_duplicates_and_garbage(tmp_path):
    path = tar_with(tmp_path / "t.tar", [(info("a.json"), b"{}"), (info("a.json"), b"[]")])
    with package.open_package(path) as r:
        assert any("more than once" in p for p in r.problems)
    junk = tmp_path / "junk.tar"
    junk.write_bytes(b"not a tar" * 100)
    with pytest.raises(PackageError, match="tar"):
        with package.open_package(junk):
            pass


def test_directory_reader_flags_links_and_specials(tmp_path):
    d = tmp_path / "pkg"
    d.mkdir()
    (d / "a.json").write_bytes(b"{}")
    os.symlink("a.json", d / "alias.json")
    os.mkfifo(d / "pipe")
    (d / "empty").mkdir()
    (d / "sub").mkdir()
    (d / "sub" / "b.json").write_bytes(b"[]")
    with package.open_package(d) as r:
        assert r.files == {"a.json": 2, "sub/b.json": 2}
        assert any("alias.json: symlink" in p for p in r.problems)
        assert any("pipe: not a regular file" in p for p in r.problems)
        assert any("empty: unexpected empty directory" in p for p in r.problems)
        assert r.read("sub/b.json", 10) == b"[]"
        with pytest.raises(PackageError, match="limit"):
            r.read("a.json", 1)


# RFC 7493 (I-JSON) §2: what the strict reader must refuse.
@pytest.mark.parametrize("text,expect", [
    (b'{"a":1,"a":2}', "duplicate key"),
    (b'{"a":NaN}', "NaN"),
    (b'{"a":Infinity}', "Infinity"),
    (b'{"a":-Infinity}', "Infinity"),
    (b'{"a":1e400}', "infinity"),
    (b'{"a":9007199254740992}', "2**53"),
    (b'\xef\xbb\xbf{}', "byte-order mark"),
    (b'{"a":"\xff"}', "UTF-8"),
    (b'{"a":"\\ud800"}', "surrogate"),
    (b'[' * 100 + b']' * 100, "nesting"),
    (b'[' * 200000, "nesting"),
    (b'{"a":1} x', "invalid JSON"),
    (b'{"a":{"b":1,"b":1}}', "duplicate key"),
])
def test_strict_json_refuses(text, expect):
    with pytest.raises(PackageError, match=re.escape(expect)):
        jsonio.loads(text, "t.json")


def test_strict_json_size_limit_before_parsing():
    with pytest.raises(PackageError, match="exceeds the limit"):
        jsonio.loads(b"[" + b"1," * 100 + b"1]", "big.json", limit=50)
    assert jsonio.loads(b'{"a":[1,2.5,"\\u00e9",null,true]}', "ok.json") == {"a": [1, 2.5, "é", None, True]}
    assert jsonio.loads(b'{"a":9007199254740991}', "ok.json") == {"a": 2**53 - 1}


def test_summary_counts(tmp_path, signer):
    p = build_package(tmp_path, signer)
    s = summarise_package(p["path"], [signer.public_key])
    assert s["verified"] and s["key_id"] == signer.key_id
    # synthetic_rows: 6 frames, 2 people in frames 0-3 and 1 in frames 4-5, ids 1 and 2, frame 5 a fault
    assert s["counts"] == {"frames": 6, "people": 10, "detections": 10, "predicted": 0, "tracks": 2,
                           "fault_frames": 1}
    assert s["flagged"] == [{"frames": [4, 5], "seconds": [0.16, 0.2], "reasons": ["track lost"],
                             "explained": ["track lost"]}]
    assert s["source"]["frames"] == N_FRAMES and s["model"]["id"] == "test-model"
    u = summarise_package(p["path"])
    assert not u["verified"] and u["counts"] == s["counts"]
