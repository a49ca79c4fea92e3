"""Faults and races around `redact process`: two runs into one folder, a source that changes while
it is read, a full disk, SIGTERM, stale staging folders, files that are not regular files.

Each test injects one fault and checks the exact outcome: exit status 2 (or 128 + signal), one
line on stderr naming what failed, and nothing left in the output folder that looks complete.
Outside references: the Linux man pages null(4) (writes to /dev/full fail with ENOSPC), mkfifo(3)
and stat(2) (file types), flock(2) (a second lock on one file conflicts), signal(7) (SIGTERM's
default is to end the process; 128 + N is the shell's exit status for a command ended by signal N,
bash(1) "EXIT STATUS"); the project's verifier for the winner's package; PyAV/FFmpeg decodes.
People in the clips come from scikit-image's stills (astronaut(): public domain, NASA; camera():
CC0, Lav Varshney), see tests/conftest.py.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from redact import fsio
from redact.cli import main
from redact.errors import InputError, NoSpaceError
from redact.media import video
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer, load_public_key
from redact.provenance.verify import verify_package
from redact.vision.pose import PoseEstimator, PoseSettings

SEED = bytes(range(32))
FAST = ProcessSettings(pose=PoseSettings(input_long_side=320), threads=1)  # small model input: quicker


@pytest.fixture(scope="module")
def estimator():
    """The bundled pose model, loaded once for this module."""
    return PoseEstimator.default(FAST.pose, 1)


class Gate:
    """Wraps an estimator: its `at`-th call says so (`reached`) and waits until `release` is set, so
    a test can act while a run is surely in the middle of its streaming pass."""

    def __init__(self, inner, at: int = 3):
        self.inner, self.at, self.calls = inner, at, 0
        self.reached, self.release = threading.Event(), threading.Event()

    def estimate(self, image):
        self.calls += 1
        if self.calls == self.at:
            self.reached.set()
            if not self.release.wait(600):
                raise RuntimeError("the test never released the gate")
        return self.inner.estimate(image)


class Background:
    """process_video in a thread; `.result` or `.error` once joined."""

    def __init__(self, *args, **kwargs):
        self.result = self.error = None
        self.thread = threading.Thread(target=self._run, args=args, kwargs=kwargs)
        self.thread.start()

    def _run(self, *args, **kwargs):
        try:
            self.result = process_video(*args, **kwargs)
        except BaseException as e:  # noqa: BLE001 (examined by the test)
            self.error = e

    def join(self):
        self.thread.join(600)
        assert not self.thread.is_alive()
        return self


def _entries(out: Path) -> list[str]:
    return sorted(os.listdir(out)) if out.exists() else []


def _one_error_line(r) -> str:
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.output
    return lines[0]


@pytest.fixture
def clip(tmp_path, crossing_clip) -> Path:
    """A private copy of the crossing clip (tests change or lock it)."""
    p = tmp_path / "src" / "crossing.mp4"
    p.parent.mkdir()
    shutil.copy(crossing_clip.path, p)
    return p


# ---- two runs into one folder -------------------------------------------------------------------

@pytest.mark.parametrize("archive", [False, True])
def test_a_second_run_into_the_same_folder_is_refused_and_the_first_is_intact(clip, tmp_path, key, estimator,
                                                                               archive):
    out = tmp_path / "out"
    gate = Gate(estimator)
    settings = ProcessSettings(pose=FAST.pose, threads=1, archive=archive)
    first = Background(clip, out, Signer.from_seed(SEED), settings, estimator=gate)
    try:
        assert gate.reached.wait(600)
        extra = ["--archive"] if archive else []
        r = CliRunner().invoke(main, ["process", str(clip), "--out", str(out), "--signing-key", str(key), "--input-size",
                                      "320", "--threads", "1", *extra])
    finally:
        gate.release.set()
        first.join()
    assert r.exit_code == 2, r.output
    line = _one_error_line(r)
    assert "another redact run is writing" in line and str(out) in line
    assert first.error is None, first.error
    pkg = "package.tar" if archive else "package"
    assert _entries(out) == [pkg, "redacted.mp4"]  # the winner's files only: no lock, no staging
    pub = tmp_path / "winner.public.pem"
    pub.write_bytes(Signer.from_seed(SEED).public_pem)
    verified = verify_package(out / pkg, [load_public_key(pub)], source=clip, video=out / "redacted.mp4")
    assert verified.predicate.source.sha256 == first.result.source_sha256


# ---- a source that changes while it is read ------------------------------------------------------

def _truncate(p: Path) -> None:
    os.truncate(p, p.stat().st_size * 6 // 10)


def _overwrite_same_size(p: Path) -> None:
    with open(p, "r+b") as f:
        f.seek(p.stat().st_size // 2)
        f.write(b"\x00" * 4096)


@pytest.mark.parametrize("change", [_truncate, _overwrite_same_size], ids=["truncated", "overwritten"])
def test_a_source_changed_during_the_run_fails_clearly_and_writes_nothing(clip, tmp_path, estimator, change):
    out = tmp_path / "out"
    gate = Gate(estimator, at=5)
    run = Background(clip, out, Signer.from_seed(SEED), FAST, estimator=gate)
    try:
        assert gate.reached.wait(600)
        change(clip)
    finally:
        gate.release.set()
        run.join()
    assert isinstance(run.error, InputError), run.error
    text = str(run.error)
    assert str(clip) in text and "changed while it was being read" in text
    assert not out.exists()  # the run made OUT and left nothing in it, so it is gone


def test_a_source_that_was_truncated_before_the_run_is_hashed_as_read(bad_inputs, tmp_path, estimator):
    import hashlib

    cut = bad_inputs["truncated"]
    result = process_video(cut, tmp_path / "out", Signer.from_seed(SEED), FAST, estimator=estimator)
    assert result.stopped_early
    assert result.source_sha256 == hashlib.sha256(cut.read_bytes()).hexdigest()  # FIPS 180-4 via hashlib


# ---- a full disk --------------------------------------------------------------------------------

class _DevFullWriter(video.VideoWriter):
    """The real encoder writing to /dev/full: null(4) says every write there fails with ENOSPC."""

    def __init__(self, path, *args, **kwargs):
        super().__init__("/dev/full", *args, **kwargs)


def _full_skeleton_file(real_open):
    def fake_open(path, mode="r", *args, **kwargs):
        if Path(path).name == "skeletons.jsonl" and "w" in mode:
            return real_open("/dev/full", mode, *args, **kwargs)
        return real_open(path, mode, *args, **kwargs)
    return fake_open


@pytest.mark.parametrize("where", ["video", "package", "before"])
def test_a_full_disk_is_one_line_naming_the_folder_and_the_space(clip, tmp_path, key, monkeypatch, where):
    import builtins

    import redact.pipeline as pipeline

    out = tmp_path / "out"
    if where == "video":
        monkeypatch.setattr(video, "VideoWriter", _DevFullWriter)
    elif where == "package":
        out.mkdir()  # an existing folder stays, empty
        monkeypatch.setattr(pipeline, "open", _full_skeleton_file(builtins.open), raising=False)
    else:
        monkeypatch.setattr(fsio, "free_bytes", lambda folder: 1000)
    r = CliRunner().invoke(main, ["process", str(clip), "--out", str(out), "--signing-key", str(key),
                                  "--input-size", "320", "--threads", "1", "--quiet"])
    assert r.exit_code == 2, r.output
    line = _one_error_line(r)
    assert f"no space left in {out}" in line and "this run needs about" in line and " MB" in line
    assert _entries(out) == []  # no staging folder, no lock, no output
    assert (where == "package") == out.exists()


def test_the_space_estimate_covers_what_a_run_writes(clip, tmp_path, estimator):
    from redact.media.video import probe
    from redact.pipeline import estimate_output_bytes

    result = process_video(clip, tmp_path / "out", Signer.from_seed(SEED), FAST, estimator=estimator)
    written = sum(f.stat().st_size for f in (tmp_path / "out").rglob("*") if f.is_file())
    assert written <= estimate_output_bytes(probe(clip), FAST)
    assert result.frames == 50


# ---- SIGTERM and Ctrl-C -------------------------------------------------------------------------

_SLOW_DRIVER = """
import sys, time
from redact.vision import pose
real = pose.PoseEstimator.default
class Slow:  # says when inference has started, then takes its time so the signal lands mid-run
    def __init__(self, inner): self.inner, self.calls = inner, 0
    def estimate(self, image):
        self.calls += 1
        if self.calls == 3:
            print("inferring", file=sys.stderr, flush=True)
        time.sleep(0.05)
        return self.inner.estimate(image)
