"""Countersigning (issue 16, item 3): a second DSSE signature on a package, and verify naming each signer.

Outside references: DSSE v1.0.2 envelope.md ("An envelope MAY have more than one signature") and
securesystemslib's DSSE Envelope (PyPI), which must accept our countersigned envelope with a
threshold of two.
"""

import base64
import hashlib
import json
import os
import shutil
import tarfile

import pytest
from click.testing import CliRunner
from test_package import SEED, build_package

from redact.cli import main
from redact.errors import OutputError, VerificationFailed
from redact.provenance import countersign, signing
from redact.provenance.countersign import countersign_package
from redact.provenance.verify import verify_package

PASS = "dpo passphrase"


@pytest.fixture
def keys(tmp_path):
    steward = signing.Signer.from_seed(SEED)
    kdir = tmp_path / "keys"
    kdir.mkdir()
    (kdir / "steward.public.pem").write_bytes(steward.public_pem)
    dpo_id = signing.generate_key(kdir / "dpo.private.pem", kdir / "dpo.public.pem", PASS.encode())
    dpo = signing.load_private_key(kdir / "dpo.private.pem", PASS.encode())
    assert dpo.key_id == dpo_id
    return {"steward": steward, "dpo": dpo, "dir": kdir,
            "steward_pub": signing.load_public_key(kdir / "steward.public.pem"),
            "dpo_pub": signing.load_public_key(kdir / "dpo.public.pem")}


def snapshot(path):
    """Name → bytes of every file of a package folder, or of every member of a .tar."""
    if path.is_dir():
        return {p.name: p.read_bytes() for p in sorted(path.iterdir())}
    with tarfile.open(path) as tar:
        return {m.name: tar.extractfile(m).read() for m in tar.getmembers()}


def findings(path, keys_, **kw):
    with pytest.raises(VerificationFailed) as e:
        verify_package(path, keys_, **kw)
    return e.value.findings


@pytest.mark.parametrize("archive", [False, True])
def test_countersigned_in_place_verifies_with_both_keys_and_names_both(tmp_path, keys, archive):
    p = build_package(tmp_path / "out", keys["steward"], archive=archive)
    before = snapshot(p["path"])
    result = countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    assert result.path == p["path"] and result.added == keys["dpo"].key_id
    assert [s.key_id for s in result.signers] == [keys["steward"].key_id, keys["dpo"].key_id]
    assert result.package.key_id == keys["steward"].key_id  # the author, named by the log
    after = snapshot(p["path"])
    # Only envelope.json changed; its payload string and the first signature are kept as they were.
    assert {n: b for n, b in after.items() if n != "envelope.json"} == {n: b for n, b in before.items() if n != "envelope.json"}
    old, new = json.loads(before["envelope.json"]), json.loads(after["envelope.json"])
    assert new["payload"] == old["payload"] and new["payloadType"] == old["payloadType"]
    assert new["signatures"][0] == old["signatures"][0] and len(new["signatures"]) == 2
    assert new["signatures"][1]["keyid"] == keys["dpo"].key_id
    assert after["envelope.json"] == signing.envelope_bytes(new)  # written in this tool's layout
    v = verify_package(p["path"], [keys["steward_pub"], keys["dpo_pub"]])
    assert [(s.key_id, s.key.label) for s in v.signers] == [(keys["steward"].key_id, "steward.public.pem"),
                                                             (keys["dpo"].key_id, "dpo.public.pem")]
    assert v.payload == p["payload"] and v.notes == ()
    assert sorted(os.listdir(tmp_path / "out")) == sorted(["package.tar" if archive else "package", "redacted.mp4",
                                                           "source.bin"])  # no temporary file left


def test_securesystemslib_accepts_the_countersigned_envelope(tmp_path, keys):
    # Outside implementation: securesystemslib's Envelope.verify with threshold 2.
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey
    from securesystemslib.dsse import Envelope
    from securesystemslib.signer import SSlibKey

    p = build_package(tmp_path, keys["steward"])
    countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    theirs = Envelope.from_dict(json.loads((p["path"] / "envelope.json").read_bytes()))
    ssl_keys = [SSlibKey.from_crypto(Ed25519PublicKey.from_public_bytes(s.public_key.raw), keyid=s.key_id)
                for s in (keys["steward"], keys["dpo"])]
    assert set(theirs.verify(ssl_keys, 2)) == {keys["steward"].key_id, keys["dpo"].key_id}
    assert theirs.payload == p["payload"]


