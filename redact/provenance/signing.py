"""Ed25519 keys, DSSE v1 envelopes and in-toto Statement v1, with the `cryptography` package only.

- Keys: private keys are PKCS#8 PEM encrypted with a passphrase; public keys are
  SubjectPublicKeyInfo PEM; the key id is the RFC 7638 JWK thumbprint of the RFC 8037 OKP JWK.
- DSSE v1 (secure-systems-lab/dsse protocol.md): the signature covers
  PAE(type, body) = "DSSEv1" SP LEN(type) SP type SP LEN(body) SP body, LEN in decimal bytes.
  The envelope's keyid is an unauthenticated hint. Base64 in either alphabet is accepted on input.
- Signatures are checked over the exact payload bytes before anything parses them.
"""

from __future__ import annotations

import base64
import hashlib
import os
import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

from redact import jsonio
from redact.errors import OutputError, SigningKeyError, VerificationFailed

PAYLOAD_TYPE = "application/vnd.in-toto+json"  # in-toto attestation spec v1, DSSE binding
STATEMENT_TYPE = "https://in-toto.io/Statement/v1"
SIGNATURE_BYTES = 64  # RFC 8032 §5.1.6
KEY_FILE_LIMIT = 64 * 1024  # bytes; a PEM key is a few hundred bytes (common practice)
_B64 = re.compile(r"[A-Za-z0-9+/_-]*={0,2}")


def b64url_nopad(data: bytes) -> str:
    """base64url without padding (RFC 7515 §2, as used by RFC 7638 and RFC 8037)."""
    return base64.urlsafe_b64encode(data).rstrip(b"=").decode("ascii")


def b64decode_any(text: str) -> bytes:
    """Decode base64 in the standard or the URL-safe alphabet, padded or not; ValueError if invalid."""
    if not isinstance(text, str) or not _B64.fullmatch(text):
        raise ValueError("not base64")
    if ("-" in text or "_" in text) and ("+" in text or "/" in text):
        raise ValueError("base64 mixes the standard and URL-safe alphabets")
    body = text.rstrip("=")
    if len(body) % 4 == 1:
        raise ValueError("base64 of impossible length")
    body = body.replace("-", "+").replace("_", "/")
    return base64.b64decode(body + "=" * (-len(body) % 4), validate=True)


def b64encode_std(data: bytes) -> str:
    """Standard, padded base64 (RFC 4648 §4): what we write."""
    return base64.b64encode(data).decode("ascii")


def jwk_thumbprint(public_raw: bytes) -> str:
    """RFC 7638 thumbprint of an Ed25519 public key (RFC 8037 §2 OKP JWK), base64url, no padding."""
    if len(public_raw) != 32:
        raise ValueError("an Ed25519 public key is 32 bytes")
    # RFC 7638 §3.2: required members only, lexicographic order, no whitespace.
    jwk = '{"crv":"Ed25519","kty":"OKP","x":"%s"}' % b64url_nopad(public_raw)
    return b64url_nopad(hashlib.sha256(jwk.encode("ascii")).digest())


@dataclass(frozen=True)
class PublicKey:
    """A trusted Ed25519 public key: 32 raw bytes and its RFC 7638 key id."""

    raw: bytes
    key_id: str

    @classmethod
    def from_raw(cls, raw: bytes) -> PublicKey:
        return cls(bytes(raw), jwk_thumbprint(raw))

    def verify(self, signature: bytes, data: bytes) -> bool:
        """True when `signature` is a valid Ed25519 signature of `data` (RFC 8032 §5.1.7)."""
        from cryptography.exceptions import InvalidSignature
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

        if len(signature) != SIGNATURE_BYTES:
            return False
        try:
            Ed25519PublicKey.from_public_bytes(self.raw).verify(signature, data)
        except InvalidSignature:
            return False
        return True

    @property
    def pem(self) -> bytes:
        from cryptography.hazmat.primitives import serialization
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

        return Ed25519PublicKey.from_public_bytes(self.raw).public_bytes(
            serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo)


class Signer:
    """An Ed25519 private key that signs bytes; `key_id` is the RFC 7638 thumbprint of its public key."""

    def __init__(self, private_key) -> None:
        from cryptography.hazmat.primitives import serialization
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

        if not isinstance(private_key, Ed25519PrivateKey):
            raise SigningKeyError("the signing key is not an Ed25519 key")
        self._key = private_key
        raw = private_key.public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
        self.public_key = PublicKey.from_raw(raw)

    @classmethod
    def from_seed(cls, seed: bytes) -> Signer:
        """A signer from a 32-byte RFC 8032 secret key (tests and test vectors)."""
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

        return cls(Ed25519PrivateKey.from_private_bytes(seed))

    @property
    def key_id(self) -> str:
        return self.public_key.key_id

    @property
    def public_pem(self) -> bytes:
        return self.public_key.pem

    def sign(self, data: bytes) -> bytes:
        """The 64-byte Ed25519 signature of `data` (RFC 8032, deterministic)."""
        return self._key.sign(data)


