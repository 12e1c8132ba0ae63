"""OUT's lock in a bucket of a real S3-protocol server: an object taken by a conditional write, with a lease."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import threading
import time

import pytest

from tilewright.errors import OutputLockedError
from tilewright.run import lock_object
from tilewright.run.lock import LOCK_NAME, lock_holder, output_lock

from object_store_files import _store, fetch


def _put_holder(url, **holder):
    import obstore

    store, key = _store(url)
    obstore.put(store, key, json.dumps(holder).encode())


def test_one_run_at_a_time_and_the_holder_is_named(bucket):
    out = f"{bucket}/tiles"
    with output_lock(out):
        holder = json.loads(fetch(f"{out}/{LOCK_NAME}"))
        assert holder["host"] == socket.gethostname() and holder["pid"] == os.getpid()
        assert holder["lease_seconds"] == lock_object.LEASE_SECONDS
        assert lock_holder(out) == f"{socket.gethostname()} {os.getpid()}"
        with pytest.raises(OutputLockedError) as e:  # a second run (here: a second lock) is refused
            with output_lock(out):
                pass
        assert f"pid {os.getpid()} on host {socket.gethostname()}" in str(e.value) and out in str(e.value)
    assert lock_holder(out) is None  # released: the object is gone
    with output_lock(out):  # and can be taken again
        pass


def test_stale_leases_are_taken_over(bucket):
    out = f"{bucket}/tiles"
    # a run on another host whose lease ran out (1 s lease, written more than 1 s ago)
    _put_holder(f"{out}/{LOCK_NAME}", host="node-07", pid=4242, run="old", lease_seconds=1)
    time.sleep(2.1)
    with output_lock(out):
        assert json.loads(fetch(f"{out}/{LOCK_NAME}"))["pid"] == os.getpid()
    # a run on this host whose process is gone: stale at once, whatever its lease
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    _put_holder(f"{out}/{LOCK_NAME}", host=socket.gethostname(), pid=int(dead.stdout), run="gone", lease_seconds=600)
    with output_lock(out):
        assert json.loads(fetch(f"{out}/{LOCK_NAME}"))["run"] != "gone"
    # a live lease of another host is not
    _put_holder(f"{out}/{LOCK_NAME}", host="node-07", pid=4242, run="live", lease_seconds=600)
    with pytest.raises(OutputLockedError, match="pid 4242 on host node-07"):
        with output_lock(out):
            pass


def test_two_runs_taking_over_a_stale_lease_at_once_one_wins(bucket):
    out = f"{bucket}/tiles"
    _put_holder(f"{out}/{LOCK_NAME}", host="node-07", pid=4242, run="old", lease_seconds=1)
    time.sleep(2.1)
    locks = [lock_object.ObjectLock(out, LOCK_NAME) for _ in range(4)]
    results = [None] * len(locks)
    start = threading.Barrier(len(locks))

    def take(i):
        start.wait()
        try:
            locks[i].acquire()
            results[i] = "won"
        except OutputLockedError:
            results[i] = "refused"

    threads = [threading.Thread(target=take, args=(i,)) for i in range(len(locks))]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert results.count("won") == 1, results  # the replace is conditional on the stale lock's entity tag
    winner = locks[results.index("won")]
    assert json.loads(fetch(f"{out}/{LOCK_NAME}"))["run"] == winner.run
    winner.release()


def test_a_holder_that_lost_its_lease_stops(bucket, monkeypatch):
    out = f"{bucket}/tiles"
    monkeypatch.setattr(lock_object, "RENEW_EVERY", 0.2)
    with output_lock(out) as held:
        held.check()  # renewed: still ours
        time.sleep(0.5)
        held.check()
        _put_holder(f"{out}/{LOCK_NAME}", host="node-07", pid=4242, run="thief", lease_seconds=600)
        time.sleep(0.6)  # the next renewal finds the object changed
        with pytest.raises(OutputLockedError, match="lease ran out"):
            held.check()
    assert json.loads(fetch(f"{out}/{LOCK_NAME}"))["run"] == "thief"  # not removed: it is not ours
