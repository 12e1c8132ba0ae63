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


def test_glob_and_shell_special_characters_are_replaced():
    # ground truth: fnmatch (the rules of glob patterns) - an id must never match another id as a pattern
    import fnmatch

    ids = slide_ids([Path("/d/a[1].svs"), Path("/d/a1.svs"), Path("/d/b*?{x}!$;&(2)#.tif")])
    assert ids == ["a_1_", "a1", "b___x______2__"]
    for i in ids:
        assert [j for j in ids if fnmatch.fnmatchcase(j, i)] == [i]


def test_counter_suffixes_skip_ids_already_taken():
    # four files whose names and parents all clash, plus a slide really named "s_b_2"
    ids = slide_ids([Path("/s/b.tif"), Path("/s/b.svs"), Path("/s/b.ndpi"), Path("/x/s_b_2.tif")])
    assert len(set(ids)) == 4  # ground truth: uniqueness is the contract
    assert ids[3] == "s_b_2" and "s_b_2" not in ids[:3]


def test_long_ids_are_shortened_stably_within_the_name_limit():
    from tilewright.store.layout import MAX_ID_BYTES

    long_a = "ü" * 120 + "_a"  # 242 bytes in UTF-8
    long_b = "ü" * 120 + "_b"
    ids = slide_ids([Path(f"/d/{long_a}.svs"), Path(f"/d/{long_b}.svs")])
    assert ids == slide_ids([Path(f"/e/{long_a}.tif"), Path(f"/e/{long_b}.tif")])  # stable
    assert ids[0] != ids[1]
    for i in ids:
        # ground truth: NAME_MAX of Linux file systems is 255 bytes; the longest temporary name adds 26
        assert len(i.encode()) <= MAX_ID_BYTES and len(f"{i}.zarr.partial-old-12345678".encode()) <= 255
        assert i.startswith("ü" * 80)
    assert slide_ids([Path("/d/short.svs")]) == ["short"]  # short ids are untouched
