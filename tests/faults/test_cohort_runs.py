"""A cohort run always finishes, and early failures never clobber what is there (issue 16)."""

from __future__ import annotations

import errno
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out
from tilewright.run.cohort import tile_cohort
from tilewright.store.reader import is_complete

pytestmark = pytest.mark.timeout(300)

ARGS = ["--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]


def _snapshot(out):
    return {n: (out / n).read_bytes() for n in ("manifest.csv", "manifest.parquet", "config.toml")}


def test_early_failures_leave_manifest_and_config_alone(slide, tmp_path, monkeypatch):
    srcs = [slide("a.tif", seed=1), slide("b.tif", seed=2)]
    out = tmp_path / "out"
    assert tile_out([str(srcs[0].parent), str(out), *ARGS]) == 0
    before = _snapshot(out)
    # a bad --reference: exit 2 (was: every row rewritten "failed: interrupted", a new config.toml)
    assert tile_out([str(srcs[0].parent), str(out), *ARGS, "--normalize", "macenko",
                     "--reference", str(tmp_path / "missing.png")]) == 2
    assert _snapshot(out) == before
    # an unreachable scheduler: exit 2 with a message naming it
    import tilewright.run.execute as execute

    monkeypatch.setattr(execute, "CONNECT_TIMEOUT", "2s")
    assert tile_out([str(srcs[0].parent), str(out), *ARGS, "--scheduler", "tcp://127.0.0.1:9"]) == 2
    assert _snapshot(out) == before
    # Ctrl-C during the stain-target pass (before any slide is tiled)
    import tilewright.run.target as target

    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(target, "cohort_target", interrupted)
    assert tile_out([str(srcs[0].parent), str(out), *ARGS, "--normalize", "macenko"]) == 130
    assert _snapshot(out) == before
    assert sorted(tw.open_cohort(out).stores) == ["a", "b"]


def test_manifest_is_current_after_each_slide(slide, tmp_path, fast_config):
    srcs = [slide(f"s{i}.tif", seed=i) for i in range(3)]
    out = tmp_path / "out"
    seen = []

    def on_result(row):  # reads the manifest (with its journal) the moment each slide finished
        from tilewright.store.cohort import read_manifest

        m = read_manifest(out)
        seen.append(dict(zip(m.slide_id, m.status)))

    tile_cohort(srcs, out, fast_config, progress=False, on_result=on_result)
    # ground truth: after k slides, k rows are ok and the others wait as "interrupted" failures
    assert [sum(v == "ok" for v in s.values()) for s in seen] == [1, 2, 3]
    assert all(len(s) == 3 for s in seen)


def test_one_bad_slide_never_aborts_the_cohort(slide, tmp_path, fast_config, monkeypatch):
    """MemoryError (or any exception) in the stain-target pass or in tiling: that slide's row fails,
    the others finish (was: MemoryError escaped and every row said "interrupted")."""
    import tilewright.run.slide_task as slide_task
    import tilewright.run.target as target

    srcs = [slide(f"s{i}.tif", seed=i) for i in range(3)]
    real_estimate, real_row = target.slide_estimate, slide_task.tile_slide_row

    def estimate(path, *a):
        if path.endswith("s1.tif"):
            raise MemoryError
        return real_estimate(path, *a)

    def row(path, *a, **k):
        if path.endswith("s2.tif"):
            raise RuntimeError("a bug in a pass")
        return real_row(path, *a, **k)

    monkeypatch.setattr(target, "slide_estimate", estimate)
    monkeypatch.setattr(slide_task, "tile_slide_row", row)
    res = {r.slide_id: r for r in tile_cohort(srcs, tmp_path / "out", fast_config.replace(normalizer="macenko"),
                                                 progress=False)}
    assert res["s0"].status == "ok" and res["s1"].status == "ok"  # s1 only missed the target pass
    assert res["s2"].status == "failed" and "RuntimeError" in res["s2"].error


@pytest.mark.timeout(240)
def test_a_dead_worker_is_one_failure_row():
    """A task whose worker process dies (KilledWorker after dask's retries) becomes that task's
    failure value; the other tasks complete."""
    from tilewright.run.slide_task import failure_row
    from tilewright.run.execute import execute

    def work(x):  # a lambda-like closure: pickled by value to the worker processes
        if x == "die":
            os._exit(9)  # as the kernel's OOM killer would end it
        return x * 2

    out = dict(execute(work, [(1,), ("die",), (3,)], workers=2,
                       on_error=lambda i, exc: failure_row(f"slide{i}.svs", f"slide{i}", exc)))
    assert out[0] == 2 and out[2] == 6
    assert out[1]["status"] == "failed" and "worker tiling this slide died" in out[1]["error"]


class _FakeClient:
    """A dask client whose one worker mounts the output folder elsewhere (``seen``) and does not
    see ``hidden`` slides: what a cluster without a shared file system looks like."""

    def __init__(self, seen, hidden=()):
        self.seen, self.hidden = seen, set(map(str, hidden))

    def wait_for_workers(self, n, timeout=None):
        return None

    def run(self, fn, paths, out_dir, token):
        visible = [p if p not in self.hidden else p + ".not-here" for p in paths]
        return {"tcp://10.1.2.3:4000": fn(visible, str(self.seen), token)}


def test_workers_must_see_source_and_out(slide, tmp_path):
    from tilewright.errors import ConfigError
    from tilewright.run.workers_check import check_workers

    src = slide("a.tif")
    out, elsewhere = tmp_path / "out", tmp_path / "elsewhere"
    out.mkdir()
    elsewhere.mkdir()
    check_workers(_FakeClient(out), [str(src)], out)  # a shared file system: passes
    with pytest.raises(ConfigError, match="does not see the output folder"):
        check_workers(_FakeClient(elsewhere), [str(src)], out)
    with pytest.raises(ConfigError, match="cannot see 1 slide file"):
        check_workers(_FakeClient(out, hidden=[src]), [str(src)], out)
    assert not [p for p in out.iterdir()] and not [p for p in elsewhere.iterdir()]  # token files removed


@pytest.mark.timeout(300)
def test_scheduler_with_relative_paths(slide, tmp_path, monkeypatch):
    """Workers started in another folder than the client: relative SOURCE and OUT are made
    absolute (was: every slide failed on the workers, or stores landed where the client cannot see)."""
    distributed = pytest.importorskip("distributed")
    src = slide("a.tif")
    (tmp_path / "work").mkdir()
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        monkeypatch.chdir(tmp_path / "work")  # the workers stay in the folder they started in
        rel_src = os.path.relpath(src.parent)
        code = tile_out([rel_src, "out", *ARGS, "--scheduler", cluster.scheduler_address])
    assert code == 0
    assert is_complete(tmp_path / "work" / "out" / "a.zarr")


def _popen(cmd):
    return subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def test_sigterm_stops_like_ctrl_c_and_resumes(slide, tmp_path):
    srcs = [slide(f"s{i}.tif", seed=20 + i) for i in range(4)]
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "tilewright.cli.tile_out", str(srcs[0].parent), str(out), *ARGS]
    proc = _popen(cmd)
    deadline = time.time() + 120
    while time.time() < deadline and not list(out.glob("*.zarr")) and proc.poll() is None:
        time.sleep(0.02)
    proc.send_signal(signal.SIGTERM)  # what a batch scheduler sends at its time limit
    _, err = proc.communicate(timeout=120)
    if proc.returncode == 0:
        pytest.skip("the run finished before the signal arrived")
    assert proc.returncode == 143 and "SIGTERM" in err  # shell convention: 128 + 15
    m = pd.read_csv(out / "manifest.csv", keep_default_na=False)  # was: no manifest at all
    assert len(m) == 4 and (m.status == "ok").sum() >= 1
    assert not [p for p in out.iterdir() if ".partial-" in p.name]
    assert subprocess.run(cmd, stderr=subprocess.DEVNULL).returncode == 0
    assert sorted(tw.open_cohort(out).stores) == ["s0", "s1", "s2", "s3"]


