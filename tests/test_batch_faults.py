"""`redact batch` at the edges of scale-out: a cluster that cannot be reached, a Dask worker without
redact or with another version, stale staging folders of earlier batches.

Outside reference: dask.distributed (PyPI) as the cluster: a scheduler in this process and
workers started in child processes through distributed's Worker API, one of them unable to import
redact (an import hook refuses it, as on a machine where it was never installed). Clips: the
crossing scene of tests/conftest.py (scikit-image stills: astronaut() public domain, NASA;
camera() CC0, Lav Varshney).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

import redact.batch as batch
from redact import __version__
from redact.batch import BatchKey, run_batch
from redact.cli import main
from redact.errors import InputError
from redact.media import synthetic as syn
from redact.pipeline import ProcessSettings
from redact.provenance.signing import generate_key
from redact.vision.pose import PoseSettings

PASSPHRASE = "batch faults test passphrase"  # a throw-away key made for these tests
SETTINGS = ProcessSettings(pose=PoseSettings(input_long_side=320), threads=1)


@pytest.fixture(scope="module")
def tree(tmp_path_factory, crossing_clip):
    root = tmp_path_factory.mktemp("batchfaults")
    src = root / "in"
    src.mkdir()
    shutil.copy(crossing_clip.path, src / "a.mp4")
    keys = root / "keys"
    keys.mkdir()
    generate_key(keys / "k.private.pem", keys / "k.public.pem", PASSPHRASE.encode())
    return {"src": src, "private": keys / "k.private.pem",
            "key": BatchKey.load(keys / "k.private.pem", PASSPHRASE.encode())}


def _cli(tree, out: Path, *args):
    return CliRunner().invoke(main, ["batch", str(tree["src"]), "--out", str(out), "--signing-key", str(tree["private"]),
                                     "--quiet", *args], env={batch.PASSPHRASE_ENV: PASSPHRASE})


def _one_error_line(r) -> str:
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.output
    return lines[0]


def test_an_unreachable_cluster_is_one_line_and_leaves_no_folder(tree, tmp_path, monkeypatch):
    monkeypatch.setattr(batch, "CONNECT_TIMEOUT", "2s")
    out = tmp_path / "out"
    r = _cli(tree, out, "--scheduler", "tcp://127.0.0.1:9")  # port 9 (discard): nothing listens here
    assert r.exit_code == 2, r.output
    assert "cannot connect to the Dask scheduler at tcp://127.0.0.1:9" in _one_error_line(r)
    assert not out.exists()  # no empty folder, no lock file


_WORKER = """
import asyncio, sys
mode, address = sys.argv[1], sys.argv[2]
if mode == "without-redact":
    class NoRedact:  # as on a machine where redact was never installed
        def find_spec(self, name, path=None, target=None):
            if name == "redact" or name.startswith("redact."):
                raise ModuleNotFoundError(f"No module named {name!r}", name=name)
            return None
    sys.meta_path.insert(0, NoRedact())
else:
    import redact
    redact.__version__ = "0.0.0+other"
from distributed import Worker

async def serve():
    async with Worker(address, nthreads=1) as worker:
        print("ready", flush=True)
        await worker.finished()

asyncio.run(serve())
"""


@pytest.fixture
def scheduler():
    from dask.distributed import Client, LocalCluster

    with LocalCluster(n_workers=0, dashboard_address=None) as cluster, Client(cluster) as client:
        yield cluster.scheduler_address, client


def _start_worker(mode: str, address: str, client) -> subprocess.Popen:
    p = subprocess.Popen([sys.executable, "-c", _WORKER, mode, address], stdout=subprocess.PIPE,
                         stderr=subprocess.DEVNULL, text=True)
    assert p.stdout.readline().strip() == "ready"
    client.wait_for_workers(1, timeout=300)
    return p


def _stop(p: subprocess.Popen, client) -> None:
    p.terminate()
    p.wait(120)
    while client.scheduler_info()["workers"]:  # the scheduler notices the worker has gone
        time.sleep(0.2)


@pytest.mark.parametrize("mode,words", [("without-redact", "No module named 'redact"),
                                        ("other-version", "has 0.0.0+other")])
def test_a_worker_without_redact_or_with_another_version_is_one_line(tree, tmp_path, scheduler, mode, words):
    address, client = scheduler
    worker = _start_worker(mode, address, client)
    try:
        out = tmp_path / "out"
        r = _cli(tree, out, "--scheduler", address)
        assert r.exit_code == 2, r.output
        line = _one_error_line(r)
        assert words in line and "install" in line and __version__ in line
        assert not out.exists()
        with pytest.raises(InputError):
            run_batch(tree["src"], out, tree["key"], SETTINGS, scheduler=address)
    finally:
        _stop(worker, client)


def test_stale_batch_staging_is_removed_and_others_mentioned(tree, tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    syn.write_text_file(src / "notes.mp4")  # fails at once: the batch itself is what is tested
    out = tmp_path / "out"
    old, other = out / (batch.STAGING_PREFIX + "old1"), out / ".redact-partial-other"
    for d in (old, other):
        d.mkdir(parents=True)
        past = time.time() - 7200
        os.utime(d, (past, past))
    result = run_batch(src, out, tree["key"], SETTINGS)
    assert sorted(os.listdir(out)) == [".redact-partial-other", "index.json"]  # no lock file left either
    assert len(result.notices) == 2
    assert batch.STAGING_PREFIX + "old1" in result.notices[0] and "removed 1" in result.notices[0]
    assert ".redact-partial-other" in result.notices[1]
    doc = json.loads((out / "index.json").read_text())
    assert [e["tool_version"] for e in doc["inputs"]] == [__version__]
