"""skeletons.jsonl: one JSON line per frame with the people seen or predicted in it.

    {"frame":12,"pts":6144,"t":0.480000,"status":"ok","people":[
      {"id":3,"state":"observed","score":0.912,"box":[x1,y1,x2,y2],"kp":[[x,y,c],…17]}]}

Numbers have fixed decimals (redact.jsonio.fixed) so reruns are byte-identical: coordinates
`decimals` (2 for pixels), confidences and scores 3, time 6. status is "ok", or "fault" for a frame
that could not be processed and was fully obscured; state is "observed" (matched to a detection in
this frame) or "predicted" (coasting). De-identified rows in frame or track units carry
`"units":"frame"|"track"` after status (absent means pixels) and, with the position kept, each
person a `"centre":[x,y]` in frame fractions (5 decimals) after its box. Skeleton data is
pseudonymised, not anonymous.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from typing import Any

from redact import jsonio
from redact.errors import PackageError

NAME = "skeletons.jsonl"
STATUS_OK = "ok"
STATUS_FAULT = "fault"
STATUSES = (STATUS_OK, STATUS_FAULT)
OBSERVED = "observed"
PREDICTED = "predicted"
UNITS = ("pixels", "frame", "track")
NUM_KEYPOINTS = 17  # COCO-17 (cocodataset.org keypoint format)
COORD_DECIMALS = 2
CONF_DECIMALS = 3
TIME_DECIMALS = 6
CENTRE_DECIMALS = 5
MAX_DECIMALS = 8
LINE_LIMIT = jsonio.DEFAULT_LINE_LIMIT
_ROW_KEYS = ("frame", "pts", "t", "status", "units", "people")
_PERSON_KEYS = ("id", "state", "score", "box", "centre", "kp")


@dataclass(frozen=True)
class Person:
    """One person in a row: track id, observed or predicted, score, box x1,y1,x2,y2, 17 × (x, y,
    confidence) and, for track units with the position kept, the box centre in frame fractions."""

    id: int
    state: str
    score: float
    box: tuple[float, float, float, float]
    keypoints: tuple[tuple[float, float, float], ...]
    centre: tuple[float, float] | None = None

    @property
    def observed(self) -> bool:
        return self.state == OBSERVED


@dataclass(frozen=True)
class Row:
    """One line of skeletons.jsonl. `decimals` is the coordinate decimals written (it changes no
    byte of a row without people); `units` "pixels", "frame" or "track"."""

    frame: int
    pts: int | None
    t: float
    status: str
    people: tuple[Person, ...] = ()
    units: str = "pixels"
    decimals: int = COORD_DECIMALS


def encode_row(row: Row) -> bytes:
    """One row as UTF-8 bytes ending in a newline (the only writer of skeletons.jsonl lines)."""
    if row.status not in STATUSES:
        raise ValueError(f"row status {row.status!r} is not one of {', '.join(STATUSES)}")
    if row.units not in UNITS:
        raise ValueError(f"row units {row.units!r} is not one of {', '.join(UNITS)}")
    if not 0 <= row.decimals <= MAX_DECIMALS:
        raise ValueError(f"coordinate decimals {row.decimals} outside 0..{MAX_DECIMALS}")
    with_centre = [p.centre is not None for p in row.people]
    if any(with_centre) and (not all(with_centre) or row.units != "track"):
        raise ValueError("a centre is written for every person of a row in track units, or for none")
    fixed, d = jsonio.fixed, row.decimals
    people = []
    for p in row.people:
        if p.state not in (OBSERVED, PREDICTED):
            raise ValueError(f"person state {p.state!r} is not observed or predicted")
        if len(p.box) != 4 or len(p.keypoints) != NUM_KEYPOINTS:
            raise ValueError("a person needs a 4-number box and 17 keypoints")
        box = ",".join(fixed(v, d) for v in p.box)
        kp = ",".join(f"[{fixed(x, d)},{fixed(y, d)},{fixed(c, CONF_DECIMALS)}]" for x, y, c in p.keypoints)
        centre = "" if p.centre is None else \
            f',"centre":[{fixed(p.centre[0], CENTRE_DECIMALS)},{fixed(p.centre[1], CENTRE_DECIMALS)}]'
        people.append(f'{{"id":{int(p.id)},"state":"{p.state}","score":{fixed(p.score, CONF_DECIMALS)},'
                      f'"box":[{box}]{centre},"kp":[{kp}]}}')
    pts = "null" if row.pts is None else str(int(row.pts))
    units = "" if row.units == "pixels" else f',"units":"{row.units}"'
    return (f'{{"frame":{int(row.frame)},"pts":{pts},"t":{fixed(row.t, TIME_DECIMALS)},"status":"{row.status}"'
            f'{units},"people":[{",".join(people)}]}}\n').encode()


def _int(v: Any, what: str, nullable: bool = False) -> int | None:
    if v is None and nullable:
        return None
    if isinstance(v, bool) or not isinstance(v, int):
        raise PackageError(f"{what}: must be an integer")
    return v


def _nums(v: Any, n: int, what: str) -> tuple[float, ...]:
    if not isinstance(v, list) or len(v) != n or any(isinstance(x, bool) or not isinstance(x, (int, float))
                                                     for x in v):
        raise PackageError(f"{what}: must be {n} numbers")
    return tuple(float(x) for x in v)


def _keys(d: dict, allowed: tuple[str, ...], optional: set[str], what: str) -> None:
    keys = tuple(d)
    extra = [k for k in keys if k not in allowed]
    if extra:
        raise PackageError(f"{what}: unexpected field(s) {', '.join(extra)}")
    missing = [k for k in allowed if k not in d and k not in optional]
    if missing:
        raise PackageError(f"{what}: missing field(s) {', '.join(missing)}")


def decode_row(line: bytes | str, what: str = f"{NAME} line") -> Row:
    """Parse one row strictly (RFC 7493 via redact.jsonio, fields and types checked) and require
    that it is exactly the line encode_row writes for it; PackageError otherwise."""
    data = line.encode("utf-8") if isinstance(line, str) else bytes(line)
    d = jsonio.loads_object(data, what, LINE_LIMIT, fixed_numbers=True)
    _keys(d, _ROW_KEYS, {"units"}, what)
    frame = _int(d["frame"], f"{what}: frame")
    pts = _int(d["pts"], f"{what}: pts", nullable=True)
    t = d["t"]
    if isinstance(t, bool) or not isinstance(t, (int, float)):
        raise PackageError(f"{what}: t must be a number")
    status, units = d["status"], d.get("units", "pixels")
    if status not in STATUSES:
        raise PackageError(f"{what}: status must be one of {', '.join(STATUSES)}")
    if "units" in d and units not in ("frame", "track"):
        raise PackageError(f"{what}: units must be frame or track when given (pixels is written as no units)")
    if not isinstance(d["people"], list):
        raise PackageError(f"{what}: people must be a list")
    people, decimals = [], COORD_DECIMALS
    for i, p in enumerate(d["people"]):
        pw = f"{what}: person {i}"
        if not isinstance(p, dict):
            raise PackageError(f"{pw}: must be an object")
        _keys(p, _PERSON_KEYS, {"centre"}, pw)
        if p["state"] not in (OBSERVED, PREDICTED):
            raise PackageError(f"{pw}: state must be observed or predicted")
        kp = p["kp"]
        if not isinstance(kp, list) or len(kp) != NUM_KEYPOINTS:
            raise PackageError(f"{pw}: kp must hold {NUM_KEYPOINTS} keypoints")
        if not isinstance(p["box"], list) or not p["box"]:
            raise PackageError(f"{pw}: box must be 4 numbers")
        decimals = jsonio.decimals_of(p["box"][0]) if i == 0 else decimals
        score = p["score"]
        if isinstance(score, bool) or not isinstance(score, (int, float)):
            raise PackageError(f"{pw}: score must be a number")
        pid = _int(p["id"], f"{pw}: id")
        box = _nums(p["box"], 4, f"{pw}: box")
        keypoints = tuple(_nums(k, 3, f"{pw}: keypoint {j}") for j, k in enumerate(kp))
        centre = None if "centre" not in p else _nums(p["centre"], 2, f"{pw}: centre")
        people.append(Person(pid, p["state"], float(score), box, keypoints, centre))  # type: ignore[arg-type]
    if not 0 <= decimals <= MAX_DECIMALS:
        raise PackageError(f"{what}: coordinates must have 0..{MAX_DECIMALS} fixed decimals")
    with_centre = [p.centre is not None for p in people]
    if any(with_centre) and (not all(with_centre) or units != "track"):
        raise PackageError(f"{what}: a centre is given for every person of a row in track units, or for none")
    row = Row(frame, pts, float(t), status, tuple(people), units, decimals)  # type: ignore[arg-type]
    if encode_row(row) != data:
        raise PackageError(f"{what}: not in the exact format this tool writes (fixed decimals, key order, "
                           "no spaces, no negative zero)")
    return row


def read_rows(lines: Iterable[bytes | str], what: str = NAME) -> Iterator[Row]:
    """Decode lines lazily, naming the line of any problem; a blank line is an error."""
    for n, line in enumerate(lines, 1):
        yield decode_row(line, f"{what} line {n}")


def read_stream(stream, what: str = NAME) -> Iterator[Row]:
    """Decode a binary stream of skeletons.jsonl (every line must end in a newline)."""
    for n, line in jsonio.iter_lines(stream, what, LINE_LIMIT):
        yield decode_row(line, f"{what} line {n}")
