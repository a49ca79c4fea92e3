"""Build the demo clip: the ticket hall of the (invented) Wrenfield Lantern Museum, 12 s, 1280×720, 25 fps.

People come from scikit-image's stills, loaded from the installed package (never copied here):
astronaut() public domain (NASA); camera() CC0 1.0 (photographer Lav Varshney).
Deterministic: seeded noise and byte-reproducible encoder settings, so a rerun gives the same file.

Run from the repository root:
    python demo_clips/make_demo.py            # writes demo_clips/ticket_hall.mp4
"""

from __future__ import annotations

import argparse
import os
import sys
from fractions import Fraction
from pathlib import Path

from redact.media import synthetic as syn

W, H, FPS, SECONDS = 1280, 720, Fraction(25), 12.0

SCENE = syn.SceneSpec(
    width=W, height=H, fps=FPS, seconds=SECONDS,
    actors=(
        # A member of staff far back by the cloakroom door, small, walking in from the right edge
        # (partly off-screen at first) towards the centre and stopping there.
        syn.Actor("camera", ((0.0, 1300.0, 330.0, 210.0), (7.0, 760.0, 330.0, 210.0), (12.0, 760.0, 330.0, 210.0)),
                  mirror=True),
        # A visitor crossing the hall from the left, through the unlit corner, to the ticket desk.
        syn.Actor("astronaut", ((0.0, 150.0, 430.0, 430.0), (6.0, 640.0, 440.0, 450.0), (12.0, 1110.0, 450.0, 470.0))),
        # A photographer walking right to left, crossing the visitor near the middle around t≈5 s,
        # then into the unlit corner on the left.
        syn.Actor("camera", ((0.0, 1180.0, 470.0, 400.0), (5.0, 700.0, 470.0, 400.0), (12.0, 120.0, 470.0, 400.0)),
                  mirror=True),
    ),
    background="hall",
    dim_region=(0, 0, 380, H),  # the corner by the entrance where the ceiling light is out
    dim_factor=0.28,
    noise=1.5,
    seed=2024,
)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(Path(__file__).with_name("ticket_hall.mp4")))
    ap.add_argument("--crf", type=int, default=22)
    args = ap.parse_args(argv)
    out = Path(args.out)
    tmp = out.with_name(out.name + ".partial.mp4")
    truths = syn.write_clip(SCENE, tmp, crf=args.crf, preset="medium")
    os.replace(tmp, out)  # only a finished file gets the final name
    print(f"wrote {out} ({out.stat().st_size / 1e6:.2f} MB, {len(truths)} frames)", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
