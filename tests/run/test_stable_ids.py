"""Slide ids that never change under a cohort: adding a slide whose name collides renames nothing,
stores nothing twice, and a cohort serves each source file once (end to end through tile-out)."""

from __future__ import annotations

import hashlib
import random
import shutil
from pathlib import Path

import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.store.layout import slide_ids

pytestmark = pytest.mark.timeout(300)

FAST = ["--mpp", "1.0", "--tile", "128", "--min-tissue", "0.3", "--quiet"]


def _slide(path, seed, mpp=0.2428):
    write_slide(path, mpp=mpp, size_um=(512.0, 640.0), seed=seed)
    return path


def _fingerprint(store: Path) -> dict:
    """Every file of a store with its bytes' SHA-256 and modification time (ground truth: the
    file system; a store that is rewritten or renamed changes here)."""
    return {str(p.relative_to(store)): (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns)
            for p in sorted(store.rglob("*")) if p.is_file()}


def _manifest(out):
    return tw.open_cohort(out).manifest.set_index("slide_id")


def test_a_colliding_slide_added_to_a_finished_cohort_changes_nothing_earlier(tmp_path):
    src, out = tmp_path / "slides", tmp_path / "out"
    _slide(src / "north" / "b.tif", 1)
    _slide(src / "c.tif", 2, mpp=0.2527)
    assert tile_out([str(src), str(out), *FAST]) == 0
    before = {sid: _fingerprint(out / f"{sid}.zarr") for sid in ("b", "c")}  # names only: no clash yet
    rows_before = _manifest(out)

    _slide(src / "south" / "b.tif", 3, mpp=0.4991)  # same file name, another folder
    assert tile_out([str(src), str(out), *FAST]) == 0

    # nothing earlier changed: same ids, same store files byte for byte, same manifest rows
    assert {sid: _fingerprint(out / f"{sid}.zarr") for sid in ("b", "c")} == before
    rows = _manifest(out)
    for sid in ("b", "c"):
        for col in ("source", "status", "n_tiles", "mpp_source", "seconds"):
            assert rows.loc[sid, col] == rows_before.loc[sid, col], (sid, col)
    # the newcomer takes its id from its path relative to SOURCE; north/b is not stored again
    assert sorted(p.name for p in out.glob("*.zarr")) == ["b.zarr", "c.zarr", "south_b.zarr"]
    cohort = tw.open_cohort(out)
    sources = [Path(s.attrs["source"]["path"]) for s in cohort.stores.values()]
    assert sorted(sources) == sorted(p.resolve() for p in src.rglob("*.tif"))  # each source once
    assert len(cohort.left_out) == 0

    # a third run with nothing new keeps all three as they are
    after = {sid: _fingerprint(out / f"{sid}.zarr") for sid in ("b", "c", "south_b")}
    assert tile_out([str(src), str(out), *FAST]) == 0
    assert {sid: _fingerprint(out / f"{sid}.zarr") for sid in ("b", "c", "south_b")} == after


def test_a_fresh_run_derives_clashing_ids_from_relative_paths(tmp_path):
    src, out = tmp_path / "slides", tmp_path / "out"
    _slide(src / "north" / "b.tif", 1)
    _slide(src / "south" / "b.tif", 3)
    _slide(src / "b.tif", 2)  # at SOURCE's top: its relative path is its name
    assert tile_out([str(src), str(out), *FAST]) == 0
    # ground truth: DESIGN (name; on a clash, the folders of the path relative to SOURCE prefixed)
    assert sorted(_manifest(out).index) == ["b", "north_b", "south_b"]


def test_list_csv_slide_id_column_gives_ids_and_refuses_renames(tmp_path, capsys):
    src, out = tmp_path / "slides", tmp_path / "out"
    a = _slide(src / "x" / "scan 1.tif", 1)
    b = _slide(src / "y" / "scan 1.tif", 2)
    listing = tmp_path / "cohort.csv"
    listing.write_text(f"path,slide_id\n{a},P-007 A\n{b},\n", encoding="utf-8")
    assert tile_out([str(listing), str(out), *FAST]) == 0
    ids = sorted(_manifest(out).index)
    # ground truth: the list's own id, as written; the other slide's name is then shared with no id
    assert ids == ["P-007 A", "scan 1"]

    # naming a stored slide otherwise would rename its store: refused before anything is written
    listing.write_text(f"path,slide_id\n{a},P-008\n", encoding="utf-8")
    assert tile_out([str(listing), str(out), *FAST]) == 2
    err = capsys.readouterr().err
    assert "'P-007 A'" in err and "'P-008'" in err and "never renamed" in err
    # one id for two slides, or another source's id: refused naming both
    c = _slide(src / "z.tif", 3)
    listing.write_text(f"path,slide_id\n{c},p-007 a\n", encoding="utf-8")
    assert tile_out([str(listing), str(out), *FAST]) == 2
    assert "another source" in capsys.readouterr().err
    d = _slide(src / "w.tif", 4)
    listing.write_text(f"path,slide_id\n{c},Q1\n{src / 'x' / 'scan 1.tif'},P-007 A\n{d},q1\n", encoding="utf-8")
    assert tile_out([str(listing), str(out), *FAST]) == 2
    err = capsys.readouterr().err
    assert "z.tif" in err and "w.tif" in err and "both be stored as" in err
    listing.write_text(f"path,slide_id\n{c},a/b\n", encoding="utf-8")
    assert tile_out([str(listing), str(out), *FAST]) == 2
    assert "cannot name a store folder" in capsys.readouterr().err
    assert sorted(p.name for p in out.glob("*.zarr")) == ["P-007 A.zarr", "scan 1.zarr"]


