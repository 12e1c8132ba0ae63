"""Concurrent runs on one output folder, and SIGKILL of ``tile-out`` then resume (real command)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out
from tilewright.store.reader import is_complete

pytestmark = pytest.mark.timeout(180)

TILE_OUT = str(Path(sys.executable).parent / "tile-out")
ARGS = ["--mpp", "0.5", "--tile", "128", "--min-tissue", "0.3", "--quiet"]


def _hold_lock(out):
    code = ("import sys, time; from tilewright.run.lock import output_lock\n"
            "with output_lock(sys.argv[1]):\n    print('locked', flush=True); time.sleep(120)\n")
    proc = subprocess.Popen([sys.executable, "-c", code, str(out)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "locked"
    return proc


def test_second_run_on_same_output_refuses_with_exit_4(slide, tmp_path, capsys):
    src = slide("a.tif")
    out = tmp_path / "out"
    out.mkdir()
    holder = _hold_lock(out)  # another process in the middle of a run (same lock a run takes)
    try:
        assert tile_out([str(src), str(out), *ARGS]) == 4
        err = capsys.readouterr().err
        assert str(holder.pid) in err and "another" in err
        assert not list(out.glob("*.zarr")) and not (out / "manifest.csv").exists()
    finally:
        holder.send_signal(signal.SIGKILL)
        holder.wait()
    # the kernel released the lock with the dead holder: no stale lock blocks the next run
    assert tile_out([str(src), str(out), *ARGS]) == 0
    assert is_complete(out / "a.zarr")


def test_two_real_runs_at_once(slide, tmp_path):
    """Two tile-out processes started together on one OUT: one works, the other refuses (exit 4)
    or, if it starts after the first finished, skips the complete stores; never a corrupt cohort."""
    srcs = [slide(f"s{i}.tif", seed=i) for i in range(3)]
    listing = tmp_path / "list.txt"
    listing.write_text("\n".join(map(str, srcs)))
    out = tmp_path / "out"
    procs = [subprocess.Popen([TILE_OUT, str(listing), str(out), *ARGS], stderr=subprocess.PIPE, text=True)
             for _ in range(2)]
    codes = sorted(p.wait(timeout=150) for p in procs)
    assert codes in ([0, 0], [0, 4])
    for i in range(3):
        assert is_complete(out / f"s{i}.zarr")
        assert len(tw.open_store(out / f"s{i}.zarr")) > 0
    assert not [p for p in out.iterdir() if ".partial-" in p.name]


def test_sigkill_then_resume_equals_uninterrupted(slide, tmp_path):
    srcs = [slide(f"s{i}.tif", seed=10 + i) for i in range(4)]
    folder = srcs[0].parent
    ref_out = tmp_path / "ref"
    assert subprocess.run([TILE_OUT, str(folder), str(ref_out), *ARGS]).returncode == 0
    out = tmp_path / "out"
    proc = subprocess.Popen([TILE_OUT, str(folder), str(out), *ARGS])
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if any(is_complete(p) for p in out.glob("*.zarr")):
            break
        time.sleep(0.02)
    killed = proc.poll() is None
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    if killed:  # the run was stopped part-way: not every store may be complete yet
        assert sum(is_complete(out / f"s{i}.zarr") for i in range(4)) < 4
    # nothing incomplete carries a store's final name
    for p in out.glob("*.zarr"):
        assert is_complete(p)
    assert subprocess.run([TILE_OUT, str(folder), str(out), *ARGS]).returncode == 0
    assert not [p for p in out.iterdir() if ".partial-" in p.name]
    for i in range(4):
        got, ref = tw.open_store(out / f"s{i}.zarr"), tw.open_store(ref_out / f"s{i}.zarr")
        assert np.array_equal(got.tiles[:], ref.tiles[:])  # reference: the uninterrupted run
        assert np.array_equal(got.yx, ref.yx)
    manifest = tw.open_cohort(out).manifest
    assert sorted(manifest.status) == ["ok"] * 4
