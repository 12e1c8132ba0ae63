"""A kept store's manifest row (store layer) has exactly the fields of a run's row (SlideResult),
so manifests mixing kept and tiled slides have one schema (issue 31 moved it below the run layer)."""

import dataclasses

from tilewright.run.slide import SlideResult
from tilewright.store.manifest_row import kept_row


def _attrs(n_tiles):
    return {"n_tiles": n_tiles, "mpp_source": 0.2527, "objective": 40.0, "source_level": 1,
            "colour_profile": None, "warnings": ["no-glass: white used"], "source": {"sha256": "ab" * 32},
            "mpp_origin": "aperio", "tissue_mm2": 12.5,
            "stain_outcome": {"check": "ok", "delta_e_raw": 4.2, "delta_e": 0.9},
            "plan": {"n_grid": 40, "n_tissue": 0}, "config": {"min_tissue": 0.5},
            "tissue_mask": {"removed_share": 0.0, "ink_share": 0.0}}


def test_kept_row_has_the_run_rows_fields_and_values():
    row = kept_row("/out/s-1 [a].zarr", "s-1 [a]", "/slides/s-1 [a].svs", _attrs(17))
    fields = [f.name for f in dataclasses.fields(SlideResult)]
    assert set(row) == set(fields)
    # ground truth: the row a run builds with SlideResult for the same store
    expected = SlideResult("s-1 [a]", "/slides/s-1 [a].svs", "ok", "", 17, 0.2527, 40.0, 1, None, "/out/s-1 [a].zarr",
                           "", "no-glass: white used", source_sha256="ab" * 32, mpp_origin="aperio", kept=True,
                           stain_check="ok", stain_delta_e_raw=4.2, stain_delta_e=0.9, tissue_mm2=12.5).to_row()
    assert row == expected


def test_kept_row_of_a_store_without_tiles_says_why():
    row = kept_row("/out/b.zarr", "b", "/slides/b.svs", _attrs(0))
    assert row["status"] == "skipped" and row["n_tiles"] == 0 and row["error"]
    assert SlideResult(**row).to_row() == row  # a run's dataclass takes it as it is