pose.PoseEstimator.default = classmethod(lambda cls, *a, **k: Slow(real(*a, **k)))
from redact.cli import main
sys.argv = ["redact"] + sys.argv[1:]
main()
"""


@pytest.mark.parametrize("signum,status,words", [(signal.SIGTERM, 143, "stopped by SIGTERM"),
                                                 (signal.SIGINT, 130, "interrupted")])
def test_sigterm_ends_a_run_like_ctrl_c(clip, tmp_path, key, signum, status, words):
    out = tmp_path / "out"
    env = {**os.environ, "REDACT_KEY_PASSPHRASE": "test passphrase"}
    p = subprocess.Popen([sys.executable, "-c", _SLOW_DRIVER, "process", str(clip), "--out", str(out), "--signing-key",
                          str(key), "--input-size", "320", "--threads", "1", "--quiet"],
                         stderr=subprocess.PIPE, stdout=subprocess.DEVNULL, text=True, env=env)
    try:
        assert p.stderr.readline().strip() == "inferring"
        assert any(n.startswith(".redact-partial-") for n in os.listdir(out))  # mid-run: staging exists
        p.send_signal(signum)
        rest = p.stderr.read()
        p.wait(300)
    finally:
        if p.poll() is None:
            p.kill()
    assert p.returncode == status, rest
    assert rest.strip() == f"error: {words}; no output was completed"
    assert not out.exists()  # staging removed, lock removed, and the folder the run made


# ---- stale staging folders ----------------------------------------------------------------------

def test_stale_staging_of_an_earlier_run_is_removed_and_others_are_mentioned(clip, tmp_path, key):
    out = tmp_path / "out"
    old, other = out / ".redact-partial-x1y2", out / ".redact-batch-partial-z3"
    for d in (old, other):
        d.mkdir(parents=True)
        (d / "redacted.mp4").write_bytes(b"an earlier run was killed here")
        past = time.time() - 7200
        os.utime(d, (past, past))
    r = CliRunner().invoke(main, ["process", str(clip), "--out", str(out), "--signing-key", str(key), "--input-size", "320",
                                  "--threads", "1", "--quiet"])
    assert r.exit_code == 0, r.output
    assert _entries(out) == [".redact-batch-partial-z3", "package", "redacted.mp4", "report.html"]
    notes = [ln for ln in r.stderr.splitlines() if ln.startswith("note: ")]
    assert len(notes) == 2
    assert "removed 1 unfinished staging folder" in notes[0] and ".redact-partial-x1y2" in notes[0]
    assert ".redact-batch-partial-z3" in notes[1] and "left as they are" in notes[1]


# ---- things that are not regular files ----------------------------------------------------------

def test_a_fifo_and_dev_zero_are_named_for_what_they_are(tmp_path, key):
    fifo = tmp_path / "camera.mp4"
    os.mkfifo(fifo)  # opening it for reading would block: it must be refused before that
    for path, kind in ((fifo, "a named pipe (FIFO)"), (Path("/dev/zero"), "a character device")):
        with pytest.raises(InputError) as e:
            video.probe(path)
        assert f"{path}: {kind}, not a video file" in str(e.value) and "empty" not in str(e.value)
        r = CliRunner().invoke(main, ["process", str(path), "--out", str(tmp_path / "o"), "--signing-key", str(key),
                                      "--quiet"])
        assert r.exit_code == 2 and kind in _one_error_line(r)
    assert not (tmp_path / "o").exists()


def test_no_space_error_names_both_sizes():
    e = NoSpaceError("/data/out", needed=123_456_789, free=2_000_000)
    assert str(e).startswith("no space left in /data/out: this run needs about 123 MB (2.0 MB were free when")



# ---- every command that writes takes its output's lock first ------------------------------------

@pytest.fixture(scope="module")
def made(crossing_clip, tmp_path_factory):
    """One processed package, signed with a key on disk (the trusted key for the other commands)."""
    from redact.provenance.signing import generate_key, load_private_key

    root = tmp_path_factory.mktemp("made")
    generate_key(root / "k.private.pem", root / "k.public.pem", b"made passphrase")
    signer = load_private_key(root / "k.private.pem", b"made passphrase")
    est = PoseEstimator.default(FAST.pose, 1)
    result = process_video(crossing_clip.path, root / "out", signer, FAST, estimator=est)
    return {"root": root, "package": result.package, "video": result.video, "clip": crossing_clip.path,
            "private": root / "k.private.pem", "public": root / "k.public.pem"}


def _commands(made, target: Path) -> dict[str, list[str]]:
    pkg, pub = str(made["package"]), str(made["public"])
    return {
        "report": ["report", pkg, "--trusted-key", pub, "--out", str(target)],
        "export": ["export", pkg, "--trusted-key", pub, "--format", "npz", "--out", str(target)],
        "derive": ["derive", pkg, "--trusted-key", pub, "--signing-key", str(made["private"]), "--out",
                   str(target), "--drop-keypoints", "head"],
        "tracks": ["tracks", str(made["clip"]), "--out", str(target), "--input-size", "320", "--threads", "1"],
        "process": ["process", str(made["clip"]), "--out", str(target), "--signing-key", str(made["private"]),
                    "--input-size", "320", "--threads", "1", "--quiet"],
        "batch": ["batch", str(made["clip"].parent), "--out", str(target), "--signing-key", str(made["private"]),
                  "--input-size", "320", "--threads", "1", "--quiet"],
    }


@pytest.mark.parametrize("command", ["report", "export", "derive", "tracks", "process", "batch"])
def test_a_command_whose_output_is_being_written_stops_at_once(made, tmp_path, command):
    target = tmp_path / ("out-" + command)
    folder = command in ("process", "batch")  # these write into a folder; the others make a new name
    if folder:
        target.mkdir()
        lock = fsio.lock_folder(target).acquire()  # another run writing into OUT
    else:
        lock = fsio.lock_target(target).acquire()  # another run writing this new name
    try:
        r = CliRunner().invoke(main, _commands(made, target)[command],
                               env={"REDACT_KEY_PASSPHRASE": "made passphrase"})
    finally:
        lock.release()
    assert r.exit_code == 2, r.output
    assert "another redact run is writing" in _one_error_line(r)
    assert _entries(tmp_path) == ([target.name] if folder else [])
    assert _entries(target) == []
