"""tile-out on hard slides: warnings reach the manifest, the log, the summary and the store; a
reference slide is sampled, not read whole; a reference without tissue is a bad argument."""

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from hard_slides import Area, HardSlide, Piece
from tilewright.cli.tile_out import main as tile_out

MPP = 0.4991  # an odd, real-world 20x level-0 µm/px


def _write(path, slide, mpp=MPP):
    from tilewright.demo.pyramid import write_pyramid

    write_pyramid(path, lambda y, x, h, w: slide.render(mpp, (y, x, h, w)), shape=slide.shape_at(mpp), mpp=mpp,
                  tile=256, compression="jpeg")
    return path


@pytest.fixture(scope="module")
def slides(tmp_path_factory):
    d = tmp_path_factory.mktemp("hard")
    _write(d / "cover.tif", HardSlide("cover", 1500, 2000, cover=True, areas=(Area("faint", 700, 900, 400, 500),),
                                      seed=21))
    _write(d / "plain.tif", HardSlide("plain", 1500, 2000, (Piece(750, 1000, 550, 800),), seed=22))
    return d


def test_warnings_reach_manifest_log_summary_and_store(slides, tmp_path, capsys):
    out = tmp_path / "out"
    code = tile_out([str(slides), str(out), "--tile", "128", "--normalize", "macenko"])
    assert code == 0
    m = pd.read_csv(out / "manifest.csv", keep_default_na=False).set_index("slide_id")
    # ground truth: "cover" is tissue edge to edge (no glass), "plain" one piece on glass
    assert m.loc["cover", "warnings"].startswith("no-glass:") and m.loc["plain", "warnings"] == ""
    assert "cover: no-glass:" in (out / "tile-out.log").read_text()
    assert "1 slide(s) with warnings" in capsys.readouterr().out
    store = tw.open_store(out / "cover.zarr")
    assert any(w.startswith("no-glass:") for w in store.attrs["warnings"])
    assert store.attrs["tissue_mask"]["glass_found"] is False
    assert store.attrs["tissue_fraction"] >= 0.9  # ground truth: tissue everywhere, pale part kept


def test_tissue_knobs_from_the_command_line_and_config(slides, tmp_path):
    out = tmp_path / "knobs"
    toml = tmp_path / "c.toml"
    toml.write_text("tissue_sensitivity = 2.0\nmin_piece_um2 = 5000.0\n")
    code = tile_out([str(slides / "plain.tif"), str(out), "--tile", "128", "--quiet", "--config", str(toml),
                     "--exclude-dark", "--dark-od", "0.6", "--ink-margin-um", "24"])
    assert code == 0
    cfg = tw.open_store(out / "plain.zarr").attrs["tissue_mask"]
    assert (cfg["sensitivity"], cfg["min_component_um2"], cfg["exclude_dark"], cfg["dark_od"],
            cfg["ink_margin_um"]) == (2.0, 5000.0, True, 0.6, 24.0)
    assert tile_out([str(slides / "plain.tif"), str(out), "--tissue-sensitivity", "0", "--quiet"]) == 2


def test_white_or_grey_reference_is_a_bad_argument(slides, tmp_path, capsys):
    import cv2

    for name, value in (("white.png", 255), ("grey.png", 128)):
        ref = tmp_path / name
        cv2.imwrite(str(ref), np.full((256, 256, 3), value, np.uint8))
        code = tile_out([str(slides / "plain.tif"), str(tmp_path / "o"), "--normalize", "macenko",
                         "--reference", str(ref), "--quiet"])
        assert code == 2, name  # DESIGN.md: 2 for bad arguments
        err = capsys.readouterr().err
        assert name in err and "reference" in err and "Traceback" not in err


def test_reference_slide_is_sampled_not_read_whole(slides, monkeypatch):
    import tifffile

    from tilewright.run.reference import make_target

    def whole(*a, **k):  # reading a whole image would go through here
        raise AssertionError("the reference slide was read whole")

    monkeypatch.setattr(tifffile, "imread", whole)
    norm = make_target("macenko", str(slides / "plain.tif"), tw.TilingConfig(tile=128))
    # ground truth: the slide was rendered with the Ruifrok & Johnston H and E vectors
    from hard_slides import E_RJ, H_RJ

    cos = np.abs(np.asarray(norm.stain_matrix) @ np.stack([H_RJ, E_RJ]).T).diagonal()
    assert np.all(np.degrees(np.arccos(np.clip(cos, -1, 1))) < 15)


def test_a_slide_whose_tissue_is_all_under_ink_is_all_ink_not_skipped(tmp_path, capsys):
    from hard_slides import Stroke

    src = tmp_path / "src"
    src.mkdir()
    # ground truth: one piece wholly under a broad black marker stroke; and a blank slide
    _write(src / "inked.tif", HardSlide("inked", 1500, 2000, (Piece(750, 1000, 300, 400),), inks=(
        Stroke(((750, 100), (750, 1900)), 900, "black"),), seed=23))
    _write(src / "blank.tif", HardSlide("blank", 1500, 2000, (), seed=24))
    out = tmp_path / "out"
    assert tile_out([str(src), str(out), "--tile", "128"]) == 0
    m = pd.read_csv(out / "manifest.csv", keep_default_na=False).set_index("slide_id")
    assert m.loc["inked", "status"] == "all-ink" and m.loc["inked", "n_tiles"] == 0
    assert m.loc["inked", "error"].startswith("all tissue is ink:") and "qc/" in m.loc["inked", "error"]
    assert m.loc["inked", "warnings"].startswith("high-ink:")
    assert m.loc["blank", "status"] == "skipped" and "blank slide" in m.loc["blank", "error"]
    printed = capsys.readouterr().out
    assert "1 skipped, 1 ALL INK, 0 failed" in printed and "lost all their tissue" in printed
    assert "1 all ink" in (out / "tile-out.log").read_text()
    assert tw.open_cohort(out).slide_ids == []  # neither store holds tiles
