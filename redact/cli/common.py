"""Shared CLI helpers: turning library errors into one-line messages and exit codes."""

from __future__ import annotations

import functools
import json
import sys
from collections.abc import Callable
from typing import Any

import click

from redact.errors import RedactError


def library_errors(fn: Callable) -> Callable:
    """Decorator: a RedactError becomes `error: message` on stderr and its exit code (no traceback)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except RedactError as e:
            click.echo(f"error: {e}", err=True)
            sys.exit(e.exit_code)
        except KeyboardInterrupt:
            click.echo("error: interrupted; no output was completed", err=True)
            sys.exit(130)

    return wrapper


def echo_json(doc: Any) -> None:
    """Print one JSON document on stdout (the only thing --json prints there)."""
    click.echo(json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False))
