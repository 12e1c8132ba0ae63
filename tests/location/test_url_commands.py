"""``tilewright audit``, ``status``, ``split`` and ``inspect`` on URLs of a real S3-protocol server
(SeaweedFS): each gives what it gives for the same files on disk."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from tilewright.cli.main import main
from tilewright.run.cohort import tile_cohort
from tilewright.run.config import TilingConfig

from helpers import write_slide
from object_store_files import fetch, listing, upload


@pytest.fixture
def tiled(tmp_path, bucket):
    """A local output folder of two slides (two sites), uploaded as it is."""
    slides = [write_slide(tmp_path / "src" / f"{site}-{i}.tif", mpp=mpp, size_um=(600.0, 800.0), seed=60 + i)[0]
              for i, (site, mpp) in enumerate((("north", 0.2428), ("south", 0.2527)))]
    out = tmp_path / "out"
    tile_cohort(slides, out, TilingConfig(mpp=0.9713, tile=64, min_tissue=0.3, max_tiles=40), progress=False)
    upload(out, f"{bucket}/out")
    upload(slides[0], f"{bucket}/src/north-0.tif")
    meta = pd.DataFrame({"slide_id": ["north-0", "south-1", "x-2", "y-3"], "patient": ["p1", "p2", "p3", "p4"],
                         "label": ["a", "b", "a", "b"], "site": ["north", "south", "north", "south"]})
    meta.to_csv(tmp_path / "meta.csv", index=False)
    upload(tmp_path / "meta.csv", f"{bucket}/meta.csv")
    return tmp_path, out, f"{bucket}/out", bucket


def test_audit_of_a_cohort_in_a_bucket_equals_the_local_audit(tiled, capsys):
    tmp_path, out, url, bucket = tiled
    assert main(["audit", str(out), "--report", str(tmp_path / "report"), "--metadata", str(tmp_path / "meta.csv"),
                 "--no-compare"]) == 0
    assert main(["audit", url, "--metadata", f"{bucket}/meta.csv", "--no-compare"]) == 0
    written = listing(f"{url}/audit")
    assert {"report.html", "audit.parquet", "findings.txt"} <= set(written)
    local = pd.read_parquet(tmp_path / "report" / "audit.parquet")
    remote = pd.read_parquet(__import__("io").BytesIO(written["audit.parquet"]))
    pd.testing.assert_frame_equal(remote, local)  # the same metrics from the same stores


def test_status_split_and_inspect_on_urls(tiled, capsys, tmp_path):
    tmp_path, out, url, bucket = tiled
    assert main(["status", url]) == 0
    remote = capsys.readouterr().out
    assert main(["status", str(out)]) == 0
    assert remote == capsys.readouterr().out  # the same progress.json, read from the bucket
    assert main(["split", f"{bucket}/meta.csv", "--patient", "patient", "--label", "label", "--folds", "2",
                 "--seed", "3", "--out", f"{bucket}/splits.csv"]) == 0
    assert main(["split", str(tmp_path / "meta.csv"), "--patient", "patient", "--label", "label", "--folds", "2",
                 "--seed", "3", "--out", str(tmp_path / "splits.csv")]) == 0
    assert fetch(f"{bucket}/splits.csv") == (tmp_path / "splits.csv").read_bytes()
    overlay = tmp_path / "o.png"
    assert main(["inspect", f"{bucket}/src/north-0.tif", "--overlay", str(overlay)]) == 0
    text = capsys.readouterr().out
    assert f"slide       {bucket}/src/north-0.tif" in text and "0.2428 µm/px" in text and overlay.is_file()
    assert main(["status", "s3://no-such-bucket-29/out"]) in (0, 2)  # a missing bucket: no traceback
