"""Package verification: a numbered series of checks that mirrors the package format.

 1. Open the package (directory or .tar) without following links; unsafe entries are findings.
 2. Read envelope.json strictly (size limit, duplicate keys, NaN).
 3. Check every DSSE signature over the exact payload bytes with the trusted keys, under the
    envelope rule of `signing` (only the DSSE fields, RFC 4648 canonical base64 in either
    alphabet, keyid hints, several signatures, each of which must verify). If it fails, stop
    here: an unauthenticated payload is never parsed. envelope.json's own bytes are not signed,
    so their JSON layout is fixed instead: exactly what this tool writes for those values.
 4. Parse the payload strictly as an in-toto Statement v1 of our predicate type
    (redact.provenance.statement, redact.provenance.predicate).
 5. Closed file set: package-file subjects = files in the package (minus envelope.json).
 6. Every file's size and SHA-256 against its subject.
 7. The transform log: chain intact, head and entry count equal to the signed predicate, and its
    last entry records signing with one of the keys that verified (the package's author).
 8. frames.sha256: RFC 6962 root equals predicate source.frames_root (and the frame count).
 9. --source: SHA-256 and size equal predicate source.sha256 / source.bytes.
10. --video: SHA-256 and size equal the redacted-video subject.
Success returns a VerifiedPackage (redact.provenance.contents) whose only way to read a file
re-checks it against its signed subject; failure raises VerificationFailed with every finding.
"""

from __future__ import annotations

import tarfile
from collections.abc import Sequence
from pathlib import Path

from redact import jsonio
from redact.errors import InputError, PackageError, VerificationFailed
from redact.hashing import sha256_file, sha256_stream
from redact.provenance import merkle, signing
from redact.provenance.contents import VerifiedPackage
from redact.provenance.log import check_chain
from redact.provenance.package import ENVELOPE, ENVELOPE_LIMIT, FRAMES, LOG, PackageReader, TarReader, open_package
from redact.provenance.statement import statement_findings

__all__ = ["VerifiedPackage", "verify_package"]


def verify_package(path: Path, trusted_keys: Sequence[signing.PublicKey], source: Path | None = None,
                   video: Path | None = None,
                   required_signers: Sequence[signing.PublicKey] = ()) -> VerifiedPackage:
    """Run checks 1–10 on a package; raises VerificationFailed(findings) listing every problem.

    Every signature must verify with one of `trusted_keys`; each of `required_signers` (trusted
    too) must be among the signers. An empty list of trusted keys is a usage error
    (InputError), never a pass.
    """
    keys = list(trusted_keys) + [k for k in required_signers if k not in trusted_keys]
    if not keys:
        raise InputError("no trusted public key given; pass at least one --trusted-key NAME.public.pem")
    for p, what in ((source, "source file"), (video, "redacted video")):
        if p is not None and not Path(p).is_file():
            raise InputError(f"{what} {p} does not exist")
    findings: list[str] = []
    try:
        with open_package(Path(path)) as reader:
            result = _verify(Path(path), reader, keys, source, video, findings, list(required_signers))
    except PackageError as e:  # step 1 could not even open it, or a file could not be read safely
        findings.append(str(e))
        result = None
    except (tarfile.TarError, OSError, EOFError) as e:  # a damaged archive found while reading a member
        findings.append(f"{Path(path).name}: cannot be read completely ({e})")
        result = None
    if findings or result is None:
        raise VerificationFailed(findings or ["verification failed"])
    return result


