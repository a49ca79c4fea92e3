"""Batch processing: every video in a folder tree → one signed package per input, plus an index.

Layout of the output folder OUT:

    OUT/index.json                       what happened to each input (rewritten atomically as inputs finish)
    OUT/<safe relative path>-<sha12>/    one `process_video` output per input: redacted.mp4 + package/
    OUT/.redact.lock                     held (flock) while a batch runs, so two runs never share OUT
                                         (redact.fsio; removed when the batch ends)

Each input is processed into a hidden staging folder in OUT and renamed to its final name only when
`process_video` succeeded, so a final folder always holds a complete, signed output. Resuming: an
input whose SHA-256 already has a complete output (from the index, or its final folder holding a
package) is skipped; a rerun with other settings is refused (use a new OUT). A failure in one input
is recorded in the index with a one-line reason and the others continue. An interrupted run
leaves only hidden `.redact-batch-partial-*` folders; the next batch into OUT removes those of
its user that are older than its lock, and mentions any other staging folders it finds. A batch
that fails before any input ran (e.g. its cluster cannot be reached) leaves no folder it made.

Where the work runs: in this process (workers=1), in local worker processes (workers>1,
`concurrent.futures.ProcessPoolExecutor` with the spawn start method; each process loads the model
once and gets cores // workers inference threads), or on a Dask distributed cluster
(`scheduler="tcp://host:8786"`; optional extra `redact[cluster]`). With Dask, input and OUT paths
must be the same on every worker (a shared file system). Output folders are created private (0700).
Before any work the client connects, asks every worker to import redact and say its version, and
refuses with one line naming the workers that cannot or that run another version; each index
entry records the tool version that produced it, and the index the version of every worker.

Reproducibility: where an input runs never changes its outputs, but onnxruntime's intra-op thread
count does (measured: 1, 2, 3 and 4 threads give model outputs differing by up to ~2e-4, enough to
flip the last fixed decimal of a few keypoints). Without `settings.threads` each input gets the
cores of its machine divided among the work slots there, so give `threads` explicitly when
skeletons must be byte-identical across layouts; the index records each input's thread count.

How the signing key reaches the workers (a trade-off, chosen deliberately):
- The encrypted PKCS#8 PEM bytes travel to the workers, so workers need no access to the key file.
- Local worker processes also receive the passphrase, through the process pool's pipe (same user,
  same machine; never on a command line or on disk); they decrypt the key once at start-up.
- Dask workers never receive the passphrase over the network: each worker reads it from its own
  environment variable $REDACT_KEY_PASSPHRASE (set it when starting `dask worker`). The encrypted
  key still crosses the cluster network and sits in worker memory, where anyone able to read it
  can try to guess the passphrase offline: use a strong passphrase, TLS between cluster nodes, and
  only machines you trust with the key. Every worker holds the decrypted key while it runs.

Skeleton data is pseudonymised, not anonymous, and automated redaction misses people: each
output's package/review.json lists frames a person must review before any disclosure.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import tempfile
import threading
import time
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field, replace
from pathlib import Path

from redact import __version__, fsio, jsonio
from redact.errors import InputError, OutputError, RedactError, SigningKeyError
from redact.hashing import sha256_file
from redact.pipeline import PACKAGE_NAME, ProcessSettings, process_video
from redact.provenance.log import utc_now
from redact.provenance.signing import Signer, load_private_key_bytes

# Container extensions looked for (lower case; matching ignores case). Common practice: the
# containers FFmpeg demuxes that surveillance exports and cameras commonly write.
VIDEO_EXTENSIONS = frozenset({
    ".mp4", ".m4v", ".mov", ".qt", ".mkv", ".webm", ".avi", ".wmv", ".asf", ".flv",
    ".mpg", ".mpeg", ".m2v", ".ts", ".mts", ".m2ts", ".3gp", ".3g2", ".ogv", ".h264", ".264",
})
INDEX_NAME = "index.json"
INDEX_FORMAT = "redact-batch-index/v1"
LOCK_NAME = fsio.LOCK_NAME
STAGING_PREFIX = ".redact-batch-partial-"
PASSPHRASE_ENV = "REDACT_KEY_PASSPHRASE"  # the same variable the CLI reads (redact.cli.cmd_keys)
STATUS_DONE = "done"
STATUS_SKIPPED = "skipped-already-done"
STATUS_FAILED = "failed"
NAME_LIMIT = 120  # characters of the sanitised relative path kept in a folder name; common practice
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")


def find_videos(root: str | Path, exclude: Iterable[str | Path] = ()) -> list[Path]:
    """Every video file under `root` (by extension, see VIDEO_EXTENSIONS), sorted by relative path.

    Symbolic links (files or folders) are not followed, hidden files and folders (name starting
    with ".") are skipped, and so is any folder in `exclude` (e.g. the batch's own output folder
    when it lies inside the input tree).
    """
    root = Path(root)
    if not root.is_dir():
        raise InputError(f"{root}: not a folder")
    skip = {os.path.realpath(p) for p in exclude}
    found: list[Path] = []
    for here, dirs, files in os.walk(root, followlinks=False):
        dirs[:] = sorted(d for d in dirs if not d.startswith(".")
                         and not os.path.islink(os.path.join(here, d))
                         and os.path.realpath(os.path.join(here, d)) not in skip)
        for name in files:
            p = Path(here) / name
            if name.startswith(".") or p.suffix.lower() not in VIDEO_EXTENSIONS or p.is_symlink():
                continue
            found.append(p)
    return sorted(found, key=lambda p: p.relative_to(root).as_posix())


def output_name(relative: str, sha256: str) -> str:
    """Folder name of one input's output: its relative path made safe, then the first 12 hex of its SHA-256."""
    base = _UNSAFE.sub("_", relative.replace("/", "__")).lstrip(".-_") or "input"
    return f"{base[:NAME_LIMIT]}-{sha256[:12]}"