def test_untrusted_tampered_and_removed_countersignature(tmp_path, keys):
    p = build_package(tmp_path, keys["steward"])
    countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    env_path = p["path"] / "envelope.json"
    good = env_path.read_bytes()
    # Only the author's key trusted: the countersignature is a finding that names its hint and what to do.
    fs = findings(p["path"], [keys["steward_pub"]])
    assert len(fs) == 1 and f"signature 1 (keyid hint {keys['dpo'].key_id!r})" in fs[0] and "--trusted-key" in fs[0]
    # The second signature altered: refused, naming signature 1.
    env = json.loads(good)
    raw = bytearray(base64.b64decode(env["signatures"][1]["sig"]))
    raw[7] ^= 0x20
    env["signatures"][1]["sig"] = base64.b64encode(bytes(raw)).decode()
    env_path.write_bytes(signing.envelope_bytes(env))
    fs = findings(p["path"], [keys["steward_pub"], keys["dpo_pub"]])
    assert len(fs) == 1 and "signature 1 " in fs[0] and "does not verify" in fs[0]
    # The countersignature removed: DSSE signatures are independent, so the package still verifies,
    # naming one signer; a recipient who expects the countersignature asks for it.
    env = json.loads(good)
    del env["signatures"][1]
    env_path.write_bytes(signing.envelope_bytes(env))
    assert [s.key_id for s in verify_package(p["path"], [keys["steward_pub"], keys["dpo_pub"]]).signers] == \
        [keys["steward"].key_id]
    fs = findings(p["path"], [keys["steward_pub"]], required_signers=[keys["dpo_pub"]])
    assert fs == [f"signature: required signer {keys['dpo_pub'].name} has not signed this envelope"]
    # The author's signature removed, the countersignature kept: the log names the author, so refused.
    env = json.loads(good)
    del env["signatures"][0]
    env_path.write_bytes(signing.envelope_bytes(env))
    fs = findings(p["path"], [keys["steward_pub"], keys["dpo_pub"]])
    assert any("signing entry names key" in f and keys["steward"].key_id in f for f in fs), fs


@pytest.mark.parametrize("archive", [False, True])
def test_countersigned_copy_leaves_the_original(tmp_path, keys, archive):
    p = build_package(tmp_path, keys["steward"], archive=archive)
    before = snapshot(p["path"])
    out = tmp_path / ("copy.tar" if archive else "copy")
    result = countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key], out=out)
    assert result.path == out and snapshot(p["path"]) == before
    assert [s.key_id for s in verify_package(out, [keys["steward_pub"], keys["dpo_pub"]]).signers] == \
        [keys["steward"].key_id, keys["dpo"].key_id]
    assert [s.key_id for s in verify_package(p["path"], [keys["steward_pub"]]).signers] == [keys["steward"].key_id]
    with pytest.raises(OutputError, match="already exists"):
        countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key], out=out)


def test_refusals_leave_the_package_unchanged(tmp_path, keys):
    p = build_package(tmp_path, keys["steward"])
    countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    before = snapshot(p["path"])
    with pytest.raises(OutputError, match="already signed"):
        countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    third = signing.Signer.from_seed(bytes(32))
    with pytest.raises(VerificationFailed, match="does not verify with any trusted key"):
        countersign_package(p["path"], third, [keys["steward"].public_key])  # the DPO's key is not trusted
    assert snapshot(p["path"]) == before
    (p["path"] / "tracks.json").write_bytes(b"{}")
    with pytest.raises(VerificationFailed, match="tracks.json"):
        countersign_package(p["path"], third, [keys["steward"].public_key, keys["dpo"].public_key])
    assert snapshot(p["path"])["envelope.json"] == before["envelope.json"]


def test_a_rival_countersignature_is_not_dropped(tmp_path, keys, monkeypatch):
    # Two countersigners at the same moment: the one that renames second notices and stops.
    p = build_package(tmp_path, keys["steward"])
    rival = tmp_path / "rival"
    shutil.copytree(p["path"], rival)
    countersign_package(rival, signing.Signer.from_seed(bytes(32)), [keys["steward"].public_key])
    rival_envelope = (rival / "envelope.json").read_bytes()
    real_write = countersign._write_file

    def write_then_race(path, data):
        real_write(path, data)
        (p["path"] / "envelope.json").write_bytes(rival_envelope)  # the rival lands first
    monkeypatch.setattr(countersign, "_write_file", write_then_race)
    with pytest.raises(OutputError, match="changed while it was being countersigned"):
        countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    assert (p["path"] / "envelope.json").read_bytes() == rival_envelope
    assert not any(n.startswith(".") for n in os.listdir(tmp_path))


# --- the command line ----------------------------------------------------------------------------

def run(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env)


def no_traceback(r):
    assert "Traceback" not in r.stdout + r.stderr
    assert r.exception is None or isinstance(r.exception, SystemExit)


