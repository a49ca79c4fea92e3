"""Ed25519 keys, DSSE v1 envelopes and in-toto Statement v1, with the `cryptography` package only.

- Keys: private keys are PKCS#8 PEM encrypted with a passphrase; public keys are
  SubjectPublicKeyInfo PEM; the key id is the RFC 7638 JWK thumbprint of the RFC 8037 OKP JWK.
- DSSE v1.0.2 (secure-systems-lab/dsse protocol.md, envelope.md): each signature covers
  PAE(type, body) = "DSSEv1" SP LEN(type) SP type SP LEN(body) SP body, LEN in decimal bytes.
  Only payloadType and the payload bytes are signed; envelope.json's own bytes are not (they
  cannot be: adding a countersignature changes them), so the envelope rule below says exactly
  which encodings are accepted.
- Signatures are checked over the exact payload bytes before anything parses them.

The envelope rule (what `verify_envelope` accepts):
- base64 (RFC 4648, which DSSE names): the standard (§4) or the URL-safe (§5) alphabet, as
  DSSE protocol.md says verifiers MUST accept either, one alphabet per string; padded (§3.2:
  padding is required unless the referring specification says otherwise, and DSSE does not);
  canonical (§3.5: a conforming encoder sets the unused low bits of the last character to zero,
  and a decoder MAY refuse otherwise; we do); no whitespace or other characters (§3.3).
- keyid is an unauthenticated hint (protocol.md); absent or "" both mean "no hint" (envelope.md:
  an unset field is the same as set-but-empty); null or a non-string is refused (envelope.proto
  types it as a string). A hint that is given must be the RFC 7638 thumbprint of the trusted
  key that verifies that signature: DSSE leaves the keyid format to signer and verifier, and
  this is ours (what `redact keygen` prints).
- Several signatures are allowed (envelope.md: equivalent to separate envelopes). Our policy,
  which DSSE leaves to the application: every signature must verify under a trusted key, and
  a key signs once. A signature that does not verify is a finding, never silently skipped,
  because a recipient shown an envelope with an unchecked signature would take it for an
  endorsement.
- Only the fields DSSE defines (payload, payloadType, signatures; keyid, sig). This is
  stricter than envelope.md, which asks consumers to ignore unknown fields: nothing signs them,
  and a package must not carry unsigned statements beside the signed one.
What stays free, and is therefore not evidence of anything: the alphabet of each base64 string,
whether a keyid hint is present, the order of the signatures, and which signatures are present
(DSSE signatures are independent, so one can be removed: a recipient who expects a particular
signer says so with `required`). The result's `notes` name the free choices an envelope made.
"""

from __future__ import annotations

import base64
import hashlib
import os
import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

from redact import fsio, jsonio
from redact.errors import OutputError, SigningKeyError, VerificationFailed

PAYLOAD_TYPE = "application/vnd.in-toto+json"  # in-toto attestation spec v1, DSSE binding
STATEMENT_TYPE = "https://in-toto.io/Statement/v1"
SIGNATURE_BYTES = 64  # RFC 8032 §5.1.6
KEY_FILE_LIMIT = 64 * 1024  # bytes; a PEM key is a few hundred bytes (common practice)
ENVELOPE_FIELDS = ("payload", "payloadType", "signatures")  # DSSE envelope.md
SIGNATURE_FIELDS = ("keyid", "sig")  # DSSE envelope.md
_STANDARD = re.compile(r"[A-Za-z0-9+/]*={0,2}")  # RFC 4648 §4
_URLSAFE = re.compile(r"[A-Za-z0-9_-]*={0,2}")  # RFC 4648 §5


def b64url_nopad(data: bytes) -> str:
    """base64url without padding (RFC 7515 §2, as used by RFC 7638 and RFC 8037)."""
    return base64.urlsafe_b64encode(data).rstrip(b"=").decode("ascii")


def base64_alphabet(text: str) -> str:
    """"standard" or "url-safe": which RFC 4648 alphabet a valid string uses (standard when both fit)."""
    return "standard" if _STANDARD.fullmatch(text) else "url-safe"


