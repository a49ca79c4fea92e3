"""The tamper suite of issue 4: every alteration of a signed package must fail with a finding naming it."""

import base64
import hashlib
import io
import json
import os
import shutil
import tarfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from test_package import SEED, build_package

from redact import jsonio
from redact.errors import InputError, VerificationFailed
from redact.provenance import signing
from redact.provenance.verify import verify_package

OTHER_SEED = bytes(range(100, 132))


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    root = tmp_path_factory.mktemp("base")
    signer = signing.Signer.from_seed(SEED)
    d = build_package(root / "d", signer)
    t = build_package(root / "t", signer, archive=True)
    return {"dir": d, "tar": t, "signer": signer, "key": signer.public_key}


def copy_dir(base, tmp_path) -> Path:
    dst = tmp_path / "pkg"
    shutil.copytree(base["dir"]["path"], dst, symlinks=True)
    return dst


def findings(path, key, **kw) -> list[str]:
    with pytest.raises(VerificationFailed) as e:
        verify_package(path, [key], **kw)
    assert e.value.findings, "VerificationFailed must carry findings"
    return e.value.findings


def has(fs, *words):
    return any(all(w in f for w in words) for f in fs)


def payload_of(pkg: Path) -> bytes:
    return signing.b64decode_any(json.loads((pkg / "envelope.json").read_bytes())["payload"])


def resign(pkg: Path, payload: bytes, signer, payload_type=signing.PAYLOAD_TYPE) -> None:
    """What a holder of a signing key could do: sign new payload bytes and write a proper envelope."""
    env = signing.sign_envelope(payload, payload_type, signer)
    (pkg / "envelope.json").write_bytes(signing.envelope_bytes(env))


def resign_statement(pkg: Path, signer, mutate=None, rehash=True) -> None:
    """Re-sign the statement after optional edits, updating subject hashes of files that changed."""
    st_ = json.loads(payload_of(pkg))
    if rehash:
        for s in st_["subject"]:
            f = pkg / s["name"]
            if s["annotations"]["role"] == "package-file" and f.is_file():
                s["digest"]["sha256"] = hashlib.sha256(f.read_bytes()).hexdigest()
                s["annotations"]["bytes"] = f.stat().st_size
    if mutate:
        mutate(st_)
    resign(pkg, jsonio.dumps(st_), signer)


# --- clean packages -----------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["dir", "tar"])
def test_clean_package_verifies(base, kind):
    p = base[kind]
    v = verify_package(p["path"], [base["key"]], source=p["source"], video=p["video"])
    assert v.key_id == base["signer"].key_id
    assert v.payload == p["payload"]
    assert v.predicate.source.sha256 == hashlib.sha256(p["source"].read_bytes()).hexdigest()
    assert "source file" in v.checked and "redacted video" in v.checked


def test_resign_helper_is_faithful(base, tmp_path):
    # Guard for the tests below: re-signing an untouched package with the right key still verifies,
    # so their failures come from the tampering, not from the helper.
    pkg = copy_dir(base, tmp_path)
    resign_statement(pkg, base["signer"])
    verify_package(pkg, [base["key"]])


def test_empty_key_list_is_an_error(base):
    with pytest.raises(InputError, match="no trusted public key"):
        verify_package(base["dir"]["path"], [])


def test_other_source_and_video_fail(base, tmp_path):
    other = tmp_path / "other.bin"
    other.write_bytes(b"a different file")
    fs = findings(base["dir"]["path"], base["key"], source=other)
    assert has(fs, "source:", "SHA-256") and has(fs, "source:", "bytes")
    fs = findings(base["dir"]["path"], base["key"], video=other)
    assert has(fs, "video:", "does not match")


def test_video_given_but_not_signed(base, tmp_path):
    p = build_package(tmp_path, base["signer"], video=False)
    fs = findings(p["path"], base["key"], video=p["video"])
    assert has(fs, "names no redacted video")


# --- one bit flipped in every file --------------------------------------------------------------

FILES = ["skeletons.jsonl", "tracks.json", "quality.jsonl", "review.json", "frames.sha256", "log.jsonl", "envelope.json"]


