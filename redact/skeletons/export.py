"""Research export of a package's skeletons.jsonl: per-track NumPy arrays (.npz), COCO keypoint results,
a MOTChallenge-style track file or per-track trajectory CSVs (the last two: redact.skeletons.export_csv).

The package is a directory or a .tar read in place (redact.provenance.package.open_package); with trusted keys
it is verified first (redact.provenance.verify) and the bytes exported are checked against the signed hash.

The exported data are what the package holds: pseudonymised personal data, not anonymous
(GDPR Art. 4(5), Recital 26); people can be re-identified from skeletons (GaitPT, arXiv 2308.10623).

Every export describes itself (`describe`): frame width and height, frame rate, the COCO-17
keypoint names in their order, the coordinate units and system, the source's SHA-256 and the
SHA-256 of the package's signed statement, and whether the package was verified. Without a
trusted key these come from the package's statement read unverified; a package without a
readable statement leaves them unknown.

Each person row is either a detection ("observed": matched to a detection in that frame) or a
position the tracker predicted between detections ("predicted"). The COCO, MOT and trajectory
exports leave predictions out unless asked (include_predicted): a prediction is the tracker's
guess, not a measurement, and mixing the two unmarked skews evaluations. The .npz keeps every row
with its `observed` flag.

.npz (numpy.load with allow_pickle=False: plain arrays only): `track_ids` [K] int64, `frames` [F]
int64 and `times` [F] float64 of every row, `fault` [F] bool (rows fully obscured because
processing failed), `units` (0-d str: "pixels", "frame" or "track"), and per track id:
`track_<id>_keypoints` [T,17,3] float32 (x, y, confidence), `track_<id>_frames` [T] int64,
`track_<id>_times` [T] float64 seconds, `track_<id>_boxes` [T,4] float32 x1,y1,x2,y2,
`track_<id>_scores` [T] float32, `track_<id>_observed` [T] bool, and `track_<id>_centre` [T,2]
float32 when the rows carry it. The description: `keypoint_names` [17] str (COCO-17 order),
`frame_width`, `frame_height` (0-d int64, -1 when unknown), `fps` (0-d float64, -1 when unknown),
`coordinate_units`, `coordinate_system`, `source_sha256`, `statement_sha256` (0-d str, empty when
unknown), `verified` (0-d bool), and `metadata`, the whole description as one JSON object in a
0-d str. Memory grows with the number of person-frames (about 230 bytes each) since .npz needs
whole arrays.

COCO (cocodataset.org keypoint results format, streamed): a list of {image_id (= frame index),
category_id: 1, keypoints: 51 numbers x, y, score per COCO-17 keypoint, score, track_id, state},
and a ground-truth-style file with the images (one per row, no pixels), the person category with
the COCO-17 keypoint names and 1-based skeleton, and the description under "info", so
pycocotools' COCO.loadRes accepts the results. COCO keypoints are pixels: rows in frame or track
units are refused for this format.
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

FORMATS = ("npz", "coco", "mot", "trajectories")
SKELETONS = "skeletons.jsonl"
ENVELOPE = "envelope.json"
#: What the coordinates of each unit mean (redact.skeletons.privacy, PrivacyOptions.coordinates).
COORDINATE_SYSTEMS = {
    "pixels": "source frame pixels; origin at the top-left corner, x to the right, y down",
    "frame": "fractions of the frame width (x) and height (y); origin at the top-left corner, y down",
    "track": "offsets from the person's box centre in that frame divided by the track's scale (median "
             "apparent body height over the track); y down",
}
CAUTION = ("Pseudonymised personal data, not anonymous: people can be re-identified from their gait "
           "and body proportions (GaitPT, arXiv 2308.10623).")




@dataclass(frozen=True)
class PackageSource:
    """The skeleton lines of a package and what was checked: `lines` streams skeletons.jsonl once;
    with trusted keys the package was verified first, `predicate` / `key_id` are the signed ones and
    the lines come from a copy just re-checked against the signed hash."""

    lines: Iterator[bytes]
    verified: bool
    key_id: str | None = None
    predicate: Predicate | None = None
    statement_sha256: str | None = None


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
        predicate, digest = _statement_unverified(package)
        return PackageSource(_stream_unsigned(package), False, None, predicate, digest)
    from redact.provenance.verify import verify_package

    result = verify_package(package, list(trusted_keys))
    if not result.has(SKELETONS):
        raise VerificationFailed([f"{SKELETONS}: not named in the signed statement"])
    return PackageSource(_stream(result), True, result.key_id, result.predicate, result.statement_sha256)


def _statement_unverified(package: Path) -> tuple[Predicate | None, str | None]:
    """The predicate and statement SHA-256 of a package read WITHOUT checking its signature, for the
    export's description only; (None, None) when there is no readable statement."""
    import hashlib

    from redact import jsonio
    from redact.provenance import signing
    from redact.provenance.statement import parse_statement

    try:
        with open_package(package) as reader:
            if ENVELOPE not in reader.files:
                return None, None
            env = jsonio.loads_object(reader.read(ENVELOPE, 16 * 1024 * 1024), ENVELOPE)
            payload = signing.b64decode_any(env.get("payload"))
            return parse_statement(payload).predicate, hashlib.sha256(payload).hexdigest()
    except (PackageError, ValueError, TypeError, AttributeError):
        return None, None