def b64decode_any(text: object) -> bytes:
    """Decode RFC 4648 base64 in the standard or the URL-safe alphabet, padded and canonical.

    ValueError names the rule broken: characters outside the alphabets (§3.3), both alphabets in
    one string, missing or wrong padding (§3.2), non-zero unused bits (§3.5). Exactly one string
    decodes to given bytes in each alphabet, so these bytes cannot be re-encoded unnoticed except
    by switching the alphabet, which DSSE requires verifiers to accept.
    """
    if not isinstance(text, str):
        raise ValueError("not a string")
    standard, urlsafe = _STANDARD.fullmatch(text), _URLSAFE.fullmatch(text)
    if not standard and not urlsafe:
        if re.fullmatch(r"[A-Za-z0-9+/_-]*={0,2}", text):
            raise ValueError("mixes the standard and URL-safe alphabets (RFC 4648 §4, §5)")
        raise ValueError("characters outside the base64 alphabet, or '=' before the end (RFC 4648 §3.3)")
    if len(text) % 4:
        raise ValueError("padding missing or length not a multiple of 4 (RFC 4648 §3.2 requires '=' padding)")
    std = text if standard else text.replace("-", "+").replace("_", "/")
    data = base64.b64decode(std, validate=True)
    if base64.b64encode(data).decode("ascii") != std:
        raise ValueError("non-zero unused bits before the padding: not the canonical encoding (RFC 4648 §3.5)")
    return data


def b64encode_std(data: bytes) -> str:
    """Standard, padded base64 (RFC 4648 §4): what we write."""
    return base64.b64encode(data).decode("ascii")


def jwk_thumbprint(public_raw: bytes) -> str:
    """RFC 7638 thumbprint of an Ed25519 public key (RFC 8037 §2 OKP JWK), base64url, no padding."""
    if len(public_raw) != 32:
        raise ValueError("an Ed25519 public key is 32 bytes")
    # RFC 7638 §3.2: required members only, lexicographic order, no whitespace.
    jwk = f'{{"crv":"Ed25519","kty":"OKP","x":"{b64url_nopad(public_raw)}"}}'
    return b64url_nopad(hashlib.sha256(jwk.encode("ascii")).digest())


@dataclass(frozen=True)
class PublicKey:
    """A trusted Ed25519 public key: 32 raw bytes and its RFC 7638 key id."""

    raw: bytes
    key_id: str
    label: str = field(default="", compare=False)  # where it came from (a file name), for messages

    @classmethod
    def from_raw(cls, raw: bytes, label: str = "") -> PublicKey:
        return cls(bytes(raw), jwk_thumbprint(raw), label)

    @property
    def name(self) -> str:
        """The key id, with its file name when known: how messages name a signer."""
        return f"{self.key_id} ({self.label})" if self.label else self.key_id

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
    """Write a new file through a temporary name; the final name must not exist (never overwrite a key)."""
    fsio.atomic_write(path, data, mode=mode)


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
    return PublicKey.from_raw(key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw),
                              label=Path(path).name)


def pae(payload_type: str, payload: bytes) -> bytes:
    """DSSE v1 pre-authentication encoding; payloadType must be ASCII so LEN is unambiguous."""
    if not payload_type.isascii():
        raise ValueError("payloadType must be ASCII")
    t = payload_type.encode("ascii")
    return b"DSSEv1 %d %b %d %b" % (len(t), t, len(payload), payload)


def _signature_entry(payload: bytes, payload_type: str, signer: Signer) -> dict:
    return {"keyid": signer.key_id, "sig": b64encode_std(signer.sign(pae(payload_type, payload)))}


def sign_envelope(payload: bytes, payload_type: str, signer: Signer) -> dict:
    """A DSSE envelope with one Ed25519 signature over PAE(payload_type, payload)."""
    return {"payload": b64encode_std(payload), "payloadType": payload_type,
            "signatures": [_signature_entry(payload, payload_type, signer)]}


def envelope_bytes(envelope: dict) -> bytes:
    """The envelope file as we write it: compact sorted JSON and a newline."""
    return jsonio.dumps(envelope) + b"\n"


@dataclass(frozen=True)
class EnvelopeSignature:
    """One entry of `signatures`, decoded: `keyid` is "" when the hint is unset (DSSE envelope.md)."""

    index: int
    keyid: str
    sig: bytes


@dataclass(frozen=True)
class ParsedEnvelope:
    """A DSSE JSON envelope decoded under the envelope rule, nothing verified yet.

    `notes` name the free choices it made that this tool does not make (the URL-safe alphabet,
    a signature without a keyid hint): accepted, and not signed.
    """

    payload: bytes
    payload_type: str
    signatures: tuple[EnvelopeSignature, ...]
    notes: tuple[str, ...] = ()


