"""One error hierarchy for the whole library; only the CLI turns these into exit codes."""

from __future__ import annotations


class RedactError(Exception):
    """Base of every error the library raises on purpose; the message says what failed and what to do."""

    exit_code = 2


class InputError(RedactError):
    """The user's input (file, option, plan) is unusable; nothing was written."""


class ModelError(RedactError):
    """A bundled model is missing, altered (hash mismatch) or cannot be loaded."""


class VideoError(RedactError):
    """A video cannot be probed, decoded or encoded."""


class OutputError(RedactError):
    """An output location is unusable (unwritable, would overwrite the input, already exists)."""


class SigningKeyError(RedactError):
    """A signing key is missing, malformed, or its passphrase is wrong."""


class PackageError(RedactError):
    """A package cannot be read or parsed safely (size limit, bad JSON, unsafe path)."""


class VerificationFailed(RedactError):
    """Verification ran and found problems; `findings` lists every one of them."""

    exit_code = 1

    def __init__(self, findings: list[str]):
        self.findings = list(findings)
        super().__init__("; ".join(self.findings) if self.findings else "verification failed")


class PlanError(InputError):
    """A redaction plan does not validate; the message names the field."""
