"""The hash-chained transform log: format, chain links, head, and the chain checker."""

import hashlib
import json

import pytest

from redact.errors import OutputError
from redact.provenance import log


def clock():
    n = iter(range(10**6))
    return lambda: f"2025-01-01T00:00:{next(n) % 60:02d}.000000Z"


def make(tmp_path, name="log.jsonl"):
    t = log.TransformLog(tmp_path / name, clock=clock())
    t.append("decode", frames=120, fps=25.0)
    t.append("model", id="yolo11n-pose", sha256="ab" * 32)
    t.append("redaction", style="blur", frames=[0, 119], people=3)
    t.disclosure(date="2025-01-02", recipient="A. Person", organisation="Example Org", purpose="subject access request",
                 request_reference="SAR-1")
    t.append("sign", key_id="kid")
    return t


def test_genesis_is_sha256_of_empty_string():
    # FIPS 180-4 empty-message vector.
    assert log.GENESIS == "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"


def test_lines_chain_by_sha256_of_exact_previous_bytes(tmp_path):
    t = make(tmp_path)
    lines = (tmp_path / "log.jsonl").read_bytes().splitlines(keepends=True)
    assert len(lines) == 5 == t.entries
    prev = log.GENESIS
    for i, line in enumerate(lines):
        d = json.loads(line)
        assert list(d)[:4] == ["seq", "prev", "time", "kind"]
        assert d["seq"] == i and d["prev"] == prev
        prev = hashlib.sha256(line).hexdigest()  # hashlib directly, not the module under test
    assert t.head == prev
    d = json.loads(lines[3])
    assert d["kind"] == "disclosure" and d["recipient"] == "A. Person" and d["request_reference"] == "SAR-1"
    report = log.check_chain_bytes(b"".join(lines))
    assert report.ok and report.head == t.head and report.entries == 5 and report.last["kind"] == "sign"
    assert report.kinds == ("decode", "model", "redaction", "disclosure", "sign")


def test_deterministic_with_a_fixed_clock(tmp_path):
    make(tmp_path, "a.jsonl")
    make(tmp_path, "b.jsonl")
    assert (tmp_path / "a.jsonl").read_bytes() == (tmp_path / "b.jsonl").read_bytes()


@pytest.mark.parametrize("mutate,expect", [
    (lambda ls: ls[:1] + ls[2:], "prev"),                       # a line removed
    (lambda ls: [ls[0], ls[2], ls[1]] + ls[3:], "prev"),        # two lines swapped
    (lambda ls: [ls[0], ls[1].replace(b"yolo11n", b"yolo11x")] + ls[2:], "prev"),  # a line edited
    (lambda ls: ls[1:], "seq"),                                 # first line removed
    (lambda ls: ls + [b"\n"], "invalid JSON"),                  # blank line
    (lambda ls: ls[:-1] + [ls[-1][:-1]], "newline"),            # truncated last line
    (lambda ls: [ls[0].replace(b'"frames":120', b'"frames":120,"frames":121')] + ls[1:], "duplicate key"),
    (lambda ls: [ls[0].replace(b'"frames":120', b'"frames":NaN')] + ls[1:], "NaN"),
])
def test_chain_checker_finds_tampering(tmp_path, mutate, expect):
    lines = (make(tmp_path).path).read_bytes().splitlines(keepends=True)
    report = log.check_chain_bytes(b"".join(mutate(lines)))
    assert not report.ok
    assert any(expect in f for f in report.findings), report.findings


def test_editing_the_last_line_changes_the_head(tmp_path):
    t = make(tmp_path)
    data = t.path.read_bytes().replace(b'"key_id":"kid"', b'"key_id":"kie"')
    report = log.check_chain_bytes(data)
    assert report.ok and report.head != t.head  # only the signed head can catch this


def test_reopening_continues_the_chain(tmp_path):
    t = make(tmp_path)
    t2 = log.TransformLog(t.path, clock=clock())
    assert (t2.entries, t2.head) == (5, t.head)
    e = t2.append("encode", codec="libx264")
    assert e["seq"] == 5 and e["prev"] == t.head
    assert log.check_chain_bytes(t.path.read_bytes()).ok


def test_refuses_to_continue_a_broken_log(tmp_path):
    t = make(tmp_path)
    lines = t.path.read_bytes().splitlines(keepends=True)
    t.path.write_bytes(b"".join(lines[:1] + lines[2:]))
    with pytest.raises(OutputError, match="cannot continue"):
        log.TransformLog(t.path)


def test_bad_entries_refused(tmp_path):
    t = log.TransformLog(tmp_path / "l.jsonl")
    with pytest.raises(OutputError, match="reserved"):
        t.append("decode", seq=3)
    with pytest.raises(OutputError):
        t.append("decode", value=float("nan"))
    with pytest.raises(OutputError, match="lowercase"):
        t.append("Decode!")
    with pytest.raises(OutputError, match="unknown disclosure"):
        t.disclosure(recipient="x", salary=3)
    assert t.entries == 0 and not (tmp_path / "l.jsonl").exists()
