"""The signed parameters, the transform log and the run agree on the settings actually used.

A 10 frames/s clip makes the coast frames differ from the tracker's default (1.5 s at 10 fps = 15
frames, not 30) and the look-back window from 25 fps's (5 frames, not 12). What ran is read from
the run itself: the tracker's configuration and the look-back window as constructed, and the
figures in the per-frame obscure records. The statement is read after the project verifier checks
its Ed25519 signature (RFC 8032) over the DSSE payload. People: the crossing scene of
tests/conftest.py (astronaut(): public domain, NASA; camera(): CC0, Lav Varshney).
"""

from __future__ import annotations

import dataclasses
import json
from fractions import Fraction

import pytest
from conftest import crossing_spec, make_clip

import redact.finishing
import redact.pipeline
import redact.vision.tracking
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.provenance.verify import verify_package
from redact.redaction.render import RenderSettings

SEED = bytes(range(32))


@pytest.fixture(scope="module")
def clip10(tmp_path_factory):
    spec = dataclasses.replace(crossing_spec(seconds=1.6), fps=Fraction(10))
    return make_clip(tmp_path_factory.mktemp("fps10"), "crossing10.mp4", spec)


def _run(clip, out, settings, monkeypatch):
    """Process, and keep what the run itself used: tracker configs, look-back windows, records."""
    ran = {"trackers": [], "windows": [], "records": []}

    class SpyTracker(redact.vision.tracking.Tracker):
        def __init__(self, cfg):
            ran["trackers"].append(cfg)
            super().__init__(cfg)

    class SpyLookBack(redact.finishing.LookBack):
        def __init__(self, frames, *a, **k):
            ran["windows"].append(frames)
            super().__init__(frames, *a, **k)

    monkeypatch.setattr(redact.vision.tracking, "Tracker", SpyTracker)
    monkeypatch.setattr(redact.pipeline, "LookBack", SpyLookBack)
    signer = Signer.from_seed(SEED)
    result = process_video(clip.path, out, signer, settings, records=ran["records"].append)
    verified = verify_package(result.package, [signer.public_key])
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    return verified.predicate.to_json()["parameters"], {e["kind"]: e for e in log}, ran


@pytest.mark.parametrize("style,figure,drawn", [("figure", False, True), ("blur", False, False),
                                                ("pixelate", True, True)])
def test_signed_parameters_and_log_say_what_ran(clip10, tmp_path, monkeypatch, style, figure, drawn):
    settings = ProcessSettings(render=RenderSettings(style=style, figure=figure))
    params, log, ran = _run(clip10, tmp_path / "out", settings, monkeypatch)

    (cfg,) = ran["trackers"]
    assert cfg.max_coast_frames == 15  # 1.5 s at 10 frames/s
    signed_tracker = params["tracker"]
    logged_tracker = {k: v for k, v in log["tracking"].items() if k in signed_tracker}
    assert signed_tracker["max_coast_frames"] == logged_tracker["max_coast_frames"] == 15
    assert signed_tracker == logged_tracker == json.loads(json.dumps(dataclasses.asdict(cfg)))

    assert ran["windows"] == [5] == [params["lookback_window_frames"]] == [log["redaction"]["lookback_window_frames"]]

    figures_drawn = sum(len(r.figures) > 0 for r in ran["records"])
    assert (figures_drawn > 0) is drawn
    assert params["render"]["figure"] is log["redaction"]["figures"] is drawn
    assert log["redaction"]["frames_with_figures"] == figures_drawn

    assert params["threads"] == log["model"]["threads"] and params["model_frames"] == log["model"]["frames_at_once"]
    assert params["coast_seconds"] == log["tracking"]["coast_seconds"] == 1.5
    assert {k: log["detection"][k] for k in params["pose"]} == params["pose"]


def test_the_report_table_shows_the_signed_effective_values(clip10, tmp_path, monkeypatch):
    from redact.report.document import make_report

    params, _, _ = _run(clip10, tmp_path / "out", ProcessSettings(), monkeypatch)
    report = make_report(tmp_path / "out" / "package", [Signer.from_seed(SEED).public_key])
    html = report.html.decode("utf-8")
    assert report.verified and params["tracker"]["max_coast_frames"] == 15 and params["render"]["figure"] is True
    assert '<td class="mono">parameters.tracker.max_coast_frames</td><td class="mono">15</td>' in html
    assert '<td class="mono">parameters.render.figure</td><td class="mono">true</td>' in html
