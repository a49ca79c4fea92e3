"""Video input and output with PyAV (FFmpeg): probe, decode with exact timestamps, encode H.264.

Time stays an integer `pts` in a rational `time_base` from decode to encode (never rebuilt from
index / fps). Decoded images are RGB uint8 [H, W, 3], upright (display rotation applied).

Per-frame digest (the leaf data of the RFC 6962 Merkle tree over the source's frames): SHA-256 of
    b"redact.frame.v1\\n" + f"{pix_fmt} {width} {height}\\n" (ASCII)
    + for each plane of the decoded frame, in plane order: its visible bytes, row by row from
      the top, without the line padding FFmpeg adds,
taken from the decoder's native planes BEFORE any colour conversion or rotation, so the digest
depends only on what the decoder produced (not on swscale). A plane's visible row is
ceil(plane.width * bits / 8) bytes, where bits is the stored bits per pixel of that plane
(single-plane formats: the format's padded bits per pixel; planar: each component on the plane
rounded up to whole bytes). FFmpeg's H.264 decoder is bit-exact (ITU-T H.264 specifies the
decoding process exactly), so the digests do not depend on the FFmpeg build or thread count.

PyAV is imported inside the functions that need it, so importing this module is cheap.
"""

from __future__ import annotations

import contextlib
import hashlib
import heapq
import os
import stat
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from redact.errors import InputError, VideoError
from redact.hashing import CHUNK, sha256_stream
from redact.media.colour import BT601, RANGE_LIMITED, Colour, colour_of, decode_colorspace, rgb_to_i420

DIGEST_TAG = b"redact.frame.v1\n"

# Demuxers that read single still images, not video (FFmpeg libavformat/img2dec.c names).
_IMAGE_DEMUXERS = ("image2", "image2pipe")

# Container and stream metadata keys the MP4 muxer writes as part of the file structure (ISO/IEC
# 14496-12 ftyp box, hdlr box and media language); nothing else is written by VideoWriter.
STRUCTURAL_CONTAINER_KEYS = frozenset({"major_brand", "minor_version", "compatible_brands"})
STRUCTURAL_STREAM_KEYS = frozenset({"language", "handler_name", "vendor_id"})


@dataclass(frozen=True)
class VideoInfo:
    """What probe() learnt about a video file without decoding more than one frame.

    width/height are of the upright picture (after rotation); fps is the stream's average rate
    as an exact Fraction; frames is the stream's frame count or, when the container lacks it,
    the number of video packets; rotation is the clockwise turn in degrees (0, 90, 180, 270)
    applied for display, the same convention as FFmpeg's legacy `rotate` tag.
    """

    path: str
    bytes: int
    width: int
    height: int
    fps: Fraction
    time_base: Fraction
    frames: int
    duration: float
    rotation: int
    has_audio: bool
    codec: str
    metadata_keys: tuple[str, ...]
    frames_counted: bool = False  # True when `frames` came from counting packets
    colour: Colour = BT601  # the stream's colour as tagged (redact.media.colour.colour_of)

    def as_dict(self) -> dict:
        """A JSON-ready dict (fractions as "num/den" strings)."""
        return {
            "path": self.path, "bytes": self.bytes, "width": self.width, "height": self.height,
            "fps": f"{self.fps.numerator}/{self.fps.denominator}",
            "time_base": f"{self.time_base.numerator}/{self.time_base.denominator}",
            "frames": self.frames, "duration": round(self.duration, 6), "rotation": self.rotation,
            "has_audio": self.has_audio, "codec": self.codec, "metadata_keys": list(self.metadata_keys),
        }


@dataclass(frozen=True)
class Frame:
    """One decoded frame: index from 0, integer pts in time_base, t = seconds since stream start.

    image: RGB uint8 [H, W, 3], upright, read-only. digest: 32-byte SHA-256 (see module docstring).
    corrupt: FFmpeg flagged the frame as decoded with errors (concealed data).
    """

    index: int
    pts: int | None
    time_base: Fraction
    t: float
    image: np.ndarray
    digest: bytes
    corrupt: bool = False


def _av():
    try:
        import av  # noqa: PLC0415 (heavy, imported where needed)
    except ImportError as e:  # pragma: no cover - av is a declared dependency
        raise VideoError("PyAV (the `av` package) is required for video input/output") from e
    return av


