"""Which slides build the cohort's default stain target, and what the target file records
(issue 32 item 4, issue 27)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

import tilewright as tw

from helpers import write_slide


def test_balanced_pick_leaves_no_group_out():
    from tilewright.run.target import balanced_pick

    # constructed: 30 slides of one site, 3 of another, 1 of a third; 24 to pick
    paths = [f"/c/big/{i:02d}.svs" for i in range(30)] + [f"/c/small/{i}.tif" for i in range(3)] + ["/c/one/x.ndpi"]
    groups = ["big"] * 30 + ["small"] * 3 + ["one"]
    picked = balanced_pick(paths, groups, 24)
    chosen = pd.Series([groups[i] for i in picked]).value_counts()
    assert len(picked) == 24 and len(set(picked)) == 24
    assert chosen["one"] == 1 and chosen["small"] == 3 and chosen["big"] == 20  # all of the small ones
    assert balanced_pick(paths[:5], groups[:5], 24) == [0, 1, 2, 3, 4]  # fewer slides than the limit: all
    even = balanced_pick(paths[:30], groups[:30], 4)  # one group: evenly along its sorted paths
    assert even == [0, 10, 19, 29]


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    """Six slides in one folder; by sorted name the one site-b slide sits where the old rule (every
    k-th slide along the sorted list) never looks."""
    folder = tmp_path_factory.mktemp("c")
    names = ["s1", "s2", "s3", "s4", "s5b", "s6"]
    paths = [write_slide(folder / f"{n}.tif", mpp=0.4991, size_um=(700.0, 800.0), seed=20 + k)[0]
             for k, n in enumerate(names)]
    meta = pd.DataFrame({"slide_id": names, "site": ["site-a"] * 4 + ["site-b", "site-a"]})
    meta.to_csv(folder / "meta.csv", index=False)
    return folder, paths


def test_target_balanced_from_a_metadata_table_records_its_slides(cohort, tmp_path, monkeypatch):
    import tilewright.run.target as target_module
    from tilewright.store.provenance import source_digest

    folder, paths = cohort
    monkeypatch.setattr(target_module, "MAX_SLIDES", 3)
    cfg = tw.TilingConfig(mpp=1.0, tile=64, normalizer="macenko", max_tiles=4, stain_groups=str(folder / "meta.csv"))
    tw.tile_cohort(paths, tmp_path / "out", cfg, progress=False)
    saved = json.loads((tmp_path / "out" / "stain_target.macenko.json").read_text())
    slides = {s["slide_id"]: s for s in saved["slides"]}
    assert "s5b" in slides and slides["s5b"]["group"] == "site-b"  # the lone site-b slide is in
    assert len(slides) == 3 and {s["group"] for s in slides.values()} == {"site-a", "site-b"}
    assert saved["grouped_by"] == "site"
    for s in saved["slides"]:  # source and digest of each slide, as the stores record them
        assert s["digest"] == source_digest(s["source"]) and s["size"] > 0
    assert len(saved["target_colour"]) == 3


def test_target_groups_by_folder_without_a_table(tmp_path):
    from tilewright.run.target import _groups

    paths = ["/d/north/a.svs", "/d/north/b.svs", "/d/south/a.ome.tif", "/d/south/c.tif"]
    assert _groups(paths, ["north_a", "b", "south_a", "c"], None) == [
        "north/.svs", "north/.svs", "south/.ome.tif", "south/.tif"]


def test_bad_groups_table_is_a_config_error(cohort, tmp_path):
    from tilewright.errors import ConfigError

    folder, paths = cohort
    bad = tmp_path / "bad.csv"
    bad.write_text("slide_id,centre\ns1,x\n")
    cfg = tw.TilingConfig(mpp=1.0, tile=64, normalizer="macenko", stain_groups=str(bad))
    with pytest.raises(ConfigError, match="site"):
        tw.tile_cohort(paths[:2], tmp_path / "out", cfg, progress=False)
