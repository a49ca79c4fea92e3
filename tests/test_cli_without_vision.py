"""A recipient verifies with the crypto dependency alone: `redact verify`, `inspect`, `frame-proof` and
`frame-check` run in a fresh interpreter in which importing OpenCV, onnxruntime, PyAV, NumPy (and
the other heavy libraries) raises ImportError (a meta-path finder, Python's import system: PEP 451),
and exit 0 or 1 as they should; `redact --help` still lists every command; a command that needs
the vision stack says so in one line and exits 2. The package is the hand-made one of
test_package.py; outside reference for the proof: RFC 9162 §2.1.3.2 via the verifier's own check.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from test_package import SEED, build_package

from redact.cli import COMMANDS
from redact.provenance import signing

BLOCKED = ("cv2", "onnxruntime", "av", "numpy", "scipy", "matplotlib", "PIL", "skimage")
RUNNER = f"""
import sys

BLOCKED = {BLOCKED!r}


class Block:
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] in BLOCKED:
            raise ImportError(f"blocked by the test: {{name}}", name=name)
        return None


sys.meta_path.insert(0, Block())
from redact.cli import main

try:
    main(prog_name="redact")
finally:
    leaked = sorted(m for m in sys.modules if m.split(".")[0] in BLOCKED)
    if leaked:
        print("LEAKED", leaked, file=sys.stderr)
"""


def redact(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", RUNNER, *map(str, args)], capture_output=True, text=True,
                          timeout=120)


@pytest.fixture(scope="module")
def pkg(tmp_path_factory):
    root = tmp_path_factory.mktemp("light")
    signer = signing.Signer.from_seed(SEED)
    p = build_package(root, signer)
    pub = root / "trusted.public.pem"
    pub.write_bytes(signer.public_pem)
    return {**p, "pub": pub, "root": root}


def clean(r: subprocess.CompletedProcess) -> None:
    assert "Traceback" not in r.stderr and "LEAKED" not in r.stderr, r.stderr


def test_the_blocker_blocks():
    r = subprocess.run([sys.executable, "-c", RUNNER.split("from redact.cli")[0] + "import numpy\n"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode != 0 and "blocked by the test: numpy" in r.stderr


def test_verify_valid_and_invalid(pkg, tmp_path):
    r = redact("verify", pkg["path"], "--trusted-key", pkg["pub"], "--source", pkg["source"], "--video", pkg["video"])
    clean(r)
    assert r.returncode == 0 and r.stdout.startswith("VALID"), r.stdout + r.stderr
    r = redact("verify", pkg["path"], "--trusted-key", pkg["pub"], "--json")
    clean(r)
    assert r.returncode == 0 and json.loads(r.stdout)["valid"] is True
    import shutil

    bad = tmp_path / "bad"
    shutil.copytree(pkg["path"], bad)
    (bad / "tracks.json").write_bytes((bad / "tracks.json").read_bytes().replace(b'"id":1', b'"id":3'))
    r = redact("verify", bad, "--trusted-key", pkg["pub"])
    clean(r)
    assert r.returncode == 1 and "INVALID" in r.stdout and "tracks.json" in r.stdout


def test_inspect_verified_and_unverified(pkg):
    r = redact("inspect", pkg["path"], "--trusted-key", pkg["pub"], "--json")
    clean(r)
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["verified"] is True and doc["counts"]["frames"] == 6
    r = redact("inspect", pkg["path"])
    clean(r)
    assert r.returncode == 0 and "NOT VERIFIED" in r.stderr


def test_frame_proof_and_check(pkg, tmp_path):
    proof = tmp_path / "f2.proof.json"
    r = redact("frame-proof", pkg["path"], "--trusted-key", pkg["pub"], "--frame", 2, "--out", proof)
    clean(r)
    assert r.returncode == 0 and proof.is_file(), r.stderr
    r = redact("frame-check", proof, "--package", pkg["path"], "--trusted-key", pkg["pub"])
    clean(r)
    assert r.returncode == 0 and r.stdout.startswith("VALID"), r.stdout + r.stderr
    doc = json.loads(proof.read_bytes())
    doc["frame_digest"] = "00" * 32
    forged = tmp_path / "forged.proof.json"
    forged.write_text(json.dumps(doc))
    r = redact("frame-check", forged, "--package", pkg["path"], "--trusted-key", pkg["pub"])
    clean(r)
    assert r.returncode == 1 and "INVALID" in r.stdout


def test_help_lists_every_command_and_heavy_ones_say_what_they_need():
    r = redact("--help")
    clean(r)
    assert r.returncode == 0
    listing = r.stdout.split("Commands:", 1)[1]
    for name in COMMANDS:
        assert any(line.strip().startswith(name + " ") for line in listing.splitlines()), name
    assert "verify" in listing and "not available here: needs" in listing
    r = redact("process", "clip.mp4", "--out", "o", "--signing-key", "k.pem")
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert r.stderr.startswith("error: `redact process` needs the Python module") and len(r.stderr.splitlines()) == 1