@dataclass(frozen=True)
class BatchKey:
    """The signing key as it travels to workers: encrypted PKCS#8 PEM bytes and its key id.

    `passphrase` is kept only for in-process and local-process work; `for_cluster()` drops it
    (cluster workers read $REDACT_KEY_PASSPHRASE from their own environment; see the module doc).
    """

    pem: bytes = field(repr=False)
    key_id: str
    passphrase: bytes | None = field(default=None, repr=False)

    @classmethod
    def load(cls, path: str | Path, passphrase: bytes) -> BatchKey:
        """Read the key file and check the passphrase opens it (so a wrong one fails before any work)."""
        from redact.provenance.signing import load_private_key

        signer = load_private_key(Path(path), passphrase)
        return cls(Path(path).read_bytes(), signer.key_id, bytes(passphrase))

    def for_cluster(self) -> BatchKey:
        return replace(self, passphrase=None)

    def signer(self) -> Signer:
        """Decrypt the key (passphrase from this object, else from $REDACT_KEY_PASSPHRASE)."""
        passphrase = self.passphrase
        if passphrase is None:
            env = os.environ.get(PASSPHRASE_ENV)
            if not env:
                raise SigningKeyError(f"this worker has no key passphrase: start it with ${PASSPHRASE_ENV} set")
            passphrase = env.encode("utf-8")
        signer = load_private_key_bytes(self.pem, passphrase, "this worker's signing key")
        if signer.key_id != self.key_id:
            raise SigningKeyError(f"the worker's key is {signer.key_id}, expected {self.key_id}")
        return signer


@dataclass(frozen=True)
class BatchEntry:
    """What happened to one input. `output` is the output folder's name inside OUT."""

    input: str
    sha256: str
    bytes: int
    status: str
    output: str | None = None
    frames: int | None = None
    key_id: str | None = None
    review_ranges: int | None = None
    seconds: float | None = None
    error: str | None = None
    threads: int | None = None
    tool_version: str | None = None  # the redact that made (or tried to make) this output

    def to_json(self) -> dict:
        return {"input": self.input, "sha256": self.sha256, "bytes": self.bytes, "status": self.status,
                "output": self.output, "frames": self.frames, "key_id": self.key_id,
                "review_ranges": self.review_ranges,
                "seconds": None if self.seconds is None else round(self.seconds, 3), "error": self.error,
                "threads": self.threads, "tool_version": self.tool_version}


