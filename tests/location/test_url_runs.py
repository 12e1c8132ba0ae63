"""``tile-out`` from a bucket into a bucket of a real S3-protocol server (SeaweedFS on loopback).

A small cohort (tiled TIFF, OME-TIFF, a DICOM series; odd µm/px) is written locally, uploaded, and
tiled both ways. The bucket's stores must equal the local run's tile for tile; a second run keeps
them (no object rewritten); a run killed with SIGKILL and run again gives the same stores; wrong
credentials, a missing bucket or a denied write stop the command with exit 2 and one line.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.dicom_series import dicom_series_from_tiff
from tilewright.store.reader import is_complete

from helpers import write_slide
from object_server import READER
from object_store_files import _store, fetch, listing, upload

pytestmark = pytest.mark.timeout(600)

ARGS = ["--mpp", "0.9713", "--tile", "96", "--min-tissue", "0.3", "--max-tiles", "80", "--quiet"]


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    """Local cohort folder and the reference stores of a local tile-out run over it."""
    root = tmp_path_factory.mktemp("cohort")
    src = root / "src"
    write_slide(src / "site-north" / "n-01.tif", mpp=0.2428, size_um=(900.0, 1100.0), seed=41)
    write_slide(src / "site-south" / "s 02.ome.tif", mpp=0.2527, size_um=(800.0, 1000.0), seed=42, layout="ome")
    tiff, _ = write_slide(root / "tmp" / "d.tif", mpp=0.4991, size_um=(900.0, 900.0), seed=43, tile=256)
    dicom_series_from_tiff(tiff, src / "site-east" / "case.07")
    ref = root / "ref"
    done = subprocess.run([sys.executable, "-m", "tilewright.cli.tile_out", str(src), str(ref), *ARGS],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    return src, ref


def _tile_out(*args, env=None, **kw):
    return subprocess.run([sys.executable, "-m", "tilewright.cli.tile_out", *map(str, args)], capture_output=True,
                          text=True, timeout=300, env={**os.environ, **(env or {})}, **kw)


def _same_as_reference(out_url, ref):
    got, want = tw.open_cohort(out_url), tw.open_cohort(ref)
    assert sorted(got.stores) == sorted(want.stores) == ["case.07", "n-01", "s 02"]  # DICOM series named by its prefix
    assert dict(zip(got.manifest.slide_id, got.manifest.status)) == dict(zip(want.manifest.slide_id,
                                                                             want.manifest.status))
    for sid, store in got.stores.items():  # reference: the local run over the same files
        np.testing.assert_array_equal(store.yx, want.stores[sid].yx)
        np.testing.assert_array_equal(store[:], want.stores[sid][:])


def _versions(url) -> dict:
    """Entity tag and last-modified time of every object under ``url`` (what a rewrite changes)."""
    import obstore

    store, key = _store(url)
    return {m["path"]: (m["e_tag"], m["last_modified"]) for batch in obstore.list(store, key) for m in batch}


def test_bucket_to_bucket_with_two_workers_equals_the_local_run_and_a_rerun_keeps_it(cohort, bucket):
    src, ref = cohort
    upload(src, f"{bucket}/slides")
    done = _tile_out(f"{bucket}/slides/", f"{bucket}/tiles", "--workers", "2", *ARGS)
    assert done.returncode == 0, done.stderr[-3000:]
    _same_as_reference(f"{bucket}/tiles", ref)
    names = set(listing(f"{bucket}/tiles"))
    assert {"manifest.csv", "manifest.parquet", "config.toml", "progress.json", "tile-out.log"} <= names
    assert {"qc/n-01.png", "qc/s 02.png", "qc/case.07.png"} <= names
    assert not [n for n in names if ".tilewright" in n or ".write-test" in n]  # lock and probes removed
    stores_before = {k: v for k, v in _versions(f"{bucket}/tiles").items() if ".zarr/" in k}
    time.sleep(1.1)  # last-modified times have one-second resolution
    again = _tile_out(f"{bucket}/slides/", f"{bucket}/tiles", "--workers", "2", *ARGS)
    assert again.returncode == 0, again.stderr[-3000:]
    stores_after = {k: v for k, v in _versions(f"{bucket}/tiles").items() if ".zarr/" in k}
    assert stores_after == stores_before  # nothing rewritten: every store kept as it was


def test_sigkill_mid_run_then_a_rerun_gives_the_same_stores(cohort, bucket):
    src, ref = cohort
    upload(src, f"{bucket}/slides")
    out = f"{bucket}/tiles"
    cmd = [sys.executable, "-m", "tilewright.cli.tile_out", f"{bucket}/slides/", out, *ARGS]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    stores = [f"{out}/{sid}.zarr" for sid in ("case.07", "n-01", "s 02")]
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None and not any(map(is_complete, stores)):
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)  # the client and everything it started, mid-run
    proc.wait(30)
    done_at_kill = sum(map(is_complete, stores))
    assert done_at_kill < 3  # the kill landed with work left
    assert ".tilewright.lock" in listing(out)  # the killed run's lock is left behind...
    again = _tile_out(f"{bucket}/slides/", out, *ARGS)  # ...and taken over: its holder's pid is gone on this host
    assert again.returncode == 0, again.stderr[-3000:]
    _same_as_reference(out, ref)


def test_wrong_credentials_missing_bucket_and_denied_write_exit_2_in_one_line(cohort, bucket, object_server):
    src, _ = cohort
    upload(src / "site-north", f"{bucket}/slides")
    cases = [
        ({"AWS_SECRET_ACCESS_KEY": "not-the-secret"}, f"{bucket}/slides/", f"{bucket}/tiles", "refused the credentials"),
        ({}, "s3://no-such-bucket-29/slides/", f"{bucket}/tiles", "does not exist"),
        ({"AWS_ACCESS_KEY_ID": READER[0], "AWS_SECRET_ACCESS_KEY": READER[1]}, f"{bucket}/slides/",
         f"{bucket}/tiles", "access denied while writing"),
    ]
    for env, source, out, cause in cases:
        done = _tile_out(source, out, *ARGS, env=env)
        assert done.returncode == 2, (cause, done.stderr[-2000:])
        lines = done.stderr.strip().splitlines()
        assert len(lines) == 1 and cause in lines[0], (cause, done.stderr)
        assert source.split("/slides")[0] in lines[0]  # names the URL (its bucket at least)
    assert not [k for k in listing(bucket) if k.startswith("tiles/")]  # nothing written


def test_a_slide_that_vanishes_fails_alone(cohort, bucket, tmp_path):
    src, _ = cohort
    upload(src / "site-north", f"{bucket}/slides")
    (tmp_path / "list.txt").write_text("n-01.tif\nnot-there.tif\n")
    upload(tmp_path / "list.txt", f"{bucket}/slides/list.txt")
    done = _tile_out(f"{bucket}/slides/list.txt", f"{bucket}/tiles", *ARGS)
    assert done.returncode == 3, done.stderr[-2000:]  # some slides failed, the run did not
    rows = tw.open_cohort(f"{bucket}/tiles").manifest.set_index("slide_id")
    assert rows.loc["n-01", "status"] == "ok" and rows.loc["not-there", "status"] == "failed"
    assert f"{bucket}/slides/not-there.tif" in rows.loc["not-there", "error"]
    assert "no such object" in rows.loc["not-there", "error"]


def test_workers_that_cannot_read_the_bucket_are_named_before_any_work(cohort, bucket):
    from distributed import LocalCluster

    from tilewright.errors import ConfigError
    from tilewright.run.cohort import tile_cohort
    from tilewright.run.config import TilingConfig
    from tilewright.run.sources import find_slides

    src, _ = cohort
    upload(src / "site-north", f"{bucket}/slides")
    paths = find_slides(f"{bucket}/slides/")
    cfg = TilingConfig(mpp=0.9713, tile=96, min_tissue=0.3, max_tiles=20)
    env = {"AWS_SECRET_ACCESS_KEY": "a-worker-without-the-secret"}
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0", env=env) as cl:
        with pytest.raises(ConfigError) as e:
            tile_cohort(paths, f"{bucket}/tiles", cfg, scheduler=cl.scheduler_address, progress=False)
    msg = str(e.value)
    assert "worker tcp://127.0.0.1" in msg and "refused the credentials" in msg and "cannot read 1 slide" in msg
    assert not [k for k in listing(bucket) if k.startswith("tiles/") and ".zarr/" in k]  # no work was done
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0") as cl:
        rows = tile_cohort(paths, f"{bucket}/tiles", cfg, scheduler=cl.scheduler_address, progress=False)
    assert [r.status for r in rows] == ["ok"] and is_complete(f"{bucket}/tiles/n-01.zarr")


def test_the_cohort_stain_target_is_saved_in_the_bucket_and_reused(cohort, bucket):
    src, _ = cohort
    upload(src / "site-north", f"{bucket}/slides")
    args = [*ARGS, "--normalize", "macenko"]
    done = _tile_out(f"{bucket}/slides/", f"{bucket}/tiles", *args)
    assert done.returncode == 0, done.stderr[-3000:]
    target = json.loads(fetch(f"{bucket}/tiles/stain_target.macenko.json"))
    assert target["method"] == "macenko"
    store = tw.open_store(f"{bucket}/tiles/n-01.zarr")
    assert store.attrs["normalizer"] is not None
    before = _versions(f"{bucket}/tiles")
    again = _tile_out(f"{bucket}/slides/", f"{bucket}/tiles", *args)  # the saved target is read back...
    assert again.returncode == 0, again.stderr[-3000:]
    after = _versions(f"{bucket}/tiles")
    assert {k: v for k, v in after.items() if ".zarr/" in k} == {k: v for k, v in before.items() if ".zarr/" in k}
    assert after["tiles/stain_target.macenko.json"] == before["tiles/stain_target.macenko.json"]  # ...not rewritten
