"""`redact report`: the self-contained, printable disclosure report.

Outside references: headless Chromium (Debian package `chromium`) loads the page through the
Chrome DevTools Protocol over `--remote-debugging-pipe` (stdlib only: NUL-separated JSON on
fds 3/4, as documented for Chromium's remote debugging pipe) and reports every network request
(Network.requestWillBeSent), console message (Runtime.consoleAPICalled, Log.entryAdded) and
exception; it returns the rendered text, a screenshot and a PDF print of the page. PyAV/FFmpeg
decodes the source frames; SSIM is scikit-image's structural_similarity; Pillow decodes images.
People in the clip come from scikit-image's stills (astronaut(): public domain, NASA; camera():
CC0, Lav Varshney), pasted at known rectangles (tests/conftest.py).
"""

from __future__ import annotations

import base64
import fcntl
import html
import io
import json
import os
import queue
import re
import shutil
import subprocess
import threading
from html.parser import HTMLParser
from pathlib import Path

import av
import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image
from skimage.metrics import structural_similarity

from redact.cli import main
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer, load_public_key
from redact.report.document import build_report, make_report
from redact.report.plots import thumbnail_jpeg
from redact.vision.pose import PoseEstimator, PoseSettings

SEED = bytes(range(32))
OTHER_SEED = bytes(range(1, 33))
FAULT_FRAMES = {20, 21}  # inference raises here: the frames are obscured and flagged ("fault")
HOSTILE = 'Ann <script>alert("x")</script> & <img src=http://example.invalid/a.png>'
CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)
# Person slivers narrower than this at the frame edge are not compared (SSIM's 7-pixel window
# needs room; too small to recognise anyone) — common practice, as tests/test_process.py.
MIN_SIDE = 16
SSIM_LEAK = 0.9  # the brief's threshold: above this a crop counts as a copy of the person


class FaultyEstimator:
    """The real default estimator, except that it raises on chosen frames."""

    def __init__(self, faults, settings: PoseSettings = PoseSettings()):
        self.inner = PoseEstimator.default(settings)
        self.faults, self.calls = set(faults), 0

    def estimate(self, image):
        i = self.calls
        self.calls += 1
        if i in self.faults:
            raise RuntimeError(f"injected fault at frame {i}")
        return self.inner.estimate(image)


@pytest.fixture(scope="module")
def made(crossing_clip, tmp_path_factory):
    """One processed package (with a hostile disclosure string), its key, and its reports."""
    d = tmp_path_factory.mktemp("report")
    signer = Signer.from_seed(SEED)
    pub = d / "steward.public.pem"
    pub.write_bytes(signer.public_pem)
    result = process_video(crossing_clip.path, d / "out", signer, ProcessSettings(),
                           disclosure={"recipient": HOSTILE, "organisation": "Example Council",
                                       "purpose": "subject access request", "date": "2026-01-02"},
                           estimator=FaultyEstimator(FAULT_FRAMES))
    key = load_public_key(pub)
    report = make_report(result.package, [key], video=result.video, source=crossing_clip.path)
    html_path = d / "report.html"
    html_path.write_bytes(report.html)

    tampered = d / "tampered"
    shutil.copytree(result.package, tampered)
    skel = tampered / "skeletons.jsonl"
    data = bytearray(skel.read_bytes())
    i = data.index(b'"t":') + 5  # a digit of the first row's time
    data[i] = ord("7") if data[i] != ord("7") else ord("3")
    skel.write_bytes(bytes(data))
    bad = make_report(tampered, [key], video=result.video)
    bad_path = d / "tampered.html"
    bad_path.write_bytes(bad.html)
    return {"clip": crossing_clip, "result": result, "pub": pub, "key": key, "report": report,
            "html": report.html.decode("utf-8"), "html_path": html_path, "bad": bad,
            "bad_html": bad.html.decode("utf-8"), "bad_path": bad_path, "dir": d}


# --------------------------------------------------------------------------- Chromium harness


