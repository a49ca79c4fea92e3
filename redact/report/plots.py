"""Pictures for the disclosure report: the quality timeline (inline SVG) and review thumbnails.

The timeline is drawn with matplotlib on an explicit Agg canvas (no pyplot, no global backend
change) and saved as SVG with text kept as text, no date and a fixed id salt, so the same data
gives the same bytes. Thumbnails come ONLY from the redacted video: frames are decoded with
redact.media.video.VideoReader and re-encoded as small JPEG data URIs.
"""

from __future__ import annotations

import base64
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

#: Most points drawn per series; longer videos are reduced to this many bins (common practice:
#: more points than pixels across the plot add size, not information).
MAX_POINTS = 2000
#: Longer side of a review thumbnail in pixels, and its JPEG quality (common practice).
THUMB_SIDE = 320
THUMB_QUALITY = 85


@dataclass(frozen=True)
class Timeline:
    """Per-frame series from quality.jsonl, all of length N (NaN where a measure is missing).

    t: seconds [N]; people, observed [N] (float, NaN when unknown); mean_conf [N] in 0..1;
    luma [N] in 0..255; fault [N] bool.
    """

    t: np.ndarray
    people: np.ndarray
    observed: np.ndarray
    mean_conf: np.ndarray
    luma: np.ndarray
    fault: np.ndarray

    def __len__(self) -> int:
        return int(self.t.shape[0])


def _bins(n: int, most: int) -> np.ndarray:
    """Start indices of at most `most` nearly equal bins over n items."""
    return np.unique(np.linspace(0, n, num=min(n, most) + 1, dtype=np.int64)[:-1])


def _reduce(x: np.ndarray, starts: np.ndarray, how) -> np.ndarray:
    out = np.full(starts.shape[0], np.nan)
    ends = np.append(starts[1:], x.shape[0])
    for k, (a, b) in enumerate(zip(starts, ends)):
        seg = x[a:b]
        seg = seg[np.isfinite(seg)]
        if seg.size:
            out[k] = how(seg)
    return out


def _reduced(tl: Timeline) -> Timeline:
    """The timeline in at most MAX_POINTS bins: people as the bin maximum (never hide a person),
    confidence and luma as the bin minimum (never hide a weak or dark moment)."""
    n = len(tl)
    if n <= MAX_POINTS:
        return tl
    s = _bins(n, MAX_POINTS)
    ends = np.append(s[1:], n)
    fault = np.array([bool(tl.fault[a:b].any()) for a, b in zip(s, ends)])
    return Timeline(tl.t[s], _reduce(tl.people, s, np.max), _reduce(tl.observed, s, np.max),
                    _reduce(tl.mean_conf, s, np.min), _reduce(tl.luma, s, np.min), fault)


