"""Resume keeps a complete store only when this run would write the same one (issue 16, 2-3, 8)."""

from __future__ import annotations

import json
import shutil

import pytest

import tilewright as tw
from tilewright.run.cohort import stain_target_path, tile_cohort

pytestmark = pytest.mark.timeout(300)


def _rows(results):
    return {r.slide_id: r for r in results}


def _mtimes(out):
    return {p.name: p.stat().st_mtime_ns for p in out.glob("*.zarr")}


def test_resume_compares_source_file_and_level0_mpp(slide, tmp_path, fast_config):
    src = slide("a.tif", seed=1)  # written at 0.25 µm/px
    out = tmp_path / "out"
    assert _rows(tile_cohort([src], out, fast_config, progress=False))["a"].status == "ok"
    before = _mtimes(out)
    # same file, same settings: kept as is
    assert _rows(tile_cohort([src], out, fast_config, progress=False))["a"].status == "ok"
    assert _mtimes(out) == before
    # an explicit override equal to the file's own value changes nothing
    assert _rows(tile_cohort([src], out, fast_config, progress=False, mpp=0.25))["a"].status == "ok"
    # another level-0 µm/px (--source-mpp): refused, store untouched (was: kept, exit 0)
    r = _rows(tile_cohort([src], out, fast_config, progress=False, mpp=0.2527))["a"]
    assert r.status == "failed" and "level-0 µm/px 0.25 -> 0.2527" in r.error and "--overwrite" in r.error
    assert _mtimes(out) == before
    # the slide file replaced by another scan of the same size class: refused by its digest
    other = slide("other.tif", seed=7)
    shutil.copyfile(other, src)
    r = _rows(tile_cohort([src], out, fast_config, progress=False))["a"]
    assert r.status == "failed" and "source digest" in r.error
    assert _mtimes(out) == before
    # and the manifest still leads open_cohort to the kept store (defect 8)
    assert list(tw.open_cohort(out).stores) == ["a"]


def test_stain_target_recorded_compared_and_saved_per_method(slide, tmp_path, fast_config):
    src = slide("a.tif", seed=3)
    out = tmp_path / "out"
    mac = fast_config.replace(normalizer="macenko")
    assert _rows(tile_cohort([src], out, mac, progress=False))["a"].status == "ok"
    saved = stain_target_path(out, "macenko")
    target = json.loads(saved.read_text())
    store = tw.open_store(out / "a.zarr")
    from tilewright.run.identity import target_digest

    assert store.attrs["stain_target"] == target_digest(target)  # ground truth: the saved target
    # a Reinhard run (refused: other settings) saves its own target and leaves Macenko's alone
    r = _rows(tile_cohort([src], out, fast_config.replace(normalizer="reinhard"), progress=False))["a"]
    assert r.status == "failed"
    assert json.loads(saved.read_text()) == target
    assert json.loads(stain_target_path(out, "reinhard").read_text())["method"] == "reinhard"
    # a different Macenko target (here: an edited file) no longer matches the store
    changed = dict(target, max_concentrations=[v * 1.5 for v in target["max_concentrations"]])
    saved.write_text(json.dumps(changed))
    r = _rows(tile_cohort([src], out, mac, progress=False))["a"]
    assert r.status == "failed" and "stain target" in r.error


def test_runs_with_other_settings_keep_earlier_slides(slide, tmp_path, fast_config):
    """Two runs into one OUT with different settings and slides: the first run's slides stay in
    the manifest and in open_cohort (was: the second manifest replaced the first)."""
    a, b = slide("a.tif", seed=1), slide("b.tif", seed=2)
    out = tmp_path / "out"
    tile_cohort([a], out, fast_config, progress=False)
    res = _rows(tile_cohort([b, a], out, fast_config.replace(tile=64), progress=False))
    assert res["b"].status == "ok" and res["a"].status == "failed"  # a: kept with its own settings
    cohort = tw.open_cohort(out)
    assert sorted(cohort.manifest.slide_id) == ["a", "b"]
    # readers serve one set of settings (config.toml: the latest run's, tile 64); a is named as left out
    assert sorted(cohort.stores) == ["b"]
    assert list(cohort.left_out["slide_id"]) == ["a"] and "tile 128 -> 64" in cohort.left_out["reason"][0]
    everything = tw.open_cohort(out, settings=None)
    assert everything.stores["a"].tile_size == 128 and everything.stores["b"].tile_size == 64
    c = slide("c.tif", seed=4)
    tile_cohort([c], out, fast_config, progress=False)  # a third run naming only c
    assert sorted(tw.open_cohort(out).manifest.slide_id) == ["a", "b", "c"]
