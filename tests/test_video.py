"""redact.media.video checked against PyAV/FFmpeg as the outside reference, and hashlib for SHA-256.

Clips contain people from scikit-image stills: astronaut() public domain (NASA), camera() CC0
(Lav Varshney). FFmpeg (through a plain `av.open` loop) is the reference for frame counts,
timestamps, time bases, rates and metadata; Python's hashlib (FIPS 180-4) for file hashes.
"""

from __future__ import annotations

import hashlib
from fractions import Fraction

import av
import numpy as np
import pytest

from redact.errors import InputError, VideoError
from redact.media import synthetic as syn
from redact.media import video


def _reference_frames(path):
    """(pts, time_base) of every frame, decoded with a plain PyAV loop (FFmpeg as reference)."""
    with av.open(str(path)) as c:
        s = c.streams.video[0]
        return [(f.pts, Fraction(f.time_base)) for f in c.decode(s)], Fraction(s.time_base)


def test_writer_output_matches_input_frames_and_timestamps(tmp_path):
    # Input: frames at chosen pts in time base 1/12800 (FFmpeg's MP4 default for 25 fps, from memory).
    tb, fps = Fraction(1, 12800), Fraction(25)
    pts_in = [i * 512 for i in range(20)] + [20 * 512 + 100]  # a last frame off the regular grid
    out = tmp_path / "w.mp4"
    rng = np.random.default_rng(1)
    with video.VideoWriter(out, 96, 64, tb, fps) as w:
        for p in pts_in:
            w.write(rng.integers(0, 256, (64, 96, 3), dtype=np.uint8), p)
    frames, stream_tb = _reference_frames(out)
    assert stream_tb == tb
    assert [p for p, _ in frames] == pts_in
    assert all(t == tb for _, t in frames)


def test_writer_keeps_time_for_a_coarse_time_base(tmp_path):
    # A 1/25 time base (as in many camera files): the seconds of each frame must be unchanged.
    tb, fps = Fraction(1, 25), Fraction(25)
    out = tmp_path / "coarse.mp4"
    with video.VideoWriter(out, 64, 48, tb, fps) as w:
        for i in range(10):
            w.write(np.full((48, 64, 3), 20 * i, np.uint8), i)
    frames, _ = _reference_frames(out)
    assert [p * t for p, t in frames] == [Fraction(i, 25) for i in range(10)]


def test_odd_size_is_padded_to_even(tmp_path):
    out = tmp_path / "odd.mp4"
    img = np.full((49, 65, 3), 255, np.uint8)  # white picture
    with video.VideoWriter(out, 65, 49, Fraction(1, 12800), Fraction(25)) as w:
        assert (w.coded_width, w.coded_height) == (66, 50)
        w.write(img, 0)
    with av.open(str(out)) as c:
        f = next(c.decode(video=0))
        y = f.to_ndarray()[: f.height]  # the luma plane of yuv420p
    assert (f.width, f.height) == (66, 50)  # H.264 4:2:0 needs even sizes (ITU-T H.264 / x264)
    # BT.601 limited range (ITU-R BT.601): white is Y=235, grey 128 is Y=16+128*219/255≈126.
    assert abs(float(y[:, -1].mean()) - 126) < 12 and abs(float(y[-1, :].mean()) - 126) < 12
    assert abs(float(y[:48, :64].mean()) - 235) < 3


def test_writer_rejects_wrong_shapes_and_non_increasing_pts(tmp_path):
    with video.VideoWriter(tmp_path / "x.mp4", 64, 48, Fraction(1, 25), Fraction(25)) as w:
        with pytest.raises(VideoError, match="shape"):
            w.write(np.zeros((48, 63, 3), np.uint8), 0)
        w.write(np.zeros((48, 64, 3), np.uint8), 5)
        with pytest.raises(VideoError, match="increase"):
            w.write(np.zeros((48, 64, 3), np.uint8), 5)


def test_probe_matches_pyav(crossing_clip):
    info = video.probe(crossing_clip.path)
    with av.open(str(crossing_clip.path)) as c:
        s = c.streams.video[0]
        assert info.frames == s.frames == crossing_clip.spec.frames
        assert info.fps == s.average_rate == Fraction(25)
        assert isinstance(info.fps, Fraction)
        assert info.time_base == s.time_base
        assert (info.width, info.height) == (s.width, s.height) == (320, 240)
        assert info.duration == pytest.approx(float(s.duration * s.time_base))
        assert info.codec == s.codec_context.name == "h264"
        assert set(info.metadata_keys) == set(c.metadata) | set(s.metadata)
    assert info.rotation == 0 and info.has_audio is False
    assert info.bytes == crossing_clip.path.stat().st_size