def _read_key_file(path: Path) -> bytes:
    path = Path(path)
    try:
        if path.stat().st_size > KEY_FILE_LIMIT:
            raise SigningKeyError(f"{path}: too large to be a key file")
        return path.read_bytes()
    except OSError as e:
        raise SigningKeyError(f"cannot read key file {path}: {e.strerror or e}") from None


def _write_new(path: Path, data: bytes, mode: int) -> None:
    """Write a new file through a temporary name; the final name must not exist."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.link(tmp, path)  # fails if `path` appeared meanwhile: never overwrite a key
    finally:
        os.unlink(tmp)


def generate_key(private_path: Path, public_path: Path, passphrase: bytes) -> str:
    """Create an Ed25519 key pair; the private key PKCS#8 PEM encrypted with `passphrase`.

    Refuses to overwrite either file. Returns the key id (RFC 7638 thumbprint).
    """
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    private_path, public_path = Path(private_path), Path(public_path)
    if not passphrase:
        raise SigningKeyError("a non-empty passphrase is required to protect the private key")
    if private_path == public_path:
        raise OutputError("the private and public key paths must differ")
    for p in (private_path, public_path):
        if os.path.lexists(p):
            raise OutputError(f"{p} already exists; refusing to overwrite a key (choose another name or directory)")
        if not p.parent.is_dir():
            raise OutputError(f"directory {p.parent} does not exist")
    key = Ed25519PrivateKey.generate()
    signer = Signer(key)
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.BestAvailableEncryption(bytes(passphrase)))
    try:
        _write_new(private_path, pem, 0o600)
        try:
            _write_new(public_path, signer.public_pem, 0o644)
        except BaseException:
            os.unlink(private_path)
            raise
    except FileExistsError:
        raise OutputError("a key file appeared while writing; refusing to overwrite it") from None
    except OSError as e:
        raise OutputError(f"cannot write key files: {e.strerror or e}") from None
    return signer.key_id


def load_private_key(path: Path, passphrase: bytes) -> Signer:
    """Load an encrypted PKCS#8 PEM Ed25519 private key; SigningKeyError on a wrong passphrase."""
    return load_private_key_bytes(_read_key_file(path), passphrase, str(path))


def load_private_key_bytes(data: bytes, passphrase: bytes, where: str = "the signing key") -> Signer:
    """The same from PEM bytes already in memory (e.g. handed to a batch worker)."""
    from cryptography.exceptions import UnsupportedAlgorithm
    from cryptography.hazmat.primitives import serialization

    if not passphrase:
        raise SigningKeyError("a passphrase is required to open the private key")
    try:
        key = serialization.load_pem_private_key(data, password=bytes(passphrase))
    except TypeError:
        raise SigningKeyError(f"{where}: the private key is not encrypted; create keys with `redact keygen`") from None
    except (ValueError, UnsupportedAlgorithm):  # cryptography: bad passphrase, bad PEM, unknown key type
        raise SigningKeyError(f"{where}: cannot open the private key (wrong passphrase or not a PEM key)") from None
    return Signer(key)


def load_public_key(path: Path) -> PublicKey:
    """Load an Ed25519 public key from SubjectPublicKeyInfo PEM."""
    from cryptography.exceptions import UnsupportedAlgorithm
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    data = _read_key_file(path)
    try:
        key = serialization.load_pem_public_key(data)
    except (ValueError, TypeError, UnsupportedAlgorithm):
        raise SigningKeyError(f"{path}: not a PEM public key") from None
    if not isinstance(key, Ed25519PublicKey):
        raise SigningKeyError(f"{path}: not an Ed25519 public key")
    return PublicKey.from_raw(key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw))


def pae(payload_type: str, payload: bytes) -> bytes:
    """DSSE v1 pre-authentication encoding; payloadType must be ASCII so LEN is unambiguous."""
    if not payload_type.isascii():
        raise ValueError("payloadType must be ASCII")
    t = payload_type.encode("ascii")
    return b"DSSEv1 %d %b %d %b" % (len(t), t, len(payload), payload)


