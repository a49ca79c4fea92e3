"""The review page in a real browser: Debian's chromium driven by Playwright for Python.

Outside references: Chromium (Debian package `chromium`, /usr/bin/chromium) renders the page and
runs its script; Playwright for Python (PyPI `playwright`) drives it with real mouse and
keyboard events (Page.mouse, Page.keyboard, Locator.select_option, as its documentation
describes); PyAV/FFmpeg decodes the source and both redacted copies for the pixel checks; the
package verifier checks the new signature. No browser is downloaded: Playwright launches the
system Chromium through `executable_path`. People in the clip: skimage.data.astronaut() (public
domain, NASA) and skimage.data.camera() (CC0, Lav Varshney), pasted at known rectangles.

Set REDACT_REVIEW_SCREENSHOT=PATH to keep the page's screenshot (docs/review-page.png was made so).
"""

from __future__ import annotations

import json
import os
import re
import shutil
from dataclasses import replace

import av
import numpy as np
import pytest

from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.provenance.verify import verify_package
from redact.review.server import ReviewServer, ReviewSession
from redact.vision.motion import MotionSettings

CHROMIUM = "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]
KEYFRAMES = (15, 28, 40)  # where the reviewer draws the box: the astronaut is wholly in view here
MARGIN = 8  # pixels around the true rectangle when drawing (common practice: draw generously)
INSET = 3  # pixels of the rectangle's edge not checked (codec blur at the region's border; common practice)


class MissTheAstronaut:
    """The real default estimator, except that every detection whose box centre lies within the
    astronaut's true rectangle (grown by 10 px) is dropped: a person the model "missed" on every
    frame, so the pipeline never obscures her and the reviewer must."""

    concurrent = False  # counts its calls: one frame at a time, in order

    def __init__(self, truths):
        from redact.vision.pose import PoseEstimator

        self.inner = PoseEstimator.default()
        self.truths, self.calls = truths, 0

    def estimate(self, image):
        truth = self.truths[self.calls]
        self.calls += 1
        poses = self.inner.estimate(image)
        x0, y0, x1, y1 = truth.person_rects[0] + np.array([-10, -10, 10, 10])
        cx = (poses.boxes[:, 0] + poses.boxes[:, 2]) / 2
        cy = (poses.boxes[:, 1] + poses.boxes[:, 3]) / 2
        inside = (cx >= x0) & (cx <= x1) & (cy >= y0) & (cy <= y1) if truth.visible[0] else np.zeros(len(poses), bool)
        return poses.select(~inside)


def decoded(path) -> list[np.ndarray]:
    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]


@pytest.fixture(scope="module")
def browser():
    sync_api = pytest.importorskip("playwright.sync_api", reason="install the test extra: pip install -e '.[test]'")
    if not os.path.exists(CHROMIUM):
        pytest.fail("Debian's chromium is not installed (apt-get install -y chromium; .ci/run installs it)")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=FLAGS, headless=True)
        yield b
        b.close()


@pytest.fixture(scope="module")
def reviewed(crossing_clip, tmp_path_factory, browser):
    """Process with a missed person, review in the browser, apply; returns what the checks need."""
    d = tmp_path_factory.mktemp("review-page")
    signer = Signer.from_seed(bytes(range(11, 43)))
    # Without the motion net (as for a camera that moves): with it, the walker the estimator misses
    # would be obscured anyway, and there would be no miss for the reviewer to correct.
    no_motion = replace(ProcessSettings().scene, motion=MotionSettings(enabled=False))
    process_video(crossing_clip.path, d / "out", signer, ProcessSettings(scene=no_motion),
                  estimator=MissTheAstronaut(crossing_clip.truths))
    server = ReviewServer(ReviewSession(d / "out", crossing_clip.path, [signer.public_key], signer)).start()
    page = browser.new_page(viewport={"width": 1400, "height": 1000})
    errors: list[str] = []
    requests: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.on("console", lambda m: errors.append(f"{m.text} {m.location}") if m.type == "error" else None)
    page.on("request", lambda r: requests.append(r.url))
    try:
        steps = drive(page, server, crossing_clip, d)
    finally:
        page.close()
        server.stop()
    return {"dir": d, "signer": signer, "clip": crossing_clip, "errors": errors, "requests": requests,
            "steps": steps, "port": server.port}