def test_reader_frames_match_reference_and_hash_matches_hashlib(crossing_clip):
    ref, tb = _reference_frames(crossing_clip.path)
    with video.VideoReader(crossing_clip.path) as r:
        frames = list(r.frames())
        # hashlib over the whole file read at once (FIPS 180-4 SHA-256) is the reference.
        assert r.sha256 == hashlib.sha256(crossing_clip.path.read_bytes()).hexdigest()
        assert r.bytes == crossing_clip.path.stat().st_size
        assert r.stopped_early is None
    assert [(f.pts, f.time_base) for f in frames] == ref
    assert [f.index for f in frames] == list(range(len(ref)))
    assert [f.t for f in frames] == [float(p * tb) for p, _ in ref]
    img = frames[0].image
    assert img.shape == (240, 320, 3) and img.dtype == np.uint8 and not img.flags.writeable


def test_decoded_images_match_rendered_frames(crossing_clip):
    # The decoded picture is close to what was encoded (lossy H.264 at crf 20: small mean error).
    rendered = [img for img, _ in syn.render_scene(crossing_clip.spec)]
    with video.VideoReader(crossing_clip.path) as r:
        for f in r.frames():
            err = np.abs(f.image.astype(int) - rendered[f.index].astype(int)).mean()
            assert err < 6.0, (f.index, err)


def test_frame_digests_are_deterministic_distinct_and_documented(crossing_clip):
    a = list(video.frame_digests(crossing_clip.path))
    b = list(video.frame_digests(crossing_clip.path, threads=1))  # other thread count, same digests
    with video.VideoReader(crossing_clip.path) as r:
        c = [f.digest for f in r.frames()]
    assert a == b == c
    assert len(a) == crossing_clip.spec.frames and all(len(d) == 32 for d in a)
    assert len(set(a)) == len(a)  # moving people: every frame differs
    # The documented construction, rebuilt from PyAV's own padding-free plane copy (to_ndarray
    # of yuv420p returns the Y, U, V planes' visible bytes stacked) and hashlib.
    with av.open(str(crossing_clip.path)) as cont:
        for i, f in enumerate(cont.decode(video=0)):
            assert f.format.name == "yuv420p"
            head = video.DIGEST_TAG + f"{f.format.name} {f.width} {f.height}\n".encode("ascii")
            assert hashlib.sha256(head + f.to_ndarray().tobytes()).digest() == a[i]
            if i == 3:
                break


def test_written_file_has_only_structural_metadata(crossing_clip):
    # An output container has no metadata unless added (PyAV); the MP4 muxer adds ftyp brands and
    # handler/language (ISO/IEC 14496-12). FFmpeg's `encoder` tag and x264's SEI must be absent.
    with av.open(str(crossing_clip.path)) as c:
        assert set(c.metadata) <= video.STRUCTURAL_CONTAINER_KEYS
        assert "encoder" not in c.metadata and "creation_time" not in c.metadata
        for s in c.streams:
            assert set(s.metadata) <= video.STRUCTURAL_STREAM_KEYS
        first = next(c.decode(video=0))
        assert len(first.side_data) == 0  # no SEI user data (x264 writes its settings there)
    data = crossing_clip.path.read_bytes()
    assert b"x264" not in data and b"Lavf" not in data
    # moov before mdat: the MP4 index comes first (faststart) so browsers can start playing.
    assert data.find(b"moov") < data.find(b"mdat")