class Chromium:
    """Headless Chromium driven by the DevTools Protocol over --remote-debugging-pipe."""

    FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", "--no-first-run", "--hide-scrollbars",
             # any request that escapes would go to a closed port and fail (no real network)
             "--proxy-server=127.0.0.1:9", "--remote-debugging-pipe"]

    def __init__(self, user_data_dir: Path):
        if CHROMIUM is None:
            pytest.fail("headless Chromium not found: install the Debian package `chromium` "
                        "(apt-get install -y chromium; .ci/run installs it)")
        cmd_r, cmd_w = os.pipe()   # we write commands; Chromium reads them on fd 3
        out_r, out_w = os.pipe()   # Chromium writes replies and events on fd 4
        cmd_r, out_w = (self._high(fd) for fd in (cmd_r, out_w))  # never 3 or 4 themselves
        self.proc = subprocess.Popen(
            ["bash", "-c", f'exec "$@" 3<&{cmd_r} 4>&{out_w} {cmd_r}<&- {out_w}>&-', "bash", CHROMIUM,
             *self.FLAGS, f"--user-data-dir={user_data_dir}", "about:blank"],
            pass_fds=(cmd_r, out_w), stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL)
        os.close(cmd_r)
        os.close(out_w)
        self._w = os.fdopen(cmd_w, "wb", buffering=0)
        self._r = os.fdopen(out_r, "rb", buffering=0)
        self._q: queue.Queue = queue.Queue()
        self._id = 0
        self.events: list[dict] = []
        threading.Thread(target=self._pump, daemon=True).start()

    @staticmethod
    def _high(fd: int) -> int:
        """The same pipe end on a descriptor number of at least 10 (the original is closed)."""
        high = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
        os.close(fd)
        return high

    def _pump(self) -> None:
        buf = b""
        while True:
            chunk = self._r.read(1 << 16)
            if not chunk:
                self._q.put(None)
                return
            buf += chunk
            while b"\0" in buf:
                msg, buf = buf.split(b"\0", 1)
                self._q.put(json.loads(msg))

    def send(self, method: str, params: dict | None = None, session: str | None = None, timeout: float = 30):
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        self._w.write(json.dumps(msg).encode() + b"\0")
        while True:
            m = self._q.get(timeout=timeout)
            if m is None:
                raise RuntimeError(f"Chromium closed the pipe while waiting for {method}")
            if m.get("id") == self._id:
                if "error" in m:
                    raise RuntimeError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_event(self, method: str, session: str, timeout: float = 30) -> dict:
        for e in self.events:
            if e.get("method") == method and e.get("sessionId") == session:
                return e
        while True:
            m = self._q.get(timeout=timeout)
            if m is None:
                raise RuntimeError(f"Chromium closed the pipe while waiting for {method}")
            self.events.append(m)
            if m.get("method") == method and m.get("sessionId") == session:
                return m

    def render(self, path: Path, width: int = 1000, height: int = 1400) -> dict:
        """Load a file in a new tab; return its text, screenshot PNG, PDF print, requests, console."""
        target = self.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        sid = self.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Network", "Runtime", "Log", "Page"):
            self.send(f"{domain}.enable", session=sid)
        self.send("Emulation.setDeviceMetricsOverride",
                  {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False}, sid)
        self.send("Page.navigate", {"url": path.resolve().as_uri()}, sid)
        self.wait_event("Page.loadEventFired", sid)
        text = self.send("Runtime.evaluate", {"expression": "document.body.innerText", "returnByValue": True},
                         sid)["result"]["value"]
        png = base64.b64decode(self.send("Page.captureScreenshot", {"format": "png"}, sid)["data"])
        pdf = base64.b64decode(self.send("Page.printToPDF", {"preferCSSPageSize": True}, sid)["data"])
        mine = [e for e in self.events if e.get("sessionId") == sid]
        requests = [e["params"]["request"]["url"] for e in mine if e.get("method") == "Network.requestWillBeSent"]
        console = [e["params"] for e in mine if e.get("method") in ("Runtime.consoleAPICalled", "Runtime.exceptionThrown")]
        console += [e["params"]["entry"] for e in mine if e.get("method") == "Log.entryAdded"
                    and e["params"]["entry"].get("level") in ("error", "warning")]
        self.send("Target.closeTarget", {"targetId": target})
        return {"text": text, "png": png, "pdf": pdf, "requests": requests, "console": console}

    def print_layout(self, path: Path, paper_in: tuple[float, float], margin_mm: float = 15.0) -> dict:
        """Print `path` on paper of paper_in inches (Page.printToPDF, the page's own margins) and lay it
        out as print at the printable width (Emulation.setEmulatedMedia "print"); return the PDF, the
        content height and printable height in CSS px, and where each file name (.name) wraps."""
        target = self.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        sid = self.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        self.send("Page.enable", session=sid)
        px = 96.0  # CSS px per inch
        margin = margin_mm / 25.4 * px
        width, height = paper_in[0] * px - 2 * margin, paper_in[1] * px - 2 * margin
        self.send("Emulation.setDeviceMetricsOverride",
                  {"width": int(width), "height": int(height), "deviceScaleFactor": 1, "mobile": False}, sid)
        self.send("Emulation.setEmulatedMedia", {"media": "print"}, sid)
        self.send("Page.navigate", {"url": path.resolve().as_uri()}, sid)
        self.wait_event("Page.loadEventFired", sid)
        js = """(() => {
          const out = [];
          for (const el of document.querySelectorAll('.name')) {
            const w = document.createTreeWalker(el, NodeFilter.SHOW_TEXT);
            let prevTop = null, prev = '', n, text = '', breaks = [];
            while ((n = w.nextNode())) {
              for (let i = 0; i < n.length; i++) {
                const r = document.createRange(); r.setStart(n, i); r.setEnd(n, i + 1);
                const rects = r.getClientRects();
                if (rects.length) {
                  const top = rects[0].top;
                  if (prevTop !== null && top > prevTop + 2) breaks.push(prev);
                  prevTop = top;
                }
                prev = n.data[i]; text += n.data[i];
              }
            }
            out.push({text: text, breaks: breaks});
          }
          return {height: document.documentElement.scrollHeight, names: out};
        })()"""
        got = self.send("Runtime.evaluate", {"expression": js, "returnByValue": True}, sid)["result"]["value"]
        pdf = base64.b64decode(self.send("Page.printToPDF", {"preferCSSPageSize": False, "paperWidth": paper_in[0],
                                                             "paperHeight": paper_in[1]}, sid)["data"])
        self.send("Target.closeTarget", {"targetId": target})
        return {"pdf": pdf, "content_height": got["height"], "page_height": height, "names": got["names"]}

    def close(self) -> None:
        try:
            self.send("Browser.close", timeout=10)
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()


