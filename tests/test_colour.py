"""The redacted copy is tagged as the source was (BT.709 for untagged HD, BT.601 for untagged SD) and
converted with the matrix its tags name.

Outside references: PyAV/FFmpeg writes the sources (libx264, with or without colour tags) and
reopens the outputs: the stream's colour metadata (ITU-T H.273 code points as FFmpeg numbers them:
1 = BT.709, 6 = SMPTE 170M, i.e. BT.601 525-line; range 1 = limited) and the decoded Y'CbCr planes.
Expected sample values are computed from ITU-R BT.709-6 Table 4 (items 3.2-3.5: Kr 0.2126,
Kb 0.0722) and ITU-R BT.601-7 §2.5 (Kr 0.299, Kb 0.114), 8-bit limited range
(Y = 16 + 219 E'Y, Cb/Cr = 128 + 224 E'C): e.g. BT.709 red 63, 102, 240 and BT.601 red 81, 90, 240.
"""

from __future__ import annotations

from fractions import Fraction

import av
import numpy as np
import pytest

from redact.media.colour import BT601, BT709, colour_of, rgb_to_i420
from redact.media.video import VideoReader, VideoWriter, probe
from redact.pipeline import process_video
from redact.provenance.signing import Signer

PATCHES = {"red": (255, 0, 0), "green": (0, 255, 0), "blue": (0, 0, 255), "grey": (128, 128, 128)}


def limited(rgb, kr: float, kb: float) -> tuple[float, float, float]:
    """8-bit limited-range Y'CbCr of an 8-bit R'G'B' colour (the standards' formulas)."""
    r, g, b = (v / 255 for v in rgb)
    y = kr * r + (1 - kr - kb) * g + kb * b
    return 16 + 219 * y, 128 + 224 * (b - y) / (2 * (1 - kb)), 128 + 224 * (r - y) / (2 * (1 - kr))


BT709_KR_KB, BT601_KR_KB = (0.2126, 0.0722), (0.299, 0.114)


