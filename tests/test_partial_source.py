"""A package of a partly decoded source (`stopped_early`) says so at the top of `verify`, `inspect`
and the report, in words a recipient cannot miss; a complete one says nothing of the kind.

The hand-made packages come from test_package.py; the end-to-end case truncates the crossing clip
(scikit-image stills: astronaut() public domain NASA, camera() CC0 Lav Varshney; tests/conftest.py)
to half its bytes (redact.media.synthetic.write_truncated) and runs the real pipeline through the CLI.
"""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner
from test_package import SEED, build_package

from redact.cli import main
from redact.provenance import signing
from redact.report.document import make_report

REASON = "only 95 of 300 frames decoded (last at t=3.760 s)"


@pytest.fixture(scope="module")
def packages(tmp_path_factory):
    root = tmp_path_factory.mktemp("partial")
    signer = signing.Signer.from_seed(SEED)
    pub = root / "trusted.public.pem"
    pub.write_bytes(signer.public_pem)
    return {"partial": build_package(root / "p", signer, stopped_early=REASON)["path"],
            "whole": build_package(root / "w", signer)["path"], "pub": pub, "key": signer.public_key}


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_verify_puts_the_warning_first(packages):
    r = run("verify", packages["partial"], "--trusted-key", packages["pub"])
    assert r.exit_code == 0, r.output
    first, second = r.stdout.splitlines()[:2]
    assert first.startswith("WARNING: PARTIAL SOURCE: this package covers only the first 6 frame(s) of source.bin")
    assert REASON in first and "Nothing after that point was redacted" in first
    assert second.startswith("VALID") and "PARTIAL" in second
    doc = json.loads(run("verify", packages["partial"], "--trusted-key", packages["pub"], "--json").stdout)
    assert doc["valid"] is True and doc["stopped_early"] == REASON and "PARTIAL SOURCE" in doc["warnings"][0]
    quiet = run("verify", packages["partial"], "--trusted-key", packages["pub"], "--quiet")
    assert quiet.exit_code == 0 and quiet.stdout == "" and "PARTIAL SOURCE" in quiet.stderr


def test_inspect_puts_the_warning_first(packages):
    for args in (["--trusted-key", packages["pub"]], []):
        r = run("inspect", packages["partial"], *args)
        assert r.exit_code == 0, r.output
        assert r.stdout.splitlines()[0].startswith("WARNING: PARTIAL SOURCE") and REASON in r.stdout
    doc = json.loads(run("inspect", packages["partial"], "--trusted-key", packages["pub"], "--json").stdout)
    assert doc["stopped_early"] == REASON and doc["warnings"] and "PARTIAL SOURCE" in doc["warnings"][0]


def test_report_puts_the_warning_at_the_top(packages):
    page = make_report(packages["partial"], [packages["key"]]).html.decode()
    at = page.index('id="partial-source"')
    assert page.index('id="verification"') < at < page.index('id="cautions"') < page.index('id="source"')
    assert "PARTIAL SOURCE — this record does not cover the whole video" in page
    assert "covers only the first 6 frame(s)" in page and REASON in page


def test_a_complete_source_gets_no_warning(packages):
    r = run("verify", packages["whole"], "--trusted-key", packages["pub"])
    assert r.exit_code == 0 and r.stdout.startswith("VALID") and "PARTIAL" not in r.output
    r = run("inspect", packages["whole"], "--trusted-key", packages["pub"])
    assert "PARTIAL" not in r.output
    assert json.loads(run("inspect", packages["whole"], "--json").stdout)["warnings"] == []
    assert 'id="partial-source"' not in make_report(packages["whole"], [packages["key"]]).html.decode()


def test_truncated_clip_end_to_end(bad_inputs, tmp_path, key):
    out = tmp_path / "out"
    r = run("process", bad_inputs["truncated"], "--out", out, "--signing-key", key, "--no-report")
    assert r.exit_code == 0, r.output
    pub = key.with_name(key.name.replace(".private.pem", ".public.pem"))
    r = run("verify", out / "package", "--trusted-key", pub)
    assert r.exit_code == 0 and r.stdout.startswith("WARNING: PARTIAL SOURCE"), r.output
    r = run("inspect", out / "package", "--trusted-key", pub)
    assert r.stdout.startswith("WARNING: PARTIAL SOURCE")