def drive(page, server, clip, d) -> dict:
    """What a reviewer does on the page; returns what the page showed along the way."""
    seen: dict = {}
    page.goto(server.url)
    # Waits use selectors, not script: the page's Content-Security-Policy forbids evaluating strings.
    page.locator("#position", has_text="frame 0 of 49").wait_for()
    seen["source_hidden_at_start"] = page.locator("#sourcepane").is_hidden()
    seen["ranges_listed"] = page.locator("#rangerows tr").count()
    seen["shortcuts"] = page.locator("#keys").inner_text()
    body = page.locator("h1")

    def at(i: int) -> None:
        page.locator(f"#redacted[data-loaded='{i}']").wait_for(state="attached")

    body.click()
    for _ in range(3):
        page.keyboard.press("ArrowRight")
    at(3)
    page.keyboard.press("Shift+ArrowRight")
    at(13)
    seen["after_steps"] = page.locator("#position").inner_text()
    page.keyboard.press("End")
    at(49)
    page.keyboard.press("Home")
    at(0)
    page.keyboard.press("Space")  # play the whole video, every frame shown once
    page.locator("#coverage", has_text="whole video watched").wait_for(timeout=120_000)

    page.locator("input[name=tool][value=box]").check()
    for f in KEYFRAMES:
        page.locator("#jump").fill(str(f))
        page.locator("#jump").press("Enter")
        at(f)
        x0, y0, x1, y1 = (clip.truths[f].person_rects[0] + np.array([-MARGIN, -MARGIN, MARGIN, MARGIN])).tolist()
        x0, y0, x1, y1 = max(0, x0), max(0, y0), min(320, x1), min(240, y1)
        box = page.locator("#overlay").bounding_box()
        s = box["width"] / 320
        page.mouse.move(box["x"] + x0 * s, box["y"] + y0 * s)
        page.mouse.down()
        page.mouse.move(box["x"] + x1 * s, box["y"] + y1 * s, steps=4)
        page.mouse.up()
    page.locator("#endbox").click()
    body.click()
    page.keyboard.press("w")  # obscure frame 40 whole … then undo it
    seen["before_undo"] = page.locator("#corrections").inner_text()
    page.keyboard.press("Control+z")
    seen["corrections"] = page.locator("#corrections").inner_text()

    page.locator("#showsource").check()
    page.locator("#sourcepane").wait_for(state="visible")
    seen["source_caption"] = page.locator("#sourcepane figcaption").inner_text()
    page.locator("#jump").fill("20")  # between keyframes: the interpolated box, dashed
    page.locator("#jump").press("Enter")
    at(20)
    page.locator("#reviewer").fill("Test Reviewer")
    for k in range(seen["ranges_listed"]):
        page.locator("select.status").nth(k).select_option("checked")
    page.locator("textarea.note").first.fill("box drawn over a person the detector missed")
    page.locator("#saved", has_text=re.compile("^saved$")).wait_for()
    shot = d / "review-page.png"
    page.screenshot(path=str(shot), full_page=True)
    if os.environ.get("REDACT_REVIEW_SCREENSHOT"):
        shutil.copyfile(shot, os.environ["REDACT_REVIEW_SCREENSHOT"])
    seen["screenshot_bytes"] = shot.stat().st_size
    page.locator("#showsource").uncheck()

    page.locator("#apply").click()
    page.locator("#applied", has_text="New copy written").wait_for(timeout=300_000)
    seen["applied"] = page.locator("#applied").inner_text()
    page.locator("#copyname", has_text="review-1").wait_for()
    seen["error"] = page.locator("#error").inner_text()
    return seen


def test_the_page_works_with_keyboard_and_shows_what_it_should(reviewed):
    s = reviewed["steps"]
    assert s["source_hidden_at_start"] is True
    assert s["after_steps"].startswith("frame 13 of 49")
    assert s["ranges_listed"] >= 1
    for key in ("←", "→", "Space", "Home", "End", "Ctrl", "Esc"):
        assert key in s["shortcuts"]
    assert "SENSITIVE" in s["source_caption"]
    assert "whole frames obscured: frame 40" in s["before_undo"]
    assert "whole frames" not in s["corrections"]  # undone
    assert "moving box 1: frames 15–40, 3 keyframes (15, 28, 40)" in s["corrections"]
    assert s["screenshot_bytes"] > 10_000
    assert s["error"] == "" and reviewed["errors"] == []
    origin = f"http://127.0.0.1:{reviewed['port']}/"
    assert all(u.startswith(origin) for u in reviewed["requests"])  # nothing from anywhere else


def test_the_new_copy_obscures_the_missed_person_on_every_frame_of_the_box(reviewed):
    d, truths = reviewed["dir"], reviewed["clip"].truths
    source, before, after = (decoded(p) for p in (reviewed["clip"].path, d / "out" / "redacted.mp4",
                                                   d / "out" / "review-1" / "redacted.mp4"))
    assert len(after) == len(source) == 50
    x0, y0, x1, y1 = (truths[KEYFRAMES[0]].person_rects[0] + [INSET, INSET, -INSET, -INSET]).tolist()
    # The precondition: the scripted miss left her visible in the first copy (close to the source).
    assert np.abs(before[KEYFRAMES[0]][y0:y1, x0:x1].astype(int) - source[KEYFRAMES[0]][y0:y1, x0:x1]).mean() < 8
    for f in range(KEYFRAMES[0], KEYFRAMES[-1] + 1):
        x0, y0, x1, y1 = (truths[f].person_rects[0] + [INSET, INSET, -INSET, -INSET]).tolist()
        new, src = after[f][y0:y1, x0:x1].astype(int), source[f][y0:y1, x0:x1].astype(int)
        assert np.abs(new - 128).mean() < 4, f"frame {f}: not the solid grey fill"
        assert np.abs(new - src).mean() > 15, f"frame {f}: still looks like the source"


def test_the_new_package_verifies_and_records_the_review(reviewed):
    d = reviewed["dir"] / "out" / "review-1"
    v = verify_package(d / "package", [reviewed["signer"].public_key], video=d / "redacted.mp4")
    log = {e["kind"]: e for e in (json.loads(x) for x in (d / "package" / "log.jsonl").read_bytes().splitlines())}
    boxes = log["corrections"]["entries"]["moving_boxes"]
    assert [k["frame"] for k in boxes[0]["keyframes"]] == list(KEYFRAMES)
    assert log["corrections"]["applied"]["moving_boxes[0]"]["ranges"] == [[KEYFRAMES[0], KEYFRAMES[-1]]]
    r = log["human-review"]
    assert r["reviewer"] == "Test Reviewer" and r["whole_video_watched"] is True
    assert r["ranges_checked"] == r["ranges_total"] and r["ranges"][0]["note"].startswith("box drawn")
    assert v.predicate.human_review["reviewer"] == "Test Reviewer"
    assert json.loads((d / "package" / "corrections.json").read_bytes())["moving_boxes"] == boxes
