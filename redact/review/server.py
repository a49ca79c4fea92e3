"""The local review server: a Bottle app on 127.0.0.1 that serves the review page of one output folder.

Guarded against other local programs and web pages, since the page can show unredacted source
frames and can sign a package:
- it binds to 127.0.0.1 only, on a free port the system chooses;
- every request must carry the random one-time token printed at start (`?token=` on the URL, or
  the `X-Review-Token` header), else 403;
- the Host header must be 127.0.0.1:PORT or localhost:PORT, else 403 (a page elsewhere that makes
  its own name resolve to 127.0.0.1, DNS rebinding, sends its own name);
- every state-changing request (POST) must carry the token in the `X-Review-Token` header, which
  a page of another origin cannot set without the browser's CORS consent, else 403;
- files are served only from inside the output folder (resolved, no links out), else 404.
Status codes as RFC 9110 §15 defines them (403 Forbidden, 404 Not Found, 400 Bad Request,
409 Conflict). Every asset comes from the installed package: nothing is fetched from elsewhere.
"""

from __future__ import annotations

import hmac
import json
import secrets
import socketserver
import threading
from importlib import resources
from pathlib import Path
from wsgiref.simple_server import WSGIRequestHandler, WSGIServer, make_server

import bottle

from redact.errors import RedactError
from redact.formats.review_json import in_words
from redact.review.frames import FrameSource
from redact.review.outputs import LoadedOutput, apply_review, latest, load_output, root_of
from redact.review.state import STATUSES

TOKEN_HEADER = "X-Review-Token"
ASSETS = {"review.js": "application/javascript; charset=utf-8", "review.css": "text/css; charset=utf-8",
          "icon.svg": "image/svg+xml"}
CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; "
       "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
BODY_LIMIT = 4 * 1024 * 1024  # bytes of a POST body (common practice)



class _Quiet(WSGIRequestHandler):
    def log_message(self, format, *args) -> None:  # noqa: A002 (the stdlib's name)
        pass


class _ThreadingServer(socketserver.ThreadingMixIn, WSGIServer):
    daemon_threads = True


def _asset(name: str) -> bytes:
    return resources.files("redact.review").joinpath("assets", name).read_bytes()


class ReviewSession:
    """The review of one output folder: the copy under review, its state, the apply job."""

    def __init__(self, folder: Path, source: Path, trusted_keys, signer):
        from redact.hashing import sha256_file

        self.root = root_of(Path(folder)).resolve()
        self.source = Path(source)
        self.trusted, self.signer = list(trusted_keys), signer
        self.lock = threading.RLock()
        self.job: dict = {"state": "idle"}
        self._load(load_output(latest(Path(folder)), self.trusted))
        digest, _ = sha256_file(self.source)
        if digest != self.output.predicate.source.sha256:
            raise RedactError(f"{self.source}: not the source this output was made from (SHA-256 differs)")
        self.source_frames = FrameSource(self.source)

    def _load(self, output: LoadedOutput) -> None:
        self.output = output
        self.state = output.initial_state()
        self.redacted = FrameSource(output.video)
        from redact.media.video import probe

        self.info = probe(output.video)

    def page_state(self) -> dict:
        o = self.output
        src = o.predicate.source
        faults = []
        from redact import jsonio
        from redact.provenance.package import QUALITY

        for n, line in enumerate(o.files.get(QUALITY, b"").splitlines()):
            row = jsonio.loads_object(line, f"{QUALITY} line {n + 1}")
            if row.get("fault") is True:
                faults.append(int(row.get("frame", n)))
        return {
            "folder": o.folder.name, "frames": o.frames, "fps": src.fps, "width": src.width,
            "height": src.height, "source_name": src.name,
            "pts": self.redacted.pts, "time_base": str(self.info.time_base),
            "ranges": [{"start": r.start, "end": r.end, "reasons": list(r.reasons),
                        "why": in_words(r.reasons)}
                       for r in self.state.ranges],
            "failed_frames": faults, "statuses": STATUSES, "review": self.state.page_doc(),
            "reviewed": o.predicate.human_review is not None, "job": self.job,
        }

    def update(self, doc: dict) -> dict:
        with self.lock:
            self.state = self.state.updated(doc, self.info)
            return self.state.page_doc()

    def watched(self, runs) -> dict:
        with self.lock:
            self.state = self.state.watch(runs)
            return {"frames_watched": len(self.state.watched), "whole_video_watched": self.state.whole_video_watched}

    def start_apply(self) -> dict:
        with self.lock:
            if self.job.get("state") == "running":
                raise bottle.HTTPError(409, "a re-render is already running")
            state, output = self.state, self.output
            self.job = {"state": "running", "done": 0, "total": output.frames}

        def progress(done: int, total: int) -> None:
            self.job = {"state": "running", "done": done, "total": total}

        def work() -> None:
            try:
                result = apply_review(output, state, self.source, self.signer, progress=progress)
                with self.lock:
                    self.redacted.close()
                    self._load(load_output(result.folder, self.trusted))
                    self.job = {"state": "done", "folder": result.folder.name,
                                "video": f"{result.folder.name}/{result.video.name}",
                                "package": f"{result.folder.name}/{result.package.name}",
                                "key_id": result.key_id, "corrected_frames": result.corrected_frames,
                                "statement_sha256": result.statement_sha256}
            except RedactError as e:
                self.job = {"state": "failed", "error": str(e)}
            except Exception as e:  # noqa: BLE001 (reported on the page; nothing was moved into place)
                self.job = {"state": "failed", "error": f"{type(e).__name__}: {e}"}

        threading.Thread(target=work, name="redact-review-apply", daemon=True).start()
        return self.job

    def close(self) -> None:
        self.redacted.close()
        self.source_frames.close()


