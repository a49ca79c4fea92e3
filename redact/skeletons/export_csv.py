"""Research exports as CSV: a MOTChallenge-style track file and per-track skeleton trajectories.

MOT (`mot`): one line per person and frame, no header, the MOTChallenge layout (Milan et al.,
"MOT16: A Benchmark for Multi-Object Tracking", arXiv 1603.00831, §3.3 "Data format"):
`frame, id, bb_left, bb_top, bb_width, bb_height, conf, x, y, z` with frames counted from 1
(our frame index + 1), boxes in source pixels with the top-left pixel at (1, 1) as MOTChallenge's
MATLAB-born devkit counts them (our x1 + 1, y1 + 1; py-motmetrics subtracts the 1 when it reads
the file), conf the detector's person score, and x, y, z set to -1 (no 3-D position).
py-motmetrics reads it with `motmetrics.io.loadtxt(path, fmt="mot15-2D")`. Pixels only: rows in frame
or track units are refused.

Trajectories (`trajectories`): a new folder holding one CSV per track, `trajectory_<id>.csv`, no
header, one line per frame the person appears in: the frame index (0-based, as in the package)
followed by the 17 × (x, y) coordinates of the COCO-17 keypoints in order (35 columns), the layout
skeleton-trajectory anomaly-detection code commonly reads (one file per person, frame then
x1, y1, …, x17, y17); and `metadata.json` describing the columns, units and source (see
redact.skeletons.export.describe). Coordinates are in the package's units. A keypoint the package
does not have (dropped by de-identification, or never seen) is written as 0, 0, as the package
holds it.

Both leave out the positions the tracker predicted between detections unless include_predicted.
Every file is written under a temporary name (the folder as a whole) and renamed into place at
the end, so an interrupted export leaves nothing that looks complete.
"""

from __future__ import annotations

import json
import os
import secrets
import shutil
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from redact.errors import InputError, OutputError

MOT_COLUMNS = ("frame", "id", "bb_left", "bb_top", "bb_width", "bb_height", "conf", "x", "y", "z")
TRAJECTORY_COLUMNS = ("frame",) + tuple(f"{name}_{axis}" for name in (
    "nose", "left_eye", "right_eye", "left_ear", "right_ear", "left_shoulder", "right_shoulder", "left_elbow",
    "right_elbow", "left_wrist", "right_wrist", "left_hip", "right_hip", "left_knee", "right_knee", "left_ankle",
    "right_ankle") for axis in ("x", "y"))


def _num(v) -> str:
    """Shortest text that reads back as the same float32 (the package's decimal text)."""
    s = str(np.float32(v))
    return "0" if s in ("0.0", "-0.0") else s


def export_mot(rows: Iterable, out: str | Path, force: bool = False, include_predicted: bool = False,
               source=None) -> dict:
    """Write the MOTChallenge-style track file (see the module docstring); return a summary."""
    from redact import fsio
    from redact.skeletons.export import _check_out, describe

    out = Path(out)
    _check_out(out, force)
    n_rows = n_lines = left_out = 0
    ids: set[int] = set()
    with fsio.atomic_file(out, replace=force) as raw:
        def write(text: str) -> None:
            raw.write(text.encode("ascii"))

        for r in rows:
            if r.units != "pixels":
                raise InputError(f"format: MOT boxes are pixels but this package has units={r.units!r}; "
                                 "export it as npz or trajectories")
            n_rows += 1
            for i in range(len(r.ids)):
                if not r.observed[i] and not include_predicted:
                    left_out += 1
                    continue
                x1, y1, x2, y2 = (float(v) for v in r.boxes[i])
                write(f"{r.frame + 1},{int(r.ids[i])},{_num(x1 + 1)},{_num(y1 + 1)},{_num(x2 - x1)},"
                      f"{_num(y2 - y1)},{_num(r.scores[i])},-1,-1,-1\n")
                ids.add(int(r.ids[i]))
                n_lines += 1
    meta = describe(source, "pixels") if source is not None else None
    return {"format": "mot", "out": str(out), "rows": n_rows, "lines": n_lines, "tracks": len(ids),
            "predicted_left_out": left_out, "columns": list(MOT_COLUMNS), "units": "pixels", "metadata": meta}


def export_trajectories(rows: Iterable, out: str | Path, force: bool = False, include_predicted: bool = False,
                        source=None) -> dict:
    """Write the folder of per-track trajectory CSVs and metadata.json (see the module docstring)."""
    from redact import fsio
    from redact.skeletons.export import PackageSource, describe

    out = Path(out)
    if os.path.lexists(out):
        raise OutputError(f"{out}: already exists; the trajectories go into a new folder (choose another name)")
    if not out.parent.is_dir():
        raise OutputError(f"{out.parent}: no such directory")
    per: dict[int, list[str]] = {}
    units = None
    n_rows = left_out = 0
    for r in rows:
        units = r.units
        n_rows += 1
        for i in range(len(r.ids)):
            if not r.observed[i] and not include_predicted:
                left_out += 1
                continue
            xy = r.keypoints[i][:, :2].reshape(-1)
            per.setdefault(int(r.ids[i]), []).append(f"{r.frame}," + ",".join(_num(v) for v in xy) + "\n")
    units = units or "pixels"
    meta = describe(source or PackageSource(iter(()), False), units)
    meta.update({"files": "trajectory_<track id>.csv, one per track; no header line",
                 "columns": list(TRAJECTORY_COLUMNS),
                 "frame_column": "the package's frame index, counted from 0",
                 "missing_keypoints": "written as 0, 0 (as the package holds them)",
                 "predictions": "included" if include_predicted else "left out (detections only)"})
    staging = out.with_name(f".{out.name}.tmp-{secrets.token_hex(4)}")
    try:
        staging.mkdir()
        for tid in sorted(per):
            with open(staging / f"trajectory_{tid}.csv", "w", encoding="ascii", newline="\n") as f:
                f.writelines(per[tid])
        (staging / "metadata.json").write_text(json.dumps(meta, indent=2, sort_keys=True, allow_nan=False) + "\n",
                                               encoding="utf-8")
        fsio.rename_new(staging, out)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return {"format": "trajectories", "out": str(out), "rows": n_rows, "tracks": len(per),
            "lines": sum(len(v) for v in per.values()), "predicted_left_out": left_out, "units": units,
            "metadata": meta}
