"""Checks every signed statement the tool writes against the published JSON Schema of its predicate
(docs/predicate.schema.json) with the `jsonschema` package from PyPI (draft 2020-12), and against
the in-toto Statement v1 layout (in-toto/attestation spec/v1/statement.md)."""

from __future__ import annotations

import base64
import json
from pathlib import Path

import jsonschema

from redact.provenance.predicate import PREDICATE_TYPE
from redact.provenance.statement import parse_statement

SCHEMA_PATH = Path(__file__).resolve().parent.parent / "docs" / "predicate.schema.json"
SCHEMA = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
jsonschema.Draft202012Validator.check_schema(SCHEMA)  # the schema itself is valid draft 2020-12
VALIDATOR = jsonschema.Draft202012Validator(SCHEMA)


def envelope_payload(package_dir: Path) -> bytes:
    """The exact signed payload bytes of a package directory's envelope."""
    return base64.b64decode(json.loads((Path(package_dir) / "envelope.json").read_bytes())["payload"])


def check_statement(payload: bytes) -> dict:
    """Assert the payload is an in-toto Statement v1 of our predicate type whose predicate validates
    against the published schema and round-trips byte for byte through the one parser and encoder."""
    st = json.loads(payload)
    assert st["_type"] == "https://in-toto.io/Statement/v1"  # in-toto spec/v1/statement.md
    assert st["predicateType"] == PREDICATE_TYPE
    assert isinstance(st["subject"], list) and st["subject"]
    for s in st["subject"]:
        assert set(s["digest"]) == {"sha256"} and len(s["digest"]["sha256"]) == 64
    VALIDATOR.validate(st["predicate"])  # raises jsonschema.ValidationError naming the field
    assert parse_statement(payload).encode() == payload
    return st
