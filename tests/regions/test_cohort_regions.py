"""A cohort whose annotations are of mixed quality, through tile-out, checked against shapely.

Six slides scanned at 0.2527 µm/px (an odd 40x value, common practice) are tiled at 1 µm/px,
keeping ``Tumor,Necrosis``:

* ``s1-absent``: Tumor and Stroma only (Necrosis absent: covers nothing, warned once);
* ``s2-invalid``: a Tumor polygon whose hole crosses its outer ring (repaired ring by ring);
* ``s3-unclassified``: one feature without a class (only a ``name``) and one cell detection;
* ``s4-yx``: a file written in [y, x] order (fails, naming the file and the fix);
* ``s5-edited``: annotations shrunk between runs (the resumed run refuses the old store; an
  ``--overwrite`` run tiles the new polygon);
* ``0006``: a first-pass tile table made by a callable on a grid offset by 37 px, saved as CSV
  with a zero-padded ``slide_id`` column and lower-case class names.

Every slide gets the tiles a direct shapely computation says (reference: shapely), or a manifest
reason naming its region file and the fix.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import shapely

import tilewright as tw
from helpers import write_slide
from shapely_truth import expected_tiles, tile_boxes
from tilewright.cli.tile_out import main as tile_out

MPP0 = 0.2527  # level-0 µm/px of every slide
MPP, TILE, MIN_REGION = 1.0, 64, 0.5
SIZE_UM = (700.0, 900.0)  # -> about 2770 x 3562 level-0 px

PENTAGON = [[400, 300], [1500, 350], [1800, 1200], [900, 1700], [300, 1100], [400, 300]]
STROMA = [[2000, 200], [3300, 200], [3300, 2500], [2000, 2500], [2000, 200]]
SHELL = [[500, 500], [2300, 500], [2300, 2200], [500, 2200], [500, 500]]
CROSSING_HOLE = [[1800, 900], [2700, 900], [2700, 1500], [1800, 1500], [1800, 900]]  # crosses x = 2300
TRUE_XY = [[2900, 300], [3400, 300], [3400, 900], [2900, 900], [2900, 300]]  # fits the slide as [x, y]
EDITED_BEFORE = [[600, 600], [2600, 600], [2600, 2000], [600, 2000], [600, 600]]
EDITED_AFTER = [[600, 600], [1400, 600], [1400, 1300], [600, 1300], [600, 600]]


def _feature(ring_list, cls=None, **props):
    if cls is not None:
        props["classification"] = {"name": cls}
    return {"type": "Feature", "properties": props, "geometry": {"type": "Polygon", "coordinates": ring_list}}


def _collection(*features):
    return {"type": "FeatureCollection", "features": list(features)}


def _first_pass_table(path, slide_id):
    """Run a first-pass callable on a 32-px grid at 2 µm/px offset by 37 px; the table it makes."""
    offset, tile, mpp = 37, 32, 2.0

    def dark(tiles):  # the "classifier": tumour where the tile is dark on average
        return np.where(tiles.mean(axis=(1, 2, 3)) < 200, "tumor", "stroma")

    with tw.open(path) as slide:
        view = slide.at_mpp(mpp)
        h, w = view.shape
        corners = [(y, x) for y in range(offset, h - tile + 1, tile) for x in range(offset, w - tile + 1, tile)]
        tiles = np.stack([view.read(y, x, tile, tile) for y, x in corners])
    labels = dark(tiles)
    assert 3 <= (labels == "tumor").sum() < len(labels) - 3  # both classes present: a real test
    return pd.DataFrame({"slide_id": slide_id, "y": [c[0] for c in corners], "x": [c[1] for c in corners],
                         "tile": tile, "mpp": mpp, "class": labels})


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    root = tmp_path_factory.mktemp("mixed")
    slides, regions = root / "slides", root / "regions"
    regions.mkdir()
    ids = ["s1-absent", "s2-invalid", "s3-unclassified", "s4-yx", "s5-edited", "0006"]
    paths = {sid: write_slide(slides / f"{sid}.tif", mpp=MPP0, size_um=SIZE_UM, seed=40, n_islands=2)[0]
             for sid in ids}  # one layout (rendered once): the regions differ
    files = {
        "s1-absent": _collection(_feature([PENTAGON], "Tumor"), _feature([STROMA], "Stroma")),
        "s2-invalid": _collection(_feature([SHELL, CROSSING_HOLE], "Tumor"), _feature([STROMA[:]], "Stroma")),
        "s3-unclassified": _collection(
            _feature([PENTAGON], "tumor "),  # spelled differently from --keep: same class
            _feature([STROMA], name="Annotation 7"),  # no class: skipped, its name is not a class
            _feature([[[2100, 300], [2400, 300], [2400, 600], [2100, 600], [2100, 300]]], "Tumor",
                     objectType="detection")),  # a detected cell: not an annotation
        "s4-yx": _collection(_feature([[[y, x] for x, y in TRUE_XY]], "Tumor")),
        "s5-edited": _collection(_feature([EDITED_BEFORE], "Tumor")),
    }
    for sid, data in files.items():
        (regions / f"{sid}.geojson").write_text(json.dumps(data))
    _first_pass_table(paths["0006"], "0006").to_csv(regions / "0006.csv", index=False)
    views = {}  # the x4 level (1.0108 µm/px) lies within tile-out's 5 % tolerance of 1 µm/px: used as is
    for sid, path in paths.items():
        with tw.open(path) as slide:
            assert slide.mpp == pytest.approx(MPP0, rel=1e-6)
            view = slide.at_mpp(MPP, tolerance=tw.TilingConfig().tolerance)  # as tile-out reads it
            views[sid] = (tuple(view.shape), float(view.scale))  # scale: level-0 px per target px
    return root, slides, regions, views


def _run(root, slides, regions, out, *extra):
    return tile_out([str(slides), str(out), "--mpp", str(MPP), "--tile", str(TILE), "--min-tissue", "0",
                     "--regions", str(regions), "--keep", "Tumor,Necrosis", "--min-region", str(MIN_REGION),
                     "--quiet", *extra])


def _truth(sid, regions):
    """The kept geometry of each slide, computed here from the annotations as drawn."""
    if sid == "s1-absent":
        return shapely.Polygon(PENTAGON)
    if sid == "s2-invalid":  # the documented repair: shell minus hole, each ring on its own
        return shapely.Polygon(SHELL).difference(shapely.Polygon(CROSSING_HOLE))
    if sid == "s3-unclassified":
        return shapely.Polygon(PENTAGON)
    if sid == "s5-edited":
        return shapely.Polygon(json.loads((regions / "s5-edited.geojson").read_text())
                               ["features"][0]["geometry"]["coordinates"][0])
    table = pd.read_csv(regions / "0006.csv", dtype={"slide_id": str})
    tumour = table[table["class"] == "tumor"]
    return tile_boxes(tumour[["y", "x"]].to_numpy(), 32, 2.0, MPP0)


def _check_tiles(out, sid, views, regions):
    store = tw.open_store(out / f"{sid}.zarr")
    got = {tuple(map(int, c)) for c in store.yx}
    shape, scale = views[sid]
    kept, unsure = expected_tiles(shape, TILE, scale, _truth(sid, regions), MIN_REGION)
    assert got - unsure == kept, sid  # reference: shapely intersection areas
    assert len(kept) >= 5, sid  # the check is not vacuous
    return store


def test_mixed_quality_cohort(cohort, tmp_path):
    root, slides, regions, shapes = cohort
    out = tmp_path / "out"
    assert _run(root, slides, regions, out) == 3  # one slide fails (s4-yx), the others are tiled
    m = pd.read_csv(out / "manifest.csv", dtype={"slide_id": str}, keep_default_na=False).set_index("slide_id")
    assert set(m.index) == set(shapes)
    for sid in ("s1-absent", "s2-invalid", "s3-unclassified", "s5-edited", "0006"):
        assert m.loc[sid, "status"] == "ok", (sid, m.loc[sid, "error"])
        _check_tiles(out, sid, shapes, regions)
    reason = m.loc["s4-yx", "error"]
    assert m.loc["s4-yx", "status"] == "failed"
    assert "s4-yx.geojson" in reason and "[y, x]" in reason and "[x, y]" in reason
    store = tw.open_store(out / "s1-absent.zarr")
    assert store.attrs["regions"]["absent"] == ["Necrosis"] and store.attrs["regions"]["digest"].startswith("sha256:")

    log = (out / "tile-out.log").read_text()
    assert log.count("s1-absent: kept class(es) 'Necrosis' absent") == 1  # once a slide
    assert "s2-invalid: regions" in log and "area as drawn" in log
    assert "s3-unclassified: regions" in log and "'name', 'Annotation 7', which is not taken as a class" in log
    assert "object type 'detection'" in log

    # the annotations of s5 are edited: the resumed run must not report the old store "ok"
    (regions / "s5-edited.geojson").write_text(json.dumps(_collection(_feature([EDITED_AFTER], "Tumor"))))
    try:
        assert _run(root, slides, regions, out) == 3
        m = pd.read_csv(out / "manifest.csv", dtype={"slide_id": str}, keep_default_na=False).set_index("slide_id")
        assert m.loc["s5-edited", "status"] == "failed"
        assert "s5-edited.geojson changed" in m.loc["s5-edited", "error"]
        assert "--overwrite" in m.loc["s5-edited", "error"]
        assert (m.loc[["s1-absent", "s2-invalid", "s3-unclassified", "0006"], "status"] == "ok").all()
        assert _run(root, slides, regions, out, "--overwrite") == 3
        m = pd.read_csv(out / "manifest.csv", dtype={"slide_id": str}, keep_default_na=False).set_index("slide_id")
        assert m.loc["s5-edited", "status"] == "ok"
        _check_tiles(out, "s5-edited", shapes, regions)  # the edited polygon's tiles
    finally:
        (regions / "s5-edited.geojson").write_text(json.dumps(_collection(_feature([EDITED_BEFORE], "Tumor"))))
