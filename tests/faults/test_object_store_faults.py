"""Object-store failures while reading a slide: transient errors retried with backoff, a slow or dropped
connection reported in one line naming the URL and the cause.

The failures come from a small HTTP server of this test on loopback (ranged GETs, HEAD), serving a
real slide file with the faults it is told to make; ``https://`` slides are read through the same
client and retry rules as the buckets.
"""

from __future__ import annotations

import email.utils
import hashlib
import socket
import threading
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import ObjectStoreError

from helpers import write_slide


class _Faulty(BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"
    data = b""
    fault = {"kind": None, "left": 0}
    seen: list = []

    def log_message(self, *args):  # quiet
        pass

    def _headers(self, start, end, status):
        self.send_response(status)
        self.send_header("Content-Length", str(end - start))
        self.send_header("ETag", '"' + hashlib.md5(self.data).hexdigest() + '"')
        self.send_header("Last-Modified", email.utils.formatdate(0, usegmt=True))
        self.send_header("Accept-Ranges", "bytes")
        if status == 206:
            self.send_header("Content-Range", f"bytes {start}-{end - 1}/{len(self.data)}")
        self.end_headers()

    def _answer(self, body: bool):
        self.seen.append(self.command)
        fault = self.fault
        if fault["left"] > 0 and not (fault["kind"] == "drop" and not body):  # HEAD has no body to drop
            fault["left"] -= 1
            if fault["kind"] == "503":
                self.send_response(503)
                self.send_header("Content-Length", "0")
                self.end_headers()
                return
            if fault["kind"] == "slow":
                time.sleep(3)
            if fault["kind"] == "drop":  # the answer's headers promise more than the body brings
                rng = self.headers.get("Range")
                if rng and rng.startswith("bytes="):
                    a, _, b = rng[6:].partition("-")
                    self._headers(int(a), min(len(self.data), int(b) + 1 if b else len(self.data)), 206)
                else:
                    self._headers(0, len(self.data), 200)
                self.wfile.write(self.data[:10])
                self.wfile.flush()
                self.connection.shutdown(socket.SHUT_RDWR)  # the connection drops mid-answer
                self.close_connection = True
                return
        start, end, status = 0, len(self.data), 200
        rng = self.headers.get("Range")
        if rng and rng.startswith("bytes="):
            a, _, b = rng[6:].partition("-")
            start, end, status = int(a), min(len(self.data), int(b) + 1 if b else len(self.data)), 206
        self._headers(start, end, status)
        if body:
            self.wfile.write(self.data[start:end])

    def do_GET(self):
        self._answer(True)

    def do_HEAD(self):
        self._answer(False)


@pytest.fixture
def served(tmp_path):
    path, _ = write_slide(tmp_path / "f.tif", mpp=0.2527, size_um=(400.0, 500.0), seed=9)
    handler = type("H", (_Faulty,), {"data": path.read_bytes(), "fault": {"kind": None, "left": 0}, "seen": []})
    server = ThreadingHTTPServer(("127.0.0.1", 0), handler)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    yield path, f"http://127.0.0.1:{server.server_address[1]}/slides/f.tif", handler
    server.shutdown()
    server.server_close()


def test_transient_server_errors_are_retried_with_backoff(served):
    path, url, handler = served
    with tw.open(path) as local:
        want = local.read_level(0, 100, 200, 300, 400)
    handler.fault.update(kind="503", left=3)
    t0 = time.monotonic()
    with tw.open(url) as s:  # three 503 answers, then the slide
        np.testing.assert_array_equal(s.read_level(0, 100, 200, 300, 400), want)
    assert handler.fault["left"] == 0 and len(handler.seen) > 3  # ground truth: the server counted the retries
    assert time.monotonic() - t0 >= 0.1 + 0.1  # exponential backoff waited (100 ms first, then more)


def test_a_slow_request_fails_in_one_line_naming_the_url(served, monkeypatch):
    _, url, handler = served
    monkeypatch.setenv("TILEWRIGHT_OBJECT_TIMEOUT", "0.5")
    monkeypatch.setattr("tilewright.location.client.RETRY_SECONDS", 2)
    handler.fault.update(kind="slow", left=100)
    with pytest.raises(ObjectStoreError) as e:
        tw.open(url)
    msg = e.value.one_line()
    assert url in msg and "timed out" in msg and e.value.cause == "timeout" and "\n" not in str(e.value)


def test_a_dropped_connection_fails_in_one_line_naming_the_url(served, monkeypatch):
    _, url, handler = served
    monkeypatch.setattr("tilewright.location.client.RETRY_SECONDS", 2)
    handler.fault.update(kind="drop", left=100)
    with pytest.raises(ObjectStoreError) as e:
        tw.open(url)
    assert url in str(e.value) and e.value.cause == "connection" and "\n" not in str(e.value)
    assert handler.seen.count("GET") > 1 and "retr" in str(e.value)  # retried before giving up (server's count)


def test_request_counts_are_what_the_server_sees(served):
    """The byte sources' request counts (the benchmark's requests per tile) against the server's own count."""
    path, url, handler = served
    with tw.open(url) as s:
        sources = s._reader._fds
        for region in ((0, 0, 700, 900), (300, 300, 10, 10), (0, 0, 1600, 1950)):
            seen, counted = handler.seen.count("GET"), sum(src.requests for src in sources)
            s.read_level(0, *region)
            assert handler.seen.count("GET") - seen == sum(src.requests for src in sources) - counted
