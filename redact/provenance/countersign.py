"""Countersigning: one more DSSE signature on an existing package, its payload left untouched.

DSSE envelope.md allows several signatures, each over the same PAE(payloadType, payload); a
second signer (e.g. the data-protection officer who approved a reviewed package) adds theirs
without re-signing, so every signed byte, every file and the transform log stay as they were.
Only envelope.json changes: the new signature is appended and the file is written again in this
tool's layout. The log cannot record the countersignature (the log is covered by the payload);
the envelope is its record, and `verify` names every signer.

The package is verified first with the keys the countersigner trusts (every existing signature
must verify), so nobody countersigns what they could not check. The result is written through a
temporary name and renamed into place; just before the rename the package is compared with what
was verified, so two countersigners at the same moment cannot silently drop each other's
signature (the later one fails and can run again).
"""

from __future__ import annotations

import hashlib
import io
import os
import shutil
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from redact import fsio, jsonio
from redact.errors import OutputError, PackageError
from redact.provenance import signing
from redact.provenance.package import ENVELOPE, ENVELOPE_LIMIT, _write_tar, open_package
from redact.provenance.verify import VerifiedPackage, verify_package


@dataclass(frozen=True)
class Countersigned:
    """A countersigned package, verified again: where it is, who signed it, and the key just added."""

    path: Path
    package: VerifiedPackage
    added: str  # key id of the new signature

    @property
    def signers(self) -> tuple[signing.VerifiedSignature, ...]:
        return self.package.signers


def countersign_package(path: Path, signer: signing.Signer, trusted_keys: Sequence[signing.PublicKey],
                        out: Path | None = None) -> Countersigned:
    """Add `signer`'s signature to the package at `path` (a folder or .tar), in place or as a copy at `out`.

    1. Verify the package with `trusted_keys` (VerificationFailed when it does not verify).
    2. Refuse when `signer` has already signed it (OutputError).
    3. Append a signature over the exact payload bytes that verified; keep everything else.
    4. Write through a temporary name: in place, after checking the package did not change since
       step 1; or as a new package at `out`, which must not exist.
    5. Verify the result with the trusted keys and the new one, and return it.
    """
    path = Path(path)
    keys = list(trusted_keys)
    if out is not None:
        out = Path(out)
        if os.path.lexists(out):
            raise OutputError(f"{out} already exists; refusing to overwrite it (choose a new name)")
        if not out.parent.is_dir():
            raise OutputError(f"directory {out.parent} does not exist")
    verified = verify_package(path, keys + [signer.public_key])
    if signer.key_id in (s.key_id for s in verified.signers):
        raise OutputError(f"{path}: key {signer.key_id} has already signed this package")
    before = _fingerprint(path)
    with open_package(path) as reader:
        old_bytes = reader.read(ENVELOPE, ENVELOPE_LIMIT)
    envelope = jsonio.loads_object(old_bytes, ENVELOPE, ENVELOPE_LIMIT)
    checked = signing.verify_envelope(envelope, keys + [signer.public_key], signing.PAYLOAD_TYPE)
    if checked.payload != verified.payload:
        raise OutputError(f"{path}: the package changed while it was being countersigned; run again")
    new_bytes = signing.envelope_bytes(signing.add_signature(envelope, checked, signer))
    target = out or path
    if path.is_dir():
        _write_folder(path, new_bytes, out, before)
    else:
        _write_tar_package(path, new_bytes, out, before)
    result = verify_package(target, keys + [signer.public_key])
    if signer.key_id not in (s.key_id for s in result.signers):  # a bug, never a user error
        raise OutputError(f"{target}: the new signature is missing after writing")
    return Countersigned(target, result, signer.key_id)


def _fingerprint(path: Path) -> str:
    """SHA-256 of the envelope (folder) or of the whole archive (.tar): what a rival writer would change."""
    h = hashlib.sha256()
    try:
        if Path(path).is_dir():
            h.update((Path(path) / ENVELOPE).read_bytes())
        else:
            with open(path, "rb") as f:
                for chunk in iter(lambda: f.read(1 << 20), b""):
                    h.update(chunk)
    except OSError as e:
        raise PackageError(f"{path}: cannot be read ({e.strerror or e})") from None
    return h.hexdigest()


def _unchanged(path: Path, before: str) -> None:
    if _fingerprint(path) != before:
        raise OutputError(f"{path}: the package changed while it was being countersigned; run again")


def _tmp_name(near: Path) -> Path:
    return near.with_name(f".{near.name}.countersign-{os.getpid()}")


def _write_folder(path: Path, envelope: bytes, out: Path | None, before: str) -> None:
    if out is None:
        tmp = _tmp_name(path)  # beside the folder, so the package never holds a stray file
        try:
            _write_file(tmp, envelope)
            _unchanged(path, before)
            os.replace(tmp, path / ENVELOPE)
        except OSError as e:
            raise OutputError(f"cannot write {path / ENVELOPE}: {e.strerror or e}") from None
        finally:
            _remove(tmp)
        return
    tmp = _tmp_name(out)
    try:
        with open_package(path) as reader:
            for name in sorted(reader.files):
                if name == ENVELOPE:
                    continue
                dst = tmp / name
                dst.parent.mkdir(parents=True, exist_ok=True)
                with reader.open(name) as src, open(dst, "xb") as f:
                    shutil.copyfileobj(src, f)
        _write_file(tmp / ENVELOPE, envelope)
        fsio.rename_new(tmp, out)  # fails when `out` appeared meanwhile: never overwrite
    except OSError as e:
        raise OutputError(f"cannot write {out}: {e.strerror or e}") from None
    finally:
        _remove(tmp)


def _write_tar_package(path: Path, envelope: bytes, out: Path | None, before: str) -> None:
    target = out or path
    tmp = _tmp_name(target)
    try:
        with open_package(path) as reader, open(tmp, "xb") as f:
            def opener(name: str) -> Callable[[], BinaryIO]:
                if name == ENVELOPE:
                    return lambda: io.BytesIO(envelope)
                return lambda: reader.open(name)

            _write_tar(f, [(n, len(envelope) if n == ENVELOPE else reader.files[n], opener(n))
                           for n in sorted(reader.files)])
            f.flush()
            os.fsync(f.fileno())
        if out is None:
            _unchanged(path, before)
            os.replace(tmp, path)
        else:
            os.link(tmp, out)  # fails when `out` appeared meanwhile: never overwrite
    except FileExistsError:
        raise OutputError(f"{out} appeared while writing; refusing to overwrite it") from None
    except OSError as e:
        raise OutputError(f"cannot write {target}: {e.strerror or e}") from None
    finally:
        _remove(tmp)


def _write_file(path: Path, data: bytes) -> None:
    with open(path, "xb") as f:
        f.write(data)
        f.flush()
        os.fsync(f.fileno())


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    elif os.path.lexists(path):
        os.unlink(path)
