"""`redact export`: a package's skeletons as per-track NumPy arrays (.npz) or COCO keypoint results JSON."""

from __future__ import annotations

from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import load_trusted_keys, trusted_keys_option

EXPORT_CAUTION = (
    "The exported skeletons are pseudonymised personal data, not anonymous data: people can be "
    "re-identified from their gait and body proportions (GaitPT, arXiv 2308.10623), even after "
    "de-identification options. Share them only as your data-protection officer allows."
)


#: The formats of redact.skeletons.export.FORMATS (named here so that loading the command imports no NumPy).
EXPORT_FORMATS = ("npz", "coco", "mot", "trajectories")


def _frame_size(ctx, param, value: str | None):
    if value is None:
        return None
    try:
        w, h = (int(v) for v in value.lower().split("x"))
    except ValueError:
        raise click.BadParameter("expected WIDTHxHEIGHT in pixels, e.g. 1920x1080") from None
    if w <= 0 or h <= 0:
        raise click.BadParameter("width and height must be positive")
    return w, h


@main.command("export", help=f"""Export a package's skeletons (a folder or .tar) for research tools.


npz           per track, track_<id>_keypoints [T,17,3] float32 (x, y, confidence), _frames,
              _times, _boxes, _scores, _observed, and the description (frame size, fps,
              keypoint_names, coordinate units and system, source and statement SHA-256) as
              plain arrays and one JSON string `metadata`; numpy.load(allow_pickle=False).
coco          COCO keypoint results JSON (each with its track_id and state) plus a
              ground-truth-style file of images and the COCO-17 category (--gt-out);
              loadable with pycocotools.
mot           MOTChallenge-style CSV: frame (from 1), id, bb_left, bb_top, bb_width,
              bb_height, conf, -1, -1, -1; loadable with py-motmetrics (fmt "mot15-2D").
trajectories  a new folder: trajectory_<id>.csv per track (frame, then 17 x (x, y) in
              COCO-17 order, no header) and metadata.json.

Positions the tracker predicted between detections are left out of coco, mot and
trajectories unless --include-predicted (npz keeps them, flagged by _observed).

{EXPORT_CAUTION}""", epilog="""\b
Examples:
  redact export out/package --trusted-key steward.public.pem --format npz --out tracks.npz
  redact export out/package.tar --trusted-key steward.public.pem --format coco --out results.json
  redact export out/package --format coco --out results.json --frame-size 1920x1080
  redact export out/package --trusted-key steward.public.pem --format mot --out tracks.txt
  redact export out/package --trusted-key steward.public.pem --format trajectories --out traj/

With --trusted-key the package is verified first (exit 1 when it does not verify) and COCO images get
the signed frame size; without it the package is read unverified.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@trusted_keys_option(required=False, help="Trusted public key, a file (NAME.public.pem): verify the package "
                                           "before exporting; repeat for several.")
@click.option("--format", "fmt", required=True, type=click.Choice(EXPORT_FORMATS), help="Output format.")
@click.option("--out", required=True, type=click.Path(path_type=Path),
              help="The export: a file for npz, coco and mot, a new folder for trajectories (an existing "
                   "file is kept unless forced).")
@click.option("--include-predicted", is_flag=True,
              help="coco, mot, trajectories: also export positions the tracker predicted between "
                   "detections (left out by default; each COCO result says its state).")
@click.option("--gt-out", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="coco only: images/categories file (default: OUT with .gt.json).")
@click.option("--frame-size", callback=_frame_size, default=None, metavar="WxH",
              help="coco only: frame width and height recorded on each image.")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
@click.option("--json", "as_json", is_flag=True, help="Print the summary as one JSON document.")
@library_errors
def export_cmd(package: Path, trusted_keys: tuple[Path, ...], fmt: str, out: Path, include_predicted: bool,
               gt_out: Path | None, frame_size, force: bool, as_json: bool) -> None:
    from redact.errors import InputError
    from redact.skeletons.export import export_package

    if fmt != "coco" and (gt_out is not None or frame_size is not None):
        raise InputError("--gt-out and --frame-size only apply to --format coco")
    if fmt == "npz" and include_predicted:
        raise InputError("--include-predicted does not apply to npz: it keeps every row, flagged by _observed")
    if fmt == "trajectories" and force:
        raise InputError("--force does not apply to trajectories: they always go into a new folder")
    from redact.fsio import lock_target

    trusted = load_trusted_keys(trusted_keys)
    with lock_target(out):  # a second export to the same file stops here
        summary = export_package(package, fmt, out, gt_out=gt_out, frame_size=frame_size, force=force,
                                 trusted_keys=trusted or None, include_predicted=include_predicted)
    if not trusted:
        click.echo("note: the package was not verified (use --trusted-key NAME.public.pem)", err=True)
    click.echo(f"caution: {EXPORT_CAUTION}", err=True)
    if as_json:
        echo_json(summary)
        return
    files = summary["out"] + (f" and {summary['gt_out']}" if "gt_out" in summary else "")
    count = f"{summary['results']} poses" if fmt == "coco" else f"{summary['tracks']} tracks"
    click.echo(f"wrote {files}: {summary['rows']} frames, {count}, units {summary['units']}")
    if summary.get("predicted_left_out"):
        click.echo(f"left out {summary['predicted_left_out']} predicted position(s) (--include-predicted keeps them)",
                   err=True)
