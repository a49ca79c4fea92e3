"""The review of one redacted copy: who reviewed, each flagged range's status and note, the
corrections drawn, and which frames were actually shown on screen.

Plain frozen values, validated when built from what the page sends (`ReviewState.from_doc`), so
the server never stores anything it has not checked. Corrections are a redaction plan
(docs/plan-format.md) holding only `moving_boxes`, `regions` and `obscure_frames`: they add
obscured pixels and can never reveal anything. Notes and names end up in a signed log that is
disclosed with the copy: the page warns that notes must not contain personal data.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace

from redact.errors import InputError, PlanError
from redact.redaction.plan import PLAN_VERSION, parse_plan

STATUSES = {"not_checked": "not yet checked", "checked": "checked, nothing missed", "corrected": "corrected"}
MAX_NAME = 200
MAX_NOTE = 2000
CORRECTION_KEYS = ("moving_boxes", "regions", "obscure_frames")


@dataclass(frozen=True)
class RangeReview:
    """One flagged range (inclusive frames, reason codes) and what the reviewer said about it."""

    start: int
    end: int
    reasons: tuple[str, ...]
    status: str = "not_checked"
    note: str = ""

    def record(self) -> dict:
        return {"frames": [self.start, self.end], "reasons": list(self.reasons), "status": self.status,
                "status_words": STATUSES[self.status], "note": self.note}


def frame_runs(frames: set[int] | frozenset[int]) -> list[list[int]]:
    """Frame numbers → sorted inclusive [first, last] runs."""
    out: list[list[int]] = []
    for i in sorted(frames):
        if out and i == out[-1][1] + 1:
            out[-1][1] = i
        else:
            out.append([i, i])
    return out


@dataclass(frozen=True)
class ReviewState:
    """The whole review as the page edits it; `frames` is the copy's frame count."""

    frames: int
    ranges: tuple[RangeReview, ...]
    reviewer: str = ""
    corrections: dict = field(default_factory=dict)
    watched: frozenset[int] = frozenset()

    @property
    def whole_video_watched(self) -> bool:
        return self.frames > 0 and len(self.watched) == self.frames

    @property
    def ranges_checked(self) -> int:
        return sum(r.status != "not_checked" for r in self.ranges)

    @property
    def correction_count(self) -> int:
        return sum(len(self.corrections.get(k, [])) for k in CORRECTION_KEYS)

    def plan_bytes(self) -> bytes | None:
        """The corrections as a redaction plan file (None when there are none)."""
        if not self.correction_count:
            return None
        doc = {"version": PLAN_VERSION, "note": "corrections drawn during review",
               **{k: self.corrections[k] for k in CORRECTION_KEYS if self.corrections.get(k)}}
        return (json.dumps(doc, sort_keys=True, indent=1, ensure_ascii=False) + "\n").encode("utf-8")

    def plan(self, info):
        """The corrections parsed as a Plan for a video (None when there are none); PlanError when invalid."""
        data = self.plan_bytes()
        return None if data is None else parse_plan(data, info, name="corrections.json")

    def watch(self, runs) -> ReviewState:
        """A new state with the frames of `runs` ([[first, last], …]) counted as shown on screen."""
        got = set(self.watched)
        for r in _list(runs, "watched", 100_000):
            ok = isinstance(r, list) and len(r) == 2 and all(_is_int(v) for v in r)
            if not (ok and 0 <= r[0] <= r[1] < self.frames):
                raise InputError(f"watched: expected [first, last] within 0..{self.frames - 1}")
            got.update(range(r[0], r[1] + 1))
        return replace(self, watched=frozenset(got))

    def updated(self, doc: dict, info) -> ReviewState:
        """A new state from the page's document {reviewer, ranges: [{status, note}], corrections};
        InputError (one line naming the field) when anything is not acceptable."""
        if not isinstance(doc, dict):
            raise InputError("review: expected a JSON object")
        unknown = set(doc) - {"reviewer", "ranges", "corrections"}
        if unknown:
            raise InputError(f"review: unknown field(s) {', '.join(sorted(unknown))}")
        reviewer = doc.get("reviewer", self.reviewer)
        if not isinstance(reviewer, str) or len(reviewer) > MAX_NAME:
            raise InputError(f"review: reviewer must be a text of at most {MAX_NAME} characters")
        ranges = self.ranges
        if "ranges" in doc:
            items = _list(doc["ranges"], "ranges", len(self.ranges))
            if len(items) != len(self.ranges):
                raise InputError(f"review: ranges: expected {len(self.ranges)} entries, got {len(items)}")
            new = []
            for k, (old, item) in enumerate(zip(self.ranges, items)):
                if not isinstance(item, dict) or set(item) - {"status", "note"}:
                    raise InputError(f"review: ranges[{k}]: expected {{status, note}}")
                status = item.get("status", old.status)
                note = item.get("note", old.note)
                if status not in STATUSES:
                    raise InputError(f"review: ranges[{k}].status: one of {', '.join(STATUSES)}")
                if not isinstance(note, str) or len(note) > MAX_NOTE:
                    raise InputError(f"review: ranges[{k}].note: a text of at most {MAX_NOTE} characters")
                new.append(replace(old, status=status, note=note))
            ranges = tuple(new)
        corrections = self.corrections
        if "corrections" in doc:
            c = doc["corrections"]
            if not isinstance(c, dict) or set(c) - set(CORRECTION_KEYS):
                raise InputError(f"review: corrections: an object with only {', '.join(CORRECTION_KEYS)}")
            corrections = {k: c[k] for k in CORRECTION_KEYS if c.get(k)}
        state = replace(self, reviewer=reviewer.strip(), ranges=ranges, corrections=corrections)
        try:
            state.plan(info)
        except PlanError as e:
            raise InputError(f"review: corrections: {e}") from None
        return state

    def record(self) -> dict:
        """Everything about the review for the signed log (notes and name as written)."""
        return {"reviewer": self.reviewer, "ranges": [r.record() for r in self.ranges],
                "ranges_checked": self.ranges_checked, "ranges_total": len(self.ranges),
                "corrections": self.correction_count, "whole_video_watched": self.whole_video_watched,
                "frames_watched": len(self.watched), "frames": self.frames,
                "frames_not_watched": frame_runs(frozenset(range(self.frames)) - self.watched)[:1000]}

    def page_doc(self) -> dict:
        return {"reviewer": self.reviewer, "ranges": [{"status": r.status, "note": r.note} for r in self.ranges],
                "corrections": self.corrections, "frames_watched": len(self.watched),
                "whole_video_watched": self.whole_video_watched}


def _is_int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _list(v, what: str, limit: int) -> list:
    if not isinstance(v, list):
        raise InputError(f"review: {what}: expected a list")
    if len(v) > limit:
        raise InputError(f"review: {what}: at most {limit} entries")
    return v


def summary_line(review: dict) -> str:
    """One line for people, e.g. "4 of 4 ranges checked by A. Reviewer; 2 corrections; whole video watched: yes"."""
    checked, total = review.get("ranges_checked"), review.get("ranges_total")
    who = review.get("reviewer") or "an unnamed reviewer"
    watched = "yes" if review.get("whole_video_watched") is True else "no (not watched in full)"
    n = review.get("corrections")
    return (f"{checked} of {total} ranges checked by {who}; {n} correction{'' if n == 1 else 's'}; "
            f"whole video watched: {watched}")