def parse_envelope(envelope: object) -> ParsedEnvelope:
    """Decode a DSSE JSON envelope (DSSE envelope.md parsing rules, RFC 4648 base64).

    Raises VerificationFailed listing every field that breaks the envelope rule (module docstring).
    The payload is decoded, never parsed.
    """
    if not isinstance(envelope, dict):
        raise VerificationFailed(["envelope: not a JSON object"])
    findings: list[str] = []
    notes: list[str] = []
    unknown = sorted(set(envelope) - set(ENVELOPE_FIELDS))
    if unknown:
        findings.append(f"envelope: unexpected field(s) {', '.join(unknown)} (only the DSSE fields are allowed: "
                        "nothing signs any other)")
    ptype = envelope.get("payloadType")
    if not isinstance(ptype, str) or not ptype.isascii():
        findings.append("envelope: payloadType is missing or not an ASCII string")
    payload = None
    if "payload" not in envelope:
        findings.append("envelope: payload is missing (DSSE envelope.md: REQUIRED)")
    else:
        try:
            payload = b64decode_any(envelope["payload"])
        except ValueError as e:
            findings.append(f"envelope: payload is not valid base64 ({e})")
        else:
            if base64_alphabet(envelope["payload"]) != "standard":
                notes.append("envelope: payload is in the URL-safe base64 alphabet (accepted, DSSE protocol.md)")
    sigs = envelope.get("signatures")
    if not isinstance(sigs, list) or not sigs:
        findings.append("envelope: signatures must be a non-empty list")
        sigs = []
    parsed: list[EnvelopeSignature] = []
    for i, s in enumerate(sigs):
        if not isinstance(s, dict) or not isinstance(s.get("sig"), str):
            findings.append(f"envelope: signature {i} is malformed (expected an object with a base64 sig)")
            continue
        extra = sorted(set(s) - set(SIGNATURE_FIELDS))
        if extra:
            findings.append(f"envelope: signature {i} has unexpected field(s) {', '.join(extra)} "
                            "(only keyid and sig are allowed: nothing signs any other)")
            continue
        hint = s.get("keyid", "")
        if not isinstance(hint, str):
            findings.append(f"envelope: signature {i} keyid is {'null' if hint is None else 'not a string'} "
                            "(DSSE: a string, or left out when there is no hint)")
            continue
        if not hint:
            notes.append(f"envelope: signature {i} has no keyid hint (accepted, DSSE envelope.md)")
        try:
            sig = b64decode_any(s["sig"])
        except ValueError as e:
            findings.append(f"envelope: signature {i} is not valid base64 ({e})")
            continue
        if base64_alphabet(s["sig"]) != "standard":
            notes.append(f"envelope: signature {i} is in the URL-safe base64 alphabet (accepted, DSSE protocol.md)")
        if len(sig) != SIGNATURE_BYTES:
            findings.append(f"envelope: signature {i} is {len(sig)} bytes, expected {SIGNATURE_BYTES} "
                            "(truncated or padded)")
            continue
        parsed.append(EnvelopeSignature(i, hint, sig))
    if findings:
        raise VerificationFailed(findings)
    assert payload is not None and isinstance(ptype, str)
    return ParsedEnvelope(payload, ptype, tuple(parsed), tuple(notes))


@dataclass(frozen=True)
class VerifiedSignature:
    """A signature that verified: its place in the envelope, the trusted key, and the keyid hint."""

    index: int
    key: PublicKey
    keyid_hint: str

    @property
    def key_id(self) -> str:
        return self.key.key_id


@dataclass(frozen=True)
class VerifiedEnvelope:
    """A DSSE envelope whose every signature checked: the exact payload bytes and who signed them.

    `signers` holds one entry per signature, in envelope order; `key_id` is the first of them.
    `notes` name the free choices of the envelope (see `ParsedEnvelope`).
    """

    payload: bytes
    payload_type: str
    signers: tuple[VerifiedSignature, ...]
    notes: tuple[str, ...] = field(default=())

    @property
    def key_id(self) -> str:
        return self.signers[0].key_id

    @property
    def signer_ids(self) -> tuple[str, ...]:
        return tuple(s.key_id for s in self.signers)


