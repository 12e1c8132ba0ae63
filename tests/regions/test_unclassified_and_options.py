"""Unclassified features, feature kinds (the object-type property), and the region options of tile-out and TilingConfig."""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely

import tilewright as tw
from helpers import write_slide
from shapely_truth import expected_tiles
from tilewright.cli.tile_out import config_from_args, build_parser, main as tile_out
from tilewright.errors import ConfigError, RegionError
from tilewright.regions.geojson import RegionRepairWarning
from tilewright.regions.regionmap import RegionMap
from tilewright.run.config import TilingConfig

MPP0 = 0.4991  # a 20x level-0 µm/px (odd real-world value, common practice)
A = [[100, 100], [600, 100], [600, 500], [100, 500], [100, 100]]
B = [[700, 150], [1150, 150], [1150, 700], [700, 700], [700, 150]]
C = [[200, 800], [500, 800], [500, 1100], [200, 1100], [200, 800]]


def _feature(ring, **props):
    return {"type": "Feature", "properties": props, "geometry": {"type": "Polygon", "coordinates": [ring]}}


def _covered(regions, keep):
    return regions.fraction(keep, 0, 0, 2000, 2000, MPP0) * 2000 * 2000


def test_one_unclassified_feature_is_skipped_not_fatal():
    data = {"type": "FeatureCollection", "features": [
        _feature(A, classification={"name": "Tumor"}), _feature(B, name="Annotation 3"), _feature(C, label="Stroma")]}
    with pytest.warns(RegionRepairWarning, match="skipped 1 feature\\(s\\) without a class property") as caught:
        regions = RegionMap.from_geojson(data, mpp=MPP0)
    assert regions.classes == ("Tumor", "Stroma")  # "Annotation 3" is a name, not a class
    assert "'Annotation 3', which is not taken as a class" in str(caught[0].message)
    # reference: shapely areas of the classified polygons
    assert _covered(regions, "Tumor") == pytest.approx(shapely.Polygon(A).area, rel=1e-6)
    assert _covered(regions, "Stroma") == pytest.approx(shapely.Polygon(C).area, rel=1e-6)
    # asked for: names as classes, or a class for the unclassified
    assert RegionMap.from_geojson(data, mpp=MPP0, class_property="name").classes == ("Annotation 3",)
    merged = RegionMap.from_geojson(data, mpp=MPP0, default_class="Tumor")
    assert _covered(merged, "Tumor") == pytest.approx(shapely.Polygon(A).area + shapely.Polygon(B).area, rel=1e-6)


def test_detections_are_ignored_unless_asked_for():
    data = {"type": "FeatureCollection", "features": [
        _feature(A, classification="Tumor", objectType="annotation"),
        _feature(B, classification="Tumor", objectType="detection"),
        _feature(C, classification="Tumor", object_type="cell")]}
    with pytest.warns(RegionRepairWarning, match="ignored 1 feature\\(s\\) of object type 'detection'"):
        regions = RegionMap.from_geojson(data, mpp=MPP0)
    assert _covered(regions, "Tumor") == pytest.approx(shapely.Polygon(A).area, rel=1e-6)  # reference: shapely
    every = RegionMap.from_geojson(data, mpp=MPP0, feature_kinds="all")
    both = RegionMap.from_geojson(data, mpp=MPP0, feature_kinds=["Annotation", "detection"])
    union = shapely.union_all([shapely.Polygon(r) for r in (A, B, C)])
    assert _covered(every, "Tumor") == pytest.approx(union.area, rel=1e-6)
    assert _covered(both, "Tumor") == pytest.approx(shapely.Polygon(A).area + shapely.Polygon(B).area, rel=1e-6)


def test_only_unclassified_features_is_a_clear_error(tmp_path):
    path = tmp_path / "s.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [_feature(A, name="x")]}))
    with pytest.raises(RegionError, match="no feature with area has a class") as info:
        RegionMap.from_geojson(path)
    assert str(path) in str(info.value) and "--default-class" in str(info.value)


def test_region_options_on_the_command_line_and_in_toml(tmp_path):
    args = build_parser().parse_args(["s", "o", "--regions", "r", "--keep", "Tumor, Necrosis", "--class-property",
                                      "tissue_type", "--default-class", "Tumor", "--feature-kinds", "annotation,cell"])
    config = config_from_args(args)
    assert (config.keep, config.class_property, config.default_class, config.feature_kinds) == \
        (["Tumor", "Necrosis"], "tissue_type", "Tumor", ["annotation", "cell"])
    toml = tmp_path / "c.toml"
    toml.write_text(config.to_toml())
    assert TilingConfig.from_toml(toml) == config  # the TOML round trip keeps them


