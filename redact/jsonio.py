"""Strict JSON in and deterministic JSON out, for everything read from or written to a package.

Reading follows RFC 7493 (I-JSON): the size is checked before parsing, duplicate member names,
NaN/Infinity, numbers that overflow to infinity, integers beyond ±(2**53 − 1) and unpaired
surrogates are refused, and the text must be UTF-8 without a byte-order mark. Writing is
compact with sorted keys; it is *not* RFC 8785 canonical JSON, so we hash and sign the exact
bytes written and never re-serialise what was signed.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator
from typing import Any

from redact.errors import PackageError

# I-JSON (RFC 7493 §2.2): integers outside this range cannot be exchanged exactly.
MAX_SAFE_INT = 2**53 - 1
DEFAULT_LIMIT = 16 * 1024 * 1024  # bytes; common practice, large enough for any statement we write
DEFAULT_LINE_LIMIT = 4 * 1024 * 1024  # bytes per JSON line; common practice
MAX_DEPTH = 64  # nesting levels; common practice (Python's parser recurses)


class _Strict(ValueError):
    """Internal: a rule of RFC 7493 was broken; turned into PackageError with the file's name."""


def _pairs(pairs: list[tuple[str, Any]]) -> dict:
    seen: set[str] = set()
    for k, _ in pairs:
        if k in seen:
            raise _Strict(f"duplicate key {k!r}")
        seen.add(k)
    return dict(pairs)


def _constant(name: str):
    raise _Strict(f"{name} is not allowed")


def _float(text: str) -> float:
    x = float(text)
    if not math.isfinite(x):
        raise _Strict(f"number {text} overflows to infinity")
    return x


class FixedNumber(float):
    """A number read with `loads(..., fixed_numbers=True)`: a float that remembers how many decimals
    its text had (-1 when written with an exponent), so fixed-decimal files re-encode exactly."""

    decimals: int


def _fixed_float(text: str) -> FixedNumber:
    x = FixedNumber(_float(text))
    mantissa = text.lower().partition("e")
    x.decimals = -1 if mantissa[1] else len(mantissa[0].partition(".")[2])
    return x


def decimals_of(value: Any) -> int:
    """Decimals of a number read with fixed_numbers=True: 0 for an integer, -1 when unknown."""
    if isinstance(value, bool):
        return -1
    if isinstance(value, int):
        return 0
    return getattr(value, "decimals", -1)


def fixed(x: float, decimals: int) -> str:
    """A number as fixed-decimal JSON text: the one writer of fixed decimals in package files.

    NaN and infinities are refused (RFC 7493 §2.2); a value that rounds to zero is written "0.00",
    never "-0.00" (one rule for negative zero everywhere), so reruns give the same bytes.
    """
    x = float(x)
    if not math.isfinite(x):
        raise ValueError("a non-finite number cannot be written (RFC 7493)")
    s = f"{x:.{decimals}f}"
    return s[1:] if s.startswith("-") and float(s) == 0.0 else s


def _int(text: str) -> int:
    if len(text) > 20:
        raise _Strict("integer out of the I-JSON range")
    x = int(text)
    if abs(x) > MAX_SAFE_INT:
        raise _Strict(f"integer {text} is outside ±(2**53 − 1)")
    return x


def _check_tree(obj: Any, depth: int = 0) -> None:
    """Reject too-deep nesting and strings that are not valid Unicode (lone surrogates)."""
    if depth > MAX_DEPTH:
        raise RecursionError  # reported like the parser's own limit
    if isinstance(obj, str):
        try:
            obj.encode("utf-8")
        except UnicodeEncodeError:
            raise _Strict("string with an unpaired surrogate") from None
    elif isinstance(obj, dict):
        for k, v in obj.items():
            _check_tree(k, depth + 1)
            _check_tree(v, depth + 1)
    elif isinstance(obj, list):
        for v in obj:
            _check_tree(v, depth + 1)


def loads(data: bytes, what: str, limit: int = DEFAULT_LIMIT, fixed_numbers: bool = False) -> Any:
    """Parse one JSON document from bytes under RFC 7493 rules; raises PackageError naming `what`.

    fixed_numbers: numbers with a fraction come back as FixedNumber (see decimals_of)."""
    if not isinstance(data, (bytes, bytearray)):
        raise TypeError("loads takes bytes")
    if len(data) > limit:
        raise PackageError(f"{what}: {len(data)} bytes exceeds the limit of {limit} bytes")
    if data.startswith(b"\xef\xbb\xbf"):
        raise PackageError(f"{what}: starts with a byte-order mark (RFC 7493 §2.1 forbids it)")
    try:
        text = bytes(data).decode("utf-8", errors="strict")
    except UnicodeDecodeError as e:
        raise PackageError(f"{what}: not valid UTF-8 ({e.reason} at byte {e.start})") from None
    try:
        obj = json.loads(text, object_pairs_hook=_pairs, parse_constant=_constant,
                         parse_float=_fixed_float if fixed_numbers else _float, parse_int=_int)
        _check_tree(obj)
    except _Strict as e:
        raise PackageError(f"{what}: {e} (RFC 7493)") from None
    except json.JSONDecodeError as e:
        raise PackageError(f"{what}: invalid JSON ({e.msg} at line {e.lineno} column {e.colno})") from None
    except RecursionError:  # the parser recurses once per level: absurd nesting ends here
        raise PackageError(f"{what}: nesting deeper than {MAX_DEPTH} levels") from None
    except ValueError as e:
        raise PackageError(f"{what}: invalid JSON ({e})") from None
    return obj


def loads_object(data: bytes, what: str, limit: int = DEFAULT_LIMIT, fixed_numbers: bool = False) -> dict:
    """Like loads, but the top level must be a JSON object."""
    obj = loads(data, what, limit, fixed_numbers)
    if not isinstance(obj, dict):
        raise PackageError(f"{what}: expected a JSON object at the top level, got {type(obj).__name__}")
    return obj


def iter_lines(stream, what: str, line_limit: int = DEFAULT_LINE_LIMIT) -> Iterator[tuple[int, bytes]]:
    """Yield (line number from 1, exact line bytes including the final newline) from a binary stream.

    Every line, the last included, must end with a newline; an over-long line is refused before
    it is held in memory in full.
    """
    n = 0
    while True:
        line = stream.readline(line_limit + 1)
        if not line:
            return
        n += 1
        if len(line) > line_limit:
            raise PackageError(f"{what} line {n}: longer than the limit of {line_limit} bytes")
        if not line.endswith(b"\n"):
            raise PackageError(f"{what} line {n}: does not end with a newline (truncated file?)")
        yield n, line


def dumps(obj: Any) -> bytes:
    """Compact UTF-8 JSON with sorted keys and no NaN: the exact bytes we hash and sign."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8")


def dumps_indented(obj: Any) -> bytes:
    """Like dumps but indented by two spaces, for the files people open in an editor (review.json)."""
    return json.dumps(obj, sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False).encode("utf-8")
