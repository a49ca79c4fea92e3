"""What `process` obscured in every frame, stored so that a copy can be rendered again without the model.

`regions.jsonl.gz` (a file of the signed package, see docs/review.md for why it is signed and
kept in the package) holds the pipeline's final per-frame obscure records
(redact.redaction.obscure.ObscureRecord), compactly. It is gzip (RFC 1952; no file name, time 0,
so reruns give the same bytes) of JSON lines: a header line, then one line per run of consecutive
frames whose records are identical:

    {"kind":"redact-regions","version":2,"width":W,"height":H,"subpixel":16,"style":"figure",...}
    {"f":[first,last],"under":[...],"fig":[...],"over":[...],"kept":[...]}

`under` and `over` are the record's regions in rendering order (under and over the stick
figures); each has its reasons (`why`: kind person/lookback/plan/fault/motion/review with track
id, state, plan entry, label, detail) and one geometry:

    {"g":"poly","rel":false,"p":[[x,y,x,y,...],...],"r":[x0,y0,x1,y1],"s":size}   a person's region
    {"g":"mask","r":[x0,y0,x1,y1],"runs":[n0,n1,...],"s":size}                    plan areas (run lengths)
    {"g":"box","r":[x0,y0,x1,y1],"s":size}                                        whole-pixel rectangle
    {"g":"frame"}                                                                   the whole frame

Polygons are whole numbers of 1/16 pixel: the rasteriser (redact.redaction.regions) rounds every
vertex to 1/16 px (OpenCV fillPoly with shift=4), so the stored values give the same pixels.
`rel` says whether they are relative to the rectangle's corner (how masked styles rasterise) or
absolute (the solid fill's fast path). `fig` holds the stick-figure points as drawn (whole
pixels, null for a point not drawn). Mask runs alternate unmasked/masked pixel counts over the
rectangle row by row, starting with unmasked. Person positions are the same information as the
skeleton rows; skeleton data is pseudonymised, not anonymous.
"""

from __future__ import annotations

import gzip
import math
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, TypeGuard

import numpy as np

from redact import jsonio
from redact.errors import PackageError, RedactError
from redact.redaction.obscure import BoxArea, MaskArea, ObscureRecord, ObscureRegion, Reason, WholeFrame
from redact.redaction.regions import Region

REGIONS = "regions.jsonl.gz"
KIND = "redact-regions"
VERSION = 2
SUBPIXEL = 16
LINE_LIMIT = 16 * 1024 * 1024  # bytes per line (common practice: many people, long runs stay far below)
GEOMETRIES = ("poly", "mask", "box", "frame")
_REASON_KEYS = (("id", "track_id"), ("state", "state"), ("entry", "entry"), ("label", "label"), ("detail", "detail"))


def solid_fill(render) -> bool:
    """Whether the style's regions are painted straight into the frame (absolute vertices)."""
    return render.style in ("figure", "fill")


# ---- encoding ---------------------------------------------------------------------------------

def _poly_ints(region: Region, relative: bool) -> list[list[int]]:
    x0, y0 = region.rect[0], region.rect[1]
    out = []
    for p in region.polygons:
        q = (p - (x0, y0)) if relative else p
        out.append(np.round(q * SUBPIXEL).astype(np.int64).ravel().tolist())
    return out


def _runs(crop: np.ndarray) -> list[int]:
    flat = np.ascontiguousarray(crop, bool).ravel()
    if not flat.size:
        return []
    change = np.flatnonzero(np.diff(flat.astype(np.int8))) + 1
    runs = np.diff(np.concatenate([[0], change, [flat.size]])).tolist()
    return [0] + runs if flat[0] else runs


def _reasons(reasons: tuple[Reason, ...]) -> list[dict]:
    out = []
    for w in reasons:
        d: dict = {"k": w.kind}
        for key, attr in _REASON_KEYS:
            v = getattr(w, attr)
            if v is not None:
                d[key] = v
        out.append(d)
    return out


def encode_region(region: ObscureRegion, relative: bool) -> dict:
    """One obscured region as plain JSON values (see the module doc)."""
    g = region.geometry
    why = _reasons(region.reasons)
    if isinstance(g, WholeFrame):
        return {"g": "frame", "why": why}
    if isinstance(g, Region):
        return {"g": "poly", "why": why, "rel": bool(relative), "p": _poly_ints(g, relative), "r": list(g.rect),
                "s": float(g.size)}
    if isinstance(g, MaskArea):
        return {"g": "mask", "why": why, "r": list(g.rect), "runs": _runs(g.crop), "s": float(g.size)}
    if isinstance(g, BoxArea):
        return {"g": "box", "why": why, "r": list(g.rect), "s": float(g.size)}
    raise RedactError(f"cannot store a region of kind {type(g).__name__}")


