"""RFC 6962 Merkle tree hash over per-frame digests, inclusion proofs, and RFC 9162 verification.

Leaf data are the 32-byte per-frame digests listed in `frames.sha256`; the root goes into the
signed predicate as `source.frames_root`. An inclusion proof for frame N lets the holder of the
source show that one frame belongs to the signed source without handing over the others.

RFC 6962 §2.1: MTH({}) = SHA-256(), leaf = SHA-256(0x00 || d), node = SHA-256(0x01 || l || r),
split at the largest power of two smaller than n. Building level by level and carrying an
unpaired last node up unchanged gives the same tree, in O(n) time and O(n) memory of 32-byte
hashes (about 3 MB for a 100,000-frame video).
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import BinaryIO

from redact import jsonio
from redact.errors import InputError, PackageError

DIGEST_BYTES = 32
PROOF_TYPE = "urn:redact:frame-inclusion-proof:v1"  # ours, named like redact.provenance.predicate.PREDICATE_TYPE
FRAMES_LINE_LIMIT = 1024  # bytes read per frames.sha256 line before refusing it (a line is 65); common practice
_HEX64 = re.compile(rb"[0-9a-f]{64}\n")


def leaf_hash(data: bytes) -> bytes:
    """RFC 6962 §2.1 leaf hash: SHA-256(0x00 || data)."""
    return hashlib.sha256(b"\x00" + data).digest()


def node_hash(left: bytes, right: bytes) -> bytes:
    """RFC 6962 §2.1 interior node hash: SHA-256(0x01 || left || right)."""
    return hashlib.sha256(b"\x01" + left + right).digest()


def _levels(leaves: Sequence[bytes]) -> list[list[bytes]]:
    """All levels of the tree, leaf hashes first; an unpaired last node moves up unchanged."""
    level = [leaf_hash(d) for d in leaves]
    levels = [level]
    while len(level) > 1:
        nxt = [node_hash(level[i], level[i + 1]) for i in range(0, len(level) - 1, 2)]
        if len(level) % 2:
            nxt.append(level[-1])
        levels.append(nxt)
        level = nxt
    return levels


def root(leaves: Sequence[bytes]) -> bytes:
    """RFC 6962 Merkle tree hash of a list of leaf data (empty list: SHA-256 of nothing)."""
    if not leaves:
        return hashlib.sha256(b"").digest()
    return _levels(leaves)[-1][0]


def inclusion_proof(leaves: Sequence[bytes], index: int) -> list[bytes]:
    """RFC 6962 §2.1.1 audit path for leaf `index`, bottom to top."""
    n = len(leaves)
    if not 0 <= index < n:
        raise ValueError(f"leaf index {index} is outside a tree of {n} leaves")
    proof = []
    i = index
    for level in _levels(leaves)[:-1]:
        sibling = i ^ 1
        if sibling < len(level):
            proof.append(level[sibling])
        i >>= 1
    return proof


def verify_inclusion(leaf_data: bytes, index: int, size: int, proof: Sequence[bytes], expected_root: bytes) -> bool:
    """RFC 9162 §2.1.3.2: does `proof` show leaf `index` of a tree of `size` leaves has root `expected_root`?"""
    if not 0 <= index < size:
        return False
    fn, sn = index, size - 1
    r = leaf_hash(leaf_data)
    for p in proof:
        if len(p) != DIGEST_BYTES or sn == 0:
            return False
        if fn & 1 or fn == sn:
            r = node_hash(p, r)
            if not fn & 1:
                while not fn & 1 and fn != 0:
                    fn >>= 1
                    sn >>= 1
        else:
            r = node_hash(r, p)
        fn >>= 1
        sn >>= 1
    return sn == 0 and r == expected_root


def parse_frame_digests(lines: Iterable[bytes], what: str = "frames.sha256") -> list[bytes]:
    """Per-frame digests from `frames.sha256`: each line exactly 64 lowercase hex digits and a newline."""
    out = []
    for n, line in enumerate(lines, 1):
        if not _HEX64.fullmatch(line):
            raise PackageError(f"{what} line {n}: expected 64 lowercase hex digits and a newline")
        out.append(bytes.fromhex(line[:64].decode("ascii")))
    return out


def read_frame_digests(stream: BinaryIO, what: str = "frames.sha256") -> list[bytes]:
    """All per-frame digests of a `frames.sha256` stream (lines checked as parse_frame_digests does)."""
    return parse_frame_digests((line for _, line in jsonio.iter_lines(stream, what, FRAMES_LINE_LIMIT)), what)


def frame_digest_line(digest: bytes) -> bytes:
    """One line of `frames.sha256` for a 32-byte per-frame digest (what the pipeline writes per frame)."""
    if len(digest) != DIGEST_BYTES:
        raise ValueError("a per-frame digest must be 32 bytes")
    return digest.hex().encode("ascii") + b"\n"


def format_frame_digests(digests: Iterable[bytes]) -> bytes:
    """The `frames.sha256` file for a sequence of 32-byte per-frame digests."""
    return b"".join(frame_digest_line(d) for d in digests)


@dataclass(frozen=True)
class FrameProof:
    """An inclusion proof that frame `frame` (digest `leaf`) is in a tree of `size` frames with `root`."""

    frame: int
    size: int
    leaf: bytes
    root: bytes
    path: tuple[bytes, ...]
    source_sha256: str | None = None

    def check(self) -> bool:
        """True when the audit path leads from the leaf to the root (RFC 9162 §2.1.3.2)."""
        return verify_inclusion(self.leaf, self.frame, self.size, self.path, self.root)

    def to_json(self) -> bytes:
        """The proof file: one JSON object, hex strings, with a type URI of ours."""
        doc = {"type": PROOF_TYPE, "frame": self.frame, "tree_size": self.size, "frame_digest": self.leaf.hex(),
               "root": self.root.hex(), "path": [p.hex() for p in self.path]}
        if self.source_sha256 is not None:
            doc["source_sha256"] = self.source_sha256
        return jsonio.dumps(doc) + b"\n"

    @classmethod
    def from_json(cls, data: bytes, what: str = "proof") -> FrameProof:
        """Parse and validate a proof file; raises PackageError naming the bad field."""
        d = jsonio.loads_object(data, what, limit=1024 * 1024)
        if d.get("type") != PROOF_TYPE:
            raise PackageError(f"{what}: type is not {PROOF_TYPE}")
        for k in ("frame", "tree_size"):
            if not isinstance(d.get(k), int) or isinstance(d.get(k), bool) or d[k] < 0:
                raise PackageError(f"{what}: {k} must be a non-negative integer")

        def hx(v, name):
            if not isinstance(v, str) or not re.fullmatch(r"[0-9a-f]{64}", v):
                raise PackageError(f"{what}: {name} must be 64 lowercase hex digits")
            return bytes.fromhex(v)

        if not isinstance(d.get("path"), list) or len(d["path"]) > 64:
            raise PackageError(f"{what}: path must be a list of at most 64 hashes")
        src = d.get("source_sha256")
        if src is not None:
            hx(src, "source_sha256")
        return cls(d["frame"], d["tree_size"], hx(d.get("frame_digest"), "frame_digest"), hx(d.get("root"), "root"),
                   tuple(hx(p, "path entry") for p in d["path"]), src)


def make_frame_proof(digests: Sequence[bytes], frame: int, source_sha256: str | None = None) -> FrameProof:
    """Build the inclusion proof for frame `frame` from all per-frame digests."""
    if not 0 <= frame < len(digests):
        raise InputError(f"frame {frame} does not exist; the source has {len(digests)} frames (0-based)")
    return FrameProof(frame, len(digests), digests[frame], root(digests),
                      tuple(inclusion_proof(digests, frame)), source_sha256)


def check_frame_proof(proof: FrameProof, signed_root: str, signed_size: int | None,
                      frame_digest: bytes | None = None) -> list[str]:
    """Every reason a frame proof fails against a signed root (hex) and frame count; [] when it holds."""
    findings = []
    if proof.root.hex() != signed_root:
        findings.append("proof: its root is not the signed frames_root of this package")
    if signed_size is not None and proof.size != signed_size:
        findings.append(f"proof: tree size {proof.size} differs from the signed frame count {signed_size}")
    if frame_digest is not None and frame_digest != proof.leaf:
        findings.append("proof: the given frame digest is not the digest in the proof")
    if not proof.check():
        findings.append(f"proof: the audit path does not lead from frame {proof.frame} to the root (RFC 9162 §2.1.3.2)")
    return findings
