"""RFC 6962 Merkle tree hash and inclusion proofs against the published reference data."""

import hashlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from redact.errors import InputError, PackageError
from redact.provenance import merkle

# Leaves of the certificate-transparency reference tests (transparency-dev/merkle testonly/constants.go).
LEAVES = [bytes.fromhex(h) for h in ["", "00", "10", "2021", "3031", "40414243", "5051525354555657",
                                     "606162636465666768696a6b6c6d6e6f"]]
# Roots of the first n leaves, same source (RFC 6962 §2.1 MTH).
ROOTS = {
    1: "6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
    2: "fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125",
    3: "aeb6bcfe274b70a14fb067a5e5578264db0fa9b51af5e0ba159158f329e06e77",
    4: "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
    5: "4e3bbb1f7b478dcfe71fb631631519a3bca12c9aefca1612bfce4c13a86264d4",
    6: "76e67dadbcdf1e10e1b74ddc608abd2f98dfb16fbce75277b5232a127f2087ef",
    7: "ddb89be403809e325750d3d263cd78929c2942b7942a34b77e122c9594a74c8c",
    8: "5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328",
}
# transparency-dev/merkle testdata/inclusion/1/happy-path.json: leaf 0 of the 8-leaf tree.
PROOF_0_OF_8 = ["96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
                "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
                "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4"]


def mth_rfc6962(d):
    """MTH written straight from RFC 6962 §2.1 (recursive split at the largest power of two < n)."""
    if not d:
        return hashlib.sha256(b"").digest()
    if len(d) == 1:
        return hashlib.sha256(b"\x00" + d[0]).digest()
    k = 1
    while k * 2 < len(d):
        k *= 2
    return hashlib.sha256(b"\x01" + mth_rfc6962(d[:k]) + mth_rfc6962(d[k:])).digest()


@pytest.mark.parametrize("n", sorted(ROOTS))
def test_published_roots(n):
    assert merkle.root(LEAVES[:n]).hex() == ROOTS[n]


def test_empty_tree_is_sha256_of_nothing():
    # RFC 6962 §2.1: MTH({}) = SHA-256(); FIPS 180-4 empty-string vector.
    assert merkle.root([]).hex() == "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"


def test_published_inclusion_proof():
    proof = merkle.inclusion_proof(LEAVES, 0)
    assert [p.hex() for p in proof] == PROOF_0_OF_8
    assert merkle.verify_inclusion(LEAVES[0], 0, 8, [bytes.fromhex(h) for h in PROOF_0_OF_8], bytes.fromhex(ROOTS[8]))


def test_published_proof_rejected_when_altered():
    root = bytes.fromhex(ROOTS[8])
    proof = [bytes.fromhex(h) for h in PROOF_0_OF_8]
    assert not merkle.verify_inclusion(LEAVES[1], 0, 8, proof, root)      # other leaf
    assert not merkle.verify_inclusion(LEAVES[0], 1, 8, proof, root)      # other index
    # A wrong tree size is caught when it changes the path's shape (sizes 5-8 share it for leaf 0;
    # the verifier relies on size and root being signed together).
    assert not merkle.verify_inclusion(LEAVES[0], 0, 4, proof, root)
    assert not merkle.verify_inclusion(LEAVES[0], 0, 9, proof, root)
    assert not merkle.verify_inclusion(LEAVES[0], 0, 8, proof[:2], root)  # short path
    assert not merkle.verify_inclusion(LEAVES[0], 0, 8, proof + proof[:1], root)  # long path
    assert not merkle.verify_inclusion(LEAVES[0], 8, 8, proof, root)      # index outside
    bad = bytearray(proof[1])
    bad[0] ^= 1
    assert not merkle.verify_inclusion(LEAVES[0], 0, 8, [proof[0], bytes(bad), proof[2]], root)


@pytest.mark.parametrize("n", range(1, 34))
def test_every_proof_verifies_with_rfc9162_algorithm(n):
    # Proofs from our generator are checked with the independent RFC 9162 §2.1.3.2 procedure,
    # and our level-wise root against the recursive RFC 6962 definition.
    leaves = [hashlib.sha256(bytes([i])).digest() for i in range(n)]
    root = merkle.root(leaves)
    assert root == mth_rfc6962(leaves)
    for i in range(n):
        proof = merkle.inclusion_proof(leaves, i)
        assert merkle.verify_inclusion(leaves[i], i, n, proof, root)
        assert not merkle.verify_inclusion(leaves[(i + 1) % n] + b"x", i, n, proof, root)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.binary(max_size=8), min_size=1, max_size=70), st.data())
def test_property_root_and_proofs(leaves, data):
    assert merkle.root(leaves) == mth_rfc6962(leaves)
    i = data.draw(st.integers(0, len(leaves) - 1))
    proof = merkle.inclusion_proof(leaves, i)
    assert merkle.verify_inclusion(leaves[i], i, len(leaves), proof, merkle.root(leaves))


def test_frame_digest_file_round_trip_and_strictness():
    digests = [hashlib.sha256(bytes([i])).digest() for i in range(3)]
    text = merkle.format_frame_digests(digests)
    assert text.count(b"\n") == 3
    assert merkle.parse_frame_digests(text.splitlines(keepends=True)) == digests
    for bad in [text.upper(), text[:-1], text.replace(b"\n", b"\r\n", 1), b"\n" + text]:
        with pytest.raises(PackageError):
            merkle.parse_frame_digests(bad.splitlines(keepends=True))


def test_frame_proof_file_round_trip_and_check():
    digests = [hashlib.sha256(bytes([i])).digest() for i in range(11)]
    proof = merkle.make_frame_proof(digests, 6, "ab" * 32)
    again = merkle.FrameProof.from_json(proof.to_json())
    assert again == proof and again.check()
    root = merkle.root(digests).hex()
    assert merkle.check_frame_proof(again, root, 11, digests[6]) == []
    findings = merkle.check_frame_proof(again, root, 12, digests[5])
    assert any("tree size" in f for f in findings) and any("frame digest" in f for f in findings)
    with pytest.raises(InputError):
        merkle.make_frame_proof(digests, 11)
    with pytest.raises(PackageError):
        merkle.FrameProof.from_json(proof.to_json().replace(b'"frame":6', b'"frame":6,"frame":7'))