def _fps(predicate: Predicate | None) -> float | None:
    if predicate is None:
        return None
    num, _, den = predicate.source.fps.partition("/")
    try:
        return int(num) / int(den or 1)
    except (ValueError, ZeroDivisionError):
        return None


def describe(src: PackageSource, units: str) -> dict:
    """What an export holds, for the files themselves (see the module docstring); None = unknown."""
    p = src.predicate
    return {
        "kind": "redact skeleton export", "version": 1,
        "verified": src.verified, "key_id": src.key_id,
        "frame_width": p.source.width if p is not None else None,
        "frame_height": p.source.height if p is not None else None,
        "fps": p.source.fps if p is not None else None, "fps_value": _fps(p),
        "keypoint_names": list(KEYPOINT_NAMES),
        "keypoint_order": "COCO-17 (cocodataset.org keypoint format); per keypoint x, y, confidence",
        "coordinate_units": units, "coordinate_system": COORDINATE_SYSTEMS.get(units, units),
        "source_sha256": p.source.sha256 if p is not None else None,
        "statement_sha256": src.statement_sha256,
        "caution": CAUTION,
    }


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


def _describe_arrays(meta: dict) -> dict[str, np.ndarray]:
    """The description as plain arrays (no object arrays, so numpy.load needs no pickles)."""
    def known(v, default):
        return default if v is None else v

    return {
        "keypoint_names": np.array(meta["keypoint_names"], dtype=str),
        "frame_width": np.array(known(meta["frame_width"], -1), np.int64),
        "frame_height": np.array(known(meta["frame_height"], -1), np.int64),
        "fps": np.array(known(meta["fps_value"], -1.0), np.float64),
        "coordinate_units": np.array(meta["coordinate_units"], dtype=str),
        "coordinate_system": np.array(meta["coordinate_system"], dtype=str),
        "source_sha256": np.array(known(meta["source_sha256"], ""), dtype=str),
        "statement_sha256": np.array(known(meta["statement_sha256"], ""), dtype=str),
        "verified": np.array(bool(meta["verified"])),
        "metadata": np.array(json.dumps(meta, sort_keys=True, allow_nan=False), dtype=str),
    }


def export_npz(lines: Iterable[bytes], out: str | Path, force: bool = False,
               source: PackageSource | None = None) -> dict:
    """Write the per-track arrays to out (.npz, compressed) via a temporary name; return a summary.
    `source` supplies the description (see `describe`); without it the description is unknown."""
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
    meta = describe(source or PackageSource(iter(()), False), units)
    arrays.update(_describe_arrays(meta))
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
        # numpy's stub checks **arrays against its allow_pickle: bool too; no key has that name
        np.savez_compressed(f, **arrays)  # type: ignore[arg-type]
    return {"format": "npz", "out": str(out), "rows": len(frames), "tracks": len(per),
            "person_frames": person_frames, "units": units, "metadata": meta}


def _num(v) -> str:
    """Shortest text that reads back as the same float32 (the row's decimal text when it was written so)."""
    s = str(np.float32(v))
    return "0" if s in ("0.0", "-0.0") else s


def coco_categories() -> list[dict]:
    """The COCO person category with the COCO-17 keypoint names and the published 1-based skeleton."""
    return [{"id": 1, "name": "person", "supercategory": "person", "keypoints": list(KEYPOINT_NAMES),
             "skeleton": [list(link) for link in LINKS_1BASED]}]


