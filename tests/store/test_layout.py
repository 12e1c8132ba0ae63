"""Slide ids and store paths (DESIGN.md: ids are file names without extensions, unique per cohort)."""

from pathlib import Path

from tilewright.store.layout import slide_ids, slide_stem


def test_stem_drops_compound_extensions():
    # ground truth: DESIGN.md "b.ome.tif -> b"
    assert slide_stem("x/b.ome.tif") == "b"
    assert slide_stem("x/B.OME.TIFF") == "B"
    assert slide_stem("a.svs") == "a"
    assert slide_stem("name with spaces.ndpi") == "name with spaces"


def test_ids_unique_with_parent_prefix():
    # ground truth: DESIGN.md "when two files share one, the parent folder's name is prefixed (sub_b)"
    ids = slide_ids([Path("/d/a.svs"), Path("/d/sub/b.tif"), Path("/d/other/b.svs")])
    assert ids == ["a", "sub_b", "other_b"]


def test_ids_unique_even_when_parents_collide():
    ids = slide_ids([Path("/x/s/b.tif"), Path("/y/s/b.tif"), Path("/z/b.svs")])
    assert len(set(ids)) == 3  # ground truth: uniqueness is the contract
    assert ids[2] == "z_b"


def test_ids_keep_unicode_and_replace_separators():
    ids = slide_ids([Path("/d/Präparat 7.tif"), Path("/d/a:b.svs")])
    assert ids == ["Präparat 7", "a_b"]
