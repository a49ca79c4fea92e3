"""`redact models`: list the bundled models and check each one's hash against its manifest."""

from __future__ import annotations

from typing import Any

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.errors import ModelError


@main.command("models")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document instead of a table.")
@library_errors
def models_command(as_json: bool) -> None:
    """List bundled models with licence and provenance, and check their SHA-256.

    Exit status 1 when any model fails its check.

    Example: redact models
    """
    from redact.vision.models import check_model, list_models

    rows: list[dict[str, Any]] = []
    for m in list_models():
        try:
            status = check_model(m)
        except ModelError as e:
            status = f"FAILED: {e}"
        rows.append({"id": m.id, "task": m.task, "file": m.file, "sha256": m.sha256, "bytes": m.bytes,
                     "licence": m.licence, "source": f"{m.source.get('package')} {m.source.get('version')}",
                     "status": status})
    if as_json:
        echo_json({"models": rows})
    else:
        click.echo(f"{'id':<26} {'task':<15} {'licence':<11} {'source (package version)':<26} "
                   f"{'sha256':<17}  check")
        for r in rows:
            click.echo(f"{r['id']:<26} {r['task']:<15} {r['licence']:<11} {r['source']:<26} "
                       f"{r['sha256'][:16]}…  {r['status']}")
    if any(r["status"] != "ok" for r in rows):
        raise SystemExit(1)