def test_cli_countersign_then_verify_names_both_signers(tmp_path, keys):
    p = build_package(tmp_path, keys["steward"])
    k = keys["dir"]
    r = run("countersign", p["path"], "--signing-key", k / "dpo.private.pem", "--trusted-key",
            k / "steward.public.pem", env={"REDACT_KEY_PASSPHRASE": PASS})
    assert r.exit_code == 0, r.stdout + r.stderr
    dpo_id = keys["dpo"].key_id
    assert r.stdout.startswith(f"countersigned {p['path']}") and "signed by 2 key(s)" in r.stdout
    assert f"{keys['steward'].key_id} (steward.public.pem): author" in r.stdout
    assert f"{dpo_id} (dpo.private.pem): countersignature, added now" in r.stdout
    v = run("verify", p["path"], "--trusted-key", k / "steward.public.pem", "--trusted-key", k / "dpo.public.pem")
    assert v.exit_code == 0, v.stdout
    assert f"{keys['steward'].key_id} (steward.public.pem): author" in v.stdout
    assert f"{dpo_id} (dpo.public.pem): countersignature" in v.stdout
    j = run("verify", p["path"], "--trusted-key", k / "steward.public.pem", "--trusted-key", k / "dpo.public.pem",
            "--require-signer", k / "dpo.public.pem", "--json")
    doc = json.loads(j.stdout)
    assert j.exit_code == 0 and doc["valid"] and doc["key_id"] == keys["steward"].key_id
    assert [(s["key_id"], s["role"], s["key_file"]) for s in doc["signers"]] == [
        (keys["steward"].key_id, "author", "steward.public.pem"), (dpo_id, "countersignature", "dpo.public.pem")]
    one = run("verify", p["path"], "--trusted-key", k / "steward.public.pem")
    assert one.exit_code == 1 and dpo_id in one.stdout and "--trusted-key" in one.stdout
    again = run("countersign", p["path"], "--signing-key", k / "dpo.private.pem", "--trusted-key",
                k / "steward.public.pem", "--trusted-key", k / "dpo.public.pem", env={"REDACT_KEY_PASSPHRASE": PASS})
    assert again.exit_code == 2 and "already signed" in again.stderr
    no_traceback(again)


def test_cli_countersign_refusals(tmp_path, keys):
    p = build_package(tmp_path, keys["steward"])
    k = keys["dir"]
    before = snapshot(p["path"])
    wrong = run("countersign", p["path"], "--signing-key", k / "dpo.private.pem", "--trusted-key",
                k / "steward.public.pem", env={"REDACT_KEY_PASSPHRASE": "not it"})
    assert wrong.exit_code == 2 and "passphrase" in wrong.stderr and wrong.stdout == ""
    no_traceback(wrong)
    req = run("verify", p["path"], "--trusted-key", k / "steward.public.pem", "--require-signer", k / "dpo.public.pem")
    assert req.exit_code == 1 and "required signer" in req.stdout
    (p["path"] / "review.json").write_bytes(b"{}")
    bad = run("countersign", p["path"], "--signing-key", k / "dpo.private.pem", "--trusted-key",
              k / "steward.public.pem", "--json", env={"REDACT_KEY_PASSPHRASE": PASS})
    doc = json.loads(bad.stdout)
    assert bad.exit_code == 1 and doc["countersigned"] is False and any("review.json" in f for f in doc["findings"])
    assert snapshot(p["path"])["envelope.json"] == before["envelope.json"]
    no_traceback(bad)


@pytest.mark.parametrize("archive", [False, True])
def test_verify_on_an_output_folder_points_to_its_package(tmp_path, keys, archive):
    # issue 13, item 6: the folder `process --out` wrote is not a package; say where the package is.
    p = build_package(tmp_path / "out", keys["steward"], archive=archive)
    r = run("verify", tmp_path / "out", "--trusted-key", keys["dir"] / "steward.public.pem")
    assert r.exit_code == 2 and r.stdout == ""
    assert "is an output folder, not a package" in r.stderr and str(p["path"]) in r.stderr
    assert f"--video {tmp_path / 'out' / 'redacted.mp4'}" in r.stderr
    no_traceback(r)
    # A folder that is neither still gets the ordinary finding.
    (tmp_path / "empty").mkdir()
    r = run("verify", tmp_path / "empty", "--trusted-key", keys["dir"] / "steward.public.pem")
    assert r.exit_code == 1 and "envelope.json is missing" in r.stdout


def test_statement_hash_is_unchanged_by_countersigning(tmp_path, keys):
    # derive and the review record cite a parent by SHA-256 of its statement: a countersignature keeps it.
    p = build_package(tmp_path, keys["steward"])
    want = hashlib.sha256(p["payload"]).hexdigest()
    result = countersign_package(p["path"], keys["dpo"], [keys["steward"].public_key])
    assert hashlib.sha256(result.package.payload).hexdigest() == want
