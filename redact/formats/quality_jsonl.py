"""quality.jsonl: the per-frame measures behind the review flags, one JSON line per frame.

    {"frame":12,"t":0.480000,"luma_mean":90.50,"luma_std":20.25,"sharpness":300.00,"people":2,
     "observed":2,"predicted":0,"mean_conf":0.900,"count_drop":0,"fault":false,"reasons":[]}

Fixed decimals so reruns are byte-identical: time 6, luma and sharpness 2, confidence 3; null for a
measure a frame does not have (no usable image, nobody observed). What the measures mean and which
rules flag a frame: redact.redaction.quality.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from redact import jsonio
from redact.errors import PackageError

NAME = "quality.jsonl"
LINE_LIMIT = 64 * 1024  # bytes; a line is about 200 (common practice)
_KEYS = ("frame", "t", "luma_mean", "luma_std", "sharpness", "people", "observed", "predicted", "mean_conf",
         "count_drop", "fault", "reasons")


@dataclass(frozen=True)
class FrameQuality:
    """The measures of one frame. Image measures are None for a frame without a usable image;
    mean_conf is None when nobody was observed. reasons: sorted names of the rules it broke."""

    frame: int
    t: float
    luma_mean: float | None
    luma_std: float | None
    sharpness: float | None
    people: int
    observed: int
    predicted: int
    mean_conf: float | None
    count_drop: int
    fault: bool = False
    reasons: tuple[str, ...] = ()


def _num(x: float | None, decimals: int) -> str:
    return "null" if x is None else jsonio.fixed(x, decimals)


def encode_quality_line(q: FrameQuality) -> bytes:
    """One line of quality.jsonl (UTF-8, newline-terminated): the only writer of the file's lines."""
    reasons = ",".join(jsonio.dumps(r).decode("utf-8") for r in q.reasons)
    line = (f'{{"frame":{int(q.frame)},"t":{_num(q.t, 6)},"luma_mean":{_num(q.luma_mean, 2)},'
            f'"luma_std":{_num(q.luma_std, 2)},"sharpness":{_num(q.sharpness, 2)},"people":{int(q.people)},'
            f'"observed":{int(q.observed)},"predicted":{int(q.predicted)},"mean_conf":{_num(q.mean_conf, 3)},'
            f'"count_drop":{int(q.count_drop)},"fault":{"true" if q.fault else "false"},"reasons":[{reasons}]}}\n')
    return line.encode("utf-8")


def _opt_num(v: Any, what: str) -> float | None:
    if v is None:
        return None
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise PackageError(f"{what}: must be a number or null")
    return float(v)


def decode_quality_line(line: bytes, what: str = f"{NAME} line") -> FrameQuality:
    """Parse one line strictly and require the exact bytes encode_quality_line writes for it."""
    d = jsonio.loads_object(bytes(line), what, LINE_LIMIT)
    if tuple(d) != _KEYS:
        raise PackageError(f"{what}: expected exactly the fields {', '.join(_KEYS)} in that order")
    for k in ("frame", "people", "observed", "predicted", "count_drop"):
        if isinstance(d[k], bool) or not isinstance(d[k], int) or d[k] < 0:
            raise PackageError(f"{what}: {k} must be a non-negative integer")
    t = _opt_num(d["t"], f"{what}: t")
    if t is None:
        raise PackageError(f"{what}: t must be a number")
    if not isinstance(d["fault"], bool):
        raise PackageError(f"{what}: fault must be true or false")
    if not isinstance(d["reasons"], list) or not all(isinstance(r, str) and r for r in d["reasons"]):
        raise PackageError(f"{what}: reasons must be a list of names")
    q = FrameQuality(d["frame"], t, _opt_num(d["luma_mean"], f"{what}: luma_mean"),
                     _opt_num(d["luma_std"], f"{what}: luma_std"), _opt_num(d["sharpness"], f"{what}: sharpness"),
                     d["people"], d["observed"], d["predicted"], _opt_num(d["mean_conf"], f"{what}: mean_conf"),
                     d["count_drop"], d["fault"], tuple(d["reasons"]))
    if encode_quality_line(q) != bytes(line):
        raise PackageError(f"{what}: not in the exact format this tool writes")
    return q


def read_quality(stream, what: str = NAME) -> Iterator[FrameQuality]:
    """Decode a binary stream of quality.jsonl line by line, naming the line of any problem."""
    for n, line in jsonio.iter_lines(stream, what, LINE_LIMIT):
        yield decode_quality_line(line, f"{what} line {n}")
