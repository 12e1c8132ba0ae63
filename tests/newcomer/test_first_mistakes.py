"""The usual first mistakes of a new user each get one clear line (issue 24, items 1, 3, 4, 5, 10)."""

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.main import main as tilewright_main
from tilewright.cli.tile_out import main as tile_out
from tilewright.errors import ConfigError, StoreError


@pytest.fixture(scope="module")
def small_slide(tmp_path_factory):
    """A 40x-like slide at an odd level-0 µm/px (0.2428, real scanners record such values)."""
    path, _ = write_slide(tmp_path_factory.mktemp("slide") / "case 7.svs", mpp=0.2428, size_um=(700.0, 900.0),
                          layout="svs", seed=11)
    return path


# -- item 1: open_cohort opens a folder of stores with or without a manifest -----------------------------

def test_open_cohort_reads_tile_slide_output_without_manifest(small_slide, tmp_path):
    out = tmp_path / "out"
    result = tw.tile_slide(small_slide, out, tw.TilingConfig(mpp=0.5, tile=128, min_tissue=0.3))
    assert not (out / "manifest.csv").exists()  # tile_slide writes a store, not a manifest
    cohort = tw.open_cohort(out)
    store = tw.open_store(result.store)
    # ground truth: the one store tile_slide wrote, read through open_store
    assert cohort.slide_ids == ["case 7"] and len(cohort) == len(store) == result.n_tiles > 0
    row = cohort.manifest.iloc[0]
    assert (row.status, int(row.n_tiles), row.mpp_source) == ("ok", result.n_tiles, pytest.approx(0.2428))
    np.testing.assert_array_equal(cohort.tiles[:2].compute(), store[0:2])
    np.testing.assert_array_equal(cohort.index[["y", "x"]].to_numpy(), store.yx)
    # an unfinished store (no completion attribute) is not listed
    (out / "half.zarr").mkdir()
    (out / "half.zarr" / "zarr.json").write_text('{"zarr_format": 3, "node_type": "group", "attributes": {}}')
    assert tw.open_cohort(out).slide_ids == ["case 7"]


def test_open_cohort_of_a_folder_without_stores_says_what_to_give(tmp_path):
    with pytest.raises(StoreError, match="no manifest.csv.*complete <slide_id>.zarr store"):
        tw.open_cohort(tmp_path)


# -- item 3: tilewright inspect ---------------------------------------------------------------------------

def test_inspect_creates_the_overlay_folder(small_slide, tmp_path, capsys):
    png = tmp_path / "new" / "deeper" / "x.png"
    assert tilewright_main(["inspect", str(small_slide), "--overlay", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (the PNG specification)


@pytest.mark.parametrize("argv, says", [
    (["{missing}"], "no such slide file"),
    (["{slide}", "--overlay", "{slide}/x.png"], "a file is in the way"),
    (["{slide}", "--overlay", "{tmp}"], "is a folder"),
    (["{slide}", "--tile", "0"], "--tile 0 is out of range"),
    (["{slide}", "--min-tissue", "1.5"], "--min-tissue 1.5 is out of range"),
])
def test_inspect_bad_arguments_exit_2_in_one_line(small_slide, tmp_path, capsys, argv, says):
    argv = [a.format(missing=tmp_path / "nope.svs", slide=small_slide, tmp=tmp_path) for a in argv]
    assert tilewright_main(["inspect", *argv]) == 2  # tile-out's code for bad arguments
    err = capsys.readouterr().err
    assert says in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


# -- item 4: a CSV list without a path column --------------------------------------------------------------

def test_metadata_csv_as_source_is_refused_naming_the_columns(tmp_path, capsys):
    meta = tmp_path / "meta.csv"
    pd.DataFrame({"slide_id": ["N01", "N02"], "patient_id": ["P-1", "P-2"]}).to_csv(meta, index=False)
    out = tmp_path / "out"
    assert tile_out([str(meta), str(out)]) == 2
    err = capsys.readouterr().err
    assert "no 'path' column (columns: slide_id, patient_id)" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()  # refused before anything is written


def test_list_with_a_path_column_never_tiles_its_header(small_slide, tmp_path):
    from tilewright.run.sources import find_slides

    listed = tmp_path / "list.csv"
    listed.write_text(f"slide_id,path\nX,{small_slide}\n")
    assert find_slides(listed) == [small_slide]  # constructed: one row, one slide
    plain = tmp_path / "list.txt"
    plain.write_text(f"{small_slide}\n# a comment\nmissing.svs\n")  # one path a line: kept as given
    assert find_slides(plain) == [small_slide, tmp_path / "missing.svs"]


# -- item 5: --reference without --normalize ----------------------------------------------------------------

def test_reference_without_normalizer_is_an_error(tmp_path, capsys):
    ref = tmp_path / "ref.png"
    ref.write_bytes(b"")
    assert tile_out([str(tmp_path), str(tmp_path / "out"), "--reference", str(ref)]) == 2
    err = capsys.readouterr().err
    assert "needs normalizer= (--normalize macenko or reinhard)" in err and not (tmp_path / "out").exists()
    with pytest.raises(ConfigError, match="--normalize reinhard"):  # a fitted dict names its method
        tw.TilingConfig(reference={"method": "reinhard"})
    assert tw.TilingConfig(normalizer="macenko", reference="ref.png").reference == "ref.png"


# -- item 10: unknown options ---------------------------------------------------------------------------------

@pytest.mark.parametrize("typed, meant", [
    ("--tiel", "--tile"), ("--min_tissue", "--min-tissue"), ("--normalise", "--normalize"),
    ("--mask_mpp", "--mask-mpp"), ("--overwite", "--overwrite"), ("--sharpness", "--min-sharpness"),
])
def test_unknown_option_suggests_the_nearest_in_one_line_before_usage(tmp_path, capsys, typed, meant):
    with pytest.raises(SystemExit) as stop:
        tile_out([str(tmp_path), str(tmp_path / "out"), typed, "1"])
    assert stop.value.code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert lines[0].startswith(f"tile-out: error: unknown option {typed} (did you mean {meant}")
    assert lines[1].startswith("usage: tile-out") and len(lines) == 2


def test_subcommand_typo_is_suggested_from_its_own_options(capsys):
    with pytest.raises(SystemExit):
        tilewright_main(["audit", "out", "--metdata", "m.csv"])
    first = capsys.readouterr().err.splitlines()[0]
    assert first == "tilewright audit: error: unknown option --metdata (did you mean --metadata?)"