def figure_points(keypoints: np.ndarray, threshold: float, shape: tuple[int, ...]) -> list[list]:
    """The points a stick figure draws for keypoints [M,17,3] (as redact.redaction.render.StickFigure
    rounds them): [x, y] whole pixels, or None for a point it does not draw."""
    kp = np.asarray(keypoints, np.float64).reshape(-1, 17, 3)
    lim = 4 * max(shape[0], shape[1])
    drawn = (np.isfinite(kp).all(axis=2) & (kp[:, :, 2] >= threshold)).tolist()
    xy = np.rint(np.clip(np.nan_to_num(kp[:, :, :2]), -lim, lim)).astype(np.int64).tolist()
    return [[p if ok else None for p, ok in zip(pts, oks)] for pts, oks in zip(xy, drawn)]


def encode_record(record: ObscureRecord, render) -> bytes:
    """The JSON of one record without its frame number (runs of equal records share a line)."""
    rel = not solid_fill(render)
    doc = {"under": [encode_region(r, rel) for r in record.under],
           "fig": figure_points(record.figures, render.figure_threshold, (record.height, record.width)),
           "over": [encode_region(r, rel) for r in record.over], "kept": list(record.kept_ids)}
    return jsonio.dumps(doc)


class RecordStore:
    """Writes regions.jsonl.gz from the pipeline's final obscure records, given in frame order.

    Use as a context manager; `write(record)` for every frame. Runs of frames with identical
    records become one line. Memory: one line."""

    def __init__(self, path: Path, width: int, height: int, render) -> None:
        self.path = Path(path)
        self.render = render
        self._run: tuple[int, int, bytes] | None = None
        self._next = 0
        self._raw = open(self.path, "xb")
        self._out = gzip.GzipFile(filename="", mode="wb", fileobj=self._raw, mtime=0)
        header = {"kind": KIND, "version": VERSION, "width": int(width), "height": int(height),
                  "subpixel": SUBPIXEL, "style": render.style, "figure_threshold": render.figure_threshold}
        self._out.write(jsonio.dumps(header) + b"\n")

    def __enter__(self) -> RecordStore:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self._out.close()
            self._raw.close()

    def write(self, record: ObscureRecord) -> None:
        if record.frame != self._next:
            raise RedactError(f"{REGIONS}: frame {record.frame} arrived, frame {self._next} was expected")
        self._next += 1
        data = encode_record(record, self.render)
        if self._run is not None and self._run[2] == data:
            self._run = (self._run[0], record.frame, data)
            return
        self._flush()
        self._run = (record.frame, record.frame, data)

    def _flush(self) -> None:
        if self._run is not None:
            a, b, data = self._run
            self._out.write(b'{"f":[%d,%d],' % (a, b) + data[1:] + b"\n")
        self._run = None

    def close(self) -> None:
        self._flush()
        self._out.close()
        self._raw.close()


# ---- decoding ---------------------------------------------------------------------------------

def _int_list(v, n: int | None = None) -> TypeGuard[list[int]]:
    return isinstance(v, list) and (n is None or len(v) == n) and all(isinstance(x, int) and not isinstance(x, bool)
                                                                      for x in v)


def _decode_region(d, where: str, w: int, h: int) -> ObscureRegion:
    if not isinstance(d, dict) or d.get("g") not in GEOMETRIES or not isinstance(d.get("why"), list) or not d["why"]:
        raise PackageError(f"{where}: not a stored region")
    try:
        why = tuple(Reason(x["k"], **{attr: x.get(key) for key, attr in _REASON_KEYS}) for x in d["why"])
    except (KeyError, TypeError, RedactError) as e:
        raise PackageError(f"{where}: bad reasons ({e})") from None
    if d["g"] == "frame":
        return ObscureRegion(WholeFrame(), why)
    r = d.get("r")
    size = d.get("s")
    if not (_int_list(r, 4) and 0 <= r[0] <= r[2] <= w and 0 <= r[1] <= r[3] <= h
            and isinstance(size, (int, float)) and not isinstance(size, bool) and math.isfinite(size)):
        raise PackageError(f"{where}: rectangle outside the {w}×{h} frame or bad size")
    rect = (r[0], r[1], r[2], r[3])
    if d["g"] == "box":
        return ObscureRegion(BoxArea(rect, float(size)), why)
    if d["g"] == "mask":
        runs = d.get("runs")
        n = (r[2] - r[0]) * (r[3] - r[1])
        if not (_int_list(runs) and all(x >= 0 for x in runs) and sum(runs) == n):
            raise PackageError(f"{where}: mask runs do not cover its rectangle")
        vals = np.zeros(len(runs), bool)
        vals[1::2] = True
        crop = np.repeat(vals, runs).reshape(r[3] - r[1], r[2] - r[0])
        return ObscureRegion(MaskArea(rect, crop, float(size)), why)
    polys_in = d.get("p")
    if not (isinstance(polys_in, list) and isinstance(d.get("rel"), bool)
            and all(_int_list(p) and len(p) >= 6 and len(p) % 2 == 0 for p in polys_in)):
        raise PackageError(f"{where}: malformed polygon")
    off = (r[0], r[1]) if d["rel"] else (0, 0)
    polys = tuple(np.asarray(p, np.float64).reshape(-1, 2) / SUBPIXEL + off for p in polys_in)
    return ObscureRegion(Region(polys, rect, float(size)), why)