def test_long_ids_and_names_too_long(slide, tmp_path, fast_config):
    from tilewright.errors import StoreError

    name = "scan-" + "x" * 235 + ".tif"  # 244 bytes: legal, but id + ".zarr.partial-..." was not
    src = slide(name)
    res = tile_cohort([src], tmp_path / "out", fast_config, progress=False)[0]
    assert res.status == "ok" and len(res.slide_id.encode()) <= 200
    assert is_complete(tmp_path / "out" / f"{res.slide_id}.zarr")
    with pytest.raises(StoreError, match="too long"):  # an explicit store name past NAME_MAX
        tw.tile_slide(src, tmp_path / ("y" * 250 + ".zarr"), fast_config)


def test_csv_manifest_keeps_ids_as_text(slide, tmp_path, fast_config):
    out = tmp_path / "out"
    tile_cohort([slide("001.tif"), slide("1e3.tif", seed=2)], out, fast_config, progress=False)
    (out / "manifest.parquet").unlink()  # only the CSV is left (e.g. copied without it)
    cohort = tw.open_cohort(out)
    assert sorted(cohort.manifest.slide_id) == ["001", "1e3"]  # not 1 and 1000.0
    assert sorted(cohort.stores) == ["001", "1e3"]


def test_a_path_listed_twice_is_one_slide(slide, tmp_path):
    src = slide("a.tif")
    listing = tmp_path / "list.txt"
    listing.write_text(f"{src}\n{src.parent}/../slides/a.tif\nslides/a.tif\n")
    out = tmp_path / "out"
    assert tile_out([str(listing), str(out), *ARGS]) == 0
    assert sorted(p.name for p in out.glob("*.zarr")) == ["a.zarr"]
    assert list(pd.read_csv(out / "manifest.csv").slide_id) == ["a"]


