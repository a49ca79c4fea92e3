"""`redact batch`: every video in a folder tree, one signed package each, resumable."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click

from redact.cli import CAUTION, main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import check_signing_key, signing_key_option
from redact.cli.options import pipeline_options


def _summary(result) -> dict:
    counts = {s: len(result.with_status(s)) for s in ("done", "skipped-already-done", "failed")}
    return {"out": str(result.out_dir), "index": str(result.index), "inputs": len(result.entries),
            "counts": counts, "entries": [e.to_json() for e in result.entries], "workers": result.workers}


def _progress(quiet: bool):
    def report(entry, finished: int, total: int) -> None:
        if quiet:
            return
        detail = entry.error if entry.error else (f"{entry.frames} frames" if entry.frames is not None else "")
        click.echo(f"[{finished}/{total}] {entry.status}: {entry.input}" + (f" ({detail})" if detail else ""),
                   err=True)
    return report


@main.command("batch", epilog=f"""\b
Example:
  redact batch archive/ --out archive-redacted --signing-key keys/steward.private.pem
  redact batch archive/ --out archive-redacted --signing-key keys/steward.private.pem --workers 2
  redact batch archive/ --out archive-redacted --signing-key keys/steward.private.pem \\
      --scheduler tcp://10.0.0.5:8786

The key passphrase is read from ${PASSPHRASE_ENV} or prompted (hidden). With --scheduler
(needs `pip install 'redact[cluster]'`) every Dask worker must see the same input and output
paths and have ${PASSPHRASE_ENV} set in its own environment: the passphrase is never sent over
the cluster, the encrypted key is.

Outputs: OUT/index.json and one folder per input named from its path and SHA-256, holding
redacted.mp4 and package/. Rerunning skips inputs already done (known by SHA-256); a failed
input is listed and the others continue. Exit 0 when every input is done or skipped, 1 when any
failed, 2 on a usage error.

{CAUTION}""")
@click.argument("input_dir", type=click.Path(path_type=Path, file_okay=False))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path, file_okay=False),
              help="Output folder (created if missing; reused to resume).")
@signing_key_option()
@click.option("--workers", type=click.IntRange(1, 256), default=1, show_default=True,
              help="Local worker processes; each loads the model once and uses cores / N threads.")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Send the work to a Dask distributed scheduler, e.g. tcp://host:8786.")
@pipeline_options
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@click.option("--quiet", is_flag=True, help="No per-input progress lines.")
@library_errors
def batch(input_dir: Path, out: Path, signing_key: Path, workers: int, scheduler: str | None, settings,
          as_json: bool, quiet: bool) -> None:
    """Redact every video in a folder tree into one signed skeleton-only package each.

    Videos are found by extension (mp4, mov, mkv, avi, m4v, webm, ts, ...); hidden files and
    folders and symbolic links are skipped. The index lists each input's SHA-256, status and
    output folder, and is kept up to date as inputs finish.
    """
    from redact.batch import BatchKey, run_batch

    if scheduler and workers > 1:
        raise click.UsageError("give either --workers or --scheduler, not both")
    if not input_dir.is_dir():
        raise click.BadParameter(f"{input_dir}: no such folder", param_hint="INPUT_DIR")
    batch_key = BatchKey.load(check_signing_key(signing_key), read_passphrase(confirm=False))
    if scheduler and not quiet and os.environ.get(PASSPHRASE_ENV) is None:
        click.echo(f"note: Dask workers read the passphrase from their own ${PASSPHRASE_ENV}", err=True)
    result = run_batch(input_dir, out, batch_key, settings, workers=workers, scheduler=scheduler,
                       progress=_progress(quiet or as_json))
    for line in result.notices:
        click.echo(f"note: {line}", err=True)
    s = _summary(result)
    if as_json:
        echo_json(s)
    else:
        c = s["counts"]
        click.echo(f"inputs: {s['inputs']}  done: {c['done']}  skipped (already done): "
                   f"{c['skipped-already-done']}  failed: {c['failed']}")
        click.echo(f"index: {s['index']}")
        for e in result.failed:
            click.echo(f"failed: {e.input}: {e.error}")
        click.echo("each output's package/review.json lists frames a person must review before disclosure")
    if not result.ok:
        sys.exit(1)