def _decode_figures(items, where: str) -> np.ndarray:
    if not isinstance(items, list):
        raise PackageError(f"{where}: figures must be a list")
    kp = np.full((len(items), 17, 3), np.nan, np.float32)
    for i, person in enumerate(items):
        if not isinstance(person, list) or len(person) != 17:
            raise PackageError(f"{where}: a figure needs 17 points")
        for j, pt in enumerate(person):
            if pt is None:
                continue
            if not _int_list(pt, 2):
                raise PackageError(f"{where}: a figure point must be [x, y] or null")
            kp[i, j] = (pt[0], pt[1], 1.0)
    return kp


@dataclass(frozen=True)
class StoredRegions:
    """A parsed regions.jsonl.gz: its header and one ObscureRecord per frame."""

    header: dict
    records: tuple[ObscureRecord, ...]

    @property
    def width(self) -> int:
        return int(self.header["width"])

    @property
    def height(self) -> int:
        return int(self.header["height"])

    @property
    def frames(self) -> tuple[ObscureRecord, ...]:
        return self.records

    def iter_records(self) -> Iterator[ObscureRecord]:
        return iter(self.records)


def parse_regions(stream: BinaryIO, frames: int) -> StoredRegions:
    """Read and check regions.jsonl.gz from a binary stream of its compressed bytes: header,
    contiguous runs covering frames 0..frames-1, every region well formed. PackageError otherwise."""
    try:
        return _parse(gzip.GzipFile(fileobj=stream, mode="rb"), frames)
    except (OSError, EOFError, ValueError) as e:  # not gzip, truncated, bad CRC
        raise PackageError(f"{REGIONS}: cannot be decompressed ({e})") from None


def _parse(stream, frames: int) -> StoredRegions:
    header = None
    out: list[ObscureRecord] = []
    for n, line in jsonio.iter_lines(stream, REGIONS, LINE_LIMIT):
        doc = jsonio.loads_object(line, f"{REGIONS} line {n}", LINE_LIMIT)
        if header is None:
            if doc.get("kind") != KIND or doc.get("version") != VERSION or doc.get("subpixel") != SUBPIXEL \
                    or not all(isinstance(doc.get(k), int) and doc[k] > 0 for k in ("width", "height")):
                raise PackageError(f"{REGIONS}: not a version {VERSION} regions file")
            header = doc
            w, h = int(doc["width"]), int(doc["height"])
            continue
        where = f"{REGIONS} line {n}"
        f = doc.get("f")
        if not (_int_list(f, 2) and set(doc) == {"f", "under", "fig", "over", "kept"}
                and isinstance(doc["under"], list) and isinstance(doc["over"], list) and _int_list(doc["kept"])):
            raise PackageError(f"{where}: expected f, under, fig, over, kept")
        if f[0] != len(out) or f[1] < f[0] or f[1] >= frames:
            raise PackageError(f"{where}: frames {f} do not follow frame {len(out) - 1} within {frames} frames")
        under = tuple(_decode_region(x, f"{where} under[{k}]", w, h) for k, x in enumerate(doc["under"]))
        over = tuple(_decode_region(x, f"{where} over[{k}]", w, h) for k, x in enumerate(doc["over"]))
        figures = _decode_figures(doc["fig"], where)
        for i in range(f[0], f[1] + 1):
            out.append(ObscureRecord(i, w, h, under, figures, over, tuple(doc["kept"])))
    if header is None:
        raise PackageError(f"{REGIONS}: empty")
    if len(out) != frames:
        raise PackageError(f"{REGIONS}: covers {len(out)} frames, the package has {frames}")
    return StoredRegions(header, tuple(out))
