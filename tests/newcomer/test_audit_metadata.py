"""``tilewright audit --metadata``: the table is checked and joined before any metric is computed
(issue 24, item 7)."""

import pandas as pd
import pytest

from tilewright.audit.factors import cohort_factors
from tilewright.audit.metadata_match import match_metadata, metadata_findings
from tilewright.cli.main import main
from tilewright.errors import ConfigError


class Computed(Exception):
    """Raised by the stand-in for the audit's computing: reaching it means the checks passed."""


@pytest.fixture
def cohort(tmp_path, monkeypatch):
    """A cohort folder as tile-out leaves it (the manifest is all the checks read): N01, N02 ok,
    S01 ok from an OME-TIFF, S02 skipped (blank glass), S03 failed."""
    out = tmp_path / "tiles"
    out.mkdir()
    pd.DataFrame({
        "slide_id": ["N01", "N02", "S01", "S02", "S03"],
        "source": ["/s/N01.svs", "/s/N02.svs", "/s/S01.ome.tif", "/s/S02.ome.tif", "/s/S03.ome.tif"],
        "status": ["ok", "ok", "ok", "skipped", "failed"],
        "error": ["", "", "", "no tile met the tissue criteria (blank slide)", "/s/S03.ome.tif: damaged"],
        "n_tiles": [10, 12, 9, 0, 0], "mpp_source": [0.2428, 0.2428, 0.4991, 0.4991, 0.4991],
    }).to_csv(out / "manifest.csv", index=False)
    seen = {}

    def audit_cohort(folder, **options):
        seen.update(options)
        raise Computed

    monkeypatch.setattr("tilewright.audit.cohort.audit_cohort", audit_cohort)
    return out, seen


def _meta(tmp_path, ids, **extra):
    path = tmp_path / "meta.csv"
    pd.DataFrame({"slide_id": ids, "site": ["north", "north", "south", "south", "south"][: len(ids)],
                  **extra}).to_csv(path, index=False)
    return path


@pytest.mark.parametrize("table, says", [
    ({"case": ["N01", "N02"], "site": ["a", "b"]}, "metadata has no 'slide_id' column (columns: case, site)"),
    ({"slide_id": ["N01", "N01"], "site": ["a", "b"]}, "metadata repeats slide ids (N01)"),
    ({"slide_id": ["N01", "N01.svs"], "site": ["a", "b"]}, "two rows for slide 'N01' ('N01', 'N01.svs')"),
    ({"slide_id": ["A1", "A2"], "site": ["a", "b"]}, "no metadata slide_id names a slide of this cohort"),
])
def test_bad_metadata_exits_2_before_computing(cohort, tmp_path, capsys, table, says):
    out, seen = cohort
    meta = tmp_path / "bad.csv"
    pd.DataFrame(table).to_csv(meta, index=False)
    assert main(["audit", str(out), "--metadata", str(meta)]) == 2  # Computed was never raised
    err = capsys.readouterr().err
    assert says in err and len(err.strip().splitlines()) == 1 and not seen


def test_unknown_label_exits_2_before_computing(cohort, tmp_path, capsys):
    out, seen = cohort
    assert main(["audit", str(out), "--metadata", str(_meta(tmp_path, ["N01", "N02"])), "--label", "subtype"]) == 2
    assert "--label 'subtype' is not a column" in capsys.readouterr().err and not seen


def test_good_metadata_goes_on_to_the_audit(cohort, tmp_path):
    out, seen = cohort
    meta = _meta(tmp_path, ["N01.svs", "N02", "S01.ome.tif", "S02.ome.tif", "Z09"])
    with pytest.raises(Computed):  # ids with extensions, a skipped slide, an unknown id: not errors
        main(["audit", str(out), "--metadata", str(meta)])
    assert seen["metadata"] == str(meta)


def test_findings_tell_file_names_skipped_slides_and_unknown_ids_apart(cohort, tmp_path):
    out, _ = cohort
    manifest = pd.read_csv(out / "manifest.csv", dtype={"slide_id": str}).set_index("slide_id")
    ok = manifest[manifest.status == "ok"]
    meta = pd.DataFrame({"slide_id": ["N01.svs", "N02", "S01.ome.tif", "S02.ome.tif", "Z09"],
                         "site": ["north", "north", "south", "south", "south"]})
    factors, notes = cohort_factors(ok, meta)  # what the audit joins (only slides with tiles)
    lines = metadata_findings(out, notes)
    # ground truth constructed above: two ok slides written with their file's extension(s), S02
    # skipped by the run (blank glass), Z09 in no manifest row
    assert lines[0].startswith("2 metadata ids are written as the slide file name (for example 'N01.svs')")
    assert lines[1].startswith("1 metadata row is for slides the tiling run stored no tiles for")
    assert "'S02', skipped: no tile met the tissue criteria" in lines[1]
    assert lines[2].startswith("1 metadata id names no slide of this cohort (for example 'Z09')")
    assert len(lines) == 3 and list(factors["site"].astype(str)) == ["north", "north", "south"]


def test_library_join_accepts_ids_with_the_file_extension(tmp_path):
    manifest = pd.DataFrame({"mpp_source": [0.2527, 0.2527, 0.5]}, index=pd.Index(["a", "b", "c"], name="slide_id"))
    meta = pd.DataFrame({"slide_id": ["a.svs", "sub/b.ome.tiff", "c"], "site": ["x", "y", "y"]})
    factors, notes = cohort_factors(manifest, meta)
    assert notes["_renamed"] == {"a.svs": "a", "sub/b.ome.tiff": "b"} and notes["_unmatched"] == []
    assert list(factors["site"].astype(str)) == ["x", "y", "y"]  # constructed: each row joined to its slide


def test_match_metadata_keeps_rows_of_ok_slides(tmp_path):
    manifest = pd.DataFrame({"status": ["ok", "failed"], "error": ["", "x: damaged"]},
                            index=pd.Index(["a", "b"], name="slide_id"))
    match = match_metadata(pd.DataFrame({"slide_id": ["a", "b"], "site": [1, 2]}), manifest)
    assert list(match.table.index) == ["a"] and match.not_audited == {"b": "failed: x: damaged"}
    with pytest.raises(ConfigError):
        match_metadata(tmp_path / "absent.csv", manifest)
