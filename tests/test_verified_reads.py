"""A package file swapped after verification is refused when a consumer reads it (issue 14 item 1).

Each consumer (inspect's summary, the report, frame-proof, export, derive) verifies and then reads
through the VerifiedPackage, whose every read re-hashes the file against its signed subject. The
swap happens inside the consumer, right after verify_package returns, by wrapping verify_package.
Outside reference: hashlib's SHA-256 (FIPS 180-4) for the expected digests.
"""

from __future__ import annotations

import hashlib
import io
import tarfile
from pathlib import Path

import pytest
from click.testing import CliRunner
from test_package import SEED, build_package

import redact.provenance.verify as verify_mod
from redact.errors import VerificationFailed
from redact.provenance import signing
from redact.provenance.package import FRAMES, QUALITY, SKELETONS, TRACKS
from redact.provenance.verify import verify_package


@pytest.fixture
def pkg(tmp_path):
    signer = signing.Signer.from_seed(SEED)
    p = build_package(tmp_path / "d", signer)
    pub = tmp_path / "trusted.public.pem"
    pub.write_bytes(signer.public_pem)
    return {**p, "signer": signer, "key": signer.public_key, "pub": pub, "tmp": tmp_path}


def swapped(data: bytes) -> bytes:
    """Same size, one byte changed: only the hash can tell."""
    b = bytearray(data)
    b[len(b) // 2] ^= 0x01
    return bytes(b)


def swap_after_verify(monkeypatch, path: Path, name: str) -> list:
    """Make verify_package swap PATH/NAME for other bytes just after it has verified the package."""
    real = verify_mod.verify_package
    calls = []

    def verify_then_swap(*args, **kwargs):
        result = real(*args, **kwargs)
        f = path / name
        f.write_bytes(swapped(f.read_bytes()))
        calls.append(name)
        return result

    monkeypatch.setattr(verify_mod, "verify_package", verify_then_swap)
    return calls


@pytest.mark.parametrize("name", [SKELETONS, TRACKS, QUALITY, FRAMES])
def test_open_rehashes_against_the_signed_subject(pkg, name):
    v = verify_package(pkg["path"], [pkg["key"]])
    good = (pkg["path"] / name).read_bytes()
    with v.open(name) as f:
        assert f.read() == good  # an unchanged file reads back exactly
    (pkg["path"] / name).write_bytes(swapped(good))
    with pytest.raises(VerificationFailed, match="changed after verification"):
        with v.open(name) as f:
            f.read()
    with pytest.raises(VerificationFailed, match="changed after verification"):
        v.read_bytes(name, 1 << 20)
    (pkg["path"] / name).write_bytes(good + b"x")  # a longer file is refused as well
    with pytest.raises(VerificationFailed, match="changed after verification"):
        list(v.lines(name))


def test_a_verified_read_is_a_private_copy(pkg):
    """Once a read has been checked, later changes to the package do not reach the reader."""
    v = verify_package(pkg["path"], [pkg["key"]])
    good = (pkg["path"] / SKELETONS).read_bytes()
    with v.open(SKELETONS) as f:
        (pkg["path"] / SKELETONS).write_bytes(swapped(good))
        assert f.read() == good
        assert hashlib.sha256(good).hexdigest() == v.statement.files[SKELETONS].sha256


def test_tar_member_swapped_after_verification_is_refused(tmp_path):
    signer = signing.Signer.from_seed(SEED)
    p = build_package(tmp_path, signer, archive=True)
    v = verify_package(p["path"], [signer.public_key])
    with tarfile.open(p["path"]) as tar:
        members = [(m, tar.extractfile(m).read()) for m in tar.getmembers()]
    with tarfile.open(p["path"], "w", format=tarfile.USTAR_FORMAT) as tar:
        for m, data in members:
            if m.name == SKELETONS:
                data = swapped(data)
            tar.addfile(m, io.BytesIO(data))
    with pytest.raises(VerificationFailed, match="skeletons.jsonl: changed after verification"):
        v.read_bytes(SKELETONS, 1 << 20)


def test_a_file_missing_after_verification_is_refused(pkg):
    v = verify_package(pkg["path"], [pkg["key"]])
    (pkg["path"] / TRACKS).unlink()
    with pytest.raises(VerificationFailed, match="missing from the package since it was verified"):
        v.read_bytes(TRACKS, 1 << 20)


# ---- every consumer --------------------------------------------------------------------------------

def test_inspect_summary_refuses_a_swapped_file(pkg, monkeypatch):
    from redact.provenance.summary import summarise_package

    calls = swap_after_verify(monkeypatch, pkg["path"], SKELETONS)
    with pytest.raises(VerificationFailed, match="skeletons.jsonl: changed after verification"):
        summarise_package(pkg["path"], [pkg["key"]])
    assert calls == [SKELETONS]


def test_inspect_cli_refuses_a_swapped_file(pkg, monkeypatch):
    from redact.cli import main

    swap_after_verify(monkeypatch, pkg["path"], SKELETONS)
    r = CliRunner().invoke(main, ["inspect", str(pkg["path"]), "--trusted-key", str(pkg["pub"])])
    assert r.exit_code == 1 and "changed after verification" in r.stderr, r.output
    assert "Traceback" not in r.output


def test_report_refuses_a_swapped_file(pkg, monkeypatch):
    from redact.report.document import make_report

    swap_after_verify(monkeypatch, pkg["path"], QUALITY)
    report = make_report(pkg["path"], [pkg["key"]])
    page = report.html.decode()
    assert "quality.jsonl: changed after verification" in page
    assert "Parts of the package could not be read" in page


def test_frame_proof_refuses_a_swapped_digest_file(pkg, monkeypatch):
    from redact.cli import main

    swap_after_verify(monkeypatch, pkg["path"], FRAMES)
    out = pkg["tmp"] / "f.proof.json"
    r = CliRunner().invoke(main, ["frame-proof", str(pkg["path"]), "--trusted-key", str(pkg["pub"]), "--frame", "1",
                                  "--out", str(out)])
    assert r.exit_code == 1 and "frames.sha256: changed after verification" in r.stderr, r.output
    assert not out.exists()


def test_export_refuses_a_swapped_file(pkg, monkeypatch):
    from redact.skeletons.export import export_package

    swap_after_verify(monkeypatch, pkg["path"], SKELETONS)
    out = pkg["tmp"] / "rows.npz"
    with pytest.raises(VerificationFailed, match="skeletons.jsonl: changed after verification"):
        export_package(pkg["path"], "npz", out, trusted_keys=[pkg["key"]])
    assert not out.exists() and not list(pkg["tmp"].glob(".rows.npz*"))


def test_derive_refuses_a_swapped_file(pkg, monkeypatch):
    from redact.skeletons.derive import derive_package
    from redact.skeletons.privacy import PrivacyOptions

    swap_after_verify(monkeypatch, pkg["path"], TRACKS)
    out = pkg["tmp"] / "derived"
    with pytest.raises(VerificationFailed, match="tracks.json: changed after verification"):
        derive_package(pkg["path"], out, [pkg["key"]], pkg["signer"], PrivacyOptions(decimals=1))
    assert not out.exists()
    assert not [p for p in pkg["tmp"].iterdir() if "derive-partial" in p.name]