def _key_for(sig: EnvelopeSignature, message: bytes, keys: list[PublicKey]) -> PublicKey | None:
    """The trusted key that verifies `sig`; the one the hint names is tried first (DSSE protocol.md)."""
    ordered = sorted(keys, key=lambda k: k.key_id != sig.keyid)
    return next((k for k in ordered if k.verify(sig.sig, message)), None)


def verify_envelope(envelope: dict, trusted: Iterable[PublicKey], payload_type: str | None = PAYLOAD_TYPE,
                    required: Iterable[PublicKey] = ()) -> VerifiedEnvelope:
    """Check a DSSE envelope against trusted keys; raises VerificationFailed listing every problem.

    1. At least one trusted key (an empty list never verifies).
    2. The envelope decodes under the envelope rule (`parse_envelope`).
    3. Every signature verifies over PAE(payloadType, payload) with a trusted key, no key signs
       twice, and a keyid hint, when given, is that key's RFC 7638 thumbprint.
    4. payloadType is the one expected (DSSE protocol.md: reject unsupported types).
    5. Every key in `required` is among the signers (signatures can be removed unnoticed:
       DSSE makes each one independent, so a recipient who expects a countersignature says so).
    Nothing of the payload is parsed here.
    """
    keys = list(trusted)
    need = list(required)
    keys += [k for k in need if k not in keys]
    if not keys:
        raise VerificationFailed(["no trusted public key was given; an empty key list never verifies"])
    parsed = parse_envelope(envelope)
    findings: list[str] = []
    message = pae(parsed.payload_type, parsed.payload)
    signers: list[VerifiedSignature] = []
    for s in parsed.signatures:
        key = _key_for(s, message, keys)
        if key is None:
            hint = repr(s.keyid) if s.keyid else "none"
            findings.append(
                f"signature: signature {s.index} (keyid hint {hint}) does not verify with any trusted key "
                f"({', '.join(k.name for k in keys)}); every signature must verify: if you trust its signer, "
                "add their public key with --trusted-key, otherwise the envelope was altered")
            continue
        if s.keyid and s.keyid != key.key_id:
            findings.append(f"signature: signature {s.index} keyid hint {s.keyid!r} does not name the key that "
                            f"verified it ({key.key_id}); keyids here are RFC 7638 thumbprints")
        earlier = next((v for v in signers if v.key == key), None)
        if earlier is None:
            signers.append(VerifiedSignature(s.index, key, s.keyid))
        else:
            findings.append(f"signature: signature {s.index} is a second signature by key {key.key_id} "
                            f"(signature {earlier.index}); a key signs an envelope once")
    if payload_type is not None and parsed.payload_type != payload_type:
        findings.append(f"envelope: payloadType is {parsed.payload_type!r}, expected {payload_type!r}")
    for k in need:
        if signers and all(v.key != k for v in signers):
            findings.append(f"signature: required signer {k.name} has not signed this envelope")
    if not signers and not findings:
        findings.append("signature: no signature verifies with a trusted key")
    if findings:
        raise VerificationFailed(findings)
    return VerifiedEnvelope(parsed.payload, parsed.payload_type, tuple(signers), parsed.notes)


def add_signature(envelope: dict, verified: VerifiedEnvelope, signer: Signer) -> dict:
    """A copy of `envelope` with one more signature by `signer`, over the payload bytes `verified` checked.

    The payload string, payloadType and existing signatures are kept exactly as they are; only
    the new entry is appended. Raises VerificationFailed when `envelope` is not the one that was
    verified, and OutputError when `signer` has already signed it.
    """
    parsed = parse_envelope(envelope)
    if parsed.payload != verified.payload or parsed.payload_type != verified.payload_type:
        raise VerificationFailed(["envelope: not the envelope that was verified (payload or payloadType differs)"])
    if signer.key_id in verified.signer_ids:
        raise OutputError(f"key {signer.key_id} has already signed this envelope")
    out = dict(envelope)
    out["signatures"] = [*envelope["signatures"], _signature_entry(verified.payload, verified.payload_type, signer)]
    return out


def build_statement(subjects: list[dict], predicate_type: str, predicate: dict) -> dict:
    """An in-toto Statement v1 (in-toto/attestation spec/v1/statement.md)."""
    if not subjects:
        raise ValueError("a statement needs at least one subject")
    return {"_type": STATEMENT_TYPE, "subject": subjects, "predicateType": predicate_type, "predicate": predicate}
