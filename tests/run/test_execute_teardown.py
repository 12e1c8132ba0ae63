"""Closing the dask client and local cluster never replaces a run's outcome (the stress test's
worker killed a moment before SIGTERM made ``cluster.close()`` raise: exit 1 instead of 143)."""

from __future__ import annotations

import pytest

from tilewright.interrupts import Stopped
from tilewright.run import execute


class _Closing:
    def __init__(self, calls, name, error=None):
        self.calls, self.name, self.error = calls, name, error

    def close(self):
        self.calls.append(self.name)
        if self.error is not None:
            raise self.error


def test_both_are_closed_even_when_the_client_raises():
    calls = []
    execute._let_go(_Closing(calls, "client", RuntimeError("comm closed")),
                    _Closing(calls, "cluster", TimeoutError("worker restarting")))
    assert calls == ["client", "cluster"]  # ground truth: the order they must be let go in


def test_a_stop_propagates_through_a_failing_teardown():
    calls = []

    def run():
        try:
            raise Stopped(15)  # SIGTERM arrives mid-run
        finally:
            execute._let_go(_Closing(calls, "client"), _Closing(calls, "cluster", RuntimeError("nanny gone")))

    with pytest.raises(Stopped) as e:
        run()
    assert e.value.exit_code == 143 and calls == ["client", "cluster"]


def test_a_cohort_run_lets_its_cluster_go_and_sweeps_even_when_closing_raises(tmp_path):
    # the teardown tile-out runs (tile_cohort hands execute a client it owns through run_cluster)
    from tilewright.run.cluster import run_cluster

    calls = []
    leftover = tmp_path / "s1.zarr.partial-0a1b"  # what a killed worker leaves behind
    leftover.mkdir()
    kept = tmp_path / "s10.zarr"  # another slide's complete store: not a leftover of s1
    kept.mkdir()
    rc = run_cluster(None, 2, [], tmp_path, ["s1", "s2"])
    rc.client, rc.own = _Closing(calls, "client", RuntimeError("comm closed")), True
    rc.cluster = _Closing(calls, "cluster", TimeoutError("worker restarting"))
    try:
        raise Stopped(15)  # SIGTERM arrives mid-run
    except Stopped:
        assert rc.__exit__(Stopped, None, None) is False  # the stop propagates
    assert calls == ["client", "cluster"]
    assert not leftover.exists() and kept.exists()