def test_a_folder_holding_one_source_twice_serves_it_once(tmp_path):
    """A folder written by an earlier version whose ids changed when slides were added: the same
    source under ``b`` and ``north_b``. Readers serve the newer store; a re-run stores it under
    that id and writes no third copy."""
    from tilewright.run.config import TilingConfig

    src, out = tmp_path / "slides", tmp_path / "out"
    north = _slide(src / "north" / "b.tif", 1)
    _slide(src / "south" / "b.tif", 2)
    cfg = TilingConfig(mpp=1.0, tile=128, min_tissue=0.3, qc_overlay=False)
    tw.tile_slide(north, out, cfg, slide_id="b")
    tw.tile_slide(north, out, cfg, slide_id="north_b")  # completed second: the newer one
    cohort = tw.open_cohort(out)
    assert list(cohort.stores) == ["north_b"]
    assert list(cohort.left_out["slide_id"]) == ["b"]
    assert "same source file as 'north_b'" in cohort.left_out["reason"][0]

    assert tile_out([str(src), str(out), *FAST]) == 0
    names = sorted(p.name for p in out.glob("*.zarr"))
    assert names == ["b.zarr", "north_b.zarr", "south_b.zarr"]  # nothing new for north/b
    cohort = tw.open_cohort(out)
    assert sorted(cohort.stores) == ["north_b", "south_b"]


def test_a_moved_source_takes_its_stored_id_when_its_content_is_the_same(tmp_path):
    src, out = tmp_path / "slides", tmp_path / "out"
    _slide(src / "old" / "b.tif", 1)
    assert tile_out([str(src), str(out), *FAST]) == 0
    before = _fingerprint(out / "b.zarr")
    (src / "new").mkdir()
    shutil.move(src / "old" / "b.tif", src / "new" / "b.tif")
    assert tile_out([str(src), str(out), *FAST]) == 0
    # ground truth: the same bytes (resume identity: size and digest) - the store is kept as it is
    assert _fingerprint(out / "b.zarr") == before
    assert sorted(p.name for p in out.glob("*.zarr")) == ["b.zarr"]
    assert _manifest(out).loc["b", "source"] == str((src / "new" / "b.tif").resolve())


ODD = ["b", "B", "Präparat 7", "a[1]", "scan one", "x.y", "N01"]


@pytest.mark.parametrize("seed", range(6))
def test_ids_depend_on_each_slide_s_own_path_only(seed):
    """Seeded families of paths with odd characters: an id is unique, independent of the order the
    slides are listed in, the file name whenever that is not shared (ignoring case), and the same
    when unrelated slides are added (ground truth: the rule as DESIGN states it, checked by sets)."""
    rng = random.Random(seed)
    root = Path("/cohort")
    pool = sorted({root.joinpath(*rng.sample(["north", "south", "2021", "re scan"], rng.randint(0, 2)),
                                 rng.choice(ODD) + rng.choice([".svs", ".tif", ".ome.tif", ".ndpi"]))
                   for _ in range(14)})
    ids = slide_ids(pool, root=root)
    assert len({i.casefold() for i in ids}) == len(ids)
    shuffled = pool[:]
    rng.shuffle(shuffled)
    assert dict(zip(shuffled, slide_ids(shuffled, root=root))) == dict(zip(pool, ids))
    stems = [tw_stem(p).casefold() for p in pool]
    for p, sid, stem in zip(pool, ids, stems):
        if stems.count(stem) == 1:
            assert sid.casefold() == _safe(tw_stem(p)).casefold()
    # adding a slide with a new name changes no id
    more = pool + [root / "east" / "unique-name-zz.svs"]
    assert slide_ids(more, root=root)[:-1] == ids


def tw_stem(p):
    from tilewright.store.layout import slide_stem

    return slide_stem(p)


def _safe(text):
    from tilewright.store.layout import _safe as safe

    return safe(text)


def test_case_only_differences_are_collisions():
    # ground truth: on a case-insensitive file system (macOS, Windows) B.zarr and b.zarr are one folder
    ids = slide_ids([Path("/c/north/B.svs"), Path("/c/south/b.svs")], root="/c")
    assert ids == ["north_B", "south_b"]
    ids = slide_ids([Path("/c/B.svs"), Path("/c/b.svs")], root="/c")
    assert len({i.casefold() for i in ids}) == 2 and all(i.lower().startswith("b_svs_") for i in ids)
    # an id already held in the output folder (reserved) makes a newcomer of that name take its path id
    assert slide_ids([Path("/c/south/b.svs")], root="/c", reserved=["B"]) == ["south_b"]
