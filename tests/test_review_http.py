"""The review server's guards, checked over real HTTP with the standard library's client.

Outside references: status codes as RFC 9110 defines them (§15.5.4 403 Forbidden, §15.5.5 404
Not Found, §15.3.1 200 OK); the Host header (RFC 9110 §7.2) carries the name the client used, which
is what a DNS-rebinding page cannot change; Linux's /proc/net/tcp and /proc/net/tcp6 (proc(5):
local address as hex IP:port, state 0A = LISTEN) show every address the process listens on.
People in the clip: skimage.data.astronaut() (public domain, NASA), skimage.data.camera() (CC0).
"""

from __future__ import annotations

import http.client
import json
import os
import socket

import pytest

from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer
from redact.review.server import TOKEN_HEADER, ReviewServer, ReviewSession

SEED = bytes(range(3, 35))


@pytest.fixture(scope="module")
def server(crossing_clip, tmp_path_factory):
    d = tmp_path_factory.mktemp("review-http")
    signer = Signer.from_seed(SEED)
    process_video(crossing_clip.path, d / "out", signer, ProcessSettings())
    (d / "secret.txt").write_text("outside the output folder")
    os.symlink(d / "secret.txt", d / "out" / "link.txt")  # a link inside pointing out
    srv = ReviewServer(ReviewSession(d / "out", crossing_clip.path, [signer.public_key], signer)).start()
    yield srv
    srv.stop()


def request(srv, method, path, host=None, headers=None, body=None):
    c = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=30)
    try:
        c.putrequest(method, path, skip_host=True)
        c.putheader("Host", host or f"127.0.0.1:{srv.port}")
        for k, v in (headers or {}).items():
            c.putheader(k, v)
        data = json.dumps(body).encode() if body is not None else b""
        c.putheader("Content-Length", str(len(data)))
        c.endheaders(data)
        r = c.getresponse()
        return r.status, r.read()
    finally:
        c.close()


def test_the_page_and_its_parts_need_the_token(server):
    t = server.token
    assert request(server, "GET", "/")[0] == 403
    assert request(server, "GET", "/?token=wrong")[0] == 403
    assert request(server, "GET", "/api/state")[0] == 403
    assert request(server, "GET", "/frame/source/0")[0] == 403  # the unredacted source above all
    assert request(server, "GET", "/assets/review.js")[0] == 403
    status, page = request(server, "GET", f"/?token={t}")
    assert status == 200 and b"Review before disclosure" in page
    assert f"/assets/review.js?token={t}".encode() in page  # the page's own parts carry it
    assert request(server, "GET", f"/frame/redacted/0?token={t}")[0] == 200
    assert request(server, "GET", "/api/state", headers={TOKEN_HEADER: t})[0] == 200


@pytest.mark.parametrize("host", ["evil.example", "evil.example:{port}", "127.0.0.1", "127.0.0.1:1",
                                  "[::1]:{port}", "0.0.0.0:{port}"])
def test_another_host_header_is_refused(server, host):
    status, _ = request(server, "GET", f"/?token={server.token}", host=host.format(port=server.port))
    assert status == 403
    assert request(server, "GET", f"/?token={server.token}", host=f"localhost:{server.port}")[0] == 200


def test_changes_need_the_token_header_not_just_the_url(server):
    t = server.token
    doc = {"reviewer": "R"}
    assert request(server, "POST", f"/api/review?token={t}", body=doc)[0] == 403
    assert request(server, "POST", "/api/review", body=doc)[0] == 403
    assert request(server, "POST", "/api/review", headers={TOKEN_HEADER: "nope"}, body=doc)[0] == 403
    assert request(server, "POST", f"/api/apply?token={t}", body={})[0] == 403
    status, body = request(server, "POST", "/api/review", headers={TOKEN_HEADER: t,
                                                                   "Content-Type": "application/json"}, body=doc)
    assert status == 200 and json.loads(body)["reviewer"] == "R"
    status, body = request(server, "POST", "/api/review", headers={TOKEN_HEADER: t}, body={"colour": 1})
    assert status == 400 and "unknown field" in json.loads(body)["error"]


@pytest.mark.parametrize("path", ["/files/../secret.txt", "/files/%2e%2e/secret.txt", "/files/..%2fsecret.txt",
                                  "/files/link.txt", "/files//etc/passwd", "/files/%2fetc%2fpasswd",
                                  "/files/package/../../secret.txt", "/files/nothing-here.mp4"])
def test_paths_outside_the_output_folder_are_not_found(server, path):
    sep = "&" if "?" in path else "?"
    status, body = request(server, "GET", f"{path}{sep}token={server.token}")
    assert status == 404 and b"outside the output folder" not in body
    assert request(server, "GET", f"/files/redacted.mp4?token={server.token}")[0] == 200  # inside: served


def _listening(port: int) -> list[str]:
    out = []
    for name in ("/proc/net/tcp", "/proc/net/tcp6"):
        if not os.path.exists(name):
            continue
        for line in open(name).read().splitlines()[1:]:
            local, state = line.split()[1], line.split()[3]
            addr, p = local.split(":")
            if int(p, 16) == port and state == "0A":
                out.append(addr)
    return out


def test_nothing_listens_beyond_127_0_0_1(server):
    assert server.httpd.server_address[0] == "127.0.0.1"
    # proc(5): /proc/net/tcp stores IPv4 addresses as little-endian hex: 127.0.0.1 is 0100007F.
    assert _listening(server.port) == ["0100007F"]
    for addr, fam in (("127.0.0.2", socket.AF_INET), ("::1", socket.AF_INET6)):
        s = socket.socket(fam, socket.SOCK_STREAM)
        s.settimeout(5)
        try:
            with pytest.raises(OSError):
                s.connect((addr, server.port))
        finally:
            s.close()
