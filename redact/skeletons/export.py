"""Research export of a package's skeletons.jsonl: per-track NumPy arrays (.npz) or COCO keypoint results.

The package is a directory or a .tar read in place (redact.provenance.package.open_package); with trusted keys
it is verified first (redact.provenance.verify) and the bytes exported are checked against the signed hash.

The exported data are what the package holds: pseudonymised personal data, not anonymous
(GDPR Art. 4(5), Recital 26); people can be re-identified from skeletons (GaitPT, arXiv 2308.10623).

.npz (numpy.load, no pickles): `track_ids` [K] int64, `frames` [F] int64 and `times` [F] float64
of every row, `fault` [F] bool (rows fully obscured because processing failed), `units` (0-d str:
"pixels", "frame" or "track"), and per track id: `track_<id>_keypoints` [T,17,3] float32
(x, y, confidence), `track_<id>_frames` [T] int64, `track_<id>_times` [T] float64 seconds,
`track_<id>_boxes` [T,4] float32 x1,y1,x2,y2, `track_<id>_scores` [T] float32,
`track_<id>_observed` [T] bool, and `track_<id>_centre` [T,2] float32 when the rows carry it.
Memory grows with the number of person-frames (about 230 bytes each) since .npz needs whole arrays.

COCO (cocodataset.org keypoint results format, streamed): a list of {image_id (= frame index),
category_id: 1, keypoints: 51 numbers x, y, score per COCO-17 keypoint, score, track_id}, and a
ground-truth-style file with the images (one per row, no pixels) and the person category with the
COCO-17 keypoint names and 1-based skeleton, so pycocotools' COCO.loadRes accepts the results.
COCO keypoints are pixels: rows in frame or track units are refused for this format.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from redact import fsio
from redact.errors import InputError, OutputError, PackageError, VerificationFailed
from redact.formats import skeletons_jsonl
from redact.provenance.contents import PackageContents
from redact.provenance.package import open_package
from redact.provenance.predicate import Predicate
from redact.skeletons.rows import tracks_of
from redact.vision.skeleton import KEYPOINT_NAMES, LINKS_1BASED

FORMATS = ("npz", "coco")
SKELETONS = "skeletons.jsonl"


@dataclass(frozen=True)
class PackageSource:
    """The skeleton lines of a package and what was checked: `lines` streams skeletons.jsonl once;
    with trusted keys the package was verified first, `predicate` / `key_id` are the signed ones and
    the lines come from a copy just re-checked against the signed hash."""

    lines: Iterator[bytes]
    verified: bool
    key_id: str | None = None
    predicate: Predicate | None = None


def _stream(contents: PackageContents) -> Iterator[bytes]:
    """The lines of skeletons.jsonl read through the package contents (verified reads re-check the
    signed hash before the first line is handed out)."""
    if not contents.has(SKELETONS):
        raise PackageError(f"{contents.path}: {SKELETONS} is missing or not a regular file")
    for _, line in contents.lines(SKELETONS):
        yield line


def _stream_unsigned(package: Path) -> Iterator[bytes]:
    """The lines of skeletons.jsonl of a package read without any check (no trusted key given)."""
    with open_package(package) as reader:
        if SKELETONS not in reader.files:
            raise PackageError(f"{package}: {SKELETONS} is missing or not a regular file")
        with reader.open(SKELETONS) as f:
            yield from f


def read_package(package: str | Path, trusted_keys: Sequence | None = None) -> PackageSource:
    """Open PACKAGE (a directory or .tar) for export. With trusted keys (redact.provenance.signing.PublicKey) it
    is verified first (redact.provenance.verify: signature, file set, hashes, log) and VerificationFailed lists
    every problem; without, the lines are read unverified."""
    package = Path(package)
    if not (package.is_dir() or package.is_file()):
        raise InputError(f"{package}: not a package directory or .tar file")
    if not trusted_keys:
        return PackageSource(_stream_unsigned(package), False)
    from redact.provenance.verify import verify_package

    result = verify_package(package, list(trusted_keys))
    if not result.has(SKELETONS):
        raise VerificationFailed([f"{SKELETONS}: not named in the signed statement"])
    return PackageSource(_stream(result), True, result.key_id, result.predicate)


def read_package_lines(package: str | Path, trusted_keys: Sequence | None = None) -> Iterator[bytes]:
    """The lines of PACKAGE/skeletons.jsonl (directory or .tar), verified first when keys are given."""
    return read_package(package, trusted_keys).lines


@dataclass(frozen=True)
class _Row:
    frame: int
    t: float
    status: str
    units: str
    ids: np.ndarray
    boxes: np.ndarray
    scores: np.ndarray
    keypoints: np.ndarray
    observed: np.ndarray
    centres: np.ndarray | None


def _rows(lines: Iterable[bytes]) -> Iterator[_Row]:
    """Parse and check rows: strict decoding (redact.formats.skeletons_jsonl), one units value for the
    whole file, unique frame indices."""
    units = None
    seen: set[int] = set()
    for n, line in enumerate(lines, 1):
        row = skeletons_jsonl.decode_row(line, f"{SKELETONS} line {n}")
        if units is None:
            units = row.units
        elif row.units != units:
            raise PackageError(f"{SKELETONS} line {n}: units {row.units!r} differ from {units!r} of line 1")
        if row.frame in seen:
            raise PackageError(f"{SKELETONS} line {n}: frame {row.frame} appears twice")
        seen.add(row.frame)
        tr = tracks_of(row)
        has = [p.centre is not None for p in row.people]
        centres = np.array([p.centre for p in row.people], np.float64).reshape(-1, 2) if has and all(has) else None
        yield _Row(row.frame, row.t, row.status, row.units, tr.ids, tr.boxes, tr.scores, tr.keypoints, tr.observed,
                   centres)


def _check_out(out: Path, force: bool) -> None:
    if out.exists() and not force:
        raise OutputError(f"{out}: already exists; choose another name or allow overwriting")
    if not out.parent.is_dir():
        raise OutputError(f"{out.parent}: no such directory")


def export_npz(lines: Iterable[bytes], out: str | Path, force: bool = False) -> dict:
    """Write the per-track arrays to out (.npz, compressed) via a temporary name; return a summary."""
    out = Path(out)
    _check_out(out, force)
    frames, times, fault = [], [], []
    per: dict[int, dict[str, list]] = {}
    units = "pixels"
    has_centre = None
    for r in _rows(lines):
        units = r.units
        frames.append(r.frame)
        times.append(r.t)
        fault.append(r.status != "ok")
        if has_centre is None and len(r.ids):
            has_centre = r.centres is not None
        for i, tid in enumerate(r.ids.tolist()):
            d = per.setdefault(int(tid), {"keypoints": [], "frames": [], "times": [], "boxes": [], "scores": [],
                                          "observed": [], "centre": []})
            d["keypoints"].append(r.keypoints[i])
            d["frames"].append(r.frame)
            d["times"].append(r.t)
            d["boxes"].append(r.boxes[i])
            d["scores"].append(r.scores[i])
            d["observed"].append(r.observed[i])
            if r.centres is not None:
                d["centre"].append(r.centres[i])
    arrays: dict[str, np.ndarray] = {
        "track_ids": np.array(sorted(per), np.int64),
        "frames": np.array(frames, np.int64),
        "times": np.array(times, np.float64),
        "fault": np.array(fault, bool),
        "units": np.array(units),
    }
    person_frames = 0
    for tid in sorted(per):
        d = per[tid]
        person_frames += len(d["frames"])
        arrays[f"track_{tid}_keypoints"] = np.array(d["keypoints"], np.float32).reshape(-1, 17, 3)
        arrays[f"track_{tid}_frames"] = np.array(d["frames"], np.int64)
        arrays[f"track_{tid}_times"] = np.array(d["times"], np.float64)
        arrays[f"track_{tid}_boxes"] = np.array(d["boxes"], np.float32).reshape(-1, 4)
        arrays[f"track_{tid}_scores"] = np.array(d["scores"], np.float32)
        arrays[f"track_{tid}_observed"] = np.array(d["observed"], bool)
        if d["centre"]:
            arrays[f"track_{tid}_centre"] = np.array(d["centre"], np.float32).reshape(-1, 2)
    with fsio.atomic_file(out, replace=force) as f:  # a file object, so numpy does not append ".npz"
        np.savez_compressed(f, **arrays)
    return {"format": "npz", "out": str(out), "rows": len(frames), "tracks": len(per),
            "person_frames": person_frames, "units": units}


def _num(v) -> str:
    """Shortest text that reads back as the same float32 (the row's decimal text when it was written so)."""
    s = str(np.float32(v))
    return "0" if s in ("0.0", "-0.0") else s


def coco_categories() -> list[dict]:
    """The COCO person category with the COCO-17 keypoint names and the published 1-based skeleton."""
    return [{"id": 1, "name": "person", "supercategory": "person", "keypoints": list(KEYPOINT_NAMES),
             "skeleton": [list(link) for link in LINKS_1BASED]}]


def export_coco(lines: Iterable[bytes], out: str | Path, gt_out: str | Path | None = None,
                frame_size: tuple[int, int] | None = None, force: bool = False) -> dict:
    """Write COCO keypoint results to out and the images/categories file to gt_out (default:
    out with ".gt.json" in place of ".json"), both streamed via temporary names; return a summary."""
    out = Path(out)
    gt_out = Path(gt_out) if gt_out is not None else default_gt_path(out)
    if gt_out.resolve() == out.resolve():
        raise OutputError("the results and ground-truth files must differ")
    _check_out(out, force)
    _check_out(gt_out, force)
    n_rows = n_people = 0
    # Both via temporary names; the results file is renamed into place last.
    with fsio.atomic_file(out, replace=force) as f_bin, fsio.atomic_file(gt_out, replace=force) as g_bin:
        def f(text: str) -> None:
            f_bin.write(text.encode("utf-8"))

        def g(text: str) -> None:
            g_bin.write(text.encode("utf-8"))

        f("[")
        g('{"info":{"description":"images of a skeleton package (no pixels); '
          'pseudonymised personal data"},"images":[')
        for r in _rows(lines):
            if r.units != "pixels":
                raise InputError(f"format: COCO keypoints are pixels but this package has units={r.units!r}; "
                                 "export it as npz")
            image = {"id": r.frame, "file_name": f"frame_{r.frame:08d}", "frame": r.frame, "t": r.t}
            if frame_size is not None:
                image["width"], image["height"] = int(frame_size[0]), int(frame_size[1])
            g(("," if n_rows else "") + json.dumps(image, allow_nan=False))
            n_rows += 1
            for i in range(len(r.ids)):
                kp = ",".join(_num(v) for v in r.keypoints[i].reshape(-1))
                f(("," if n_people else "") +
                  f'\n{{"image_id":{r.frame},"category_id":1,"keypoints":[{kp}],'
                  f'"score":{_num(r.scores[i])},"track_id":{int(r.ids[i])}}}')
                n_people += 1
        f("\n]\n")
        g('],"annotations":[],"categories":' + json.dumps(coco_categories()) + "}\n")
    return {"format": "coco", "out": str(out), "gt_out": str(gt_out), "rows": n_rows, "results": n_people,
            "units": "pixels"}


def default_gt_path(out: str | Path) -> Path:
    """results.json → results.gt.json (next to the results file)."""
    out = Path(out)
    stem = out.name[:-5] if out.name.lower().endswith(".json") else out.name
    return out.with_name(stem + ".gt.json")


def export_package(package: str | Path, fmt: str, out: str | Path, gt_out: str | Path | None = None,
                   frame_size: tuple[int, int] | None = None, force: bool = False,
                   trusted_keys: Sequence | None = None) -> dict:
    """Export PACKAGE's (directory or .tar) skeletons as fmt ("npz" or "coco") to out; return a summary.

    With trusted_keys the package is verified first (VerificationFailed on any problem) and, for
    coco, frame_size defaults to the signed source width and height.
    """
    if fmt not in FORMATS:
        raise InputError(f"format: {fmt!r} is not one of {', '.join(FORMATS)}")
    out = Path(out)
    pkg = Path(package).resolve()
    for target in (out, None if gt_out is None else Path(gt_out)):
        if target is not None and (target.resolve() == pkg or pkg in target.resolve().parents):
            raise OutputError(f"{target}: would write inside the package (or over it); choose a place outside it")
    if fmt == "npz" and gt_out is not None:
        raise InputError("gt_out: only applies to the coco format")
    src = read_package(package, trusted_keys)
    if fmt == "npz":
        summary = export_npz(src.lines, out, force)
    else:
        if frame_size is None and src.predicate is not None:
            w, h = src.predicate.source.width, src.predicate.source.height
            if w > 0 and h > 0:
                frame_size = (w, h)
        summary = export_coco(src.lines, out, gt_out, frame_size, force)
    summary["verified"] = src.verified
    summary["key_id"] = src.key_id
    return summary
