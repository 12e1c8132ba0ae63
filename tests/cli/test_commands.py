"""The tilewright umbrella command: inspect and the demo."""

import pandas as pd
import pytest

import tilewright as tw
from helpers import write_slide
from tilewright.cli.main import main


def test_inspect_reports_levels_and_writes_overlay(tmp_path, capsys):
    path, lay = write_slide(tmp_path / "insp.svs", mpp=0.25, size_um=(800.0, 1000.0), layout="svs",
                            objective=40.0, seed=6)
    png = tmp_path / "o.png"
    assert main(["inspect", str(path), "--overlay", str(png)]) == 0
    out = capsys.readouterr().out
    assert "0.2500 µm/px" in out and "40" in out  # ground truth: written with mpp 0.25, AppMag 40
    assert "no ICC profile" in out  # ground truth: written without one
    with tw.open(path) as s:
        assert f"{s.dimensions[1]} x {s.dimensions[0]}" in out  # reference: the reader's own levels
    assert png.stat().st_size > 1000


def test_inspect_bad_file_is_a_clear_error(tmp_path, capsys):
    bad = tmp_path / "bad.tif"
    bad.write_text("not a slide")
    assert main(["inspect", str(bad)]) == 1
    assert "bad.tif" in capsys.readouterr().err


@pytest.mark.timeout(600)
def test_demo_builds_tiles_and_audits(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", str(out), "--per-site", "2"]) == 0
    meta = pd.read_csv(out / "metadata.csv")
    assert set(meta.site) == {"site-north", "site-south"}  # the invented scenario
    m = pd.read_csv(out / "tiles" / "manifest.csv", keep_default_na=False)
    assert len(m) == len(meta) == 4
    assert (m.status == "skipped").sum() == 1  # the blank slide: ground truth of the scenario
    ok = m[m.status == "ok"]
    assert len(ok) == 3 and (ok.n_tiles > 0).all()
    for sid in ok.slide_id:
        assert tw.open_store(out / "tiles" / f"{sid}.zarr").attrs["normalizer"]["method"] == "macenko"
        assert (out / "tiles" / "qc" / f"{sid}.png").exists()
    assert (out / "audit" / "report.html").exists()
    printed = capsys.readouterr().out
    assert "Research use only" in printed and str(out / "tiles") in printed
    # scanner-B (site-south) embeds its ICC profile, applied by default; scanner-A embeds none
    from tilewright.demo.icc import SCANNER_B

    profile = dict(zip(m.slide_id, m.colour_profile))
    site = dict(zip(meta.slide_id, meta.site))
    assert {profile[s] for s in profile if site[s] == "site-south"} == {SCANNER_B["description"]}
    assert {profile[s] for s in profile if site[s] == "site-north"} == {"none"}
    assert "colour management alone closes" in printed