def _rotation_cw(ccw: float) -> int:
    """Clockwise display turn in {0, 90, 180, 270} from a counter-clockwise matrix angle."""
    return int(round(-float(ccw) / 90.0)) * 90 % 360


def _video_stream(container):
    """The first video stream that is not cover art, or None."""
    av = _av()
    for s in container.streams.video:
        if not (int(s.disposition) & int(av.stream.Disposition.attached_pic)):
            return s
    return None


# What a path that is not a regular file is, in words (stat(2) file types, S_IS* tests).
_FILE_KINDS = ((stat.S_ISFIFO, "a named pipe (FIFO)"), (stat.S_ISCHR, "a character device"),
               (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))


def _open_input(path: str | Path):
    """Open a file for reading, turning every reason it is unusable into one InputError line.

    Only regular files are read: a pipe or a device has no size to hash and check against, and
    reading one (e.g. /dev/zero) may never end; it is refused before it is opened.
    """
    av = _av()
    p = Path(path)
    try:
        st = p.stat()
    except FileNotFoundError:
        raise InputError(f"{p}: no such file") from None
    except OSError as e:
        raise InputError(f"{p}: cannot be read ({e.strerror or e})") from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{p}: is a directory, not a video file")
    if not stat.S_ISREG(st.st_mode):
        kind = next((name for test, name in _FILE_KINDS if test(st.st_mode)), "not a regular file")
        raise InputError(f"{p}: {kind}, not a video file; give a video file saved on disk")
    if st.st_size == 0:
        raise InputError(f"{p}: empty file (0 bytes), not a video")
    try:
        container = av.open(str(p), mode="r")
    except av.error.FFmpegError as e:
        raise InputError(f"{p}: not a readable video ({e.strerror or type(e).__name__})") from e
    if container.format.name in _IMAGE_DEMUXERS or container.format.name.endswith("_pipe"):
        container.close()
        raise InputError(f"{p}: a still image ({container.format.name}), not a video")
    stream = _video_stream(container)
    if stream is None:
        container.close()
        raise InputError(f"{p}: no video stream in the file")
    return container, stream


def _stream_start(stream) -> int:
    return int(stream.start_time) if stream.start_time is not None else 0


def _first_frame_rotation(container, stream) -> int | None:
    """Decode until the first frame; its display-matrix rotation (clockwise), or None if none decode."""
    av = _av()
    try:
        for packet in container.demux(stream):
            for vf in packet.decode():
                return _rotation_cw(vf.rotation)
    except av.error.FFmpegError:
        return None
    return None


def _count_packets(path: Path) -> int:
    """Video packets in the file, by demuxing only (no decoding); for containers without a count."""
    av = _av()
    container, stream = _open_input(path)
    n = 0
    try:
        for pk in container.demux(stream):
            n += pk.size > 0
    except av.error.FFmpegError:
        pass  # a truncated file: count what is there; decoding reports where it stops
    finally:
        container.close()
    return n


def probe(path: str | Path) -> VideoInfo:
    """Describe a video file: size, rate, frame count, rotation, audio; InputError if unusable."""
    p = Path(path)
    container, stream = _open_input(p)
    try:
        tb = Fraction(stream.time_base) if stream.time_base else Fraction(1, 90000)
        fps = stream.average_rate or stream.guessed_rate or stream.base_rate
        if not fps:
            raise InputError(f"{p}: the video stream has no frame rate")
        fps = Fraction(fps)
        frames = int(stream.frames or 0)
        counted = frames == 0
        if counted:
            frames = _count_packets(p)
        if frames == 0:
            raise InputError(f"{p}: the video stream has zero frames")
        if stream.duration:
            duration = float(stream.duration * tb)
        elif container.duration:
            duration = container.duration / 1_000_000
        else:
            duration = float(frames / fps)
        keys = set(container.metadata) | set(stream.metadata)
        tag = stream.metadata.get("rotate")
        codec = stream.codec_context.name
        has_audio = len(container.streams.audio) > 0
        width, height = stream.width, stream.height
        cc = stream.codec_context
        colour = colour_of(width, height, getattr(cc, "colorspace", None), getattr(cc, "color_primaries", None),
                           getattr(cc, "color_trc", None))
        rot = _first_frame_rotation(container, stream)
        if rot is None:
            raise InputError(f"{p}: no frame of the video stream could be decoded")
        if rot == 0 and tag:
            try:
                rot = int(round(float(tag) / 90.0)) * 90 % 360
            except ValueError:
                pass
    finally:
        container.close()
    if rot in (90, 270):
        width, height = height, width
    return VideoInfo(path=str(p), bytes=p.stat().st_size, width=int(width), height=int(height), fps=fps,
                     time_base=tb, frames=frames, duration=duration, rotation=rot, has_audio=has_audio,
                     codec=codec, metadata_keys=tuple(sorted(keys)), frames_counted=counted, colour=colour)


