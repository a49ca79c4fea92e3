"""Frames of a video by index, as JPEG, for the review page (random access with a small cache).

Frame i is the i-th frame in presentation order, as `VideoReader` counts them: the packet
timestamps are read once (no decoding), a request seeks to the nearest keyframe at or before the
frame and decodes forward. Sequential requests (playing) continue decoding without seeking.
One lock per video: PyAV containers are not safe to share between threads.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from redact.errors import InputError, VideoError

CACHE_FRAMES = 120  # JPEGs kept per video (common practice: a few seconds of playing)
JPEG_QUALITY = 90  # common practice


class FrameSource:
    """JPEG bytes of frame `i` of one video file (upright, as the pipeline decoded it)."""

    def __init__(self, path: Path):
        from redact.media.video import _av, _open_input, probe

        self.path = Path(path)
        self.info = probe(self.path)
        self._av = _av()
        self._lock = threading.Lock()
        self._cache: OrderedDict[int, bytes] = OrderedDict()
        container, stream = _open_input(self.path)
        try:
            pts = sorted(p.pts for p in container.demux(stream) if p.pts is not None and p.size)
        finally:
            container.close()
        self.pts = pts
        # PyAV container, stream and decoded-frame iterator while open
        self._container: Any = None
        self._stream: Any = None
        self._iter: Any = None
        self._next = -1

    def __len__(self) -> int:
        return len(self.pts)

    def _open(self) -> None:
        from redact.media.video import _open_input

        if self._container is None:
            self._container, self._stream = _open_input(self.path)
            self._stream.thread_type = "AUTO"

    def _decoded(self):
        for packet in self._container.demux(self._stream):
            yield from packet.decode()

    def _image(self, i: int) -> np.ndarray:
        from redact.media.video import _upright_rgb

        self._open()
        target = self.pts[i]
        if self._iter is None or i != self._next:
            self._container.seek(target, stream=self._stream, backward=True, any_frame=False)
            self._iter = self._decoded()
        try:
            for vf in self._iter:
                if vf.pts is None or vf.pts < target:
                    continue
                self._next = i + 1
                return _upright_rgb(vf, self.info.rotation)
        except self._av.error.FFmpegError as e:
            self._iter = None
            raise VideoError(f"{self.path.name}: frame {i} cannot be decoded ({e})") from None
        self._iter = None
        raise VideoError(f"{self.path.name}: frame {i} was not found while decoding")

    def jpeg(self, i: int) -> bytes:
        if not 0 <= i < len(self.pts):
            raise InputError(f"frame {i} is outside 0..{len(self.pts) - 1}")
        with self._lock:
            if i in self._cache:
                self._cache.move_to_end(i)
                return self._cache[i]
            img = self._image(i)
            ok, buf = cv2.imencode(".jpg", cv2.cvtColor(img, cv2.COLOR_RGB2BGR),
                                   [cv2.IMWRITE_JPEG_QUALITY, JPEG_QUALITY])
            if not ok:
                raise VideoError(f"frame {i} cannot be encoded as JPEG")
            data = buf.tobytes()
            self._cache[i] = data
            while len(self._cache) > CACHE_FRAMES:
                self._cache.popitem(last=False)
            return data

    def close(self) -> None:
        with self._lock:
            if self._container is not None:
                self._container.close()
                self._container = None
                self._iter = None