def test_old_object_types_spelling_is_read_with_a_warning(tmp_path, capsys):
    """The option, setting and keyword were renamed (issue 31); each old spelling still reads, warns,
    and gives what the new one gives (ground truth: the new spelling's result)."""
    data = {"type": "FeatureCollection", "features": [
        _feature(A, classification="Tumor", objectType="annotation"),
        _feature(B, classification="Tumor", objectType="detection")]}
    new = RegionMap.from_geojson(data, mpp=MPP0, feature_kinds="all")
    with pytest.warns(DeprecationWarning, match=r"object_types=\) is renamed feature_kinds="):
        old = RegionMap.from_geojson(data, mpp=MPP0, object_types="all")
    assert _covered(old, "Tumor") == pytest.approx(_covered(new, "Tumor"), rel=1e-12)
    with pytest.warns(DeprecationWarning), pytest.raises(RegionError, match="feature_kinds= alone"):
        RegionMap.from_geojson(data, mpp=MPP0, object_types="all", feature_kinds="all")
    # the command-line option
    base = ["s", "o", "--regions", "r", "--keep", "Tumor"]
    config = config_from_args(build_parser().parse_args(base + ["--object-types", "annotation,detection"]))
    assert config.feature_kinds == ["annotation", "detection"]
    assert "--object-types is renamed --feature-kinds" in capsys.readouterr().err
    with pytest.raises(ConfigError, match="give --feature-kinds alone"):
        config_from_args(build_parser().parse_args(base + ["--object-types", "all", "--feature-kinds", "all"]))
    # the TOML key and the keyword of TilingConfig
    toml = tmp_path / "old.toml"
    toml.write_text('regions = "r"\nkeep = ["Tumor"]\nobject_types = ["all"]\n')
    with pytest.warns(FutureWarning, match="object_types is renamed feature_kinds"):
        from_toml = TilingConfig.from_toml(toml)
    with pytest.warns(FutureWarning, match="object_types is renamed feature_kinds"):
        from_keyword = TilingConfig(regions="r", keep=["Tumor"], object_types=["all"])
    assert from_toml == from_keyword == TilingConfig(regions="r", keep=["Tumor"], feature_kinds=["all"])
    assert "object_types" not in from_toml.to_dict() and "object_types" not in from_toml.to_toml()


def test_a_store_recording_the_old_setting_name_still_resumes():
    """A store made before the rename records ``object_types``; the resume identity reads it as
    ``feature_kinds``, so an unchanged run keeps the store (ground truth: identical settings)."""
    from tilewright.run.identity import _settings, identity_changes

    now = TilingConfig(regions="r", keep=["Tumor"], feature_kinds=["all"]).to_dict()
    before = {("object_types" if k == "feature_kinds" else k): v for k, v in now.items()}
    assert identity_changes(_settings(before), _settings(now)) == []
    changed = dict(before, object_types=["annotation"])
    assert identity_changes(_settings(changed), _settings(now)) == ["feature_kinds ['annotation'] -> ['all']"]


@pytest.mark.parametrize("argv,match", [
    (["--regions", "r.geojson"], "regions= needs keep="),
    (["--min-region", "0.7"], "--min-region needs --regions and --keep"),
    (["--default-class", "Tumor"], "default_class= reads region files"),
    (["--class-property", "kind"], "class_property= reads region files"),
])
def test_region_options_that_would_be_ignored_are_errors(tmp_path, capsys, argv, match):
    assert tile_out([str(tmp_path / "nothing"), str(tmp_path / "out"), *argv]) == 2
    assert match in capsys.readouterr().err
    with pytest.raises(ConfigError):
        config_from_args(build_parser().parse_args(["s", "o", *argv]))


def test_tile_out_reads_a_named_class_property_and_default_class(tmp_path):
    path, _ = write_slide(tmp_path / "slides" / "k1.tif", mpp=MPP0, size_um=(600.0, 640.0), seed=9, n_islands=1)
    regions = tmp_path / "regions"
    regions.mkdir()
    (regions / "k1.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": [
        _feature(A, tissue_type="Tumor"), _feature(B, note="unlabelled")]}))
    out = tmp_path / "out"
    assert tile_out([str(path), str(out), "--mpp", "1.0", "--tile", "32", "--min-tissue", "0", "--regions",
                     str(regions), "--keep", "Tumor", "--class-property", "tissue_type", "--default-class", "Tumor",
                     "--quiet"]) == 0
    store = tw.open_store(out / "k1.zarr")
    with tw.open(path) as slide:
        view = slide.at_mpp(1.0, tolerance=tw.TilingConfig().tolerance)  # as tile-out reads it
        shape, scale = view.shape, view.scale
    kept, unsure = expected_tiles(shape, 32, scale, shapely.union_all([shapely.Polygon(A), shapely.Polygon(B)]), 0.5)
    assert {tuple(map(int, c)) for c in store.yx} - unsure == kept and len(kept) > 10  # reference: shapely
    assert store.attrs["config"]["class_property"] == "tissue_type"
    np.testing.assert_array_less(0.5 - 1e-6, store.region)
