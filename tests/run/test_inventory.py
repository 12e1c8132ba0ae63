"""The cohort inventory (``tilewright plan`` / ``plan_cohort``): every figure checked against an
independent source (OpenSlide's reading of the file, the tiling run itself, the stores' bytes)."""

from __future__ import annotations

import pandas as pd
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.main import main as tilewright_main
from tilewright.store.layout import store_path

pytestmark = pytest.mark.timeout(300)

#: (site, level-0 µm/px, seed): odd scanner values, one 20x scan; names with a clash and a space
SLIDES = [("north", 0.2428, 1, "b"), ("north", 0.2527, 2, "N 02"), ("south", 0.4991, 3, "b"), ("south", 0.2428, 4, "S03")]


@pytest.fixture
def cohort(tmp_path):
    src = tmp_path / "slides"
    for site, mpp, seed, name in SLIDES:
        write_slide(src / site / f"{name}.tif", mpp=mpp, size_um=(900.0, 1100.0), seed=seed)
    (src / "broken.svs").write_bytes(b"II*\x00" + b"\x00" * 64)  # a damaged file: a failed row, never a crash
    meta = tmp_path / "meta.csv"
    meta.write_text("slide_id,site\nnorth_b,north\nN 02.tif,north\nsouth_b,south\nS03,south\n")
    return src, meta


CFG = tw.TilingConfig(mpp=0.5, tile=128, min_tissue=0.3, qc_overlay=False)


def test_plan_matches_openslide_and_the_tiling_run(cohort, tmp_path):
    import openslide

    src, meta = cohort
    plan = tw.plan_cohort(src, CFG, sites=meta, sample_tiles=10_000)  # every planned tile measured
    rows = plan.slides.set_index("slide_id")
    assert sorted(rows.index) == ["N 02", "S03", "broken", "north_b", "south_b"]
    assert rows.loc["broken", "status"] == "failed" and "broken.svs" in rows.loc["broken", "error"]

    out = tmp_path / "out"
    results = {r.slide_id: r for r in tw.tile_cohort(sorted(src.rglob("*.tif")), out, CFG, progress=False,
                                                     root=src)}
    for sid, r in results.items():
        row = rows.loc[sid]
        with openslide.OpenSlide(r.source) as ref:  # an independent reader of the same file
            assert row["level0_mpp"] == pytest.approx(float(ref.properties["openslide.mpp-x"]), rel=1e-6)
            assert (row["width"], row["height"]) == ref.dimensions
            assert row["levels"] == ref.level_count
        store = tw.open_store(store_path(out, sid))
        # ground truth: the run itself - planned tiles are the tiles stored (no sharpness filter here)
        assert row["planned_tiles"] == len(store) == r.n_tiles
        assert row["source_level"] == store.attrs["source_level"]
        # resampled: the tiles' scale is not the level's own downsample (OpenSlide's figure)
        level_ds = ref_downsample(r.source, store.attrs["source_level"])
        assert bool(row["resampled"]) == (abs(store.attrs["scale"] - level_ds) > 1e-6)
        # the tissue area of the mask the run stored (its mask at its true µm/px)
        area = store.mask.sum() * (store.attrs["mask_mpp"] / 1000) ** 2
        assert row["tissue_mm2"] == pytest.approx(area, rel=1e-6)
        # every planned tile measured: the estimate is the store's own tile bytes (shard index aside)
        chunk_bytes = sum(p.stat().st_size for p in (store.path / "tiles" / "c").rglob("*") if p.is_file())
        index_bytes = -(-len(store) // 64) * (64 * 16 + 4)  # sharding index: 16 bytes a chunk + crc32c
        assert row["bytes_lz4"] == pytest.approx(chunk_bytes - index_bytes, rel=0.01)
    # per-site rows sum the slides' rows (ids written as file names matched)
    sites = plan.sites.set_index("site")
    assert sites.loc["north", "planned_tiles"] == rows.loc[["north_b", "N 02"], "planned_tiles"].sum()
    assert sites.loc["south", "slides"] == 2
    assert "(no site)" in sites.index  # the broken file has no metadata row
    assert plan.totals["planned_tiles"] == sum(len(tw.open_store(store_path(out, s))) for s in results)
    assert plan.totals["failed"] == 1


def ref_downsample(path, level):
    import openslide

    with openslide.OpenSlide(path) as ref:
        return float(ref.level_downsamples[level])


def test_table_estimates_and_the_printed_table(cohort, tmp_path, capsys):
    src, meta = cohort
    out = tmp_path / "planned"
    code = tilewright_main(["plan", str(src), str(out), "--mpp", "0.5", "--tile", "128", "--min-tissue", "0.3",
                            "--metadata", str(meta), "--quiet"])
    assert code == 3  # the broken slide
    text = capsys.readouterr().out
    assert "5 slides (4 read, 1 failed)" in text and "north" in text and "failed broken" in text
    plan = pd.read_parquet(out / "plan.parquet")
    assert list(pd.read_csv(out / "plan.csv", dtype={"slide_id": str})["slide_id"]) == list(plan["slide_id"])
    ok = plan[plan["status"] == "ok"]
    raw = 128 * 128 * 3
    from tilewright.run.inventory import BYTES_PER_RAW

    for codec, ratio in BYTES_PER_RAW.items():  # ground truth: the documented ratios times the tiles
        assert (ok[f"bytes_{codec}"] == (ok["planned_tiles"] * raw * ratio).round().astype("int64")).all()
    assert (out / "plan_sites.csv").exists()
    totals = pd.read_csv(out / "plan_totals.csv").iloc[0]
    assert totals["planned_tiles"] == ok["planned_tiles"].sum() and totals["failed"] == 1
    # JPEG at another quality than the ratio was measured at: not guessed
    plan2 = tw.plan_cohort(src, CFG.replace(compression="jpeg", quality=70))
    assert plan2.slides["bytes_jpeg"].isna().all() and plan2.totals["bytes_jpeg"] is None


def test_ids_are_those_a_run_into_out_gives(cohort, tmp_path):
    src, _ = cohort
    out = tmp_path / "out"
    tw.tile_cohort([src / "north" / "b.tif"], out, CFG, progress=False, root=src)  # stored as "b"
    ids = set(tw.plan_cohort(src, CFG, out_dir=out).slides["slide_id"])
    assert {"b", "south_b"} <= ids and "north_b" not in ids


def test_dask_workers_give_the_same_table(cohort):
    src, _ = cohort
    one = tw.plan_cohort(src, CFG).slides.drop(columns="seconds")
    two = tw.plan_cohort(src, CFG, workers=2).slides.drop(columns="seconds")
    pd.testing.assert_frame_equal(one, two)
