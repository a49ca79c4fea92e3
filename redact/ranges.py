"""Frame numbers (or track ids) → inclusive [first, last] ranges, and their short text form.

The log, the plan's record of what applied where, the audit's findings and the report all say
"frames 3, 7-9, 12"; they share this one implementation so they cannot disagree on where a
range ends. A foundation module: it imports nothing of ours.
"""

from __future__ import annotations

from collections.abc import Iterable


class RangeBuilder:
    """Collects numbers given in non-decreasing order into inclusive ranges, as they come.

    gap: a number at most this far after the end of the last range extends it (1 = only
    consecutive numbers join; a larger gap joins runs with holes, e.g. a scan of every k-th frame).
    A repeat of a number already in the last range changes nothing; a number before the last
    range starts a range of its own (callers give frames in order, so this does not happen in a run).
    """

    def __init__(self, gap: int = 1):
        if gap < 1:
            raise ValueError(f"gap must be at least 1, got {gap}")
        self.gap = int(gap)
        self.ranges: list[list[int]] = []

    def add(self, n: int) -> None:
        n = int(n)
        r = self.ranges
        if r and r[-1][0] <= n <= r[-1][1]:
            return
        if r and n - r[-1][1] <= self.gap:
            r[-1][1] = n
        else:
            r.append([n, n])

    def count(self) -> int:
        """How many numbers the ranges cover (holes joined by a gap > 1 included)."""
        return sum(b - a + 1 for a, b in self.ranges)


def frame_ranges(numbers: Iterable[int], gap: int = 1) -> list[list[int]]:
    """Sorted numbers → inclusive [first, last] ranges (see RangeBuilder for gap); repeats are ignored."""
    b = RangeBuilder(gap)
    for n in numbers:
        b.add(n)
    return b.ranges


def format_ranges(numbers: Iterable[int], dash: str = "-") -> str:
    """Numbers (any order, repeats allowed) as compact text: [1, 2, 3, 5] → "1-3, 5"."""
    return ", ".join(str(a) if a == b else f"{a}{dash}{b}" for a, b in frame_ranges(sorted(set(numbers))))