def _plane_row_bytes(fmt, plane, index: int, n_planes: int) -> int:
    """Visible bytes in one row of a plane (see the module docstring)."""
    if n_planes == 1:
        bits = fmt.padded_bits_per_pixel or fmt.bits_per_pixel
    else:
        bits = sum(-(-c.bits // 8) * 8 for c in fmt.components if c.plane == index)
    return -(-plane.width * bits // 8)


def native_digest(vf) -> bytes:
    """SHA-256 over a decoded PyAV VideoFrame's native planes (the documented per-frame leaf)."""
    fmt = vf.format
    h = hashlib.sha256(DIGEST_TAG)
    h.update(f"{fmt.name} {vf.width} {vf.height}\n".encode("ascii"))
    planes = vf.planes
    for index, plane in enumerate(planes):
        ls = plane.line_size
        row = _plane_row_bytes(fmt, plane, index, len(planes))
        buf = np.frombuffer(plane, np.uint8)
        rows = buf[: abs(ls) * plane.height].reshape(plane.height, abs(ls))
        if ls < 0:  # bottom-up frame: the buffer starts at the lowest address, i.e. the last row
            rows = rows[::-1]
        h.update(np.ascontiguousarray(rows[:, :row]).data if row < abs(ls) or ls < 0 else rows.data)
    return h.digest()


def _upright_rgb(vf, rotation: int) -> np.ndarray:
    """RGB of a decoded frame, upright; an untagged frame is read as BT.709 when HD, BT.601 otherwise
    (redact.media.colour), as the redacted copy will be tagged."""
    space = decode_colorspace(getattr(vf, "colorspace", None), vf.width, vf.height)
    img = vf.to_ndarray(format="rgb24") if space is None else vf.to_ndarray(format="rgb24", src_colorspace=space)
    if rotation:
        img = np.ascontiguousarray(np.rot90(img, k=-(rotation // 90)))  # negative k: clockwise
    img.flags.writeable = False
    return img


def _identity(st: os.stat_result) -> tuple[int, int, int, int, int]:
    """What must stay the same while a file is read: device, inode, size, modification and
    status-change times. The kernel sets the status-change time (st_ctime) on every write, truncation
    or time change (stat(2), inode(7)); a program cannot set it back as it can the modification time."""
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _what_changed(before: tuple, after: tuple) -> str:
    if before[:2] != after[:2]:
        return "it was replaced by another file"
    if before[2] != after[2]:
        return f"its size went from {before[2]} to {after[2]} bytes"
    return "it was written to (its modification or status-change time moved)"


def changed_error(path: Path, how: str) -> InputError:
    """The one message for a source that changed while a run read it."""
    return InputError(f"{path}: the file changed while it was being read ({how}), so what was decoded may not be "
                      "what was hashed; nothing was written: run again on a copy that nobody is writing to")


class _FileHasher:
    """SHA-256 of the source file, computed by a background thread that reads it sequentially.

    Why a second sequential reader rather than hashing the demuxer's reads: demuxers seek (MP4
    reads its index wherever it lies, may re-read, skips unneeded data), so the bytes they read
    are not the file in order. Reading the file once, in order, next to the decoder, is simple
    and exact; the OS page cache serves the decoder's reads. The file's identity and size are
    checked before and after so that a file replaced or changed mid-run is reported.
    """

    def __init__(self, path: Path):
        self.path = Path(path)
        self._f = open(path, "rb")  # noqa: SIM115 (closed by the thread)
        self.identity = _identity(os.fstat(self._f.fileno()))
        self._stop = threading.Event()
        self._result: tuple[str, int] | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="redact-sha256", daemon=True)
        self._thread.start()

    def read(self, n: int) -> bytes:
        """File reads that end (return b"") once cancel() was called."""
        return b"" if self._stop.is_set() else self._f.read(n)

    def _run(self) -> None:
        try:
            hexd, n = sha256_stream(self, CHUNK)  # type: ignore[arg-type]
            now = _identity(os.fstat(self._f.fileno()))
            if not self._stop.is_set():
                self._result = (hexd, n)
                if now != self.identity:
                    self._error = changed_error(self.path, _what_changed(self.identity, now))
                elif n != self.identity[2]:
                    self._error = changed_error(self.path, f"{n} bytes read of {self.identity[2]}")
        except BaseException as e:  # noqa: BLE001 (reported to the caller by result())
            self._error = e
        finally:
            self._f.close()

    def cancel(self) -> None:
        self._stop.set()
        self._thread.join()

    def result(self) -> tuple[str, int]:
        self._thread.join()
        if self._error is not None:
            if isinstance(self._error, InputError | VideoError):
                raise self._error
            raise VideoError(f"hashing the source file failed: {self._error}") from self._error
        if self._result is None:
            raise VideoError("hashing of the source file was cancelled")
        return self._result


class VideoReader:
    """Decode a video once, yielding Frames, while a background thread hashes the file (SHA-256).

    Usage: `with VideoReader(path) as r: for f in r.frames(): ...`, then `r.sha256`, `r.bytes`,
    `r.stopped_early` (None, or one line saying where decoding stopped for a truncated or
    corrupt file: the frames that decoded were yielded, no exception escapes for bad data).
    A file from which no frame decodes raises InputError. Decoding is multithreaded
    (FFmpeg thread_type AUTO; `threads=0` lets FFmpeg choose the count).

    Refused with an InputError naming the file: timestamps that do not increase (a damaged file:
    the redacted copy keeps the source's timestamps, which must increase), and a file that changed
    while it was read (device, inode, size, modification or status-change time differ between the
    start and the end of decoding, or the hash read fewer bytes than the file had), so the signed
    SHA-256 is always that of the bytes decoded.

    frames() may run in another thread than close(): each call into the demuxer or decoder holds
    a lock that close() takes too, so the container is never closed under a running decode.
    """

    def __init__(self, path: str | Path, *, threads: int = 0, hash_file: bool = True):
        self.path = Path(path)
        self._threads = threads
        self._hash_file = hash_file
        self.info: VideoInfo | None = None
        self.stopped_early: str | None = None
        self.frames_read = 0
        self.corrupt_frames = 0
        # PyAV container and stream while open (av is imported on use, so typed loosely)
        self._container: Any = None
        self._stream: Any = None
        self._hasher: _FileHasher | None = None
        self._iterated = False
        self._finished = False
        self.lock = threading.Lock()
        self.closed = False
        self.identity: tuple | None = None

    def __enter__(self) -> VideoReader:
        self.info = probe(self.path)
        if self._hash_file:
            self._hasher = _FileHasher(self.path)
            self.identity = self._hasher.identity
        else:
            self.identity = _identity(os.stat(self.path))
        self._container, self._stream = _open_input(self.path)
        try:
            self.check_unchanged()  # the container opened the same, unchanged file
        except InputError:
            self.__exit__(InputError, None, None)
            raise
        s = self._stream
        s.thread_type = "AUTO"
        s.codec_context.thread_count = self._threads
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None and self._hasher is not None and not self._finished:
            self._hasher.cancel()
        self.close()

    def close(self) -> None:
        with self.lock:  # waits for a decode step running in another thread
            self.closed = True
            if self._container is not None:
                self._container.close()
                self._container = None

    def check_unchanged(self) -> None:
        """InputError when the file at the path is no longer the one opened, unchanged."""
        try:
            now = _identity(os.stat(self.path))
        except OSError:
            raise changed_error(self.path, "it was removed") from None
        if self.identity is not None and now != self.identity:
            raise changed_error(self.path, _what_changed(self.identity, now))

    def frames(self) -> Iterator[Frame]:
        """Yield every decodable frame in presentation order (once per reader)."""
        if self._container is None or self.info is None:
            raise VideoError("VideoReader must be used as a context manager (with VideoReader(...) as r)")
        if self._iterated:
            raise VideoError("frames() can be iterated only once per VideoReader")
        self._iterated = True
        rotation = self.info.rotation
        last_pts = None
        for vf, pts, tb, t in _decode(self._container, self._stream, self):
            if pts is not None and last_pts is not None and pts <= last_pts:
                raise InputError(f"{self.path}: frame {self.frames_read} has timestamp {pts} after {last_pts} "
                                 f"(time base {tb}): timestamps must increase, the file is damaged; "
                                 "re-encode it into a new file first")
            last_pts = pts if pts is not None else last_pts
            frame = Frame(index=self.frames_read, pts=pts, time_base=tb, t=t,
                          image=_upright_rgb(vf, rotation), digest=native_digest(vf),
                          corrupt=bool(getattr(vf, "is_corrupt", False)))
            self.corrupt_frames += frame.corrupt
            self.frames_read += 1
            yield frame
        if self.closed:  # closed from another thread: the run is being stopped, nothing to check
            return
        self._finished = True
        _check_complete(self)
        self.check_unchanged()

    @property
    def sha256(self) -> str:
        """Hex SHA-256 of the whole source file (waits for the hashing thread)."""
        return self._hash()[0]

    @property
    def bytes(self) -> int:
        """Size of the source file in bytes, as hashed."""
        return self._hash()[1]

    def _hash(self) -> tuple[str, int]:
        if self._hasher is None:
            raise VideoError("this VideoReader was opened with hash_file=False")
        result = self._hasher.result()
        self.check_unchanged()
        return result


def _decode(container, stream, state) -> Iterator[tuple]:
    """Yield (av frame, pts, time_base, t seconds); on FFmpeg errors set state.stopped_early and end.

    Each demux and decode step holds state.lock (when the state has one) and ends quietly once
    state.closed is set, so another thread's close() never runs inside FFmpeg's reading."""
    av = _av()
    start = _stream_start(stream)
    tb = Fraction(stream.time_base)
    fps = state.info.fps
    last_t = 0.0
    n = 0
    lock = getattr(state, "lock", None) or contextlib.nullcontext()
    packets = container.demux(stream)
    try:
        while True:
            with lock:
                if getattr(state, "closed", False):
                    return
                packet = next(packets, None)
                if packet is None:
                    break
                decoded = packet.decode()
            for vf in decoded:
                pts = vf.pts if vf.pts is not None else vf.dts
                # Without any timestamp the only clock left is the frame rate (rare: raw streams).
                t = float((pts - start) * tb) if pts is not None else float(n / fps)
                last_t = t
                n += 1
                yield vf, pts, tb, t
    except av.error.FFmpegError as e:
        state.stopped_early = (f"decoding stopped after {n} frame(s) (last at t={last_t:.3f} s): "
                               f"{e.strerror or type(e).__name__}; the file is truncated or corrupt")
    state._last_t = last_t


def _check_complete(state) -> None:
    n = state.frames_read
    if n == 0:
        raise InputError(f"{state.path}: no frame could be decoded")
    info = state.info
    if state.stopped_early is None and not info.frames_counted and n < info.frames:
        state.stopped_early = (f"only {n} of {info.frames} frames decoded (last at t="
                               f"{getattr(state, '_last_t', 0.0):.3f} s): the file ends early (truncated?)")


class _DigestState:
    def __init__(self, path: Path, info: VideoInfo):
        self.path, self.info = path, info
        self.stopped_early: str | None = None
        self.frames_read = 0


def frame_digests(path: str | Path, *, threads: int = 0) -> Iterator[bytes]:
    """The per-frame digests VideoReader computes, without colour conversion (for Merkle proofs)."""
    p = Path(path)
    info = probe(p)
    container, stream = _open_input(p)
    stream.thread_type = "AUTO"
    stream.codec_context.thread_count = threads
    state = _DigestState(p, info)
    try:
        for vf, _pts, _tb, _t in _decode(container, stream, state):
            state.frames_read += 1
            yield native_digest(vf)
        if state.frames_read == 0:
            raise InputError(f"{p}: no frame could be decoded")
    finally:
        container.close()


class VideoWriter:
    """Encode RGB frames to an H.264 (libx264, yuv420p, limited range) MP4 that browsers play.

    colour: the Y'CbCr matrix and the tags written (redact.media.colour): pass the source's
    (VideoInfo.colour) so the copy looks as the source does; None = BT.709 for HD frames, BT.601
    (SMPTE 170M) otherwise. The RGB → Y'CbCr conversion uses the matrix the tags name.

    Each write() keeps the caller's integer pts in `time_base`, so the output has the source's
    frame count and timestamps. Odd width/height are padded to even (H.264 4:2:0 needs even
    sizes) by one column/row of neutral grey (128) on the right/bottom; `coded_width`/`coded_height`
    say the encoded size. The file carries no metadata we did not choose: FFmpeg's `encoder` tag
    is suppressed (muxer flag bitexact) and x264's version/settings SEI message is removed from
    the bitstream (FFmpeg `filter_units` bitstream filter, remove_types=6, i.e. SEI NAL units,
    ITU-T H.264 Table 7-1); only structural MP4 fields remain (ftyp brands, handler name,
    language). The moov index is moved to the front (movflags=+faststart) for progressive play.
    threads=0 lets x264 choose. reproducible=True turns off x264's macroblock-tree rate control
    (mbtree=0, slightly larger files): we measured x264 output with mbtree varying from run to
    run for identical input frames when other work ran between frames, even single-threaded;
    without it the bytes were identical (used for the committed demo clip).
    Writes to `path` only; the caller chooses temporary names and renames.
    """

    def __init__(self, path: str | Path, width: int, height: int, time_base: Fraction, fps: Fraction,
                 crf: int = 23, preset: str = "veryfast", threads: int = 0, reproducible: bool = False,
                 colour: Colour | None = None):
        if width < 1 or height < 1:
            raise VideoError(f"cannot encode a {width}x{height} video")
        self.colour = colour if colour is not None else colour_of(int(width), int(height), None)
        self.path = Path(path)
        self.width, self.height = int(width), int(height)
        self.coded_width = self.width + (self.width & 1)
        self.coded_height = self.height + (self.height & 1)
        self.time_base = Fraction(time_base)
        self.fps = Fraction(fps)
        self.crf, self.preset, self.threads = int(crf), str(preset), int(threads)
        self.reproducible = bool(reproducible)
        self.frames_written = 0
        self._last_pts: int | None = None
        # PyAV container, stream and bitstream filter while open (av is imported on use)
        self._container: Any = None
        self._stream: Any = None
        self._bsf: Any = None

    def __enter__(self) -> VideoWriter:
        av = _av()
        opts = {"movflags": "+faststart", "fflags": "+bitexact"}
        if self.time_base.numerator == 1:
            opts["video_track_timescale"] = str(self.time_base.denominator)
        try:
            self._container = av.open(str(self.path), mode="w", format="mp4", container_options=opts)
        except (av.error.FFmpegError, OSError) as e:
            raise VideoError(f"{self.path}: cannot create the output video ({e})") from e
        s = self._container.add_stream("libx264", rate=self.fps)
        s.width, s.height, s.pix_fmt = self.coded_width, self.coded_height, "yuv420p"
        s.time_base = self.time_base
        s.codec_context.time_base = self.time_base
        cc = s.codec_context
        c = self.colour
        cc.colorspace, cc.color_primaries, cc.color_trc = c.matrix_code, c.primaries, c.transfer
        cc.color_range = RANGE_LIMITED
        cc.thread_count = self.threads
        s.options = {"crf": str(self.crf), "preset": self.preset}
        if self.reproducible:
            s.options = {**s.options, "x264-params": "mbtree=0"}
        self._stream = s
        try:
            from av.bitstream import BitStreamFilterContext  # noqa: PLC0415 (older PyAV lacks it)

            self._bsf = BitStreamFilterContext("filter_units=remove_types=6", "h264")
        except (ImportError, TypeError, av.error.FFmpegError):  # older PyAV: keep the SEI
            self._bsf = None
        return self

    def _mux(self, packets) -> None:
        for pk in packets:
            for out in (self._bsf.filter(pk) if self._bsf is not None else (pk,)):
                out.stream = self._stream
                self._container.mux(out)

    def write(self, image_rgb: np.ndarray, pts: int) -> None:
        """Encode one RGB uint8 [height, width, 3] image at integer pts (strictly increasing)."""
        av = _av()
        if self._container is None:
            raise VideoError("VideoWriter must be used as a context manager")
        img = np.asarray(image_rgb)
        if img.dtype != np.uint8 or img.shape != (self.height, self.width, 3):
            raise VideoError(f"expected an RGB uint8 image of shape [{self.height}, {self.width}, 3], "
                             f"got {img.dtype} {list(img.shape)}")
        pts = int(pts)
        if self._last_pts is not None and pts <= self._last_pts:
            raise VideoError(f"pts must increase: {pts} after {self._last_pts}")
        if (self.coded_width, self.coded_height) != (self.width, self.height):
            img = np.pad(img, ((0, self.coded_height - self.height), (0, self.coded_width - self.width), (0, 0)),
                         constant_values=128)
        # limited-range 4:2:0 with the matrix the stream's colour tags name, chroma averaged over 2×2
        yuv = rgb_to_i420(img, self.colour)
        vf = av.VideoFrame.from_ndarray(yuv, format="yuv420p")
        vf.pts, vf.time_base = pts, self.time_base
        try:
            self._mux(self._stream.encode(vf))
        except av.error.FFmpegError as e:
            raise VideoError(f"{self.path}: encoding frame at pts {pts} failed ({e})") from e
        self._last_pts = pts
        self.frames_written += 1

    def close(self) -> None:
        """Flush the encoder and the bitstream filter, write the index, close the file."""
        av = _av()
        if self._container is None:
            return
        try:
            self._mux(self._stream.encode(None))
            if self._bsf is not None:
                for out in self._bsf.filter(None):
                    out.stream = self._stream
                    self._container.mux(out)
        except av.error.FFmpegError as e:
            raise VideoError(f"{self.path}: finishing the output video failed ({e})") from e
        finally:
            container, self._container = self._container, None
            container.close()

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        elif self._container is not None:  # an error upstream: just release the file
            container, self._container = self._container, None
            try:
                container.close()
            except Exception:  # noqa: BLE001 (the original error matters more)
                pass


def copy_audio(video_path: str | Path, source_path: str | Path, out_path: str | Path) -> bool:
    """Write out_path = video_path's video + source_path's first audio stream, both copied unchanged.

    Packets are interleaved by time and carried without re-encoding. Returns False (and writes
    nothing) when the source has no audio. VideoError if the audio codec cannot go in an MP4.
    """
    av = _av()
    vin, vstream = _open_input(video_path)
    try:
        sin = av.open(str(source_path), mode="r")
    except av.error.FFmpegError as e:
        vin.close()
        raise InputError(f"{source_path}: cannot be read for its audio ({e.strerror})") from e
    try:
        if not sin.streams.audio:
            return False
        astream = sin.streams.audio[0]
        try:
            out = av.open(str(out_path), mode="w", format="mp4",
                          container_options={"movflags": "+faststart", "fflags": "+bitexact"})
        except (av.error.FFmpegError, OSError) as e:
            raise VideoError(f"{out_path}: cannot create the output video ({e})") from e
        try:
            ov = out.add_stream_from_template(vstream)
            oa = out.add_stream_from_template(astream)
            for s in (ov, oa):
                for k in list(s.metadata):
                    if k not in STRUCTURAL_STREAM_KEYS:
                        del s.metadata[k]

            def tagged(container, stream, ostream, order):
                for pk in container.demux(stream):
                    if pk.dts is None and pk.pts is None:
                        continue  # the demuxer's end-of-stream marker
                    ts = pk.dts if pk.dts is not None else pk.pts
                    yield float(ts * pk.time_base), order, pk, ostream

            merged = heapq.merge(tagged(vin, vstream, ov, 0), tagged(sin, astream, oa, 1),
                                 key=lambda x: (x[0], x[1]))
            for _t, _o, pk, ostream in merged:
                pk.stream = ostream
                out.mux(pk)
        except av.error.FFmpegError as e:
            raise VideoError(f"cannot carry the source audio ({astream.codec_context.name}) into "
                             f"an MP4 without re-encoding: {e}") from e
        finally:
            out.close()
        return True
    finally:
        sin.close()
        vin.close()