@pytest.fixture(scope="module")
def rendered(made, tmp_path_factory):
    """The probe page, the report and the tampered report, rendered by one headless Chromium."""
    d = tmp_path_factory.mktemp("chromium")
    probe = d / "probe.html"
    probe.write_text('<!DOCTYPE html><html><body><p>probe page</p><img src="http://example.invalid/p.png">'
                     '<script>console.error("probe console error")</script></body></html>')
    browser = Chromium(d / "profile")
    try:
        return {"probe": browser.render(probe), "report": browser.render(made["html_path"]),
                "bad": browser.render(made["bad_path"]),
                # paper sizes: ISO 216 A4 210 × 297 mm; US Letter 8.5 × 11 in (ANSI/ASME Y14.1)
                "a4": browser.print_layout(made["html_path"], (210 / 25.4, 297 / 25.4)),
                "letter": browser.print_layout(made["html_path"], (8.5, 11.0)),
                "narrow": browser.print_layout(made["html_path"], (3.6, 11.0))}
    finally:
        browser.close()


def _non_local(urls: list[str]) -> list[str]:
    return [u for u in urls if not u.startswith(("file:", "data:", "about:"))]


def test_the_harness_sees_requests_and_console_errors(rendered):
    # Control: the same harness must catch a page that fetches and logs, or the checks below mean nothing.
    probe = rendered["probe"]
    assert "probe page" in probe["text"]
    assert any("example.invalid" in u for u in _non_local(probe["requests"]))
    assert any("probe console error" in json.dumps(c) for c in probe["console"])


