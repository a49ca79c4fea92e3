"""One module per data file of a package: its typed record, its exact encoder and its strict decoder.

skeletons_jsonl, tracks_json, quality_jsonl and review_json own their files; log.jsonl is owned by
redact.provenance.log and frames.sha256 by redact.provenance.merkle. These modules import only
redact.jsonio and redact.errors (no NumPy), so a recipient's verifier reads them with the crypto
dependency alone. Every decoder also re-encodes what it read and refuses a file that is not byte
for byte what the encoder writes: a package holds only what this tool writes.
"""
