"""Peak resident memory of `redact process` by frame size, next to the estimate the run checks.

For each size, a 2 s, 25 fps clip of four people walking across a hall (the scene of
throughput.py: scikit-image stills, astronaut() public domain, camera() CC0) is processed with the
default settings in a fresh process; the peak is VmHWM from /proc/self/status (Linux proc(5)),
printed with redact.pipeline.estimate_memory_bytes for the same clip. The README's table of the
memory a run needs comes from this script.

Usage: python benchmarks/memory_by_resolution.py [--sizes 1280x720 1920x1080 3840x2160 7680x4320]
       [--seconds 2] [--work DIR]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from throughput import scene  # the same scene as the throughput benchmark

from redact.media import synthetic as syn

CHILD = """
import json, sys
from redact.media.video import probe
from redact.pipeline import ProcessSettings, estimate_memory_bytes, process_video
from redact.provenance.signing import Signer
clip, out = sys.argv[1], sys.argv[2]
settings = ProcessSettings()
r = process_video(clip, out, Signer.from_seed(bytes(32)), settings)
hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM:")][0].split()[1]
print(json.dumps({"frames": r.frames, "peak_mib": int(hwm) / 1024,
                  "estimate_mib": estimate_memory_bytes(probe(clip), settings) / 2**20}))
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="*", default=["1280x720", "1920x1080", "3840x2160", "7680x4320"])
    ap.add_argument("--seconds", type=float, default=2.0)
    ap.add_argument("--work", type=Path, default=None, help="folder for the clips (kept between runs)")
    args = ap.parse_args()
    work = args.work or Path(tempfile.mkdtemp(prefix="redact-memory-"))
    work.mkdir(parents=True, exist_ok=True)
    print("| frame size | frames | peak resident memory | estimate (checked before a run) |")
    print("|---|---|---|---|")
    for size in args.sizes:
        w, h = (int(v) for v in size.split("x"))
        clip = work / f"scene-{w}x{h}-{args.seconds:g}s.mp4"
        if not clip.exists():
            syn.write_clip(scene(w, h, args.seconds), clip)
        out = Path(tempfile.mkdtemp(prefix="out-", dir=work)) / "out"
        res = subprocess.run([sys.executable, "-c", CHILD, str(clip), str(out)], capture_output=True, text=True,
                             check=True)
        r = json.loads(res.stdout.strip().splitlines()[-1])
        print(f"| {w}×{h} | {r['frames']} | {r['peak_mib']:,.0f} MiB | {r['estimate_mib']:,.0f} MiB |", flush=True)


if __name__ == "__main__":
    main()