def sign_envelope(payload: bytes, payload_type: str, signer: Signer) -> dict:
    """A DSSE envelope with one Ed25519 signature over PAE(payload_type, payload)."""
    sig = signer.sign(pae(payload_type, payload))
    return {"payload": b64encode_std(payload), "payloadType": payload_type,
            "signatures": [{"keyid": signer.key_id, "sig": b64encode_std(sig)}]}


def envelope_bytes(envelope: dict) -> bytes:
    """The envelope file as we write it: compact sorted JSON and a newline."""
    return jsonio.dumps(envelope) + b"\n"


@dataclass(frozen=True)
class VerifiedEnvelope:
    """A DSSE envelope whose signature checked: the exact payload bytes and the key that signed."""

    payload: bytes
    payload_type: str
    key_id: str


def verify_envelope(envelope: dict, trusted: Iterable[PublicKey], payload_type: str | None = PAYLOAD_TYPE) -> VerifiedEnvelope:
    """Check a DSSE envelope against trusted keys; raises VerificationFailed listing every problem.

    Exactly one signature is expected (the format we write). The keyid hint is not trusted: every
    trusted key is tried, and a hint that names a different key than the one that verified is a
    finding. Nothing of the payload is parsed here.
    """
    keys = list(trusted)
    if not keys:
        raise VerificationFailed(["no trusted public key was given; an empty key list never verifies"])
    findings: list[str] = []
    if not isinstance(envelope, dict):
        raise VerificationFailed(["envelope: not a JSON object"])
    extra = sorted(set(envelope) - {"payload", "payloadType", "signatures"})
    if extra:
        findings.append(f"envelope: unexpected field(s) {', '.join(extra)}")
    ptype = envelope.get("payloadType")
    if not isinstance(ptype, str) or not ptype.isascii():
        findings.append("envelope: payloadType is missing or not an ASCII string")
        ptype = None
    elif payload_type is not None and ptype != payload_type:
        findings.append(f"envelope: payloadType is {ptype!r}, expected {payload_type!r}")
    try:
        payload = b64decode_any(envelope.get("payload"))
    except ValueError as e:
        findings.append(f"envelope: payload is not valid base64 ({e})")
        payload = None
    sigs = envelope.get("signatures")
    if not isinstance(sigs, list) or not sigs:
        findings.append("envelope: signatures must be a non-empty list")
        sigs = []
    elif len(sigs) != 1:
        findings.append(f"envelope: {len(sigs)} signatures, expected exactly 1")
    verified_by: PublicKey | None = None
    for i, s in enumerate(sigs):
        if not isinstance(s, dict) or set(s) - {"keyid", "sig"} or not isinstance(s.get("sig"), str):
            findings.append(f"envelope: signature {i} is malformed (expected {{keyid, sig}})")
            continue
        hint = s.get("keyid")
        if hint is not None and not isinstance(hint, str):
            findings.append(f"envelope: signature {i} keyid is not a string")
            hint = None
        try:
            sig = b64decode_any(s["sig"])
        except ValueError as e:
            findings.append(f"envelope: signature {i} is not valid base64 ({e})")
            continue
        if len(sig) != SIGNATURE_BYTES:
            findings.append(f"envelope: signature {i} is {len(sig)} bytes, expected {SIGNATURE_BYTES} (truncated or padded)")
            continue
        if payload is None or ptype is None:
            continue
        message = pae(ptype, payload)
        key = next((k for k in keys if k.verify(sig, message)), None)
        if key is None:
            findings.append(f"signature: signature {i} (keyid hint {hint!r}) does not verify with any trusted key "
                            f"({', '.join(k.key_id for k in keys)})")
            continue
        if hint is not None and hint != key.key_id:
            findings.append(f"signature: keyid hint {hint!r} does not name the key that verified ({key.key_id})")
        verified_by = verified_by or key
    if verified_by is None and not any(f.startswith("signature:") for f in findings):
        findings.append("signature: no signature verifies with a trusted key")
    if findings:
        raise VerificationFailed(findings)
    assert payload is not None and ptype is not None and verified_by is not None
    return VerifiedEnvelope(payload, ptype, verified_by.key_id)


def build_statement(subjects: list[dict], predicate_type: str, predicate: dict) -> dict:
    """An in-toto Statement v1 (in-toto/attestation spec/v1/statement.md)."""
    if not subjects:
        raise ValueError("a statement needs at least one subject")
    return {"_type": STATEMENT_TYPE, "subject": subjects, "predicateType": predicate_type, "predicate": predicate}
