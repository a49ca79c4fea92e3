"""Which Y'CbCr colour a stream is in, and RGB → Y'CbCr 4:2:0 conversion to match the tag we write.

A stream's colour tags (ITU-T H.273 code points, as FFmpeg numbers them: matrix coefficients,
colour primaries, transfer characteristics) say how its Y'CbCr samples turn into RGB. The
redacted copy keeps the source's tags and converts with the matching matrix, so it looks as the
source does. A source without tags is read and written as BT.709 when it is HD and as BT.601
(SMPTE 170M) otherwise, the guess players and FFmpeg's own tools make (common practice; HD here:
at least 1280 wide or 720 high). Matrices we do not convert (e.g. BT.2020, whose 8-bit use is
rare) are treated as untagged. The range is always limited ("MPEG", 16-235 luma), as yuv420p
H.264 for browsers is.

Conversion (ITU-R BT.601-7 §2.5 and BT.709-6 Table 4 items 3.2-3.5): E'Y = Kr R' + Kg G' + Kb B',
E'Cb = (B' - E'Y) / (2 (1 - Kb)), E'Cr = (R' - E'Y) / (2 (1 - Kr)), with R', G', B' in 0..1;
8-bit limited range Y = 16 + 219 E'Y, Cb = 128 + 224 E'Cb, Cr = 128 + 224 E'Cr; chroma averaged
over 2 × 2 pixels. BT.601: Kr 0.299, Kb 0.114; BT.709: Kr 0.2126, Kb 0.0722.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TypeGuard

import cv2
import numpy as np

# ITU-T H.273 code points (FFmpeg's AVColorSpace / AVColorPrimaries / AVColorTransferCharacteristic).
BT709_CODE = 1
UNSPECIFIED = 2
BT470BG = 5  # BT.601 625-line (PAL): the same matrix as SMPTE 170M
SMPTE170M = 6  # BT.601 525-line (NTSC)
RANGE_LIMITED = 1  # AVCOL_RANGE_MPEG

#: Smallest frame counted as HD for an untagged stream (common practice).
HD_MIN_WIDTH, HD_MIN_HEIGHT = 1280, 720

_KR_KB = {"bt709": (0.2126, 0.0722), "bt601": (0.299, 0.114)}


@dataclass(frozen=True)
class Colour:
    """A stream's colour: the matrix we convert with ("bt709" or "bt601") and the three tags we write."""

    matrix: str
    matrix_code: int
    primaries: int
    transfer: int

    def as_dict(self) -> dict:
        return {"matrix": self.matrix, "colorspace": self.matrix_code, "color_primaries": self.primaries,
                "color_trc": self.transfer}


BT709 = Colour("bt709", BT709_CODE, BT709_CODE, BT709_CODE)
BT601 = Colour("bt601", SMPTE170M, SMPTE170M, SMPTE170M)


def is_hd(width: int, height: int) -> bool:
    return width >= HD_MIN_WIDTH or height >= HD_MIN_HEIGHT


def colour_of(width: int, height: int, matrix: int | None, primaries: int | None = None,
              transfer: int | None = None) -> Colour:
    """The colour of a stream from its tags (None or 2 = unspecified): as tagged when we can convert
    its matrix, else BT.709 for HD and BT.601 otherwise; primaries and transfer are kept when tagged."""
    if matrix == BT709_CODE:
        base = BT709
    elif matrix in (BT470BG, SMPTE170M):
        base = Colour("bt601", int(matrix), SMPTE170M, SMPTE170M)
    else:
        base = BT709 if is_hd(width, height) else BT601
    def tagged(v: int | None) -> TypeGuard[int]:
        return v is not None and v not in (0, UNSPECIFIED)

    return Colour(base.matrix, base.matrix_code, int(primaries) if tagged(primaries) else base.primaries,
                  int(transfer) if tagged(transfer) else base.transfer)


def decode_colorspace(frame_colorspace: int | None, width: int, height: int) -> str | None:
    """The swscale colorspace to read a decoded frame with: None (the frame's own tag) when it is
    tagged, "ITU709" for an untagged HD frame, "ITU601" for an untagged SD one."""
    if frame_colorspace not in (None, 0, UNSPECIFIED):
        return None
    return "ITU709" if is_hd(width, height) else "ITU601"


def _matrix(kr: float, kb: float) -> np.ndarray:
    """3 × 4 affine map from 8-bit R'G'B' codes to 8-bit limited-range Y'CbCr (see the module docstring)."""
    kg = 1.0 - kr - kb
    y = np.array([kr, kg, kb])
    cb = (np.array([0.0, 0.0, 1.0]) - y) / (2 * (1 - kb))
    cr = (np.array([1.0, 0.0, 0.0]) - y) / (2 * (1 - kr))
    m = np.stack([219 * y, 224 * cb, 224 * cr]) / 255.0
    return np.concatenate([m, np.array([[16.0], [128.0], [128.0]])], axis=1)


_AFFINE = {name: _matrix(*k) for name, k in _KR_KB.items()}


def rgb_to_i420(rgb: np.ndarray, colour: Colour) -> np.ndarray:
    """RGB uint8 [H, W, 3] (H, W even) → I420 planes as one uint8 [3H/2, W] array (Y, then U, then V)."""
    h, w = rgb.shape[:2]
    if colour.matrix == "bt601":
        # OpenCV's BT.601 limited-range conversion (SIMD; about a fifth of swscale's time at 720p).
        return cv2.cvtColor(np.ascontiguousarray(rgb), cv2.COLOR_RGB2YUV_I420)
    ycc = cv2.transform(np.ascontiguousarray(rgb), _AFFINE[colour.matrix])  # rounds and saturates to uint8
    y = ycc[:, :, 0]
    u = cv2.resize(ycc[:, :, 1], (w // 2, h // 2), interpolation=cv2.INTER_AREA)
    v = cv2.resize(ycc[:, :, 2], (w // 2, h // 2), interpolation=cv2.INTER_AREA)
    return np.concatenate([y.reshape(-1), u.reshape(-1), v.reshape(-1)]).reshape(h * 3 // 2, w)
