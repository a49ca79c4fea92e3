"""The signed predicate and the in-toto Statement v1 as typed values: one encoder, one strict parser,
and the published JSON Schema (docs/predicate.schema.json) agreeing with the parser.

Outside references: the `jsonschema` package (PyPI, JSON Schema draft 2020-12) for the schema; the
in-toto attestation Statement v1 layout (in-toto/attestation spec/v1/statement.md); RFC 3339 for
the `created` time.
"""

from __future__ import annotations

import copy
import hashlib
import json

import jsonschema
import pytest
from statement_schema import VALIDATOR, check_statement
from test_package import SEED, build_package, test_predicate
from test_verify_tamper import findings, resign_statement

from redact.errors import PackageError
from redact.provenance import signing
from redact.provenance.predicate import PREDICATE_TYPE, AuditRecord, LogRecord, ParentRecord, Predicate
from redact.provenance.statement import ROLE_FILE, Statement, Subject, parse_statement


def full_predicate() -> Predicate:
    """A predicate with every optional part set (plan, audit, parent, disclosure)."""
    return test_predicate(
        plan={"sha256": "cd" * 32, "keep_visible": [3]},
        audit=AuditRecord(passed=True, faces=0, persons=0, source_faces=4, survived=0),
        parent=ParentRecord("ef" * 32, "key-id", "01" * 32, {"drop_keypoints": ["nose"]}),
        log=LogRecord("12" * 32, 7),
    )


@pytest.mark.parametrize("make", [test_predicate, full_predicate])
def test_encode_parse_round_trip(make):
    p = make()
    doc = p.to_json()
    assert Predicate.parse(json.loads(json.dumps(doc))) == p
    if p.log is not None:
        VALIDATOR.validate(doc)  # a signed predicate (with its log head) follows the published schema
    st = Statement((Subject("skeletons.jsonl", "ab" * 32, 10, ROLE_FILE),), p)
    if p.log is not None:
        payload = st.encode()
        assert parse_statement(payload) == st
        assert parse_statement(payload).encode() == payload  # byte for byte


def test_recorded_objects_are_read_only():
    p = full_predicate()
    with pytest.raises(TypeError):
        p.parameters["style"] = "fill"  # type: ignore[index]
    with pytest.raises(AttributeError):
        p.source.sha256 = "00" * 32  # type: ignore[misc]
    assert p.to_json()["plan"]["keep_visible"] == [3]  # arrays come back as JSON lists


def _mutations():
    """(what, change to a valid signed predicate's JSON) pairs the parser and the schema must both refuse."""
    def drop(k):
        return lambda d: d.pop(k)

    def set_(path, v):
        def f(d):
            *head, last = path
            for k in head:
                d = d[k]
            d[last] = v
        return f

    return [
        ("missing source", drop("source")),
        ("missing plan (always written, null when absent)", drop("plan")),
        ("unknown top-level key", set_(["extra"], 1)),
        ("unknown source field", set_(["source", "colour"], "red")),
        ("sha256 in upper case", set_(["source", "sha256"], "AB" * 32)),
        ("fps as a float", set_(["source", "fps"], 25.0)),
        ("negative frame count", set_(["source", "frames"], -1)),
        ("frames as a string", set_(["source", "frames"], "6")),
        ("created without a time zone", set_(["created"], "2025-01-01T00:00:00")),
        ("log head too short", set_(["log", "head"], "12" * 31)),
        ("audit without passed", set_(["audit"], {"faces": 0, "persons": 0, "source_faces": None, "survived": None})),
        ("unknown disclosure field", set_(["disclosure", "phone"], "555")),
        ("parameters not an object", set_(["parameters"], [1, 2])),
    ]


@pytest.mark.parametrize("what,mutate", _mutations(), ids=[w for w, _ in _mutations()])
def test_parser_and_schema_refuse_the_same_predicates(what, mutate):
    doc = copy.deepcopy(full_predicate().to_json())
    mutate(doc)
    with pytest.raises(PackageError):
        Predicate.parse(doc)
    with pytest.raises(jsonschema.ValidationError):
        VALIDATOR.validate(doc)


def test_parser_names_the_bad_field():
    doc = full_predicate().to_json()
    doc["source"]["sha256"] = "xyz"
    with pytest.raises(PackageError, match=r"predicate\.source\.sha256: must be 64 lowercase hex digits"):
        Predicate.parse(doc)


def test_statement_parser_lists_every_problem():
    st = Statement((Subject("a.json", "ab" * 32, 1),), full_predicate()).to_json()
    st["_type"] = "https://in-toto.io/Statement/v0.1"
    st["subject"].append({"name": "../b", "digest": {"sha256": "ab" * 32}, "annotations": {"role": "x", "bytes": 1}})
    with pytest.raises(PackageError) as e:
        parse_statement(json.dumps(st).encode())
    text = str(e.value)
    assert "_type" in text and "unsafe name" in text and "annotations.role" in text


def test_written_package_statement_follows_the_schema(tmp_path):
    p = build_package(tmp_path, signing.Signer.from_seed(SEED))
    st = check_statement(p["payload"])
    assert st["predicateType"] == PREDICATE_TYPE == "urn:redact:skeleton-package:v1"
    assert st["predicate"]["source"]["frames_root"] is not None  # filled in by write_package
    assert st["predicate"]["log"]["entries"] >= 3


def test_verify_refuses_a_signed_statement_whose_predicate_breaks_the_schema(tmp_path):
    """The signature is good (re-signed by the key holder) but the predicate is not of our type:
    the verifier parses only after the signature check, then refuses it with a finding naming the field."""
    signer = signing.Signer.from_seed(SEED)
    p = build_package(tmp_path, signer)
    resign_statement(p["path"], signer, lambda st: st["predicate"]["source"].update(frames="six"))
    fs = findings(p["path"], signer.public_key)
    assert any("predicate.source.frames" in f for f in fs), fs


def test_statement_hash_is_over_the_exact_payload(tmp_path):
    from redact.provenance.verify import verify_package

    signer = signing.Signer.from_seed(SEED)
    p = build_package(tmp_path, signer)
    v = verify_package(p["path"], [signer.public_key])
    assert v.statement_sha256 == hashlib.sha256(p["payload"]).hexdigest()  # FIPS 180-4 via hashlib
    assert v.predicate.source.frames == 6 and v.predicate.log.entries == v.statement.predicate.log.entries