def test_report_renders_offline_without_console_errors(rendered, made):
    page = rendered["report"]
    assert _non_local(page["requests"]) == [], page["requests"]
    assert page["console"] == [], page["console"]
    text = page["text"]
    # the flagged ranges, the source hash and the verification status, as rendered
    assert "Signature and contents: VALID" in text
    assert made["result"].source_sha256 in text
    assert made["result"].review, "the clip with injected faults must have review ranges"
    for r in made["result"].review:
        assert f"{r.frame_start}–{r.frame_end}" in text
    assert "frame failed and was fully obscured" in text  # the injected faults, in plain words
    assert made["report"].key_id in text
    # the hostile disclosure string is shown as text, never run or loaded
    assert HOSTILE in text
    assert "pseudonymised, not anonymous" in text


def test_screenshot_shows_the_status_banner(rendered):
    png = rendered["report"]["png"]
    assert len(png) > 20_000
    im = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    assert im.shape[:2] == (1400, 1000)
    # the VALID banner border (#2e7d32) is drawn near the top; the FAILED red (#b00020) is not
    top = im[:500]
    green = (np.abs(top - [0x2e, 0x7d, 0x32]).sum(axis=2) < 30).sum()
    red = (np.abs(top - [0xb0, 0x00, 0x20]).sum(axis=2) < 30).sum()
    assert green > 1000 and red == 0
    bad = np.asarray(Image.open(io.BytesIO(rendered["bad"]["png"])).convert("RGB")).astype(int)[:500]
    assert (np.abs(bad - [0xb0, 0x00, 0x20]).sum(axis=2) < 30).sum() > 1000


def _pages(pdf: bytes) -> int:
    return len(re.findall(rb"/Type\s*/Page(?!s)", pdf))


def test_print_view_makes_a_paged_pdf(rendered):
    pdf = rendered["report"]["pdf"]
    assert pdf.startswith(b"%PDF-") and _pages(pdf) >= 2


