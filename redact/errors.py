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


def _megabytes(n: int) -> str:
    return f"{max(n, 0) / 1e6:,.0f} MB" if n >= 10e6 else f"{max(n, 0) / 1e6:.1f} MB"


class NoSpaceError(OutputError):
    """The file system holding an output is full (ENOSPC, or the quota: EDQUOT).

    folder: where the output was being written; needed/free: the run's estimate of the space it
    needs and the space free when it started, in bytes, when known.
    """

    def __init__(self, folder, needed: int | None = None, free: int | None = None):
        self.folder, self.needed, self.free = folder, needed, free
        text = f"no space left in {folder}"
        if needed is not None:
            text += f": this run needs about {_megabytes(needed)}"
            if free is not None:
                text += f" ({_megabytes(free)} were free when it started)"
        super().__init__(text + "; free some space or choose another output folder (nothing that looks "
                                "complete was left behind)")