@pytest.mark.parametrize("name", FILES)
def test_one_bit_flipped_in_every_file(base, tmp_path, name):
    assert sorted(FILES) == sorted(os.listdir(base["dir"]["path"]))  # the loop covers every file
    original = (base["dir"]["path"] / name).read_bytes()
    for pos in sorted({0, 1, len(original) // 3, len(original) // 2, len(original) - 2, len(original) - 1}):
        for bit in (0, 5):
            pkg = tmp_path / f"p{pos}-{bit}"
            shutil.copytree(base["dir"]["path"], pkg)
            data = bytearray(original)
            data[pos] ^= 1 << bit
            (pkg / name).write_bytes(bytes(data))
            fs = findings(pkg, base["key"])
            if name == "envelope.json":
                assert has(fs, "envelope") or has(fs, "signature"), fs
            else:
                assert has(fs, name, "SHA-256 does not match"), fs


def test_bit_flips_across_the_tar(base, tmp_path):
    original = base["tar"]["path"].read_bytes()
    bad = tmp_path / "bad.tar"
    for pos in range(0, len(original), 211):
        data = bytearray(original)
        data[pos] ^= 0x10
        bad.write_bytes(bytes(data))
        findings(bad, base["key"])


# --- files removed or added ---------------------------------------------------------------------

@pytest.mark.parametrize("name", FILES)
def test_file_removed(base, tmp_path, name):
    pkg = copy_dir(base, tmp_path)
    (pkg / name).unlink()
    fs = findings(pkg, base["key"])
    if name == "envelope.json":
        assert has(fs, "envelope.json is missing")
    else:
        assert has(fs, name, "missing from the package")


@pytest.mark.parametrize("extra", ["notes.txt", ".hidden", "sub/x.json"])
def test_file_added(base, tmp_path, extra):
    pkg = copy_dir(base, tmp_path)
    (pkg / extra).parent.mkdir(exist_ok=True)
    (pkg / extra).write_bytes(b"added")
    assert has(findings(pkg, base["key"]), extra, "unexpected file")


def test_empty_directory_added(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    (pkg / "empty").mkdir()
    assert has(findings(pkg, base["key"]), "empty", "unexpected empty directory")


# --- the transform log --------------------------------------------------------------------------

LOG_EDITS = {
    "removed": lambda ls: ls[:1] + ls[2:],
    "reordered": lambda ls: [ls[1], ls[0]] + ls[2:],
    "edited": lambda ls: [ls[0].replace(b'"frames":6', b'"frames":7')] + ls[1:],
}


@pytest.mark.parametrize("how", sorted(LOG_EDITS))
def test_log_line_tampered(base, tmp_path, how):
    pkg = copy_dir(base, tmp_path)
    lines = (pkg / "log.jsonl").read_bytes().splitlines(keepends=True)
    new = LOG_EDITS[how](lines)
    assert new != lines
    (pkg / "log.jsonl").write_bytes(b"".join(new))
    assert has(findings(pkg, base["key"]), "log.jsonl", "SHA-256 does not match")
    # Even a key holder who re-signs the new file hashes cannot hide a broken chain.
    resign_statement(pkg, base["signer"])
    assert has(findings(pkg, base["key"]), "log.jsonl", "prev does not match")


def test_log_last_line_edited_and_resigned_breaks_the_head(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    data = (pkg / "log.jsonl").read_bytes().replace(b'"archive":false', b'"archive":true')
    (pkg / "log.jsonl").write_bytes(data)
    resign_statement(pkg, base["signer"])
    assert has(findings(pkg, base["key"]), "log.jsonl", "does not match the signed log head")


def test_log_signing_entry_names_another_key(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    other = signing.Signer.from_seed(OTHER_SEED)
    resign_statement(pkg, other)
    with pytest.raises(VerificationFailed) as e:
        verify_package(pkg, [base["key"], other.public_key])
    assert has(e.value.findings, "signing entry names key", base["signer"].key_id)


# --- the envelope and statement -----------------------------------------------------------------

def test_resigned_with_another_key(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    resign(pkg, payload_of(pkg), signing.Signer.from_seed(OTHER_SEED))
    assert has(findings(pkg, base["key"]), "does not verify with any trusted key")


@pytest.mark.parametrize("cut", [1, 4, 8])
def test_signature_truncated(base, tmp_path, cut):
    pkg = copy_dir(base, tmp_path)
    env = json.loads((pkg / "envelope.json").read_bytes())
    sig = base64.b64decode(env["signatures"][0]["sig"])
    env["signatures"][0]["sig"] = base64.b64encode(sig[:-cut]).decode()
    (pkg / "envelope.json").write_bytes(signing.envelope_bytes(env))
    assert has(findings(pkg, base["key"]), f"{64 - cut} bytes, expected 64")


def test_payload_type_changed(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    env = json.loads((pkg / "envelope.json").read_bytes())
    env["payloadType"] = "application/json"
    (pkg / "envelope.json").write_bytes(signing.envelope_bytes(env))
    fs = findings(pkg, base["key"])
    assert has(fs, "payloadType", "application/json") and has(fs, "does not verify")
    # signed under the wrong type by the right key: still refused
    resign(pkg, payload_of(pkg), base["signer"], payload_type="application/json")
    assert has(findings(pkg, base["key"]), "payloadType")


def test_subject_renamed_outside(base, tmp_path):
    pkg = copy_dir(base, tmp_path)

    def rename(st_):
        next(s for s in st_["subject"] if s["name"] == "tracks.json")["name"] = "../x"
    resign_statement(pkg, base["signer"], rename)
    fs = findings(pkg, base["key"])
    assert has(fs, "../x", "unsafe name", "'..'")
    # and without the key: the edited payload no longer matches the signature
    pkg2 = tmp_path / "p2"
    shutil.copytree(base["dir"]["path"], pkg2)
    env = json.loads((pkg2 / "envelope.json").read_bytes())
    env["payload"] = base64.b64encode(payload_of(pkg2).replace(b'"tracks.json"', b'"../x"')).decode()
    (pkg2 / "envelope.json").write_bytes(signing.envelope_bytes(env))
    assert has(findings(pkg2, base["key"]), "does not verify")


def test_duplicate_keys_in_statement(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    payload = payload_of(pkg)
    dup = payload.replace(b'"predicateType":', b'"predicateType":"https://example.invalid/other","predicateType":', 1)
    assert dup != payload
    resign(pkg, dup, base["signer"])
    assert has(findings(pkg, base["key"]), "statement", "duplicate key", "predicateType")


def test_envelope_reformatted(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    env = json.loads((pkg / "envelope.json").read_bytes())
    (pkg / "envelope.json").write_text(json.dumps(env, indent=2))
    assert has(findings(pkg, base["key"]), "envelope.json", "not byte-identical")


def test_duplicate_keys_in_envelope(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    data = (pkg / "envelope.json").read_bytes()
    (pkg / "envelope.json").write_bytes(data.replace(b'{"payload"', b'{"payloadType":"x","payload"', 1))
    assert has(findings(pkg, base["key"]), "envelope.json", "duplicate key")


def test_frames_digests_changed_and_resigned(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    lines = (pkg / "frames.sha256").read_bytes().splitlines(keepends=True)
    (pkg / "frames.sha256").write_bytes(b"".join([lines[1], lines[0]] + lines[2:]))
    resign_statement(pkg, base["signer"])
    assert has(findings(pkg, base["key"]), "frames.sha256", "RFC 6962 root")


def test_signed_log_head_changed(base, tmp_path):
    pkg = copy_dir(base, tmp_path)

    def head(st_):
        st_["predicate"]["log"]["head"] = "00" * 32
    resign_statement(pkg, base["signer"], head)
    assert has(findings(pkg, base["key"]), "log.jsonl", "signed log head")


# --- the envelope rule (issue 13, item 3): named edits of envelope.json, folder and .tar alike ----
# DSSE v1.0.2 protocol.md / envelope.md and RFC 4648. Each edit keeps the decoded payload and
# signature bytes (or changes only unsigned parts): what the rule allows verifies, with a note; what
# it forbids is refused with a finding that names the rule.

B64 = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/"


def _flip_unused_bits(text: str) -> str:
    """Set the lowest unused bit of the last character before the padding (RFC 4648 §3.5)."""
    body = text.rstrip("=")
    assert len(text) - len(body) in (1, 2), "the value has no padding, so it has no unused bits"
    return body[:-1] + B64[B64.index(body[-1]) ^ 1] + text[len(body):]


def _url_safe(text: str) -> str:
    return text.replace("+", "-").replace("/", "_")


def _mix_alphabets(text: str) -> str:
    assert text.count("+") + text.count("/") >= 2, "needs two characters of the standard alphabet to mix"
    i = min(i for i in (text.find("+"), text.find("/")) if i >= 0)
    return text[:i] + _url_safe(text[i]) + text[i + 1:]


def _sig(env):
    return env["signatures"][0]


def _edit(fn):
    """An edit of the envelope's values, written back in this tool's JSON layout."""
    def apply(data: bytes) -> bytes:
        env = json.loads(data)
        fn(env)
        return signing.envelope_bytes(env)
    return apply


ENVELOPE_EDITS = {
    # forbidden: refused, the finding names the rule
    "payload-unused-bits": (_edit(lambda e: e.update(payload=_flip_unused_bits(e["payload"]))), "RFC 4648 §3.5"),
    "sig-unused-bits": (_edit(lambda e: _sig(e).update(sig=_flip_unused_bits(_sig(e)["sig"]))), "RFC 4648 §3.5"),
    "payload-padding-removed": (_edit(lambda e: e.update(payload=e["payload"].rstrip("="))), "RFC 4648 §3.2"),
    "sig-padding-removed": (_edit(lambda e: _sig(e).update(sig=_sig(e)["sig"].rstrip("="))), "RFC 4648 §3.2"),
    "sig-alphabets-mixed": (_edit(lambda e: _sig(e).update(sig=_mix_alphabets(_sig(e)["sig"]))), "RFC 4648 §4, §5"),
    "keyid-null": (_edit(lambda e: _sig(e).update(keyid=None)), "keyid is null"),
    "keyid-other-scheme": (_edit(lambda e: _sig(e).update(keyid="ab" * 32)), "keyids here are RFC 7638 thumbprints"),
    "field-added": (_edit(lambda e: e.update(reviewedBy="someone")), "unexpected field(s) reviewedBy"),
    "signature-field-added": (_edit(lambda e: _sig(e).update(note="x")), "unexpected field(s) note"),
    "signature-repeated": (_edit(lambda e: e["signatures"].append(dict(_sig(e)))), "a key signs an envelope once"),
    "trailing-space": (lambda d: d.rstrip(b"\n") + b" \n", "not byte-identical"),
    "final-newline-removed": (lambda d: d.rstrip(b"\n"), "not byte-identical"),
    # allowed by DSSE (verifiers MUST accept): verifies, and a note says what was chosen
    "url-safe-alphabet": (_edit(lambda e: (e.update(payload=_url_safe(e["payload"])),
                                           _sig(e).update(sig=_url_safe(_sig(e)["sig"])))), None),
    "keyid-removed": (_edit(lambda e: _sig(e).pop("keyid")), None),
    "keyid-empty": (_edit(lambda e: _sig(e).update(keyid="")), None),
}
ALLOWED_NOTES = {"url-safe-alphabet": "URL-safe base64 alphabet", "keyid-removed": "no keyid hint",
                 "keyid-empty": "no keyid hint"}


def _original_envelope(base, kind) -> bytes:
    if kind == "dir":
        return (base["dir"]["path"] / "envelope.json").read_bytes()
    return dict((m.name, data) for m, data in _members(base))["envelope.json"]


def _with_envelope(base, kind, tmp_path, data: bytes) -> Path:
    """A copy of the clean package whose envelope.json is `data`; a .tar is rebuilt in this tool's
    canonical layout, so only the envelope rule can refuse it."""
    from redact.provenance.package import _write_tar

    tmp_path.mkdir(parents=True, exist_ok=True)
    if kind == "dir":
        pkg = copy_dir(base, tmp_path)
        (pkg / "envelope.json").write_bytes(data)
        return pkg
    files = {m.name: content for m, content in _members(base)}
    files["envelope.json"] = data
    out = tmp_path / "pkg.tar"
    with open(out, "wb") as f:
        _write_tar(f, [(n, len(files[n]), (lambda n=n: io.BytesIO(files[n]))) for n in sorted(files)])
    return out


def _suits_every_edit(envelope: bytes) -> bool:
    env = json.loads(envelope)
    sig = env["signatures"][0]["sig"]
    return len(signing.b64decode_any(env["payload"])) % 3 != 0 and sig.count("+") + sig.count("/") >= 2


@pytest.fixture(scope="module")
def edit_base(base, tmp_path_factory):
    """The clean packages re-signed by their own key with a nonce in the predicate, chosen so that
    every edit above changes something: the payload's base64 ends in padding (its length is not a
    multiple of 3) and the signature's holds two or more of '+' and '/', the characters only the
    standard alphabet has. Without this the edits would depend on the bytes of one signature."""
    from redact.provenance.package import _write_tar

    root = tmp_path_factory.mktemp("edit-base")
    out = {"signer": base["signer"], "key": base["key"]}
    for kind in ("dir", "tar"):
        src = root / f"{kind}-files"
        if kind == "dir":
            shutil.copytree(base["dir"]["path"], src)
        else:
            src.mkdir()
            for m, data in _members(base):
                (src / m.name).write_bytes(data)
        for nonce in range(300):
            resign_statement(src, base["signer"], lambda st_, n=nonce: st_["predicate"]["parameters"].update(nonce=n),
                             rehash=False)
            if _suits_every_edit((src / "envelope.json").read_bytes()):
                break
        else:
            pytest.fail("no nonce gave an envelope that suits every edit")
        path = src
        if kind == "tar":
            path = root / "pkg.tar"
            with open(path, "wb") as f:
                _write_tar(f, [(n.name, n.stat().st_size, (lambda n=n: open(n, "rb"))) for n in sorted(src.iterdir())])
        out[kind] = {"path": path, "payload": payload_of(src)}
    return out


@pytest.mark.parametrize("kind", ["dir", "tar"])
def test_edit_base_is_clean(edit_base, kind):
    # Guard for the test below: the re-signed packages verify, with no notes.
    v = verify_package(edit_base[kind]["path"], [edit_base["key"]])
    assert v.payload == edit_base[kind]["payload"] and v.notes == ()


@pytest.mark.parametrize("kind", ["dir", "tar"])
@pytest.mark.parametrize("name", sorted(ENVELOPE_EDITS))
def test_envelope_encodings(edit_base, tmp_path, name, kind):
    original = _original_envelope(edit_base, kind)
    edit, rule = ENVELOPE_EDITS[name]
    data = edit(original)
    assert data != original  # the fixture really changes the file
    pkg = _with_envelope(edit_base, kind, tmp_path, data)
    if rule is None:
        v = verify_package(pkg, [edit_base["key"]])
        assert v.payload == edit_base[kind]["payload"] and v.signers[0].key_id == edit_base["signer"].key_id
        assert has(v.notes, "envelope.json", ALLOWED_NOTES[name]), v.notes
    else:
        assert has(findings(pkg, edit_base["key"]), rule)


def test_clean_package_has_no_notes(base):
    # The guard for the test above: our own envelope makes none of the free choices.
    assert verify_package(base["dir"]["path"], [base["key"]]).notes == ()
    assert verify_package(base["tar"]["path"], [base["key"]]).notes == ()


def test_rebuilt_tar_helper_is_faithful(base, tmp_path):
    # Guard: the .tar rebuilt around an unchanged envelope is byte-identical to the one we wrote.
    same = _with_envelope(base, "tar", tmp_path, _original_envelope(base, "tar"))
    assert same.read_bytes() == base["tar"]["path"].read_bytes()


def test_securesystemslib_refuses_what_we_refuse_for_padding(edit_base):
    # Outside check: securesystemslib (and the DSSE reference implementation it follows) decodes with
    # base64 validate=True, which refuses a value without its padding too. edit_base's payload
    # always ends in padding (its length is not a multiple of 3), whatever the predicate holds.
    import binascii

    from securesystemslib.dsse import Envelope

    env = json.loads((edit_base["dir"]["path"] / "envelope.json").read_bytes())
    assert env["payload"].endswith("=")
    env["payload"] = env["payload"].rstrip("=")
    with pytest.raises(binascii.Error):
        Envelope.from_dict(env)


def _sslib_resigned(base, kind, keyid):
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
    from securesystemslib.dsse import Envelope
    from securesystemslib.signer import CryptoSigner, SSlibKey
    from test_package import SEED

    priv = Ed25519PrivateKey.from_private_bytes(SEED)
    key = SSlibKey.from_crypto(priv.public_key(), keyid=keyid) if keyid else SSlibKey.from_crypto(priv.public_key())
    env = Envelope(base[kind]["payload"], signing.PAYLOAD_TYPE, {})
    env.sign(CryptoSigner(priv, key))
    return env.to_dict(), key


@pytest.mark.parametrize("kind", ["dir", "tar"])
def test_securesystemslib_resigned_package_verifies(base, tmp_path, kind):
    # securesystemslib (PyPI) re-signs our exact payload bytes with the same key and our keyid scheme.
    env, _ = _sslib_resigned(base, kind, base["signer"].key_id)
    pkg = _with_envelope(base, kind, tmp_path, signing.envelope_bytes(env))
    v = verify_package(pkg, [base["key"]])
    assert v.payload == base[kind]["payload"] and v.key_id == base["signer"].key_id


def test_securesystemslib_envelope_refused_naming_the_rule(base, tmp_path):
    # Its own keyid scheme, or another JSON layout, are refused with findings that name our rule.
    env, key = _sslib_resigned(base, "dir", None)
    fs = findings(_with_envelope(base, "dir", tmp_path / "a", signing.envelope_bytes(env)), base["key"])
    assert has(fs, f"keyid hint {key.keyid!r}", "RFC 7638")
    env, _ = _sslib_resigned(base, "dir", base["signer"].key_id)
    fs = findings(_with_envelope(base, "dir", tmp_path / "b", json.dumps(env).encode()), base["key"])
    assert fs == [f for f in fs if "not byte-identical" in f] and len(fs) == 1


# --- links and archives -------------------------------------------------------------------------

def test_symlink_in_package(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    outside = tmp_path / "tracks-copy.json"
    shutil.copy(pkg / "tracks.json", outside)
    (pkg / "tracks.json").unlink()
    os.symlink(outside, pkg / "tracks.json")  # same content, but through a link
    fs = findings(pkg, base["key"])
    assert has(fs, "tracks.json", "symlink")


def test_symlinked_directory_in_package(base, tmp_path):
    pkg = copy_dir(base, tmp_path)
    os.symlink(tmp_path, pkg / "up")
    assert has(findings(pkg, base["key"]), "up", "symlink")


def _members(base):
    with tarfile.open(base["tar"]["path"]) as tar:
        return [(m, tar.extractfile(m).read()) for m in tar.getmembers()]


@pytest.mark.parametrize("name,type_,expect", [
    ("../x", tarfile.REGTYPE, "'..'"),
    ("/etc/x", tarfile.REGTYPE, "absolute"),
    ("evil", tarfile.SYMTYPE, "link"),
    ("evil2", tarfile.LNKTYPE, "link"),
])
def test_tar_with_unsafe_member(base, tmp_path, name, type_, expect):
    path = tmp_path / "evil.tar"
    with tarfile.open(path, "w") as tar:
        for m, data in _members(base):
            tar.addfile(m, io.BytesIO(data))
        extra = tarfile.TarInfo(name)
        extra.type = type_
        if type_ == tarfile.REGTYPE:
            extra.size = 3
            tar.addfile(extra, io.BytesIO(b"bad"))
        else:
            extra.linkname = "/etc/passwd"
            tar.addfile(extra)
    fs = findings(path, base["key"])
    assert has(fs, name, expect)
    assert sorted(os.listdir(tmp_path)) == ["evil.tar"]  # nothing extracted anywhere


def test_tar_header_altered(base, tmp_path):
    path = tmp_path / "t.tar"
    with tarfile.open(path, "w", format=tarfile.USTAR_FORMAT) as tar:
        for m, data in _members(base):
            m.mtime = 1700000000  # same names and contents, different headers
            tar.addfile(m, io.BytesIO(data))
    assert has(findings(path, base["key"]), "t.tar", "not byte-identical")


def test_tar_trailing_garbage(base, tmp_path):
    path = tmp_path / "t.tar"
    path.write_bytes(base["tar"]["path"].read_bytes() + b"\x00" * 512 + b"appended")
    assert has(findings(path, base["key"]), "not byte-identical")


# --- property: random byte changes never pass ---------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(st.data())
def test_random_byte_mutations_never_verify(base, tmp_path_factory, data):
    kind = data.draw(st.sampled_from(["dir", "tar"]))
    root = tmp_path_factory.mktemp("mut")
    if kind == "dir":
        pkg = root / "pkg"
        shutil.copytree(base["dir"]["path"], pkg)
        target = pkg / data.draw(st.sampled_from(FILES))
    else:
        pkg = target = root / "pkg.tar"
        shutil.copy(base["tar"]["path"], pkg)
    raw = bytearray(target.read_bytes())
    # distinct positions, each XORed with a non-zero byte: the file really changes
    for pos in data.draw(st.lists(st.integers(0, len(raw) - 1), min_size=1, max_size=3, unique=True)):
        raw[pos] ^= data.draw(st.integers(1, 255))
    if data.draw(st.booleans()):
        cut = data.draw(st.integers(0, len(raw) - 1))
        raw = raw[:cut]
    target.write_bytes(bytes(raw))
    with pytest.raises(VerificationFailed):
        verify_package(pkg, [base["key"]])
