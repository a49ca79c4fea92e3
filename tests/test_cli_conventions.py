"""One convention across commands: key options, -h, --json, --quiet, passphrases, progress, completion.

Outside references: click's CliRunner drives the real commands; click's documented shell
completion (environment variable _REDACT_COMPLETE=bash_source / bash_complete, click 8
"Shell Completion" page) is exercised in a child process; Python's json module parses every
--json output (one document); NIST SP 800-63B-4 (2025) §3.1.1.2 gives the passphrase minimum
(15 characters for a password used as the only factor).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import click
import pytest
from click.testing import CliRunner
from test_package import SEED, build_package

from redact.cli import COMMANDS, main
from redact.cli.cmd_keys import MIN_PASSPHRASE
from redact.cli.progress import MIN_FRAMES, MIN_SECONDS, FrameProgress
from redact.provenance import signing

LONG = "correct horse battery staple"  # 28 characters


def run(*args, env=None, input=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env, input=input)


def one_line_error(r, code=2):
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert r.exit_code == code, (r.exit_code, r.output)
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.output
    return lines[0]


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """A key pair as keygen names it, and a package signed with it."""
    root = tmp_path_factory.mktemp("conv")
    r = run("keygen", "--out-dir", root / "keys", "--name", "steward", env={"REDACT_KEY_PASSPHRASE": LONG})
    assert r.exit_code == 0, r.output
    signer = signing.Signer.from_seed(SEED)
    pkg = build_package(root, signer)
    pub = root / "pkg.public.pem"
    pub.write_bytes(signer.public_pem)
    return {"private": root / "keys" / "steward.private.pem", "public": root / "keys" / "steward.public.pem",
            "pkg": pkg, "pkg_pub": pub, "root": root}


# ---------------------------------------------------------------- the two key options

@pytest.mark.parametrize("cmd", ["verify", "inspect", "report", "export", "frame-proof", "countersign"])
def test_a_private_key_given_as_trusted_key_names_the_public_one(pair, tmp_path, cmd):
    extra = {"report": ["--out", tmp_path / "r.html"], "export": ["--format", "npz", "--out", tmp_path / "t.npz"],
             "countersign": ["--signing-key", pair["private"], "--out", tmp_path / "c"],
             "frame-proof": ["--frame", 0, "--out", tmp_path / "p.json"]}.get(cmd, [])
    r = run(cmd, pair["pkg"]["path"], "--trusted-key", pair["private"], *extra, env={"REDACT_KEY_PASSPHRASE": None})
    line = one_line_error(r)
    assert "this is a private key" in line and str(pair["public"]) in line
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("cmd", ["process", "batch", "derive", "demo", "countersign"])
def test_a_public_key_given_as_signing_key_names_the_private_one(pair, tmp_path, crossing_clip, cmd):
    args = {"process": [crossing_clip.path, "--out", tmp_path / "o"],
            "batch": [crossing_clip.path.parent, "--out", tmp_path / "o"],
            "derive": [pair["pkg"]["path"], "--trusted-key", pair["pkg_pub"], "--out", tmp_path / "o", "--new-ids"],
            "demo": ["--clip", crossing_clip.path, "--out", tmp_path / "o"],
            "countersign": [pair["pkg"]["path"], "--trusted-key", pair["pkg_pub"], "--out", tmp_path / "o"]}[cmd]
    # no passphrase anywhere: the mix-up must be caught before any prompt
    r = run(cmd, *args, "--signing-key", pair["public"], env={"REDACT_KEY_PASSPHRASE": None}, input="")
    line = one_line_error(r)
    assert "this is a public key; the signing key is " + str(pair["private"]) in line
    assert not (tmp_path / "o").exists()


def test_old_key_option_names_are_gone():
    for cmd in ("process", "verify", "report", "derive"):
        text = run(cmd, "--help").stdout
        assert "--key " not in text and "--sign-key" not in text and "-o," not in text, cmd


@pytest.mark.parametrize("cmd", ["process", "batch", "derive", "demo", "tracks", "report", "export",
                                 "frame-proof", "keygen"])
def test_help_says_whether_out_is_a_folder_or_a_file(cmd):
    text = " ".join(run(cmd, "--help").stdout.split())
    opt = "--out-dir" if cmd == "keygen" else "--out"
    text = text[text.index("Options:"):]
    after = text[text.index(opt + " ") + len(opt):]
    after = after[:after.find(" --") if " --" in after else None].lower()  # this option's help only
    if cmd == "export":  # a file for three formats, a folder for the fourth: the help says which is which
        assert "a file for npz, coco and mot" in after and "folder for trajectories" in after, after
        return
    assert ("folder" in after) != ("a file" in after), after


# ---------------------------------------------------------------- -h, --json, --quiet

@pytest.mark.parametrize("cmd", sorted(COMMANDS))  # the lazily loaded commands
def test_dash_h_is_help(cmd):
    short, long_ = run(cmd, "-h"), run(cmd, "--help")
    assert short.exit_code == 0 and short.stdout == long_.stdout


def test_keygen_json_and_passphrase_minimum(tmp_path):
    r = run("keygen", "--out-dir", tmp_path, "--name", "k", "--json", env={"REDACT_KEY_PASSPHRASE": LONG})
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["key_id"] == signing.load_public_key(tmp_path / "k.public.pem").key_id
    assert doc["private_key"] == str(tmp_path / "k.private.pem")
    assert MIN_PASSPHRASE == 15  # NIST SP 800-63B-4 §3.1.1.2, single-factor passwords
    short = "x" * (MIN_PASSPHRASE - 1)
    line = one_line_error(run("keygen", "--out-dir", tmp_path / "s", env={"REDACT_KEY_PASSPHRASE": short}))
    assert "14 characters" in line and "15" in line and "800-63B" in line
    assert not (tmp_path / "s").exists()
    exact = run("keygen", "--out-dir", tmp_path / "e", env={"REDACT_KEY_PASSPHRASE": "y" * MIN_PASSPHRASE})
    assert exact.exit_code == 0, exact.output
    assert str(MIN_PASSPHRASE) in run("keygen", "--help").stdout


def test_keygen_prompt_confirmation_mismatch_is_refused(tmp_path):
    r = run("keygen", "--out-dir", tmp_path, env={"REDACT_KEY_PASSPHRASE": None}, input=f"{LONG}\n{LONG}x\n")
    assert r.exit_code != 0 and not list(tmp_path.iterdir())


def test_no_terminal_passphrase_error_has_no_getpass_warnings(tmp_path, crossing_clip, pair):
    """A child process in a new session (no controlling terminal) with stdin closed."""
    env = {k: v for k, v in os.environ.items() if k != "REDACT_KEY_PASSPHRASE"}
    code = "from redact.cli import main; main()"
    for args in (["keygen", "--out-dir", str(tmp_path / "k")],
                 ["process", str(crossing_clip.path), "--out", str(tmp_path / "o"), "--signing-key",
                  str(pair["private"])]):
        p = subprocess.run([sys.executable, "-c", code, *args], stdin=subprocess.DEVNULL, capture_output=True,
                           text=True, env=env, start_new_session=True, timeout=300)
        assert p.returncode == 2, p.stderr
        lines = [ln for ln in p.stderr.splitlines() if ln.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: no passphrase given"), p.stderr
        assert "Warning" not in p.stderr and "echo" not in p.stderr
    assert not (tmp_path / "k").exists() and not (tmp_path / "o").exists()


def test_frame_proof_and_report_json(pair, tmp_path):
    r = run("frame-proof", pair["pkg"]["path"], "--trusted-key", pair["pkg_pub"], "--frame", 2,
            "--out", tmp_path / "p.json", "--json")
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["frame"] == 2 and doc["proof"] == str(tmp_path / "p.json") and len(doc["root"]) == 64
    rep = run("report", pair["pkg"]["path"], "--trusted-key", pair["pkg_pub"], "--out", tmp_path / "r.html", "--json")
    assert rep.exit_code == 0, rep.output
    doc = json.loads(rep.stdout)
    assert doc["verified"] is True and doc["report"] == str(tmp_path / "r.html") and doc["findings"] == []


def test_verify_quiet_prints_nothing_and_keeps_the_exit_status(pair, tmp_path):
    ok = run("verify", pair["pkg"]["path"], "--trusted-key", pair["pkg_pub"], "--quiet")
    assert ok.exit_code == 0 and ok.stdout == "" and ok.stderr == ""
    other = tmp_path / "other.public.pem"
    other.write_bytes(signing.Signer.from_seed(bytes(32)).public_pem)
    bad = run("verify", pair["pkg"]["path"], "--trusted-key", other, "-q")
    assert bad.exit_code == 1 and bad.stdout == "" and bad.stderr == ""


def test_models_prints_a_header_row():
    r = run("models")
    assert r.exit_code == 0
    header = r.stdout.splitlines()[0].split()
    assert header[:4] == ["id", "task", "licence", "source"] and "sha256" in header


# ---------------------------------------------------------------- report on something else

def test_report_on_a_folder_that_is_not_a_package_exits_2_and_writes_nothing(pair, tmp_path):
    folder = tmp_path / "holiday-photos"
    folder.mkdir()
    (folder / "a.txt").write_text("not a package")
    out = tmp_path / "r.html"
    line = one_line_error(run("report", folder, "--trusted-key", pair["pkg_pub"], "--out", out))
    assert "not a package" in line
    assert sorted(p.name for p in tmp_path.iterdir()) == ["holiday-photos"]


def test_report_header_names_the_package_folder(pair, tmp_path):
    from redact.report.document import build_report

    page = build_report(pair["pkg"]["path"], [signing.load_public_key(pair["pkg_pub"])]).decode()
    page = page.replace("<wbr>", "")  # names may wrap after a separator
    assert "from package package" not in page
    assert f"{pair['pkg']['path'].parent.name}/{pair['pkg']['path'].name}" in page


# ---------------------------------------------------------------- progress and completion

def test_first_eta_waits_for_a_measured_rate():
    clock = iter([100.0, 100.1, 100.2, 101.0, 104.0]).__next__
    p = FrameProgress(quiet=False, clock=clock, tty=False)
    # model loading took 100 s before the first frame: it must not count
    assert "ETA: measuring" in p.line(1, 1000, clock())
    assert "ETA: measuring" in p.line(3, 1000, clock())  # 0.1 s in: too soon
    assert "ETA: measuring" in p.line(5, 1000, clock())  # 0.2 s: too soon
    assert MIN_SECONDS <= 3.0 and MIN_FRAMES <= 20
    line = p.line(21, 1000, clock())  # 1 s, 20 frames: still under MIN_SECONDS
    assert "ETA: measuring" in line
    line = p.line(61, 1000, clock())  # 4 s after the first frame, 60 frames: 15 frames/s
    assert "15.0 frames/s" in line and "ETA    63 s" in line  # (1000 - 61) / 15 = 62.6


def test_shell_completion_follows_clicks_documented_mechanism():
    env = {**os.environ, "_REDACT_COMPLETE": "bash_source"}
    code = "from redact.cli import main; main(prog_name='redact')"
    src = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert src.returncode == 0 and "_redact_completion()" in src.stdout
    env = {**os.environ, "_REDACT_COMPLETE": "bash_complete", "COMP_WORDS": "redact verify --tru", "COMP_CWORD": "2"}
    got = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert "plain,--trusted-key" in got.stdout.splitlines()


def test_process_without_report_still_says_what_to_open_first(crossing_clip, tmp_path, key):
    out = tmp_path / "o"
    r = r_text = run("process", crossing_clip.path, "--out", out, "--signing-key", key, "--no-report", "--quiet",
                     "--input-size", "320")
    assert r.exit_code == 0, r.output
    assert sorted(p.name for p in out.iterdir()) == ["package", "redacted.mp4"]
    tail = r.stdout[r.stdout.index("Open first:"):]
    assert str(out / "redacted.mp4") in tail and "redact verify" in tail and "report.html" not in tail
    assert f"--trusted-key {key.with_name('t.public.pem')}" in tail  # the public half beside --signing-key
    assert "pseudonymised" in tail
    again = run("process", crossing_clip.path, "--out", tmp_path / "p", "--signing-key", key, "--quiet",
                "--input-size", "320", "--json")
    assert again.exit_code == 0 and (tmp_path / "p" / "report.html").is_file()
    doc = json.loads(again.stdout)
    assert doc["open_first"][0]["open"] == str(tmp_path / "p" / "report.html")

    # One shape for flagged ranges: process --json, review.json and inspect --json agree exactly,
    # and the terminal says the same reasons in plain words.
    review = json.loads((tmp_path / "p" / "package" / "review.json").read_text())["ranges"]
    assert review, "the crossing clip has a dim stretch and people entering: something is flagged"
    assert doc["review_ranges"] == review
    ins = run("inspect", tmp_path / "p" / "package", "--trusted-key", key.with_name("t.public.pem"), "--json")
    assert ins.exit_code == 0, ins.output
    summary = json.loads(ins.stdout)
    assert summary["flagged"] == review
    for r in review:
        assert set(r) == {"frames", "seconds", "reasons", "explained"} and len(r["explained"]) == len(r["reasons"])
        (a, b), (ta, tb) = r["frames"], r["seconds"]
        assert f"frames {a}-{b} ({ta:.2f}-{tb:.2f} s): {'; '.join(r['explained'])}" in r_text.stdout
        assert not any("_" in w for w in r["explained"])  # words, not codes

    # inspect separates detections from positions the tracker predicted (checked against the rows)
    states = [p["state"] for line in (tmp_path / "p" / "package" / "skeletons.jsonl").read_text().splitlines()
              for p in json.loads(line)["people"]]
    c = summary["counts"]
    assert c["detections"] == states.count("observed") and c["predicted"] == states.count("predicted")
    assert c["predicted"] > 0 and c["people"] == len(states)
    text = run("inspect", tmp_path / "p" / "package").stdout
    assert f"{c['detections']} person detections, {c['predicted']} positions predicted" in text


# ---------------------------------------------------------------- tracks

def test_tracks_offers_only_the_options_that_decide_ids_and_its_help_names_them_all():
    from redact.cli.options import track_options
    from redact.redaction.plan import ids_fingerprint

    text = " ".join(run("tracks", "--help").stdout.split())
    for gone in ("--style", "--figures", "--margin", "--crf", "--include-audio", "--archive"):
        assert gone not in text, gone
    changed = {"--pose-model": "yolo11n-pose", "--input-size": "320", "--score-threshold": "0.4",
               "--coast-seconds": "0.5", "--detect-every": "2"}
    epilog = text[text.index("fingerprint"):]
    for opt in changed:
        assert opt in epilog, opt  # the help names every setting the fingerprint covers

    seen = {}

    @click.command()
    @track_options
    def probe(settings):
        seen["settings"] = settings

    def fingerprint(*args):
        assert CliRunner().invoke(probe, list(args)).exit_code == 0
        return ids_fingerprint(seen["settings"], "0" * 64)

    base = fingerprint()
    for opt, value in changed.items():
        assert fingerprint(opt, value) != base, opt  # each option the sheet takes changes the ids' fingerprint
    assert fingerprint("--threads", "1") == base  # speed only


def test_tracks_shows_progress_unless_quiet(crossing_clip, tmp_path):
    r = run("tracks", crossing_clip.path, "--out", tmp_path / "a", "--input-size", "320")
    assert r.exit_code == 0, r.output
    n = len(crossing_clip.truths)
    assert f"tracks: frame {n}/{n} (100.0 %)" in r.stderr
    q = run("tracks", crossing_clip.path, "--out", tmp_path / "b", "--input-size", "320", "--quiet")
    assert q.exit_code == 0 and "frame" not in q.stderr and "SENSITIVE" in q.stderr
    assert q.stdout == r.stdout.replace(str(tmp_path / "a"), str(tmp_path / "b"))
