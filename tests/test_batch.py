"""`redact batch`: one package per input, an index, resume, failure isolation, and the same bytes
from local worker processes and from a Dask LocalCluster as from a single-process run.

People in the clips come from scikit-image's stills, loaded from the installed package:
astronaut() is public domain (NASA), camera() is CC0 (photographer Lav Varshney); see
tests/conftest.py. Outside references: hashlib's SHA-256 (FIPS 180-4) for the input digests, the
project verifier for the signed packages, dask.distributed (PyPI) as the cluster.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner
from conftest import crossing_spec, make_clip

import redact.batch as batch
from redact import __version__
from redact.batch import STATUS_DONE, STATUS_FAILED, STATUS_SKIPPED, BatchKey, find_videos, output_name, run_batch
from redact.cli import main
from redact.errors import InputError, SigningKeyError
from redact.media import synthetic as syn
from redact.pipeline import ProcessSettings
from redact.provenance.signing import generate_key, load_public_key
from redact.provenance.verify import verify_package
from redact.skeletons.rows import read_rows
from redact.vision.pose import PoseSettings

PASSPHRASE = "batch test passphrase"  # a throw-away key made for these tests
# Files that must be byte-identical however the work was spread (the signed envelope and the log
# carry timestamps, the encoded video is not compared).
SAME_BYTES = ("skeletons.jsonl", "tracks.json", "quality.jsonl", "frames.sha256", "review.json")
# One model thread everywhere: onnxruntime's result depends (in the last bits) on the intra-op
# thread count, so layouts are compared at the same thread count (see redact.batch).
SETTINGS = ProcessSettings(pose=PoseSettings(input_long_side=320), threads=1)
GOOD = ("a.mp4", "sub/b clip.mov")
BAD = "sub/bad.mp4"


@pytest.fixture(scope="module")
def tree(tmp_path_factory):
    """Input tree: two 1 s clips (one in a subfolder, with a space in its name), a text file named
    .mp4, and things find_videos must skip: a hidden folder, a symlink, a non-video file."""
    root = tmp_path_factory.mktemp("batch")
    src = root / "in"
    (src / "sub").mkdir(parents=True)
    make_clip(src, "a.mp4", crossing_spec(width=320, height=240, seconds=1.0, seed=0))
    make_clip(src / "sub", "b clip.mov", crossing_spec(width=320, height=240, seconds=1.0, seed=1))
    syn.write_text_file(src / BAD)
    (src / ".hidden").mkdir()
    shutil.copy(src / "a.mp4", src / ".hidden" / "copy.mp4")
    os.symlink(src / "a.mp4", src / "link.mp4")
    (src / "notes.txt").write_text("not a video\n")
    keys = root / "keys"
    keys.mkdir()
    generate_key(keys / "k.private.pem", keys / "k.public.pem", PASSPHRASE.encode())
    return {"root": root, "src": src, "private": keys / "k.private.pem", "public": keys / "k.public.pem",
            "key": BatchKey.load(keys / "k.private.pem", PASSPHRASE.encode())}


@pytest.fixture(scope="module")
def single(tree):
    """The reference: workers=1, in this process."""
    out = tree["root"] / "single"
    seen = []
    result = run_batch(tree["src"], out, tree["key"], SETTINGS, progress=lambda e, i, n: seen.append((e.input, i, n)))
    return result, seen


def _by_input(result):
    return {e.input: e for e in result.entries}


def _assert_same_outputs(a, b) -> None:
    ea, eb = _by_input(a), _by_input(b)
    for rel in GOOD:
        assert eb[rel].status == STATUS_DONE and eb[rel].output == ea[rel].output
        for name in SAME_BYTES:
            pa = a.out_dir / ea[rel].output / "package" / name
            pb = b.out_dir / eb[rel].output / "package" / name
            assert pa.read_bytes() == pb.read_bytes(), f"{rel}: {name} differs"


def test_find_videos_skips_hidden_symlinks_other_files_and_the_output(tree):
    src = tree["src"]
    found = [p.relative_to(src).as_posix() for p in find_videos(src)]
    assert found == ["a.mp4", "sub/b clip.mov", "sub/bad.mp4"]
    assert [p.name for p in find_videos(src, exclude=[src / "sub"])] == ["a.mp4"]
    with pytest.raises(InputError):
        find_videos(src / "a.mp4")


def test_output_name_is_safe_and_names_the_content():
    sha = hashlib.sha256(b"x").hexdigest()  # FIPS 180-4 via hashlib
    assert output_name("sub/b clip.mov", sha) == f"sub__b_clip.mov-{sha[:12]}"
    name = output_name("../.secret/ä;rm -rf.mp4", sha)
    assert "/" not in name and not name.startswith(".") and name.endswith(sha[:12])


def test_single_process_batch_writes_a_package_per_input_and_records_the_bad_one(tree, single):
    result, seen = single
    entries = _by_input(result)
    assert sorted(entries) == sorted(GOOD + (BAD,))
    public = load_public_key(tree["public"])
    for rel in GOOD:
        e = entries[rel]
        digest, size = hashlib.sha256((tree["src"] / rel).read_bytes()).hexdigest(), (tree["src"] / rel).stat().st_size
        assert (e.status, e.sha256, e.bytes, e.frames, e.key_id) == (STATUS_DONE, digest, size, 25, tree["key"].key_id)
        assert e.output == output_name(rel, digest)
        folder = result.out_dir / e.output
        verified = verify_package(folder / "package", [public], source=tree["src"] / rel,
                                  video=folder / "redacted.mp4")
        assert verified.predicate.source.sha256 == digest
        with open(folder / "package" / "skeletons.jsonl", "rb") as f:
            assert any(len(r.tracks) for r in read_rows(f)), "no person found: comparisons would be vacuous"
    bad = entries[BAD]
    assert bad.status == STATUS_FAILED and bad.output is None and "\n" not in bad.error and "bad.mp4" in bad.error
    # only finished outputs and the index are visible: no staging folder left behind
    assert sorted(p.name for p in result.out_dir.iterdir() if not p.name.startswith(".")) == sorted(
        [entries[r].output for r in GOOD] + ["index.json"])
    assert not [p for p in result.out_dir.iterdir() if p.name.startswith(batch.STAGING_PREFIX)]
    index = json.loads(result.index.read_text())
    assert index["complete"] is True
    assert [e["input"] for e in index["inputs"]] == sorted(GOOD + (BAD,))
    assert {e["input"]: e["status"] for e in index["inputs"]} == {e.input: e.status for e in result.entries}
    assert [(i, n) for _, i, n in seen] == [(1, 3), (2, 3), (3, 3)]


def test_rerun_skips_finished_inputs_without_reprocessing(tree, single, tmp_path, monkeypatch):
    result, _ = single
    out = tmp_path / "resumed"
    shutil.copytree(result.out_dir, out, symlinks=True)
    before = {rel: (out / _by_input(result)[rel].output / "package" / "envelope.json").stat().st_mtime_ns
              for rel in GOOD}
    calls = []

    def counting(source, *args, **kwargs):
        calls.append(Path(source).name)
        raise InputError("test: process_video must not be called for a finished input")

    monkeypatch.setattr(batch, "process_video", counting)
    again = run_batch(tree["src"], out, tree["key"], SETTINGS)
    entries = _by_input(again)
    assert calls == ["bad.mp4"]  # only the failed input is tried again
    for rel in GOOD:
        assert entries[rel].status == STATUS_SKIPPED and entries[rel].frames == 25
        assert (out / entries[rel].output / "package" / "envelope.json").stat().st_mtime_ns == before[rel]
    assert entries[BAD].status == STATUS_FAILED


def test_resume_after_a_crash_redoes_only_what_is_missing(tree, single, tmp_path, monkeypatch):
    result, _ = single
    out = tmp_path / "crashed"
    shutil.copytree(result.out_dir, out, symlinks=True)
    lost = _by_input(result)["a.mp4"].output
    shutil.rmtree(out / lost)                                      # its output never got renamed into place
    (out / (batch.STAGING_PREFIX + "leftover")).mkdir()            # a crashed run's staging folder
    calls = []
    real = batch.process_video
    monkeypatch.setattr(batch, "process_video", lambda s, *a, **k: calls.append(Path(s).name) or real(s, *a, **k))
    again = _by_input(run_batch(tree["src"], out, tree["key"], SETTINGS))
    assert sorted(calls) == ["a.mp4", "bad.mp4"]
    assert again["a.mp4"].status == STATUS_DONE and again["sub/b clip.mov"].status == STATUS_SKIPPED
    assert (out / lost / "package" / "skeletons.jsonl").read_bytes() == \
        (result.out_dir / lost / "package" / "skeletons.jsonl").read_bytes()


def test_an_index_pointing_outside_the_output_folder_is_not_trusted(tree, single, tmp_path):
    result, _ = single
    out = tmp_path / "out"
    shutil.copytree(result.out_dir, out, symlinks=True)
    name = _by_input(result)["a.mp4"].output
    shutil.move(out / name, tmp_path / "elsewhere")  # a complete output, but outside OUT
    doc = json.loads((out / "index.json").read_text())
    for e in doc["inputs"]:
        if e["input"] == "a.mp4":
            e["output"] = "../elsewhere"
    (out / "index.json").write_text(json.dumps(doc))
    again = _by_input(run_batch(tree["src"], out, tree["key"], SETTINGS))
    assert again["a.mp4"].status == STATUS_DONE and again["a.mp4"].output == name  # redone inside OUT


def test_rerun_with_other_settings_is_refused(tree, single, tmp_path):
    result, _ = single
    out = tmp_path / "other"
    shutil.copytree(result.out_dir, out, symlinks=True)
    with pytest.raises(InputError, match="other settings"):
        run_batch(tree["src"], out, tree["key"], ProcessSettings(pose=PoseSettings(input_long_side=352), threads=1))


def test_same_content_at_two_paths_is_processed_once(tree, tmp_path, monkeypatch):
    src = tmp_path / "dupes"
    src.mkdir()
    shutil.copy(tree["src"] / "a.mp4", src / "one.mp4")
    shutil.copy(tree["src"] / "a.mp4", src / "two.mp4")
    calls = []
    real = batch.process_video
    monkeypatch.setattr(batch, "process_video", lambda s, *a, **k: calls.append(Path(s).name) or real(s, *a, **k))
    entries = _by_input(run_batch(src, tmp_path / "out", tree["key"], SETTINGS))
    assert calls == ["one.mp4"]
    assert entries["one.mp4"].status == STATUS_DONE
    assert entries["two.mp4"].status == STATUS_SKIPPED and entries["two.mp4"].output == entries["one.mp4"].output


def test_two_local_worker_processes_give_the_same_bytes(tree, single, tmp_path):
    result = run_batch(tree["src"], tmp_path / "workers2", tree["key"], SETTINGS, workers=2)
    assert _by_input(result)[BAD].status == STATUS_FAILED
    _assert_same_outputs(single[0], result)


def test_dask_local_cluster_gives_the_same_bytes(tree, single, tmp_path, monkeypatch):
    from dask.distributed import LocalCluster  # dask[distributed] from PyPI: the outside cluster

    monkeypatch.setenv(batch.PASSPHRASE_ENV, PASSPHRASE)  # the workers inherit it; it never travels
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        result = run_batch(tree["src"], tmp_path / "dask", tree["key"], SETTINGS, scheduler=cluster.scheduler_address)
        addresses = sorted(cluster.scheduler_info["workers"])
    assert _by_input(result)[BAD].status == STATUS_FAILED
    _assert_same_outputs(single[0], result)
    index = json.loads(result.index.read_text())  # every worker's tool version, and each entry's
    assert index["workers"] == [{"address": a, "tool_version": __version__} for a in addresses]
    assert {e["tool_version"] for e in index["inputs"]} == {__version__}


def test_dask_workers_without_the_passphrase_fail_each_input_clearly(tree, tmp_path, monkeypatch):
    from dask.distributed import LocalCluster

    monkeypatch.delenv(batch.PASSPHRASE_ENV, raising=False)
    assert tree["key"].for_cluster().passphrase is None  # what is sent to the cluster
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        result = run_batch(tree["src"], tmp_path / "nopass", tree["key"], SETTINGS, scheduler=cluster.scheduler_address)
    assert all(e.status == STATUS_FAILED for e in result.entries)
    assert all(batch.PASSPHRASE_ENV in e.error for e in result.entries if e.input in GOOD)


def test_workers_need_the_encrypted_key_not_a_loaded_signer(tree, tmp_path):
    signer = tree["key"].signer()
    with pytest.raises(InputError):
        run_batch(tree["src"], tmp_path / "x", signer, SETTINGS, workers=2)
    with pytest.raises(SigningKeyError):
        BatchKey.load(tree["private"], b"wrong passphrase")


def _cli(tree, args, passphrase=PASSPHRASE):
    return CliRunner().invoke(main, ["batch", *args, "--signing-key", str(tree["private"]), "--input-size", "320",
                                     "--threads", "1"], env={batch.PASSPHRASE_ENV: passphrase})


def test_cli_exit_codes_and_json(tree, single, tmp_path):
    good = tmp_path / "good"
    good.mkdir()
    shutil.copy(tree["src"] / "a.mp4", good / "a.mp4")
    r = _cli(tree, [str(good), "--out", str(tmp_path / "o1"), "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)  # exactly one JSON document on stdout
    assert doc["counts"] == {"done": 1, "skipped-already-done": 0, "failed": 0}
    # the CLI run is byte-identical to the library run on the same input and settings
    ref = single[0].out_dir / _by_input(single[0])["a.mp4"].output / "package" / "skeletons.jsonl"
    assert (tmp_path / "o1" / doc["entries"][0]["output"] / "package" / "skeletons.jsonl").read_bytes() == ref.read_bytes()

    # a tree with a bad input: exit 1 and the failure listed; resuming the finished output dir
    out = tmp_path / "o2"
    shutil.copytree(single[0].out_dir, out, symlinks=True)
    r = _cli(tree, [str(tree["src"]), "--out", str(out)])
    assert r.exit_code == 1
    assert f"failed: {BAD}:" in r.stdout and "skipped (already done): 2" in r.stdout

    for args, passphrase in (([str(tree["src"]), "--out", str(tmp_path / "o3"), "--workers", "2",
                               "--scheduler", "tcp://127.0.0.1:1"], PASSPHRASE),
                             ([str(tmp_path / "missing"), "--out", str(tmp_path / "o4")], PASSPHRASE),
                             ([str(good), "--out", str(tmp_path / "o5")], "wrong passphrase")):
        r = _cli(tree, args, passphrase)
        assert r.exit_code == 2, (args, r.output)
        assert "Traceback" not in r.output
    assert not (tmp_path / "o5").exists()


def test_cli_help_has_an_example():
    r = CliRunner().invoke(main, ["batch", "--help"])
    assert r.exit_code == 0 and "redact batch archive/" in r.stdout and "--scheduler" in r.stdout


def test_batch_statements_follow_the_published_predicate_schema(single):
    """Every package a batch writes signs a statement valid under docs/predicate.schema.json (jsonschema)."""
    from statement_schema import check_statement, envelope_payload

    result, _ = single
    done = [e for e in result.entries if e.status == STATUS_DONE]
    assert len(done) == len(GOOD)
    for e in done:
        st = check_statement(envelope_payload(result.out_dir / e.output / "package"))
        assert st["predicate"]["source"]["sha256"] == e.sha256
