"""Colour management through tile_slide / tile_cohort / tile-out: provenance, resume, audit factor."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from colour_refs import lcms_reference
from helpers import write_slide
from tilewright.cli.tile_out import build_parser, config_from_args
from tilewright.demo import icc
from tilewright.demo.cohort import device_renderer
from tilewright.run.identity import RUN_ONLY

WIDE = icc.matrix_trc_profile(**icc.SCANNER_B)
CFG = tw.TilingConfig(mpp=0.9708, tile=128, min_tissue=0.3, qc_overlay=False, mask_mpp=7.7664)


@pytest.fixture(scope="module")
def profiled(tmp_path_factory):
    """A 40x-like slide (0.2427 µm/px) written as scanner-B's device RGB, carrying its profile."""
    from tilewright.demo.pyramid import write_pyramid

    folder = tmp_path_factory.mktemp("profiled")
    plain, lay = write_slide(folder / "plain.tif", mpp=0.2427, size_um=(700.0, 900.0), seed=4, tumour=True)
    path = folder / "wide.tif"
    write_pyramid(path, device_renderer(lay.renderer(0.2427), WIDE), shape=lay.shape_at(0.2427), mpp=0.2427,
                  tile=256, compression="zlib", icc_profile=WIDE)
    return path


def test_store_records_the_profile_and_holds_srgb(profiled, tmp_path):
    applied = tw.tile_slide(profiled, tmp_path / "a", CFG)
    ignored = tw.tile_slide(profiled, tmp_path / "i", CFG.replace(colour_profile="ignore"))
    a, i = tw.open_store(applied.store), tw.open_store(ignored.store)
    rec = a.attrs["colour_profile"]
    # ground truth: the bytes written into tag 34675
    assert rec["applied"] and rec["sha256"] == hashlib.sha256(WIDE).hexdigest() and rec["size"] == len(WIDE)
    assert rec["description"] == icc.SCANNER_B["description"] and rec["intent"] == "relative colorimetric"
    assert rec["srgb_equivalent"] is False
    assert applied.colour_profile == icc.SCANNER_B["description"]
    assert not i.attrs["colour_profile"]["applied"] and ignored.colour_profile.endswith("(ignored)")
    # same plan: the mask differs little; compare the tiles both stores hold
    common = {tuple(p): k for k, p in enumerate(i.yx)}
    pairs = [(k, common[tuple(p)]) for k, p in enumerate(a.yx) if tuple(p) in common][:20]
    assert len(pairs) >= 5
    for ka, ki in pairs:
        # reference: LittleCMS applied to the raw (ignored) tile, which is device RGB averaged
        want = lcms_reference(WIDE, np.asarray(i[ki]))
        assert np.abs(np.asarray(a[ka]).astype(int) - want).max() <= 1
    # the stored thumbnail is converted too
    with tw.open(profiled) as s:
        thumb = s.thumbnail(CFG.mask_mpp)
    stored = a.thumbnail
    np.testing.assert_array_equal(stored, thumb[: stored.shape[0], : stored.shape[1]])
    with tw.open(profiled, colour_profile="ignore") as s:
        raw = s.thumbnail(CFG.mask_mpp)[: stored.shape[0], : stored.shape[1]]
    assert np.abs(stored.astype(int) - raw).max() > 10  # converted, not the device colour


def test_resume_does_not_mix_in_a_store_made_with_the_other_setting(profiled, tmp_path):
    assert "colour_profile" not in RUN_ONLY  # it changes tiles: it counts on resume
    first = tw.tile_cohort([profiled], tmp_path / "out", CFG, progress=False)
    assert first[0].status == "ok"
    again = tw.tile_cohort([profiled], tmp_path / "out", CFG, progress=False)
    assert again[0].status == "ok" and again[0].colour_profile == icc.SCANNER_B["description"]
    other = tw.tile_cohort([profiled], tmp_path / "out", CFG.replace(colour_profile="ignore"), progress=False)
    assert other[0].status == "failed" and "colour_profile 'apply' -> 'ignore'" in other[0].error
    manifest = pd.read_csv(tmp_path / "out" / "manifest.csv", keep_default_na=False)
    assert "colour_profile" in manifest.columns


def test_manifest_column_and_cli_option(profiled, tmp_path):
    plain, _ = write_slide(tmp_path / "s" / "plain.tif", mpp=0.2427, size_um=(700.0, 900.0), seed=4, tumour=True)
    res = tw.tile_cohort([profiled, plain], tmp_path / "out", CFG, progress=False)
    manifest = pd.read_csv(tmp_path / "out" / "manifest.csv", keep_default_na=False).set_index("slide_id")
    assert manifest.loc["wide", "colour_profile"] == icc.SCANNER_B["description"]
    assert manifest.loc["plain", "colour_profile"] == "none"
    assert {r.slide_id: r.colour_profile for r in res} == dict(manifest["colour_profile"])
    args = build_parser().parse_args(["a", "b", "--colour-profile", "ignore"])
    assert config_from_args(args).colour_profile == "ignore"
    assert config_from_args(build_parser().parse_args(["a", "b"])).colour_profile == "apply"
    assert 'colour_profile = "apply"' in tw.TilingConfig().to_toml()
    with pytest.raises(tw.errors.ConfigError, match="colour_profile"):
        tw.TilingConfig(colour_profile="sometimes")


def test_audit_uses_the_profile_as_a_factor():
    from tilewright.audit.factors import cohort_factors

    manifest = pd.DataFrame({"slide_id": list("abcdef"), "mpp_source": [0.25] * 6,
                             "colour_profile": ["none", "none", "none", "P", "P", "P"]}).set_index("slide_id")
    factors, notes = cohort_factors(manifest)
    assert list(factors["colour_profile"]) == ["none", "none", "none", "P", "P", "P"]
    assert notes["colour_profile"] == "categories"
    # one level only (every slide the same): dropped like any single-level factor
    same = manifest.assign(colour_profile="none")
    assert "colour_profile" not in cohort_factors(same)[0].columns