@dataclass(frozen=True)
class BatchResult:
    """Every input's entry (sorted by relative path) and the index file written."""

    out_dir: Path
    index: Path
    entries: tuple[BatchEntry, ...]
    notices: tuple[str, ...] = ()  # one line each for the operator (e.g. stale staging folders removed)
    workers: dict[str, str] | None = None  # Dask worker address → its redact version

    def with_status(self, status: str) -> list[BatchEntry]:
        return [e for e in self.entries if e.status == status]

    @property
    def failed(self) -> list[BatchEntry]:
        return self.with_status(STATUS_FAILED)

    @property
    def ok(self) -> bool:
        return not self.failed


@dataclass(frozen=True)
class _Job:
    """One input to process: everything a worker needs, as plain picklable values."""

    source: str
    relative: str
    sha256: str
    bytes: int
    out_root: str
    name: str


def _one_line(e: BaseException) -> str:
    text = str(e) if isinstance(e, RedactError) else f"{type(e).__name__}: {e}"
    return " ".join(text.split()) or type(e).__name__


def _has_package(folder: Path) -> bool:
    return (folder / PACKAGE_NAME).is_dir() or (folder / (PACKAGE_NAME + ".tar")).is_file()


def process_job(job: _Job, settings: ProcessSettings, signer: Signer, estimator=None) -> dict:
    """Run one input into a staging folder and rename it into place; returns the entry's fields.

    Never raises for a bad input: the failure is returned as {"status": "failed", "error": ...}.
    """
    started = time.perf_counter()
    threads = settings.model_threads
    root, final = Path(job.out_root), Path(job.out_root) / job.name
    staging = None
    try:
        if os.path.lexists(final):
            raise OutputError(f"{final} exists but holds no complete output; move it away and rerun")
        staging = Path(tempfile.mkdtemp(prefix=STAGING_PREFIX, dir=root))
        result = process_video(job.source, staging, signer, settings, estimator=estimator)
        if result.source_sha256 != job.sha256:
            raise InputError("the file changed while the batch ran (SHA-256 differs); rerun the batch")
        fsio.rename_new(staging, final)  # never over a folder that appeared meanwhile
        staging = None
        return {"status": STATUS_DONE, "output": job.name, "frames": result.frames, "key_id": result.key_id,
                "review_ranges": len(result.review), "seconds": time.perf_counter() - started, "threads": threads,
                "tool_version": __version__}
    except Exception as e:  # one bad input must not stop the batch; the reason goes into the index
        return {"status": STATUS_FAILED, "error": _one_line(e), "seconds": time.perf_counter() - started,
                "tool_version": __version__}
    finally:
        if staging is not None:
            shutil.rmtree(staging, ignore_errors=True)


# ---- local worker processes -------------------------------------------------------------------

_WORKER: dict = {}


def _init_worker(key: BatchKey, settings: ProcessSettings) -> None:
    """Process-pool initialiser: decrypt the key and load the model once per worker process."""
    from redact.vision.pose import PoseEstimator

    _WORKER["signer"] = key.signer()
    _WORKER["estimator"] = PoseEstimator.default(settings.pose, settings.model_threads)
    _WORKER["settings"] = settings


def _local_task(job: _Job) -> dict:
    return process_job(job, _WORKER["settings"], _WORKER["signer"], _WORKER["estimator"])


# ---- Dask distributed -------------------------------------------------------------------------

CONNECT_TIMEOUT = "20s"  # how long to try to reach the scheduler (common practice for a LAN)
_CLUSTER_LOCK = threading.Lock()
_CLUSTER_CACHE: dict = {}


def _cpu_count() -> int:
    from redact.vision.models import default_threads

    return default_threads()