def timeline_svg(tl: Timeline, ranges: list[tuple[float, float]], conf_line: float | None,
                 dark_line: float | None) -> str:
    """An SVG element (text) with three stacked plots over time: people per frame, mean keypoint
    confidence, mean luma; review ranges (t_start, t_end seconds) shaded on all three, failed
    frames marked, and the review thresholds drawn as dashed lines."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    tl = _reduced(tl)
    dt = float(np.median(np.diff(tl.t))) if len(tl) > 1 else 0.04
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "redact-report",
                                "font.size": 9, "axes.titlesize": 9, "font.family": "sans-serif"}):
        fig = Figure(figsize=(9.0, 6.0), dpi=100)
        FigureCanvasAgg(fig)
        axes = fig.subplots(3, 1, sharex=True)
        a0, a1, a2 = axes
        a0.step(tl.t, tl.people, where="post", color="#1f4e79", lw=1.2,
                label="people (incl. followed without detection)")
        a0.step(tl.t, tl.observed, where="post", color="#7aa6d6", lw=1.0, ls="--", label="people detected in the frame")
        a0.set_ylabel("people")
        top = np.nanmax(tl.people) if np.isfinite(tl.people).any() else 1.0
        a0.set_ylim(-0.2, max(1.0, float(top)) + 0.8)
        a0.yaxis.get_major_locator().set_params(integer=True)
        a1.plot(tl.t, tl.mean_conf, color="#2e6b30", lw=1.0, label="mean keypoint confidence")
        a1.set_ylim(0, 1)
        a1.set_ylabel("confidence")
        a2.plot(tl.t, tl.luma, color="#5a4a1a", lw=1.0, label="mean luma (BT.601)")
        a2.set_ylim(0, 255)
        a2.set_ylabel("luma 0–255")
        a2.set_xlabel("time in the video (seconds)")
        if conf_line is not None:
            a1.axhline(conf_line, color="#888888", lw=0.8, ls=":", label="review threshold")
        if dark_line is not None:
            a2.axhline(dark_line, color="#888888", lw=0.8, ls=":", label="'dark' threshold")
        for k, (t0, t1) in enumerate(ranges):
            for ax in axes:
                ax.axvspan(t0, t1 + dt, color="#f4b942", alpha=0.30, lw=0, hatch="//",
                           label="flagged for review" if (k == 0 and ax is a0) else None)
        if tl.fault.any():
            ft = tl.t[tl.fault]
            for ax in axes:
                ax.vlines(ft, 0, 1, transform=ax.get_xaxis_transform(), color="#b00020", lw=1.0,
                          label="failed frame (fully obscured)" if ax is a0 else None)
        for ax in axes:
            ax.grid(True, color="#dddddd", lw=0.5)
            ax.legend(loc="upper right", fontsize=7, framealpha=0.9)
        fig.tight_layout()
        buf = io.StringIO()
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return _inline_svg(buf.getvalue())


def _inline_svg(svg: str) -> str:
    """Matplotlib's SVG file → an element to inline in HTML: no XML declaration, DOCTYPE or
    RDF metadata block (which carries URLs), scaled to the page width."""
    svg = re.sub(r"<\?xml[^>]*\?>\s*", "", svg)
    svg = re.sub(r"<!DOCTYPE[^>]*>\s*", "", svg)
    svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)
    svg = re.sub(r'<svg([^>]*?) width="[^"]*" height="[^"]*"',
                 r'<svg\1 class="plot" role="img" aria-label="timeline of people, confidence and luma"', svg, count=1)
    return svg.strip()


def thumbnail_jpeg(image: np.ndarray, side: int = THUMB_SIDE) -> tuple[bytes, int, int]:
    """A JPEG of an RGB uint8 image [H, W, 3], downscaled (area filter) so its longer side is at
    most `side`; returns (bytes, width, height)."""
    from PIL import Image

    im = Image.fromarray(np.ascontiguousarray(image))
    w, h = im.size
    if max(w, h) > side:
        s = side / max(w, h)
        im = im.resize((max(1, round(w * s)), max(1, round(h * s))), Image.Resampling.BOX)
    out = io.BytesIO()
    im.save(out, format="JPEG", quality=THUMB_QUALITY, optimize=True)
    return out.getvalue(), im.size[0], im.size[1]


def data_uri(jpeg: bytes) -> str:
    """A data: URI for JPEG bytes (RFC 2397), so the report needs no other file."""
    return "data:image/jpeg;base64," + base64.b64encode(jpeg).decode("ascii")


def redacted_frames(video: Path, wanted: set[int]) -> dict[int, np.ndarray]:
    """Decode the REDACTED video once, up to the last wanted frame, and return those frames
    (index → RGB uint8 [H, W, 3]). Frame indices count decoded frames from 0, as in the package."""
    from redact.media.video import VideoReader

    out: dict[int, np.ndarray] = {}
    if not wanted:
        return out
    last = max(wanted)
    with VideoReader(video, hash_file=False) as reader:
        for frame in reader.frames():
            if frame.index in wanted:
                out[frame.index] = frame.image
            if frame.index >= last:
                break
    return out
