"""Streamed SHA-256 (redact.hashing) against the FIPS 180-4 / NIST worked examples."""

import io

import pytest

from redact.hashing import sha256_bytes, sha256_file, sha256_stream

# FIPS 180-4 SHA-256 examples (NIST CSRC "SHA256.pdf" worked examples; also RFC 6234 §8.5 test driver).
VECTORS = [
    (b"abc", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"),
    (b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq",
     "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"),
    (b"", "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"),
]
MILLION_A = "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"  # FIPS 180-4 / RFC 6234


@pytest.mark.parametrize("data,digest", VECTORS)
def test_fips_vectors_bytes_stream_and_file(data, digest, tmp_path):
    assert sha256_bytes(data) == digest
    for chunk in (1, 3, 64):
        assert sha256_stream(io.BytesIO(data), chunk) == (digest, len(data))
    p = tmp_path / "v.bin"
    p.write_bytes(data)
    assert sha256_file(p) == (digest, len(data))


@pytest.mark.parametrize("chunk", [1, 63, 64, 65, 4096])
def test_million_a_streamed_in_odd_chunks(chunk):
    # FIPS 180-4 long-message vector: one million repetitions of "a"; chunk sizes straddle the
    # 64-byte SHA-256 block so that partial-block buffering is exercised.
    digest, n = sha256_stream(io.BytesIO(b"a" * 1_000_000), chunk)
    assert (digest, n) == (MILLION_A, 1_000_000)


def test_million_a_file_default_chunk(tmp_path):
    p = tmp_path / "a.bin"
    p.write_bytes(b"a" * 1_000_000)
    assert sha256_file(p) == (MILLION_A, 1_000_000)
    assert sha256_file(p, 65) == (MILLION_A, 1_000_000)


def test_chunk_size_must_be_positive():
    with pytest.raises(ValueError):
        sha256_stream(io.BytesIO(b"abc"), 0)
