"""`redact demo`: the README's main command, on the shipped clip's description and on a small clip."""

from __future__ import annotations

import json

from click.testing import CliRunner

from redact.cli import main
from redact.cli.cmd_process import demo_clip
from redact.media.video import probe


def test_shipped_demo_clip_meets_its_description():
    """demo_clips/README.md: at least 10 s of 1280x720 at 25 fps (PyAV/FFmpeg reads it)."""
    info = probe(demo_clip())
    assert (info.width, info.height) == (1280, 720)
    assert info.fps == 25 and info.duration >= 10 and info.frames >= 250
    assert demo_clip().stat().st_size < 5 * 1024 * 1024


def test_demo_writes_everything_it_points_to(crossing_clip, tmp_path):
    out = tmp_path / "demo"
    r = CliRunner().invoke(main, ["demo", "--clip", str(crossing_clip.path), "--out", str(out), "--quiet"])
    assert r.exit_code == 0, r.output
    for thing in ("report.html", "redacted.mp4", "package/envelope.json", "demo-key/demo.public.pem"):
        assert (out / thing).exists(), thing
    assert "Open first" in r.stdout and "pseudonymised" in r.stdout
    html = (out / "report.html").read_text()
    assert "VALID" in html
    v = CliRunner().invoke(main, ["verify", str(out / "package"), "--trusted-key", str(out / "demo-key" / "demo.public.pem"),
                                  "--video", str(out / "redacted.mp4"), "--source", str(crossing_clip.path), "--json"])
    assert v.exit_code == 0, v.output
    assert json.loads(v.stdout)
