"""tile-out with the compact codecs: settings, what the store records, and resume across codecs."""

import json

import numpy as np
import pandas as pd
import pytest
from skimage.metrics import peak_signal_noise_ratio

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out

FAST = ["--tile", "128", "--quiet", "--threads", "1"]


@pytest.fixture(scope="module")
def source(tmp_path_factory):
    d = tmp_path_factory.mktemp("src")
    write_slide(d / "s0.tif", mpp=0.2527, size_um=(700.0, 900.0), seed=5)  # an odd 40x resolution
    return d


def _mtimes(out):
    return {p.name: p.stat().st_mtime_ns for p in out.glob("*.zarr")}


def test_jpeg_run_stores_close_tiles_and_records_the_codec(source, tmp_path):
    assert tile_out([str(source), str(tmp_path / "lz4"), *FAST]) == 0
    assert tile_out([str(source), str(tmp_path / "jpeg"), "--compression", "jpeg", "--quality", "90", *FAST]) == 0
    lossless, lossy = tw.open_store(tmp_path / "lz4" / "s0.zarr"), tw.open_store(tmp_path / "jpeg" / "s0.zarr")
    assert len(lossless) == len(lossy) > 0
    np.testing.assert_array_equal(lossless.yx, lossy.yx)  # the codec changes pixels, never the plan
    psnr = peak_signal_noise_ratio(lossless[:], lossy[:], data_range=255)  # reference: scikit-image
    assert psnr > 35  # ground truth: the lossless tiles; q90 JPEG stays close
    assert lossy.attrs["compression"] == {"codec": "jpeg", "lossless": False, "quality": 90}
    assert lossy.attrs["config"]["compression"] == "jpeg" and lossy.attrs["config"]["quality"] == 90
    assert lossless.attrs["compression"] == {"codec": "lz4", "lossless": True}
    meta = json.loads((tmp_path / "jpeg" / "s0.zarr" / "tiles" / "zarr.json").read_text())
    assert meta["codecs"][0]["configuration"]["codecs"][0]["name"] == "tilewright.jpeg"


def test_resume_keeps_lossless_codecs_but_not_another_lossy_setting(source, tmp_path):
    out = tmp_path / "out"
    assert tile_out([str(source), str(out), *FAST]) == 0
    before = _mtimes(out)
    assert tile_out([str(source), str(out), "--compression", "webp", *FAST]) == 0  # lossless for lossless: kept
    assert _mtimes(out) == before
    assert tile_out([str(source), str(out), "--compression", "jpeg", *FAST]) == 3  # lossy is another store
    error = pd.read_csv(out / "manifest.csv", keep_default_na=False).error[0]
    assert "compression 'lossless' -> 'jpeg quality 90'" in error and "--overwrite" in error
    assert _mtimes(out) == before  # the finished store is untouched
    assert tile_out([str(source), str(out), "--compression", "jpeg", "--overwrite", *FAST]) == 0
    after = _mtimes(out)
    assert tile_out([str(source), str(out), "--compression", "jpeg", "--quality", "90", *FAST]) == 0
    assert _mtimes(out) == after  # the same lossy setting: complete, skipped
    assert tile_out([str(source), str(out), "--compression", "jpeg", "--quality", "70", *FAST]) == 3
    assert "'jpeg quality 90' -> 'jpeg quality 70'" in pd.read_csv(out / "manifest.csv").error[0]
    assert tile_out([str(source), str(out), "--compression", "lz4", *FAST]) == 3  # nor back to lossless
    assert _mtimes(out) == after


def test_compression_settings_from_toml_and_the_command_line(tmp_path, capsys):
    toml = tmp_path / "c.toml"
    toml.write_text('compression = "jpeg"\nquality = 75\n')
    cfg = tw.TilingConfig.from_toml(toml)
    assert (cfg.compression, cfg.quality) == ("jpeg", 75)
    assert tw.TilingConfig.from_toml(_round_trip(cfg, tmp_path)).quality == 75
    assert tile_out(["x", str(tmp_path / "o"), "--config", str(toml), "--quality", "60", "--print-config"]) == 0
    printed = capsys.readouterr().out
    assert 'compression = "jpeg"' in printed and "quality = 60" in printed
    assert tile_out(["x", str(tmp_path / "o"), "--compression", "jpeg", "--quality", "0", "--quiet"]) == 2


def _round_trip(cfg, tmp_path):
    path = tmp_path / "printed.toml"
    path.write_text(cfg.to_toml())
    return path
