"""Settings that cannot cut a tile are refused before anything is written, and a skipped slide
never blocks a later run with other settings (issue 24, item 2)."""

import pandas as pd
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.errors import ConfigError
from tilewright.run.feasible import check_tiles_fit

pytestmark = pytest.mark.timeout(600)


@pytest.fixture(scope="module")
def slides(tmp_path_factory):
    """A 40x-like slide (0.2428 µm/px, 900 x 700 µm) and a 20x-like one (0.4991 µm/px, 600 x 500 µm)."""
    folder = tmp_path_factory.mktemp("slides")
    a, _ = write_slide(folder / "a.svs", mpp=0.2428, size_um=(700.0, 900.0), layout="svs", seed=3)
    b, _ = write_slide(folder / "b.tif", mpp=0.4991, size_um=(500.0, 600.0), seed=4)
    return folder, [a, b]


def test_largest_tile_that_fits_is_the_shorter_side_of_the_largest_slide(slides):
    _, paths = slides
    config = tw.TilingConfig(mpp=0.5)
    with tw.open(paths[0]) as s:  # reference: the reader's own view of the slide at 0.5 µm/px
        side = min(s.at_mpp(0.5).shape)
    # ground truth: 700 µm at 0.5 µm/px is 1400 px; a pyramid level within the view's relative
    # tolerance (config.tolerance) of the target is used as is
    assert abs(side - 700 / 0.5) <= config.tolerance * 1400 + 3
    check_tiles_fit(paths, config.replace(tile=side))  # fits one slide exactly: accepted
    with pytest.raises(ConfigError, match=f"larger than every slide .*a.svs.*choose --tile {side} or less"):
        check_tiles_fit(paths, config.replace(tile=side + 1))


def test_tile_larger_than_every_slide_exits_2_and_writes_nothing(slides, tmp_path, capsys):
    folder, _ = slides
    out = tmp_path / "out"
    assert tile_out([str(folder), str(out), "--tile", "10000"]) == 2
    err = capsys.readouterr().err
    assert "(5 mm a side) is larger than every slide" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_target_coarser_than_the_tissue_mask_exits_2(slides, tmp_path, capsys):
    folder, _ = slides
    assert tile_out([str(folder), str(tmp_path / "out"), "--mpp", "100"]) == 2
    assert "coarser than the tissue mask" in capsys.readouterr().err and not (tmp_path / "out").exists()
    with pytest.raises(ConfigError, match="--mask-mpp 12 or more"):
        tw.TilingConfig(mpp=12.0)
    assert tw.TilingConfig(mpp=12.0, mask_mpp=16.0).mpp == 12.0  # the way out the message gives


def test_a_skipped_slide_does_not_block_a_run_with_other_settings(tmp_path):
    blank, _ = write_slide(tmp_path / "slides" / "glass.tif", mpp=0.2527, size_um=(500.0, 600.0), n_islands=0,
                           seed=5)
    out = tmp_path / "out"
    fast = ["--mpp", "1.0", "--quiet"]
    assert tile_out([str(blank.parent), str(out), *fast, "--tile", "128"]) == 0
    first = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    assert list(first.status) == ["skipped"]  # ground truth: blank glass, written with no tissue
    # other settings: the empty store is re-made (was: "complete store made with other settings" until --overwrite)
    assert tile_out([str(blank.parent), str(out), *fast, "--tile", "64"]) == 0
    second = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    assert list(second.status) == ["skipped"] and "other settings" not in second.error[0]
    assert tw.open_store(out / "glass.zarr").attrs["tile"] == 64