def build_app(session: ReviewSession, token: str, port_ref: list[int]) -> bottle.Bottle:
    """The Bottle app; port_ref[0] is the bound port (known only once the socket is bound)."""
    app = bottle.Bottle(catchall=True)
    req, resp = bottle.request, bottle.response

    def allowed_hosts() -> set[str]:
        return {f"127.0.0.1:{port_ref[0]}", f"localhost:{port_ref[0]}"}

    @app.hook("before_request")
    def guard() -> None:
        host = req.environ.get("HTTP_HOST", "")
        if host not in allowed_hosts():
            raise bottle.HTTPError(403, "this server answers only to 127.0.0.1 with its own port")
        given_header = req.get_header(TOKEN_HEADER, "")
        given = given_header or req.query.get("token", "")
        if not hmac.compare_digest(given.encode(), token.encode()):
            raise bottle.HTTPError(403, "missing or wrong token: open the address the command printed")
        if req.method not in ("GET", "HEAD") and not hmac.compare_digest(given_header.encode(), token.encode()):
            raise bottle.HTTPError(403, f"changes need the {TOKEN_HEADER} header")

    @app.hook("after_request")
    def headers() -> None:
        resp.set_header("Content-Security-Policy", CSP)
        resp.set_header("X-Content-Type-Options", "nosniff")
        resp.set_header("Referrer-Policy", "no-referrer")
        resp.set_header("Cache-Control", "no-store")
        resp.set_header("Cross-Origin-Resource-Policy", "same-origin")

    def as_json(doc, status: int = 200):
        resp.status = status
        resp.content_type = "application/json; charset=utf-8"
        return json.dumps(doc, ensure_ascii=False, allow_nan=False)

    def body() -> dict:
        n = req.content_length
        if n < 0 or n > BODY_LIMIT:
            raise bottle.HTTPError(400, "request body missing or too large")
        try:
            return json.loads(req.body.read(n) or b"null")
        except ValueError:
            raise bottle.HTTPError(400, "request body is not JSON") from None

    def guarded(fn):
        try:
            return fn()
        except RedactError as e:
            return as_json({"error": str(e)}, 400)

    @app.get("/")
    def page():
        resp.content_type = "text/html; charset=utf-8"
        page = _asset("review.html").decode("utf-8")
        for name in ASSETS:  # the token is URL-safe base64 (RFC 4648 §5): safe inside an attribute
            page = page.replace(f'"/assets/{name}"', f'"/assets/{name}?token={token}"')
        return page

    @app.get("/assets/<name>")
    def asset(name: str):
        if name not in ASSETS:
            raise bottle.HTTPError(404, "no such asset")
        resp.content_type = ASSETS[name]
        return _asset(name)

    @app.get("/api/state")
    def state():
        with session.lock:
            return as_json(session.page_state())

    @app.post("/api/review")
    def review():
        return guarded(lambda: as_json(session.update(body())))

    @app.post("/api/watched")
    def watched():
        return guarded(lambda: as_json(session.watched((body() or {}).get("runs", []))))

    @app.post("/api/apply")
    def apply():
        return guarded(lambda: as_json(session.start_apply(), 202))

    @app.get("/api/apply")
    def job():
        return as_json(session.job)

    @app.get("/frame/<which:re:redacted|source>/<index:int>")
    def frame(which: str, index: int):
        frames = session.redacted if which == "redacted" else session.source_frames
        try:
            data = frames.jpeg(index)
        except RedactError as e:
            raise bottle.HTTPError(404, str(e)) from None
        resp.content_type = "image/jpeg"
        return data

    @app.get("/files/<path:path>")
    def files(path: str):
        root = session.root
        try:
            target = (root / path).resolve(strict=True)
        except (OSError, RuntimeError):
            raise bottle.HTTPError(404, "not found") from None
        if root not in target.parents or not target.is_file() or target == session.source.resolve():
            raise bottle.HTTPError(404, "not found")
        return bottle.static_file(str(target.relative_to(root)), root=str(root))

    return app


class ReviewServer:
    """A running review server: `url` carries the token; `stop()` shuts it down."""

    def __init__(self, session: ReviewSession, port: int = 0):
        self.session = session
        self.token = secrets.token_urlsafe(24)
        port_ref = [0]
        self.app = build_app(session, self.token, port_ref)
        self.httpd = make_server("127.0.0.1", port, self.app, server_class=_ThreadingServer, handler_class=_Quiet)
        self.port = self.httpd.server_address[1]
        port_ref[0] = self.port
        self.url = f"http://127.0.0.1:{self.port}/?token={self.token}"
        self._thread: threading.Thread | None = None

    def start(self) -> ReviewServer:
        self._thread = threading.Thread(target=self.httpd.serve_forever, name="redact-review-http", daemon=True)
        self._thread.start()
        return self

    def serve_forever(self) -> None:
        self.httpd.serve_forever()

    def stop(self) -> None:
        self.httpd.shutdown()
        self.httpd.server_close()
        self.session.close()