def test_distributed_is_a_core_requirement():
    # ground truth: the installed package's own metadata (what `pip install tilewright` installs)
    from importlib.metadata import requires

    core = [r for r in requires("tilewright") if "extra ==" not in r]
    assert any(r.split(">")[0].split("=")[0].strip() == "distributed" for r in core)


def test_lock_without_flock_falls_back_to_a_held_file(tmp_path, monkeypatch):
    import fcntl

    from tilewright.errors import OutputLockedError
    from tilewright.run.lock import HELD_NAME, lock_holder, output_lock

    def no_flock(fd, op):
        raise OSError(errno.ENOLCK, os.strerror(errno.ENOLCK))

    monkeypatch.setattr(fcntl, "flock", no_flock)
    with output_lock(tmp_path):
        me = f"{socket.gethostname()} {os.getpid()}"
        assert (tmp_path / HELD_NAME).read_text() == me and lock_holder(tmp_path) == me
        with pytest.raises(OutputLockedError) as e, output_lock(tmp_path):
            pass
        assert socket.gethostname() in str(e.value) and str(os.getpid()) in str(e.value)
    assert not (tmp_path / HELD_NAME).exists() and lock_holder(tmp_path) is None
    # a run killed on this host left the file: its pid is gone, so the lock is taken over
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    (tmp_path / HELD_NAME).write_text(f"{socket.gethostname()} {dead.pid}")
    with output_lock(tmp_path):
        assert lock_holder(tmp_path).endswith(str(os.getpid()))
    # held from another host: refused, naming that host and the file to delete
    (tmp_path / HELD_NAME).write_text("node-west-07 4242")
    with pytest.raises(OutputLockedError, match="node-west-07") as e, output_lock(tmp_path):
        pass
    assert "4242" in str(e.value) and HELD_NAME in str(e.value)


def test_locked_message_names_host_and_pid(slide, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    code = ("import sys, time; from tilewright.run.lock import output_lock\n"
            "with output_lock(sys.argv[1]):\n    print('locked', flush=True); time.sleep(60)\n")
    holder = subprocess.Popen([sys.executable, "-c", code, str(out)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        from tilewright.run.lock import lock_holder

        assert lock_holder(out) == f"{socket.gethostname()} {holder.pid}"
        assert tile_out([str(slide("a.tif")), str(out), *ARGS]) == 4
        err = capsys.readouterr().err
        assert f"pid {holder.pid} on host {socket.gethostname()}" in err
    finally:
        holder.kill()
        holder.wait()
    assert lock_holder(out) is None
