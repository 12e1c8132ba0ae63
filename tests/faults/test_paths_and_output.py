"""Odd paths, clashing names, an unwritable output folder and a disk that fills mid-write."""

from __future__ import annotations

import errno
import shutil

import numpy as np
import pytest

import tilewright as tw
from tilewright.cli.tile_out import main as tile_out
from tilewright.run.cohort import tile_cohort
from tilewright.store.reader import is_complete

pytestmark = pytest.mark.timeout(120)


def _no_partials(out):
    return [p.name for p in out.iterdir() if ".partial-" in p.name]


def test_unicode_spaces_and_same_names(slide, tmp_path, fast_config):
    base = slide("a.tif")
    root = tmp_path / "Cohorte ünïcode 病理" / "site north"
    paths = [root / "slide 1 — ré.tif", root / "scan one" / "b.svs.tif", root / "scan two" / "b.svs.tif"]
    for p in paths:
        p.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(base, p)
    out = tmp_path / "sortie à tester"
    results = tile_cohort(paths, out, fast_config, progress=False)
    assert [r.status for r in results] == ["ok"] * 3
    ids = [r.slide_id for r in results]
    assert len(set(ids)) == 3  # unique ids (DESIGN: parent folder prefixed on clashes)
    assert ids[0] == "slide 1 — ré"
    assert sorted(ids[1:]) == ["scan one_b.svs", "scan two_b.svs"]
    for r, p in zip(results, paths):
        store = tw.open_store(out / f"{r.slide_id}.zarr")
        assert store.attrs["source"]["path"] == str(p.resolve())  # each store names its own source
    # identical source files give identical tiles (ground truth: same bytes in)
    a, b = (tw.open_store(out / f"{i}.zarr").tiles[:] for i in ids[1:])
    assert np.array_equal(a, b)
    assert _no_partials(out) == []


def test_output_is_a_file_exit_2(slide, tmp_path, capsys):
    src = slide("a.tif")
    out = tmp_path / "out"
    out.write_text("not a folder")
    code = tile_out([str(src), str(out), "--quiet"])
    assert code == 2
    assert "output folder" in capsys.readouterr().err


def _failing_put(monkeypatch, when, err):
    """Make zarr's local-store writes and direct shard writes raise ``OSError(err)`` for keys
    matching ``when(path)``."""
    import zarr.storage._local as local

    real = local._put

    def put(path, value, exclusive=False):
        if when(str(path)):
            raise OSError(err, __import__("os").strerror(err), str(path))
        return real(path, value, exclusive=exclusive)

    monkeypatch.setattr(local, "_put", put)
    # tile shards are written directly (store/shards.py), not through zarr's store
    from tilewright.store.shards import ShardEncoder

    real_write = ShardEncoder.write_chunks

    def write_chunks(self, shard_index, chunks):
        path = self.layout.path(shard_index)
        if when(str(path)):
            raise OSError(err, __import__("os").strerror(err), str(path))
        return real_write(self, shard_index, chunks)

    monkeypatch.setattr(ShardEncoder, "write_chunks", write_chunks)


def test_unwritable_output_fails_each_slide_cleanly(slide, tmp_path, fast_config, monkeypatch):
    paths = [slide("a.tif"), slide("b.tif", seed=2)]
    out = tmp_path / "out"
    out.mkdir()
    # simulate a folder that refuses new files (running as root, permissions cannot be used)
    _failing_put(monkeypatch, lambda p: ".zarr" in p, errno.EACCES)
    results = tile_cohort(paths, out, fast_config, progress=False)
    assert [r.status for r in results] == ["failed", "failed"]
    assert all("writable" in r.error and "\n" not in r.error for r in results)
    assert not any(is_complete(out / f"{r.slide_id}.zarr") for r in results)
    assert _no_partials(out) == [] and not list(out.glob("*.zarr"))
    assert (out / "manifest.csv").exists()


def test_disk_full_mid_write(slide, tmp_path, fast_config, monkeypatch):
    """ENOSPC while writing one slide's tile shards: that slide fails with a clear reason, leaves
    no complete-marked (or partial) store, and the other slide is unaffected."""
    paths = [slide("a.tif"), slide("b.tif", seed=2)]
    cfg = fast_config.replace(mpp=0.5, shard_tiles=4)  # several shard files a slide
    written = []

    def when(p):
        if "b.zarr" in p and "/tiles/c/" in p:
            written.append(p)
            return len(written) > 1
        return False

    _failing_put(monkeypatch, when, errno.ENOSPC)
    out = tmp_path / "out"
    results = {r.slide_id: r for r in tile_cohort(paths, out, cfg, progress=False)}
    assert len(written) > 1  # the failure did happen mid-write, after a shard was written
    assert results["b"].status == "failed"
    assert "space" in results["b"].error.lower()
    assert not (out / "b.zarr").exists() and _no_partials(out) == []
    assert results["a"].status == "ok" and is_complete(out / "a.zarr")
    ref = tw.tile_slide(paths[0], tmp_path / "ref" / "a.zarr", cfg)  # reference: an undisturbed run
    assert np.array_equal(tw.open_store(out / "a.zarr").tiles[:], tw.open_store(ref.store).tiles[:])
    monkeypatch.undo()
    # a re-run once space is back completes the failed slide and keeps the finished one
    again = {r.slide_id: r for r in tile_cohort(paths, out, cfg, progress=False)}
    assert again["b"].status == "ok" and is_complete(out / "b.zarr")
    assert again["a"].status == "ok" and again["a"].n_tiles == results["a"].n_tiles