def patches_image(w: int, h: int) -> np.ndarray:
    img = np.zeros((h, w, 3), np.uint8)
    for k, rgb in enumerate(PATCHES.values()):
        img[:, k * w // 4:(k + 1) * w // 4] = rgb
    return img


def write_source(path, w: int, h: int, matrix: str | None, frames: int = 4) -> None:
    """A clip written straight with PyAV: four solid patches, coded with `matrix` ("bt709"/"bt601")
    and tagged so, or (matrix None) left untagged, as many cameras do, and coded as such a camera
    means it: BT.709 when HD, BT.601 when SD."""
    if matrix is None:
        coded = BT709 if (w >= 1280 or h >= 720) else BT601
    else:
        coded = BT709 if matrix == "bt709" else BT601
    yuv = rgb_to_i420(patches_image(w, h), coded)
    with av.open(str(path), "w", format="mp4") as c:
        s = c.add_stream("libx264", rate=25)
        s.width, s.height, s.pix_fmt = w, h, "yuv420p"
        s.options = {"crf": "10"}
        if matrix is not None:
            cc = s.codec_context
            cc.colorspace, cc.color_primaries, cc.color_trc = coded.matrix_code, coded.primaries, coded.transfer
            cc.color_range = 1
        for i in range(frames):
            vf = av.VideoFrame.from_ndarray(yuv, format="yuv420p")
            vf.pts = i
            for p in s.encode(vf):
                c.mux(p)
        for p in s.encode(None):
            c.mux(p)


def tags_and_planes(path):
    with av.open(str(path)) as c:
        cc = c.streams.video[0].codec_context
        tags = (cc.colorspace, cc.color_primaries, cc.color_trc, cc.color_range)
        frame = next(c.decode(video=0))
        yuv = frame.to_ndarray(format="yuv420p")  # the coded planes, untouched
        rgb = frame.to_ndarray(format="rgb24")  # converted as the stream's tags say
    return tags, yuv, rgb


def patch_values(yuv: np.ndarray, w: int, h: int, k: int) -> tuple[float, float, float]:
    """Mean Y, Cb, Cr in the middle of patch k of an I420 array [3h/2, w]."""
    x0, x1 = k * w // 4 + w // 16, (k + 1) * w // 4 - w // 16
    y_plane = yuv[:h, :w]
    u = yuv[h:h + h // 4].reshape(h // 2, w // 2)
    v = yuv[h + h // 4:].reshape(h // 2, w // 2)
    rows = slice(h // 4, 3 * h // 4)
    half = slice(h // 8, 3 * h // 8)
    return (float(y_plane[rows, x0:x1].mean()), float(u[half, x0 // 2:x1 // 2].mean()),
            float(v[half, x0 // 2:x1 // 2].mean()))


@pytest.mark.parametrize("w, h, matrix, want", [
    (1280, 720, None, "bt709"),     # untagged HD: BT.709
    (320, 240, None, "bt601"),      # untagged SD: BT.601
    (320, 240, "bt709", "bt709"),   # tagged: as the source was, whatever the size
    (1280, 720, "bt601", "bt601"),
])
def test_writer_tags_and_converts_as_the_source(tmp_path, w, h, matrix, want):
    src = tmp_path / "src.mp4"
    write_source(src, w, h, matrix)
    info = probe(src)
    assert info.colour.matrix == want
    out = tmp_path / "out.mp4"
    with VideoReader(src, hash_file=False) as r, \
            VideoWriter(out, info.width, info.height, info.time_base, info.fps, crf=10, colour=info.colour) as wr:
        frames = list(r.frames())
        for f in frames:
            wr.write(np.array(f.image), f.pts)
    # the pipeline sees the colours the camera meant: each patch decodes to its RGB (within coding error)
    img = frames[0].image
    for k, rgb in enumerate(PATCHES.values()):
        got = img[h // 2, k * w // 4 + w // 8].astype(int)
        assert np.abs(got - rgb).max() <= 6, (k, got, rgb)
    tags, yuv, rgb_out = tags_and_planes(out)
    code = 1 if want == "bt709" else 6
    assert tags == (code, code, code, 1)
    kr, kb = BT709_KR_KB if want == "bt709" else BT601_KR_KB
    for k, rgb in enumerate(PATCHES.values()):
        expected = limited(rgb, kr, kb)
        got = patch_values(yuv, w, h, k)
        assert np.allclose(got, expected, atol=2.0), (want, k, got, expected)
        assert np.abs(rgb_out[h // 2, k * w // 4 + w // 8].astype(int) - rgb).max() <= 6


def test_colour_choice_rules():
    assert colour_of(1920, 1080, None).matrix == "bt709" and colour_of(720, 576, 2).matrix == "bt601"
    assert colour_of(640, 360, 1).matrix == "bt709" and colour_of(1920, 1080, 5).matrix == "bt601"
    assert colour_of(1920, 1080, 9).matrix == "bt709"  # BT.2020: not converted, treated as untagged
    pal = colour_of(720, 576, 5, 5, 6)  # BT.601 625-line: its own primaries kept
    assert (pal.matrix_code, pal.primaries, pal.transfer) == (5, 5, 6)


def test_process_keeps_an_untagged_hd_source_as_bt709(tmp_path):
    src = tmp_path / "hd.mp4"
    write_source(src, 1280, 720, None, frames=3)
    result = process_video(src, tmp_path / "o", Signer.from_seed(bytes(range(32))))
    tags, yuv, _ = tags_and_planes(result.video)
    assert tags == (1, 1, 1, 1)
    red = patch_values(yuv, 1280, 720, 0)  # nobody in the scene: the patches pass through
    assert np.allclose(red, limited(PATCHES["red"], *BT709_KR_KB), atol=2.0), red
    assert Fraction(probe(result.video).fps) == 25