def cluster_task(job: _Job, settings: ProcessSettings, key: BatchKey, threads_by_worker: dict[str, int]) -> dict:
    """One input on a Dask worker; the key and model are loaded once per worker process and reused."""
    threads = settings.threads
    if threads is None:
        try:
            from distributed import get_worker

            worker = get_worker()
            threads = threads_by_worker.get(worker.address) or max(1, _cpu_count() // max(1, worker.state.nthreads))
        except (ImportError, ValueError):
            threads = _cpu_count()
    try:
        with _CLUSTER_LOCK:
            cache_key = (key.key_id, settings.pose, threads)
            if cache_key not in _CLUSTER_CACHE:
                from redact.vision.pose import PoseEstimator

                _CLUSTER_CACHE[cache_key] = (key.signer(), PoseEstimator.default(settings.pose, threads))
            signer, estimator = _CLUSTER_CACHE[cache_key]
    except Exception as e:  # e.g. no passphrase on this worker: recorded for this input, the rest go on
        return {"status": STATUS_FAILED, "error": _one_line(e), "seconds": 0.0, "tool_version": __version__}
    return process_job(job, replace(settings, threads=threads), signer, estimator)


def _threads_by_worker(client) -> dict[str, int]:
    """Model threads per Dask worker: the host's cores shared among every task slot on that host."""
    workers = client.scheduler_info()["workers"]
    cores = client.run(_cpu_count)
    slots: dict[str, int] = {}
    for w in workers.values():
        slots[w["host"]] = slots.get(w["host"], 0) + int(w.get("nthreads", 1))
    return {addr: max(1, int(cores.get(addr, 1)) // max(1, slots.get(w["host"], 1))) for addr, w in workers.items()}


def connect_cluster(address: str):
    """A Dask client for `address` whose every worker runs this version of redact; InputError (one
    line) when Dask is missing, the scheduler cannot be reached, it has no workers, or a worker has
    no redact or another version. Returns (client, {worker address: redact version})."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError("--scheduler needs Dask: install the optional extra with "
                         "`pip install 'redact[cluster]'`") from None
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as e:
        raise InputError(f"cannot connect to the Dask scheduler at {address}: {_one_line(e)}") from None
    try:
        versions = worker_versions(client)
    except BaseException:
        client.close()
        raise
    return client, versions


#: What each worker is asked before any work: import the module its tasks come from and say its
#: version. It travels as a string for the built-in eval, because a function of ours would not even
#: unpickle on a worker without redact (that is what gave a 62-line traceback); a constant, never
#: anything a user typed.
_VERSION_QUESTION = "__import__('redact.batch', fromlist=['__version__']).__version__"


def worker_versions(client) -> dict[str, str]:
    """{worker address: redact version} of every worker; InputError naming the workers that cannot
    import redact (with the reason) or run another version than this client."""
    answers = client.run(eval, _VERSION_QUESTION, on_error="return")
    if not answers:
        raise InputError("the Dask scheduler has no workers; start `dask worker ADDRESS` on each machine first")
    broken = sorted(f"{a} ({_one_line(v)})" for a, v in answers.items() if isinstance(v, BaseException))
    if broken:
        raise InputError(f"redact cannot be used on Dask worker(s) {', '.join(broken)}: install redact {__version__} "
                         "there (the same version as here) and restart the workers")
    other = sorted(f"{a} has {v}" for a, v in answers.items() if v != __version__)
    if other:
        raise InputError(f"Dask workers run another redact version than this client ({__version__}): "
                         f"{'; '.join(other)}; install the same version everywhere")
    return {a: str(v) for a, v in answers.items()}


def _run_cluster(client, jobs: list[_Job], settings: ProcessSettings, key: BatchKey,
                 done: Callable[[_Job, dict], None]) -> None:
    from dask.distributed import as_completed as dask_completed

    plan = _threads_by_worker(client)
    remote_key = key.for_cluster()
    futures = {client.submit(cluster_task, job, settings, remote_key, plan, pure=False,
                             key=f"redact-batch-{job.sha256[:16]}-{i}"): job for i, job in enumerate(jobs)}
    for fut in dask_completed(futures):
        try:
            fields = fut.result()
        except Exception as e:  # a worker died or the task could not run there
            fields = {"status": STATUS_FAILED, "error": _one_line(e)}
        done(futures[fut], fields)


# ---- the batch ---------------------------------------------------------------------------------

def _plain_name(name: str) -> bool:
    """A folder name directly inside OUT (an index is never trusted to point elsewhere)."""
    return bool(name) and not name.startswith(".") and "/" not in name and "\\" not in name and "\x00" not in name


def _read_prior(index: Path, settings_record: dict) -> dict[str, dict]:
    """Finished entries of an earlier run in this OUT, by SHA-256; refuses other settings."""
    if not index.exists():
        return {}
    doc = jsonio.loads_object(index.read_bytes(), str(index))
    if doc.get("format") != INDEX_FORMAT:
        raise InputError(f"{index}: not a batch index of this tool; choose another --out")
    if doc.get("settings") != settings_record:
        raise InputError(f"{index}: this folder holds a batch made with other settings; "
                         "rerun with the same settings or choose a new --out")
    inputs = doc.get("inputs")
    if not isinstance(inputs, list):
        raise InputError(f"{index}: damaged batch index (no list of inputs); choose another --out")
    prior: dict[str, dict] = {}
    for e in inputs:
        out = e.get("output") if isinstance(e, dict) else None
        if isinstance(out, str) and _plain_name(out) and e.get("status") in (STATUS_DONE, STATUS_SKIPPED):
            prior.setdefault(e.get("sha256"), e)
    return prior


def _write_index(index: Path, settings_record: dict, key_id: str, entries: list[BatchEntry], complete: bool,
                 workers: dict[str, str] | None = None) -> None:
    doc = {"format": INDEX_FORMAT, "tool": {"name": "redact", "version": __version__}, "updated": utc_now(),
           "complete": complete, "key_id": key_id, "settings": settings_record,
           "inputs": [e.to_json() for e in sorted(entries, key=lambda e: e.input)]}
    if workers is not None:
        doc["workers"] = [{"address": a, "tool_version": v} for a, v in sorted(workers.items())]
    fsio.atomic_write(index, jsonio.dumps(doc) + b"\n", replace=True)


def run_batch(input_dir: str | Path, out_dir: str | Path, key: BatchKey | Signer,
              settings: ProcessSettings = ProcessSettings(), workers: int = 1, scheduler: str | None = None,
              progress: Callable[[BatchEntry, int, int], None] | None = None) -> BatchResult:
    """Process every video under `input_dir` into `out_dir` (see the module doc); returns every entry.

    key: a BatchKey (required for workers > 1 or a scheduler), or a Signer for in-process work.
    progress(entry, finished, total) is called as each input finishes or is skipped.
    """
    input_dir, out_dir = Path(input_dir), Path(out_dir)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}")
    if scheduler and workers > 1:
        raise InputError("give either local workers or a Dask scheduler, not both")
    if (workers > 1 or scheduler) and not isinstance(key, BatchKey):
        raise InputError("worker processes need the key as a BatchKey (encrypted PEM), not a loaded Signer")
    if out_dir.resolve() == input_dir.resolve():
        raise InputError("the output folder must not be the input folder (outputs would be read as inputs)")
    videos = find_videos(input_dir, exclude=[out_dir])
    if not videos:
        raise InputError(f"no video files under {input_dir} (extensions: {' '.join(sorted(VIDEO_EXTENSIONS))})")
    client, versions = connect_cluster(scheduler) if scheduler else (None, None)  # before OUT exists
    try:
        created = fsio.make_folder(out_dir)
        try:
            with fsio.lock_folder(out_dir) as lock:  # a second batch into OUT stops here
                notices = fsio.staging_notices(out_dir, *fsio.stale_staging(out_dir, STAGING_PREFIX,
                                                                            lock.acquired_at))
                result = _batch(input_dir, out_dir, videos, key, settings, workers, client, versions, progress)
        except BaseException:
            if created:
                with contextlib.suppress(OSError):
                    out_dir.rmdir()  # only when empty: nothing ran
            raise
    finally:
        if client is not None:
            client.close()
    return replace(result, notices=notices, workers=versions)


def _batch(input_dir, out_dir, videos, key, settings, workers, client, versions, progress) -> BatchResult:
    index = out_dir / INDEX_NAME
    record = jsonio.loads(jsonio.dumps(settings.record()), "settings")  # as the index stores it
    prior = _read_prior(index, record)
    entries: list[BatchEntry] = []
    jobs: list[_Job] = []
    claimed: dict[str, str] = {}  # sha256 → relative path of the input that will make its output
    same: list[tuple[str, str, int]] = []  # inputs with the same content as an earlier one in this run
    total = len(videos)

    def finish(entry: BatchEntry) -> None:
        entries.append(entry)
        _write_index(index, record, key.key_id, entries, complete=False, workers=versions)
        if progress is not None:
            progress(entry, len(entries), total)

    for path in videos:
        rel = path.relative_to(input_dir).as_posix()
        try:
            sha, size = sha256_file(path)
        except OSError as e:
            finish(BatchEntry(rel, "", 0, STATUS_FAILED, error=f"cannot read: {e.strerror or e}"))
            continue
        name = output_name(rel, sha)  # paths that sanitise alike differ in content, hence in sha12
        old = prior.get(sha)
        if old is not None and _has_package(out_dir / old["output"]):
            finish(BatchEntry(rel, sha, size, STATUS_SKIPPED, old["output"], old.get("frames"), old.get("key_id"),
                              old.get("review_ranges"), tool_version=old.get("tool_version")))
        elif sha in claimed:
            same.append((rel, sha, size))
        elif _has_package(out_dir / name):
            finish(BatchEntry(rel, sha, size, STATUS_SKIPPED, name))
        else:
            claimed[sha] = rel
            jobs.append(_Job(str(path.resolve()), rel, sha, size, str(out_dir.resolve()), name))

    def done(job: _Job, fields: dict) -> None:
        finish(BatchEntry(job.relative, job.sha256, job.bytes, fields["status"], fields.get("output"),
                          fields.get("frames"), fields.get("key_id"), fields.get("review_ranges"),
                          fields.get("seconds"), fields.get("error"), fields.get("threads"),
                          fields.get("tool_version")))

    if jobs and client is not None:
        _run_cluster(client, jobs, settings, key, done)
    elif jobs and workers > 1:
        _run_local(jobs, settings, key, workers, done)
    elif jobs:
        _run_here(jobs, settings, key, done)
    outcome = {e.input: e for e in entries}
    for rel, sha, size in same:  # same content as another input: share its outcome
        first = outcome[claimed[sha]]
        if first.status == STATUS_FAILED:
            finish(BatchEntry(rel, sha, size, STATUS_FAILED, error=f"same content as {first.input}: {first.error}"))
        else:
            finish(BatchEntry(rel, sha, size, STATUS_SKIPPED, first.output, first.frames, first.key_id,
                              first.review_ranges, tool_version=first.tool_version))
    _write_index(index, record, key.key_id, entries, complete=True, workers=versions)
    return BatchResult(out_dir, index, tuple(sorted(entries, key=lambda e: e.input)))


def _run_here(jobs: list[_Job], settings: ProcessSettings, key, done) -> None:
    from redact.vision.pose import PoseEstimator

    signer = key.signer() if isinstance(key, BatchKey) else key
    estimator = PoseEstimator.default(settings.pose, settings.model_threads)  # the model is loaded once
    for job in jobs:
        done(job, process_job(job, settings, signer, estimator))


def _run_local(jobs: list[_Job], settings: ProcessSettings, key: BatchKey, workers: int, done) -> None:
    import multiprocessing

    workers = min(workers, len(jobs))
    if settings.threads is None:
        settings = replace(settings, threads=max(1, _cpu_count() // workers))
    ctx = multiprocessing.get_context("spawn")  # no fork: onnxruntime and PyAV threads do not survive it
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                             initargs=(key, settings)) as pool:
        futures = {pool.submit(_local_task, job): job for job in jobs}
        for fut in as_completed(futures):
            try:
                fields = fut.result()
            except Exception as e:  # the worker process died (or could not start: key, model)
                fields = {"status": STATUS_FAILED, "error": _one_line(e)}
            done(futures[fut], fields)
