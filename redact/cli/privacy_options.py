"""The skeleton de-identification options (redact.skeletons.privacy) as one click decorator, shared by
`redact derive` and `redact process`: the command receives `privacy`, a PrivacyOptions, or None
when every option is left off."""

from __future__ import annotations

import functools
import sys

import click

from redact.errors import RedactError
from redact.skeletons.privacy import COORDINATE_MODES, MAX_DECIMALS, PrivacyOptions

PRIVACY_CAUTION = (
    "These options lower but do not remove the risk of re-identification: people are recognised "
    "from their gait in pose skeletons (GaitPT, arXiv 2308.10623) and from body proportions "
    "(arXiv 2402.08320). The result stays pseudonymised personal data."
)

#: Option field → command-line flag, so that library messages name the flag the user typed.
FLAGS = {
    "drop_keypoints": "--drop-keypoints", "normalise_proportions": "--normalise-proportions",
    "body_height": "--body-height", "coordinates": "--coordinates", "keep_position": "--keep-position",
    "keep_every": "--keep-every", "target_fps": "--target-fps", "decimals": "--decimals",
    "noise_px": "--noise-px", "new_ids": "--new-ids", "relative_time": "--relative-time",
}


def build_privacy(drop_keypoints: str | None, normalise_proportions: bool, body_height: float | None,
                  coordinates: str, keep_position: bool, keep_every: int, target_fps: float | None,
                  decimals: int | None, noise_px: float, new_ids: bool, relative_time: bool) -> PrivacyOptions | None:
    """PrivacyOptions from the command-line values, or None when every option is off (InputError if invalid)."""
    if not (drop_keypoints or normalise_proportions or body_height is not None or coordinates != "pixels"
            or keep_position or keep_every != 1 or target_fps is not None or decimals is not None
            or noise_px or new_ids or relative_time):
        return None
    return PrivacyOptions.from_cli(drop_keypoints=drop_keypoints, normalise_proportions=normalise_proportions,
                                   body_height=body_height, coordinates=coordinates, keep_position=keep_position,
                                   keep_every=keep_every, target_fps=target_fps, decimals=decimals,
                                   noise_px=noise_px, new_ids=new_ids, relative_time=relative_time)


def _flag_message(message: str) -> str:
    field, sep, rest = message.partition(":")
    return f"{FLAGS[field]}:{rest}" if sep and field in FLAGS else message


def privacy_options(fn):
    """Add the de-identification options; the command gets `privacy` (PrivacyOptions or None).

    An invalid combination becomes `error: --flag: reason` on stderr with exit code 2.
    """

    @click.option("--drop-keypoints", default=None, metavar="LIST",
                  help="Keypoints to remove (set to 0, 0 with confidence 0), comma-separated COCO-17 "
                       "names or indices 0-16; 'head' = nose, eyes and ears.")
    @click.option("--normalise-proportions", is_flag=True,
                  help="Give every bone a standard length, keeping joint angles (limb ratios identify people).")
    @click.option("--body-height", type=click.FloatRange(0, min_open=True), default=None, metavar="PX",
                  help="With --normalise-proportions: the same body height for everyone, in pixels "
                       "(default: each person's apparent height).")
    @click.option("--coordinates", type=click.Choice(COORDINATE_MODES), default="pixels", show_default=True,
                  help="pixels; frame = fractions of the frame width and height; track = relative to each "
                       "person's centre and size (position and size removed).")
    @click.option("--keep-position", is_flag=True,
                  help="With --coordinates track: keep each person's centre (as a fraction of the frame).")
    @click.option("--keep-every", type=click.IntRange(1), default=1, show_default=True, metavar="N",
                  help="Keep the first frame and every N-th frame after it.")
    @click.option("--target-fps", type=click.FloatRange(0, min_open=True), default=None, metavar="FPS",
                  help="Reduce the frame rate to at most FPS on an even grid (instead of --keep-every): every "
                       "k-th frame, k the smallest whole number with source fps / k <= FPS, so time steps "
                       "stay equal (25 fps to --target-fps 10 keeps every 3rd frame: 8.33 fps).")
    @click.option("--decimals", type=click.IntRange(0, MAX_DECIMALS), default=None,
                  help="Decimals of the coordinates (default: 2 for pixels, 5 for frame, 4 for track).")
    @click.option("--noise-px", type=click.FloatRange(0), default=0.0, metavar="PX",
                  help="Add Gaussian noise with this standard deviation in pixels to every keypoint and box.")
    @click.option("--new-ids", is_flag=True, help="Replace track ids with new random ids.")
    @click.option("--relative-time", is_flag=True, help="Times relative to the first frame kept.")
    @functools.wraps(fn)
    def wrapper(*args, drop_keypoints, normalise_proportions, body_height, coordinates, keep_position, keep_every,
                target_fps, decimals, noise_px, new_ids, relative_time, **kwargs):
        try:
            kwargs["privacy"] = build_privacy(drop_keypoints, normalise_proportions, body_height, coordinates,
                                              keep_position, keep_every, target_fps, decimals, noise_px,
                                              new_ids, relative_time)
        except RedactError as e:
            click.echo(f"error: {_flag_message(str(e))}", err=True)
            sys.exit(e.exit_code)
        return fn(*args, **kwargs)

    return wrapper
