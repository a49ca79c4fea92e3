"""Proving what was done: Ed25519/DSSE signing, RFC 6962 Merkle trees, the transform log, packages,
verification.

Imports only the foundations (errors, jsonio, hashing) and `cryptography`: a recipient verifies
without the vision stack."""
