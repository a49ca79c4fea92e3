"""The keygen / verify / inspect / frame-proof / frame-check commands, through click's CliRunner."""

import json
import shutil

import pytest
from click.testing import CliRunner
from test_package import N_FRAMES, SEED, build_package

from redact.cli import main
from redact.provenance import merkle, signing


@pytest.fixture(scope="module")
def pkg(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli")
    signer = signing.Signer.from_seed(SEED)
    p = build_package(root, signer)
    pub = root / "trusted.public.pem"
    pub.write_bytes(signer.public_pem)
    return {**p, "pub": pub, "key_id": signer.key_id, "root": root}


def run(*args, env=None, input=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env, input=input)


def no_traceback(r):
    assert "Traceback" not in r.stdout + r.stderr
    assert r.exception is None or isinstance(r.exception, SystemExit)  # no uncaught exception


@pytest.mark.parametrize("cmd", ["keygen", "verify", "inspect", "frame-proof", "frame-check"])
def test_help_has_example(cmd):
    r = run(cmd, "--help")
    assert r.exit_code == 0 and "Example" in r.stdout


def test_help_names_passphrase_variable_and_cautions():
    assert "REDACT_KEY_PASSPHRASE" in run("keygen", "--help").stdout
    for cmd in ("verify", "inspect"):
        assert "pseudonymised" in run(cmd, "--help").stdout


def test_keygen_env_passphrase(tmp_path):
    r = run("keygen", "--out-dir", tmp_path, "--name", "k", env={"REDACT_KEY_PASSPHRASE": "s3cret pass phrase"})
    assert r.exit_code == 0, r.stderr
    key_id = r.stdout.strip()
    assert key_id == signing.load_public_key(tmp_path / "k.public.pem").key_id  # RFC 7638 id on stdout only
    assert signing.load_private_key(tmp_path / "k.private.pem", b"s3cret pass phrase").key_id == key_id
    assert "k.private.pem" in r.stderr
    again = run("keygen", "--out-dir", tmp_path, "--name", "k", env={"REDACT_KEY_PASSPHRASE": "another long passphrase"})
    assert again.exit_code == 2 and "already exists" in again.stderr and again.stdout == ""
    no_traceback(again)


def test_keygen_prompts_twice_hidden(tmp_path):
    r = run("keygen", "--out-dir", tmp_path, env={"REDACT_KEY_PASSPHRASE": None}, input="pw one two three\npw one two three\n")
    assert r.exit_code == 0, r.stderr
    assert "pw one two three" not in r.stdout + r.stderr  # hidden input is not echoed
    assert r.stdout.strip() == signing.load_private_key(tmp_path / "redact-signing.private.pem", b"pw one two three").key_id
    empty = run("keygen", "--out-dir", tmp_path / "e", env={"REDACT_KEY_PASSPHRASE": ""})
    assert empty.exit_code == 2 and "empty passphrase" in empty.stderr


def test_verify_valid(pkg):
    r = run("verify", pkg["path"], "--trusted-key", pkg["pub"], "--source", pkg["source"], "--video", pkg["video"])
    assert r.exit_code == 0, r.stdout + r.stderr
    assert r.stdout.startswith("VALID") and pkg["key_id"] in r.stdout
    assert "pseudonymised" in r.stderr
    j = run("verify", pkg["path"], "--trusted-key", pkg["pub"], "--json")
    doc = json.loads(j.stdout)
    assert j.exit_code == 0 and doc["valid"] is True and doc["key_id"] == pkg["key_id"] and doc["findings"] == []


def test_verify_invalid_lists_every_finding(pkg, tmp_path):
    bad = tmp_path / "bad"
    shutil.copytree(pkg["path"], bad)
    (bad / "tracks.json").write_bytes(b"{}")
    (bad / "review.json").unlink()
    (bad / "extra.txt").write_bytes(b"x")
    r = run("verify", bad, "--trusted-key", pkg["pub"])
    assert r.exit_code == 1
    assert r.stdout.startswith("INVALID") and "4 finding(s)" in r.stdout
    for words in ("tracks.json: SHA-256", "tracks.json: size 2 bytes", "review.json: missing", "extra.txt: unexpected"):
        assert words in r.stdout
    j = run("verify", bad, "--trusted-key", pkg["pub"], "--json")
    doc = json.loads(j.stdout)
    assert j.exit_code == 1 and doc["valid"] is False and len(doc["findings"]) == 4


def test_verify_other_source_fails(pkg, tmp_path):
    other = tmp_path / "other.mp4"
    other.write_bytes(b"not the source")
    r = run("verify", pkg["path"], "--trusted-key", pkg["pub"], "--source", other)
    assert r.exit_code == 1 and "source:" in r.stdout


def test_verify_untrusted_key(pkg, tmp_path):
    other = tmp_path / "other.pem"
    other.write_bytes(signing.Signer.from_seed(bytes(32)).public_pem)
    r = run("verify", pkg["path"], "--trusted-key", other)
    assert r.exit_code == 1 and "does not verify with any trusted key" in r.stdout


def test_verify_usage_errors(pkg, tmp_path):
    r = run("verify", pkg["path"])
    assert r.exit_code == 2 and "--trusted-key" in r.stderr  # no trusted key: usage error, never a pass
    junk = tmp_path / "junk.pem"
    junk.write_bytes(b"junk")
    r = run("verify", pkg["path"], "--trusted-key", junk)
    assert r.exit_code == 2 and r.stderr.startswith("error:") and r.stdout == ""
    no_traceback(r)
    r = run("verify", tmp_path / "missing", "--trusted-key", pkg["pub"])
    assert r.exit_code == 2


def test_inspect(pkg):
    r = run("inspect", pkg["path"], "--trusted-key", pkg["pub"], "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["verified"] and doc["counts"] == {"frames": 6, "people": 10, "detections": 10, "predicted": 0,
                                                 "tracks": 2, "fault_frames": 1}
    # the one shape of a flagged range, as review.json holds it
    assert doc["flagged"] == [{"frames": [4, 5], "seconds": [0.16, 0.2], "reasons": ["track lost"],
                               "explained": ["track lost"]}]
    t = run("inspect", pkg["path"])
    assert t.exit_code == 0 and "NOT VERIFIED" in t.stderr and "unverified" in t.stdout
    assert "frames 4-5 (0.16-0.20 s): track lost" in t.stdout and "test-model" in t.stdout


def test_inspect_with_wrong_key_fails(pkg, tmp_path):
    other = tmp_path / "other.pem"
    other.write_bytes(signing.Signer.from_seed(bytes(32)).public_pem)
    r = run("inspect", pkg["path"], "--trusted-key", other)
    assert r.exit_code == 1 and "does not verify" in r.stderr


def test_frame_proof_and_check(pkg, tmp_path):
    out = tmp_path / "f3.proof.json"
    r = run("frame-proof", pkg["path"], "--trusted-key", pkg["pub"], "--frame", 3, "--out", out)
    assert r.exit_code == 0, r.stderr
    proof = merkle.FrameProof.from_json(out.read_bytes())
    assert proof.frame == 3 and proof.size == N_FRAMES and proof.leaf == pkg["digests"][3]
    ok = run("frame-check", out, "--package", pkg["path"], "--trusted-key", pkg["pub"], "--frame-digest", pkg["digests"][3].hex())
    assert ok.exit_code == 0 and ok.stdout.startswith("VALID")
    root_hex = merkle.root(pkg["digests"]).hex()
    assert run("frame-check", out, "--root", root_hex).exit_code == 0
    wrong = run("frame-check", out, "--root", root_hex, "--frame-digest", pkg["digests"][2].hex(), "--json")
    assert wrong.exit_code == 1 and json.loads(wrong.stdout)["valid"] is False
    # an altered audit path fails (RFC 9162 §2.1.3.2)
    doc = json.loads(out.read_bytes())
    doc["path"][0] = "00" * 32
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(doc))
    r = run("frame-check", bad, "--package", pkg["path"], "--trusted-key", pkg["pub"])
    assert r.exit_code == 1 and "audit path" in r.stdout
    # refusals: existing output, frame out of range, neither --package nor --root
    assert run("frame-proof", pkg["path"], "--trusted-key", pkg["pub"], "--frame", 1, "--out", out).exit_code == 2
    r = run("frame-proof", pkg["path"], "--trusted-key", pkg["pub"], "--frame", N_FRAMES, "--out", tmp_path / "x.json")
    assert r.exit_code == 2 and "does not exist" in r.stderr and not (tmp_path / "x.json").exists()
    assert run("frame-check", out).exit_code == 2
