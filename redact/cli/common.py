"""Shared CLI helpers: turning library errors into one-line messages and exit codes.

Interruptions: Ctrl-C (SIGINT) and SIGTERM (what `kill`, systemd and container runtimes send to
stop a program) end a command the same way: the library's cleanup runs (staging folders removed,
worker threads joined), then one line says nothing was completed. Exit status 128 + the signal
number (130, 143), the shell's convention for a command ended by a signal.
"""

from __future__ import annotations

import contextlib
import errno
import functools
import json
import signal
import sys
import threading
from collections.abc import Callable, Iterator
from typing import Any

import click

from redact.errors import RedactError


class Terminated(KeyboardInterrupt):
    """Raised in the main thread when SIGTERM arrives, so it unwinds exactly as Ctrl-C does."""

    signal_number = signal.SIGTERM


@contextlib.contextmanager
def sigterm_as_interrupt() -> Iterator[None]:
    """While the block runs, SIGTERM raises Terminated in the main thread (Python runs signal
    handlers there only, and only the main thread may set them); a second SIGTERM during the
    cleanup that follows is ignored, so the cleanup finishes. The old handler is restored."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def on_term(signum, frame):
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        raise Terminated()

    previous = signal.signal(signal.SIGTERM, on_term)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _os_error_line(e: OSError) -> str:
    where = f"{e.filename}: " if e.filename else ""
    if e.errno in (errno.ENOSPC, errno.EDQUOT):
        return f"{where}no space left on the device; free some space or write elsewhere"
    return f"{where}{e.strerror or e}"


def library_errors(fn: Callable) -> Callable:
    """Decorator: a RedactError becomes `error: message` on stderr and its exit code (no traceback);
    an operating-system error (a full disk, a permission) one line and exit 2; Ctrl-C and SIGTERM
    one line and 130 / 143."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            with sigterm_as_interrupt():
                return fn(*args, **kwargs)
        except RedactError as e:
            click.echo(f"error: {e}", err=True)
            sys.exit(e.exit_code)
        except OSError as e:
            click.echo(f"error: {_os_error_line(e)}", err=True)
            sys.exit(2)
        except Terminated:
            click.echo("error: stopped by SIGTERM; no output was completed", err=True)
            sys.exit(128 + signal.SIGTERM)
        except KeyboardInterrupt:
            click.echo("error: interrupted; no output was completed", err=True)
            sys.exit(130)

    return wrapper


def echo_json(doc: Any) -> None:
    """Print one JSON document on stdout (the only thing --json prints there)."""
    click.echo(json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False))