def test_rotation_from_display_matrix(tmp_path):
    # PyAV documents VideoFrame.rotation / Stream.set_display_rotation as counter-clockwise degrees
    # (FFmpeg libavutil/display.h). A 90° counter-clockwise display turn moves the stored top-left
    # corner to the bottom-left of the upright picture.
    path = tmp_path / "rot.mp4"
    with av.open(str(path), "w") as c:
        s = c.add_stream("libx264", rate=25)
        s.width, s.height, s.pix_fmt = 64, 32, "yuv420p"
        s.set_display_rotation(90)
        img = np.zeros((32, 64, 3), np.uint8)
        img[:8, :8] = 255  # marker in the stored top-left corner
        for i in range(3):
            f = av.VideoFrame.from_ndarray(img, format="rgb24")
            f.pts = i
            for p in s.encode(f):
                c.mux(p)
        for p in s.encode():
            c.mux(p)
    info = video.probe(path)
    assert (info.width, info.height, info.rotation) == (32, 64, 270)  # 90° ccw = 270° clockwise
    with video.VideoReader(path) as r:
        up = next(iter(r.frames())).image
    assert up.shape == (64, 32, 3)
    assert up[-8:, :8].mean() > 200 and up[:8, :8].mean() < 50


@pytest.mark.parametrize("name", ["missing", "directory", "text", "png", "empty", "zero_frames"])
def test_bad_inputs_raise_one_line_input_errors(bad_inputs, name):
    with pytest.raises(InputError) as e:
        video.probe(bad_inputs[name])
    assert "\n" not in str(e.value) and str(bad_inputs[name].name) in str(e.value)
    with pytest.raises(InputError):
        with video.VideoReader(bad_inputs[name]) as r:
            list(r.frames())


def test_truncated_file_yields_what_decodes_and_says_where_it_stopped(bad_inputs, crossing_clip):
    with video.VideoReader(bad_inputs["truncated"]) as r:
        frames = list(r.frames())
        assert r.sha256 == hashlib.sha256(bad_inputs["truncated"].read_bytes()).hexdigest()
    assert 0 < len(frames) < crossing_clip.spec.frames
    assert r.stopped_early is not None and "\n" not in r.stopped_early
    assert str(len(frames)) in r.stopped_early
    # the frames that did decode are the source's first frames
    full = list(video.frame_digests(crossing_clip.path))
    assert [f.digest for f in frames] == full[: len(frames)]


def test_truncated_file_without_index_is_an_input_error(tmp_path, clip_with_audio):
    # PyAV writes the MP4 index (moov) at the end unless asked otherwise: cutting the file in half
    # removes it, and FFmpeg cannot open the file at all.
    data = clip_with_audio.path.read_bytes()
    assert data.find(b"moov") > data.find(b"mdat")
    cut = syn.write_truncated(clip_with_audio.path, tmp_path / "cut.mp4", 0.5)
    with pytest.raises(InputError):
        video.probe(cut)


def test_corrupt_middle_does_not_crash(tmp_path, crossing_clip):
    # Overwrite a block in the middle of the media data with garbage.
    data = bytearray(crossing_clip.path.read_bytes())
    mid = len(data) // 2
    data[mid: mid + 4000] = np.random.default_rng(7).integers(0, 256, 4000, dtype=np.uint8).tobytes()
    bad = tmp_path / "corrupt.mp4"
    bad.write_bytes(bytes(data))
    with video.VideoReader(bad) as r:
        n = sum(1 for _ in r.frames())
    assert n > 0  # frames before the damage decode; no exception escaped the iterator


def test_reader_iterates_once_and_needs_context():
    r = video.VideoReader("whatever.mp4")
    with pytest.raises(VideoError):
        next(iter(r.frames()))


def test_copy_audio_carries_the_source_audio(tmp_path, clip_with_audio, crossing_clip):
    info = video.probe(clip_with_audio.path)
    assert info.has_audio
    out = tmp_path / "with_audio.mp4"
    assert video.copy_audio(crossing_clip.path, clip_with_audio.path, out) is True
    with av.open(str(out)) as c, av.open(str(clip_with_audio.path)) as src, av.open(str(crossing_clip.path)) as vid:
        assert len(c.streams.audio) == 1 and len(c.streams.video) == 1
        a, sa = c.streams.audio[0], src.streams.audio[0]
        assert a.codec_context.name == sa.codec_context.name == "aac"
        # packets copied unchanged: same count and same payload bytes as the source's audio
        got = [bytes(p) for p in c.demux(a) if p.size]
        want = [bytes(p) for p in src.demux(sa) if p.size]
        assert got == want
        assert c.streams.video[0].frames == vid.streams.video[0].frames
        assert set(c.metadata) <= video.STRUCTURAL_CONTAINER_KEYS
    # no audio in the source: nothing written
    none = tmp_path / "none.mp4"
    assert video.copy_audio(crossing_clip.path, crossing_clip.path, none) is False
    assert not none.exists()
