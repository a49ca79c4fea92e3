"""Streamed SHA-256 (FIPS 180-4) of files and byte streams, in bounded memory."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import BinaryIO

CHUNK = 1 << 20


def sha256_stream(stream: BinaryIO, chunk_size: int = CHUNK) -> tuple[str, int]:
    """Hex SHA-256 and byte count of everything left in a binary stream, read in chunks."""
    if chunk_size < 1:
        raise ValueError("chunk_size must be at least 1")
    h = hashlib.sha256()
    n = 0
    while True:
        block = stream.read(chunk_size)
        if not block:
            break
        h.update(block)
        n += len(block)
    return h.hexdigest(), n


def sha256_file(path: str | Path, chunk_size: int = CHUNK) -> tuple[str, int]:
    """Hex SHA-256 and size in bytes of a file, streamed."""
    with open(path, "rb") as f:
        return sha256_stream(f, chunk_size)


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of a byte string."""
    return hashlib.sha256(data).hexdigest()
