"""redact: CPU pose estimation, fail-closed video redaction, and signed skeleton-only packages.

Skeleton data is pseudonymised, not anonymous; automated redaction must be reviewed by a person
before any disclosure.
"""

__version__ = "0.1.0"
