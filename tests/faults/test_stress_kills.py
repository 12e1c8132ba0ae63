"""Stress: a 12-slide cohort on two local workers, disturbed three times by random kills
(SIGKILL of a worker process, SIGTERM of the client), resumed until done (issue 16, done-when).

The final stores must equal an undisturbed run's, tile for tile, and open_cohort must read them all.
"""

from __future__ import annotations

import random
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

import tilewright as tw
from tilewright.run.cohort import tile_cohort
from tilewright.store.reader import is_complete

pytestmark = [pytest.mark.timeout(900), pytest.mark.slow]

ARGS = ["--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]
N = 12


def _workers(proc):
    """The dask worker processes of a tile-out client (its nannies run in the client and spawn them)."""
    import psutil

    try:
        kids = psutil.Process(proc.pid).children(recursive=True)
    except psutil.Error:
        return []
    out = []
    for k in kids:
        try:
            if "spawn_main" in " ".join(k.cmdline()):  # the nannies spawn them (not the resource tracker)
                out.append(k)
        except psutil.Error:  # ended meanwhile (a worker being restarted), or a zombie
            pass
    return out


def _complete(out):
    return sum(is_complete(p) for p in out.glob("*.zarr"))


def test_random_kills_then_resume_equal_an_undisturbed_run(slide, tmp_path, fast_config):
    import psutil  # a dependency of distributed

    srcs = [slide(f"s{i:02d}.tif", seed=100 + i) for i in range(N)]
    folder = srcs[0].parent
    ref = tmp_path / "ref"
    cfg = fast_config.replace(qc_overlay=False)
    want_status = {r.slide_id: r.status for r in tile_cohort(srcs, ref, cfg, progress=False)}
    assert sum(v == "ok" for v in want_status.values()) >= N - 2  # a blank slide or so is "skipped"
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "tilewright.cli.tile_out", str(folder), str(out), "--workers", "2", *ARGS]
    rng = random.Random(16)  # seeded: the same disturbances on every run of the test
    codes, killed = [], 0
    for attempt in range(3):
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        goal = min(_complete(out) + rng.randint(0, 2), N - 6)  # work is left when the signals land
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None and not (_workers(proc) and _complete(out) >= goal):
            time.sleep(0.05)
        workers = _workers(proc)
        if workers and proc.poll() is None:
            try:
                rng.choice(workers).send_signal(signal.SIGKILL)  # a worker dies mid-slide (OOM killer)
                killed += 1
            except psutil.NoSuchProcess:
                pass
            time.sleep(rng.uniform(0.05, 0.3))
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)  # the batch scheduler's time limit
        codes.append(proc.wait(timeout=180))
    assert set(codes) <= {0, 3, 143}, codes  # stopped cleanly (or finished); never a crash
    assert 143 in codes and killed >= 1  # the disturbances did land mid-run
    for _ in range(3):  # resume until done
        if subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL).returncode == 0:
            break
    else:
        pytest.fail("the cohort did not complete after three resumes")
    assert not [p.name for p in out.iterdir() if ".partial-" in p.name]
    cohort = tw.open_cohort(out)
    assert sorted(cohort.stores) == sorted(s for s, v in want_status.items() if v == "ok")
    assert dict(zip(cohort.manifest.slide_id, cohort.manifest.status)) == want_status
    for sid, got in cohort.stores.items():  # reference: the undisturbed in-process run
        want = tw.open_store(ref / f"{sid}.zarr")
        np.testing.assert_array_equal(got.yx, want.yx)
        np.testing.assert_array_equal(got.tiles[:], want.tiles[:])
    assert len(cohort.tiles) == sum(len(tw.open_store(ref / f"{s}.zarr")) for s in cohort.stores)