def export_coco(lines: Iterable[bytes], out: str | Path, gt_out: str | Path | None = None,
                frame_size: tuple[int, int] | None = None, force: bool = False,
                include_predicted: bool = False, source: PackageSource | None = None) -> dict:
    """Write COCO keypoint results to out and the images/categories file to gt_out (default:
    out with ".gt.json" in place of ".json"), both streamed via temporary names; return a summary.
    Each result carries "state" ("observed" or "predicted"); predictions are left out unless
    include_predicted."""
    out = Path(out)
    gt_out = Path(gt_out) if gt_out is not None else default_gt_path(out)
    if gt_out.resolve() == out.resolve():
        raise OutputError("the results and ground-truth files must differ")
    _check_out(out, force)
    _check_out(gt_out, force)
    n_rows = n_people = left_out = 0
    meta = describe(source or PackageSource(iter(()), False), "pixels")
    info = {"description": "images of a skeleton package (no pixels); pseudonymised personal data", **meta,
            "predictions": "included" if include_predicted else "left out"}
    # Both via temporary names; the results file is renamed into place last.
    with fsio.atomic_file(out, replace=force) as f_bin, fsio.atomic_file(gt_out, replace=force) as g_bin:
        def f(text: str) -> None:
            f_bin.write(text.encode("utf-8"))

        def g(text: str) -> None:
            g_bin.write(text.encode("utf-8"))

        f("[")
        g('{"info":' + json.dumps(info, sort_keys=True, allow_nan=False) + ',"images":[')
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
                if not r.observed[i] and not include_predicted:
                    left_out += 1
                    continue
                kp = ",".join(_num(v) for v in r.keypoints[i].reshape(-1))
                state = "observed" if r.observed[i] else "predicted"
                f(("," if n_people else "") +
                  f'\n{{"image_id":{r.frame},"category_id":1,"keypoints":[{kp}],'
                  f'"score":{_num(r.scores[i])},"track_id":{int(r.ids[i])},"state":"{state}"}}')
                n_people += 1
        f("\n]\n")
        g('],"annotations":[],"categories":' + json.dumps(coco_categories()) + "}\n")
    return {"format": "coco", "out": str(out), "gt_out": str(gt_out), "rows": n_rows, "results": n_people,
            "predicted_left_out": left_out, "units": "pixels", "metadata": meta}


def default_gt_path(out: str | Path) -> Path:
    """results.json → results.gt.json (next to the results file)."""
    out = Path(out)
    stem = out.name[:-5] if out.name.lower().endswith(".json") else out.name
    return out.with_name(stem + ".gt.json")


def export_package(package: str | Path, fmt: str, out: str | Path, gt_out: str | Path | None = None,
                   frame_size: tuple[int, int] | None = None, force: bool = False,
                   trusted_keys: Sequence | None = None, include_predicted: bool = False) -> dict:
    """Export PACKAGE's (directory or .tar) skeletons as fmt (one of FORMATS) to out (a file; a new
    folder for "trajectories"); return a summary.

    With trusted_keys the package is verified first (VerificationFailed on any problem) and, for
    coco, frame_size defaults to the signed source width and height. include_predicted: also
    export the positions the tracker predicted between detections (coco, mot, trajectories).
    """
    if fmt not in FORMATS:
        raise InputError(f"format: {fmt!r} is not one of {', '.join(FORMATS)}")
    out = Path(out)
    pkg = Path(package).resolve()
    for target in (out, None if gt_out is None else Path(gt_out)):
        if target is not None and (target.resolve() == pkg or pkg in target.resolve().parents):
            raise OutputError(f"{target}: would write inside the package (or over it); choose a place outside it")
    if fmt != "coco" and gt_out is not None:
        raise InputError("gt_out: only applies to the coco format")
    if include_predicted and fmt == "npz":
        raise InputError("include_predicted: the npz export keeps every row with its observed flag")
    src = read_package(package, trusted_keys)
    if fmt == "npz":
        summary = export_npz(src.lines, out, force, src)
    elif fmt == "coco":
        if frame_size is None and src.verified and src.predicate is not None:
            w, h = src.predicate.source.width, src.predicate.source.height
            if w > 0 and h > 0:
                frame_size = (w, h)
        summary = export_coco(src.lines, out, gt_out, frame_size, force, include_predicted, src)
    else:
        from redact.skeletons import export_csv

        write = export_csv.export_mot if fmt == "mot" else export_csv.export_trajectories
        summary = write(_rows(src.lines), out, force, include_predicted, src)
    summary["verified"] = src.verified
    summary["key_id"] = src.key_id
    return summary