@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_printed_report_fits_the_paper_without_near_empty_pages(rendered, paper):
    """Printed on A4 and on US Letter the pages hold the content without pages left nearly empty:
    no more pages than the content's height in print layout needs, plus one for rows and pictures
    kept whole (the old one-section-per-page layout printed at least 8 pages for less)."""
    p = rendered[paper]
    pages = _pages(p["pdf"])
    needed = -(-p["content_height"] // p["page_height"])
    assert p["pdf"].startswith(b"%PDF-") and needed >= 2
    assert needed <= pages <= needed + 1, (paper, pages, needed)


def test_file_names_wrap_only_after_a_separator(rendered):
    """A file name wraps after / . _ or -, never inside a word, on paper and on a very narrow page."""
    wrapped = 0
    for paper in ("a4", "letter", "narrow"):
        names = rendered[paper]["names"]
        assert any(n["text"].endswith(".jsonl") for n in names)  # the signed files table is there
        for n in names:
            assert all(c in "/._-" for c in n["breaks"]), (paper, n)
            wrapped += len(n["breaks"])
    assert wrapped > 0  # the narrow page did wrap names: the check above had something to check


class _Tags(HTMLParser):
    """Every start tag and its attributes, as the stdlib HTML parser (html.parser) sees them."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, {k: v or "" for k, v in attrs}))


def test_html_is_self_contained(made):
    for page in (made["html"], made["bad_html"]):
        parser = _Tags()
        parser.feed(page)
        names = {t for t, _ in parser.tags}
        assert names.isdisjoint({"script", "link", "iframe", "object", "embed", "base", "frame", "audio",
                                 "video", "source"}), names
        for tag, attrs in parser.tags:
            for k, v in attrs.items():
                if k in ("src", "href", "xlink:href", "srcset", "poster", "action", "data"):
                    assert v.startswith(("data:image/", "#")), (tag, k, v[:80])
                assert not k.startswith("on"), (tag, k)  # no event handlers
                assert "url(" not in v or re.fullmatch(r"[^()]*(url\(#[^()]*\)[^()]*)+", v), (tag, k, v)
        css = re.findall(r"<style>(.*?)</style>", page, re.S)
        assert css and all("@import" not in c and "url(" not in c for c in css)
        assert len([t for t in parser.tags if t[0] == "svg"]) >= 1  # the timeline is inline SVG
    # the hostile string was escaped: its tags are text, not elements
    assert "&lt;script&gt;" in made["html"] and "&lt;img src=http://" in made["html"]


def _thumbnails(page: str) -> list[tuple[int, np.ndarray]]:
    out = []
    for m in re.finditer(r'<img class="thumb" src="data:image/(?:jpeg|png);base64,([A-Za-z0-9+/=]+)"[^>]*'
                         r'alt="redacted frame (\d+)"', page):
        im = Image.open(io.BytesIO(base64.b64decode(m.group(1)))).convert("RGB")
        out.append((int(m.group(2)), np.asarray(im)))
    return out


def _source_frames(path: Path, wanted: set[int]) -> dict[int, np.ndarray]:
    out = {}
    with av.open(str(path)) as c:
        for i, f in enumerate(c.decode(c.streams.video[0])):
            if i in wanted:
                out[i] = f.to_ndarray(format="rgb24")
    return out


def _ssim(a: np.ndarray, b: np.ndarray) -> float:
    return structural_similarity(a, b, channel_axis=2, data_range=255)


def test_thumbnails_never_show_the_unredacted_source(made):
    thumbs = _thumbnails(made["html"])
    assert len(thumbs) == len(made["result"].review) == made["report"].thumbnails > 0
    clip = made["clip"]
    src = _source_frames(clip.path, {i for i, _ in thumbs})
    compared = 0
    for i, thumb in thumbs:
        frame = src[i]
        assert thumb.shape == frame.shape  # 320×240 source, thumbnails are at most 320 wide: no scaling
        truth = clip.truths[i]
        for rect, visible in zip(truth.person_rects, truth.visible):
            x0, y0, x1, y1 = (int(v) for v in rect)
            if not visible or min(x1 - x0, y1 - y0) < MIN_SIDE:
                continue
            a, b = frame[y0:y1, x0:x1], thumb[y0:y1, x0:x1]
            assert not np.array_equal(a, b)
            s = _ssim(a, b)
            assert s < SSIM_LEAK, f"frame {i}: the person at {rect} is visible in the report (SSIM {s:.3f})"
            # control: the same crop of the source through the report's JPEG encoding scores high
            control = thumbnail_jpeg(frame)[0]
            c = np.asarray(Image.open(io.BytesIO(control)).convert("RGB"))[y0:y1, x0:x1]
            assert _ssim(a, c) > SSIM_LEAK
            compared += 1
    assert compared > 0, "no person crop was compared"


def test_source_given_as_video_gives_no_pictures(made):
    # A mistaken --video ORIGINAL must never put unredacted people into the report.
    r = make_report(made["result"].package, [made["key"]], video=made["clip"].path)
    page = r.html.decode()
    assert r.thumbnails == 0 and _thumbnails(page) == []
    assert "ORIGINAL source" in page
    assert not r.verified  # the verifier also rejects it as the redacted video


def test_no_video_no_pictures(made):
    page = build_report(made["result"].package, [made["key"]]).decode()
    assert _thumbnails(page) == [] and "No redacted video was given" in page
    assert "Signature and contents: VALID" in page


def test_tampered_package_says_verification_failed(made, rendered):
    bad = made["bad"]
    assert not bad.verified
    assert any("skeletons.jsonl" in f and "SHA-256" in f for f in bad.findings)
    text = rendered["bad"]["text"]
    assert "VERIFICATION FAILED" in text
    assert "skeletons.jsonl: SHA-256 does not match the signed statement" in text
    # it still renders what it can, from the unverified package
    assert made["result"].source_sha256 in text
    assert "Timeline" in text and "Transform log" in text
    assert text.index("VERIFICATION FAILED") < text.index("What was processed")  # at the top


def test_wrong_key_says_verification_failed(made, tmp_path):
    other = tmp_path / "other.public.pem"
    other.write_bytes(Signer.from_seed(OTHER_SEED).public_pem)
    r = make_report(made["result"].package, [load_public_key(other)])
    assert not r.verified and r.findings and r.key_id is None
    page = r.html.decode()
    assert "VERIFICATION FAILED" in page and "Signature and contents: VALID" not in page
    assert all(html.escape(f) in page for f in r.findings)


def _invoke(*args):
    return CliRunner().invoke(main, ["report", *[str(a) for a in args]])


def test_cli_writes_the_report(made, tmp_path):
    out = tmp_path / "r.html"
    r = _invoke(made["result"].package, "--trusted-key", made["pub"], "--video", made["result"].video, "--out", out)
    assert r.exit_code == 0, r.stderr
    assert r.stdout.strip() == str(out)
    page = out.read_text(encoding="utf-8")
    assert "Signature and contents: VALID" in page and made["result"].source_sha256 in page
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html"]  # no temporary file left
    again = _invoke(made["result"].package, "--trusted-key", made["pub"], "--out", out)
    assert again.exit_code == 2 and "already exists" in again.stderr
    assert out.read_text(encoding="utf-8") == page


def test_cli_bad_package_is_a_one_line_error(made, tmp_path):
    out = tmp_path / "r.html"
    r = _invoke(tmp_path / "no-such-package", "--trusted-key", made["pub"], "--out", out)
    assert r.exit_code == 2
    assert r.stderr.startswith("error: ") and len(r.stderr.strip().splitlines()) == 1
    assert "Traceback" not in r.stdout + r.stderr
    assert list(tmp_path.iterdir()) == []


def test_cli_tampered_package_exits_1_with_the_report(made, tmp_path):
    out = tmp_path / "r.html"
    r = _invoke(made["dir"] / "tampered", "--trusted-key", made["pub"], "--out", out)
    assert r.exit_code == 1
    assert "VERIFICATION FAILED" in out.read_text(encoding="utf-8")
    assert "FAILED" in r.stderr


def test_hostile_package_files_render_escaped(made, tmp_path):
    # Named adversarial fixture: review.json and quality.jsonl replaced with ill-typed, markup-laden
    # content, the envelope removed. The report must still render, say FAILED and escape everything.
    pkg = tmp_path / "hostile"
    shutil.copytree(made["result"].package, pkg)
    (pkg / "envelope.json").unlink()
    (pkg / "review.json").write_text(json.dumps({"ranges": [
        {"frame_start": "<b>x</b>", "frame_end": None, "t_start": "soon", "reasons": [1, "<i>bad</i>"]},
        {"frame_start": 3, "frame_end": 2, "reasons": "not a list"}, "junk"], "rules": []}))
    (pkg / "quality.jsonl").write_bytes(b'{"frame":0,"t":0.0,"people":"<u>2</u>","luma_mean":1e308}\n'
                                        b'{"frame":1,"t":0.04,"people":1,"mean_conf":{"a":1}}\n{"frame":2,')
    r = make_report(pkg, [made["key"]], video=made["result"].video)
    page = r.html.decode()
    assert not r.verified and any("envelope.json" in f for f in r.findings)
    assert "VERIFICATION FAILED" in page
    assert "<b>x</b>" not in page and "&lt;b&gt;x&lt;/b&gt;" in page
    assert "<i>bad</i>" not in page and "&lt;i&gt;bad&lt;/i&gt;" in page
    assert "quality.jsonl line 3" in page  # the truncated line is reported, the rows before are drawn
    assert "<svg" in page
    # no statement could be read, so no video subject to match: no pictures
    assert r.thumbnails == 0