def _verify(path: Path, reader: PackageReader, keys: list, source: Path | None, video: Path | None,
            findings: list[str], required: list | None = None) -> VerifiedPackage | None:
    # 1. safe listing
    findings.extend(reader.problems)
    if isinstance(reader, TarReader):
        problem = reader.canonical_problem()
        if problem:
            findings.append(problem)

    # 2. envelope bytes
    if ENVELOPE not in reader.files:
        findings.append(f"{ENVELOPE} is missing: the package is not signed")
        return None
    try:
        env_bytes = reader.read(ENVELOPE, ENVELOPE_LIMIT)
        envelope = jsonio.loads_object(env_bytes, ENVELOPE, ENVELOPE_LIMIT)
    except PackageError as e:
        findings.append(str(e))
        return None

    # 3. every signature over the exact payload bytes
    try:
        verified = signing.verify_envelope(envelope, keys, signing.PAYLOAD_TYPE, required or ())
    except VerificationFailed as e:
        findings.extend(e.findings)
        return None
    author = verified.key_id  # step 7 replaces it with the key the log's signing entry names
    notes = [f"{ENVELOPE}: {n.removeprefix('envelope: ')}" for n in verified.notes]
    if env_bytes != signing.envelope_bytes(envelope):
        findings.append(f"{ENVELOPE}: not byte-identical to the envelope this tool writes for these values "
                        "(compact JSON, sorted keys, one final newline): whitespace or key order were altered")

    # 4. statement
    statement, problems = statement_findings(verified.payload)
    if statement is None:
        findings.extend(problems)
        return None
    files = statement.files
    predicate = statement.predicate

    # 5. closed file set
    present = set(reader.files) - {ENVELOPE}
    for name in sorted(set(files) - present):
        findings.append(f"{name}: missing from the package (named in the signed statement)")
    for name in sorted(present - set(files)):
        findings.append(f"{name}: unexpected file (not named in the signed statement)")

    # 6. every hash
    for name in sorted(set(files) & present):
        want = files[name]
        if reader.files[name] != want.bytes:
            findings.append(f"{name}: size {reader.files[name]} bytes, signed size {want.bytes}")
        try:
            with reader.open(name) as f:
                digest, _ = sha256_stream(f)
        except (OSError, PackageError, tarfile.TarError) as e:
            findings.append(f"{name}: cannot be read ({e})")
            continue
        if digest != want.sha256:
            findings.append(f"{name}: SHA-256 does not match the signed statement (file altered)")

    # 7. log chain and head
    log_info = predicate.log
    if LOG not in files:
        findings.append(f"{LOG}: the signed statement names no transform log")
    elif LOG in present:
        with reader.open(LOG) as f:
            report = check_chain(f, LOG)
        findings.extend(report.findings)
        if log_info is None:
            findings.append("predicate: log head is missing")
        else:
            if report.head != log_info.head:
                findings.append(f"{LOG}: head {report.head[:16]}… does not match the signed log head")
            if report.entries != log_info.entries:
                findings.append(f"{LOG}: {report.entries} entries, the signed statement says {log_info.entries!r}")
        last = report.last or {}
        if last.get("kind") != "sign":
            findings.append(f"{LOG}: the last entry is not the signing entry")
        elif last.get("key_id") not in verified.signer_ids:
            findings.append(f"{LOG}: the signing entry names key {last.get('key_id')!r}, "
                            f"but the envelope was signed by {', '.join(verified.signer_ids)}")
        else:
            author = last["key_id"]

    # 8. per-frame digests and their RFC 6962 root
    src = predicate.source
    want_root = src.frames_root
    if FRAMES in files and FRAMES in present:
        try:
            with reader.open(FRAMES) as f:
                digests = merkle.read_frame_digests(f)
            got = merkle.root(digests).hex()
            if want_root is None:
                findings.append(f"{FRAMES}: present but the predicate has no source.frames_root")
            elif got != want_root:
                findings.append(f"{FRAMES}: RFC 6962 root does not match the signed source.frames_root")
            if src.frames != len(digests):
                findings.append(f"{FRAMES}: {len(digests)} frame digests, the predicate says {src.frames} frames")
        except PackageError as e:
            findings.append(str(e))
    elif want_root is not None and FRAMES not in files:
        findings.append(f"{FRAMES}: the predicate has a frames_root but the package has no {FRAMES}")

    checked = ["signature", "file set", "file hashes", "log chain"]
    # 9. the source file
    if source is not None:
        digest, size = sha256_file(source)
        if src.sha256 != digest:
            findings.append(f"source: {Path(source).name} has SHA-256 {digest[:16]}…, not the signed source.sha256")
        if src.bytes != size:
            findings.append(f"source: {Path(source).name} is {size} bytes, the signed source.bytes is {src.bytes}")
        checked.append("source file")

    # 10. the redacted video
    if video is not None:
        want_video = statement.video
        if want_video is None:
            findings.append("video: the signed statement names no redacted video")
        else:
            digest, size = sha256_file(video)
            if digest != want_video.sha256 or size != want_video.bytes:
                findings.append(f"video: {Path(video).name} does not match the signed redacted video "
                                f"{want_video.name} (SHA-256 or size differs)")
        checked.append("redacted video")

    return VerifiedPackage(path, statement, verified.payload, author, tuple(checked), verified.signers,
                           tuple(notes))
